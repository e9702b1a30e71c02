-- From the fit's scale back to the column's own units for sqrt(column): value^2 for a value of
-- 0 or above (see back_plain.sql for the names). A single value below 0 has no column value
-- (NULL). An interval maps to the column values whose square root lies in it: from
-- greatest(lo, 0)^2 to hi^2, NULL when all of it is below 0.
SELECT
    CASE WHEN x_cross >= 0 THEN x_cross * x_cross END AS cross_x,
    CASE WHEN x_hi >= 0 THEN greatest(x_lo, 0.0) * greatest(x_lo, 0.0) END AS cross_lo,
    CASE WHEN x_hi >= 0 THEN x_hi * x_hi END AS cross_hi,
    CASE WHEN x_bound >= 0 THEN x_bound * x_bound END AS cross_bound,
    CASE WHEN from_x >= 0 THEN from_x * from_x END AS from_x,
    CASE WHEN y_line_x >= 0 THEN y_line_x * y_line_x END AS fitted,
    CASE WHEN band_hi >= 0 THEN greatest(band_lo, 0.0) * greatest(band_lo, 0.0) END AS fitted_lo,
    CASE WHEN band_hi >= 0 THEN band_hi * band_hi END AS fitted_hi
