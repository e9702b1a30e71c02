-- Version 3: files refused by an append wait here, one row per path and content,
-- so that a later append does not try them again until their content changes
-- (or the user asks). A row is closed when the path loads, or set aside for good
-- with a reason. Every batch also records the operating-system user who ran it.
CREATE TABLE IF NOT EXISTS tl_rejected (
    path VARCHAR NOT NULL,
    sha256 VARCHAR NOT NULL,
    bytes BIGINT NOT NULL,
    modified_at TIMESTAMP,
    first_refused_at TIMESTAMP NOT NULL,
    last_refused_at TIMESTAMP NOT NULL,
    refusals BIGINT NOT NULL,
    message VARCHAR NOT NULL,
    set_aside_at TIMESTAMP,
    set_aside_reason VARCHAR,
    set_aside_by VARCHAR,
    closed_at TIMESTAMP,
    closed_by_file BIGINT
);

ALTER TABLE ingest_batches ADD COLUMN IF NOT EXISTS os_user VARCHAR;
