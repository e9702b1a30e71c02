-- The stored sums of the groups an update touched (tl_mkeys), copied into tl_msums for fit.sql
-- to refit them.
CREATE OR REPLACE TEMP TABLE tl_msums AS
SELECT t.*
FROM __table__ AS t
WHERE EXISTS (
    SELECT 1 FROM tl_mkeys AS k WHERE ROW(t.__group__) IS NOT DISTINCT FROM ROW(k.__group__)
);
