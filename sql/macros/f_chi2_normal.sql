-- F, chi-square and normal distributions as persisted DuckDB macros: upper tail probabilities
-- tl_f_upper(f, d1, d2) = P(F(d1, d2) > f), tl_chi2_upper(q, df) = P(chi2(df) > q) and the
-- two-sided normal p-value tl_norm_two_sided(z) = P(|Z| > |z|), in plain SQL, for the
-- poolability tests, Cochran's Q and the z scores of the fleet views.

-- Both are regularized incomplete functions evaluated by a continued fraction (or a series)
-- of fixed depth, computed backwards from the deepest level in one list_reduce (backward
-- evaluation is stable and needs no convergence test). Accuracy against scipy.stats (measured
-- on random arguments down to tails of 1e-200): about 10 significant digits for degrees of
-- freedom up to 60,000, about 8.5 beyond a million, where the log of the prefactor (a sum of
-- lgamma values of that size) limits it; the normal p-value to about 12.5 digits for every z.
-- NULL in, or df <= 0, gives NULL out.

-- Continued fraction part of I_x(a, b) = x^a (1 - x)^b / (a B(a, b)) * cf, with
-- cf = 1 / (1 + d1 / (1 + d2 / (1 + ...))), d(2m + 1) = -(a + m)(a + b + m) x /
-- ((a + 2m)(a + 2m + 1)) and d(2m) = m (b - m) x / ((a + 2m - 1)(a + 2m)) (the classical
-- fraction of the incomplete beta function, e.g. DLMF 8.17.22), 200 levels deep: enough on
-- the side x < (a + 1) / (a + b + 2), where it is used.
CREATE OR REPLACE MACRO tl_dist_aux_beta_cf(a, b, x) AS 1 / list_reduce(
    list_concat([1.0], list_transform(range(200, 0, -1), lambda tl_d_j: CAST(tl_d_j AS DOUBLE))),
    lambda tl_d_t, tl_d_j: 1 + CASE
        WHEN tl_d_j % 2 = 1 THEN -(a + (tl_d_j - 1) / 2) * (a + b + (tl_d_j - 1) / 2) * x
            / ((a + tl_d_j - 1) * (a + tl_d_j))
        ELSE (tl_d_j / 2) * (b - tl_d_j / 2) * x / ((a + tl_d_j - 1) * (a + tl_d_j))
    END / tl_d_t
);

-- ln of the prefactor x^a (1 - x)^b / (a B(a, b)), with 1 - x given as y (formed without
-- cancellation by the caller).
CREATE OR REPLACE MACRO tl_dist_aux_beta_front(a, b, x, y) AS
    a * ln(x) + b * ln(y) - lgamma(a) - lgamma(b) + lgamma(a + b) - ln(a);

-- Regularized incomplete beta I_x(a, b) for 0 < x < 1 with y = 1 - x: the continued fraction
-- on the side where it converges fast, I_x(a, b) = 1 - I_y(b, a) on the other.
CREATE OR REPLACE MACRO tl_dist_aux_ibeta(a, b, x, y) AS
    CASE
        WHEN x < (a + 1) / (a + b + 2)
            THEN exp(tl_dist_aux_beta_front(a, b, x, y)) * tl_dist_aux_beta_cf(a, b, x)
        ELSE 1 - exp(tl_dist_aux_beta_front(b, a, y, x)) * tl_dist_aux_beta_cf(b, a, y)
    END;

-- Upper tail P(F(d1, d2) > f) = I_x(d2 / 2, d1 / 2) with x = d2 / (d2 + d1 f), y = 1 - x
-- = d1 f / (d2 + d1 f); 1 for f <= 0, 0 for f = +inf.
CREATE OR REPLACE MACRO tl_f_upper(f, d1, d2) AS
    CASE
        WHEN f IS NULL OR d1 IS NULL OR d2 IS NULL OR isnan(CAST(f AS DOUBLE))
            OR d1 <= 0 OR d2 <= 0 THEN NULL
        WHEN f <= 0 THEN 1.0
        WHEN isinf(CAST(f AS DOUBLE)) THEN 0.0
        ELSE greatest(least(tl_dist_aux_ibeta(
            CAST(d2 AS DOUBLE) / 2, CAST(d1 AS DOUBLE) / 2,
            CAST(d2 AS DOUBLE) / (CAST(d2 AS DOUBLE) + CAST(d1 AS DOUBLE) * f),
            CAST(d1 AS DOUBLE) * f / (CAST(d2 AS DOUBLE) + CAST(d1 AS DOUBLE) * f)), 1.0), 0.0)
    END;

-- Regularized upper incomplete gamma Q(a, x) for x > 0: for x < a + 1 as 1 - P(a, x) with
-- P(a, x) = x^a e^-x / Gamma(a + 1) (1 + x / (a + 1) (1 + x / (a + 2) (1 + ...))), 400 terms;
-- otherwise x^a e^-x / Gamma(a) / (x + 1 - a - 1 (1 - a) / (x + 3 - a - 2 (2 - a) / ...)),
-- Legendre's continued fraction (DLMF 8.9.2 in its even form), 400 levels.
CREATE OR REPLACE MACRO tl_dist_aux_gamma_q(a, x) AS
    CASE
        WHEN x < a + 1 THEN 1 - exp(a * ln(x) - x - lgamma(a + 1)) * list_reduce(
            list_concat([1.0],
                list_transform(range(400, 0, -1), lambda tl_d_n: CAST(tl_d_n AS DOUBLE))),
            lambda tl_d_h, tl_d_n: 1 + x / (a + tl_d_n) * tl_d_h)
        ELSE exp(a * ln(x) - x - lgamma(a)) / list_reduce(
            list_concat([x + 801 - a],
                list_transform(range(400, 0, -1), lambda tl_d_n: CAST(tl_d_n AS DOUBLE))),
            lambda tl_d_t, tl_d_n: (x + 2 * tl_d_n - 1 - a) - tl_d_n * (tl_d_n - a) / tl_d_t)
    END;

-- Upper tail P(chi2(df) > q) = Q(df / 2, q / 2); 1 for q <= 0, 0 for q = +inf.
CREATE OR REPLACE MACRO tl_chi2_upper(q, df) AS
    CASE
        WHEN q IS NULL OR df IS NULL OR isnan(CAST(q AS DOUBLE)) OR df <= 0 THEN NULL
        WHEN q <= 0 THEN 1.0
        WHEN isinf(CAST(q AS DOUBLE)) THEN 0.0
        ELSE greatest(least(
            tl_dist_aux_gamma_q(CAST(df AS DOUBLE) / 2, CAST(q AS DOUBLE) / 2), 1.0), 0.0)
    END;

-- Two-sided standard normal p-value P(|Z| > |z|), cheap enough for one per row. For s = |z| < 3
-- as 1 - 2 phi(s) s (1 + s^2 / 3 (1 + s^2 / 5 (1 + ...))), the series of P(0 < Z < s) with
-- positive terms only, 40 terms (p is at least 0.0027 there, so the subtraction costs under 3
-- digits); beyond, 2 phi(s) / (s + 1 / (s + 2 / (s + 3 / (s + ...)))), Laplace's continued
-- fraction for the Mills ratio, 40 levels. About 12.5 digits against scipy.stats.norm.sf.
-- Both are evaluated backwards over a list written out in full (the starting value, then
-- 40 ... 1), which the export unrolls for engines without list functions.
CREATE OR REPLACE MACRO tl_norm_two_sided(z) AS
    CASE
        WHEN z IS NULL OR isnan(CAST(z AS DOUBLE)) THEN NULL
        WHEN isinf(CAST(z AS DOUBLE)) THEN 0.0
        ELSE list_transform([abs(CAST(z AS DOUBLE))], lambda tl_d_s: CASE
            WHEN tl_d_s < 3 THEN 1 - 2 * exp(-tl_d_s * tl_d_s / 2) * 0.3989422804014327 * tl_d_s
                * list_reduce(
                    [1.0, 40, 39, 38, 37, 36, 35, 34, 33, 32, 31, 30, 29, 28, 27,
                        26, 25, 24, 23, 22, 21, 20, 19, 18, 17, 16, 15, 14, 13, 12, 11, 10,
                        9, 8, 7, 6, 5, 4, 3, 2, 1],
                    lambda tl_d_h, tl_d_n: 1 + tl_d_s * tl_d_s / (2 * tl_d_n + 1) * tl_d_h)
            ELSE 2 * exp(-tl_d_s * tl_d_s / 2) * 0.3989422804014327 / list_reduce(
                [tl_d_s, 40, 39, 38, 37, 36, 35, 34, 33, 32, 31, 30, 29, 28, 27,
                        26, 25, 24, 23, 22, 21, 20, 19, 18, 17, 16, 15, 14, 13, 12, 11, 10,
                        9, 8, 7, 6, 5, 4, 3, 2, 1],
                lambda tl_d_t, tl_d_n: tl_d_s + tl_d_n / tl_d_t)
        END)[1]
    END;
