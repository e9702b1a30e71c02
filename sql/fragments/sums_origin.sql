-- Sums about the origin of each key's pairs, in two passes: the columns of sums_intercept.sql
-- for a fit through the origin (one row per key of __previous__, which holds the key columns
-- __key__ and the raw x and y columns).
--
-- sxx, sxy and syy are taken about the origin instead of the means: sxx = sum(x^2),
-- sxy = sum(xy), syy = sum(y^2), so that slope = sxy / sxx as with an intercept. x_mean and
-- y_mean are the plain means, their low parts 0 (the line through the origin uses no means).
-- rss is the residual sum of squares of the least-squares line through the origin,
-- syy - sxy^2 / sxx in exact arithmetic (syy itself when sxx = 0), never negative; rss_noise
-- bounds its rounding error; sxy is exactly 0 when every y is 0. A key whose pairs are all
-- skipped has n = 0 and NULL sums.
--
-- Numerics. Pass 1 (one GROUP BY) gives per key the count, the ranges and a first slope
-- b1 = sum(xy) / sum(x^2). Pass 2 joins every pair back to its key and adds up, in compensated
-- (Kahan) sums, x, y, x^2 and, for the residuals e = y - b1 x, x e and e^2. One step of iterative
-- refinement gives the slope, b1 + sum(x e) / sum(x^2), which recovers the digits a cancelling
-- sum(xy) loses; sxy is taken as that slope times sum(x^2). The residual sum of squares comes
-- from the residuals, rss = sum(e^2) - (slope - b1)^2 sum(x^2), exact algebra for any b1, and
-- syy as slope sxy + rss (explained plus residual: no cancellation). rss_noise is 64 units of
-- float64 rounding times sqrt(sum(e^2) sum(y^2)).
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
        -- NaN when every x is 0, and it may overflow; any finite first slope will do.
        coalesce(
            CASE WHEN isfinite(sum(px * py) / sum(px * px)) THEN sum(px * py) / sum(px * px) END,
            0.0
        ) AS b1
    FROM tl_pairs
    GROUP BY __key__
),
pass2 AS (
    SELECT
        gid,
        fsum(px) AS sum_x,
        fsum(py) AS sum_y,
        fsum(px * px) AS sum_xx,
        fsum(px * e) AS sum_xe,
        fsum(e * e) AS sum_ee
    FROM (
        SELECT g.gid, p.px, p.py, p.py - g.b1 * p.px AS e
        FROM tl_pairs AS p
        JOIN pass1 AS g ON ROW(p.__key__) IS NOT DISTINCT FROM ROW(g.__key__)
        WHERE p.px IS NOT NULL
    ) AS residuals
    GROUP BY gid
),
refined AS (
    SELECT
        gid,
        n,
        sum_x,
        sum_y,
        sum_xx,
        sum_ee,
        b1,
        y_min = 0 AND y_max = 0 AS zero_y,
        CASE WHEN sum_xx > 0 THEN b1 + sum_xe / sum_xx END AS b_ls
    FROM pass1
    LEFT JOIN pass2 USING (gid)
),
residuals AS (
    SELECT
        *,
        CASE
            WHEN n = 0 THEN NULL
            WHEN zero_y THEN 0.0
            WHEN sum_xx > 0 THEN greatest(sum_ee - (b_ls - b1) * (b_ls - b1) * sum_xx, 0.0)
            -- every x is 0 (or so small that x^2 underflows): nothing is explained
            ELSE greatest(sum_ee, 0.0)
        END AS rss
    FROM refined
)
SELECT
    g.__key__,
    g.gid,
    g.n,
    g.n_rows,
    g.n_outside,
    r.sum_x / r.n AS x_mean,
    r.sum_y / r.n AS y_mean,
    r.sum_xx AS sxx,
    CASE WHEN r.zero_y THEN 0.0 WHEN r.sum_xx > 0 THEN r.b_ls * r.sum_xx ELSE 0.0 END AS sxy,
    CASE WHEN r.sum_xx > 0 AND NOT r.zero_y THEN r.b_ls * r.b_ls * r.sum_xx ELSE 0.0 END + r.rss
        AS syy,
    r.rss,
    g.x_min,
    g.x_max,
    g.y_min,
    g.y_max,
    pow(2.0, -46) * sqrt(r.sum_ee * (
        CASE WHEN r.sum_xx > 0 AND NOT r.zero_y THEN r.b_ls * r.b_ls * r.sum_xx ELSE 0.0 END
        + r.rss
    )) AS rss_noise,
    0.0 AS x_mean_lo,
    0.0 AS y_mean_lo
FROM pass1 AS g
JOIN residuals AS r ON r.gid = g.gid
