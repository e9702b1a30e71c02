-- The line through the origin, y = slope x: one parameter. The same expressions as
-- line_intercept.sql, read from a row's x and the group's n, sxx = sum(x^2), slope and the row's
-- leverage h and internally standardised residual r_int:
--   y_line_x        the line at x: slope x (slope is NULL where the fit view gives no line)
--   leverage        x^2 / sxx, for a counted row of a group with an x other than 0
--   leverage_at     the same for any row with a finite x (the points view's band)
--   df              n - 1, the residual degrees of freedom of the line
--   has_df          n >= 2: the line leaves a residual degree of freedom
--   enough_without  n >= 3: a residual degree of freedom is left with the row left out
--   df_without      n - 2, the residual degrees of freedom with the row left out
--   cook_distance   r_int^2 h / (1 - h): Cook's distance with one parameter (a row that is its
--                   group's only x other than 0 has h = 1 and none)
--   no_spread       the status of a group whose y are all 0: 'y_all_zero'
--   b_ls            the least-squares slope sxy / sxx (sums about the origin), for sxx > 0
--   ss_line, syy    explained and uncentred total sum of squares: b^2 sxx and b^2 sxx + rss
--   stage           the fit's status before the range check (fit.sql)
--   fit_slope       the slope given (0 when every y is 0); fit_intercept NULL (no intercept)
--   has_spread      the y are not all 0
--   r2_adj_ok       r2_adj of an ok fit: 1 - rss / sum(y^2) n / (n - 1)
--   intercept_se    NULL
--   df_of_g         n - 1 of the group read as g
--   params          1, the parameters of the line (the slope)
--   centred         0.0: sums about the origin pooled from parts simply add up
--   no_x_spread     the status of a line whose x are all 0: 'x_all_zero'
--   pool_weight     0: sums about the origin add up as they are, whatever the means
--   pooled_x_mean, pooled_y_mean, pooled_x_low, pooled_y_low
--                   the merged plain means and low parts 0 (the line uses no means)
SELECT
    CASE WHEN sxx > 0 THEN sxy / sxx END AS b_ls,
    b_ls * b_ls * sxx AS ss_line,
    b_ls * b_ls * sxx + rss_ls AS syy,
    CASE
        WHEN n < 2 THEN 'too_few_points'
        WHEN x_min = 0 AND x_max = 0 THEN 'x_all_zero'
        WHEN NOT (sxx > 0 AND isfinite(sxx) AND isfinite(syy) AND isfinite(rss_noise))
            THEN 'out_of_range'
        WHEN y_min = 0 AND y_max = 0 THEN 'y_all_zero'
        WHEN rss_ls <= rss_noise THEN 'perfect_fit'
        ELSE 'ok'
    END AS stage,
    CASE
        WHEN stage = 'y_all_zero' THEN 0.0
        WHEN stage IN ('ok', 'perfect_fit', 'too_few_points') THEN b_ls
    END AS fit_slope,
    CAST(NULL AS DOUBLE) AS fit_intercept,
    NOT (y_min = 0 AND y_max = 0) AS has_spread,
    1 - rss_ls / syy * n / (n - 1) AS r2_adj_ok,
    CAST(NULL AS DOUBLE) AS intercept_se,
    g.n - 1 AS df_of_g,
    CASE WHEN isfinite(x) THEN slope * x END AS y_line_x,
    CASE WHEN counted AND sxx > 0 AND isfinite(sxx) THEN x * x / sxx END AS leverage,
    CASE WHEN isfinite(x) AND sxx > 0 AND isfinite(sxx) THEN x * x / sxx END AS leverage_at,
    n - 1 AS df,
    n >= 2 AS has_df,
    n >= 3 AS enough_without,
    n - 2 AS df_without,
    CASE
        WHEN h < 1 AND isfinite(r_int * r_int * h / (1 - h)) THEN r_int * r_int * h / (1 - h)
    END AS cook_distance,
    'y_all_zero' AS no_spread,
    0.0 AS pool_weight,
    x_sum AS pooled_x_mean,
    y_sum AS pooled_y_mean,
    0.0 AS pooled_x_low,
    0.0 AS pooled_y_low,
    1 AS params,
    0.0 AS centred,
    'x_all_zero' AS no_x_spread
