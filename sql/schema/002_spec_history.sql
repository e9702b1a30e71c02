-- Version 2: keep every spec the store has used, and a log of applied migrations.
-- The spec in force is also in tl_meta; the history says when it changed and why.
CREATE TABLE IF NOT EXISTS tl_spec_history (
    version BIGINT NOT NULL,
    applied_at TIMESTAMP NOT NULL,
    spec_hash VARCHAR NOT NULL,
    spec VARCHAR NOT NULL,
    note VARCHAR
);

INSERT INTO tl_spec_history
SELECT
    1,
    CAST(coalesce((SELECT value FROM tl_meta WHERE key = 'created_at'), '1970-01-01') AS TIMESTAMP),
    (SELECT value FROM tl_meta WHERE key = 'spec_hash'),
    (SELECT value FROM tl_meta WHERE key = 'spec'),
    'spec given to init'
WHERE NOT EXISTS (SELECT 1 FROM tl_spec_history);

CREATE TABLE IF NOT EXISTS tl_migrations (
    version BIGINT NOT NULL,
    applied_at TIMESTAMP NOT NULL,
    tool_version VARCHAR NOT NULL
);
