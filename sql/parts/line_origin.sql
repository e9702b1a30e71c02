-- The line through the origin, y = slope x: one parameter. The same expressions as
-- line_intercept.sql, read from a row's x and the group's n, sxx = sum(x^2), slope and the row's
-- leverage h and internally standardised residual r_int:
--   y_line_x        the line at x: slope x (slope is NULL where the fit view gives no line)
--   leverage        x^2 / sxx, for a counted row of a group with an x other than 0
--   df              n - 1, the residual degrees of freedom of the line
--   has_df          n >= 2: the line leaves a residual degree of freedom
--   enough_without  n >= 3: a residual degree of freedom is left with the row left out
--   df_without      n - 2, the residual degrees of freedom with the row left out
--   cook_distance   r_int^2 h / (1 - h): Cook's distance with one parameter (a row that is its
--                   group's only x other than 0 has h = 1 and none)
--   no_spread       the status of a group whose y are all 0: 'y_all_zero'
SELECT
    CASE WHEN isfinite(x) THEN slope * x END AS y_line_x,
    CASE WHEN counted AND sxx > 0 AND isfinite(sxx) THEN x * x / sxx END AS leverage,
    n - 1 AS df,
    n >= 2 AS has_df,
    n >= 3 AS enough_without,
    n - 2 AS df_without,
    CASE
        WHEN h < 1 AND isfinite(r_int * r_int * h / (1 - h)) THEN r_int * r_int * h / (1 - h)
    END AS cook_distance,
    'y_all_zero' AS no_spread
