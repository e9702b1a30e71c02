-- Straight-line least squares fit of y on x for every group: slope and intercept with their
-- standard errors, t test of the slope, confidence intervals, r2 and a status word per group.

-- A pair (x, y) counts when both values are present and finite (NULL, NaN and infinity are
-- skipped); a group whose pairs are all skipped still gets a row, with n = 0. A NULL group key
-- is a group like any other. Group columns must not be named like a column of this view or a
-- working column (gid, b_ls, rss_all, rss_ls, ss_line, stage, t_crit) or a column of the
-- moments view.
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
CREATE OR REPLACE VIEW __view__ AS
WITH sums AS MATERIALIZED (
    SELECT
        __group__,
        row_number() OVER () AS gid,
        n,
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
        CASE WHEN n >= 2 AND x_min < x_max THEN sxy / sxx END AS b_ls,
        CASE WHEN n >= 3 THEN rss_all END AS rss_ls
    FROM sums
),
spread AS (
    SELECT
        *,
        -- explained and total sum of squares, syy = ss_line + rss: no cancellation
        b_ls * sxy AS ss_line,
        b_ls * sxy + rss_ls AS syy
    FROM line
),
quantiles AS MATERIALIZED (
    -- one t quantile per group size, not per group: the macro is costly to plan and to run
    SELECT n, tl_t_crit((1 - __level__) / 2, n - 2) AS t_crit
    FROM (SELECT DISTINCT n FROM sums WHERE n >= 3) AS sizes
),
classified AS (
    SELECT
        *,
        CASE
            WHEN n < 3 THEN 'too_few_points'
            WHEN x_min = x_max THEN 'constant_x'
            WHEN NOT (sxx > 0 AND isfinite(sxx) AND isfinite(syy) AND isfinite(rss_noise))
                THEN 'out_of_range'
            WHEN y_min = y_max THEN 'constant_y'
            WHEN rss_ls <= rss_noise THEN 'perfect_fit'
            ELSE 'ok'
        END AS stage
    FROM spread
),
estimates AS (
    SELECT
        gid,
        n,
        stage,
        x_mean,
        sxx,
        -- a constant y (also with n = 2) gets its exact line, free of anchor rounding
        CASE WHEN b_ls IS NOT NULL AND y_min = y_max THEN 0.0 ELSE b_ls END AS slope,
        CASE
            WHEN b_ls IS NOT NULL AND y_min = y_max THEN y_min
            ELSE y_mean - b_ls * x_mean
        END AS intercept,
        CASE
            WHEN stage = 'ok' THEN rss_ls
            WHEN stage IN ('constant_y', 'perfect_fit') THEN 0.0
        END AS rss,
        CASE
            WHEN stage = 'ok' THEN ss_line / syy
            WHEN stage = 'perfect_fit' THEN 1.0
            WHEN stage = 'too_few_points' AND b_ls IS NOT NULL AND y_min < y_max THEN 1.0
        END AS r2,
        CASE
            WHEN stage = 'ok' THEN 1 - rss_ls / syy * (n - 1) / (n - 2)
            WHEN stage = 'perfect_fit' THEN 1.0
        END AS r2_adj,
        t_crit
    FROM classified
    LEFT JOIN quantiles USING (n)
),
errors AS (
    SELECT
        *,
        sqrt(rss / (n - 2)) AS resid_sd,
        sqrt(rss / (n - 2) / sxx) AS slope_se,
        sqrt(rss / (n - 2) * (1 / n + x_mean * x_mean / sxx)) AS intercept_se
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
    CASE WHEN f.slope_t IS NOT NULL THEN tl_t_two_sided(f.slope_t, g.n - 2) END AS slope_p,
    f.slope_lo,
    f.slope_hi,
    f.intercept_lo,
    f.intercept_hi,
    v.status
FROM sums AS g
JOIN verdict AS v ON v.gid = g.gid
-- a row out of range keeps its status and count but no statistics
LEFT JOIN intervals AS f ON f.gid = g.gid AND v.status <> 'out_of_range'
