-- The tables the store keeps per fit, kind 'sums' (tl_moments_<fit>, the stored sums) and kind
-- 'fit' (tl_fit_<fit>, the stored statistics), each with the digest of the SQL that builds and
-- updates it; a changed digest (a changed fit or a newer trendledger) rebuilds the table.
CREATE TABLE IF NOT EXISTS tl_moments (
    fit VARCHAR NOT NULL,
    kind VARCHAR NOT NULL,
    table_name VARCHAR NOT NULL,
    sql_hash VARCHAR NOT NULL
);
