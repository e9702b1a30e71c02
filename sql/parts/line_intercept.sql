-- The line with an intercept, y = y_mean + slope (x - x_mean): two parameters. What the per-row
-- views need of it, read from a row's x, dx = x - x_mean and the group's n, y_mean, sxx (centred),
-- slope and the row's leverage h and internally standardised residual r_int:
--   y_line_x        the line at x: y_mean + slope dx
--   leverage        1 / n + dx^2 / sxx, for a counted row of a group with two different x
--   leverage_at     the same for any row with a finite x (the points view's band)
--   df              n - 2, the residual degrees of freedom of the line
--   has_df          n >= 3: the line leaves a residual degree of freedom
--   enough_without  n >= 4: a residual degree of freedom is left with the row left out
--   df_without      n - 3, the residual degrees of freedom with the row left out
--   cook_distance   r_int^2 h / (2 (1 - h)): Cook's distance with two parameters
--   no_spread       the status of a group whose y are all the same: 'constant_y'
--   b_ls            the least-squares slope sxy / sxx, for two different x
--   ss_line, syy    explained and centred total sum of squares: b sxy and b sxy + rss
--   stage           the fit's status before the range check (fit.sql)
--   fit_slope       the slope given (0 for a constant y); fit_intercept the intercept
--   has_spread      the y are not all the same
--   r2_adj_ok       r2_adj of an ok fit: 1 - rss / syy (n - 1) / (n - 2)
--   intercept_se    s sqrt(1 / n + x_mean^2 / sxx)
--   df_of_g         n - 2 of the group read as g
--   params          2, the parameters of the line (intercept and slope)
--   centred         1.0: sums pooled from parts add the spread of the parts' means
--                   (change.sql; 0.0 through the origin)
--   no_x_spread     the status of a line whose x are all the same: 'constant_x'
--   pool_weight     merging two sets of sums (sql/moments/merge.sql): the weight w = nA nB / n of
--                   the squared distance between their means that the pooled centred sums add
--   pooled_x_mean, pooled_y_mean, pooled_x_low, pooled_y_low
--                   the merged mean x_sum + x_low (kept in two parts) and what its rounding
--                   leaves for the low part
SELECT
    CASE WHEN n >= 2 AND x_min < x_max THEN sxy / sxx END AS b_ls,
    b_ls * sxy AS ss_line,
    b_ls * sxy + rss_ls AS syy,
    CASE
        WHEN n < 3 THEN 'too_few_points'
        WHEN x_min = x_max THEN 'constant_x'
        WHEN NOT (sxx > 0 AND isfinite(sxx) AND isfinite(syy) AND isfinite(rss_noise))
            THEN 'out_of_range'
        WHEN y_min = y_max THEN 'constant_y'
        WHEN rss_ls <= rss_noise THEN 'perfect_fit'
        ELSE 'ok'
    END AS stage,
    -- a constant y (also with n = 2) gets its exact line, free of anchor rounding
    CASE WHEN b_ls IS NOT NULL AND y_min = y_max THEN 0.0 ELSE b_ls END AS fit_slope,
    CASE
        WHEN b_ls IS NOT NULL AND y_min = y_max THEN y_min
        ELSE y_mean - b_ls * x_mean
    END AS fit_intercept,
    y_min < y_max AS has_spread,
    1 - rss_ls / syy * (n - 1) / (n - 2) AS r2_adj_ok,
    sqrt(rss / (n - 2) * (1 / n + x_mean * x_mean / sxx)) AS intercept_se,
    g.n - 2 AS df_of_g,
    CASE WHEN isfinite(x) THEN y_mean + slope * dx END AS y_line_x,
    CASE WHEN counted AND sxx > 0 THEN 1.0 / n + dx * dx / sxx END AS leverage,
    CASE WHEN isfinite(x) AND sxx > 0 THEN 1.0 / n + dx * dx / sxx END AS leverage_at,
    n - 2 AS df,
    n >= 3 AS has_df,
    n >= 4 AS enough_without,
    n - 3 AS df_without,
    CASE WHEN isfinite(r_int * r_int * h / (2 * (1 - h))) THEN r_int * r_int * h / (2 * (1 - h))
    END AS cook_distance,
    'constant_y' AS no_spread,
    na * (CAST(nb AS DOUBLE) / (na + nb)) AS pool_weight,
    x_sum + x_low AS pooled_x_mean,
    y_sum + y_low AS pooled_y_mean,
    x_low - ((x_sum + x_low) - x_sum) AS pooled_x_low,
    y_low - ((y_sum + y_low) - y_sum) AS pooled_y_low,
    2 AS params,
    1.0 AS centred,
    'constant_x' AS no_x_spread
