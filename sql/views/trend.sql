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
--                   (an earlier line that fits exactly, residual sum below 1e-10 of syy, has
--                   s_a = 0 and no trend_t: the difference of sums leaves only rounding)
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
    SELECT __group__, count(*) AS tl_n_b, avg(x) AS tl_xm_b, avg(y) AS tl_ym_b
    FROM latest
    GROUP BY __group__
),
batch_sums AS MATERIALIZED (
    SELECT
        b.__group__,
        any_value(b.tl_n_b) AS tl_n_b,
        any_value(b.tl_xm_b) AS tl_xm_b,
        any_value(b.tl_ym_b) AS tl_ym_b,
        sum((l.x - b.tl_xm_b) * (l.x - b.tl_xm_b)) AS tl_sxx_b,
        sum((l.x - b.tl_xm_b) * (l.y - b.tl_ym_b)) AS tl_sxy_b,
        sum((l.y - b.tl_ym_b) * (l.y - b.tl_ym_b)) AS tl_syy_b
    FROM latest AS l
    JOIN batch_means AS b ON ROW(b.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
    GROUP BY b.__group__
),
earlier AS (
    SELECT
        b.__group__,
        CAST(m.n - b.tl_n_b AS BIGINT) AS tl_n_a,
        b.tl_n_b,
        m.n,
        CASE
            WHEN m.n > b.tl_n_b THEN (m.n * m.x_mean - b.tl_n_b * b.tl_xm_b) / (m.n - b.tl_n_b)
        END AS tl_xm_a,
        CASE
            WHEN m.n > b.tl_n_b THEN (m.n * m.y_mean - b.tl_n_b * b.tl_ym_b) / (m.n - b.tl_n_b)
        END AS tl_ym_a,
        m.sxx, m.sxy, m.syy, b.tl_xm_b, b.tl_ym_b, b.tl_sxx_b, b.tl_sxy_b, b.tl_syy_b
    FROM batch_sums AS b
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(b.__group__)
),
downdated AS (
    SELECT
        *,
        greatest(sxx - tl_sxx_b
            - tl_n_a * tl_n_b / n * (tl_xm_b - tl_xm_a) * (tl_xm_b - tl_xm_a), 0) AS tl_sxx_a,
        sxy - tl_sxy_b
            - tl_n_a * tl_n_b / n * (tl_xm_b - tl_xm_a) * (tl_ym_b - tl_ym_a) AS tl_sxy_a,
        greatest(syy - tl_syy_b
            - tl_n_a * tl_n_b / n * (tl_ym_b - tl_ym_a) * (tl_ym_b - tl_ym_a), 0) AS tl_syy_a
    FROM earlier
),
lines AS MATERIALIZED (
    SELECT
        *,
        CASE
            WHEN tl_n_a < 3 THEN 'fewer than 3 earlier readings'
            WHEN NOT tl_sxx_a > 0 THEN 'earlier x without spread'
        END AS note,
        CASE WHEN tl_n_a >= 3 AND tl_sxx_a > 0 THEN tl_sxy_a / tl_sxx_a END AS tl_slope_a,
        CASE
            WHEN tl_n_a >= 3 AND tl_sxx_a > 0
                THEN greatest(
                    -- a residual sum below 1e-10 of syy is rounding from the downdate: 0
                    sqrt(CASE
                        WHEN tl_syy_a - tl_sxy_a * tl_sxy_a / tl_sxx_a > 1e-10 * tl_syy_a
                            THEN tl_syy_a - tl_sxy_a * tl_sxy_a / tl_sxx_a
                        ELSE 0
                    END / (tl_n_a - 2)),
                    coalesce(CAST(__y_resolution_or_null__ AS DOUBLE) / sqrt(12), 0))
        END AS tl_s_a
    FROM downdated
),
quantiles AS MATERIALIZED (
    SELECT df, tl_t_crit(CAST(__alpha_trend__ AS DOUBLE) / 2, df) AS tl_t_pred
    FROM (SELECT DISTINCT tl_n_a - 2 AS df FROM lines WHERE note IS NULL) AS sizes
),
predicted AS (
    SELECT
        l.__group__,
        l.x,
        l.y,
        l.file_id,
        l.batch_id,
        g.tl_n_a AS n_before,
        g.note,
        g.tl_ym_a + g.tl_slope_a * (l.x - g.tl_xm_a) AS y_before,
        g.tl_s_a * sqrt(1 + 1.0 / g.tl_n_a
            + (l.x - g.tl_xm_a) * (l.x - g.tl_xm_a) / g.tl_sxx_a) AS tl_se,
        q.tl_t_pred,
        g.tl_n_a - 2 AS tl_df
    FROM latest AS l
    JOIN lines AS g ON ROW(g.__group__) IS NOT DISTINCT FROM ROW(l.__group__)
    LEFT JOIN quantiles AS q ON q.df = g.tl_n_a - 2
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
    y_before - tl_t_pred * tl_se AS pred_lo,
    y_before + tl_t_pred * tl_se AS pred_hi,
    trend_t,
    CASE WHEN trend_t IS NOT NULL THEN tl_t_two_sided(trend_t, tl_df) END AS trend_p,
    CASE
        WHEN trend_t IS NOT NULL THEN tl_t_two_sided(trend_t, tl_df) < __alpha_trend__
    END AS outside,
    note
FROM tested
