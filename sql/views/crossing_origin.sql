-- Where each group's fitted line through the origin reaches the fit's limit: the crossing x with
-- a Fieller confidence interval by inverse regression, and the conservative one-sided 95% bound.

-- The twin of crossing.sql for fits through the origin (y = slope x), with the same columns in
-- the same order. One row per group of the fit view. Columns:
--   group columns   as in the fit view
--   cross_x         x where the fitted line reaches the limit: limit / slope
--   cross_lo, cross_hi
--                   confidence interval for that x at the fit's level (Fieller's method, below):
--                   every x whose confidence band of the mean line contains the limit
--   cross_bound     the conservative estimate of stability work (ICH Q1E shelf-life method): the
--                   x at which the one-sided 95% confidence bound of the mean line meets the
--                   limit, the lower bound when the slope falls toward a floor and the upper when
--                   it rises toward a ceiling. It is the earlier end of the two-sided 90% Fieller
--                   interval, so it comes before cross_x.
--   note            NULL when all four are given; otherwise why not (the x columns that cannot
--                   be given are NULL): 'no line: <fit status>' (too_few_points, x_all_zero,
--                   out_of_range), 'flat line never reaches the limit' (slope 0, as for
--                   y_all_zero), 'slope points away from the limit' (the line meets the limit
--                   before the group's first x or at a negative x: from there on it moves away
--                   from the limit; all NULL), 'slope not significant at alpha ...' (the fit's
--                   slope_p against its alpha; all NULL), 'interval unbounded at level ...'
--                   (cross_lo, cross_hi NULL), 'bound unbounded' (cross_bound NULL).
--
-- Fieller's method. The line is slope x, its standard error at x is slope_se |x| (slope_se^2 =
-- s^2 / sum(x^2), s = resid_sd), and the limit lies inside the band of critical value t where
-- (slope x - limit)^2 <= t^2 slope_se^2 x^2. The ends are the roots of
--     (slope^2 - t^2 slope_se^2) x^2 - 2 slope limit x + limit^2 = 0.
-- With x0 = limit / slope and r = t slope_se / |slope| (g = r^2) they are
--     x0 / (1 + r) and x0 / (1 - r),
-- a finite interval exactly when g < 1, that is when the slope differs from 0 at that level
-- (for g >= 1 the band contains the limit at every x beyond x0 / (1 + r)). Here x0 >= 0, so
-- cross_lo = x0 / (1 + r) and cross_hi = x0 / (1 - r). They use
-- t = tl_t_crit((1 - level) / 2, n - 1), cross_bound the smaller root with
-- t = tl_t_crit(0.05, n - 1) (n - 1 residual degrees of freedom: one parameter), NULL like
-- cross_hi when its g >= 1. A perfect fit (s = 0) gives cross_lo = cross_hi = cross_bound =
-- cross_x. The numbers come from the fit view of the same fit. Group columns must not be named
-- like a column of this view or a working column (n, x_min, slope, slope_se, slope_p, status,
-- t_level, t_bound, x0, r_level, r_bound, no_line, x_cross, x_lo, x_hi, x_bound).
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT
        __group__,
        n,
        x_min,
        slope,
        slope_se,
        slope_p,
        status
    FROM __fit_view__
),
quantiles AS MATERIALIZED (
    SELECT
        n,
        tl_t_crit((1 - __level__) / 2, n - 1) AS t_level,
        tl_t_crit(0.05, n - 1) AS t_bound
    FROM (SELECT DISTINCT n FROM groups WHERE n >= 2) AS sizes
),
setup AS (
    SELECT
        g.*,
        q.t_level,
        q.t_bound,
        CASE WHEN g.slope <> 0 THEN CAST(__limit__ AS DOUBLE) / g.slope END AS x0,
        CASE WHEN g.slope <> 0 THEN q.t_level * g.slope_se / abs(g.slope) END AS r_level,
        CASE WHEN g.slope <> 0 THEN q.t_bound * g.slope_se / abs(g.slope) END AS r_bound
    FROM groups AS g
    LEFT JOIN quantiles AS q USING (n)
),
judged AS (
    SELECT
        *,
        CASE
            WHEN status NOT IN ('ok', 'perfect_fit', 'y_all_zero') OR slope IS NULL
                THEN 'no line: ' || status
            WHEN slope = 0 THEN 'flat line never reaches the limit'
            WHEN x0 < x_min OR x0 < 0 THEN 'slope points away from the limit'
            WHEN status = 'ok' AND NOT slope_p < __alpha__
                THEN 'slope not significant at alpha ' || __alpha_text__
        END AS no_line
    FROM setup
),
ends AS (
    SELECT
        *,
        CASE WHEN no_line IS NULL THEN x0 END AS x_cross,
        CASE WHEN no_line IS NULL AND r_level < 1 THEN x0 / (1 + r_level) END AS x_lo,
        CASE WHEN no_line IS NULL AND r_level < 1 THEN x0 / (1 - r_level) END AS x_hi,
        CASE WHEN no_line IS NULL AND r_bound < 1 THEN x0 / (1 + r_bound) END AS x_bound
    FROM judged
)
SELECT
    __group__,
    CASE WHEN isfinite(x_cross) THEN x_cross END AS cross_x,
    CASE WHEN isfinite(x_lo) AND isfinite(x_hi) THEN x_lo END AS cross_lo,
    CASE WHEN isfinite(x_lo) AND isfinite(x_hi) THEN x_hi END AS cross_hi,
    CASE WHEN isfinite(x_bound) THEN x_bound END AS cross_bound,
    CASE
        WHEN no_line IS NOT NULL THEN no_line
        WHEN NOT isfinite(x_cross) THEN 'no line: out_of_range'
        ELSE nullif(concat_ws('; ',
            CASE
                WHEN NOT coalesce(isfinite(x_lo) AND isfinite(x_hi), false)
                    THEN 'interval unbounded at level ' || __level_text__
            END,
            CASE WHEN NOT coalesce(isfinite(x_bound), false) THEN 'bound unbounded' END
        ), '')
    END AS note
FROM ends
