-- Start the list of groups an update touches (the temporary table tl_mkeys, group columns only).
CREATE OR REPLACE TEMP TABLE tl_mkeys AS
SELECT __group__ FROM __table__ WHERE false;
