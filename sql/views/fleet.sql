-- The units of each fleet taken together: the pooled and random-effects slope, the spread of
-- slopes between units, and whether the units may be pooled into one line (ICH Q1E tests).

-- One row per fleet: the units sharing the values of the fit's fleet columns (one row for the
-- whole fit when it names none). Only units whose fit status is ok take part. Columns:
--   fleet columns   the fit's fleet columns (none by default)
--   units           units taking part (k); n: their readings (N)
--   slope_fixed, slope_fixed_se
--                   inverse-variance (fixed-effect) pooled slope sum w b / sum w, w = 1 / se^2,
--                   and 1 / sqrt(sum w)
--   slope_q, slope_q_p
--                   Cochran's Q = sum w (b - slope_fixed)^2 and P(chi2(k - 1) > Q)
--   slope_i2        Higgins and Thompson's (2002) I^2 = max(0, (Q - (k - 1)) / Q)
--   slope_tau       DerSimonian and Laird's (1986) between-unit standard deviation of the
--                   slopes: tau^2 = max(0, (Q - (k - 1)) / (sum w - sum w^2 / sum w))
--   slope_mean, slope_mean_se
--                   random-effects mean slope sum r b / sum r, r = 1 / (se^2 + tau^2), and
--                   1 / sqrt(sum r)
--   slope_tau_pm, slope_mean_pm
--                   the same with Paule and Mandel's tau^2 (the root of
--                   sum r (b - mean)^2 = k - 1, or 0), by 100 steps of the DerSimonian and
--                   Kacker (2007) iteration from 0 (a fixed count keeps the SQL a plain
--                   expression; it converges in far fewer)
--   same_slope_f, same_slope_p
--                   F test of one common slope against a line per unit (analysis of
--                   covariance on the readings: df k - 1 and N - 2k)
--   same_intercept_f, same_intercept_p
--                   F test of one line against a common slope with a line per unit
--                   (df k - 1 and N - k - 1, on the common-slope model's residual variance)
--   pool            ICH Q1E decision at the fit's pool_alpha (0.25 unless set): 'none' when
--                   same_slope_p < pool_alpha, else 'slopes' (a common slope, an intercept per
--                   unit) when same_intercept_p < pool_alpha, else 'all' (one line)
--   pooled_slope, pooled_slope_se, pooled_slope_lo, pooled_slope_hi, pooled_intercept,
--   pooled_intercept_se, pooled_intercept_lo, pooled_intercept_hi, pooled_resid_sd, pooled_df
--                   the pooled model pool chose: one line for 'all'; the common slope for
--                   'slopes' (no common intercept); intervals at the fit's level (Student t,
--                   pooled_df degrees of freedom); NULL for 'none'
--   pooled_cross_x, pooled_cross_bound
--                   with a limit: where the pooled line reaches it, and the x where the one-sided
--                   95% confidence bound of the mean line meets it (ICH Q1E); for 'slopes' the
--                   earliest over the units' lines
--   note            why values are missing
--
-- The analysis of covariance comes from the stored per-unit sums (n, means, sxx, sxy, syy,
-- rss), never from the rows. With b_i the unit slopes, b_c = sum sxy / sum sxx the common
-- slope, and X, Y, Sxx, Sxy the fleet's merged centred sums (Chan, Golub and LeVeque), b_1 =
-- Sxy / Sxx:
--   rss of a line per unit     sum rss_i
--   rss of the common slope    sum rss_i + sum sxx_i (b_i - b_c)^2
--   rss of one line            the common slope's + (b_c - b_1)^2 sum sxx_i
--                              + sum n_i (y_mean_i - Y - b_1 (x_mean_i - X))^2
-- each a sum of non-negative terms (no cancellation). Fleet columns must not be named like a
-- column of this view or start with tl_.
CREATE OR REPLACE VIEW __view__ AS
WITH unit AS MATERIALIZED (
    SELECT
        f.__group__,
        1 AS tl_one,
        coalesce(f.status = 'ok' AND f.slope_se > 0 AND isfinite(f.slope_se), false) AS tl_in,
        f.slope AS tl_b,
        f.slope_se * f.slope_se AS tl_v,
        m.n AS tl_n,
        m.x_mean AS tl_xm,
        m.y_mean AS tl_ym,
        m.x_min AS tl_x_min,
        m.sxx AS tl_sxx,
        m.sxy AS tl_sxy,
        m.rss AS tl_rss
    FROM __fit_view__ AS f
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(f.__group__)
),
taking_part AS (
    SELECT
        __fleet__,
        tl_one,
        tl_in,
        CASE WHEN tl_in THEN tl_b END AS tl_b,
        CASE WHEN tl_in THEN tl_v END AS tl_v,
        CASE WHEN tl_in THEN 1 / tl_v END AS tl_w,
        CASE WHEN tl_in THEN tl_n END AS tl_n,
        CASE WHEN tl_in THEN tl_xm END AS tl_xm,
        CASE WHEN tl_in THEN tl_ym END AS tl_ym,
        CASE WHEN tl_in THEN tl_x_min END AS tl_x_min,
        CASE WHEN tl_in THEN tl_sxx END AS tl_sxx,
        CASE WHEN tl_in THEN tl_sxy END AS tl_sxy,
        CASE WHEN tl_in THEN tl_rss END AS tl_rss
    FROM unit
),
centres AS (
    -- first pass: the fleet's means, to centre the second
    SELECT
        *,
        sum(tl_w * tl_b) OVER tl_fleet / sum(tl_w) OVER tl_fleet AS tl_fixed,
        sum(tl_sxy) OVER tl_fleet / sum(tl_sxx) OVER tl_fleet AS tl_bc,
        sum(tl_n * tl_xm) OVER tl_fleet / sum(tl_n) OVER tl_fleet AS tl_x,
        sum(tl_n * tl_ym) OVER tl_fleet / sum(tl_n) OVER tl_fleet AS tl_y
    FROM taking_part
    WINDOW tl_fleet AS (PARTITION BY __fleet__)
),
merged AS (
    -- the fleet's centred sums about its own means (Chan, Golub and LeVeque merge)
    SELECT
        *,
        sum(tl_sxx + tl_n * (tl_xm - tl_x) * (tl_xm - tl_x)) OVER tl_fleet AS tl_sxx_all,
        sum(tl_sxy + tl_n * (tl_xm - tl_x) * (tl_ym - tl_y)) OVER tl_fleet AS tl_sxy_all
    FROM centres
    WINDOW tl_fleet AS (PARTITION BY __fleet__)
),
fleet AS (
    SELECT
        __fleet__,
        tl_one,
        count(tl_w) AS tl_k,
        sum(tl_n) AS tl_nn,
        sum(tl_w) AS tl_sw,
        sum(tl_w * tl_w) AS tl_sw2,
        any_value(tl_fixed) AS tl_fixed,
        sum(tl_w * (tl_b - tl_fixed) * (tl_b - tl_fixed)) AS tl_q,
        any_value(tl_bc) AS tl_bc,
        sum(tl_sxx) AS tl_sxx_w,
        any_value(tl_x) AS tl_x,
        any_value(tl_y) AS tl_y,
        min(tl_x_min) AS tl_x_min,
        any_value(tl_sxx_all) AS tl_sxx_all,
        any_value(tl_sxy_all / tl_sxx_all) AS tl_b1,
        sum(tl_rss) AS tl_rss_sep,
        sum(tl_sxx * (tl_sxy / tl_sxx - tl_bc) * (tl_sxy / tl_sxx - tl_bc)) AS tl_ss_slopes,
        sum(tl_n * (tl_ym - tl_y - tl_sxy_all / tl_sxx_all * (tl_xm - tl_x))
            * (tl_ym - tl_y - tl_sxy_all / tl_sxx_all * (tl_xm - tl_x))) AS tl_ss_between,
        list({'b': tl_b, 'v': tl_v, 'n': tl_n, 'xm': tl_xm, 'ym': tl_ym}) FILTER (WHERE tl_in)
            AS tl_units
    FROM merged
    GROUP BY __fleet__, tl_one
),
dl AS (
    SELECT
        *,
        CASE
            WHEN tl_k >= 2 THEN greatest((tl_q - (tl_k - 1)) / (tl_sw - tl_sw2 / tl_sw), 0)
            WHEN tl_k = 1 THEN 0.0
        END AS tl_tau2,
        list_reduce(
            list_concat([0.0], list_transform(range(100), lambda tl_i: CAST(tl_i AS DOUBLE))),
            lambda tl_t, tl_i: list_transform(
                [list_sum(list_transform(tl_units, lambda tl_u: tl_u.b / (tl_u.v + tl_t)))
                    / list_sum(list_transform(tl_units, lambda tl_u: 1 / (tl_u.v + tl_t)))],
                lambda tl_m: CASE
                    WHEN tl_k < 2 THEN 0.0
                    ELSE greatest(tl_t + (list_sum(list_transform(tl_units, lambda tl_u:
                            (tl_u.b - tl_m) * (tl_u.b - tl_m) / (tl_u.v + tl_t))) - (tl_k - 1))
                        / list_sum(list_transform(tl_units, lambda tl_u:
                            (tl_u.b - tl_m) * (tl_u.b - tl_m)
                            / ((tl_u.v + tl_t) * (tl_u.v + tl_t)))), 0)
                END
            )[1]
        ) AS tl_tau2_pm,
        tl_rss_sep + tl_ss_slopes AS tl_rss_cs,
        tl_rss_sep + tl_ss_slopes + (tl_bc - tl_b1) * (tl_bc - tl_b1) * tl_sxx_w + tl_ss_between
            AS tl_rss_one
    FROM fleet
),
tests AS (
    SELECT
        *,
        list_sum(list_transform(tl_units, lambda tl_u: 1 / (tl_u.v + tl_tau2))) AS tl_sr,
        list_sum(list_transform(tl_units, lambda tl_u: tl_u.b / (tl_u.v + tl_tau2)))
            / list_sum(list_transform(tl_units, lambda tl_u: 1 / (tl_u.v + tl_tau2))) AS tl_mean,
        list_sum(list_transform(tl_units, lambda tl_u: 1 / (tl_u.v + tl_tau2_pm))) AS tl_sr_pm,
        list_sum(list_transform(tl_units, lambda tl_u: tl_u.b / (tl_u.v + tl_tau2_pm)))
            / list_sum(list_transform(tl_units, lambda tl_u: 1 / (tl_u.v + tl_tau2_pm)))
            AS tl_mean_pm,
        CASE
            WHEN tl_k >= 2 AND tl_nn - 2 * tl_k > 0 AND tl_rss_sep > 0
                THEN (tl_ss_slopes / (tl_k - 1)) / (tl_rss_sep / (tl_nn - 2 * tl_k))
        END AS tl_f_slope,
        CASE
            WHEN tl_k >= 2 AND tl_nn - tl_k - 1 > 0 AND tl_rss_cs > 0
                THEN ((tl_rss_one - tl_rss_cs) / (tl_k - 1)) / (tl_rss_cs / (tl_nn - tl_k - 1))
        END AS tl_f_int
    FROM dl
),
decided AS (
    SELECT
        *,
        tl_f_upper(tl_f_slope, tl_k - 1, tl_nn - 2 * tl_k) AS tl_p_slope,
        tl_f_upper(tl_f_int, tl_k - 1, tl_nn - tl_k - 1) AS tl_p_int
    FROM tests
),
pooled AS (
    SELECT
        *,
        CASE
            WHEN tl_p_slope IS NULL OR tl_p_int IS NULL THEN NULL
            WHEN tl_p_slope < __pool_alpha__ THEN 'none'
            WHEN tl_p_int < __pool_alpha__ THEN 'slopes'
            ELSE 'all'
        END AS tl_pool
    FROM decided
),
line AS (
    SELECT
        *,
        CASE tl_pool WHEN 'all' THEN tl_b1 WHEN 'slopes' THEN tl_bc END AS tl_slope,
        CASE tl_pool WHEN 'all' THEN tl_nn - 2 WHEN 'slopes' THEN tl_nn - tl_k - 1 END AS tl_df,
        CASE tl_pool
            WHEN 'all' THEN sqrt(tl_rss_one / (tl_nn - 2))
            WHEN 'slopes' THEN sqrt(tl_rss_cs / (tl_nn - tl_k - 1))
        END AS tl_s,
        CASE tl_pool WHEN 'all' THEN tl_sxx_all WHEN 'slopes' THEN tl_sxx_w END AS tl_sxx_line
    FROM pooled
),
line_se AS (
    SELECT
        *,
        tl_s / sqrt(tl_sxx_line) AS tl_slope_se,
        CASE WHEN tl_pool = 'all' THEN tl_y - tl_b1 * tl_x END AS tl_intercept,
        CASE
            WHEN tl_pool = 'all' THEN tl_s * sqrt(1 / tl_nn + tl_x * tl_x / tl_sxx_all)
        END AS tl_intercept_se,
        -- both quantiles from one call of the macro (each call site costs planning time)
        list_transform([(1 - __level__) / 2, 0.05], lambda tl_q: tl_t_crit(tl_q, tl_df))
            AS tl_t_both,
        CAST(__limit_or_null__ AS DOUBLE) AS tl_limit
    FROM line
),
quantiles AS (
    SELECT *, tl_t_both[1] AS tl_t_level, tl_t_both[2] AS tl_t_bound
    FROM line_se
),
projected AS (
    -- the crossing view's Fieller roots (crossing.sql) for each pooled line: one for 'all'
    -- (the fleet's means), one per unit for 'slopes' (the unit's means, the common slope)
    SELECT
        *,
        CASE WHEN tl_slope <> 0
            THEN (tl_t_bound * tl_slope_se / tl_slope) * (tl_t_bound * tl_slope_se / tl_slope)
        END AS tl_g,
        CASE WHEN tl_slope <> 0 THEN list_transform(
            CASE
                WHEN tl_pool = 'all' THEN [{'n': tl_nn, 'xm': tl_x, 'ym': tl_y}]
                ELSE list_transform(tl_units,
                    lambda tl_u: {'n': tl_u.n, 'xm': tl_u.xm, 'ym': tl_u.ym})
            END,
            lambda tl_l: {'xm': tl_l.xm, 'n': tl_l.n, 'u0': (tl_limit - tl_l.ym) / tl_slope}
        ) END AS tl_lines
    FROM quantiles
),
crossed AS (
    SELECT
        *,
        list_min(list_transform(tl_lines, lambda tl_l: tl_l.xm + tl_l.u0)) AS tl_cross,
        list_min(list_transform(tl_lines, lambda tl_l: CASE
            WHEN tl_g < 1 THEN tl_l.xm + (tl_l.u0 - (tl_t_bound * tl_s / abs(tl_slope))
                * sqrt(tl_l.u0 * tl_l.u0 / tl_sxx_line + (1 - tl_g) / tl_l.n)) / (1 - tl_g)
        END)) AS tl_bound,
        list_bool_or(list_transform(tl_lines, lambda tl_l: tl_l.xm + tl_l.u0 < tl_x_min))
            AS tl_away
    FROM projected
)
SELECT
    __fleet__,
    CAST(tl_k AS BIGINT) AS units,
    CAST(tl_nn AS BIGINT) AS n,
    tl_fixed AS slope_fixed,
    1 / sqrt(tl_sw) AS slope_fixed_se,
    CASE WHEN tl_k >= 2 THEN tl_q END AS slope_q,
    CASE WHEN tl_k >= 2 THEN tl_chi2_upper(tl_q, tl_k - 1) END AS slope_q_p,
    CASE WHEN tl_k >= 2 AND tl_q > 0 THEN greatest((tl_q - (tl_k - 1)) / tl_q, 0) END AS slope_i2,
    sqrt(tl_tau2) AS slope_tau,
    tl_mean AS slope_mean,
    1 / sqrt(tl_sr) AS slope_mean_se,
    CASE WHEN tl_k >= 1 THEN sqrt(tl_tau2_pm) END AS slope_tau_pm,
    tl_mean_pm AS slope_mean_pm,
    1 / sqrt(tl_sr_pm) AS slope_mean_pm_se,
    tl_f_slope AS same_slope_f,
    tl_p_slope AS same_slope_p,
    tl_f_int AS same_intercept_f,
    tl_p_int AS same_intercept_p,
    tl_pool AS pool,
    tl_slope AS pooled_slope,
    tl_slope_se AS pooled_slope_se,
    tl_slope - tl_t_level * tl_slope_se AS pooled_slope_lo,
    tl_slope + tl_t_level * tl_slope_se AS pooled_slope_hi,
    tl_intercept AS pooled_intercept,
    tl_intercept_se AS pooled_intercept_se,
    tl_intercept - tl_t_level * tl_intercept_se AS pooled_intercept_lo,
    tl_intercept + tl_t_level * tl_intercept_se AS pooled_intercept_hi,
    tl_s AS pooled_resid_sd,
    CAST(tl_df AS BIGINT) AS pooled_df,
    CASE WHEN NOT tl_away AND isfinite(tl_cross) THEN tl_cross END AS pooled_cross_x,
    CASE WHEN NOT tl_away AND isfinite(tl_bound) THEN tl_bound END AS pooled_cross_bound,
    nullif(concat_ws('; ',
        CASE
            WHEN tl_k = 0 THEN 'no unit with a fitted slope'
            WHEN tl_k = 1 THEN 'one unit: nothing to compare'
            WHEN tl_p_slope IS NULL OR tl_p_int IS NULL
                THEN 'poolability not tested: no residual degrees of freedom or variance'
            WHEN tl_pool = 'none' THEN 'slopes differ: no pooled line'
        END,
        CASE
            WHEN tl_limit IS NULL OR tl_slope IS NULL THEN NULL
            WHEN tl_slope = 0 THEN 'flat pooled line never reaches the limit'
            WHEN tl_away THEN 'slope points away from the limit'
            WHEN NOT coalesce(isfinite(tl_bound), false) THEN 'bound unbounded'
        END
    ), '') AS note
FROM crossed
