-- Student t distribution as persisted DuckDB macros: upper tail probability
-- tl_t_upper(t, df), two-sided p-value tl_t_two_sided(t, df) and critical value
-- tl_t_crit(q, df), in plain SQL (list functions and lambdas, no UDFs), so that any
-- DuckDB client, the 1.5 command-line client included, evaluates them from a store.
-- Tails come from the regularized incomplete beta function, never as 1 - cdf, and
-- keep their relative accuracy far out in the tail: about 12.5 significant digits
-- or more against scipy and multiple-precision references, for df from 0.05 to
-- 1e100 and tails down to 1e-300; critical values to about 12 digits or more.
-- The tl_t_aux_* macros are internal helpers; the store's schema must be on the
-- search path (USE it when it is ATTACHed under another name), since the macros
-- find each other by name. NULL or NaN in gives NULL out, and so do df <= 0 and q
-- outside (0, 1). df above 1e100 (+inf included) is taken as 1e100, the normal
-- distribution to far below rounding (the continued fraction's terms would
-- underflow beyond about 1e150).

-- ln(1 + v) for v >= 0 without losing a small v: the rounding error made in
-- forming 1 + v cancels in the ratio v / ((1 + v) - 1) (Goldberg's correction).
CREATE OR REPLACE MACRO tl_t_aux_log1p(v) AS
    CASE WHEN 1 + v = 1 THEN v ELSE ln(1 + v) * v / ((1 + v) - 1) END;

-- Tail of Stirling's series for ln Gamma(z), terms up to z^-7; the first term
-- left out is below 1e-18 for z >= 40, where it is used.
CREATE OR REPLACE MACRO tl_t_aux_stirling(z) AS
    1 / (12 * z) - 1 / (360 * z * z * z) + 1 / (1260 * power(z, 5)) - 1 / (1680 * power(z, 7));

-- ln B(a, 1/2) = lgamma(a) + ln sqrt(pi) - lgamma(a + 1/2). For large a the two
-- lgamma values are huge and nearly equal, so their difference is taken from
-- Stirling's series instead, where it is exact to rounding.
CREATE OR REPLACE MACRO tl_t_aux_lbeta_half(a) AS
    CASE
        WHEN a < 40 THEN lgamma(a) + 0.5723649429247001 - lgamma(a + 0.5)
        ELSE 0.5723649429247001 - (
            (a * tl_t_aux_log1p(0.5 / a) - 0.5) + 0.5 * ln(a)
            + tl_t_aux_stirling(a + 0.5) - tl_t_aux_stirling(a)
        )
    END;

-- R_k of the continued fraction below: (p + k)(p + q + k) / ((p + 2k)(p + 2k + 1)),
-- written as a product of ratios so that no factor overflows for huge p or q.
CREATE OR REPLACE MACRO tl_t_aux_cf_r(p, q, k) AS
    ((p + k) / (p + 2 * k)) * ((p + q + k) / (p + 2 * k + 1));

-- Partial denominator E_k = 1 + d(2k + 1) + d(2k) of the even contraction of the
-- continued fraction for I_x(p, q), where d(2k + 1) = -R_k x and
-- d(2k) = k (q - k) x / ((p + 2k - 1)(p + 2k)). When x is close to 1, 1 - R_k x is
-- rewritten with y = 1 - x as an exact polynomial ratio plus R_k y, so E_k keeps
-- its relative accuracy even when 1 - x is as small as 1e-15 (very large df).
CREATE OR REPLACE MACRO tl_t_aux_cf_e(p, q, x, y, k) AS
    CASE
        WHEN x < 0.5 THEN 1 - tl_t_aux_cf_r(p, q, k) * x
        ELSE (p * (1 - q) + k * (2 * p + 3 * k + 2 - q)) / (p + 2 * k) / (p + 2 * k + 1)
            + tl_t_aux_cf_r(p, q, k) * y
    END
    + (k / (p + 2 * k - 1)) * ((q - k) / (p + 2 * k)) * x;

-- Partial numerator N(k + 1) = d(2k + 1) d(2k + 2) of the even contraction.
CREATE OR REPLACE MACRO tl_t_aux_cf_n(p, q, x, k) AS
    -tl_t_aux_cf_r(p, q, k) * x * ((k + 1) / (p + 2 * k + 1)) * ((q - k - 1) / (p + 2 * k + 2)) * x;

-- Continued fraction part of I_x(p, q) = x^p y^q / (p B(p, q)) * cf for x = 1 - y:
-- the even contraction 1 / (E_0 - N_1 / (E_1 - N_2 / (E_2 - ...))) of the
-- classical continued fraction, evaluated backwards from the fixed depth 25 (the
-- 50th convergent of the uncontracted fraction). Used only on the side where it
-- converges fast (see tl_t_aux_big), 25 levels give about 1e-13 relative
-- accuracy for every df from 0.05 to 1e100; backward evaluation is stable.
CREATE OR REPLACE MACRO tl_t_aux_cf(p, q, x, y) AS
    1 / (
        CASE
            WHEN x < 0.5 THEN 1 - (p + q) * x / (p + 1)
            ELSE ((1 - q) + (p + q) * y) / (p + 1)
        END
        - tl_t_aux_cf_n(p, q, x, 0) / list_reduce(
            CAST(range(24, 0, -1) AS DOUBLE[]),
            lambda tl_t_g, tl_t_k: tl_t_aux_cf_e(p, q, x, y, tl_t_k)
                - tl_t_aux_cf_n(p, q, x, tl_t_k) / tl_t_g,
            tl_t_aux_cf_e(p, q, x, y, 25.0)
        )
    );

-- True when the continued fraction should run for I_x(v/2, 1/2) (the upper tail)
-- rather than for I_y(1/2, v/2) (the central part): s^2 > 6 v / (v + 2). This
-- keeps the fraction short on both sides, and the value then subtracted from 1/2
-- is at least 0.007, so forming the other part costs at most two digits.
CREATE OR REPLACE MACRO tl_t_aux_big(s, v) AS s > sqrt(6 * v / (v + 2));

-- ln(1 + s^2 / v) for s > 0, also where s^2 / v would overflow.
CREATE OR REPLACE MACRO tl_t_aux_l1u(s, v) AS
    CASE
        WHEN s * (s / v) < 1 THEN tl_t_aux_log1p(s * (s / v))
        ELSE 2 * ln(s) - ln(v) + tl_t_aux_log1p((v / s) / s)
    END;

-- Everything the tail needs for s = |t| > 0 and 0 < v < inf (both plain values:
-- they are repeated as text). With x = 1 / (1 + s^2/v) and y = 1 - x, formed
-- without overflow or cancellation, P(T > s) = I_x(v/2, 1/2) / 2 and
-- P(0 < T < s) = I_y(1/2, v/2) / 2. Fields: big (which side the continued fraction
-- runs on), p, q, x, y (its arguments), lnf (log density at s) and lp (log of the
-- factor in front of the continued fraction, which works out as
-- lnf + ln s - ln v on the tail side and lnf + ln s on the central side).
CREATE OR REPLACE MACRO tl_t_aux_setup(s, v) AS {
    'big': tl_t_aux_big(s, v),
    'p': CASE WHEN tl_t_aux_big(s, v) THEN v / 2 ELSE 0.5 END,
    'q': CASE WHEN tl_t_aux_big(s, v) THEN 0.5 ELSE v / 2 END,
    'x': CASE WHEN tl_t_aux_big(s, v) THEN 1 / (1 + s * (s / v)) ELSE 1 / (1 + (v / s) / s) END,
    'y': CASE WHEN tl_t_aux_big(s, v) THEN 1 / (1 + (v / s) / s) ELSE 1 / (1 + s * (s / v)) END,
    'lnf': -tl_t_aux_lbeta_half(v / 2) - 0.5 * ln(v) - (v + 1) / 2 * tl_t_aux_l1u(s, v),
    'lp': -tl_t_aux_lbeta_half(v / 2) - 0.5 * ln(v) - (v + 1) / 2 * tl_t_aux_l1u(s, v) + ln(s)
        - CASE WHEN tl_t_aux_big(s, v) THEN ln(v) ELSE 0 END
};

-- P(T > t) for s = |t| > 0 finite, 0 < v finite, neg = (t < 0). The continued
-- fraction gives one of P(T > s) and P(0 < T < s) with full relative accuracy; the
-- answer is that value or 1/2 (or 1) minus it. The factor and the fraction are
-- multiplied as exp(lp + ln cf): for huge v the factor alone would underflow. Each
-- sub-result is bound once through a one-element list_transform, since macro
-- arguments are substituted as text.
CREATE OR REPLACE MACRO tl_t_aux_upper(s, v, neg) AS list_transform(
    [tl_t_aux_setup(s, v)],
    lambda tl_t_c: list_transform(
        [exp(tl_t_c.lp
            + ln(greatest(tl_t_aux_cf(tl_t_c.p, tl_t_c.q, tl_t_c.x, tl_t_c.y), 1e-300)))],
        lambda tl_t_f: CASE
            WHEN tl_t_c.big THEN CASE WHEN neg THEN 1 - tl_t_f ELSE tl_t_f END
            ELSE CASE WHEN neg THEN 0.5 + tl_t_f ELSE 0.5 - tl_t_f END
        END
    )[1]
)[1];

-- Upper tail probability P(T > t) of Student's t with df degrees of freedom
-- (df > 0, not necessarily an integer). Relative accuracy holds far out in the tail
-- (t = 50, df = 3 gives 8.8e-6 and t = 1e8, df = 10 gives 1.2e-76 to about 13
-- digits) because the tail is computed directly as I_x(df/2, 1/2) / 2, never as
-- 1 - cdf.
CREATE OR REPLACE MACRO tl_t_upper(t, df) AS
    CASE
        WHEN t IS NULL OR df IS NULL OR isnan(CAST(t AS DOUBLE)) OR isnan(CAST(df AS DOUBLE))
            OR df <= 0 THEN NULL
        WHEN t = 0 THEN 0.5
        WHEN isinf(CAST(t AS DOUBLE)) THEN CASE WHEN t > 0 THEN 0.0 ELSE 1.0 END
        ELSE list_transform(
            [{'s': abs(CAST(t AS DOUBLE)), 'v': least(CAST(df AS DOUBLE), 1e100), 'neg': t < 0}],
            lambda tl_t_u: tl_t_aux_upper(tl_t_u.s, tl_t_u.v, tl_t_u.neg)
        )[1]
    END;

-- Two-sided p-value 2 P(T > |t|), capped at 1; accurate in relative terms like
-- tl_t_upper.
CREATE OR REPLACE MACRO tl_t_two_sided(t, df) AS list_transform(
    [2 * tl_t_upper(abs(CAST(t AS DOUBLE)), df)],
    lambda tl_t_p: CASE WHEN tl_t_p > 1 THEN 1.0 ELSE tl_t_p END
)[1];

-- Standard normal quantile for a tail probability m in (0, 1/2]: near the centre
-- (m >= 1/4) the Taylor series of the probit function about 1/2, otherwise the
-- rational approximation of Abramowitz and Stegun 26.2.23 (|error| < 4.5e-4; its
-- six coefficients are the published figures). Only used for a starting value.
CREATE OR REPLACE MACRO tl_t_aux_zstart(m) AS
    CASE
        WHEN m >= 0.25 THEN list_transform(
            [2.5066282746310002 * (0.5 - m)],
            lambda tl_t_y: tl_t_y * (1 + tl_t_y * tl_t_y * (1 / 6 + tl_t_y * tl_t_y
                * (7 / 120 + tl_t_y * tl_t_y * 127 / 7560)))
        )[1]
        ELSE list_transform(
            [sqrt(-2 * ln(m))],
            lambda tl_t_w: tl_t_w - (2.515517 + 0.802853 * tl_t_w + 0.010328 * tl_t_w * tl_t_w)
                / (1 + 1.432788 * tl_t_w + 0.189269 * tl_t_w * tl_t_w
                    + 0.001308 * tl_t_w * tl_t_w * tl_t_w)
        )[1]
    END;

-- Last term kept of the Cornish-Fisher expansion below (coefficient of v^-4).
CREATE OR REPLACE MACRO tl_t_aux_cornish4(z) AS
    ((((79 * z * z + 776) * z * z + 1482) * z * z - 1920) * z * z - 945) * z / 92160;

-- Cornish-Fisher expansion of the t quantile in powers of 1/v about the normal
-- quantile z, terms to v^-4; the coefficients are the published figures of
-- Abramowitz and Stegun 26.7.5.
CREATE OR REPLACE MACRO tl_t_aux_cornish(z, v) AS
    z + ((z * z + 1) * z / 4
        + (((5 * z * z + 16) * z * z + 3) * z / 96
            + ((((3 * z * z + 19) * z * z + 17) * z * z - 15) * z / 384
                + tl_t_aux_cornish4(z) / v) / v) / v) / v;

-- Starting value for the quantile t > 0 with P(T > t) = m, m in (0, 1/2), given
-- z = tl_t_aux_zstart(m) and lb = ln B(v/2, 1/2): the best of three approximations,
-- judged by the size of the first term each leaves out:
-- * the Cornish-Fisher expansion (tl_t_aux_cornish), good for moderate and large v;
-- * the power-law tail P(T > t) ~ t^-v v^(v/2 - 1) / B(v/2, 1/2) with its first
--   correction, good far out in the tail and for small v;
-- * the cubic inversion of the series of P(0 < T < t) about t = 0.
-- Its relative error stays below about 1e-2 (measured over df 0.02 ... 1e100 and
-- m 1e-300 ... 0.5), which the two Halley steps of tl_t_aux_solve take to rounding
-- level. Returns +inf when the quantile is beyond the double range (tiny v with
-- tiny m).
CREATE OR REPLACE MACRO tl_t_aux_tstart(m, v, z, lb) AS list_transform(
    [{
        'tcf': tl_t_aux_cornish(z, greatest(v, 0.5)),
        'ecf': abs(tl_t_aux_cornish4(z) / power(greatest(v, 0.5), 4)),
        'lpow': (-lb + (v - 2) / 2 * ln(v) - ln(m)) / v,
        'tau': (0.5 - m) * exp(lb + 0.5 * ln(v))
    }],
    lambda tl_t_b: CASE
        WHEN tl_t_b.lpow > 709.78 THEN CAST('inf' AS DOUBLE)
        ELSE list_transform(
            [{
                'ep': v * (v + 1) / (2 * (v + 2)) / exp(2 * tl_t_b.lpow),
                'ec': (v + 1) * tl_t_b.tau * tl_t_b.tau / (6 * v),
                'ecf': CASE
                    WHEN v >= 0.5 AND tl_t_b.tcf > 0 THEN tl_t_b.ecf / tl_t_b.tcf ELSE 1e300
                END
            }],
            lambda tl_t_e: CASE
                WHEN tl_t_e.ep * tl_t_e.ep <= least(tl_t_e.ecf, tl_t_e.ec * tl_t_e.ec)
                    THEN exp(tl_t_b.lpow) / (1 + tl_t_e.ep)
                WHEN tl_t_e.ecf <= tl_t_e.ec * tl_t_e.ec THEN tl_t_b.tcf
                ELSE tl_t_b.tau * (1 + tl_t_e.ec)
            END
        )[1]
    END
)[1];

-- Halley step for ln P(T > s) = ln m, given g = ln P(T > s) - ln m and
-- h = f(s) / P(T > s); uses f'/f = -(v + 1) s / (v + s^2).
CREATE OR REPLACE MACRO tl_t_aux_halley_tail(s, v, g, h) AS
    s + (g / h) / greatest(1 + g * (h - (v + 1) / (v / s + s)) / (2 * h), 0.5);

-- Halley step for P(0 < T < s) = 1/2 - m, given g = P(0 < T < s) - (1/2 - m) and
-- h = f(s).
CREATE OR REPLACE MACRO tl_t_aux_halley_mid(s, v, g, h) AS
    s - (g / h) / greatest(1 + g * ((v + 1) / (v / s + s)) / (2 * h), 0.5);

-- ln P(T > s) from the fields of tl_t_aux_setup and the continued fraction cf,
-- without underflow on the tail side.
CREATE OR REPLACE MACRO tl_t_aux_lntail(big, lp, cf) AS
    CASE
        WHEN big THEN lp + ln(greatest(cf, 1e-300))
        ELSE ln(greatest(0.5 - exp(lp) * cf, 1e-300))
    END;

-- One Halley step towards the t > 0 with P(T > t) = m. For m < 1/4 the equation
-- solved is ln P(T > t) = ln m (close to linear in the tail), otherwise
-- P(0 < T < t) = 1/2 - m, whose right side is exact in floating point there and
-- which keeps quantiles near 0 (m near 1/2) accurate in relative terms. The new
-- value is kept within a factor 8 of s.
CREATE OR REPLACE MACRO tl_t_aux_step(s, v, m) AS list_transform(
    [tl_t_aux_setup(s, v)],
    lambda tl_t_c: list_transform(
        [tl_t_aux_cf(tl_t_c.p, tl_t_c.q, tl_t_c.x, tl_t_c.y)],
        lambda tl_t_f: greatest(least(
            CASE
                WHEN m < 0.25 THEN tl_t_aux_halley_tail(s, v,
                    tl_t_aux_lntail(tl_t_c.big, tl_t_c.lp, tl_t_f) - ln(m),
                    exp(tl_t_c.lnf - tl_t_aux_lntail(tl_t_c.big, tl_t_c.lp, tl_t_f)))
                ELSE tl_t_aux_halley_mid(s, v,
                    CASE
                        WHEN tl_t_c.big THEN 0.5 - exp(tl_t_c.lp) * tl_t_f
                        ELSE exp(tl_t_c.lp) * tl_t_f
                    END - (0.5 - m),
                    exp(tl_t_c.lnf))
            END,
            8 * s, 1.7976931348623157e308), s / 8)
    )[1]
)[1];

-- Quantile for m in (0, 1/2), 0 < v finite: starting value, then two Halley steps
-- (cubic convergence), inside one list_reduce so that the iterate is bound once.
CREATE OR REPLACE MACRO tl_t_aux_solve(m, v, z, lb) AS list_reduce(
    [tl_t_aux_tstart(m, v, z, lb), 1, 2],
    lambda tl_t_s, tl_t_i: CASE
        WHEN isinf(tl_t_s) THEN tl_t_s
        ELSE tl_t_aux_step(tl_t_s, v, m)
    END
);

-- Critical value: the t with P(T > t) = q for q in (0, 1), e.g.
-- tl_t_crit((1 - level) / 2, n - 2) for a two-sided confidence interval; negative
-- for q > 1/2 (by symmetry, with 1 - q formed exactly). About 12 significant
-- digits or better.
CREATE OR REPLACE MACRO tl_t_crit(q, df) AS
    CASE
        WHEN q IS NULL OR df IS NULL OR isnan(CAST(q AS DOUBLE)) OR isnan(CAST(df AS DOUBLE))
            OR q <= 0 OR q >= 1 OR df <= 0 THEN NULL
        WHEN q = 0.5 THEN 0.0
        ELSE list_transform(
            [{
                'm': least(CAST(q AS DOUBLE), 1 - CAST(q AS DOUBLE)),
                'v': least(CAST(df AS DOUBLE), 1e100),
                'z': tl_t_aux_zstart(least(CAST(q AS DOUBLE), 1 - CAST(q AS DOUBLE))),
                'lb': tl_t_aux_lbeta_half(least(CAST(df AS DOUBLE), 1e100) / 2),
                'sign': CASE WHEN q > 0.5 THEN -1.0 ELSE 1.0 END
            }],
            lambda tl_t_q: tl_t_q.sign * tl_t_aux_solve(tl_t_q.m, tl_t_q.v, tl_t_q.z, tl_t_q.lb)
        )[1]
    END;
