-- The store's own tables: metadata, the lineage of every batch and file.
-- All times are UTC. Lineage rows are never deleted: retracting data changes
-- their status and keeps the reason.
CREATE TABLE IF NOT EXISTS tl_meta (
    key VARCHAR NOT NULL,
    value VARCHAR
);

CREATE TABLE IF NOT EXISTS ingest_batches (
    batch_id BIGINT NOT NULL,
    started_at TIMESTAMP NOT NULL,
    finished_at TIMESTAMP NOT NULL,
    status VARCHAR NOT NULL,
    files BIGINT NOT NULL,
    rows BIGINT NOT NULL,
    skipped BIGINT NOT NULL,
    rejected BIGINT NOT NULL,
    tool_version VARCHAR NOT NULL,
    spec_hash VARCHAR NOT NULL,
    command VARCHAR,
    retracted_at TIMESTAMP,
    retract_reason VARCHAR
);

CREATE TABLE IF NOT EXISTS ingest_files (
    file_id BIGINT NOT NULL,
    batch_id BIGINT NOT NULL,
    path VARCHAR NOT NULL,
    sha256 VARCHAR NOT NULL,
    bytes BIGINT NOT NULL,
    modified_at TIMESTAMP,
    rows BIGINT NOT NULL,
    status VARCHAR NOT NULL,
    message VARCHAR,
    replaces BIGINT,
    changed_at TIMESTAMP
);

CREATE TABLE IF NOT EXISTS tl_views (
    name VARCHAR NOT NULL,
    kind VARCHAR NOT NULL,
    fit VARCHAR,
    description VARCHAR,
    sql_hash VARCHAR NOT NULL
);
