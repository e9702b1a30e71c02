-- Each unit against the other units of its fleet: the random-effects mean slope and spread of
-- its siblings (the unit left out), the z score of its own slope against them, and its slope
-- shrunk toward the fleet.

-- One row per group of the fit view. A fleet is the set of units sharing the values of the
-- fit's fleet columns (all units when the fit names none). Only units whose fit status is ok
-- (a slope with a positive standard error) take part; the others get a row with a note.
-- Columns:
--   group columns   as in the fit view (the fleet columns among them)
--   n, slope, slope_se
--                   the unit's own fit
--   units           units of the fleet that take part
--   fleet_slope     random-effects mean slope of the other units of the fleet: weights
--                   1 / (se_j^2 + tau^2) with the fleet's DerSimonian-Laird tau^2, summed over
--                   the fleet and less the unit's own, so the unit cannot pull the mean it is
--                   compared with
--   fleet_slope_se  its standard error for those weights, with the between-unit variance taken
--                   as fleet_tau^2: sqrt(sum w_j^2 (se_j^2 + fleet_tau^2)) / sum w_j
--   fleet_tau       DerSimonian-Laird (1986) between-unit standard deviation of the slopes of
--                   the other units, from the fleet's sums less the unit's own
--   slope_z         (slope - fleet_slope) / sqrt(slope_se^2 + fleet_tau^2 + fleet_slope_se^2)
--   slope_z_p       two-sided p-value of slope_z (standard normal)
--   slope_shrunk    empirical-Bayes slope: the fleet's random-effects mean m plus
--                   tau^2 / (tau^2 + slope_se^2) (slope - m), with the whole fleet's tau
--   unlike          slope_z_p below the fit's alpha divided by units (Bonferroni over the fleet)
--                   and the unit's r2 at least the fit's min_r2 (0.9 unless set): a unit that
--                   does not follow a line has a slope that says little about it
--   note            why values are missing: 'not in the fleet: <fit status>', 'fewer than 3
--                   units in the fleet' (no leave-one-out spread)
--
-- Leave-one-out by downdating. With w = 1 / se^2, W = sum w, fixed = sum w b / W and
-- Q = sum w (b - fixed)^2 (Cochran's Q, summed around the fleet's mean in a second pass), the
-- fleet without unit i has W' = W - w_i and Q' = Q - w_i W (b_i - fixed)^2 / W' (the weighted
-- form of the Chan, Golub and LeVeque update run backwards), and tau'^2 =
-- max(0, (Q' - (k - 2)) / (W' - (sum w^2 - w_i^2) / W')). Every sum is a window over the
-- fleet: one pass over the units, none over the rows. Group columns must not be named like a
-- column of this view or start with tl_.
CREATE OR REPLACE VIEW __view__ AS
WITH unit AS MATERIALIZED (
    SELECT
        __group__,
        n,
        slope,
        slope_se,
        r2,
        status,
        coalesce(status = 'ok' AND slope_se > 0 AND isfinite(slope_se), false) AS tl_in,
        CASE WHEN status = 'ok' AND slope_se > 0 AND isfinite(slope_se)
            THEN 1 / (slope_se * slope_se) END AS tl_w,
        CASE WHEN status = 'ok' AND slope_se > 0 AND isfinite(slope_se) THEN slope END AS tl_b
    FROM __fit_view__
),
fixed AS (
    SELECT
        *,
        count(tl_w) OVER tl_fleet AS tl_k,
        sum(tl_w) OVER tl_fleet AS tl_sw,
        sum(tl_w * tl_w) OVER tl_fleet AS tl_sw2,
        sum(tl_w * tl_b) OVER tl_fleet / sum(tl_w) OVER tl_fleet AS tl_fixed
    FROM unit
    WINDOW tl_fleet AS (PARTITION BY __fleet__)
),
spread AS (
    SELECT
        *,
        sum(tl_w * (tl_b - tl_fixed) * (tl_b - tl_fixed)) OVER (PARTITION BY __fleet__) AS tl_q
    FROM fixed
),
dl AS (
    SELECT
        *,
        CASE
            WHEN tl_k >= 2 THEN greatest((tl_q - (tl_k - 1)) / (tl_sw - tl_sw2 / tl_sw), 0)
        END AS tl_tau2
    FROM spread
),
random AS (
    SELECT
        *,
        CASE WHEN tl_in THEN 1 / (slope_se * slope_se + tl_tau2) END AS tl_r
    FROM dl
),
random_sums AS (
    SELECT
        *,
        sum(tl_r) OVER tl_fleet AS tl_sr,
        sum(tl_r * tl_r) OVER tl_fleet AS tl_sr2,
        sum(tl_r * tl_r * slope_se * slope_se) OVER tl_fleet AS tl_sr2v,
        sum(tl_r * tl_b) OVER tl_fleet / sum(tl_r) OVER tl_fleet AS tl_mean
    FROM random
    WINDOW tl_fleet AS (PARTITION BY __fleet__)
),
left_out AS (
    SELECT
        *,
        tl_sw - tl_w AS tl_sw_o,
        greatest(tl_q - tl_w * tl_sw * (tl_b - tl_fixed) * (tl_b - tl_fixed) / (tl_sw - tl_w), 0)
            AS tl_q_o,
        tl_sr - tl_r AS tl_sr_o,
        tl_mean - tl_r * (tl_b - tl_mean) / (tl_sr - tl_r) AS tl_mean_o
    FROM random_sums
    WHERE tl_in AND tl_k >= 3
),
left_out_tau AS (
    SELECT
        *,
        greatest((tl_q_o - (tl_k - 2)) / (tl_sw_o - (tl_sw2 - tl_w * tl_w) / tl_sw_o), 0)
            AS tl_tau2_o
    FROM left_out
),
scored AS (
    SELECT
        *,
        sqrt(greatest(tl_sr2v - tl_r * tl_r * slope_se * slope_se
            + tl_tau2_o * (tl_sr2 - tl_r * tl_r), 0)) / tl_sr_o AS tl_mean_o_se
    FROM left_out_tau
),
z AS (
    SELECT
        *,
        (slope - tl_mean_o) / sqrt(slope_se * slope_se + tl_tau2_o + tl_mean_o_se * tl_mean_o_se)
            AS tl_z
    FROM scored
),
tested AS (
    SELECT
        *,
        tl_norm_two_sided(tl_z) AS tl_z_p
    FROM z
)
SELECT
    r.__group__,
    r.n,
    r.slope,
    r.slope_se,
    CAST(r.tl_k AS BIGINT) AS units,
    t.tl_mean_o AS fleet_slope,
    t.tl_mean_o_se AS fleet_slope_se,
    sqrt(t.tl_tau2_o) AS fleet_tau,
    t.tl_z AS slope_z,
    t.tl_z_p AS slope_z_p,
    CASE
        WHEN r.tl_in AND r.tl_tau2 + r.slope_se * r.slope_se > 0
            THEN r.tl_mean + r.tl_tau2 / (r.tl_tau2 + r.slope_se * r.slope_se)
                * (r.slope - r.tl_mean)
    END AS slope_shrunk,
    CASE
        WHEN t.tl_z_p IS NOT NULL THEN t.tl_z_p < __alpha__ / r.tl_k AND r.r2 >= __fleet_min_r2__
    END AS unlike,
    CASE
        WHEN NOT r.tl_in THEN 'not in the fleet: ' || r.status
        WHEN r.tl_k < 3 THEN 'fewer than 3 units in the fleet'
    END AS note
FROM random_sums AS r
LEFT JOIN tested AS t ON ROW(t.__group__) IS NOT DISTINCT FROM ROW(r.__group__)
