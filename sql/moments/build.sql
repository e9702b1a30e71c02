-- (Re)build a fit's moments table from every stored row: the two-pass sums of the full moments
-- view over the measurements table (computed into the temporary table tl_mbatch), one row per
-- group.
CREATE OR REPLACE TABLE __table__ AS
SELECT * FROM tl_mbatch;
