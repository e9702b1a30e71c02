-- The line each group's crossing projects from (crossing.sql) when there is no bend view (a
-- fit through the origin; an engine that cannot run the bend search): the whole-history line of
-- the fit view, with the columns of line_since_bend.sql. centre_x = x_mean, centre_y = y_mean,
-- centre_se = resid_sd / sqrt(n) (the line's standard error at x_mean), from_x = x_min and df
-- from the slot __line__ (n - 2 with an intercept, n - 1 through the origin).
SELECT
    tl_whole.*,
    'whole' AS basis,
    __line__.df AS df
FROM (
    SELECT
        m.__group__,
        m.n,
        f.x_min AS from_x,
        m.x_mean AS centre_x,
        m.y_mean AS centre_y,
        f.resid_sd / sqrt(m.n) AS centre_se,
        f.slope,
        f.slope_se,
        f.slope_p,
        f.status
    FROM __moments_view__ AS m
    JOIN __fit_view__ AS f ON ROW(m.__group__) IS NOT DISTINCT FROM ROW(f.__group__)
) AS tl_whole
