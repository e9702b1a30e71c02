"""The exported views on real engines: Spark (local[2]) and a throwaway PostgreSQL cluster.

Each engine reads the export of a small store, runs its ``views/<dialect>.sql`` and must
give every column of every view DuckDB gives (reference: the store's own views), floats
within 1e-9 relative and NULL = NULL (see ``same_rows``). The export is made, then more
rows are appended (a new day and a late file for an old day) and it is exported again,
so the engines read an incremental export.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import duckdb
import pytest

from trendledger.export import write as export_module
from trendledger.export.write import export, split_script
from trendledger.views import install as views

from .audit import fuzz_scale
from .conftest import SPEC
from .engines import postgres_bin, postgres_cluster, spark_session
from .test_export import DAYS, SPEC_TWO_FITS, build_lab, day_cells, reference, same_rows, write_day

pytestmark = [pytest.mark.engines, pytest.mark.slow]

#: Every companion view of a fit: a limit to cross, a horizon, a window per day; and a
#: second fit through the origin with a limit (its fit, moments, points and crossing views);
#: a third fit of forms of a computed column, with a row filter.
ENGINE_SPEC = SPEC + """limit = 2.9
horizon = 40
window = "day"
min_r2 = 0.9
""" + SPEC_TWO_FITS[len(SPEC):] + """limit = 1.0

[source.computed]
loss = "3.1 - capacity_ah / 1"

[[fit]]
name = "forms"
group = ["cell"]
x = "log10(cycle)"
y = "ln(loss)"
where = "cycle > 1"
limit = 0.5
"""


#: Rows, and distinct rows (a file may repeat a reading): the same in every engine when
#: nothing was lost or read twice.
COUNTS = ("SELECT count(*), (SELECT count(*) FROM (SELECT DISTINCT * FROM measurements) AS d) "
          "FROM measurements")


class Exported:
    """A store, its export and DuckDB's rows of every view (the reference)."""

    def __init__(self, root: Path) -> None:
        self.lab = build_lab(root / "lab", days=3, spec=ENGINE_SPEC)
        self.folder = root / "out"
        export(self.lab.store, self.folder)
        write_day(self.lab, DAYS[3], day_cells(3))
        write_day(self.lab, DAYS[1], {"late": [(1, 2.0), (2, 1.9), (3, 1.85)]})
        with self.lab.open() as led:
            led.append(command="test")
        self.done = export(self.lab.store, self.folder)
        self.want = reference(self.lab)
        with self.lab.open(read_only=True) as led:
            self.rows = led.con.execute(COUNTS).fetchone()

    def script(self, dialect: str) -> str:
        return (self.folder / "views" / f"{dialect}.sql").read_text()

    def available(self, dialect: str) -> list[str]:
        missing = self.done["unavailable"].get(dialect, {})
        return [n for n in self.want if n not in missing]

    def wanted(self, dialect: str) -> dict[str, tuple[list[str], list[tuple[Any, ...]]]]:
        """DuckDB's rows of every view as ``dialect``'s export plans them.

        Spark's export has no bend views: its crossing and alerts views read the
        whole-history line (export/scripts.py). DuckDB runs that same composition over the
        export, so Spark is compared with it, and with the store for every other view.
        """
        if dialect != "spark":
            return self.want
        con = duckdb.connect()
        con.execute(self.script("duckdb"))
        with self.lab.open(read_only=True) as led:
            spec = led.spec
        out = dict(self.want)
        for item in views.plan(spec, recompute=True, without=frozenset({"bend_rounds", "bend"})):
            if item.kind in ("crossing", "alerts") and item.name in out:
                for statement in item.statements:
                    con.execute(statement)
                columns = out[item.name][0]
                picked = ", ".join(f'"{c}"' for c in columns)
                out[item.name] = (columns, con.execute(
                    f'SELECT {picked} FROM "{item.name}"').fetchall())
        return out


@pytest.fixture(scope="module")
def exported(tmp_path_factory: pytest.TempPathFactory) -> Exported:
    return Exported(tmp_path_factory.mktemp("engines"))


#: The views Spark runs in a normal run: one of each composition (plain, through the origin,
#: forms). Spark plans each of these long views for a minute or more on two cores, so all of
#: them run with TRENDLEDGER_FUZZ=long only.
SPARK_SAMPLE = ("fit_fade", "fit_fade_crossing", "fit_fade_trend", "fit_fade0_points",
                "fit_forms")


def check_views(exported: Exported, dialect: str, fetch: Any,
                only: tuple[str, ...] = ()) -> None:
    names = exported.available(dialect)
    # the fits and their companions must all be there; only the DuckDB-formatted alerts, the
    # fleet view (DuckDB list functions), the table macro and, on Spark, the bend views
    # (export/scripts.py) may be missing
    optional = ("_alerts", "_fleet") + (("_bend", "_bend_rounds") if dialect == "spark" else ())
    assert not [n for n in exported.want if n not in names and not n.endswith(optional)]
    want = exported.wanted(dialect)
    assert {f"fit_fade{s}" for s in ("", "_moments", "_windows", "_points", "_change",
                                     "_crossing", "_full", "_full_moments",
                                     "_fleet_units")} <= set(names)
    assert {f"fit_forms{s}" for s in ("", "_moments", "_points", "_crossing", "_full")} \
        <= set(names)
    for name in names:
        if only and name not in only:
            continue
        columns, rows = want[name]
        got_columns, got = fetch(name)
        assert got_columns == columns, name
        if name.startswith("fit_forms"):
            # each engine's ln and log10 may round the last bit differently, so the low parts
            # of the means (themselves rounding errors, about 1e-17) differ; every other
            # column is compared as for plain fits
            low = [i for i, c in enumerate(columns) if c in ("x_mean_lo", "y_mean_lo")]
            rows = [tuple(None if i in low else v for i, v in enumerate(r)) for r in rows]
            got = [tuple(None if i in low else v for i, v in enumerate(r)) for r in got]
        same_rows(rows, got, columns, f"{dialect} {name}")


# -- Spark ----------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def spark(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    pytest.importorskip("pyspark", reason="pyspark is in the 'engines' extra (make test)")
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        pytest.skip("Spark needs Java 17 or later (make system installs it)")
    session = spark_session(tmp_path_factory.mktemp("spark"))
    yield session
    session.stop()


def test_spark_runs_every_view_like_duckdb(exported: Exported, spark: Any) -> None:
    spark.conf.set("spark.sql.session.timeZone", "UTC")
    for statement in split_script(exported.script("spark")):
        spark.sql(statement)
    # the data as Spark reads it: as many rows as the store, none twice
    assert tuple(spark.sql(COUNTS).collect()[0]) == exported.rows

    def fetch(name: str) -> tuple[list[str], list[tuple[Any, ...]]]:
        frame = spark.sql(f"SELECT * FROM `{name}`")
        return list(frame.columns), [tuple(r) for r in frame.collect()]

    check_views(exported, "spark", fetch, () if fuzz_scale() > 1 else SPARK_SAMPLE)


# -- PostgreSQL -----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def postgres() -> Iterator[Any]:
    psycopg = pytest.importorskip("psycopg", reason="psycopg is in the 'engines' extra")
    if postgres_bin() is None:
        pytest.skip("no PostgreSQL server binaries (make system installs the Debian package)")
    with contextlib.ExitStack() as stack:
        try:
            server = stack.enter_context(postgres_cluster())
        except LookupError as err:  # as root without a postgres system user, say
            pytest.skip(f"cannot start PostgreSQL here: {err}")
        with psycopg.connect(server.dsn, autocommit=True) as con:
            yield server, con


def test_postgres_loads_the_export_and_runs_every_view_like_duckdb(
        exported: Exported, postgres: Any) -> None:
    server, con = postgres
    for statement in split_script(exported.script("postgres")):
        con.execute(statement)
    # load the data with the very commands the file prints (DuckDB's CLI into psql)
    bindir = postgres_bin()
    assert bindir is not None
    cli = Path(sys.executable).parent
    env = {**os.environ, "PGHOST": "127.0.0.1", "PGPORT": str(server.port),
           "PGUSER": server.user, "PGDATABASE": server.dbname,
           "PATH": f"{cli}:{bindir}:{os.environ.get('PATH', '')}"}
    if shutil.which("duckdb", path=env["PATH"]) is None:
        pytest.skip("the DuckDB command line (duckdb-cli, test extra) is not installed")
    commands = export_module.sql(exported.lab.store, "postgres", str(exported.folder)).commands
    assert len(commands) == 3  # measurements and the two lineage tables
    for _ in range(2):  # loading again replaces the rows
        for command in commands:
            subprocess.run(["bash", "-o", "pipefail", "-c", command], env=env, check=True,
                           capture_output=True)
    assert con.execute(COUNTS).fetchone() == exported.rows
    with duckdb.connect() as reference:  # the lineage came through whole
        for table in ("ingest_batches", "ingest_files"):
            n = reference.execute(
                f"SELECT count(*) FROM '{exported.folder}/{table}/*.parquet'").fetchone()
            assert con.execute(f"SELECT count(*) FROM {table}").fetchone() == n

    def fetch(name: str) -> tuple[list[str], list[tuple[Any, ...]]]:
        cursor = con.execute(f'SELECT * FROM "{name}"')
        return [d.name for d in cursor.description], [tuple(r) for r in cursor.fetchall()]

    check_views(exported, "postgres", fetch)
