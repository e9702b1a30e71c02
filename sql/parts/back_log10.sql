-- From the fit's scale back to the column's own units for log10(column): 10^value, increasing,
-- so the ends stay in order (see back_plain.sql for the names). Taken only below 308, where it
-- is finite in float64 (beyond it the value is NULL). As for ln, the line mapped back is the
-- median of y at x, not its mean.
SELECT
    CASE WHEN x_cross < 308 THEN pow(10.0, x_cross) END AS cross_x,
    CASE WHEN x_lo < 308 AND x_hi < 308 THEN pow(10.0, x_lo) END AS cross_lo,
    CASE WHEN x_lo < 308 AND x_hi < 308 THEN pow(10.0, x_hi) END AS cross_hi,
    CASE WHEN x_bound < 308 THEN pow(10.0, x_bound) END AS cross_bound,
    CASE WHEN from_x < 308 THEN pow(10.0, from_x) END AS from_x,
    CASE WHEN y_line_x < 308 THEN pow(10.0, y_line_x) END AS fitted,
    CASE WHEN band_lo < 308 AND band_hi < 308 THEN pow(10.0, band_lo) END AS fitted_lo,
    CASE WHEN band_lo < 308 AND band_hi < 308 THEN pow(10.0, band_hi) END AS fitted_hi
