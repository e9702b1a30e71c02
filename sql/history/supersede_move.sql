-- Natural keys, second step: move the rows listed in tl_superseded (by supersede.sql) to
-- measurements_history, each naming the newer file whose row replaced it.
INSERT INTO measurements_history BY NAME
SELECT
    m.*,
    CAST($now AS TIMESTAMP) AS removed_at,
    CAST($batch AS BIGINT) AS removed_in_batch,
    s.winner AS removed_by_file,
    'replaced by key' AS removed_how,
    CAST($why AS VARCHAR) AS removed_why,
    CAST($user AS VARCHAR) AS removed_by
FROM measurements AS m
JOIN tl_superseded AS s ON m.rowid = s.row_id;

DELETE FROM measurements
WHERE rowid IN (SELECT row_id FROM tl_superseded);
