-- The line through the origin, y = slope x, as crossing.sql projects it: the same expressions
-- as cross_intercept.sql with the centre at the origin, where the line is 0 with no error
-- (its standard error at x is slope_se |x|).
--   tl_cx, tl_cy, tl_cse  0, 0, 0
SELECT
    CAST(0 AS DOUBLE) AS tl_cx,
    CAST(0 AS DOUBLE) AS tl_cy,
    CAST(0 AS DOUBLE) AS tl_cse
