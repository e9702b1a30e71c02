-- Write the refitted groups (tl_mfitted: the rows of fit.sql over tl_msums) into a fit's stored
-- statistics: the rows of every group on the refit list (tl_mkeys) or refitted are dropped and
-- the refitted rows added, so groups left without rows are dropped and the others replaced. A
-- delete and an insert rather than an update: tl_mfitted has the table's columns in its order.

DELETE FROM __fit_table__ AS f
WHERE EXISTS (
    SELECT 1 FROM tl_mkeys AS k WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(k.__group__)
) OR EXISTS (
    SELECT 1 FROM tl_mfitted AS m WHERE ROW(f.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
);

INSERT INTO __fit_table__
SELECT * FROM tl_mfitted;
