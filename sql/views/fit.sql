-- Straight-line least squares fit of y on x for every group (with an intercept, or through the
-- origin): slope and intercept with their standard errors, t test of the slope, confidence
-- intervals, r2 and a status word per group.

-- A pair (x, y) counts when both values are present and finite (NULL, NaN and infinity are
-- skipped); a group whose pairs are all skipped still gets a row, with n = 0. A NULL group key
-- is a group like any other. Group columns must not be named like a column of this view or a
-- working column (gid, b_ls, rss_all, rss_ls, ss_line, stage, t_crit) or a column of the
-- moments view.
--
-- n_outside (last column) counts the rows of the group whose x and y are present and finite
-- but outside the domain of the fit's form of x or y (x = "ln(col)" ...): left out like a
-- missing value. With a form, the line, r2, the slope and the intervals are on the form's scale.
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
        rss AS rss_all,
        rss_noise
    FROM __moments_view__
),
line AS (
    SELECT
        gid,
        n,
        x_min,
        x_max,
        y_min,
        y_max,
        x_mean,
        y_mean,
        sxx,
        sxy,
        rss_noise,
        __line__.b_ls AS b_ls,
        CASE WHEN __line__.has_df THEN rss_all END AS rss_ls
    FROM sums
),
spread AS (
    SELECT
        *,
        -- explained and total sum of squares, syy = ss_line + rss: no cancellation
        __line__.ss_line AS ss_line,
        __line__.syy AS syy
    FROM line
),
quantiles AS MATERIALIZED (
    -- one t quantile per group size, not per group: the macro is costly to plan and to run
    SELECT n, tl_t_crit((1 - __level__) / 2, __line__.df) AS t_crit
    FROM (SELECT DISTINCT n FROM sums WHERE __line__.has_df) AS sizes
),
classified AS (
    SELECT
        *,
        __line__.stage AS stage
    FROM spread
),
estimates AS (
    SELECT
        gid,
        n,
        stage,
        x_mean,
        sxx,
        __line__.fit_slope AS slope,
        __line__.fit_intercept AS intercept,
        CASE
            WHEN stage = 'ok' THEN rss_ls
            WHEN stage IN (__line__.no_spread, 'perfect_fit') THEN 0.0
        END AS rss,
        CASE
            WHEN stage = 'ok' THEN ss_line / syy
            WHEN stage = 'perfect_fit' THEN 1.0
            WHEN stage = 'too_few_points' AND b_ls IS NOT NULL AND __line__.has_spread THEN 1.0
        END AS r2,
        CASE
            WHEN stage = 'ok' THEN __line__.r2_adj_ok
            WHEN stage = 'perfect_fit' THEN 1.0
        END AS r2_adj,
        t_crit
    FROM classified
    LEFT JOIN quantiles USING (n)
),
errors AS (
    SELECT
        *,
        sqrt(rss / __line__.df) AS resid_sd,
        sqrt(rss / __line__.df / sxx) AS slope_se,
        __line__.intercept_se AS intercept_se
    FROM estimates
),
intervals AS (
    SELECT
        *,
        CASE WHEN stage = 'ok' THEN slope / slope_se END AS slope_t,
        slope - t_crit * slope_se AS slope_lo,
        slope + t_crit * slope_se AS slope_hi,
        intercept - t_crit * intercept_se AS intercept_lo,
        intercept + t_crit * intercept_se AS intercept_hi
    FROM errors
),
verdict AS (
    -- greatest() skips NULLs and returns NaN or inf if any argument is one
    SELECT
        gid,
        CASE
            WHEN coalesce(isfinite(greatest(
                abs(slope), abs(intercept), abs(r2), abs(r2_adj), resid_sd, slope_se,
                intercept_se, abs(slope_t), abs(slope_lo), abs(slope_hi), abs(intercept_lo),
                abs(intercept_hi)
            )), true) THEN stage
            ELSE 'out_of_range'
        END AS status
    FROM intervals
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
    CASE WHEN f.slope_t IS NOT NULL THEN tl_t_two_sided(f.slope_t, __line__.df_of_g) END AS slope_p,
    f.slope_lo,
    f.slope_hi,
    f.intercept_lo,
    f.intercept_hi,
    v.status,
    g.n_outside
FROM sums AS g
JOIN verdict AS v ON v.gid = g.gid
-- a row out of range keeps its status and count but no statistics
LEFT JOIN intervals AS f ON f.gid = g.gid AND v.status <> 'out_of_range'
