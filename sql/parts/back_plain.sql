-- From the fit's scale back to the column's own units, for a column fitted as it is: every
-- value unchanged. The back_*.sql parts share these names: crossing.sql reads the x column's
-- part (slot __x_back__) on x_cross, x_lo, x_hi, x_bound, x_bound_far (the other end of the
-- bound's 90% interval) and from_x; points.sql reads the y column's part (slot __y_back__) on
-- y_line_x and the band's ends band_lo, band_hi.
SELECT
    x_cross AS cross_x,
    x_lo AS cross_lo,
    x_hi AS cross_hi,
    x_bound AS cross_bound,
    from_x AS from_x,
    y_line_x AS fitted,
    band_lo AS fitted_lo,
    band_hi AS fitted_hi
