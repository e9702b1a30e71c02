-- Write merged sums (the temporary table tl_mmerged, one row per group) into a fit's moments
-- table: the rows of the groups it holds are replaced, new groups are added; the groups go on
-- the list of those to refit (tl_mkeys). A delete and an insert rather than an update: the
-- merged rows have the table's columns in its order, so no column is listed twice.

DELETE FROM __table__ AS t
WHERE EXISTS (
    SELECT 1 FROM tl_mmerged AS m WHERE ROW(t.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
);

INSERT INTO __table__
SELECT * FROM tl_mmerged;

INSERT INTO tl_mkeys
SELECT __group__ FROM tl_mmerged;
