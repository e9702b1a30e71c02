-- Drop the moments table of a fit that the spec no longer has.
DROP TABLE IF EXISTS __table__;
