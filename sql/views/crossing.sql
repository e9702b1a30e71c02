-- Where each group's line reaches each limit of the fit, from the line that holds now (since the
-- last significant bend, else the whole history; through the origin, the whole history): one
-- row per group and side, with the crossing x of the mean line, its Fieller confidence interval
-- by inverse regression, the conservative one-sided 95% bound and the ICH Q1E extrapolation
-- rule.

-- The line comes from the fragment __line_now__: sql/fragments/line_since_bend.sql (the bend
-- view, for a fit with an intercept) or line_whole.sql (the fit view: a fit through the origin,
-- or an engine without the bend view). The slot __cross__ writes it as cy + slope (x - cx) with
-- standard error se(x) = sqrt(cse^2 + slope_se^2 (x - cx)^2): cross_intercept.sql (the segment's
-- centre) or cross_origin.sql (cx = cy = cse = 0: y = slope x, se(x) = slope_se |x|).
-- A fit whose x or y is a form (x = "ln(col)" ...) fits the line on that scale: the limit,
-- given in y's own units, is taken through y's form (only `limit` is: the spec refuses lower,
-- upper and relative limits on a form of y), and cross_x, cross_lo, cross_hi, cross_bound and
-- from_x are mapped back to x's own units through the slot __x_back__ (sql/parts/back_*.sql;
-- for reciprocal(x) the ends swap and the bound comes from the far end of its 90% interval).
-- limit_value, start_y, latest_x, line_at_latest, extrapolation_end and the note stay on the
-- fit's scale.
-- Columns:
--   group columns   as in the fit view
--   side            'lower' (a floor) or 'upper' (a ceiling). A fit's `limit` is the side the
--                   slope points to: 'lower' when the line falls, 'upper' when it rises; for
--                   a flat line (or none) the side the limit lies on
--   limit_value     the limit: the spec's number, or its fraction of start_y
--   start_y         the group's first reading: the mean of its y at its smallest x (whole
--                   history), what a relative limit ({ fraction = 0.8, of = "start" }) scales
--   line_at_latest  the line that holds now at latest_x (the group's largest x)
--   past            the line is past the limit at latest_x (below a floor, above a ceiling)
--   cross_x         x where the line reaches the limit, given when the slope points to it
--                   (it may lie before latest_x: the line is past the limit already, or even
--                   before from_x); NULL when the slope points away or is 0
--   cross_lo, cross_hi
--                   confidence interval for that x at the fit's level (Fieller's method, below):
--                   every x whose confidence band of the mean line contains the limit; NULL
--                   when it is unbounded (the slope does not differ from 0 at that level)
--   cross_bound     the conservative estimate of stability work (ICH Q1E shelf-life method): the
--                   x at which the one-sided 95% confidence bound of the mean line (the lower
--                   bound for a floor, the upper for a ceiling) leaves the limit, whether the
--                   slope is significant or not. Given whenever that happens after the bound was
--                   inside (the bound is concave toward the limit, so it is inside on one
--                   stretch of x at most, and cross_bound is the stretch's end); it comes before
--                   cross_x. NULL when the bound never leaves (slope significantly away from
--                   the limit) or is never inside.
--   extrapolation_end
--                   the farthest x a projection is supported to by the ICH Q1E rule for data that
--                   show little change: up to twice the period covered, no more than
--                   extrapolation_cap beyond it (ICH Q1E gives 12 months; no cap when the spec
--                   gives none): latest_x + least(latest_x - x_min, extrapolation_cap), x_min
--                   the group's first x
--   note            NULL when nothing needs saying, else '; '-joined: 'no line: <fit status>'
--                   (all x columns NULL), 'flat line never reaches the limit', 'slope points
--                   away from the limit', 'slope not significant at alpha ...' (the
--                   projection stands; read it with that in mind), 'past the limit at the
--                   latest x', 'interval unbounded at level ...', 'bound never inside the
--                   limit', 'extrapolated: beyond extrapolation_end (ICH Q1E rule)' (the
--                   projection, cross_bound or else cross_x, lies beyond extrapolation_end)
--   basis           'since_bend' when the line is the current segment's (a significant bend),
--                   'whole' when it is the whole history's
--   from_x          the first x of that line: the bend, or the group's first x
--
-- The roots. With u = x - cx, the headroom d = cy - limit for a floor (limit - cy for a ceiling)
-- and s = slope for a floor (-slope for a ceiling), the band of critical value t holds the limit
-- where (d + s u)^2 <= t^2 (cse^2 + slope_se^2 u^2), a quadratic a u^2 + 2 s d u + c <= 0 with
-- a = s^2 - t^2 slope_se^2, c = d^2 - t^2 cse^2, whose roots are
--     u = (-s d -/+ t sqrt(D)) / a,   D = slope_se^2 d^2 + cse^2 a.
-- When a > 0 (the slope differs from 0 at that level) the roots are Fieller's ends (cross_lo,
-- cross_hi with t = tl_t_crit((1 - level) / 2, df)). The bound side, d + s u - t se(u), is
-- concave; with t = tl_t_crit(0.05, df) and s < t slope_se (not significantly away) it ends
-- below the limit, and the end of its stretch inside is the root (-s d - t sqrt(D)) / a for
-- either sign of a (for a < 0 only when d + s u >= 0 there, else it is never inside). df is the
-- line's residual degrees of freedom. A perfect fit gives cross_lo = cross_hi = cross_bound =
-- cross_x.
CREATE OR REPLACE VIEW __view__ AS
WITH lines AS MATERIALIZED (
    SELECT l.*, f.x_min AS tl_first_x, f.x_max AS latest_x
    FROM __line_now__ AS l
    JOIN __fit_view__ AS f ON ROW(f.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
),
starts AS MATERIALIZED (
    SELECT s.__group__, avg(CAST(s.__y__ AS DOUBLE)) AS start_y
    FROM __source__ AS s
    JOIN lines AS l ON ROW(s.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
        AND s.__x__ = l.tl_first_x
    GROUP BY s.__group__
),
sides AS (
    SELECT 'lower' AS tl_side, CAST(__lower_value_or_null__ AS DOUBLE) AS tl_value,
        CAST(__lower_fraction_or_null__ AS DOUBLE) AS tl_fraction
    UNION ALL
    SELECT 'upper', CAST(__upper_value_or_null__ AS DOUBLE),
        CAST(__upper_fraction_or_null__ AS DOUBLE)
    UNION ALL
    SELECT 'slope', CAST(__limit_or_null__ AS DOUBLE), CAST(NULL AS DOUBLE)
),
quantiles AS MATERIALIZED (
    SELECT
        df,
        tl_t_crit((1 - __level__) / 2, df) AS t_level,
        tl_t_crit(0.05, df) AS t_bound
    FROM (SELECT DISTINCT df FROM lines WHERE df >= 1) AS sizes
),
groups AS (
    SELECT
        l.*,
        CASE
            WHEN s.tl_side <> 'slope' THEN s.tl_side
            WHEN l.slope < 0 THEN 'lower'
            WHEN l.slope > 0 THEN 'upper'
            -- no slope to follow: the side the limit lies on
            WHEN s.tl_value < l.centre_y THEN 'lower'
            ELSE 'upper'
        END AS side,
        coalesce(s.tl_value, s.tl_fraction * st.start_y) AS limit_value,
        st.start_y,
        q.t_level,
        q.t_bound
    FROM lines AS l
    CROSS JOIN sides AS s
    LEFT JOIN starts AS st ON ROW(st.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
    LEFT JOIN quantiles AS q ON q.df = l.df
    WHERE s.tl_value IS NOT NULL OR s.tl_fraction IS NOT NULL
),
setup AS (
    SELECT
        g.*,
        __cross__.tl_cx AS tl_cx,
        __cross__.tl_cy AS tl_cy,
        __cross__.tl_cse AS tl_cse
    FROM groups AS g
),
mirrored AS (
    SELECT
        *,
        -- a ceiling is a floor seen upside down
        CASE WHEN side = 'lower' THEN tl_cy - limit_value ELSE limit_value - tl_cy END AS tl_d,
        CASE WHEN side = 'lower' THEN slope ELSE -slope END AS tl_s,
        CASE
            WHEN status NOT IN ('ok', 'perfect_fit', __line__.no_spread) OR slope IS NULL
                OR limit_value IS NULL OR t_bound IS NULL
                THEN 'no line: ' || status
        END AS no_line
    FROM setup
),
quadratic AS (
    SELECT
        *,
        tl_s * tl_s - t_level * t_level * slope_se * slope_se AS tl_a_level,
        tl_s * tl_s - t_bound * t_bound * slope_se * slope_se AS tl_a_bound
    FROM mirrored
),
roots AS (
    SELECT
        *,
        slope_se * slope_se * tl_d * tl_d + tl_cse * tl_cse * tl_a_level AS tl_disc_level,
        slope_se * slope_se * tl_d * tl_d + tl_cse * tl_cse * tl_a_bound AS tl_disc_bound,
        tl_cy + slope * (latest_x - tl_cx) AS line_at_latest
    FROM quadratic
),
ends AS (
    SELECT
        *,
        CASE WHEN no_line IS NULL AND tl_s < 0 THEN tl_cx - tl_d / tl_s END AS tl_x,
        CASE
            WHEN no_line IS NULL AND tl_s < 0 AND tl_a_level > 0
                THEN tl_cx + (-tl_s * tl_d - t_level * sqrt(tl_disc_level)) / tl_a_level
        END AS tl_lo,
        CASE
            WHEN no_line IS NULL AND tl_s < 0 AND tl_a_level > 0
                THEN tl_cx + (-tl_s * tl_d + t_level * sqrt(tl_disc_level)) / tl_a_level
        END AS tl_hi,
        CASE
            WHEN no_line IS NULL AND tl_s < t_bound * slope_se AND tl_a_bound <> 0
                AND tl_disc_bound >= 0
                THEN (-tl_s * tl_d - t_bound * sqrt(tl_disc_bound)) / tl_a_bound
        END AS tl_u_bound
    FROM roots
),
judged AS (
    SELECT
        *,
        CASE
            WHEN tl_a_bound > 0 OR tl_d + tl_s * tl_u_bound >= 0 THEN tl_cx + tl_u_bound
        END AS tl_bound,
        -- the other end of the bound's 90% interval (the bound of a reciprocal x)
        CASE
            WHEN tl_u_bound IS NOT NULL AND tl_a_bound > 0
                THEN tl_cx + (-tl_s * tl_d + t_bound * sqrt(tl_disc_bound)) / tl_a_bound
        END AS tl_bound_far,
        CASE
            WHEN extrapolation_cap IS NULL OR latest_x - tl_first_x <= extrapolation_cap
                THEN latest_x + (latest_x - tl_first_x)
            ELSE latest_x + extrapolation_cap
        END AS extrapolation_end
    FROM (SELECT *, CAST(__extrapolation_cap_or_null__ AS DOUBLE) AS extrapolation_cap
          FROM ends) AS tl_capped
)
SELECT
    __group__,
    side,
    limit_value,
    start_y,
    latest_x,
    line_at_latest,
    no_line IS NULL AND CASE WHEN side = 'lower' THEN line_at_latest < limit_value
        ELSE line_at_latest > limit_value END AS past,
    -- __x_back__ (sql/parts/back_*.sql): from the fit's scale back to x's own units
    CASE WHEN isfinite(tl_x) THEN __x_back__.cross_x END AS cross_x,
    CASE WHEN isfinite(tl_lo) AND isfinite(tl_hi) THEN __x_back__.cross_lo END AS cross_lo,
    CASE WHEN isfinite(tl_lo) AND isfinite(tl_hi) THEN __x_back__.cross_hi END AS cross_hi,
    CASE WHEN isfinite(tl_bound) THEN __x_back__.cross_bound END AS cross_bound,
    extrapolation_end,
    CASE
        WHEN no_line IS NOT NULL THEN no_line
        ELSE nullif(concat_ws('; ',
            CASE WHEN slope = 0 THEN 'flat line never reaches the limit' END,
            CASE WHEN tl_s > 0 THEN 'slope points away from the limit' END,
            CASE
                WHEN status = 'ok' AND NOT slope_p < __alpha__
                    THEN 'slope not significant at alpha ' || __alpha_text__
            END,
            CASE
                WHEN CASE WHEN side = 'lower' THEN line_at_latest < limit_value
                    ELSE line_at_latest > limit_value END
                    THEN 'past the limit at the latest x'
            END,
            CASE
                WHEN tl_s < 0 AND NOT coalesce(isfinite(tl_lo) AND isfinite(tl_hi), false)
                    THEN 'interval unbounded at level ' || __level_text__
            END,
            CASE
                WHEN tl_s < t_bound * slope_se AND NOT coalesce(isfinite(tl_bound), false)
                    THEN 'bound never inside the limit'
            END,
            CASE
                WHEN coalesce(tl_bound, tl_x) > extrapolation_end
                    THEN 'extrapolated: beyond extrapolation_end (ICH Q1E rule)'
            END
        ), '')
    END AS note,
    basis,
    __x_back__.from_x AS from_x
FROM (
    -- the names the back_*.sql parts read
    SELECT *, tl_x AS x_cross, tl_lo AS x_lo, tl_hi AS x_hi, tl_bound AS x_bound,
        tl_bound_far AS x_bound_far
    FROM judged
) AS tl_onscale
