-- What needs a look today: one row per group and reason (too_few_points, x_went_back, low_r2,
-- not_straight, outliers, unlike_fleet, slope_changed, bent, out_of_trend, silent,
-- crossing_soon, out_of_limits), with a short detail and the group's latest x and date.

-- Columns:
--   fit_name        the fit's name (so the alerts of several fits can be stacked)
--   unit_label      the group values as text joined by ' / ' (a NULL value written NULL)
--   group columns   as in the fit view
--   reason          one of the words below
--   severity        1 too_few_points, 2 x_went_back, 3 low_r2, 4 not_straight, 5 outliers, 6
--                   unlike_fleet, 7 slope_changed, 8 bent, 9 out_of_trend, 10 silent, 11
--                   crossing_soon, 12 out_of_limits (the order `trendledger watch --fail-on` uses)
--   detail          the numbers behind the reason, in words, e.g. 'r2 0.773 < 0.9'
--   latest_x        the x of the group's latest reading in time (by the date field when the
--                   spec has one, then by file, then by its order in the file); not the
--                   largest x, which differs after a counter reset
--   latest_date     the group's latest value of the spec's first date or timestamp field, NULL
--                   when the spec has none
-- Reasons:
--   too_few_points  the fit's status is too_few_points (fewer than 3 pairs)
--   x_went_back     x decreases from one reading to the next in time (a counter reset): the
--                   detail counts the falls and shows the largest
--   silent          only when the fit sets silent_after = N: the group has no rows in the
--                   last N batches that brought rows to its fleet (the fit's fleet columns;
--                   without them, the fit), while those batches brought rows to other units
--   low_r2          only when the fit sets min_r2 (unset by default): the fit's r2 is below it.
--                   A flat trend inside its noise has an r2 near 0 and nothing wrong with it.
--   not_straight    the readings do not follow a straight line: the quadratic term's t test of
--                   the straight view (a lack-of-fit test against a curve) at the fit's alpha,
--                   judged across the units as the outlier p-values are
--   outliers        rows of the points view fail the Bonferroni outlier test on externally
--                   studentised residuals at alpha_outliers; the group's p is its smallest
--                   outlier_p. With error_control 'fdr' (the default) the groups' p-values are
--                   judged together (Benjamini-Hochberg, below) and the rows flagged are those
--                   whose outlier_p is at most the step-up cut alpha k / m; with 'unit' each
--                   group on its own (outlier_p < alpha_outliers). The detail gives the raw p
--                   and, with 'fdr', the adjusted one and the number of groups tested.
--   slope_changed   only when the fit has a change view (a window or window_x): the latest
--                   window's slope differs from the slope of all earlier data, difference_p
--                   judged at alpha_change as the outlier p-values are (raw and adjusted p in
--                   the detail)
--   out_of_trend    only for a fit with an intercept: readings of the fit's latest batch lie
--                   outside the prediction interval of the group's line through its earlier
--                   readings (the trend view); the group's p is k times its smallest trend_p
--                   (Bonferroni over its k readings in the batch), judged at alpha_trend as the
--                   outlier p-values are
--   bent            only when the fit has a bend view (a fit with an intercept): it found a
--                   significant bend (bends > 0), the line since then is
--                   the one that holds now, e.g. 'the line bent at x = 229: slope -0.00012
--                   before, -0.0011 after, p 1e-40'
--   crossing_soon   only when the fit has a limit and a horizon, per side of the crossing view:
--                   the conservative one-sided 95% bound of the line that holds now (the bend
--                   view's: since the last significant bend, else the whole history) meets the
--                   limit (cross_bound) at most horizon x-units after latest_x, or has already
--                   met it, while the line itself is not yet past it; whether the slope is
--                   significant or not (the detail says when it is not, and when the crossing
--                   lies beyond the ICH Q1E extrapolation rule: 'extrapolated')
--   out_of_limits   only when the fit has a limit: the line that holds now, at the latest x
--                   (its fitted value there, not the latest reading alone), is past a limit
--                   (below a floor, above a ceiling); one row per side
--   unlike_fleet    the fleet_units view flags the unit: its slope differs from the
--                   random-effects mean of the other units of its fleet (z test, p below alpha
--                   divided by the fleet's units), and it follows a line (r2 >= min_r2)
-- Benjamini-Hochberg (J. R. Stat. Soc. B 57, 1995), per test over the m groups with a p-value:
-- sort the p-values, p_(1) <= ... <= p_(m); the adjusted p of rank i is the smallest
-- m p_(j) / j over j >= i, at most 1. Declaring the groups whose adjusted p is below alpha
-- keeps the expected share of false alarms among the alarms at alpha or below. The bend
-- search (bent) and the fleet comparison (unlike_fleet, Bonferroni over its fleet) keep their
-- own rules.
-- A group has no row when nothing is wrong. Group columns must not be named like a column of
-- this view or a working column (n, r2, slope, slope_p, status, x_min, x_mean, y_mean,
-- outliers, flagged_x).
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT
        f.__group__,
        f.n,
        f.x_min,
        f.x_max AS latest_x,
        f.r2,
        f.slope,
        f.slope_p,
        f.status,
        m.x_mean,
        m.y_mean
    FROM __fit_view__ AS f
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(f.__group__)
),
in_time AS MATERIALIZED (
    -- the readings in the order they were taken: by the date field (when the spec has one),
    -- then by file (arrival), then by x within a file (a file's own row order is not kept by
    -- every engine, nor by an export: a counter reset inside one file is not seen); with the
    -- x before each
    SELECT
        s.__group__,
        CAST(s.__x__ AS DOUBLE) AS tl_x,
        s.__window_field_or_null__ AS tl_date,
        f.batch_id AS tl_batch,
        lag(CAST(s.__x__ AS DOUBLE)) OVER (PARTITION BY s.__group__
            ORDER BY s.__window_field_or_null__, s.file_id, s.__x__) AS tl_x_before,
        row_number() OVER (PARTITION BY s.__group__
            ORDER BY s.__window_field_or_null__ DESC, s.file_id DESC, s.__x__ DESC) AS tl_last
    FROM __source__ AS s
    JOIN ingest_files AS f ON f.file_id = s.file_id
    WHERE s.__x__ IS NOT NULL
),
dates AS MATERIALIZED (
    SELECT
        __group__,
        max(tl_date) AS latest_date,
        -- the x of the latest reading in time (not the largest x)
        any_value(tl_x) FILTER (WHERE tl_last = 1) AS latest_x,
        max(tl_batch) AS tl_last_batch
    FROM in_time
    GROUP BY __group__
),
went_back AS (
    SELECT
        __group__,
        count(*) AS tl_back,
        max(tl_x_before) AS tl_from,
        arg_max(tl_x, tl_x_before) AS tl_to
    FROM in_time
    WHERE tl_x < tl_x_before
    GROUP BY __group__
),
batches AS (
    -- the batches that brought rows to the fit, per fleet (the fleet columns; none: the fit)
    SELECT DISTINCT __fleet__, tl_batch FROM in_time
),
silent AS (
    SELECT d.__group__, any_value(d.tl_last_batch) AS tl_last_batch, count(*) AS tl_missed
    FROM dates AS d
    JOIN batches AS b ON ROW(b.__fleet__, 1) IS NOT DISTINCT FROM ROW(d.__fleet__, 1)
        AND b.tl_batch > d.tl_last_batch
    GROUP BY d.__group__
    HAVING count(*) >= __silent_after_or_null__
),
tested AS MATERIALIZED (
    -- each test's p-value per group: the window slope against the earlier slope, the
    -- smallest Bonferroni outlier p of the group's rows
    SELECT __group__, 'outliers' AS tl_test, min(outlier_p) AS tl_p, 1 AS tl_k
    FROM __points_view__
    GROUP BY __group__
    HAVING min(outlier_p) IS NOT NULL
    UNION ALL
    SELECT __group__, 'slope_changed' AS tl_test, difference_p AS tl_p, 1 AS tl_k
    FROM __change_view_if_any__
    WHERE difference_p IS NOT NULL
    UNION ALL
    SELECT __group__, 'not_straight' AS tl_test, curvature_p AS tl_p, 1 AS tl_k
    FROM __straight_view_if_any__
    WHERE curvature_p IS NOT NULL
    UNION ALL
    -- the latest batch's readings of the group: Bonferroni over them (k readings)
    SELECT __group__, 'out_of_trend' AS tl_test, least(1.0, count(*) * min(trend_p)) AS tl_p,
        count(*) AS tl_k
    FROM __trend_view_if_any__
    WHERE trend_p IS NOT NULL
    GROUP BY __group__
),
ranked AS (
    SELECT
        *,
        count(*) OVER (PARTITION BY tl_test) AS tl_m,
        row_number() OVER (PARTITION BY tl_test
            ORDER BY tl_p, concat_ws(' / ', __group_text__)) AS tl_rank
    FROM tested
),
adjusted AS MATERIALIZED (
    -- Benjamini-Hochberg: the smallest m p_(j) / j over the ranks j at or above the group's
    SELECT
        *,
        least(1.0, min(tl_p * tl_m / tl_rank) OVER (PARTITION BY tl_test ORDER BY tl_rank DESC
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW)) AS tl_p_fdr,
        CASE
            WHEN tl_test = 'slope_changed' THEN CAST(__alpha_change__ AS DOUBLE)
            WHEN tl_test = 'out_of_trend' THEN CAST(__alpha_trend__ AS DOUBLE)
            WHEN tl_test = 'not_straight' THEN CAST(__alpha__ AS DOUBLE)
            ELSE CAST(__alpha_outliers__ AS DOUBLE)
        END AS tl_alpha
    FROM ranked
),
judged AS MATERIALIZED (
    SELECT
        *,
        CASE WHEN __error_control__ = 'fdr' THEN tl_p_fdr ELSE tl_p END < tl_alpha AS tl_hit,
        -- the step-up cut alpha k / m, k the largest rank declared: a row (a reading) is
        -- flagged when its p is at most the cut (with 'unit': below alpha)
        tl_alpha * max(CASE WHEN tl_p_fdr < tl_alpha THEN tl_rank END)
            OVER (PARTITION BY tl_test) / tl_m AS tl_cut
    FROM adjusted
),
flagged AS MATERIALIZED (
    SELECT
        p.__group__,
        count(*) AS outliers,
        list_sort(list(p.x)) AS flagged_x,
        any_value(j.tl_p) AS tl_p,
        any_value(j.tl_p_fdr) AS tl_p_fdr,
        any_value(j.tl_m) AS tl_m
    FROM __points_view__ AS p
    JOIN judged AS j ON ROW(j.__group__) IS NOT DISTINCT FROM ROW(p.__group__)
        AND j.tl_test = 'outliers'
    WHERE j.tl_hit AND CASE WHEN __error_control__ = 'fdr' THEN p.outlier_p <= j.tl_cut
        ELSE p.outlier_p < j.tl_alpha END
    GROUP BY p.__group__
),
reasons AS (
    SELECT __group__, 'too_few_points' AS reason, 1 AS severity,
        format('{} pair(s); a line needs 3', n) AS detail
    FROM groups
    WHERE status = 'too_few_points'
    UNION ALL
    SELECT __group__, 'x_went_back', 2,
        format('x went back {} time(s) from one reading to the next in time, e.g. from {:g} '
            || 'to {:g} (a counter reset?)', tl_back, tl_from, tl_to)
    FROM went_back
    UNION ALL
    SELECT __group__, 'silent', 10,
        format('no readings in the last {} batch(es) that brought its fleet readings (its '
            || 'latest: batch {})', tl_missed, tl_last_batch)
    FROM silent
    UNION ALL
    SELECT __group__, 'low_r2', 3, format('r2 {:.3g} < {:g}', r2, __min_r2_or_null__)
    FROM groups
    WHERE r2 < __min_r2_or_null__
    UNION ALL
    SELECT s.__group__, 'not_straight', 4,
        format('the readings curve: quadratic term {:.3g} (t {:.3g}), p {:.2g}{} < {:g}',
            s.curvature, s.curvature_t, s.curvature_p,
            CASE
                WHEN __error_control__ = 'fdr'
                    THEN format(', {:.2g} adjusted over {} units (Benjamini-Hochberg)',
                        j.tl_p_fdr, j.tl_m)
                ELSE ''
            END, __alpha__)
    FROM __straight_view_if_any__ AS s
    JOIN judged AS j ON ROW(j.__group__) IS NOT DISTINCT FROM ROW(s.__group__)
        AND j.tl_test = 'not_straight'
    WHERE j.tl_hit
    UNION ALL
    SELECT __group__, 'outliers', 5,
        format('{} reading(s) flagged (Bonferroni, alpha {:g}) at x = {}{}; p {:.2g}{}',
            outliers, __alpha_outliers__,
            array_to_string(list_transform(list_slice(flagged_x, 1, 5),
                lambda tl_x: format('{:g}', tl_x)), ', '),
            CASE WHEN outliers > 5 THEN ', ...' ELSE '' END, tl_p,
            CASE
                WHEN __error_control__ = 'fdr'
                    THEN format(', {:.2g} adjusted over {} units (Benjamini-Hochberg)', tl_p_fdr,
                        tl_m)
                ELSE ''
            END)
    FROM flagged
    UNION ALL
    SELECT c.__group__, 'slope_changed', 7,
        format('slope {:.3g} in the window from {} against {:.3g} before: p {:.2g}{} < {:g}',
            c.slope_recent, c.window_start, c.slope_before, c.difference_p,
            CASE
                WHEN __error_control__ = 'fdr'
                    THEN format(', {:.2g} adjusted over {} units (Benjamini-Hochberg)',
                        j.tl_p_fdr, j.tl_m)
                ELSE ''
            END, __alpha_change__)
    FROM __change_view_if_any__ AS c
    JOIN judged AS j ON ROW(j.__group__) IS NOT DISTINCT FROM ROW(c.__group__)
        AND j.tl_test = 'slope_changed'
    WHERE j.tl_hit
    UNION ALL
    SELECT t.__group__, 'out_of_trend', 9,
        format('latest reading(s) at x = {} outside the {:g} % prediction interval of the '
            || 'line through the {} earlier reading(s): p {:.2g}{} < {:g}',
            array_to_string(list_transform(list_sort(list(t.x)),
                lambda tl_x: format('{:g}', tl_x)), ', '),
            100 * (1 - __alpha_trend__), any_value(t.n_before), any_value(j.tl_p),
            CASE
                WHEN __error_control__ = 'fdr'
                    THEN format(', {:.2g} adjusted over {} units (Benjamini-Hochberg)',
                        any_value(j.tl_p_fdr), any_value(j.tl_m))
                ELSE ''
            END, __alpha_trend__)
    FROM __trend_view_if_any__ AS t
    JOIN judged AS j ON ROW(j.__group__) IS NOT DISTINCT FROM ROW(t.__group__)
        AND j.tl_test = 'out_of_trend'
    WHERE j.tl_hit AND CASE WHEN __error_control__ = 'fdr' THEN t.trend_p * j.tl_k <= j.tl_cut
        ELSE t.trend_p * j.tl_k < j.tl_alpha END
    GROUP BY t.__group__
    UNION ALL
    SELECT __group__, 'bent', 8,
        format('the line bent at x = {:.4g}: slope {:.3g} before, {:.3g} after, p {}', bend_x,
            slope_before, slope_after,
            CASE WHEN bend_p = 0 THEN '< 1e-300' ELSE format('{:.2g}', bend_p) END)
    FROM __bend_view_if_any__
    WHERE bends > 0
    UNION ALL
    SELECT __group__, 'out_of_limits', 12,
        format('the line is at {:.4g} at the latest x {:g}, {} the {} limit {:.4g}',
            line_at_latest, latest_x, CASE WHEN side = 'lower' THEN 'below' ELSE 'above' END,
            side, limit_value)
    FROM __crossing_view_if_any__
    WHERE past
    UNION ALL
    SELECT __group__, 'crossing_soon', 11,
        format('the one-sided 95% bound {} the {} limit {:.4g} at x = {:.4g}{}{}{}{}',
            CASE WHEN cross_bound <= latest_x THEN 'met' ELSE 'meets' END, side, limit_value,
            cross_bound,
            CASE
                WHEN cross_bound <= latest_x THEN ', before the latest x'
                ELSE format(', {:.3g} after the latest x (horizon {:g})',
                    cross_bound - latest_x, CAST(__horizon_or_null__ AS DOUBLE))
            END,
            CASE
                WHEN cross_x IS NOT NULL THEN format('; the line meets it at x = {:.4g}', cross_x)
                ELSE ''
            END,
            CASE
                WHEN note LIKE '%slope not significant%'
                    THEN '; slope not significant at alpha ' || __alpha_text__
                ELSE ''
            END,
            CASE WHEN note LIKE '%extrapolated%' THEN '; extrapolated (ICH Q1E rule)' ELSE '' END)
    FROM __crossing_view_if_any__
    -- judged on the conservative bound; a side already past is out_of_limits instead
    WHERE NOT past AND cross_bound <= latest_x + CAST(__horizon_or_null__ AS DOUBLE)
    UNION ALL
    SELECT __group__, 'unlike_fleet', 6,
        format('slope {:.3g} against {:.3g} for its {} siblings (z {:.3g}, p {:.2g} < {:g} / {})',
            slope, fleet_slope, units - 1, slope_z, slope_z_p, __alpha__, units)
    FROM __fleet_units_view__
    WHERE unlike
)
SELECT
    __fit_name__ AS fit_name,
    concat_ws(' / ', r.__group_text__) AS unit_label,
    r.__group__,
    r.reason,
    CAST(r.severity AS INTEGER) AS severity,
    r.detail,
    d.latest_x,
    d.latest_date
FROM reasons AS r
JOIN groups AS g ON ROW(g.__group__) IS NOT DISTINCT FROM ROW(r.__group__)
LEFT JOIN dates AS d ON ROW(d.__group__) IS NOT DISTINCT FROM ROW(r.__group__)
