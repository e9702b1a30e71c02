-- Version 4: keep every value. Rows a retract or a replacement takes out of measurements
-- move here with who removed them, when, how and why; rows a later file replaced by their
-- natural key move here too, naming that file. tl_events logs retractions, their undoing
-- and set-asides: the lineage of the lineage.
CREATE TABLE IF NOT EXISTS measurements_history AS
SELECT
    *,
    CAST(NULL AS TIMESTAMP) AS removed_at,
    CAST(NULL AS BIGINT) AS removed_in_batch,
    CAST(NULL AS BIGINT) AS removed_by_file,
    CAST(NULL AS VARCHAR) AS removed_how,
    CAST(NULL AS VARCHAR) AS removed_why,
    CAST(NULL AS VARCHAR) AS removed_by
FROM measurements
LIMIT 0;

CREATE TABLE IF NOT EXISTS tl_events (
    event_id BIGINT NOT NULL,
    at TIMESTAMP NOT NULL,
    os_user VARCHAR,
    action VARCHAR NOT NULL,
    batch_id BIGINT,
    file_ids BIGINT[],
    rows BIGINT,
    reason VARCHAR,
    before VARCHAR
);
