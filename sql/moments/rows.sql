-- The rows of a batch, by their file ids, copied into the temporary table tl_mrows for the
-- two-pass sums of that batch alone. file_id ascends with every append, so the range test lets
-- DuckDB skip the stored row groups of older files.
CREATE OR REPLACE TEMP TABLE tl_mrows AS
SELECT *
FROM __source__
WHERE file_id BETWEEN $lo AND $hi AND list_contains($ids, file_id);
