-- After rows were removed (a retract, or the old rows of a replaced file): find the groups of a
-- fit's moments table whose stored row count no longer matches the rows left, list them to refit
-- (tl_mkeys), drop their stored sums and copy their remaining rows into tl_mrows, to be summed
-- again in two passes.

-- Rows removed from a group always lower its count, so comparing counts finds exactly the
-- groups they touched (a group left without rows has no count and is only dropped). Rows of the
-- files just added ($added) are left out here: they are merged afterwards like any batch. This
-- step reads every row once (a count per group); appends without removals never run it.
-- Group columns must not be named n_rows.
CREATE OR REPLACE TEMP TABLE tl_mstale AS
SELECT t.__group__
FROM __table__ AS t
LEFT JOIN (
    SELECT __group__, count(*) AS n_rows
    FROM __source__
    WHERE NOT list_contains($added, file_id)
    GROUP BY __group__
) AS m ON ROW(t.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
WHERE m.n_rows IS DISTINCT FROM t.n_rows;

INSERT INTO tl_mkeys
SELECT * FROM tl_mstale;

DELETE FROM __table__ AS t
WHERE EXISTS (
    SELECT 1 FROM tl_mstale AS s WHERE ROW(t.__group__) IS NOT DISTINCT FROM ROW(s.__group__)
);

CREATE OR REPLACE TEMP TABLE tl_mrows AS
SELECT r.*
FROM __source__ AS r
WHERE NOT list_contains($added, r.file_id) AND EXISTS (
    SELECT 1 FROM tl_mstale AS s WHERE ROW(r.__group__) IS NOT DISTINCT FROM ROW(s.__group__)
);
