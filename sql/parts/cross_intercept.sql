-- Where the line with an intercept reaches the limit, by Fieller's method (crossing.sql). Reads
-- the group's x_mean, y_mean, sxx, n, slope, s = resid_sd, slope_se (g.), the t quantiles
-- t_level, t_bound (q.), and the working columns u0, g_level, g_bound, w_level, w_bound, no_line:
--   u0              (limit - y_mean) / slope: the crossing as an offset from x_mean
--   g_level         (t_level slope_se / slope)^2, and g_bound the same with t_bound
--   away            the line meets the limit before the group's first x
--   x_cross         x_mean + u0
--   w_level         (t s / |slope|) sqrt(u0^2 / sxx + (1 - g) / n), the half-width of the
--                   quadratic's roots at the level (w_bound at the bound); NULL for g >= 1
--   x_lo, x_hi      x_mean + (u0 -/+ w_level) / (1 - g_level)
--   x_bound         x_mean + (u0 - w_bound) / (1 - g_bound)
SELECT
    (CAST(__limit__ AS DOUBLE) - g.y_mean) / g.slope AS u0,
    (q.t_level * g.slope_se / g.slope) * (q.t_level * g.slope_se / g.slope) AS g_level,
    (q.t_bound * g.slope_se / g.slope) * (q.t_bound * g.slope_se / g.slope) AS g_bound,
    x_mean + u0 < x_min AS away,
    CASE WHEN no_line IS NULL THEN x_mean + u0 END AS x_cross,
    CASE
        WHEN no_line IS NULL AND g_level < 1 THEN (t_level * s / abs(slope))
            * sqrt(u0 * u0 / sxx + (1 - g_level) / n)
    END AS w_level,
    CASE
        WHEN no_line IS NULL AND g_bound < 1 THEN (t_bound * s / abs(slope))
            * sqrt(u0 * u0 / sxx + (1 - g_bound) / n)
    END AS w_bound,
    x_mean + (u0 - w_level) / (1 - g_level) AS x_lo,
    x_mean + (u0 + w_level) / (1 - g_level) AS x_hi,
    x_mean + (u0 - w_bound) / (1 - g_bound) AS x_bound
