-- (Re)build a fit's stored statistics from its stored sums: the rows of fit.sql (or its _origin
-- twin) over the sums table, computed into the temporary table tl_mfitted, one row per group.
CREATE OR REPLACE TABLE __fit_table__ AS
SELECT * FROM tl_mfitted;
