"""Export throughput, and the exported fit view on DuckDB against Spark local[2].

A store of about 10M rows (1,000 cells x 100 days x 100 rows, one CSV file per cell and
day, the layout of ``demo/spec.toml``) is exported to Hive-partitioned Parquet with
``trendledger.export.write.export``. Measured:

* the first full export (rows/s; it also renders the views for every engine, which the
  process then caches), a second full export into a new folder (the data alone), an
  export after one more day was appended (only that day's partition is written) and an
  export with no change (nothing to write): what a nightly export job costs;
* the fit ``fade`` computed from every row: the store's own ``fit_fade_full`` in DuckDB
  (the baseline), the export's ``views/duckdb.sql`` over the Parquet files in a fresh
  DuckDB, and the export's ``views/spark.sql`` in Spark local[2]. The store's ``fit_fade``
  reads the stored per-group sums, so it is printed as a note, not compared.

The Spark rows must equal DuckDB's (same groups, same n and status, slope and intercept
within 1e-9 relative), else the bench fails. Run ``python bench/export_bench.py [--rows
10_000_000] [--no-spark] [--keep]``; ``--rows 200000`` is a quick run (fewer cells; the
days and rows per file stay). Spark is skipped, saying why, without pyspark or Java.
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib.util
import math
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
from common import table, timed

from trendledger import Ledger
from trendledger.export.write import export, split_script

REPO = Path(__file__).resolve().parent.parent

SPEC = """\
[source]
files = "incoming/{day}/{cell}.csv"
format = "csv"
[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"
[source.fields]
day = "DATE"
cell = "VARCHAR"
[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
"""
START = dt.date(2026, 1, 1)
#: Relative tolerance for the numbers Spark and DuckDB must agree on.
TOLERANCE = 1e-9


def write_day(root: Path, day: int, cells: int, per_file: int, fade: np.ndarray,
              rng: np.random.Generator) -> int:
    """One CSV file per cell for ``day``: capacity falling on a line in the cycle, with noise."""
    folder = root / "incoming" / (START + dt.timedelta(days=day)).isoformat()
    folder.mkdir(parents=True)
    cycles = np.arange(day * per_file, (day + 1) * per_file, dtype=np.float64)
    capacity = 3.0 - fade[:, None] * cycles[None, :] + rng.normal(0, 0.004, (cells, per_file))
    pairs = np.empty((cells, per_file, 2))
    pairs[:, :, 0] = cycles
    pairs[:, :, 1] = capacity
    lines = "cycle,capacity_ah\n" + "%d,%.6f\n" * per_file
    for cell in range(cells):
        text = lines % tuple(pairs[cell].ravel().tolist())
        (folder / f"c{cell:04d}.csv").write_bytes(text.encode())
    return cells * per_file


def materialise(con: duckdb.DuckDBPyConnection, sql: str) -> int:
    """Compute every column of every row inside DuckDB (no conversion to Python)."""
    con.execute(f"CREATE OR REPLACE TEMP TABLE bench_out AS {sql}")
    row = con.execute("SELECT count(*) FROM bench_out").fetchone()
    return int(row[0]) if row else 0


def fit_rows(con: duckdb.DuckDBPyConnection, sql: str) -> dict[str, dict[str, Any]]:
    cur = con.execute(sql)
    names = [d[0] for d in cur.description]
    return {r["cell"]: r for r in (dict(zip(names, row, strict=True)) for row in cur.fetchall())}


def close(a: Any, b: Any) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= TOLERANCE * max(abs(a), abs(b))


def compare(want: dict[str, dict[str, Any]], got: dict[str, dict[str, Any]],
            label: str) -> float:
    """Fail unless ``got`` has the groups, n, status, slope and intercept of ``want``.

    Returns the largest relative difference over every float column (for the report).
    """
    if set(want) != set(got):
        missing, extra = sorted(set(want) - set(got)), sorted(set(got) - set(want))
        raise SystemExit(f"FAIL {label}: {len(want)} groups against {len(got)} "
                         f"(missing {missing[:5]}, extra {extra[:5]})")
    worst = 0.0
    for cell, row in want.items():
        other = got[cell]
        if row["n"] != other["n"] or row["status"] != other["status"]:
            raise SystemExit(f"FAIL {label}: group {cell}: n/status {row['n']}/{row['status']}"
                             f" against {other['n']}/{other['status']}")
        for column in ("slope", "intercept"):
            if not close(row[column], other[column]):
                raise SystemExit(f"FAIL {label}: group {cell}: {column} {row[column]!r} "
                                 f"against {other[column]!r} (tolerance {TOLERANCE:g})")
        for column, value in row.items():
            if isinstance(value, float) and isinstance(other.get(column), float) \
                    and math.isfinite(value) and math.isfinite(other[column]):
                scale = max(abs(value), abs(other[column]))
                if scale > 0:
                    worst = max(worst, abs(value - other[column]) / scale)
    return worst


def spark_missing() -> str | None:
    """Why Spark cannot run here, or None."""
    if importlib.util.find_spec("pyspark") is None:
        return "pyspark is not installed (the 'engines' extra)"
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        return "no Java on PATH and no JAVA_HOME (Spark needs Java 17 or later)"
    return None


def run_spark(folder: Path, work: Path, repeat: int
              ) -> tuple[dict[str, float], int, dict[str, dict[str, Any]]]:
    """Start local[2], define the exported views, fetch fit_fade: timings and the rows.

    Returns seconds by step, the number of statements and fit_fade's rows by cell.
    """
    if str(REPO) not in sys.path:
        sys.path.insert(0, str(REPO))
    # no progress bar on the terminal (read when the JVM starts)
    os.environ.setdefault("PYSPARK_SUBMIT_ARGS",
                          "--conf spark.ui.showConsoleProgress=false pyspark-shell")
    from tests.engines import spark_session

    def fetch() -> list[Any]:
        return list(spark.sql("SELECT * FROM fit_fade").collect())

    steps: dict[str, float] = {}
    started = time.perf_counter()
    spark = spark_session(work)
    try:
        # the views' long expressions overflow Spark's 64 KB limit for generated methods:
        # Spark falls back to slower code and logs each time, as ERROR with stack traces
        spark.sparkContext.setLogLevel("FATAL")
        spark.conf.set("spark.sql.session.timeZone", "UTC")
        steps["start"] = time.perf_counter() - started
        statements = split_script((folder / "views" / "spark.sql").read_text())
        steps["define"], _ = timed(lambda: [spark.sql(s) for s in statements])
        steps["first"], rows = timed(fetch)
        steps["best"], rows = timed(fetch, repeat)
        # the same without whole-stage code generation (it fails here, see above)
        spark.conf.set("spark.sql.codegen.wholeStage", "false")
        steps["plain"], plain = timed(fetch, repeat)
        assert len(plain) == len(rows)
        got = {r["cell"]: r.asDict() for r in rows}
    finally:
        spark.stop()
    return steps, len(statements), got


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--rows", type=int, default=10_000_000,
                    help="about this many rows; the cells follow (default 10M: 1,000 cells)")
    ap.add_argument("--days", type=int, default=100)
    ap.add_argument("--per-file", type=int, default=100, help="rows per cell and day")
    ap.add_argument("--repeat", type=int, default=3, help="best of N for the fit timings")
    ap.add_argument("--spark", action=argparse.BooleanOptionalAction, default=True,
                    help="also run the exported views on Spark local[2]")
    ap.add_argument("--keep", action="store_true", help="keep the temporary folder")
    args = ap.parse_args()
    cells = max(1, round(args.rows / (args.days * args.per_file)))
    total = cells * args.days * args.per_file
    why_not = None if args.spark else "--no-spark"
    if why_not is None:
        why_not = spark_missing()
    if why_not is not None:
        print(f"Spark will be skipped: {why_not}")

    root = Path(tempfile.mkdtemp(prefix="tl-export-"))
    started = time.perf_counter()
    try:
        print(f"export: {cells:,} cells x {args.days} days x {args.per_file} rows = "
              f"{total:,} rows in {cells * args.days:,} files, under {root}")
        (root / "spec.toml").write_text(SPEC)
        store = root / "trendledger.duckdb"
        rng = np.random.default_rng(7)
        fade = rng.uniform(4e-5, 8e-5, cells)  # Ah lost per cycle, per cell
        t_write, _ = timed(lambda: [write_day(root, d, cells, args.per_file, fade, rng)
                                    for d in range(args.days)])
        Ledger.init(root / "spec.toml", store).close()
        with Ledger.open(store) as led:
            t_append, summary = timed(lambda: led.append(command="export_bench"))
        assert summary.rows == total, (summary.rows, total)

        # -- export throughput ------------------------------------------------------------
        out = root / "export"
        t_first, first = timed(lambda: export(store, out))
        assert first["rows"] == total and len(first["written"]) == args.days, first
        t_again, again = timed(lambda: export(store, root / "export-2"))
        assert again["rows"] == total
        shutil.rmtree(root / "export-2")
        extra = write_day(root, args.days, cells, args.per_file, fade, rng)
        new_day = root / "incoming" / (START + dt.timedelta(days=args.days)).isoformat()
        with Ledger.open(store) as led:
            t_append_day, summary = timed(
                lambda: led.append([str(new_day / "*.csv")], command="export_bench"))
        assert summary.rows == extra
        total += extra
        t_day, day = timed(lambda: export(store, out))
        assert day["rows"] == total and len(day["written"]) == 1, day
        t_none, none = timed(lambda: export(store, out))
        assert none["written"] == [] and none["unchanged"] == args.days + 1, none
        print("store and export to Parquet:")
        print(table([
            (f"write {cells * args.days:,} CSV files (numpy)", t_write,
             f"{total - extra:,} rows"),
            ("append them (one batch)", t_append, f"{(total - extra) / t_append:,.0f} rows/s"),
            ("first full export (+ views for 4 engines)", t_first,
             f"{first['rows'] / t_first:,.0f} rows/s, {len(first['written'])} partitions"),
            ("full export to a new folder (views cached)", t_again,
             f"{again['rows'] / t_again:,.0f} rows/s"),
            ("append one more day", t_append_day, f"{extra:,} rows"),
            ("export after that day", t_day,
             f"{len(day['written'])} partition written ({', '.join(day['written'])}), "
             f"{day['unchanged']} unchanged"),
            ("export with no change", t_none,
             f"{len(none['written'])} written, {none['unchanged']} unchanged"),
        ]))

        # -- the fit on DuckDB ------------------------------------------------------------
        with Ledger.open(store) as led:
            t_full, n_full = timed(lambda: materialise(led.con, "SELECT * FROM fit_fade_full"),
                                   args.repeat)
            t_stored, n_stored = timed(lambda: materialise(led.con, "SELECT * FROM fit_fade"),
                                       args.repeat)
            want = fit_rows(led.con, "SELECT * FROM fit_fade_full")
        assert n_full == n_stored == cells, (n_full, n_stored, cells)
        parquet = duckdb.connect()
        try:
            text = (out / "views" / "duckdb.sql").read_text()
            t_define, _ = timed(lambda: parquet.execute(text))
            t_parquet, n_parquet = timed(
                lambda: materialise(parquet, "SELECT * FROM fit_fade"), args.repeat)
            from_parquet = fit_rows(parquet, "SELECT * FROM fit_fade")
        finally:
            parquet.close()
        assert n_parquet == cells
        worst_parquet = compare(want, from_parquet, "DuckDB over the Parquet export")
        rows = [
            ("(base) DuckDB fit_fade_full, every row in the store", t_full,
             f"{total:,} rows, {cells:,} groups"),
            ("DuckDB views/duckdb.sql over Parquet: define", t_define, ""),
            ("DuckDB views/duckdb.sql over Parquet: fit_fade", t_parquet,
             f"{t_parquet / t_full:.1f}x (base)"),
            ("note: store's fit_fade (stored sums, not comparable)", t_stored,
             f"{t_stored / t_full:.3f}x (base)"),
        ]

        # -- the fit on Spark -------------------------------------------------------------
        ratios: list[str] = []
        if why_not is None:
            steps, statements, got = run_spark(out, root / "spark", args.repeat)
            worst_spark = compare(want, got, "Spark local[2]")
            t_spark = steps["best"]
            rows += [
                ("Spark local[2]: session start", steps["start"], ""),
                ("Spark local[2]: define sources, functions, views", steps["define"],
                 f"{statements} statements"),
                ("Spark local[2]: fit_fade collect(), first", steps["first"],
                 f"{steps['first'] / t_full:.1f}x (base)"),
                (f"Spark local[2]: fit_fade collect(), best of {args.repeat}", t_spark,
                 f"{t_spark / t_full:.1f}x (base)"),
                (f"  same, whole-stage codegen off, best of {args.repeat}", steps["plain"],
                 f"{steps['plain'] / t_full:.1f}x (base)"),
            ]
            ratios.append(f"  spark local[2] {t_spark / t_full:.1f}x the DuckDB full view "
                          f"(first run {steps['first'] / t_full:.1f}x, whole-stage codegen off "
                          f"{steps['plain'] / t_full:.1f}x); DuckDB over Parquet "
                          f"{t_parquet / t_full:.1f}x")
            ratios.append(f"  Spark agrees with DuckDB: {len(got):,} groups, same n and status, "
                          f"slope and intercept within {TOLERANCE:g} relative (largest "
                          f"relative difference over every float column {worst_spark:.1e})")
        else:
            ratios.append(f"  Spark skipped: {why_not}")
        ratios.append(f"  DuckDB over Parquet agrees with the store: {len(from_parquet):,} "
                      f"groups (largest relative difference {worst_parquet:.1e})")
        print("fit fade from every row:")
        print(table(rows))
        print("\n".join(ratios))
        print(f"  total bench time {time.perf_counter() - started:.0f} s")
    finally:
        if args.keep:
            print(f"  kept {root}")
        else:
            shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
