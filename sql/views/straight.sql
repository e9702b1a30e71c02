-- Whether each group's readings follow a straight line: the Student t test of a quadratic term
-- added to the group's whole-history line (a lack-of-fit test against a smoother form). A flat
-- trend inside its noise passes (its r2 near 0 says only that there is nothing to explain); a
-- curve or a knee does not.

-- Columns:
--   group columns   as in the fit view
--   n               the rows with a residual
--   curvature       the coefficient of the quadratic term, per x-unit squared
--   curvature_t     curvature / its standard error
--   curvature_p     the two-sided Student t p-value with n - 3 degrees of freedom
-- From the points view's residuals e and u = x - x_mean: the quadratic term orthogonal to the
-- line is q = u^2 - (sum u^3 / sxx) u - sxx / n, so curvature = sum(q e) / sum(q^2) and the
-- residual sum of squares of the quadratic fit is sum(e^2) - sum(q e)^2 / sum(q^2). NULL (no
-- test) with fewer than 4 rows, without spread in q, or for a line with no residual.
CREATE OR REPLACE VIEW __view__ AS
WITH centred AS MATERIALIZED (
    SELECT p.__group__, p.x - m.x_mean AS tl_u, p.residual AS tl_e, m.sxx AS tl_sxx
    FROM __points_view__ AS p
    JOIN __moments_view__ AS m ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(p.__group__)
    WHERE p.residual IS NOT NULL
),
shape AS MATERIALIZED (
    SELECT
        __group__,
        count(*) AS n,
        CASE WHEN any_value(tl_sxx) > 0 THEN sum(tl_u * tl_u * tl_u) / any_value(tl_sxx) END
            AS tl_a,
        any_value(tl_sxx) / count(*) AS tl_c
    FROM centred
    GROUP BY __group__
),
sums AS (
    SELECT
        s.__group__,
        any_value(s.n) AS n,
        sum((c.tl_u * c.tl_u - s.tl_a * c.tl_u - s.tl_c) * c.tl_e) AS tl_qe,
        sum((c.tl_u * c.tl_u - s.tl_a * c.tl_u - s.tl_c)
            * (c.tl_u * c.tl_u - s.tl_a * c.tl_u - s.tl_c)) AS tl_qq,
        sum(c.tl_e * c.tl_e) AS tl_ee
    FROM centred AS c
    JOIN shape AS s ON ROW(s.__group__) IS NOT DISTINCT FROM ROW(c.__group__)
    GROUP BY s.__group__
),
tested AS (
    SELECT
        *,
        CASE
            WHEN n >= 4 AND tl_qq > 0 AND tl_ee - tl_qe * tl_qe / tl_qq > 0
                THEN (tl_qe / tl_qq)
                    / sqrt((tl_ee - tl_qe * tl_qe / tl_qq) / (n - 3) / tl_qq)
        END AS curvature_t
    FROM sums
)
SELECT
    __group__,
    CAST(n AS BIGINT) AS n,
    CASE WHEN n >= 4 AND tl_qq > 0 THEN tl_qe / tl_qq END AS curvature,
    curvature_t,
    CASE WHEN curvature_t IS NOT NULL THEN tl_t_two_sided(curvature_t, n - 3) END AS curvature_p
FROM tested
