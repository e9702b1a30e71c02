-- The line each group's crossing projects from (crossing.sql, fits with an intercept): the
-- line that holds now, from the bend view: the current segment's line when a bend is
-- significant (basis 'since_bend'), else the whole history (basis 'whole'). Columns: the group
-- columns, basis, from_x (the current segment's first x), df (its residual degrees of freedom),
-- centre_x, centre_y (the segment's centre and its line there), centre_se (the line's standard
-- error at centre_x), slope, slope_se, slope_p, status.
SELECT
    __group__,
    CASE WHEN bends > 0 THEN 'since_bend' ELSE 'whole' END AS basis,
    from_x,
    df,
    centre_x,
    centre_y,
    centre_se,
    slope,
    slope_se,
    slope_p,
    status
FROM __bend_view__
