-- Chow test for a break in each group's line at a given x, as a table macro: call it with the x,
-- e.g. SELECT * FROM fit_<name>_break(300).

-- One row per group. The pairs with x < the given x ("below") and x >= it ("above") each get
-- their own least-squares line; the test asks whether two lines fit significantly better than
-- one. Columns:
--   group columns   as in the fit view
--   n_below         counted pairs with x below the given x
--   n_above         counted pairs with x at or above it
--   f               Chow's F = ((rss_one - rss_two) / 2) / (rss_two / (n - 4)), where rss_one is
--                   the residual sum of squares of one line through all pairs and rss_two the sum
--                   of those of the two separate lines
--   df1             2 (a second line adds an intercept and a slope)
--   df2             n - 4 (f, df1, df2 and p are NULL when the test cannot be made)
--   p               P(F(2, df2) > f), the upper tail of the F distribution
--   note            NULL when the test could be made, else why not: 'too few points' (needs
--                   n >= 5), 'too few points below' / 'too few points above' (each side needs
--                   two different x), 'lines fit exactly' (rss_two is within its rounding error),
--                   'out of range'
--
-- The F tail. For df1 = 2 the F distribution has the closed form P(F > f) = (1 + 2 f / df2)^
-- (-df2 / 2); with 1 + 2 f / df2 = rss_one / rss_two this is (rss_two / rss_one)^(df2 / 2),
-- exact, with no series or quantile macro. (For other df1 the tail would be the regularised
-- incomplete beta function that the Student t macros evaluate; df1 is always 2 here.)
--
-- Numerics. Each side is summed by the moments' own fragment __sums__ keyed by group and side
-- (sql/fragments/sums_intercept.sql: anchored compensated sums, residuals against a first slope). The pooled line comes from the two sides' sums, and
-- rss_one - rss_two splits exactly into sums of squares that do not cancel: with B the pooled
-- slope, X, Y the pooled means and dx_k = x_mean_k - X, dy_k = y_mean_k - Y,
--     rss_one - rss_two = sum over the sides of (slope_k - B)^2 sxx_k + n_k (dy_k - B dx_k)^2.
CREATE OR REPLACE MACRO __view__(tl_at) AS TABLE
WITH sided AS NOT MATERIALIZED (
    -- the pairs that count, each on its side of the given x
    SELECT *, CAST(__x__ AS DOUBLE) >= tl_at AS tl_above
    FROM __source__
    WHERE isfinite(CAST(__x__ AS DOUBLE)) AND isfinite(CAST(__y__ AS DOUBLE))
),
sums AS MATERIALIZED (
    SELECT * FROM __sums__ AS sided
),
lines AS (
    SELECT
        __group__,
        tl_above AS above,
        n,
        x_min < x_max AS spread,
        x_mean,
        y_mean,
        CASE WHEN x_min < x_max THEN sxx END AS sxx,
        CASE WHEN x_min < x_max THEN sxy END AS sxy,
        CASE WHEN x_min < x_max AND sxx > 0 THEN sxy / sxx END AS slope,
        CASE WHEN x_min < x_max AND sxx > 0 THEN rss END AS rss,
        rss_noise
    FROM sums
),
groups AS (
    SELECT DISTINCT __group__ FROM __source__
),
paired AS (
    SELECT
        k.__group__,
        coalesce(lo.n, 0) AS n_below,
        coalesce(hi.n, 0) AS n_above,
        coalesce(lo.n, 0) + coalesce(hi.n, 0) AS n,
        lo.spread AND hi.spread AS both_spread,
        lo.n AS n1, lo.x_mean AS x1, lo.y_mean AS y1, lo.sxx AS sxx1, lo.sxy AS sxy1,
        lo.slope AS b1, lo.rss AS rss1, lo.rss_noise AS noise1,
        hi.n AS n2, hi.x_mean AS x2, hi.y_mean AS y2, hi.sxx AS sxx2, hi.sxy AS sxy2,
        hi.slope AS b2, hi.rss AS rss2, hi.rss_noise AS noise2
    FROM groups AS k
    LEFT JOIN lines AS lo
        ON ROW(lo.__group__) IS NOT DISTINCT FROM ROW(k.__group__) AND NOT lo.above
    LEFT JOIN lines AS hi
        ON ROW(hi.__group__) IS NOT DISTINCT FROM ROW(k.__group__) AND hi.above
),
pooled AS (
    SELECT
        *,
        (n1 * x1 + n2 * x2) / n AS x_all,
        (n1 * y1 + n2 * y2) / n AS y_all
    FROM paired
),
pooled_line AS (
    SELECT
        *,
        (sxy1 + sxy2 + n1 * (x1 - x_all) * (y1 - y_all) + n2 * (x2 - x_all) * (y2 - y_all))
        / (sxx1 + sxx2 + n1 * (x1 - x_all) * (x1 - x_all) + n2 * (x2 - x_all) * (x2 - x_all))
            AS b_all
    FROM pooled
),
extra AS (
    SELECT
        *,
        rss1 + rss2 AS rss_two,
        (b1 - b_all) * (b1 - b_all) * sxx1 + (b2 - b_all) * (b2 - b_all) * sxx2
        + n1 * ((y1 - y_all) - b_all * (x1 - x_all)) * ((y1 - y_all) - b_all * (x1 - x_all))
        + n2 * ((y2 - y_all) - b_all * (x2 - x_all)) * ((y2 - y_all) - b_all * (x2 - x_all))
            AS rss_gain
    FROM pooled_line
),
tested AS (
    SELECT
        *,
        CASE
            WHEN n < 5 THEN 'too few points'
            WHEN NOT coalesce(n1 >= 2 AND sxx1 > 0, false) THEN 'too few points below'
            WHEN NOT coalesce(n2 >= 2 AND sxx2 > 0, false) THEN 'too few points above'
            WHEN NOT (isfinite(rss_two) AND isfinite(rss_gain) AND isfinite(noise1 + noise2))
                THEN 'out of range'
            WHEN rss_two <= noise1 + noise2 THEN 'lines fit exactly'
        END AS why_not
    FROM extra
)
SELECT
    __group__,
    n_below,
    n_above,
    CASE WHEN why_not IS NULL THEN (rss_gain / 2) / (rss_two / (n - 4)) END AS f,
    CASE WHEN why_not IS NULL THEN CAST(2 AS BIGINT) END AS df1,
    CASE WHEN why_not IS NULL THEN CAST(n - 4 AS BIGINT) END AS df2,
    CASE
        WHEN why_not IS NULL THEN power(rss_two / (rss_two + rss_gain), (n - 4) / 2.0)
    END AS p,
    why_not AS note
FROM tested
