-- Straight-line fit of y on x for every group and window (a calendar day, week or month of the
-- date field, or a fixed span of x): the statistics of the fit view, per window, with its bounds.

-- The window key is a part: sql/parts/window_calendar.sql for a fit with `window` (windows by
-- date_trunc of the date field, weeks starting on Monday; rows without a date belong to no
-- window), sql/parts/window_span.sql for a fit with `window_x` = w (windows [k w, (k + 1) w) with
-- k = floor(x / w); rows whose x is missing or not finite belong to no window).
-- One row per group and window that holds at least one row of it. Columns:
--   group columns   as in the fit view
--   window_start    first day of the window (a DATE), or k w (a DOUBLE)
--   window_end      first day after the window, or (k + 1) w: the window is
--                   [window_start, window_end)
--   n ... status    the columns of the fit view (fit.sql) with the same meaning and the same
--                   status rules (too_few_points, constant_x, out_of_range, constant_y,
--                   perfect_fit, ok), computed from the pairs of the window alone
--   x_mean, y_mean, sxx, sxy, syy, rss
--                   the window's centred sums as in the moments view (moments.sql): means,
--                   sum((x - x_mean)^2), sum((x - x_mean)(y - y_mean)), sum((y - y_mean)^2) and
--                   the residual sum of squares of its line (syy when every x is the same); NULL
--                   when the window has no counted pair or a sum overflows. The change view
--                   pools them.
-- A pair (x, y) counts when both values are present and finite. Group columns must not be named
-- like a column of this view (the spec refuses such names).
--
-- Composed of the fit view's pieces, keyed by group and window: the sums of each window's rows
-- come from the fragment __sums__ (sql/fragments/sums_intercept.sql, or sums_origin.sql for a fit
-- through the origin, whose x_mean ... rss are then taken about the origin as in its moments),
-- the statistics from __line_stats__ (sql/fragments/line_stats.sql), as in the fit view.
CREATE OR REPLACE VIEW __view__ AS
WITH windowed AS NOT MATERIALIZED (
    SELECT
        *,
        __window_key__.window_start AS tl_window
    FROM __source__
    WHERE __window_key__.in_window
),
sums AS MATERIALIZED (
    SELECT * FROM __sums__ AS windowed
),
stats AS MATERIALIZED (
    SELECT * FROM __line_stats__ AS sums
)
SELECT
    g.__group__,
    g.window_start,
    __window_key__.window_end AS window_end,
    g.n,
    g.x_min,
    g.x_max,
    f.slope,
    f.intercept,
    f.r2,
    f.r2_adj,
    f.resid_sd,
    f.slope_se,
    f.intercept_se,
    f.slope_t,
    f.slope_p,
    f.slope_lo,
    f.slope_hi,
    f.intercept_lo,
    f.intercept_hi,
    f.status,
    -- sums that overflowed are NULL, never inf or NaN
    CASE WHEN isfinite(g.x_mean) THEN g.x_mean END AS x_mean,
    CASE WHEN isfinite(g.y_mean) THEN g.y_mean END AS y_mean,
    CASE WHEN isfinite(g.sxx) THEN g.sxx END AS sxx,
    CASE WHEN isfinite(g.sxy) THEN g.sxy END AS sxy,
    CASE WHEN isfinite(g.syy) THEN g.syy END AS syy,
    CASE WHEN isfinite(g.rss) THEN g.rss END AS rss
FROM (SELECT *, tl_window AS window_start FROM sums) AS g
JOIN stats AS f ON f.gid = g.gid
