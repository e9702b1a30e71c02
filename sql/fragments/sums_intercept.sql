-- Centred sums of each key's pairs, in two passes: one row per key of __previous__ (the rows to
-- sum, with the key columns __key__ and the raw x and y columns). Used by every view that sums
-- rows (moments_full.sql per group, windows.sql per group and window, break.sql per group and
-- side); the fit through the origin has its own sums (sums_origin.sql) with the same columns.
--
-- Columns: the key columns, and
--   gid               a number per key, for joins inside the view
--   n                 pairs (x, y) that count: both present and finite (BIGINT)
--   n_rows            rows of the key, counted pairs or not (BIGINT)
--   n_outside         rows whose x and y are present and finite but outside the domain of the
--                     fit's form of x or y (ln of 0, ...): left out like a missing value (BIGINT)
--   x_min ... y_max   ranges of the counted pairs
--   x_mean, y_mean    means of the counted pairs
--   sxx, sxy, syy     centred sums: sum((x - x_mean)^2), sum((x - x_mean)(y - y_mean)),
--                     sum((y - y_mean)^2); sxx is exactly 0 when every x is the same, and sxy
--                     is exactly 0 when every x or every y is the same
--   rss               residual sum of squares of the least-squares line, syy - sxy^2 / sxx in
--                     exact arithmetic (syy itself when sxx = 0), never negative
--   rss_noise         a bound on the rounding error of rss; the fit calls a key with
--                     rss <= rss_noise a perfect fit
--   x_mean_lo, y_mean_lo  low parts of the means: x_mean + x_mean_lo is the mean with an error
--                     of the order of float64 rounding of the spread of the data, not of the
--                     mean's size (what the stored sums carry from merge to merge)
-- A key whose pairs are all skipped has n = 0 and NULL sums, means and ranges.
--
-- Numerics. Pass 1 (one GROUP BY) gives per key the count, the ranges, anchors x0 = avg(x) and
-- y0 = avg(y) (they need not be exact) and a first slope b1 = regr_slope(y, x) (8 digits or more
-- even far from zero). Pass 2 joins every pair back to its key and adds up, in compensated
-- (Kahan) sums, dx = x - x0, dy = y - y0, dx^2, dx dy and the squared residuals e^2 with
-- e = dy - b1 dx; for data far from zero x - x0 and y - y0 are exact differences. The centred
-- sums are the corrected two-pass sums (Chan, Golub and LeVeque), sxx = sum(dx^2) - sum(dx)^2 / n
-- and so on, so the anchors' rounding costs nothing. The residual sum of squares comes from the
-- residuals: rss = sum(e^2) - sum(e)^2 / n - (sxy / sxx - b1)^2 sxx, exact algebra for any b1
-- and only a small correction as b1 is close, so it keeps its digits however strong the fit
-- (syy - sxy^2 / sxx would lose them as r2 nears 1). syy is taken as sxy^2 / sxx + rss
-- (explained plus residual: no cancellation). rss_noise is 64 units of float64 rounding times
-- sqrt(sum(e^2) sum(dy^2)), from the error of each residual. (Window aggregates for the anchors
-- instead of the join back were measured slower.)
WITH tl_pairs AS NOT MATERIALIZED (
    SELECT
        __key__,
        CASE WHEN isfinite(CAST(__x__ AS DOUBLE)) AND isfinite(CAST(__y__ AS DOUBLE))
            THEN CAST(__x__ AS DOUBLE) END AS px,
        CASE WHEN isfinite(CAST(__x__ AS DOUBLE)) AND isfinite(CAST(__y__ AS DOUBLE))
            THEN CAST(__y__ AS DOUBLE) END AS py,
        __outside__ AS tl_outside
    FROM __previous__
),
pass1 AS MATERIALIZED (
    SELECT
        __key__,
        row_number() OVER () AS gid,
        CAST(count(px) AS BIGINT) AS n,
        CAST(count(*) AS BIGINT) AS n_rows,
        CAST(count(*) FILTER (WHERE tl_outside) AS BIGINT) AS n_outside,
        min(px) AS x_min,
        max(px) AS x_max,
        min(py) AS y_min,
        max(py) AS y_max,
        avg(px) AS x0,
        avg(py) AS y0,
        -- regr_slope is NaN for one point or constant x; any finite first slope will do.
        coalesce(CASE WHEN isfinite(regr_slope(py, px)) THEN regr_slope(py, px) END, 0.0) AS b1
    FROM tl_pairs
    GROUP BY __key__
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
        FROM tl_pairs AS p
        JOIN pass1 AS g ON ROW(p.__key__) IS NOT DISTINCT FROM ROW(g.__key__)
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
        x0,
        y0,
        sum_dx / n AS x_step,
        sum_dy / n AS y_step,
        CASE WHEN x_min = x_max THEN 0.0 ELSE sum_dxx - sum_dx * sum_dx / n END AS sxx,
        CASE
            WHEN x_min = x_max OR y_min = y_max THEN 0.0
            ELSE sum_dxy - sum_dx * sum_dy / n
        END AS sxy,
        -- sum(e) is sum(dy) - b1 sum(dx); it only enters as a small correction
        sum_ee - (sum_dy - b1 * sum_dx) * (sum_dy - b1 * sum_dx) / n AS rss_b1,
        sum_ee,
        sum_dy,
        b1
    FROM pass1
    LEFT JOIN pass2 USING (gid)
),
residuals AS (
    SELECT
        *,
        CASE
            WHEN n = 0 THEN NULL
            WHEN y_min = y_max THEN 0.0
            WHEN sxx > 0 THEN greatest(rss_b1 - (sxy / sxx - b1) * (sxy / sxx - b1) * sxx, 0.0)
            -- every x the same (or so close that sxx underflows): nothing is explained
            ELSE greatest(rss_b1, 0.0)
        END AS rss
    FROM centred
),
means AS (
    -- mean = anchor + step; the rounding error of that sum, kept as the low part of the mean
    -- (Knuth's two-sum), lets merges carry the mean to about twice float64 precision
    SELECT
        *,
        CASE WHEN x_min = x_max THEN x_min ELSE x0 + x_step END AS x_mean,
        CASE WHEN y_min = y_max THEN y_min ELSE y0 + y_step END AS y_mean,
        (x0 + x_step) - x0 AS x_part,
        (y0 + y_step) - y0 AS y_part
    FROM residuals
)
SELECT
    g.__key__,
    g.gid,
    g.n,
    g.n_rows,
    g.n_outside,
    r.x_mean,
    r.y_mean,
    r.sxx,
    r.sxy,
    CASE WHEN r.sxx > 0 THEN r.sxy / r.sxx * r.sxy ELSE 0.0 END + r.rss AS syy,
    r.rss,
    r.x_min,
    r.x_max,
    r.y_min,
    r.y_max,
    pow(2.0, -46) * sqrt(r.sum_ee * (
        CASE WHEN r.sxx > 0 THEN r.sxy / r.sxx * r.sxy ELSE 0.0 END + r.rss
        + r.sum_dy * r.sum_dy / r.n
    )) AS rss_noise,
    CASE
        WHEN r.x_min = r.x_max THEN 0.0
        ELSE (r.x0 - (r.x_mean - r.x_part)) + (r.x_step - r.x_part)
    END AS x_mean_lo,
    CASE
        WHEN r.y_min = r.y_max THEN 0.0
        ELSE (r.y0 - (r.y_mean - r.y_part)) + (r.y_step - r.y_part)
    END AS y_mean_lo
FROM pass1 AS g
JOIN means AS r ON r.gid = g.gid
