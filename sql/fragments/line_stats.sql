-- The statistics of each straight line from its sums: one row per row of __previous__ (gid, n,
-- x_min, x_max, y_min, y_max, x_mean, y_mean, sxx, sxy, rss, rss_noise, as the moments and the
-- sums fragments give them) with gid, the fit view's statistics (slope ... intercept_hi) and its
-- status. fit.sql reads it per group, windows.sql per group and window; the comment of fit.sql
-- says what each column and status means.
--
-- The line is the slot __line__ (sql/parts/line_intercept.sql or line_origin.sql): its degrees
-- of freedom, status rules, slope and intercept, explained and total sums of squares. The
-- explained part is taken from the slope and the total as explained plus residual (no
-- cancellation), so r2 = ss_line / syy keeps its digits for weak and strong fits alike. The
-- t quantile comes from tl_t_crit (sql/macros/t_dist.sql), once per group size, and the slope's
-- p-value from tl_t_two_sided. A line whose statistics overflow or underflow float64 gets the
-- status out_of_range and no statistics.
WITH line AS (
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
        CASE WHEN __line__.has_df THEN rss END AS rss_ls
    FROM __previous__
),
spread AS (
    SELECT
        *,
        __line__.ss_line AS ss_line,
        __line__.syy AS syy
    FROM line
),
quantiles AS MATERIALIZED (
    -- one t quantile per group size, not per group: the macro is costly to plan and to run
    SELECT n, tl_t_crit((1 - __level__) / 2, __line__.df) AS t_crit
    FROM (SELECT DISTINCT n FROM line WHERE __line__.has_df) AS sizes
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
        n,
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
    g.gid,
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
    g.status
FROM verdict AS g
-- a line out of range keeps its status but no statistics
LEFT JOIN intervals AS f ON f.gid = g.gid AND g.status <> 'out_of_range'
