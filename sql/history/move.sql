-- Move the rows of some files ($ids) out of measurements into measurements_history, with
-- when ($now), in which batch ($batch), for which new file ($by_file), how ($how:
-- retracted or replaced), why ($why) and by whom ($user). Nothing is deleted that is not
-- kept first.
INSERT INTO measurements_history BY NAME
SELECT
    m.*,
    CAST($now AS TIMESTAMP) AS removed_at,
    CAST($batch AS BIGINT) AS removed_in_batch,
    CAST($by_file AS BIGINT) AS removed_by_file,
    CAST($how AS VARCHAR) AS removed_how,
    CAST($why AS VARCHAR) AS removed_why,
    CAST($user AS VARCHAR) AS removed_by
FROM measurements AS m
WHERE list_contains($ids, m.file_id);

DELETE FROM measurements
WHERE list_contains($ids, file_id);
