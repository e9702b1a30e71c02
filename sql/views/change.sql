-- Has the slope changed? Per group, the slope of the latest window against the straight-line fit
-- of all earlier data, with the difference, its standard error and a Welch-style t test.

-- One row per group that has a window with at least one counted pair (windows view). Columns:
--   group columns     as in the fit view
--   window_start, window_end
--                     bounds of the latest window of the group with a counted pair ("recent")
--   n_recent          pairs in the latest window
--   slope_recent      its slope, as in the windows view
--   slope_recent_se   its standard error
--   n_before          pairs in all earlier windows together ("before")
--   slope_before      least-squares slope of one line through all those pairs
--   slope_before_se   its standard error, sqrt(rss / (n_before - 2) / sxx)
--   difference        slope_recent - slope_before
--   difference_se     sqrt(slope_recent_se^2 + slope_before_se^2): the two slopes come from
--                     disjoint data, so their errors are independent
--   difference_t      difference / difference_se
--   difference_df     Welch-Satterthwaite degrees of freedom of that t (below)
--   difference_p      two-sided p-value of difference_t with difference_df degrees of freedom
--   note              NULL when the test could be made, else why not: 'no earlier window',
--                     'too few points before', 'x constant before', 'too few points recently',
--                     'x constant recently', 'sums out of range', 'both lines fit exactly'
--
-- The two residual variances are not assumed equal, so the test is Welch's: with
-- v_r = slope_recent_se^2 and v_b = slope_before_se^2, the degrees of freedom are the
-- Welch-Satterthwaite approximation
--     df = (v_r + v_b)^2 / (v_r^2 / (n_recent - 2) + v_b^2 / (n_before - 2)),
-- computed as 1 / ((v_r / v)^2 / (n_recent - 2) + (v_b / v)^2 / (n_before - 2)) with
-- v = v_r + v_b so that nothing overflows or underflows; df lies between the smaller of
-- n_recent - 2 and n_before - 2 and their sum. The p-value comes from tl_t_two_sided
-- (sql/macros/t_dist.sql), which takes a fractional df.
--
-- The earlier fit is pooled from the windows' own sums without going back to the rows: with
-- N = sum(n_i), means X = sum(n_i x_mean_i) / N and Y likewise,
--     sxx = sum(sxx_i) + sum(n_i (x_mean_i - X)^2),  sxy = sum(sxy_i) + sum(n_i dx_i dy_i)
-- (dx_i = x_mean_i - X, dy_i = y_mean_i - Y), slope_before = sxy / sxx, and the residual sum of
-- squares about that line splits exactly into three sums of squares, none cancelling:
--     rss = sum(rss_i) + sum((slope_i - slope_before)^2 sxx_i) + sum(n_i (dy_i - slope_before dx_i)^2)
-- where a window with sxx_i = 0 adds no second term (its rss_i is its syy_i).
--
-- Through the origin (the slot __line__ holds sql/parts/line_origin.sql) the windows' sums are
-- about the origin and simply add up: __line__.centred = 0 drops the terms in the means, so
-- sxx = sum(sxx_i), sxy = sum(sxy_i) and
-- rss = sum(rss_i) + sum((slope_i - slope_before)^2 sxx_i), again exact; each line has one
-- parameter (__line__.params), so the degrees of freedom above read n - 1 for n - 2, and
-- 'x constant' means every x is 0.
CREATE OR REPLACE VIEW __view__ AS
WITH windows AS MATERIALIZED (
    SELECT
        __group__,
        window_start,
        window_end,
        n,
        slope,
        slope_se,
        status,
        x_mean,
        y_mean,
        sxx,
        sxy,
        rss,
        row_number() OVER () AS wid
    FROM __windows_view__
    WHERE n > 0
),
latest AS MATERIALIZED (
    SELECT *
    FROM windows
    QUALIFY row_number() OVER (PARTITION BY __group__ ORDER BY window_start DESC) = 1
),
earlier AS MATERIALIZED (
    -- every earlier window of the group, tagged with the id of the group's latest window
    SELECT l.wid AS lid, w.n, w.x_mean, w.y_mean, w.sxx, w.sxy, w.rss,
        CASE WHEN w.sxx > 0 THEN w.sxy / w.sxx END AS slope_i
    FROM latest AS l
    JOIN windows AS w
        ON ROW(w.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
        AND w.window_start < l.window_start
),
means AS (
    SELECT
        lid,
        CAST(sum(n) AS BIGINT) AS n_before,
        count(*) FILTER (WHERE x_mean IS NULL OR sxx IS NULL OR rss IS NULL) AS broken,
        fsum(n * x_mean) / sum(n) AS x_all,
        fsum(n * y_mean) / sum(n) AS y_all
    FROM earlier
    GROUP BY lid
),
spread AS (
    SELECT
        e.lid,
        fsum(e.sxx) + __line__.centred * fsum(e.n * (e.x_mean - m.x_all) * (e.x_mean - m.x_all))
            AS sxx,
        fsum(e.sxy) + __line__.centred * fsum(e.n * (e.x_mean - m.x_all) * (e.y_mean - m.y_all))
            AS sxy
    FROM earlier AS e
    JOIN means AS m USING (lid)
    GROUP BY e.lid
),
line AS (
    SELECT
        m.lid,
        m.n_before,
        m.broken,
        m.x_all,
        m.y_all,
        s.sxx,
        CASE WHEN s.sxx > 0 THEN s.sxy / s.sxx END AS slope_before
    FROM means AS m
    JOIN spread AS s USING (lid)
),
residual AS (
    SELECT
        e.lid,
        fsum(e.rss)
        + fsum(coalesce((e.slope_i - l.slope_before) * (e.slope_i - l.slope_before) * e.sxx, 0.0))
        + __line__.centred * fsum(
            e.n * ((e.y_mean - l.y_all) - l.slope_before * (e.x_mean - l.x_all))
            * ((e.y_mean - l.y_all) - l.slope_before * (e.x_mean - l.x_all))
        ) AS rss
    FROM earlier AS e
    JOIN line AS l USING (lid)
    GROUP BY e.lid
),
before AS (
    SELECT
        l.lid,
        l.n_before,
        l.broken,
        l.sxx,
        l.slope_before,
        CASE
            WHEN l.n_before > __line__.params AND l.sxx > 0
                THEN sqrt(r.rss / (l.n_before - __line__.params) / l.sxx)
        END AS slope_before_se
    FROM line AS l
    JOIN residual AS r USING (lid)
),
compared AS (
    SELECT
        r.__group__,
        r.window_start,
        r.window_end,
        r.n AS n_recent,
        r.slope AS slope_recent,
        r.slope_se AS slope_recent_se,
        r.status AS status_recent,
        b.n_before,
        b.broken,
        b.sxx AS sxx_before,
        b.slope_before,
        b.slope_before_se,
        r.slope - b.slope_before AS difference,
        r.slope_se * r.slope_se + b.slope_before_se * b.slope_before_se AS v
    FROM latest AS r
    LEFT JOIN before AS b ON b.lid = r.wid
),
tested AS (
    SELECT
        *,
        CASE
            WHEN n_before IS NULL THEN 'no earlier window'
            WHEN broken > 0 THEN 'sums out of range'
            WHEN n_before <= __line__.params THEN 'too few points before'
            WHEN NOT sxx_before > 0 THEN 'x constant before'
            WHEN n_recent <= __line__.params THEN 'too few points recently'
            WHEN status_recent = __line__.no_x_spread THEN 'x constant recently'
            WHEN slope_recent_se IS NULL OR slope_before_se IS NULL OR NOT isfinite(v)
                THEN 'sums out of range'
            WHEN v = 0 THEN 'both lines fit exactly'
        END AS why_not,
        sqrt(v) AS se
    FROM compared
),
welch AS (
    SELECT
        *,
        CASE WHEN why_not IS NULL THEN difference / se END AS t,
        CASE
            WHEN why_not IS NULL THEN 1 / (
                (slope_recent_se * slope_recent_se / v) * (slope_recent_se * slope_recent_se / v)
                    / (n_recent - __line__.params)
                + (slope_before_se * slope_before_se / v) * (slope_before_se * slope_before_se / v)
                    / (n_before - __line__.params)
            )
        END AS df
    FROM tested
)
SELECT
    __group__,
    window_start,
    window_end,
    n_recent,
    slope_recent,
    slope_recent_se,
    coalesce(n_before, 0) AS n_before,
    slope_before,
    slope_before_se,
    CASE WHEN isfinite(difference) THEN difference END AS difference,
    CASE WHEN why_not IS NULL AND isfinite(t) THEN se END AS difference_se,
    CASE WHEN why_not IS NULL AND isfinite(t) THEN t END AS difference_t,
    CASE WHEN why_not IS NULL AND isfinite(t) THEN df END AS difference_df,
    CASE WHEN why_not IS NULL AND isfinite(t) THEN tl_t_two_sided(t, df) END AS difference_p,
    CASE
        WHEN why_not IS NOT NULL THEN why_not
        WHEN NOT isfinite(t) THEN 'sums out of range'
    END AS note
FROM welch
