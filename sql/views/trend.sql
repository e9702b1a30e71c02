-- Each reading of the latest batch against the prediction interval of its group's line through
-- the earlier readings (the out-of-trend check of stability work, common practice): one row per
-- reading of the fit's latest batch.

-- The earlier line needs only the count, means, sxx, sxy and syy of the group's earlier rows.
-- They come from the stored sums (the moments view) less the sums of the latest batch's rows of
-- the group, by the parallel-update formulas of Chan, Golub and LeVeque read backwards: with
-- the whole (n, means, S) and the batch's part B (n_b, means_b, S_b, centred on its own
-- means), the earlier part A has n_a = n - n_b, mean_a = (n mean - n_b mean_b) / n_a and
-- S_a = S - S_b - (n_a n_b / n) d d', d = mean_b - mean_a. (A difference of sums loses digits
-- when the batch holds most of the group; the earlier part needs at least 3 rows and x spread.)
-- Columns:
--   group columns   as in the fit view
--   x, y            the reading (DOUBLE)
--   file_id, batch_id
--                   where it came from (lineage); batch_id is the fit's latest batch
--   n_before        the group's rows before that batch
--   y_before        the earlier line at x: y_mean_a + slope_a (x - x_mean_a)
--   pred_lo, pred_hi
--                   the prediction interval at 1 - alpha_trend (alpha unless set) for one new
--                   reading at x: y_before -/+ t s_a sqrt(1 + 1 / n_a + (x - x_mean_a)^2 / sxx_a),
--                   s_a^2 = rss_a / (n_a - 2), t = tl_t_crit(alpha_trend / 2, n_a - 2)
--   trend_t, trend_p
--                   (y - y_before) / that standard error, and its two-sided Student t p-value
--                   with n_a - 2 degrees of freedom
--                   (s_a at least resolution / sqrt(12) when y has a resolution, as in fit.sql)
--   outside         trend_p < alpha_trend: the reading lies outside the interval
--   note            NULL, or why there is no interval: 'fewer than 3 earlier readings',
--                   'earlier x without spread'
CREATE OR REPLACE VIEW __view__ AS
WITH fit_rows AS MATERIALIZED (
    SELECT
        s.__group__,
        CAST(s.__x__ AS DOUBLE) AS x,
        CAST(s.__y__ AS DOUBLE) AS y,
        s.file_id,
        f.batch_id
    FROM __source__ AS s
    JOIN ingest_files AS f ON f.file_id = s.file_id
    WHERE s.__x__ IS NOT NULL AND s.__y__ IS NOT NULL
        AND isfinite(CAST(s.__x__ AS DOUBLE)) AND isfinite(CAST(s.__y__ AS DOUBLE))
),
latest AS MATERIALIZED (
    SELECT * FROM fit_rows WHERE batch_id = (SELECT max(batch_id) FROM fit_rows)
),
batch_means AS (
    SELECT __group__, count(*) AS n_b, avg(x) AS xm_b, avg(y) AS ym_b
    FROM latest
    GROUP BY __group__
),
batch_sums AS MATERIALIZED (
    SELECT
        b.__group__,
        any_value(b.n_b) AS n_b,
        any_value(b.xm_b) AS xm_b,
        any_value(b.ym_b) AS ym_b,
        sum((l.x - b.xm_b) * (l.x - b.xm_b)) AS sxx_b,
        sum((l.x - b.xm_b) * (l.y - b.ym_b)) AS sxy_b,
        sum((l.y - b.ym_b) * (l.y - b.ym_b)) AS syy_b
    FROM latest AS l
    JOIN batch_means AS b ON ROW(b.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
    GROUP BY b.__group__
),
earlier AS (
    SELECT
        b.__group__,
        CAST(m.n - b.n_b AS BIGINT) AS n_a,
        b.n_b,
        m.n,
        CASE WHEN m.n > b.n_b THEN (m.n * m.x_mean - b.n_b * b.xm_b) / (m.n - b.n_b) END AS xm_a,
        CASE WHEN m.n > b.n_b THEN (m.n * m.y_mean - b.n_b * b.ym_b) / (m.n - b.n_b) END AS ym_a,
        m.sxx, m.sxy, m.syy, b.xm_b, b.ym_b, b.sxx_b, b.sxy_b, b.syy_b
    FROM batch_sums AS b
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(b.__group__)
),
downdated AS (
    SELECT
        *,
        greatest(sxx - sxx_b - n_a * n_b / n * (xm_b - xm_a) * (xm_b - xm_a), 0) AS sxx_a,
        sxy - sxy_b - n_a * n_b / n * (xm_b - xm_a) * (ym_b - ym_a) AS sxy_a,
        greatest(syy - syy_b - n_a * n_b / n * (ym_b - ym_a) * (ym_b - ym_a), 0) AS syy_a
    FROM earlier
),
lines AS MATERIALIZED (
    SELECT
        *,
        CASE
            WHEN n_a < 3 THEN 'fewer than 3 earlier readings'
            WHEN NOT sxx_a > 0 THEN 'earlier x without spread'
        END AS note,
        CASE WHEN n_a >= 3 AND sxx_a > 0 THEN sxy_a / sxx_a END AS slope_a,
        CASE
            WHEN n_a >= 3 AND sxx_a > 0
                THEN greatest(sqrt(greatest(syy_a - sxy_a * sxy_a / sxx_a, 0) / (n_a - 2)),
                    coalesce(CAST(__y_resolution_or_null__ AS DOUBLE) / sqrt(12), 0))
        END AS s_a
    FROM downdated
),
quantiles AS MATERIALIZED (
    SELECT df, tl_t_crit(CAST(__alpha_trend__ AS DOUBLE) / 2, df) AS t_pred
    FROM (SELECT DISTINCT n_a - 2 AS df FROM lines WHERE note IS NULL) AS sizes
),
predicted AS (
    SELECT
        l.__group__,
        l.x,
        l.y,
        l.file_id,
        l.batch_id,
        g.n_a AS n_before,
        g.note,
        g.ym_a + g.slope_a * (l.x - g.xm_a) AS y_before,
        g.s_a * sqrt(1 + 1.0 / g.n_a + (l.x - g.xm_a) * (l.x - g.xm_a) / g.sxx_a) AS tl_se,
        q.t_pred,
        g.n_a - 2 AS tl_df
    FROM latest AS l
    JOIN lines AS g ON ROW(g.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
    LEFT JOIN quantiles AS q ON q.df = g.n_a - 2
),
tested AS (
    SELECT
        *,
        CASE WHEN tl_se > 0 THEN (y - y_before) / tl_se END AS trend_t
    FROM predicted
)
SELECT
    __group__,
    x,
    y,
    file_id,
    batch_id,
    n_before,
    y_before,
    y_before - t_pred * tl_se AS pred_lo,
    y_before + t_pred * tl_se AS pred_hi,
    trend_t,
    CASE WHEN trend_t IS NOT NULL THEN tl_t_two_sided(trend_t, tl_df) END AS trend_p,
    CASE
        WHEN trend_t IS NOT NULL THEN tl_t_two_sided(trend_t, tl_df) < __alpha_trend__
    END AS outside,
    note
FROM tested
