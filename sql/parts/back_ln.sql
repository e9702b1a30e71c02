-- From the fit's scale back to the column's own units for ln(column): exp, increasing, so the
-- ends stay in order (see back_plain.sql for the names). exp is taken only below 709, where it
-- is finite in float64 (beyond it the value is NULL). The line mapped back through exp is the
-- median of y at x, not its mean, when the scatter about the line is symmetric on the log scale.
SELECT
    CASE WHEN x_cross < 709 THEN exp(x_cross) END AS cross_x,
    CASE WHEN x_lo < 709 AND x_hi < 709 THEN exp(x_lo) END AS cross_lo,
    CASE WHEN x_lo < 709 AND x_hi < 709 THEN exp(x_hi) END AS cross_hi,
    CASE WHEN x_bound < 709 THEN exp(x_bound) END AS cross_bound,
    CASE WHEN from_x < 709 THEN exp(from_x) END AS from_x,
    CASE WHEN y_line_x < 709 THEN exp(y_line_x) END AS fitted,
    CASE WHEN band_lo < 709 AND band_hi < 709 THEN exp(band_lo) END AS fitted_lo,
    CASE WHEN band_lo < 709 AND band_hi < 709 THEN exp(band_hi) END AS fitted_hi
