-- Where the line through the origin, y = slope x, reaches the limit (crossing.sql): the same
-- expressions as cross_intercept.sql. The line's standard error at x is slope_se |x|, so the
-- band contains the limit where (slope x - limit)^2 <= t^2 slope_se^2 x^2, whose roots are
-- x0 / (1 + r) and x0 / (1 - r) with x0 = limit / slope and r = t slope_se / |slope| (a finite
-- interval exactly when r < 1). Here the working columns hold:
--   u0              x0 = limit / slope (NULL for slope 0)
--   g_level         r at the level, and g_bound r at the bound
--   away            the line meets the limit before the line's first x (from_x) or at a
--                   negative x
--   x_cross         x0
--   w_level, w_bound  not needed (NULL): the ends are quotients
--   x_lo, x_hi      x0 / (1 + r) and x0 / (1 - r) (x0 >= 0 once away is false)
--   x_bound         x0 / (1 + r) with r at the bound
--   x_bound_far     x0 / (1 - r) with r at the bound, the other end of the bound's 90% interval
SELECT
    CASE WHEN g.slope <> 0 THEN CAST(__limit__ AS DOUBLE) / g.slope END AS u0,
    CASE WHEN g.slope <> 0 THEN q.t_level * g.slope_se / abs(g.slope) END AS g_level,
    CASE WHEN g.slope <> 0 THEN q.t_bound * g.slope_se / abs(g.slope) END AS g_bound,
    u0 < from_x OR u0 < 0 AS away,
    CASE WHEN no_line IS NULL THEN u0 END AS x_cross,
    CAST(NULL AS DOUBLE) AS w_level,
    CAST(NULL AS DOUBLE) AS w_bound,
    CASE WHEN no_line IS NULL AND g_level < 1 THEN u0 / (1 + g_level) END AS x_lo,
    CASE WHEN no_line IS NULL AND g_level < 1 THEN u0 / (1 - g_level) END AS x_hi,
    CASE WHEN no_line IS NULL AND g_bound < 1 THEN u0 / (1 + g_bound) END AS x_bound,
    CASE WHEN no_line IS NULL AND g_bound < 1 THEN u0 / (1 - g_bound) END AS x_bound_far
