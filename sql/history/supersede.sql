-- Natural keys: a row whose key (__key__) a newer file of this batch ($ids) also holds is
-- replaced by the newest such file's row (the later file wins). The replaced rows move to
-- measurements_history naming the file that replaced them. A key with a missing part
-- (NULL) matches nothing (history.supersede drops such rows from tl_superseded before
-- supersede_move.sql). Rows repeated within one file are all kept.
CREATE OR REPLACE TEMP TABLE tl_superseded AS
SELECT m.rowid AS row_id, m.file_id, w.winner
FROM measurements AS m
JOIN (
    SELECT __key__, max(file_id) AS winner
    FROM measurements
    WHERE list_contains($ids, file_id)
    GROUP BY ALL
) AS w ON ROW(m.__key__) = ROW(w.__key__)
WHERE m.file_id < w.winner;
