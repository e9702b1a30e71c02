-- Least squares fit of y = slope * x through the origin for every group: slope with its standard
-- error, t test, confidence interval, uncentred r2 and a status word per group.

-- The columns are those of the fit with an intercept (fit.sql); intercept, intercept_se,
-- intercept_lo and intercept_hi are always NULL. With one parameter the residual degrees of
-- freedom are n - 1. r2 is uncentred, 1 - rss / sum(y^2), as NIST defines it for its
-- no-intercept datasets (StRD NoInt1, NoInt2), and r2_adj = 1 - (1 - r2) n / (n - 1), the same
-- adjustment with n in place of n - 1 because no mean is taken out.
--
-- A pair (x, y) counts when both values are present and finite (NULL, NaN and infinity are
-- skipped); a group whose pairs are all skipped still gets a row, with n = 0. A NULL group key
-- is a group like any other. Group columns must not be named like a column of this view or a
-- working column (gid, sum_xx, sum_xy, b_ls, rss_all, rss_ls, ss_line, sum_yy,
-- stage, t_crit) or a column of the moments view.
--
-- status, first matching rule wins:
--   too_few_points  n < 2. With one point at x <> 0 the line through it and the origin is given
--                   (slope, and r2 = 1 unless y = 0); everything that needs residual degrees of
--                   freedom is NULL.
--   x_all_zero      every x is 0: no slope can be fitted; all statistics are NULL.
--   out_of_range    a sum of squares or a statistic overflows or underflows float64; all
--                   statistics are NULL.
--   y_all_zero      every y is 0: slope 0, resid_sd and slope_se 0, an interval of zero width;
--                   r2, r2_adj, slope_t and slope_p are NULL.
--   perfect_fit     the points lie on a line through the origin: the residual sum of squares is
--                   below the rounding error of its own float64 computation. resid_sd and
--                   slope_se are 0, r2 = r2_adj = 1, the interval has zero width, slope_t and
--                   slope_p are NULL.
--   ok              every statistic is defined.
--
-- Numerics. The sums come from the moments view of the same fit (moments_origin.sql: count,
-- ranges, sxx = sum(x^2), sxy = sum(xy) and the residual sum of squares rss of the line through
-- the origin, each kept accurate however strong or weak the fit, and a bound rss_noise on the
-- rounding error of rss). slope = sxy / sxx. The uncentred total is taken as slope^2 sxx + rss
-- (explained plus residual: no cancellation). The t quantile and tail probability come from the
-- tl_t_crit and tl_t_two_sided macros (sql/macros/t_dist.sql), with n - 1 degrees of freedom.
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
        sxx AS sum_xx,
        sxy AS sum_xy,
        rss AS rss_all,
        rss_noise
    FROM __moments_view__
),
residuals AS (
    SELECT
        gid,
        n,
        x_min,
        x_max,
        y_min,
        y_max,
        sum_xx,
        rss_noise,
        CASE WHEN sum_xx > 0 THEN sum_xy / sum_xx END AS b_ls,
        CASE WHEN n >= 2 THEN rss_all END AS rss_ls
    FROM sums
),
spread AS (
    SELECT
        *,
        -- explained and total sum of squares, sum(y^2) = ss_line + rss: no cancellation
        b_ls * b_ls * sum_xx AS ss_line,
        b_ls * b_ls * sum_xx + rss_ls AS sum_yy
    FROM residuals
),
quantiles AS MATERIALIZED (
    -- one t quantile per group size, not per group: the macro is costly to plan and to run
    SELECT n, tl_t_crit((1 - __level__) / 2, n - 1) AS t_crit
    FROM (SELECT DISTINCT n FROM sums WHERE n >= 2) AS sizes
),
classified AS (
    SELECT
        *,
        CASE
            WHEN n < 2 THEN 'too_few_points'
            WHEN x_min = 0 AND x_max = 0 THEN 'x_all_zero'
            WHEN NOT (sum_xx > 0 AND isfinite(sum_xx) AND isfinite(sum_yy) AND isfinite(rss_noise))
                THEN 'out_of_range'
            WHEN y_min = 0 AND y_max = 0 THEN 'y_all_zero'
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
        sum_xx,
        CASE
            WHEN stage = 'y_all_zero' THEN 0.0
            WHEN stage IN ('ok', 'perfect_fit', 'too_few_points') THEN b_ls
        END AS slope,
        CASE
            WHEN stage = 'ok' THEN rss_ls
            WHEN stage IN ('y_all_zero', 'perfect_fit') THEN 0.0
        END AS rss,
        CASE
            WHEN stage = 'ok' THEN ss_line / sum_yy
            WHEN stage = 'perfect_fit' THEN 1.0
            WHEN stage = 'too_few_points' AND b_ls IS NOT NULL AND NOT (y_min = 0 AND y_max = 0)
                THEN 1.0
        END AS r2,
        CASE
            WHEN stage = 'ok' THEN 1 - rss_ls / sum_yy * n / (n - 1)
            WHEN stage = 'perfect_fit' THEN 1.0
        END AS r2_adj,
        t_crit
    FROM classified
    LEFT JOIN quantiles USING (n)
),
errors AS (
    SELECT
        *,
        sqrt(rss / (n - 1)) AS resid_sd,
        sqrt(rss / (n - 1) / sum_xx) AS slope_se
    FROM estimates
),
intervals AS (
    SELECT
        *,
        CASE WHEN stage = 'ok' THEN slope / slope_se END AS slope_t,
        slope - t_crit * slope_se AS slope_lo,
        slope + t_crit * slope_se AS slope_hi
    FROM errors
),
verdict AS (
    -- greatest() skips NULLs and returns NaN or inf if any argument is one
    SELECT
        gid,
        CASE
            WHEN coalesce(isfinite(greatest(
                abs(slope), abs(r2), abs(r2_adj), resid_sd, slope_se, abs(slope_t),
                abs(slope_lo), abs(slope_hi)
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
    CAST(NULL AS DOUBLE) AS intercept,
    f.r2,
    f.r2_adj,
    f.resid_sd,
    f.slope_se,
    CAST(NULL AS DOUBLE) AS intercept_se,
    f.slope_t,
    CASE WHEN f.slope_t IS NOT NULL THEN tl_t_two_sided(f.slope_t, g.n - 1) END AS slope_p,
    f.slope_lo,
    f.slope_hi,
    CAST(NULL AS DOUBLE) AS intercept_lo,
    CAST(NULL AS DOUBLE) AS intercept_hi,
    v.status
FROM sums AS g
JOIN verdict AS v ON v.gid = g.gid
-- a row out of range keeps its status and count but no statistics
LEFT JOIN intervals AS f ON f.gid = g.gid AND v.status <> 'out_of_range'
