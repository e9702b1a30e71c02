-- One round of the bend search (bend_rounds.sql): the exact least-squares bend of the segment
-- each group's previous round left (__previous__: gid, r, go, seg_from), its test and the line
-- after it. Included where bend_rounds.sql reads __bend_round__; the method is described there.
WITH seg AS MATERIALIZED (
    SELECT p.gid, st.r, p.px, p.py
    FROM pts AS p
    JOIN __previous__ AS st ON p.gid = st.gid
    WHERE st.go AND __bend_kind__ <> 'none' AND (st.seg_from IS NULL OR p.px >= st.seg_from)
),
anchor AS (
    SELECT
        gid,
        max(r) AS r,
        CAST(count(*) AS BIGINT) AS n,
        CAST(count(DISTINCT px) AS BIGINT) AS k_all,
        greatest(5, CAST(ceil(__bend_min__ * count(*)) AS BIGINT)) AS m,
        avg(px) AS x0,
        avg(py) AS y0,
        min(px) AS x_first
    FROM seg
    GROUP BY gid
),
steps AS (
    -- one row per distinct x, anchored at the segment's means
    SELECT
        s.gid,
        s.px AS x,
        s.px - a.x0 AS dx,
        CAST(count(*) AS BIGINT) AS c,
        sum(s.py - a.y0) AS sy,
        sum((s.py - a.y0) * (s.py - a.y0)) AS syy
    FROM seg AS s
    JOIN anchor AS a USING (gid)
    GROUP BY s.gid, s.px, a.x0
),
totals AS (
    SELECT
        a.*,
        sum(t.c * t.dx) AS s1_all,
        sum(t.c * t.dx * t.dx) AS s2_all,
        sum(t.sy) AS t1_all,
        sum(t.syy) AS t2_all,
        sum(t.dx * t.sy) AS p1_all
    FROM anchor AS a
    JOIN steps AS t USING (gid)
    GROUP BY a.gid, a.r, a.n, a.k_all, a.m, a.x0, a.y0, a.x_first
),
running AS (
    -- left sums: the points with x at or below this row's x (one sort for both windows)
    SELECT
        gid,
        x,
        dx,
        c,
        lead(x) OVER nx AS x_next,
        lead(dx) OVER nx AS dx_b,
        lead(c) OVER nx AS c_b,
        sum(c) OVER w AS nl,
        -- the distinct x's rank (a running count: Spark takes no named window for row_number)
        count(*) OVER w AS kl,
        sum(c * dx) OVER w AS s1,
        sum(c * dx * dx) OVER w AS s2,
        sum(sy) OVER w AS t1,
        sum(syy) OVER w AS t2,
        sum(dx * sy) OVER w AS p1
    FROM steps
    WINDOW
        w AS (PARTITION BY gid ORDER BY dx ROWS UNBOUNDED PRECEDING),
        nx AS (PARTITION BY gid ORDER BY dx)
),
sides AS (
    SELECT
        u.*,
        t.n,
        t.m,
        t.x0,
        t.y0,
        t.s1_all,
        t.s2_all,
        t.t1_all,
        t.t2_all,
        t.p1_all,
        t.n - u.nl AS nr,
        t.s1_all - u.s1 AS s1r,
        t.s2_all - u.s2 AS s2r,
        t.t1_all - u.t1 AS t1r,
        t.t2_all - u.t2 AS t2r,
        t.p1_all - u.p1 AS p1r,
        -- the split after this x may be a bend; so may the splits before and after it
        u.nl >= t.m AND t.n - u.nl >= t.m AND u.kl >= 2 AND t.k_all - u.kl >= 2 AS allowed,
        u.nl - u.c >= t.m AND t.n - u.nl + u.c >= t.m AND u.kl >= 3 AND t.k_all - u.kl >= 1
            AS after_allowed,
        coalesce(u.nl + u.c_b >= t.m AND t.n - u.nl - u.c_b >= t.m AND t.k_all - u.kl >= 3,
                 false) AS allowed_b,
        -- the whole segment's centred sums
        t.s2_all - t.s1_all * t.s1_all / t.n AS sxx,
        t.p1_all - t.s1_all * t.t1_all / t.n AS sxy,
        t.t2_all - t.t1_all * t.t1_all / t.n AS syy_all
    FROM running AS u
    JOIN totals AS t USING (gid)
),
lines AS (
    SELECT
        *,
        CASE WHEN allowed THEN s2 - s1 * s1 / nl END AS sxx_l,
        CASE WHEN allowed THEN p1 - s1 * t1 / nl END AS sxy_l,
        CASE WHEN allowed THEN t2 - t1 * t1 / nl END AS syy_l,
        CASE WHEN allowed THEN s2r - s1r * s1r / nr END AS sxx_r,
        CASE WHEN allowed THEN p1r - s1r * t1r / nr END AS sxy_r,
        CASE WHEN allowed THEN t2r - t1r * t1r / nr END AS syy_r,
        -- the hinge max(x - t, 0) at t = this x: raw sums over the points beyond t
        s1r - dx * nr AS sh,
        s2r - 2 * dx * s1r + dx * dx * nr AS shh_raw,
        s2r - dx * s1r AS sxh_raw,
        p1r - dx * t1r AS syh_raw,
        -- the same at the next x (the points beyond it, and the left side up to it)
        nr - c_b AS nr_b,
        s1r - c_b * dx_b AS s1r_b,
        s2r - c_b * dx_b * dx_b AS s2r_b,
        nl + c_b AS nl_b,
        s1 + c_b * dx_b AS s1_b,
        s2 + c_b * dx_b * dx_b AS s2_b
    FROM sides
),
hinges AS (
    SELECT
        *,
        -- centred on the segment
        shh_raw - sh * sh / n AS shh,
        sxh_raw - s1_all * sh / n AS sxh,
        syh_raw - t1_all * sh / n AS syh,
        s1r_b - dx_b * nr_b AS sh_b,
        -- the step and slope-change regressors of the split, residualised on one line:
        -- e1, e2 their centred cross sums with x (for the free test's geometry)
        s1 - s1_all * nl / n AS e1,
        s2 - s1_all * s1 / n AS e2,
        s1_b - s1_all * nl_b / n AS e1_b,
        s2_b - s1_all * s1_b / n AS e2_b
    FROM lines
),
geometry AS (
    SELECT
        *,
        -- hinge residualised on the one line: its squared length, here and at the next x
        shh - sxh * sxh / sxx AS hh_perp,
        s2r_b - dx_b * s1r_b - s1_all * sh_b / n AS sxh_b,
        -- Gram matrices of the free split's two residualised regressors, here and next
        nl - nl * nl / n - e1 * e1 / sxx AS g11,
        s1 - nl * s1 / n - e1 * e2 / sxx AS g12,
        s2 - s1 * s1 / n - e2 * e2 / sxx AS g22,
        nl_b - nl_b * nl_b / n - e1_b * e1_b / sxx AS h11,
        s1_b - nl_b * s1_b / n - e1_b * e2_b / sxx AS h12,
        s2_b - s1_b * s1_b / n - e2_b * e2_b / sxx AS h22
    FROM hinges
),
steps_apart AS (
    SELECT
        *,
        -- cosine between the residualised hinges at this x and the next x
        CASE WHEN allowed AND hh_perp > 0 AND hh_perp_b > 0 THEN
            (s2r_b - (dx + dx_b) * s1r_b + dx * dx_b * nr_b - sh * sh_b / n
             - sxh * sxh_b / sxx) / sqrt(hh_perp * hh_perp_b)
        END AS hinge_cos,
        -- cross products of the free split's regressors at this split and the next
        CASE WHEN allowed AND allowed_b THEN nl - nl * nl_b / n - e1 * e1_b / sxx END AS c11,
        CASE WHEN allowed AND allowed_b THEN s1 - nl * s1_b / n - e1 * e2_b / sxx END AS c12,
        CASE WHEN allowed AND allowed_b THEN s1 - s1 * nl_b / n - e2 * e1_b / sxx END AS c21,
        CASE WHEN allowed AND allowed_b THEN s2 - s1 * s1_b / n - e2 * e2_b / sxx END AS c22
    FROM (
        SELECT
            *,
            s2r_b - 2 * dx_b * s1r_b + dx_b * dx_b * nr_b - sh_b * sh_b / n
            - sxh_b * sxh_b / sxx AS hh_perp_b
        FROM geometry
    ) AS next_hinge
),
canonical AS (
    -- the sum of the two canonical correlations between neighbouring splits:
    -- sqrt(trace(G^-1 C H^-1 C') + 2 |det C| / sqrt(det G det H))
    SELECT
        *,
        g11 * g22 - g12 * g12 AS det_g,
        h11 * h22 - h12 * h12 AS det_h,
        (c11 * h22 - c12 * h12) AS ch11,
        (c12 * h11 - c11 * h12) AS ch12,
        (c21 * h22 - c22 * h12) AS ch21,
        (c22 * h11 - c21 * h12) AS ch22
    FROM steps_apart
),
decorrelation AS (
    SELECT
        gid,
        dx,
        CASE WHEN allowed THEN acos(least(1.0, greatest(-1.0, hinge_cos))) END AS arc,
        CASE WHEN c11 IS NOT NULL AND det_g > 0 AND det_h > 0 THEN
            greatest(0.0, 1 - sqrt(greatest(0.0,
                (g22 * (ch11 * c11 + ch12 * c12) - 2 * g12 * (ch11 * c21 + ch12 * c22)
                 + g11 * (ch21 * c21 + ch22 * c22)) / (det_g * det_h)
                + 2 * abs(c11 * c22 - c12 * c21) / sqrt(det_g * det_h))) / 2)
        END AS apart
    FROM canonical
),
candidates AS MATERIALIZED (
    -- free: the split after this x; the later segment starts at the next x
    SELECT gid, x_next AS at_x, x AS left_x,
           (syy_l - sxy_l * sxy_l / sxx_l) + (syy_r - sxy_r * sxy_r / sxx_r) AS score
    FROM hinges
    WHERE __bend_kind__ = 'free' AND allowed AND sxx_l > 0 AND sxx_r > 0
    UNION ALL
    -- joined, inside the interval: the two sides' lines meet there
    SELECT gid, x0 + t_meet, x,
           (syy_l - sxy_l * sxy_l / sxx_l) + (syy_r - sxy_r * sxy_r / sxx_r)
    FROM (
        SELECT
            *,
            ((t1r / nr - sxy_r / sxx_r * s1r / nr) - (t1 / nl - sxy_l / sxx_l * s1 / nl))
            / (sxy_l / sxx_l - sxy_r / sxx_r) AS t_meet
        FROM hinges
        WHERE __bend_kind__ = 'joined' AND allowed AND sxx_l > 0 AND sxx_r > 0
            AND sxy_l / sxx_l <> sxy_r / sxx_r
    ) AS meet
    WHERE t_meet > dx AND t_meet < dx_b
    UNION ALL
    -- joined, a hinge at a data x at either end of an allowed interval
    SELECT gid, x, x,
           syy_all - (shh * sxy * sxy - 2 * sxh * sxy * syh + sxx * syh * syh)
           / (sxx * shh - sxh * sxh)
    FROM hinges
    WHERE __bend_kind__ = 'joined' AND (allowed OR after_allowed)
        AND sxx * shh - sxh * sxh > 0
),
best AS (
    -- the least score; among equal scores the smallest bend (two aggregates, no sort)
    SELECT c.gid, min(c.at_x) AS at_x, min(c.left_x) AS left_x
    FROM candidates AS c
    JOIN (SELECT gid, min(score) AS score FROM candidates GROUP BY gid) AS low
        ON low.gid = c.gid AND low.score = c.score
    GROUP BY c.gid
),
pass1 AS (
    -- the winner recomputed in two passes: means (all, left and right side, hinge)
    SELECT
        s.gid,
        b.at_x,
        b.left_x,
        count(*) AS n,
        avg(s.px) AS xm,
        avg(s.py) AS ym,
        avg(greatest(s.px - b.at_x, 0.0)) AS hm,
        CAST(count(*) FILTER (WHERE s.px > b.left_x) AS BIGINT) AS nr,
        avg(s.px) FILTER (WHERE s.px <= b.left_x) AS xl,
        avg(s.py) FILTER (WHERE s.px <= b.left_x) AS yl,
        avg(s.px) FILTER (WHERE s.px > b.left_x) AS xr,
        avg(s.py) FILTER (WHERE s.px > b.left_x) AS yr,
        CAST(count(*) FILTER (WHERE s.px >= b.at_x) AS BIGINT) AS n_after
    FROM seg AS s
    JOIN best AS b USING (gid)
    GROUP BY s.gid, b.at_x, b.left_x
),
pass2 AS (
    SELECT
        q.gid,
        sum((s.px - q.xm) * (s.px - q.xm)) AS sxx,
        sum((s.px - q.xm) * (s.py - q.ym)) AS sxy,
        sum((s.py - q.ym) * (s.py - q.ym)) AS syy,
        sum((s.px - q.xm) * (greatest(s.px - q.at_x, 0.0) - q.hm)) AS sxh,
        sum((greatest(s.px - q.at_x, 0.0) - q.hm) * (greatest(s.px - q.at_x, 0.0) - q.hm))
            AS shh,
        sum((greatest(s.px - q.at_x, 0.0) - q.hm) * (s.py - q.ym)) AS syh,
        sum((s.px - q.xl) * (s.px - q.xl)) FILTER (WHERE s.px <= q.left_x) AS sxx_l,
        sum((s.px - q.xl) * (s.py - q.yl)) FILTER (WHERE s.px <= q.left_x) AS sxy_l,
        sum((s.py - q.yl) * (s.py - q.yl)) FILTER (WHERE s.px <= q.left_x) AS syy_l,
        sum((s.px - q.xr) * (s.px - q.xr)) FILTER (WHERE s.px > q.left_x) AS sxx_r,
        sum((s.px - q.xr) * (s.py - q.yr)) FILTER (WHERE s.px > q.left_x) AS sxy_r,
        sum((s.py - q.yr) * (s.py - q.yr)) FILTER (WHERE s.px > q.left_x) AS syy_r
    FROM seg AS s
    JOIN pass1 AS q USING (gid)
    GROUP BY q.gid
),
fitted AS (
    SELECT
        *,
        w.sxx * w.shh - w.sxh * w.sxh AS det,
        greatest(w.syy - w.sxy / w.sxx * w.sxy, 0.0) AS rss_one,
        CASE
            WHEN __bend_kind__ = 'free' THEN greatest(
                w.syy_l - w.sxy_l / w.sxx_l * w.sxy_l, 0.0)
                + greatest(w.syy_r - w.sxy_r / w.sxx_r * w.sxy_r, 0.0)
            ELSE greatest(w.syy - (w.shh * w.sxy * w.sxy - 2 * w.sxh * w.sxy * w.syh
                                   + w.sxx * w.syh * w.syh)
                                  / (w.sxx * w.shh - w.sxh * w.sxh), 0.0)
        END AS rss_bent,
        CASE WHEN __bend_kind__ = 'free' THEN q.n - 4 ELSE q.n - 3 END AS nu
    FROM pass1 AS q
    JOIN pass2 AS w USING (gid)
),
tested AS (
    SELECT
        *,
        -- a line that fits to rounding leaves nothing for a bend to explain
        CASE
            WHEN rss_one <= pow(2.0, -40) * syy THEN 1.0
            ELSE least(1.0, rss_bent / rss_one)
        END AS ratio
    FROM fitted
),
chi AS (
    SELECT *, CASE WHEN ratio > 0 THEN -nu * ln(ratio) END AS c_chi
    FROM tested
),
paths AS (
    SELECT
        d.gid,
        sum(d.arc) AS arc_length,
        sum(d.apart * exp(-0.583 * sqrt(2 * greatest(h.c_chi, 0.0) * d.apart)))
            AS apart_total
    FROM decorrelation AS d
    JOIN chi AS h USING (gid)
    GROUP BY d.gid
),
judged AS (
    SELECT
        h.*,
        p.arc_length,
        p.apart_total,
        CASE
            WHEN h.ratio = 1 THEN 0.0
            WHEN h.ratio > 0 AND __bend_kind__ = 'free'
                THEN (1 - h.ratio) / 2 / (h.ratio / h.nu)
            WHEN h.ratio > 0 THEN (1 - h.ratio) / (h.ratio / h.nu)
        END AS f,
        CASE
            WHEN h.ratio = 1 THEN 1.0
            WHEN h.ratio = 0 THEN 0.0
            WHEN __bend_kind__ = 'free' THEN least(1.0, pow(h.ratio, h.nu / 2)
                * (1 + greatest(h.c_chi - 2, 0.0) * coalesce(p.apart_total, 0.0)))
            ELSE least(1.0, tl_t_two_sided(sqrt((1 - h.ratio) / (h.ratio / h.nu)), h.nu)
                + coalesce(p.arc_length, 0.0) / pi() * pow(h.ratio, h.nu / 2))
        END AS p
    FROM chi AS h
    LEFT JOIN paths AS p USING (gid)
),
joined_line AS (
    -- the later line of the two-phase fit with the join point held: slope b + d, and
    -- the point of that line uncorrelated with its slope (see centre_x above)
    SELECT
        *,
        (shh * sxy - sxh * syh) / det AS b,
        (sxx * syh - sxh * sxy) / det AS d,
        rss_bent / (n - 3) AS s2,
        xm - at_x - hm AS w_off
    FROM judged
),
joined_cov AS (
    SELECT
        *,
        s2 * (shh - 2 * sxh + sxx) / det AS v11,
        s2 * (sxx - sxh) / det AS v1d,
        s2 * sxx / det AS vdd
    FROM joined_line
),
joined_centre AS (
    SELECT
        *,
        CASE WHEN v11 > 0 THEN -w_off * v1d / v11 ELSE 0.0 END AS u_c
    FROM joined_cov
)
SELECT
    j.gid,
    a.r + 1 AS r,
    j.p < __alpha__ AS go,
    j.at_x AS seg_from,
    j.p < __alpha__ AS sig,
    j.n AS seg_n,
    j.at_x AS bend_x,
    j.f AS bend_f,
    j.p AS bend_p,
    CASE WHEN __bend_kind__ = 'free' THEN j.sxy_l / j.sxx_l ELSE j.b END AS slope_before,
    CASE WHEN __bend_kind__ = 'free' THEN j.sxy_r / j.sxx_r ELSE j.b + j.d END
        AS slope_after,
    CASE WHEN __bend_kind__ = 'free' THEN j.nr ELSE j.n_after END AS line_n,
    CASE
        WHEN __bend_kind__ = 'free' THEN j.yr - j.sxy_r / j.sxx_r * j.xr
        ELSE j.ym + (j.b + j.d) * j.u_c + j.d * j.w_off - (j.b + j.d) * (j.xm + j.u_c)
    END AS line_intercept,
    CASE
        WHEN __bend_kind__ = 'free' AND j.syy_r > 0
            THEN 1 - greatest(j.syy_r - j.sxy_r / j.sxx_r * j.sxy_r, 0.0) / j.syy_r
        WHEN __bend_kind__ = 'joined' AND j.syy > 0 THEN 1 - j.rss_bent / j.syy
    END AS line_r2,
    CASE
        WHEN __bend_kind__ = 'free' AND j.nr > 2 THEN
            sqrt(greatest(j.syy_r - j.sxy_r / j.sxx_r * j.sxy_r, 0.0) / (j.nr - 2))
        WHEN __bend_kind__ = 'joined' THEN sqrt(j.s2)
    END AS line_sd,
    CASE
        WHEN __bend_kind__ = 'free' AND j.nr > 2 THEN sqrt(greatest(
            j.syy_r - j.sxy_r / j.sxx_r * j.sxy_r, 0.0) / (j.nr - 2) / j.sxx_r)
        WHEN __bend_kind__ = 'joined' THEN sqrt(greatest(j.v11, 0.0))
    END AS line_slope_se,
    CASE WHEN __bend_kind__ = 'free' THEN j.nr - 2 ELSE j.n - 3 END AS line_df,
    CASE WHEN __bend_kind__ = 'free' THEN j.xr ELSE j.xm + j.u_c END AS centre_x,
    CASE
        WHEN __bend_kind__ = 'free' THEN j.yr
        ELSE j.ym + (j.b + j.d) * j.u_c + j.d * j.w_off
    END AS centre_y,
    CASE
        WHEN __bend_kind__ = 'free' AND j.nr > 2 THEN sqrt(greatest(
            j.syy_r - j.sxy_r / j.sxx_r * j.sxy_r, 0.0) / (j.nr - 2) / j.nr)
        WHEN __bend_kind__ = 'joined' THEN sqrt(greatest(
            j.s2 / j.n + j.w_off * j.w_off * j.vdd
            - CASE WHEN j.v11 > 0 THEN (j.w_off * j.v1d) * (j.w_off * j.v1d) / j.v11
                   ELSE 0.0 END, 0.0))
    END AS centre_se,
    j.rss_bent <= pow(2.0, -40) * j.syy AS exact,
    a.x_first AS search_from,
    j.rss_one,
    j.rss_bent
FROM joined_centre AS j
JOIN anchor AS a USING (gid)
