-- Drop the temporary tables and view of a moments update.
DROP TABLE IF EXISTS tl_mrows;
DROP TABLE IF EXISTS tl_mbatch;
DROP TABLE IF EXISTS tl_mmerged;
DROP TABLE IF EXISTS tl_mstale;
DROP TABLE IF EXISTS tl_mkeys;
DROP TABLE IF EXISTS tl_msums;
DROP TABLE IF EXISTS tl_mfitted;
