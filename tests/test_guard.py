"""The query gatekeeper: what user SQL may run against the store, and what is refused.

Accepted queries are not just parsed: each one runs on a small real store opened
read-only, so "accepted" means "a useful read that works".
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlglot import exp

from trendledger.errors import QueryRefused
from trendledger.query.guard import (
    READ_STATEMENT_TYPES,
    check_params,
    check_query,
    check_where,
    parameter_names,
)

FIT_COLUMNS = ["cell", "n", "slope", "intercept", "r2"]

SCHEMA = """
CREATE TABLE ingest_batches (batch_id BIGINT, status VARCHAR);
CREATE TABLE ingest_files (
    file_id BIGINT, batch_id BIGINT, path VARCHAR, rows BIGINT, status VARCHAR
);
CREATE TABLE measurements (
    cell VARCHAR, day DATE, cycle INTEGER, capacity_ah DOUBLE, file_id BIGINT
);
INSERT INTO ingest_batches VALUES (1, 'committed'), (2, 'committed');
INSERT INTO ingest_files VALUES
    (10, 1, 'incoming/2024-03-01/c01.csv', 3, 'loaded'),
    (11, 1, 'incoming/2024-03-01/c02.csv', 3, 'loaded'),
    (12, 2, 'incoming/2024-03-02/c01.csv', 2, 'loaded');
INSERT INTO measurements VALUES
    ('c01', DATE '2024-03-01', 1, 2.50, 10),
    ('c01', DATE '2024-03-01', 2, 2.48, 10),
    ('c01', DATE '2024-03-01', 3, 2.47, 10),
    ('c02', DATE '2024-03-01', 1, 2.60, 11),
    ('c02', DATE '2024-03-01', 2, 2.57, 11),
    ('c02', DATE '2024-03-01', 3, 2.55, 11),
    ('c01', DATE '2024-03-02', 4, 2.45, 12),
    ('c01', DATE '2024-03-02', 5, 2.44, 12);
CREATE VIEW fit_fade AS
SELECT
    cell,
    count(*) AS n,
    regr_slope(capacity_ah, cycle) AS slope,
    regr_intercept(capacity_ah, cycle) AS intercept,
    regr_r2(capacity_ah, cycle) AS r2
FROM measurements
GROUP BY cell;
"""


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> duckdb.DuckDBPyConnection:
    """A small store with the real table shapes, reopened read-only like the CLI does."""
    path: Path = tmp_path_factory.mktemp("guard") / "store.duckdb"
    with duckdb.connect(str(path)) as writer:
        writer.execute(SCHEMA)
    connection = duckdb.connect(str(path), read_only=True)
    yield connection
    connection.close()


# --------------------------------------------------------------------------- refused

REFUSED = [
    # writes and schema changes
    ("DROP TABLE measurements", "DROP"),
    ("drop view fit_fade", "DROP"),
    ("DELETE FROM measurements WHERE cell = 'c01'", "DELETE"),
    ("INSERT INTO measurements VALUES ('c9', DATE '2024-01-01', 1, 1.0, 1)", "INSERT"),
    ("INSERT OR REPLACE INTO ingest_batches VALUES (1, 'x')", "INSERT"),
    ("UPDATE ingest_files SET status = 'gone'", "UPDATE"),
    (
        "MERGE INTO ingest_batches AS t USING ingest_batches AS s ON t.batch_id = s.batch_id "
        "WHEN MATCHED THEN DELETE",
        "MERGE",
    ),
    ("TRUNCATE measurements", "TRUNCATE"),
    ("ALTER TABLE measurements ADD COLUMN note VARCHAR", "ALTER"),
    ("CREATE TABLE copy AS SELECT * FROM measurements", "CREATE TABLE"),
    ("CREATE TEMP TABLE scratch AS SELECT 1", "CREATE TEMP TABLE"),
    ("CREATE OR REPLACE TEMP VIEW v AS SELECT 1", "CREATE OR REPLACE TEMP VIEW"),
    ("CREATE MACRO twice(x) AS x * 2", "CREATE MACRO"),
    ("CREATE SECRET s (TYPE s3, KEY_ID 'k', SECRET 's')", "CREATE SECRET"),
    ("COMMENT ON TABLE measurements IS 'x'", "COMMENT"),
    # databases, files, extensions, settings
    ("ATTACH 'other.duckdb' AS other", "ATTACH"),
    ("DETACH other", "DETACH"),
    ("USE other", "USE"),
    ("COPY (SELECT * FROM measurements) TO 'out.csv'", "COPY"),
    ("COPY measurements FROM 'in.csv'", "COPY"),
    ("EXPORT DATABASE 'dump_dir'", "EXPORT DATABASE"),
    ("IMPORT DATABASE 'dump_dir'", "IMPORT DATABASE"),
    ("INSTALL httpfs", "INSTALL"),
    ("FORCE INSTALL httpfs", "FORCE INSTALL"),
    ("LOAD httpfs", "LOAD"),
    ("UPDATE EXTENSIONS", "UPDATE EXTENSIONS"),
    ("PRAGMA database_list", "PRAGMA"),
    ("SET threads = 1", "SET"),
    ("SET enable_external_access = true", "SET"),
    ("RESET threads", "RESET"),
    ("CALL pragma_version()", "CALL"),
    ("CHECKPOINT", "CHECKPOINT"),
    ("FORCE CHECKPOINT", "FORCE CHECKPOINT"),
    ("BEGIN TRANSACTION", "BEGIN"),
    ("COMMIT", "COMMIT"),
    ("ROLLBACK", "ROLLBACK"),
    ("VACUUM", "VACUUM"),
    ("ANALYZE", "ANALYZE"),
    ("EXPLAIN ANALYZE SELECT 1", "EXPLAIN"),
    # more than one statement, comment and quoting tricks
    ("SELECT 1; DROP TABLE measurements", "2 statements"),
    ("SELECT 1; SELECT 2; SELECT 3", "3 statements"),
    ("SELECT 1 /* ; */ ; DROP TABLE measurements", "2 statements"),
    ("-- just a note\n DROP TABLE measurements", "DROP"),
    ("/* harmless */ DELETE FROM measurements", "DELETE"),
    ("SELECT 'it''s'; DROP TABLE measurements", "2 statements"),
    ("SELECT 'a\\'; DROP TABLE measurements; --'", "2 statements"),
    ("SELECT $$quoted$$; DROP TABLE measurements", "2 statements"),
    ('SELECT "a;b" FROM measurements; DROP TABLE measurements', "2 statements"),
    ("\n\n   dRoP   TaBlE measurements", "DROP"),
    # writes hidden inside a read
    ("WITH gone AS (DELETE FROM measurements RETURNING *) SELECT * FROM gone", "DELETE"),
    ("SELECT 1 INTO scratch", "INTO"),
    ("WITH x AS (SELECT 1) INSERT INTO ingest_batches SELECT 1, 'x' FROM x", "INSERT"),
    ("(DELETE FROM measurements)", "cannot parse"),
    # files, URLs and other databases read from a SELECT
    ("SELECT * FROM read_csv('/etc/passwd')", "read_csv"),
    ("SELECT * FROM read_csv_auto('/etc/passwd')", "read_csv_auto"),
    ("FROM read_parquet('s3://bucket/x.parquet')", "read_parquet"),
    ("SELECT * FROM parquet_scan('x.parquet')", "parquet_scan"),
    ("SELECT * FROM parquet_metadata('x.parquet')", "parquet_metadata"),
    ("SELECT * FROM read_json_auto('x.json')", "read_json_auto"),
    ("SELECT * FROM read_ndjson_objects('x.json')", "read_ndjson_objects"),
    ("SELECT * FROM read_text('/etc/hostname')", "read_text"),
    ("SELECT * FROM read_blob('/etc/hostname')", "read_blob"),
    ("SELECT * FROM glob('*')", "glob"),
    ("SELECT * FROM sniff_csv('x.csv')", "sniff_csv"),
    ("SELECT * FROM iceberg_scan('warehouse/t')", "iceberg_scan"),
    ("SELECT * FROM delta_scan('lake/t')", "delta_scan"),
    ("SELECT * FROM sqlite_scan('other.db', 't')", "sqlite_scan"),
    ("SELECT * FROM postgres_scan('dbname=x', 'public', 't')", "postgres_scan"),
    ("SELECT * FROM '/etc/passwd'", "/etc/passwd"),
    ("FROM 'https://example.org/y.parquet'", "https://example.org/y.parquet"),
    ("SELECT * FROM 'data.csv'", "data.csv"),
    ('SELECT * FROM "/etc/passwd"', "/etc/passwd"),
    ("SELECT * FROM measurements JOIN 'other.csv' USING (cell)", "other.csv"),
    ("SELECT * FROM measurements, LATERAL read_csv('x.csv')", "read_csv"),
    ("SELECT * FROM (SELECT * FROM read_parquet('a.parquet'))", "read_parquet"),
    ("WITH x AS (SELECT * FROM read_csv('a.csv')) SELECT * FROM x", "read_csv"),
    ("SELECT (SELECT count(*) FROM read_json('a.json')) AS n", "read_json"),
    ("SELECT cell FROM measurements WHERE cell IN (FROM 'cells.csv')", "cells.csv"),
    ("SELECT * FROM main.read_csv('x.csv')", "read_csv"),
    ("SUMMARIZE 'x.csv'", "SUMMARIZE"),
    ("SUMMARIZE read_csv('x.csv')", "read_csv"),
    ("DESCRIBE read_csv('x.csv')", "DESCRIBE"),
    ("SHOW 'x.csv'", "x.csv"),
    # functions that run SQL, read settings or the environment, or write
    ("SELECT query('DROP TABLE measurements')", "query"),
    ("SELECT * FROM query('SELECT 1')", "query"),
    ("SELECT * FROM query_table('measurements')", "query_table"),
    ("SELECT getenv('HOME')", "getenv"),
    ("SELECT cell FROM measurements WHERE cell = getenv('USER')", "getenv"),
    ("SELECT current_setting('threads')", "current_setting"),
    ("SELECT ('threads').current_setting()", "current_setting"),
    ("SELECT * FROM pg_settings", "pg_settings"),
    ("SELECT nextval('seq')", "nextval"),
    ("SELECT * FROM duckdb_secrets()", "duckdb_secrets"),
    ("SELECT * FROM duckdb_settings()", "duckdb_settings"),
    ("SELECT * FROM pragma_database_list", "pragma_database_list"),
    ("SELECT * FROM pragma_storage_info('measurements')", "pragma_storage_info"),
    ("SELECT * FROM duckdb_databases()", "duckdb_databases"),
    ("SELECT * FROM test_all_types()", "test_all_types"),
    # parameters the CLI cannot bind, odd statement shapes, garbage
    ("SELECT * FROM measurements WHERE cell = ?", "positional parameter ?"),
    ("SELECT * FROM measurements WHERE cell = $1", "positional parameter $1"),
    ("PIVOT measurements ON cell USING sum(cycle)", "PIVOT"),
    ("SELECT * FROM (PIVOT measurements ON cell USING sum(cycle))", "PIVOT"),
    ("SHOW DATABASES", "SHOW DATABASES"),
    ("measurements", "MEASUREMENTS"),
    ('"CHECKPOINT"', "CHECKPOINT"),
    ("'x.csv'", "'x.csv'"),
    ("SELEC * FROM measurements", "SELEC"),
    ("SELECT * FROM", "cannot parse"),
    ("SELECT 'unterminated", "cannot read"),
    ("((((", "cannot parse"),
    ("", "empty"),
    ("   ;  ;  ", "empty"),
    ("-- only a comment", "empty"),
]


@pytest.mark.parametrize(("sql", "named"), REFUSED, ids=[sql[:40] for sql, _ in REFUSED])
def test_refused_queries_name_what_was_refused(sql: str, named: str) -> None:
    with pytest.raises(QueryRefused) as refusal:
        check_query(sql)
    message = refusal.value.message
    assert message.startswith("refused:")
    assert named.casefold() in message.casefold(), message


def test_refusals_carry_a_position_for_the_cli() -> None:
    with pytest.raises(QueryRefused) as refusal:
        check_query("SELECT cell,\n       getenv('HOME')\nFROM measurements")
    assert refusal.value.line == 2
    assert refusal.value.column == 8


def test_the_second_statement_is_located() -> None:
    with pytest.raises(QueryRefused) as refusal:
        check_query("SELECT 1;\nDROP TABLE measurements")
    assert refusal.value.line == 2
    assert "DROP TABLE" in refusal.value.message


def test_other_catalogs_are_refused_when_the_store_catalog_is_known() -> None:
    assert isinstance(
        check_query("SELECT * FROM store.main.measurements", catalog="store"), exp.Select
    )
    with pytest.raises(QueryRefused, match="catalog 'other'"):
        check_query("SELECT * FROM other.main.measurements", catalog="store")
    with pytest.raises(QueryRefused, match="catalog 'system'"):
        check_query("SELECT * FROM system.main.duckdb_tables()", catalog="store")


# --------------------------------------------------------------------------- accepted

ACCEPTED: list[tuple[str, dict[str, object]]] = [
    ("SELECT * FROM measurements", {}),
    ("FROM measurements WHERE cycle > 2", {}),
    (
        "SELECT cell, count(*) AS n, avg(capacity_ah) FROM measurements GROUP BY cell "
        "HAVING count(*) > 2 ORDER BY cell",
        {},
    ),
    (
        "SELECT m.cell, f.path, b.status FROM measurements AS m "
        "JOIN ingest_files AS f USING (file_id) "
        "JOIN ingest_batches AS b ON b.batch_id = f.batch_id",
        {},
    ),
    (
        "SELECT cell, cycle, capacity_ah - lag(capacity_ah) "
        "OVER (PARTITION BY cell ORDER BY cycle) "
        "AS step FROM measurements",
        {},
    ),
    (
        "SELECT cell, cycle FROM measurements "
        "QUALIFY row_number() OVER (PARTITION BY cell ORDER BY cycle DESC) = 1",
        {},
    ),
    (
        "WITH last AS (SELECT cell, max(day) AS day FROM measurements GROUP BY cell) "
        "SELECT * FROM last ORDER BY cell",
        {},
    ),
    ("WITH query AS (SELECT cell FROM measurements) SELECT DISTINCT cell FROM query", {}),
    (
        "WITH RECURSIVE n(i) AS (SELECT 1 UNION ALL SELECT i + 1 FROM n WHERE i < 5) "
        "SELECT sum(i) FROM n",
        {},
    ),
    ("SELECT cell FROM measurements UNION SELECT 'c99'", {}),
    ("SELECT cell FROM measurements INTERSECT SELECT cell FROM fit_fade", {}),
    ("SELECT file_id FROM ingest_files EXCEPT SELECT file_id FROM measurements", {}),
    ("(SELECT 1 AS a) UNION ALL (SELECT 2)", {}),
    ("VALUES (1, 'one'), (2, 'two')", {}),
    ("DESCRIBE measurements", {}),
    ("DESCRIBE SELECT cell, slope FROM fit_fade", {}),
    ("SHOW TABLES", {}),
    ("SHOW ALL TABLES", {}),
    ("SHOW measurements", {}),
    ("SUMMARIZE measurements", {}),
    ("SUMMARIZE SELECT capacity_ah FROM measurements", {}),
    ("SELECT * FROM measurements WHERE cell = $cell", {"cell": "c01"}),
    ("SELECT * FROM fit_fade WHERE cell = $cell AND n >= $least", {"cell": "c02", "least": 2}),
    ("SELECT * FROM measurements WHERE cell IN (SELECT cell FROM fit_fade WHERE slope < 0)", {}),
    (
        "SELECT * FROM ingest_files f WHERE EXISTS "
        "(SELECT 1 FROM measurements m WHERE m.file_id = f.file_id)",
        {},
    ),
    ("SELECT cell, CASE WHEN r2 > 0.9 THEN 'good' ELSE 'poor' END AS quality FROM fit_fade", {}),
    (
        "SELECT date_trunc('month', day) AS month, strftime(day, '%Y-%m-%d'), "
        "day + INTERVAL 1 DAY, datediff('day', DATE '2024-01-01', day) FROM measurements",
        {},
    ),
    ("SELECT * FROM range(10)", {}),
    ("SELECT * FROM generate_series(1, 3) AS g(i)", {}),
    ("SELECT * FROM unnest(['a', 'b']) AS u(x)", {}),
    ("SELECT table_name FROM duckdb_tables() ORDER BY table_name", {}),
    ("SELECT view_name FROM duckdb_views() WHERE NOT internal", {}),
    ("SELECT column_name FROM duckdb_columns() WHERE table_name = 'measurements'", {}),
    ("SELECT * FROM (DESCRIBE measurements)", {}),
    ("UNPIVOT fit_fade ON slope, intercept INTO NAME term VALUE estimate", {}),
    ("PIVOT measurements ON cell IN ('c01', 'c02') USING max(capacity_ah) GROUP BY cycle", {}),
    (
        "SELECT cell, regr_slope(capacity_ah, cycle), corr(capacity_ah, cycle) "
        "FROM measurements GROUP BY ALL",
        {},
    ),
    ("SELECT list_transform([1, 2, 3], lambda x: x * 2), {'a': 1}, try_cast('x' AS INTEGER)", {}),
    ("SELECT * EXCLUDE (file_id) FROM measurements USING SAMPLE 50 PERCENT (bernoulli, 1)", {}),
    ("SELECT 'DROP TABLE measurements; read_csv(''/etc/passwd'')' AS just_text", {}),
    ("SELECT 1 /* /* nested */ ; DROP TABLE measurements; */ AS one", {}),
    ("SELECT count(*) FROM measurements;", {}),
    ("  -- a leading note\n  SELECT max(cycle) FROM measurements ; ", {}),
]


@pytest.mark.parametrize(("sql", "params"), ACCEPTED, ids=[sql[:40] for sql, _ in ACCEPTED])
def test_accepted_queries_run_on_a_read_only_store(
    store: duckdb.DuckDBPyConnection, sql: str, params: dict[str, object]
) -> None:
    tree = check_query(sql, catalog="store")
    assert isinstance(tree, READ_STATEMENT_TYPES)
    check_params(tree, params)
    # both the text as written and sqlglot's rendering of the tree were checked; both run
    for text in (sql, tree.sql(dialect="duckdb")):
        result = store.execute(text, params) if params else store.execute(text)
        result.fetchall()


def test_show_of_a_table_comes_back_as_describe() -> None:
    tree = check_query("SHOW measurements")
    assert isinstance(tree, exp.Describe)
    assert tree.sql(dialect="duckdb") == "DESCRIBE measurements"


def test_parameters_are_listed_and_checked(store: duckdb.DuckDBPyConnection) -> None:
    sql = "SELECT * FROM measurements WHERE cell = $cell AND cycle >= $from_cycle"
    tree = check_query(sql)
    assert parameter_names(tree) == {"cell", "from_cycle"}
    check_params(tree, {"cell": "c01", "from_cycle": 2})
    rows = store.execute(sql, {"cell": "c01", "from_cycle": 2}).fetchall()
    assert [row[2] for row in rows] == [2, 3, 4, 5]

    with pytest.raises(QueryRefused, match=r"no value for parameter \$from_cycle"):
        check_params(tree, {"cell": "c01"})
    with pytest.raises(QueryRefused, match="parameter cel is not used") as refusal:
        check_params(tree, {"cell": "c01", "from_cycle": 2, "cel": "x"})
    assert refusal.value.hint == "did you mean cell?"


def test_parameter_names_ignore_case_like_duckdb(store: duckdb.DuckDBPyConnection) -> None:
    sql = "SELECT count(*) FROM measurements WHERE cell = $Cell"
    tree = check_query(sql)
    check_params(tree, {"cell": "c02"})
    assert store.execute(sql, {"cell": "c02"}).fetchone() == (3,)


def test_a_query_without_placeholders_takes_no_params() -> None:
    tree = check_query("SELECT 1")
    assert parameter_names(tree) == set()
    check_params(tree, {})
    with pytest.raises(QueryRefused, match="not used"):
        check_params(tree, {"cell": "c01"})


# --------------------------------------------------------------------------- --where

WHERE_ACCEPTED = [
    ("r2 > 0.9", '"r2" > 0.9'),
    ("slope < 0 AND n >= 3", '"slope" < 0 AND "n" >= 3'),
    ("cell IN ('c01', 'c02')", "\"cell\" IN ('c01', 'c02')"),
    ("cell NOT IN ('c03')", "NOT \"cell\" IN ('c03')"),
    ("cell LIKE 'c0%' OR cell ILIKE 'C1%'", "\"cell\" LIKE 'c0%' OR \"cell\" ILIKE 'C1%'"),
    ("NOT (r2 BETWEEN 0.5 AND 0.9)", 'NOT ("r2" BETWEEN 0.5 AND 0.9)'),
    ("intercept IS NOT NULL", 'NOT "intercept" IS NULL'),
    ("cell IS DISTINCT FROM 'c03'", "\"cell\" IS DISTINCT FROM 'c03'"),
    ("slope * 1000 < -0.5 + 1 % 2", '"slope" * 1000 < -0.5 + 1 % 2'),
    ('"R2" >= 0', '"r2" >= 0'),
    ("CAST(n AS DOUBLE) / 2 > 0.5", 'CAST("n" AS DOUBLE) / 2 > 0.5'),
    ("r2 > 0.5 -- */ DROP TABLE measurements", '"r2" > 0.5'),
    ("TRUE", "TRUE"),
]


@pytest.mark.parametrize(("text", "rendered"), WHERE_ACCEPTED)
def test_where_conditions_render_with_quoted_columns(
    store: duckdb.DuckDBPyConnection, text: str, rendered: str
) -> None:
    tree = check_where(text, FIT_COLUMNS)
    sql = tree.sql(dialect="duckdb")
    assert sql == rendered
    store.execute(f"SELECT * FROM fit_fade WHERE {sql}").fetchall()


WHERE_REFUSED = [
    ("upper(cell) = 'C01'", "function upper"),
    ("cell ~ 'c0.*'", "function"),
    ("length(cell) > 2", "function length"),
    ("cell IN (SELECT cell FROM measurements)", "subquery"),
    ("r2 > (SELECT 0.5)", "subquery"),
    ("r3 > 0", "unknown column 'r3'"),
    ("1=1; DROP TABLE measurements", "';'"),
    ("*", "star"),
    ('"cell"" OR 1=1 --" = \'x\'', "unknown column"),
    ("fit_fade.cell = 'c01'", "qualified column"),
    ("cell = $cell", "parameter"),
    ("CAST(slope AS STRUCT(a INT)) IS NULL", "cast to"),
    ("cell IN ()", "IN ()"),
    ("cell IN (slope, 1)", "only literal values"),
    ("slope", None),
    ("42", "needs a condition"),
    ("slope + 1", "needs a condition"),
    ("", "empty"),
    ("DROP TABLE measurements", "DROP"),
    ("cell = 'x' COLLATE nocase", "COLLATE"),
    ("cell GLOB 'c*'", "GLOB"),
]


@pytest.mark.parametrize(("text", "named"), WHERE_REFUSED)
def test_where_refuses_anything_but_simple_conditions(text: str, named: str | None) -> None:
    if named is None:
        # a bare column is a condition only if it is boolean; DuckDB decides that later
        assert isinstance(check_where(text, FIT_COLUMNS), exp.Column)
        return
    with pytest.raises(QueryRefused) as refusal:
        check_where(text, FIT_COLUMNS)
    assert named.casefold() in refusal.value.message.casefold(), refusal.value.message


def test_where_unknown_column_suggests_the_nearest_name() -> None:
    with pytest.raises(QueryRefused) as refusal:
        check_where("r3 > 0.9", FIT_COLUMNS)
    assert refusal.value.hint == "did you mean r2?"
    with pytest.raises(QueryRefused) as refusal:
        check_where("slop < 0", FIT_COLUMNS)
    assert refusal.value.hint == "did you mean slope?"
    with pytest.raises(QueryRefused) as refusal:
        check_where("zzz < 0", FIT_COLUMNS)
    assert refusal.value.hint == "known columns: cell, n, slope, intercept, r2"


def test_where_keeps_odd_column_names_as_plain_quoted_names() -> None:
    odd = 'x" OR 1=1 --'
    tree = check_where('"x"" OR 1=1 --" > 0', [odd])
    assert tree.sql(dialect="duckdb") == '"x"" OR 1=1 --" > 0'


# --------------------------------------------------------------------------- fuzzing

SQL_WORDS = [
    "SELECT",
    "FROM",
    "WHERE",
    "WITH",
    "AS",
    "(",
    ")",
    ",",
    ";",
    "*",
    "=",
    "'x.csv'",
    "'a'",
    "measurements",
    "fit_fade",
    "cell",
    "read_csv('x')",
    "getenv('HOME')",
    "range(3)",
    "DROP",
    "TABLE",
    "DELETE",
    "INSERT",
    "INTO",
    "VALUES",
    "(1)",
    "UNION",
    "SHOW",
    "DESCRIBE",
    "SUMMARIZE",
    "$cell",
    "?",
    "--",
    "/*",
    "*/",
    "\n",
    "1",
    "LATERAL",
    "JOIN",
    "ON",
    "true",
    "PIVOT",
    "USING",
    "sum(cycle)",
    "CHECKPOINT",
    "COPY",
    "TO",
    "PRAGMA",
    "SET",
    '"q"',
]


def _outcome(sql: str) -> None:
    try:
        tree = check_query(sql)
    except QueryRefused:
        return
    assert isinstance(tree, READ_STATEMENT_TYPES)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(alphabet=st.characters(min_codepoint=9, max_codepoint=126), max_size=80))
def test_random_text_is_refused_or_read_only(sql: str) -> None:
    _outcome(sql)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.sampled_from(SQL_WORDS), max_size=14))
def test_random_sql_word_soup_is_refused_or_read_only(words: list[str]) -> None:
    _outcome(" ".join(words))


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=40))
def test_random_where_text_is_refused_or_a_condition(text: str) -> None:
    try:
        tree = check_where(text, FIT_COLUMNS)
    except QueryRefused:
        return
    for column in tree.find_all(exp.Column):
        assert column.name in FIT_COLUMNS
        assert column.this.quoted
