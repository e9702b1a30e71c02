-- Merge the centred sums of a batch of rows into a fit's stored moments: one row per group of the
-- batch, with the sums of the stored rows and the batch rows together.

-- Reads tl_mbatch (the batch's sums: the two passes of the full moments view over the batch's
-- rows only) and __table__ (the stored sums); writes the temporary table tl_mmerged with
-- the columns of __table__ in its order. A group the table does not hold yet takes the batch's
-- sums; a side without counted pairs (n = 0) adds only its row count.
--
-- Numerics: the parallel update of Chan, Golub and LeVeque. For stored sums A and batch sums B
-- with n = nA + nB, w = nA nB / n, dx = x_mean(B) - x_mean(A), dy = y_mean(B) - y_mean(A):
--   x_mean = x_mean(A) + dx nB / n        sxx = sxxA + sxxB + w dx^2
--   y_mean = y_mean(A) + dy nB / n        sxy = sxyA + sxyB + w dx dy
--                                         syy = syyA + syyB + w dy^2
-- The residual sum of squares is carried, not recovered as syy - sxy^2 / sxx (which loses about
-- log10(1 / (1 - r2)) digits); with the slopes bA = sxyA / sxxA and bB = sxyB / sxxB it is
--   rss = rssA + rssB + (sxxA sxxB (bA - bB)^2 + w sxxA (dy - bA dx)^2
--                        + w sxxB (dy - bB dx)^2) / sxx,
-- exact algebra, where a term whose sxx is 0 is 0, and rss = rssA + rssB + w dy^2 when the merged
-- sxx is 0 (every x the same). Every piece of the correction is non-negative: no cancellation
-- between them. The rounding bound rss_noise adds up the sides' bounds and the bound of the
-- correction (64 units of rounding times sqrt(correction syy)). The means are kept in two parts,
-- x_mean + x_mean_lo: dx and dy take both, and the new mean's rounding error (Knuth's two-sum)
-- goes to its low part, so merge after merge the means stay as exact as one two-pass mean
-- (far from zero, rounding a mean to float64 costs eps |mean|, much more than the spread's).
-- For a fit through the origin (the slot __line__ holds sql/parts/line_origin.sql) the sums are
-- about the origin and simply add up: the weight w is 0, which leaves sxx = sxxA + sxxB (and so
-- on) and the correction sxxA sxxB (bA - bB)^2 / sxx, again exact; the means are plain, with no
-- low parts.
-- Group columns must not be named like a working column (na, nb, xa ... ylb, f, w, dx, dy, ba,
-- bb, x_sum, x_part, x_low, y_sum, y_part, y_low, correction).
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
        t.x_mean_lo AS xla,
        t.y_mean_lo AS yla,
        b.x_mean AS xb,
        b.y_mean AS yb,
        b.sxx AS sb,
        b.sxy AS pb,
        b.syy AS qb,
        b.rss AS rb,
        b.rss_noise AS eb,
        b.x_mean_lo AS xlb,
        b.y_mean_lo AS ylb,
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
        -- __line__.pool_weight: w, or 0 for sums about the origin
        __line__.pool_weight AS w,
        (xb - xa) + (xlb - xla) AS dx,
        (yb - ya) + (ylb - yla) AS dy,
        -- a side's slope; 0 when its sxx is 0, where its terms vanish anyway
        CASE WHEN sa > 0 THEN pa / sa ELSE 0.0 END AS ba,
        CASE WHEN sb > 0 THEN pb / sb ELSE 0.0 END AS bb
    FROM paired
    WHERE na > 0 AND nb > 0
),
merged AS (
    SELECT
        *,
        sa + sb + w * dx * dx AS sxx,
        pa + pb + w * dx * dy AS sxy,
        qa + qb + w * dy * dy AS syy,
        -- the new mean xa + dx f in two parts: the sum and its exact rounding error (two-sum)
        xa + dx * f AS x_sum,
        (xa + dx * f) - xa AS x_part,
        ya + dy * f AS y_sum,
        (ya + dy * f) - ya AS y_part
    FROM steps
),
means AS (
    SELECT
        *,
        xla + ((xa - (x_sum - x_part)) + (dx * f - x_part)) AS x_low,
        yla + ((ya - (y_sum - y_part)) + (dy * f - y_part)) AS y_low
    FROM merged
),
fix AS (
    SELECT
        *,
        CASE
            WHEN sxx > 0 THEN (
                CASE WHEN sa > 0 AND sb > 0 THEN sa * sb * (ba - bb) * (ba - bb) ELSE 0.0 END
                + CASE WHEN sa > 0 THEN w * sa * (dy - ba * dx) * (dy - ba * dx) ELSE 0.0 END
                + CASE WHEN sb > 0 THEN w * sb * (dy - bb * dx) * (dy - bb * dx) ELSE 0.0 END
            ) / sxx
            ELSE w * dy * dy
        END AS correction
    FROM means
)
SELECT
    __group__,
    na + nb AS n,
    n_rows,
    n_outside,
    __line__.pooled_x_mean AS x_mean,
    __line__.pooled_y_mean AS y_mean,
    sxx,
    sxy,
    syy,
    ra + rb + correction AS rss,
    x_min,
    x_max,
    y_min,
    y_max,
    ea + eb + pow(2.0, -46) * sqrt(correction * syy) AS rss_noise,
    -- what the rounded mean leaves out (fast two-sum)
    __line__.pooled_x_low AS x_mean_lo,
    __line__.pooled_y_low AS y_mean_lo
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
    CASE WHEN na = 0 THEN xlb ELSE xla END AS x_mean_lo,
    CASE WHEN na = 0 THEN ylb ELSE yla END AS y_mean_lo
FROM paired
WHERE na = 0 OR nb = 0
