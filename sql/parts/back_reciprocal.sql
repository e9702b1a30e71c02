-- From the fit's scale back to the column's own units for reciprocal(column): 1 / value, for a
-- value other than 0 (see back_plain.sql for the names). It is decreasing on each side of 0, so
-- an interval's ends swap: lo = 1 / hi and hi = 1 / lo; an interval that holds 0 maps to two
-- unbounded pieces and gives NULL ends. The bound is the earlier end in the column's units of
-- the bound's 90% interval, so it comes from that interval's other end, x_bound_far.
SELECT
    CASE WHEN x_cross <> 0 THEN 1.0 / x_cross END AS cross_x,
    CASE WHEN x_lo > 0 OR x_hi < 0 THEN 1.0 / x_hi END AS cross_lo,
    CASE WHEN x_lo > 0 OR x_hi < 0 THEN 1.0 / x_lo END AS cross_hi,
    CASE WHEN x_bound > 0 OR x_bound_far < 0 THEN 1.0 / x_bound_far END AS cross_bound,
    CASE WHEN from_x <> 0 THEN 1.0 / from_x END AS from_x,
    CASE WHEN y_line_x <> 0 THEN 1.0 / y_line_x END AS fitted,
    CASE WHEN band_lo > 0 OR band_hi < 0 THEN 1.0 / band_hi END AS fitted_lo,
    CASE WHEN band_lo > 0 OR band_hi < 0 THEN 1.0 / band_lo END AS fitted_hi
