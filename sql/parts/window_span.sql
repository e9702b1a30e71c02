-- Window key by span of x: for window_x = w a row's window is [k w, (k + 1) w) with
-- k = floor(x / w); a row whose x is missing or not finite belongs to no window.
--   window_start  k w, a DOUBLE
--   in_window     whether the row belongs to a window
--   window_end    (k + 1) w for the window whose start is g.window_start
SELECT
    floor(CAST(__x__ AS DOUBLE) / __window_x__) * __window_x__ AS window_start,
    isfinite(CAST(__x__ AS DOUBLE)) AS in_window,
    g.window_start + __window_x__ AS window_end
