-- Where each group's line reaches the fit's limit, from the line that holds now (since the last
-- significant bend, else the whole history; through the origin, the whole history): the
-- crossing x with a Fieller confidence interval by inverse regression, and the conservative
-- one-sided 95% bound.

-- The line comes from the fragment __line_now__: sql/fragments/line_since_bend.sql (the bend
-- view, for a fit with an intercept) or line_whole.sql (the fit view: a fit through the origin,
-- or an engine without the bend view). The crossing and its ends come from the slot __cross__
-- (cross_intercept.sql, or cross_origin.sql for y = slope x: cross_x = limit / slope, n - 1
-- degrees of freedom, 'slope points away' also for a crossing at a negative x). Below, the line
-- with an intercept.
-- A fit whose x or y is a form (x = "ln(col)" ...) fits the line on that scale: the limit,
-- given in y's own units, is taken through y's form, and the crossing, its interval ends, the
-- bound and from_x are mapped back to x's own units through the slot __x_back__
-- (sql/parts/back_*.sql; for reciprocal(x) the ends swap). The note speaks of the fit's scale.
-- One row per group of the fit view. Columns:
--   group columns   as in the fit view
--   cross_x         x where the line reaches the limit: centre_x + (limit - centre_y) / slope
--   cross_lo, cross_hi
--                   confidence interval for that x at the fit's level (Fieller's method, below):
--                   every x whose confidence band of the mean line contains the limit
--   cross_bound     the conservative estimate of stability work (ICH Q1E shelf-life method): the
--                   x at which the one-sided 95% confidence bound of the mean line meets the
--                   limit, the lower bound when the slope falls toward a floor and the upper when
--                   it rises toward a ceiling. It is the earlier end of the two-sided 90% Fieller
--                   interval, so it comes before cross_x.
--   note            NULL when all four are given; otherwise why not (the x columns that cannot
--                   be given are NULL): 'no line: <fit status>' (too_few_points, constant_x,
--                   out_of_range), 'flat line never reaches the limit', 'slope points away from
--                   the limit' (the line meets the limit before the line's first x: it was
--                   beyond the limit where the data begin and moves away from it; all NULL),
--                   'slope not significant at alpha ...' (the fit's slope_p
--                   against its alpha; all NULL), 'interval unbounded at level ...'
--                   (cross_lo, cross_hi NULL), 'bound unbounded' (cross_bound NULL).
--   basis           'since_bend' when the line is the current segment's (a significant bend),
--                   'whole' when it is the whole history's
--   from_x          the first x of that line: the bend, or the group's first x
--
-- Fieller's method. With u = x - centre_x the line is centre_y + slope u, its standard error at
-- u is sqrt(centre_se^2 + slope_se^2 u^2) (for the whole history centre_x = x_mean,
-- centre_y = y_mean, centre_se = s / sqrt(n), slope_se = s / sqrt(sxx), s = resid_sd), and the
-- limit lies inside the band of critical value t where
-- (slope u - c)^2 <= t^2 (centre_se^2 + slope_se^2 u^2), c = limit - centre_y. The ends are the
-- roots of that quadratic. With u0 = c / slope and g = (t slope_se / slope)^2,
--     u = (u0 -/+ (t / |slope|) sqrt(slope_se^2 u0^2 + centre_se^2 (1 - g))) / (1 - g),
-- a finite interval exactly when g < 1, that is when the slope differs from 0 at that level.
-- cross_lo and cross_hi use t = tl_t_crit((1 - level) / 2, df), cross_bound the smaller root
-- with t = tl_t_crit(0.05, df), df the line's residual degrees of freedom (n - 2 for the whole
-- history). A perfect fit (no residual) gives cross_lo = cross_hi = cross_bound = cross_x.
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT * FROM __line_now__ AS line_now
),
quantiles AS MATERIALIZED (
    SELECT
        df,
        tl_t_crit((1 - __level__) / 2, df) AS t_level,
        tl_t_crit(0.05, df) AS t_bound
    FROM (SELECT DISTINCT df FROM groups WHERE df >= 1) AS sizes
),
setup AS (
    SELECT
        g.*,
        q.t_level,
        q.t_bound,
        __cross__.u0 AS u0,
        __cross__.g_level AS g_level,
        __cross__.g_bound AS g_bound
    FROM groups AS g
    LEFT JOIN quantiles AS q USING (df)
),
judged AS (
    SELECT
        *,
        CASE
            WHEN status NOT IN ('ok', 'perfect_fit', __line__.no_spread) OR slope IS NULL
                THEN 'no line: ' || status
            WHEN slope = 0 THEN 'flat line never reaches the limit'
            WHEN __cross__.away THEN 'slope points away from the limit'
            WHEN status = 'ok' AND NOT slope_p < __alpha__
                THEN 'slope not significant at alpha ' || __alpha_text__
        END AS no_line
    FROM setup
),
roots AS (
    SELECT
        *,
        __cross__.x_cross AS x_cross,
        __cross__.w_level AS w_level,
        __cross__.w_bound AS w_bound
    FROM judged
),
ends AS (
    SELECT
        *,
        __cross__.x_lo AS x_lo,
        __cross__.x_hi AS x_hi,
        __cross__.x_bound AS x_bound,
        __cross__.x_bound_far AS x_bound_far
    FROM roots
)
SELECT
    __group__,
    -- __x_back__ (sql/parts/back_*.sql): from the fit's scale back to x's own units
    CASE WHEN isfinite(x_cross) THEN __x_back__.cross_x END AS cross_x,
    CASE WHEN isfinite(x_lo) AND isfinite(x_hi) THEN __x_back__.cross_lo END AS cross_lo,
    CASE WHEN isfinite(x_lo) AND isfinite(x_hi) THEN __x_back__.cross_hi END AS cross_hi,
    CASE WHEN isfinite(x_bound) THEN __x_back__.cross_bound END AS cross_bound,
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
    END AS note,
    basis,
    __x_back__.from_x AS from_x
FROM ends
