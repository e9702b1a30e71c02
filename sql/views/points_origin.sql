-- Every row against its group's line through the origin: value on the line, residual, scaled
-- residuals, leverage, Cook's distance and a Bonferroni outlier flag.

-- The twin of points.sql for fits through the origin (y = slope x, one parameter), with the same
-- columns in the same order. One row per row of the data. Columns:
--   group columns     as in the fit view
--   x, y              the row's x and y, as DOUBLE
--   file_id           the file the row came from (lineage)
--   y_line            the group's fitted line at x, slope x
--   residual          y - y_line
--   residual_scaled   residual / (s sqrt(1 - leverage)), s the group's resid_sd, s^2 = rss /
--                     (n - 1) (the internally standardised residual)
--   residual_t        residual / (s_without sqrt(1 - leverage)), where s_without is the residual
--                     sd of the fit without this row: s_without^2 = (rss - residual^2 /
--                     (1 - leverage)) / (n - 2). This is the externally studentised residual; it
--                     follows Student's t with n - 2 degrees of freedom for a row on the line.
--   leverage          x^2 / sxx with sxx = sum(x^2) over the group, the row's weight in its own
--                     fitted value
--   cook_distance     Cook's distance with one parameter, residual_scaled^2 leverage /
--                     (1 - leverage)
--   outlier_p         Bonferroni-adjusted p-value of residual_t: least(1, n p) with p the
--                     two-sided p-value of residual_t (n - 2 degrees of freedom)
--   outlier           outlier_p < alpha (the fit's alpha): the Bonferroni outlier test on the
--                     externally studentised residuals, over the n rows of the group
--
-- What is NULL: a row whose x or y is missing or not finite has only the group columns, x, y,
-- file_id and (x finite) y_line. y_line and residual need a line (fit status ok, y_all_zero,
-- perfect_fit, or too_few_points with its one x not 0); leverage needs an x other than 0 in
-- the group; residual_scaled and cook_distance need status ok and leverage < 1; residual_t and
-- outlier_p also need n >= 3. A row that is the group's only x other than 0 has leverage 1 and
-- no scaled residuals. When all other rows of the group lie exactly on a line through the
-- origin (rss without the row is within the rounding bound rss_noise of the moments view),
-- residual_t is NULL, outlier_p 0 and the row an outlier. outlier is false for every row of a
-- perfect_fit or y_all_zero group. A statistic that would come out infinite or NaN is NULL.
-- Group columns must not be named like a column of this view or a working column (n, sxx, rss,
-- rss_noise, slope, s, status, h, e, rss_without, r_int, r_ext, p_adj, counted, y_line_x).
--
-- The group numbers come from the moments and fit views of the same fit (n, sxx, rss,
-- rss_noise from moments_origin.sql; slope, resid_sd, status from the fit view), so the rows
-- agree with the fit view. The p-value comes from tl_t_two_sided.
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT
        m.__group__,
        m.n,
        m.sxx,
        m.rss,
        m.rss_noise,
        f.slope,
        f.resid_sd AS s,
        f.status
    FROM __moments_view__ AS m
    JOIN __fit_view__ AS f ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(f.__group__)
),
readings AS (
    SELECT
        r.__group__,
        CAST(r.__x__ AS DOUBLE) AS x,
        CAST(r.__y__ AS DOUBLE) AS y,
        r.file_id,
        coalesce(isfinite(CAST(r.__x__ AS DOUBLE)) AND isfinite(CAST(r.__y__ AS DOUBLE)), false)
            AS counted,
        g.n,
        g.sxx,
        g.rss,
        g.rss_noise,
        g.slope,
        g.s,
        g.status
    FROM __source__ AS r
    JOIN groups AS g ON ROW(r.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
),
line AS (
    SELECT
        *,
        -- slope is NULL where the fit view gives no line
        CASE WHEN isfinite(x) THEN slope * x END AS y_line_x,
        CASE WHEN counted AND sxx > 0 AND isfinite(sxx) THEN x * x / sxx END AS h
    FROM readings
),
scaled AS (
    SELECT
        *,
        CASE WHEN counted THEN y - y_line_x END AS e,
        CASE
            WHEN counted AND status = 'ok' AND n >= 3 AND h < 1
                THEN rss - (y - y_line_x) * (y - y_line_x) / (1 - h)
        END AS rss_without
    FROM line
),
tested AS (
    SELECT
        *,
        CASE WHEN status = 'ok' AND h < 1 AND s > 0 THEN e / (s * sqrt(1 - h)) END AS r_int,
        CASE
            WHEN rss_without > rss_noise THEN e / sqrt(rss_without / (n - 2) * (1 - h))
        END AS r_ext
    FROM scaled
),
adjusted AS (
    SELECT
        *,
        CASE
            WHEN isfinite(r_ext) THEN least(1.0, n * tl_t_two_sided(r_ext, n - 2))
            -- the other rows lie on a line through the origin: residual_t is infinite
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
    CASE
        WHEN h < 1 AND isfinite(r_int * r_int * h / (1 - h)) THEN r_int * r_int * h / (1 - h)
    END AS cook_distance,
    p_adj AS outlier_p,
    CASE
        WHEN p_adj IS NOT NULL THEN p_adj < __alpha__
        WHEN counted AND status IN ('perfect_fit', 'y_all_zero') THEN false
    END AS outlier
FROM adjusted
