-- Straight-line fit of y on x for every group and window (a calendar day, week or month of the
-- date field, or a fixed span of x): the statistics of the fit view, per window, with its bounds.

-- The window key is a part: sql/parts/window_calendar.sql for a fit with `window` (windows by
-- date_trunc of the date field, weeks starting on Monday; rows without a date belong to no
-- window), sql/parts/window_span.sql for a fit with `window_x` = w (windows [k w, (k + 1) w) with
-- k = floor(x / w); rows whose x is missing or not finite belong to no window).
-- One row per group and window that holds at least one row of it. Columns:
--   group columns   as in the fit view
--   window_start    first day of the window (a DATE), or k w (a DOUBLE)
--   window_end      first day after the window, or (k + 1) w: the window is
--                   [window_start, window_end)
--   n ... status    the columns of the fit view (fit.sql) with the same meaning and the same
--                   status rules (too_few_points, constant_x, out_of_range, constant_y,
--                   perfect_fit, ok), computed from the pairs of the window alone
--   x_mean, y_mean, sxx, sxy, syy, rss
--                   the window's centred sums as in the moments view (moments.sql): means,
--                   sum((x - x_mean)^2), sum((x - x_mean)(y - y_mean)), sum((y - y_mean)^2) and
--                   the residual sum of squares of its line (syy when every x is the same); NULL
--                   when the window has no counted pair or a sum overflows. The change view
--                   pools them.
-- A pair (x, y) counts when both values are present and finite. Group columns must not be named
-- like a column of this view or a working column (px, py, gid, x0, y0, b1, b_ls, rss_ls, stage).
--
-- Numerics as in the moments and fit views: anchors x0, y0 and a first slope b1 per window, a
-- second pass of compensated sums of dx = x - x0, dy = y - y0 and of the residuals
-- e = dy - b1 dx, corrected two-pass sums, rss = sum(e^2) - sum(e)^2 / n - (slope - b1)^2 sxx
-- from the residuals (no cancellation however strong the fit), syy = slope sxy + rss. The t
-- quantile and the slope's p-value come from tl_t_crit and tl_t_two_sided with n - 2 degrees of
-- freedom.
CREATE OR REPLACE VIEW __view__ AS
WITH pairs AS NOT MATERIALIZED (
    SELECT
        __group__,
        __window_key__.window_start AS window_start,
        CASE WHEN isfinite(CAST(__x__ AS DOUBLE)) AND isfinite(CAST(__y__ AS DOUBLE))
            THEN CAST(__x__ AS DOUBLE) END AS px,
        CASE WHEN isfinite(CAST(__x__ AS DOUBLE)) AND isfinite(CAST(__y__ AS DOUBLE))
            THEN CAST(__y__ AS DOUBLE) END AS py
    FROM __source__
    WHERE __window_key__.in_window
),
pass1 AS MATERIALIZED (
    SELECT
        __group__,
        window_start,
        row_number() OVER () AS gid,
        CAST(count(px) AS BIGINT) AS n,
        min(px) AS x_min,
        max(px) AS x_max,
        min(py) AS y_min,
        max(py) AS y_max,
        avg(px) AS x0,
        avg(py) AS y0,
        -- regr_slope is NaN for one point or constant x; any finite first slope will do
        coalesce(CASE WHEN isfinite(regr_slope(py, px)) THEN regr_slope(py, px) END, 0.0) AS b1
    FROM pairs
    GROUP BY __group__, window_start
),
pass2 AS (
    SELECT
        gid,
        fsum(dx) AS sum_dx,
        fsum(dy) AS sum_dy,
        fsum(dx * dx) AS sum_dxx,
        fsum(dx * dy) AS sum_dxy,
        fsum((dy - b1 * dx) * (dy - b1 * dx)) AS sum_ee
    FROM (
        SELECT g.gid, g.b1, p.px - g.x0 AS dx, p.py - g.y0 AS dy
        FROM pairs AS p
        JOIN pass1 AS g
            ON ROW(p.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
            AND p.window_start = g.window_start
        WHERE p.px IS NOT NULL
    ) AS anchored
    GROUP BY gid
),
centred AS (
    SELECT
        gid,
        n,
        x_min,
        x_max,
        y_min,
        y_max,
        CASE WHEN x_min = x_max THEN x_min ELSE x0 + sum_dx / n END AS x_mean,
        CASE WHEN y_min = y_max THEN y_min ELSE y0 + sum_dy / n END AS y_mean,
        CASE WHEN x_min = x_max THEN 0.0 ELSE sum_dxx - sum_dx * sum_dx / n END AS sxx,
        CASE
            WHEN x_min = x_max OR y_min = y_max THEN 0.0
            ELSE sum_dxy - sum_dx * sum_dy / n
        END AS sxy,
        sum_ee - (sum_dy - b1 * sum_dx) * (sum_dy - b1 * sum_dx) / n AS rss_b1,
        sum_ee,
        sum_dy,
        b1
    FROM pass1
    LEFT JOIN pass2 USING (gid)
),
sums AS (
    SELECT
        *,
        CASE
            WHEN n = 0 THEN NULL
            WHEN y_min = y_max THEN 0.0
            WHEN sxx > 0 THEN greatest(rss_b1 - (sxy / sxx - b1) * (sxy / sxx - b1) * sxx, 0.0)
            ELSE greatest(rss_b1, 0.0)
        END AS rss,
        -- rounding error bound of rss, as in the moments view
        pow(2.0, -46) * sqrt(sum_ee * (
            CASE WHEN sxx > 0 THEN sxy / sxx * sxy ELSE 0.0 END
            + greatest(rss_b1, 0.0) + sum_dy * sum_dy / n
        )) AS rss_noise
    FROM centred
),
line AS (
    SELECT
        *,
        CASE WHEN sxx > 0 THEN sxy / sxx * sxy ELSE 0.0 END + rss AS syy,
        __line__.b_ls AS b_ls,
        CASE WHEN __line__.has_df THEN rss END AS rss_ls
    FROM sums
),
quantiles AS MATERIALIZED (
    SELECT n, tl_t_crit((1 - __level__) / 2, __line__.df) AS t_crit
    FROM (SELECT DISTINCT n FROM pass1 WHERE __line__.has_df) AS sizes
),
classified AS (
    SELECT
        *,
        __line__.stage AS stage
    FROM line
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
            WHEN stage = 'ok' THEN b_ls * sxy / syy
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
    g.window_start,
    __window_key__.window_end AS window_end,
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
    -- sums that overflowed are NULL, never inf or NaN
    CASE WHEN isfinite(s.x_mean) THEN s.x_mean END AS x_mean,
    CASE WHEN isfinite(s.y_mean) THEN s.y_mean END AS y_mean,
    CASE WHEN isfinite(s.sxx) THEN s.sxx END AS sxx,
    CASE WHEN isfinite(s.sxy) THEN s.sxy END AS sxy,
    CASE WHEN isfinite(s.syy) THEN s.syy END AS syy,
    CASE WHEN isfinite(s.rss) THEN s.rss END AS rss
FROM pass1 AS g
JOIN verdict AS v ON v.gid = g.gid
JOIN line AS s ON s.gid = g.gid
LEFT JOIN intervals AS f ON f.gid = g.gid AND v.status <> 'out_of_range'
