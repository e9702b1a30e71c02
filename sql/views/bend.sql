-- Where each group's line bends and the line since the last significant bend: the exact
-- least-squares bend (two-phase regression), a test of one line against a bent line with the
-- bend unknown, and the current segment's line that projections start from.

-- One row per group of the fit view. Columns:
--   group columns   as in the fit view
--   bends           significant bends found (0 to 3): the search runs on the whole history, and
--                   after a bend significant at the fit's alpha again on the segment after it,
--                   at most 3 times
--   bend_x          where the current segment starts: the join point for a joined bend (it may
--                   lie between two data x), the first x of the later segment for a free one;
--                   NULL when no bend is significant
--   slope_before, slope_after
--                   the slopes on either side of the last significant bend (NULL without one)
--   bend_f, bend_p  the test statistic and its p-value for the last significant bend, or for
--                   the best bend of the first search when none is significant (NULL when the
--                   group is too small to search); bend_p is 0 where it underflows float64
--   from_x          the first x of the current segment (bend_x, or the group's first x)
--   n               points of the current segment (x >= from_x)
--   slope, intercept, r2, resid_sd, slope_se, slope_lo, slope_hi, slope_p
--                   the current segment's line; intervals at the fit's level, slope_p the
--                   two-sided p-value of slope = 0 (Student t, df degrees of freedom)
--   status          as in the fit view for a group without a significant bend (its line is the
--                   fit view's); 'ok', 'perfect_fit' (no residual left) or 'out_of_range' for
--                   the line after a bend
--   df              residual degrees of freedom of that line
--   centre_x, centre_y, centre_se
--                   the point of the line whose estimate is uncorrelated with the slope, and its
--                   standard error: the standard error of the line at x is
--                   sqrt(centre_se^2 + slope_se^2 (x - centre_x)^2) (for a straight line through
--                   a segment centre_x is the mean x and centre_se = resid_sd / sqrt(n))
--   bend_note       NULL when the group was searched, else why not
--
-- The search, the test and the line after each bend are in the rounds view (bend_rounds.sql),
-- with their methods and sources. For a group without a significant bend the line is the fit
-- view's, over the whole history.
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT f.__group__, row_number() OVER () AS gid
    FROM __fit_view__ AS f
),
rounds AS (
    -- every column of the rounds view, with the group's number and short names for two
    SELECT
        g.gid,
        o.round AS r,
        o.significant AS sig,
        o.*
    FROM __bend_rounds_view__ AS o
    JOIN groups AS g ON ROW(o.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
),
found AS (
    SELECT
        gid,
        CAST(count(*) FILTER (WHERE sig) AS BIGINT) AS bends,
        max(r) FILTER (WHERE sig) AS r_last,
        bool_or(r = 1) AS searched
    FROM rounds
    WHERE r > 0
    GROUP BY gid
),
chosen AS (
    SELECT
        f.bends,
        o.*
    FROM found AS f
    JOIN rounds AS o ON o.gid = f.gid AND o.r = coalesce(f.r_last, 1)
),
quantiles AS MATERIALIZED (
    SELECT line_df AS df, tl_t_crit((1 - __level__) / 2, line_df) AS t_crit
    FROM (SELECT DISTINCT line_df FROM chosen WHERE bends > 0 AND line_df >= 1) AS sizes
),
merged AS (
    SELECT
        g.__group__,
        coalesce(c.bends, 0) AS bends,
        CASE WHEN c.bends > 0 THEN c.bend_x END AS bend_x,
        CASE WHEN c.bends > 0 THEN c.slope_before END AS slope_before,
        CASE WHEN c.bends > 0 THEN c.slope_after END AS slope_after,
        c.bend_f,
        c.bend_p,
        CASE WHEN c.bends > 0 THEN c.bend_x ELSE f.x_min END AS from_x,
        CASE WHEN c.bends > 0 THEN c.line_n ELSE f.n END AS n,
        CASE WHEN c.bends > 0 THEN c.slope_after ELSE f.slope END AS slope,
        CASE WHEN c.bends > 0 THEN c.line_intercept ELSE f.intercept END AS intercept,
        CASE WHEN c.bends > 0 THEN c.line_r2 ELSE f.r2 END AS r2,
        CASE WHEN c.bends > 0 THEN c.line_sd ELSE f.resid_sd END AS resid_sd,
        CASE WHEN c.bends > 0 THEN c.line_slope_se ELSE f.slope_se END AS slope_se,
        CASE WHEN c.bends > 0 THEN c.slope_after - q.t_crit * c.line_slope_se ELSE f.slope_lo END
            AS slope_lo,
        CASE WHEN c.bends > 0 THEN c.slope_after + q.t_crit * c.line_slope_se ELSE f.slope_hi END
            AS slope_hi,
        CASE
            WHEN NOT coalesce(c.bends > 0, false) THEN f.slope_p
            WHEN NOT c.exact AND c.line_slope_se > 0 AND c.line_df >= 1
                THEN tl_t_two_sided(c.slope_after / c.line_slope_se, c.line_df)
        END AS slope_p,
        CASE
            WHEN NOT coalesce(c.bends > 0, false) THEN f.status
            WHEN c.exact THEN 'perfect_fit'
            WHEN NOT coalesce(isfinite(c.slope_after + c.line_intercept + c.line_slope_se
                                       + c.centre_se), false) THEN 'out_of_range'
            ELSE 'ok'
        END AS status,
        CASE WHEN c.bends > 0 THEN c.line_df WHEN f.n >= 3 THEN f.n - 2 END AS df,
        CASE WHEN c.bends > 0 THEN c.centre_x ELSE m.x_mean END AS centre_x,
        CASE WHEN c.bends > 0 THEN c.centre_y ELSE m.y_mean END AS centre_y,
        CASE
            WHEN c.bends > 0 THEN c.centre_se
            WHEN f.n >= 3 THEN f.resid_sd / sqrt(f.n)
        END AS centre_se,
        CASE
            WHEN __bend_kind__ = 'none' THEN 'no bend search: the fit has bend = none'
            WHEN c.gid IS NULL THEN 'too few points to search for a bend: each side needs '
                || 'greatest(5, bend_min n) points and two different x'
        END AS bend_note
    FROM groups AS g
    JOIN __fit_view__ AS f ON ROW(f.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
    LEFT JOIN chosen AS c ON c.gid = g.gid
    LEFT JOIN quantiles AS q ON q.df = c.line_df
)
SELECT * FROM merged
