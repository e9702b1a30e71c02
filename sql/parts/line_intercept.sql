-- The line with an intercept, y = y_mean + slope (x - x_mean): two parameters. What the per-row
-- views need of it, read from a row's x, dx = x - x_mean and the group's n, y_mean, sxx (centred),
-- slope and the row's leverage h and internally standardised residual r_int:
--   y_line_x        the line at x: y_mean + slope dx
--   leverage        1 / n + dx^2 / sxx, for a counted row of a group with two different x
--   df              n - 2, the residual degrees of freedom of the line
--   has_df          n >= 3: the line leaves a residual degree of freedom
--   enough_without  n >= 4: a residual degree of freedom is left with the row left out
--   df_without      n - 3, the residual degrees of freedom with the row left out
--   cook_distance   r_int^2 h / (2 (1 - h)): Cook's distance with two parameters
--   no_spread       the status of a group whose y are all the same: 'constant_y'
SELECT
    CASE WHEN isfinite(x) THEN y_mean + slope * dx END AS y_line_x,
    CASE WHEN counted AND sxx > 0 THEN 1.0 / n + dx * dx / sxx END AS leverage,
    n - 2 AS df,
    n >= 3 AS has_df,
    n >= 4 AS enough_without,
    n - 3 AS df_without,
    CASE WHEN isfinite(r_int * r_int * h / (2 * (1 - h))) THEN r_int * r_int * h / (2 * (1 - h))
    END AS cook_distance,
    'constant_y' AS no_spread
