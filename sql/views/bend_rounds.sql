-- Each round of the search for where a group's line bends: the exact least-squares bend of a
-- segment (two-phase regression), the test of one line against a bent line with the bend
-- unknown, and the line after the bend. The bend view (bend.sql) sums the rounds up.

-- One row per group and round; round 1 searches the whole history, and each round whose bend is
-- significant at the fit's alpha is followed by a search of the segment after its bend, at most
-- 3 rounds. A group too small to search has no row. Columns:
--   group columns   as in the fit view
--   round           1, 2, 3
--   search_from, searched
--                   the first x and the number of points of the segment searched
--   bend_x          the best bend: the join point (joined; it may lie between two data x) or the
--                   first x of the later side (free)
--   bend_f, bend_p  the test statistic and its p-value (0 where it underflows float64); bend_f
--                   is NULL when the bent line leaves no residual
--   significant     bend_p < alpha
--   rss_one, rss_bent
--                   residual sums of squares of one line and of the bent line over the segment
--   slope_before, slope_after
--                   the slopes on either side of the bend
--   line_n, line_intercept, line_r2, line_sd, line_slope_se, line_df, centre_x, centre_y,
--   centre_se, exact
--                   the line after the bend (see below and bend.sql): points at or after bend_x,
--                   intercept, r2, residual sd, slope standard error and degrees of freedom,
--                   the point of the line uncorrelated with its slope and its standard error;
--                   exact when the bent line leaves no residual
--
-- The kind of bend is the fit's `bend`:
--   joined  two lines that meet (continuous; y = a + b x + d max(x - t, 0)). The exact
--           least-squares join point t (Hudson 1966, JASA 61): for every split of the sorted
--           data between two neighbouring x values, fit a line to each side; where the two lines
--           meet inside that split's interval their summed residual sum of squares is that
--           interval's least, else the least lies at an end of the interval, a hinge at a data
--           x (fitted with t held there). The best over every interval and every data x wins.
--   free    two separate lines with a jump allowed (a recalibration, a sensor swap): the split
--           with the least summed residual sum of squares of the two sides' lines.
-- Candidates: each side keeps at least greatest(5, ceil(bend_min n)) points and two different x;
-- ties in x never split. Every candidate is scored from running sums over the segment's
-- distinct x values in ascending order (one window pass: counts, sums of x, x^2, y, y^2, x y
-- anchored at the segment's means), then the winner's residual sums of squares are recomputed in
-- two passes (means, then centred sums).
--
-- The test (one line against a bent line, the bend unknown, errors independent normal):
--   joined  T^2 = (rss_one - rss_bent) / (rss_bent / (n - 3)), the sup over join points of the
--           squared t statistic of the hinge term. p-value by Hotelling's tube formula for the
--           maximum of a t process indexed by a nonlinear parameter (Knowles and Siegmund 1989,
--           Int. Stat. Rev. 57; the bound of Davies 1987, Biometrika 74):
--               p = P(|t_(n-3)| > T) + (L / pi) (rss_bent / rss_one)^((n - 3) / 2),
--           L the length of the curve the hinge regressor traces on the unit sphere of the
--           residual space as t runs over the candidate range (the sum of the angles between
--           the hinges at neighbouring data x: between them the curve is a great-circle arc).
--   free    F = ((rss_one - rss_bent) / 2) / (rss_bent / (n - 4)), the sup-F over splits
--           (Andrews 1993, Econometrica 61). p-value: the pointwise tail of F(2, n - 4),
--           p1 = (rss_bent / rss_one)^((n - 4) / 2), taken to the chi-square(2) scale,
--           c = -2 ln p1, and the approximation for the maximum of a chi-square(2) process with
--           Brownian local behaviour (DeLong 1981; Estrella 2003, Econometric Theory 19) with the
--           discrete-time correction of James, James and Siegmund (1987, Biometrika 74):
--               p = p1 (1 + (c - 2) sum_k d_k nu(sqrt(2 c d_k))),  nu(v) ~ exp(-0.583 v),
--           d_k = 1 - the mean canonical correlation of the extra regressors (a step and a slope
--           change, residualised on the one line) at neighbouring splits k and k + 1. The design's
--           own geometry enters through d_k, so trending x need no table of critical values.
-- Both are checked by simulation (tests/test_bend.py): on straight lines the rejection rate at
-- 0.05 and 0.01 lies within the simulation's band.
--
-- The current segment's line. free: least squares on the later segment alone (n - 2 degrees of
-- freedom). joined: the later line of the two-phase fit with the join point held at its estimate
-- (the searched segment, n - 3 degrees of freedom): slope = b + d, its standard error from that
-- fit's covariance; intervals do not allow for the uncertainty of the join point itself. An
-- extrapolation of the current segment, which can bend again.
CREATE OR REPLACE VIEW __view__ AS
WITH groups AS MATERIALIZED (
    SELECT f.__group__, row_number() OVER () AS gid
    FROM __fit_view__ AS f
),
pts AS MATERIALIZED (
    SELECT g.gid, CAST(s.__x__ AS DOUBLE) AS px, CAST(s.__y__ AS DOUBLE) AS py
    FROM __source__ AS s
    JOIN groups AS g ON ROW(s.__group__) IS NOT DISTINCT FROM ROW(g.__group__)
    WHERE isfinite(CAST(s.__x__ AS DOUBLE)) AND isfinite(CAST(s.__y__ AS DOUBLE))
),
round_0 AS (
    SELECT gid, 0 AS r, true AS go, CAST(NULL AS DOUBLE) AS seg_from
    FROM groups
),
-- each round searches the segment the round before it left, for the groups whose last bend was
-- significant: sql/fragments/bend_round.sql, included with the round it reads
round_1 AS MATERIALIZED (SELECT * FROM __bend_round__ AS round_0),
round_2 AS MATERIALIZED (SELECT * FROM __bend_round__ AS round_1),
round_3 AS MATERIALIZED (SELECT * FROM __bend_round__ AS round_2),
rounds AS (
    SELECT * FROM round_1
    UNION ALL
    SELECT * FROM round_2
    UNION ALL
    SELECT * FROM round_3
)
SELECT
    g.__group__,
    o.r AS round,
    o.search_from,
    o.seg_n AS searched,
    o.bend_x,
    o.bend_f,
    o.bend_p,
    o.sig AS significant,
    o.rss_one,
    o.rss_bent,
    o.slope_before,
    o.slope_after,
    o.line_n,
    o.line_intercept,
    o.line_r2,
    o.line_sd,
    o.line_slope_se,
    o.line_df,
    o.centre_x,
    o.centre_y,
    o.centre_se,
    o.exact
FROM rounds AS o
JOIN groups AS g USING (gid)
WHERE o.r > 0
