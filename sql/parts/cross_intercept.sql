-- Where the line with an intercept reaches the limit, by Fieller's method (crossing.sql). Reads
-- the group's line centre_x, centre_y, centre_se, slope, slope_se, from_x (g., from
-- sql/fragments/line_since_bend.sql or line_whole.sql), the t quantiles t_level, t_bound (q.),
-- and the working columns u0, g_level, g_bound, w_level, w_bound, no_line:
--   u0              (limit - centre_y) / slope: the crossing as an offset from centre_x
--   g_level         (t_level slope_se / slope)^2, and g_bound the same with t_bound
--   away            the line meets the limit before the line's first x (from_x)
--   x_cross         centre_x + u0
--   w_level         (t / |slope|) sqrt(slope_se^2 u0^2 + centre_se^2 (1 - g)), the half-width
--                   of the quadratic's roots at the level (w_bound at the bound); NULL for g >= 1
--   x_lo, x_hi      centre_x + (u0 -/+ w_level) / (1 - g_level)
--   x_bound         centre_x + (u0 - w_bound) / (1 - g_bound)
--   x_bound_far     centre_x + (u0 + w_bound) / (1 - g_bound), the other end of the bound's
--                   90% interval (the bound of a reciprocal x, sql/parts/back_reciprocal.sql)
SELECT
    (CAST(__limit__ AS DOUBLE) - g.centre_y) / g.slope AS u0,
    (q.t_level * g.slope_se / g.slope) * (q.t_level * g.slope_se / g.slope) AS g_level,
    (q.t_bound * g.slope_se / g.slope) * (q.t_bound * g.slope_se / g.slope) AS g_bound,
    centre_x + u0 < from_x AS away,
    CASE WHEN no_line IS NULL THEN centre_x + u0 END AS x_cross,
    CASE
        WHEN no_line IS NULL AND g_level < 1 THEN (t_level / abs(slope))
            * sqrt(slope_se * slope_se * u0 * u0 + centre_se * centre_se * (1 - g_level))
    END AS w_level,
    CASE
        WHEN no_line IS NULL AND g_bound < 1 THEN (t_bound / abs(slope))
            * sqrt(slope_se * slope_se * u0 * u0 + centre_se * centre_se * (1 - g_bound))
    END AS w_bound,
    centre_x + (u0 - w_level) / (1 - g_level) AS x_lo,
    centre_x + (u0 + w_level) / (1 - g_level) AS x_hi,
    centre_x + (u0 - w_bound) / (1 - g_bound) AS x_bound,
    centre_x + (u0 + w_bound) / (1 - g_bound) AS x_bound_far
