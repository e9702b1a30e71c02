-- Undo a retraction: the retracted rows of some files ($ids) move back from
-- measurements_history into measurements, as they were.
INSERT INTO measurements BY NAME
SELECT * EXCLUDE (removed_at, removed_in_batch, removed_by_file, removed_how, removed_why,
                  removed_by)
FROM measurements_history
WHERE list_contains($ids, file_id) AND removed_how = 'retracted';

DELETE FROM measurements_history
WHERE list_contains($ids, file_id) AND removed_how = 'retracted';
