-- Merge the sums about the origin of a batch of rows into a fit's stored moments (fits through
-- the origin): one row per group of the batch, with the stored rows and the batch rows together.

-- Reads tl_mbatch (the batch's sums: the two passes of the full moments view over the batch's
-- rows only) and __table__ (the stored sums); writes the temporary table tl_mmerged with
-- the columns of __table__ in its order. A group the table does not hold yet takes the batch's
-- sums; a side without counted pairs (n = 0) adds only its row count.
--
-- Numerics: sxx = sum(x^2), sxy = sum(xy) and syy = sum(y^2) add up; the means follow the update
-- of Chan, Golub and LeVeque (x_mean = x_mean(A) + (x_mean(B) - x_mean(A)) nB / n). The residual
-- sum of squares is carried, not recovered as syy - sxy^2 / sxx; with the slopes bA = sxyA / sxxA
-- and bB = sxyB / sxxB it is
--   rss = rssA + rssB + sxxA sxxB (bA - bB)^2 / (sxxA + sxxB),
-- exact algebra, the correction 0 when a side's sxx is 0, never negative. The rounding bound
-- rss_noise adds up the sides' bounds and the correction's (64 units of rounding times
-- sqrt(correction syy)). Group columns must not be named like a working column (na, nb, xa ...
-- eb, f, ba, bb, fix, paired, steps).
CREATE OR REPLACE TEMP TABLE tl_mmerged AS
WITH paired AS (
    SELECT
        b.__group__,
        coalesce(t.n, 0) AS na,
        b.n AS nb,
        coalesce(t.n_rows, 0) + b.n_rows AS n_rows,
        coalesce(t.n_outside, 0) + b.n_outside AS n_outside,
        t.x_mean AS xa,
        t.y_mean AS ya,
        t.sxx AS sa,
        t.sxy AS pa,
        t.syy AS qa,
        t.rss AS ra,
        t.rss_noise AS ea,
        b.x_mean AS xb,
        b.y_mean AS yb,
        b.sxx AS sb,
        b.sxy AS pb,
        b.syy AS qb,
        b.rss AS rb,
        b.rss_noise AS eb,
        least(t.x_min, b.x_min) AS x_min,
        greatest(t.x_max, b.x_max) AS x_max,
        least(t.y_min, b.y_min) AS y_min,
        greatest(t.y_max, b.y_max) AS y_max
    FROM tl_mbatch AS b
    LEFT JOIN __table__ AS t ON ROW(b.__group__) IS NOT DISTINCT FROM ROW(t.__group__)
),
steps AS (
    SELECT
        *,
        CAST(nb AS DOUBLE) / (na + nb) AS f,
        sa + sb AS sxx,
        pa + pb AS sxy,
        qa + qb AS syy,
        CASE WHEN sa > 0 THEN pa / sa ELSE 0.0 END AS ba,
        CASE WHEN sb > 0 THEN pb / sb ELSE 0.0 END AS bb
    FROM paired
    WHERE na > 0 AND nb > 0
),
fix AS (
    SELECT
        *,
        CASE
            WHEN sa > 0 AND sb > 0 THEN sa * sb * (ba - bb) * (ba - bb) / sxx
            ELSE 0.0
        END AS correction
    FROM steps
)
SELECT
    __group__,
    na + nb AS n,
    n_rows,
    n_outside,
    xa + (xb - xa) * f AS x_mean,
    ya + (yb - ya) * f AS y_mean,
    sxx,
    sxy,
    syy,
    ra + rb + correction AS rss,
    x_min,
    x_max,
    y_min,
    y_max,
    ea + eb + pow(2.0, -46) * sqrt(correction * syy) AS rss_noise,
    -- the fit through the origin uses no means: no low parts (moments_full_origin.sql)
    0.0 AS x_mean_lo,
    0.0 AS y_mean_lo
FROM fix
UNION ALL
-- one side has no counted pairs: the other side's sums, and the rows of both
SELECT
    __group__,
    na + nb AS n,
    n_rows,
    n_outside,
    CASE WHEN na = 0 THEN xb ELSE xa END AS x_mean,
    CASE WHEN na = 0 THEN yb ELSE ya END AS y_mean,
    CASE WHEN na = 0 THEN sb ELSE sa END AS sxx,
    CASE WHEN na = 0 THEN pb ELSE pa END AS sxy,
    CASE WHEN na = 0 THEN qb ELSE qa END AS syy,
    CASE WHEN na = 0 THEN rb ELSE ra END AS rss,
    x_min,
    x_max,
    y_min,
    y_max,
    CASE WHEN na = 0 THEN eb ELSE ea END AS rss_noise,
    0.0 AS x_mean_lo,
    0.0 AS y_mean_lo
FROM paired
WHERE na = 0 OR nb = 0
