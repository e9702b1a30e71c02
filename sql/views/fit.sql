-- Straight-line least squares fit of y on x for every group (with an intercept, or through the
-- origin): slope and intercept with their standard errors, t test of the slope, confidence
-- intervals, r2 and a status word per group.

-- A pair (x, y) counts when both values are present and finite (NULL, NaN and infinity are
-- skipped); a group whose pairs are all skipped still gets a row, with n = 0. A NULL group key
-- is a group like any other. Group columns must not be named like a column of this view or of
-- the moments view (the spec refuses such names).
--
-- n_outside (last column) counts the rows of the group whose x and y are present and finite
-- but outside the domain of the fit's form of x or y (x = "ln(col)" ...): left out like a
-- missing value. With a form, the line, r2, the slope and the intercept are on the form's scale.
--
-- status, first matching rule wins:
--   too_few_points  n < 3. With n = 2 and two different x the line through the two points is
--                   given (slope, intercept, and r2 = 1 unless y is constant); everything that
--                   needs residual degrees of freedom (resid_sd, standard errors, slope_t,
--                   slope_p, intervals, r2_adj) is NULL.
--   constant_x      every x is the same: no slope can be fitted; all statistics are NULL.
--   out_of_range    a sum of squares or a statistic overflows or underflows float64 (spreads
--                   beyond about 1e150 or below about 1e-150); all statistics are NULL.
--   constant_y      every y is the same: slope 0, intercept that y, resid_sd and standard
--                   errors 0, intervals of zero width; r2, r2_adj, slope_t and slope_p are NULL
--                   (there is no spread of y to explain).
--   perfect_fit     the points lie on a line: the residual sum of squares is below the rounding
--                   error of its own float64 computation. resid_sd and standard errors are 0,
--                   r2 = r2_adj = 1, intervals have zero width, slope_t and slope_p are NULL.
--   ok              every statistic is defined.
--
-- The statistics come from the fragment __line_stats__ (sql/fragments/line_stats.sql), the same
-- that the windows view applies per window.
--
-- Rounded data. When the spec gives y a resolution h ([source] resolution, the step its values
-- are recorded to), the residual sd is never taken below h / sqrt(12), the standard deviation of
-- the rounding error (Sheppard's correction, common practice): rss is at least df h^2 / 12, and
-- a group that would be a perfect_fit is 'ok', with intervals of non-zero width. r2 and the
-- line itself are the data's. The windows view's per-window fits take the same floor.
--
-- Numerics. The sums come from the moments view of the same fit (moments.sql: count, means,
-- ranges, the centred sums sxx and sxy and the residual sum of squares rss of the least-squares
-- line, each kept accurate however strong or weak the fit, and a bound rss_noise on the rounding
-- error of rss). slope = sxy / sxx and intercept = y_mean - slope x_mean. The centred total is
-- taken as slope sxy + rss (explained plus residual: no cancellation), so r2 = 1 - rss / syy and
-- r2_adj = 1 - rss / syy (n - 1) / (n - 2) keep their digits for weak and strong fits alike. The
-- t quantile and tail probability come from the tl_t_crit and tl_t_two_sided macros
-- (sql/macros/t_dist.sql), with n - 2 degrees of freedom.
--
-- Through the origin (the slot __line__ holds sql/parts/line_origin.sql instead of
-- line_intercept.sql): the same columns, intercept, intercept_se, intercept_lo and intercept_hi
-- always NULL; n - 1 residual degrees of freedom; sums about the origin (sxx = sum(x^2), ...);
-- r2 uncentred, 1 - rss / sum(y^2), as NIST defines it for its no-intercept datasets (StRD
-- NoInt1, NoInt2), and r2_adj = 1 - (1 - r2) n / (n - 1); statuses too_few_points (n < 2),
-- x_all_zero, out_of_range, y_all_zero (slope 0) and perfect_fit in place of the ones above.
CREATE OR REPLACE VIEW __view__ AS
WITH sums AS MATERIALIZED (
    SELECT
        __group__,
        row_number() OVER () AS gid,
        n,
        n_outside,
        x_min,
        x_max,
        y_min,
        y_max,
        x_mean,
        y_mean,
        sxx,
        sxy,
        rss,
        rss_noise
    FROM __moments_view__
),
stats AS MATERIALIZED (
    SELECT * FROM __line_stats__ AS sums
)
SELECT
    g.__group__,
    g.n,
    g.x_min,
    g.x_max,
    f.slope,
    f.intercept,
    f.r2,
    f.r2_adj,
    f.resid_sd,
    f.slope_se,
    f.intercept_se,
    f.slope_t,
    f.slope_p,
    f.slope_lo,
    f.slope_hi,
    f.intercept_lo,
    f.intercept_hi,
    f.status,
    g.n_outside
FROM sums AS g
JOIN stats AS f ON f.gid = g.gid
