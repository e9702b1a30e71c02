-- Write the refitted groups (tl_mfitted: the rows of fit.sql over tl_msums) into a fit's stored
-- statistics: groups it holds are updated, groups left without rows are dropped, new groups are
-- added.

UPDATE __fit_table__ AS f
SET
    n = m.n,
    x_min = m.x_min,
    x_max = m.x_max,
    slope = m.slope,
    intercept = m.intercept,
    r2 = m.r2,
    r2_adj = m.r2_adj,
    resid_sd = m.resid_sd,
    slope_se = m.slope_se,
    intercept_se = m.intercept_se,
    slope_t = m.slope_t,
    slope_p = m.slope_p,
    slope_lo = m.slope_lo,
    slope_hi = m.slope_hi,
    intercept_lo = m.intercept_lo,
    intercept_hi = m.intercept_hi,
    status = m.status,
    n_outside = m.n_outside
FROM tl_mfitted AS m
WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(m.__group__);

DELETE FROM __fit_table__ AS f
WHERE EXISTS (
    SELECT 1 FROM tl_mkeys AS k WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(k.__group__)
) AND NOT EXISTS (
    SELECT 1 FROM tl_mfitted AS m WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
);

INSERT INTO __fit_table__
SELECT *
FROM tl_mfitted AS m
WHERE NOT EXISTS (
    SELECT 1 FROM __fit_table__ AS f WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
);
