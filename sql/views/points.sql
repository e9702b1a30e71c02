-- Every row against its group's line (with an intercept, or through the origin): value on the
-- line, residual, scaled residuals, leverage, Cook's distance and a Bonferroni outlier flag.

-- The line comes from the slot __line__: sql/parts/line_intercept.sql (y = y_mean + slope
-- (x - x_mean), two parameters) or line_origin.sql for a fit through the origin (y = slope x,
-- one parameter: leverage x^2 / sum(x^2), n - 2 degrees of freedom without the row, Cook's
-- distance r^2 h / (1 - h), status y_all_zero for constant_y). Below, the line with an intercept.
-- One row per row of the data that the fit's filter keeps (where = "...": rows it does not
-- keep are in no view of the fit). Columns:
--   group columns     as in the fit view
--   x, y              the row's x and y, as DOUBLE
--   file_id           the file the row came from (lineage)
--   y_line            the group's fitted line at x, y_mean + slope (x - x_mean)
--   residual          y - y_line
--   residual_scaled   residual / (s sqrt(1 - leverage)), s the group's resid_sd (the
--                     internally standardised residual)
--   residual_t        residual / (s_without sqrt(1 - leverage)), where s_without is the residual
--                     sd of the fit without this row: s_without^2 = (rss - residual^2 /
--                     (1 - leverage)) / (n - 3). This is the externally studentised residual; it
--                     follows Student's t with n - 3 degrees of freedom for a row on the line.
--   leverage          1 / n + (x - x_mean)^2 / sxx, the row's weight in its own fitted value
--   cook_distance     Cook's distance, residual_scaled^2 leverage / (2 (1 - leverage)): how far
--                     the line moves when the row is left out, in units of its confidence region
--   outlier_p         Bonferroni-adjusted p-value of residual_t: least(1, n p) with p the
--                     two-sided p-value of residual_t (n - 3 degrees of freedom)
--   outlier           outlier_p < alpha_outliers (the fit's alpha unless set): the Bonferroni
--                     test on the externally studentised residuals, over the n rows of the
--                     group (judged per group; the alerts view judges the groups together)
--   x_value, y_value  the row's x and y columns as they are stored (DOUBLE); x and y above are
--                     on the fit's scale, the same values for a fit of plain columns
--   y_line_lo, y_line_hi
--                     confidence band of the mean line at x, on the fit's scale, at the fit's
--                     level: y_line -/+ t s sqrt(h), t = tl_t_crit((1 - level) / 2, df) and
--                     h = 1 / n + (x - x_mean)^2 / sxx (x^2 / sxx through the origin), also for
--                     rows that do not count (x finite); NULL without residual degrees of freedom
--   y_fitted, y_fitted_lo, y_fitted_hi
--                     y_line and its band mapped back to y's own units through y's form (slot
--                     __y_back__, sql/parts/back_*.sql; ends swap for reciprocal(y)); the same
--                     as y_line and its band for a plain y. For ln(y) or log10(y) the line mapped
--                     back is the median of y at x, not its mean.
--
-- A fit whose x or y is a form (x = "ln(col)" ...) reads the form as x or y: a row outside the
-- form's domain has x or y NULL and counts nowhere, like a missing value.
-- What is NULL: a row whose x or y is missing or not finite has only the group columns, x, y,
-- file_id and (x finite) y_line. y_line and residual need a line (fit status ok, constant_y,
-- perfect_fit, or too_few_points with two different x); leverage needs two different x;
-- residual_scaled and cook_distance need status ok and leverage < 1; residual_t and outlier_p
-- also need n >= 4. When all other rows of the group lie exactly on a line (rss without the row
-- is within the rounding bound rss_noise of the moments view), residual_t is NULL, outlier_p 0
-- and the row an outlier. outlier is false for every row of a perfect_fit or constant_y group.
-- Group columns must not be named like a column of this view or a working column (gid, n,
-- x_mean, y_mean, sxx, rss, rss_noise, slope, s, status, dx, h, e, rss_without, r_int,
-- r_ext, p_adj, counted, y_line_x).
--
-- The group numbers come from the moments and fit views (n, x_mean, y_mean, sxx, rss, slope,
-- resid_sd), so the rows agree with the fit view. The p-value comes from tl_t_two_sided.
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT
        m.__group__,
        m.n,
        m.x_mean,
        m.y_mean,
        m.sxx,
        m.rss,
        m.rss_noise,
        f.slope,
        f.resid_sd AS s,
        f.status
    FROM __moments_view__ AS m
    JOIN __fit_view__ AS f ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(f.__group__)
),
quantiles AS MATERIALIZED (
    -- the band's t quantile, once per group size (each macro call costs planning time)
    SELECT n, tl_t_crit((1 - __level__) / 2, __line__.df) AS t_band
    FROM (SELECT DISTINCT n FROM groups) AS sizes
    WHERE __line__.has_df
),
readings AS (
    SELECT
        r.__group__,
        CAST(r.__x__ AS DOUBLE) AS x,
        CAST(r.__y__ AS DOUBLE) AS y,
        r.file_id,
        coalesce(isfinite(CAST(r.__x__ AS DOUBLE)) AND isfinite(CAST(r.__y__ AS DOUBLE)), false)
            AS counted,
        CAST(r.__x__ AS DOUBLE) - g.x_mean AS dx,
        CAST(r.__x_column__ AS DOUBLE) AS x_value,
        CAST(r.__y_column__ AS DOUBLE) AS y_value,
        q.t_band,
        g.n,
        g.y_mean,
        g.sxx,
        g.rss,
        g.rss_noise,
        g.slope,
        g.s,
        g.status
    FROM __source__ AS r
    JOIN groups AS g ON ROW(r.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
    LEFT JOIN quantiles AS q ON q.n = g.n
    -- the fit's row filter (spec: where = "..."), TRUE for a fit of every row
    WHERE r.__kept__
),
line AS (
    SELECT
        *,
        __line__.y_line_x AS y_line_x,
        __line__.leverage AS h,
        __line__.leverage_at AS h_at
    FROM readings
),
band AS (
    SELECT
        *,
        y_line_x - t_band * s * sqrt(h_at) AS band_lo,
        y_line_x + t_band * s * sqrt(h_at) AS band_hi
    FROM line
),
scaled AS (
    SELECT
        *,
        CASE WHEN counted THEN y - y_line_x END AS e,
        CASE
            WHEN counted AND status = 'ok' AND __line__.enough_without AND h < 1
                THEN rss - (y - y_line_x) * (y - y_line_x) / (1 - h)
        END AS rss_without
    FROM band
),
tested AS (
    SELECT
        *,
        CASE WHEN status = 'ok' AND h < 1 AND s > 0 THEN e / (s * sqrt(1 - h)) END AS r_int,
        CASE
            WHEN rss_without > rss_noise THEN e / sqrt(rss_without / __line__.df_without * (1 - h))
        END AS r_ext
    FROM scaled
),
adjusted AS (
    SELECT
        *,
        CASE
            WHEN isfinite(r_ext) THEN least(1.0, n * tl_t_two_sided(r_ext, __line__.df_without))
            -- the other rows lie on a line: residual_t is infinite
            WHEN rss_without IS NOT NULL THEN 0.0
        END AS p_adj
    FROM tested
)
SELECT
    __group__,
    x,
    y,
    file_id,
    CASE WHEN isfinite(y_line_x) THEN y_line_x END AS y_line,
    CASE WHEN isfinite(e) THEN e END AS residual,
    CASE WHEN isfinite(r_int) THEN r_int END AS residual_scaled,
    CASE WHEN isfinite(r_ext) THEN r_ext END AS residual_t,
    CASE WHEN isfinite(h) THEN h END AS leverage,
    __line__.cook_distance AS cook_distance,
    p_adj AS outlier_p,
    CASE
        WHEN p_adj IS NOT NULL THEN p_adj < __alpha_outliers__
        WHEN counted AND status IN ('perfect_fit', __line__.no_spread) THEN false
    END AS outlier,
    x_value,
    y_value,
    CASE WHEN isfinite(band_lo) AND isfinite(band_hi) THEN band_lo END AS y_line_lo,
    CASE WHEN isfinite(band_lo) AND isfinite(band_hi) THEN band_hi END AS y_line_hi,
    CASE WHEN isfinite(y_line_x) THEN __y_back__.fitted END AS y_fitted,
    CASE WHEN isfinite(band_lo) AND isfinite(band_hi) THEN __y_back__.fitted_lo END AS y_fitted_lo,
    CASE WHEN isfinite(band_lo) AND isfinite(band_hi) THEN __y_back__.fitted_hi END AS y_fitted_hi
FROM adjusted
