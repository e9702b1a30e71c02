-- Window key by calendar: a row's window is the day, week or month of the fit's date field
-- (date_trunc, weeks starting on Monday); rows without a date belong to no window.
--   window_start  first day of the row's window, a DATE
--   in_window     whether the row belongs to a window
--   window_end    first day after the window whose start is g.window_start, a DATE
SELECT
    CAST(date_trunc(CAST(__window__ AS VARCHAR), __window_field__) AS DATE) AS window_start,
    __window_field__ IS NOT NULL AS in_window,
    CAST(g.window_start + CAST('1 ' || __window__ AS INTERVAL) AS DATE) AS window_end
