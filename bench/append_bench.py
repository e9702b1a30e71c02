"""Append throughput: trendledger against a bare DuckDB read and a pandas loop.

10,000 files x 200 rows (50 units x 200 days). Run with ``make bench`` or
``python bench/append_bench.py [--units 50 --days 200 --rows 200]``.
Target: lineage and hashing cost at most 25 % over the bare DuckDB read, and at
least 3x faster than the pandas loop. The store is created before the append is timed
(as the bare read's table is); the publish of the read copy is shown on its own line.
"""

from __future__ import annotations

import argparse
import datetime as dt
import shutil
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
from common import table, timed

from trendledger import Ledger

SPEC = """\
[source]
files = "incoming/{day}/{unit}.csv"
[source.columns]
step = "INTEGER"
value = "DOUBLE"
[source.fields]
day = "DATE"
unit = "VARCHAR"
[[fit]]
name = "drift"
group = ["unit"]
x = "step"
y = "value"
"""


def make_files(root: Path, units: int, days: int, rows: int) -> int:
    rng = np.random.default_rng(1)
    start = dt.date(2026, 1, 1)
    for d in range(days):
        folder = root / "incoming" / (start + dt.timedelta(days=d)).isoformat()
        folder.mkdir(parents=True)
        for u in range(units):
            steps = np.arange(d * rows, (d + 1) * rows)
            values = 5.0 + 1e-3 * steps + rng.normal(0, 0.01, rows)
            body = "\n".join(f"{s},{v:.6f}" for s, v in zip(steps, values, strict=True))
            (folder / f"u{u:03d}.csv").write_text("step,value\n" + body + "\n")
    return units * days * rows


def bare_duckdb(root: Path, db: Path) -> int:
    con = duckdb.connect(str(db))
    con.execute("SET enable_progress_bar = false")
    con.execute("CREATE TABLE m (step INTEGER, value DOUBLE, filename VARCHAR)")
    con.execute(
        "INSERT INTO m SELECT * FROM read_csv($g, columns={'step': 'INTEGER', 'value': 'DOUBLE'},"
        " auto_detect=false, header=true, delim=',', quote='\"', escape='\"', filename=true)",
        {"g": str(root / "incoming/*/*.csv")},
    )
    n = con.execute("SELECT count(*) FROM m").fetchone()
    con.close()
    return int(n[0]) if n else 0


def pandas_loop(root: Path, db: Path) -> int:
    frames = []
    for path in sorted((root / "incoming").glob("*/*.csv")):
        df = pd.read_csv(path, dtype={"step": "int32", "value": "float64"})
        df["day"] = path.parent.name
        df["unit"] = path.stem
        frames.append(df)
    all_rows = pd.concat(frames, ignore_index=True)
    con = duckdb.connect(str(db))
    con.register("all_rows", all_rows)
    con.execute("CREATE TABLE m AS SELECT * FROM all_rows")
    n = con.execute("SELECT count(*) FROM m").fetchone()
    con.close()
    return int(n[0]) if n else 0


#: Seconds of the last ``ours`` run: creating the store (once per store, not per append)
#: and the publish of the read copy after the commit (part of the append's time).
SPLIT: dict[str, float] = {}


def ours(root: Path) -> int:
    """The append alone, on a store created beforehand (as (a) creates its table first)."""
    store = root / "trendledger.duckdb"
    start = time.perf_counter()
    Ledger.init(root / "spec.toml", store, force=True).close()
    SPLIT["init"] = time.perf_counter() - start
    SPLIT["start"] = time.perf_counter()
    marks: dict[str, float] = {}

    def progress(stage: str, done: int, total: int) -> None:
        # the first time each step is reached: hashing starts, DuckDB's read starts and
        # ends, the checkpoint after the commit starts
        key = f"{stage}-{'start' if done == 0 else 'end' if done >= total else 'mid'}"
        marks.setdefault(key, time.perf_counter())

    with Ledger.open(store) as led:
        rows = led.append(progress=progress).rows
        SPLIT["publish"] = led.last_publish.seconds if led.last_publish else 0.0
    SPLIT["append"] = time.perf_counter() - SPLIT["start"]
    steps = [("open the store", "start", "hash-start"),
             ("stat, read, hash, check headers and paths (Python)", "hash-start", "hash-end"),
             ("field types, links for DuckDB", "hash-end", "read-start"),
             ("DuckDB read + insert (one read_csv)", "read-start", "read-end"),
             ("lineage, stored sums, commit", "read-end", "checkpoint-start"),
             ("publish: checkpoint, copy, flush, rename", "checkpoint-start", "publish-end")]
    marks["start"] = SPLIT["start"]
    WHERE.clear()
    for label, a, b in steps:
        if a in marks and b in marks:
            WHERE.append((label, marks[b] - marks[a]))
    return rows


#: Where the append's time went, step by step (from its progress reports).
WHERE: list[tuple[str, float]] = []


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--units", type=int, default=50)
    ap.add_argument("--days", type=int, default=200)
    ap.add_argument("--rows", type=int, default=200)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="tl-bench-") as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        total = make_files(root, args.units, args.days, args.rows)
        files = args.units * args.days
        print(f"append: {files} files x {args.rows} rows = {total:,} rows")
        t_bare, n_bare = timed(lambda: bare_duckdb(root, root / "bare.duckdb"))
        _, n_ours = timed(lambda: ours(root))
        t_ours = SPLIT["append"]
        t_pandas, n_pandas = timed(lambda: pandas_loop(root, root / "pandas.duckdb"))
        assert n_bare == n_ours == n_pandas == total, (n_bare, n_ours, n_pandas, total)
        t_pub = SPLIT["publish"]
        t_append = t_ours - t_pub
        print(table([
            ("(a) bare DuckDB INSERT ... read_csv(glob)", t_bare, f"{total / t_bare:,.0f} rows/s"),
            ("trendledger append, in all", t_ours, f"{total / t_ours:,.0f} rows/s"),
            ("  before the publish (hash, lineage, sums)", t_append,
             f"{total / t_append:,.0f} rows/s"),
            ("  the publish of the read copy", t_pub, "checkpoint, copy, flush, rename"),
            ("(once per store) trendledger init", SPLIT["init"], "schema, views, first publish"),
            ("(b) pandas read_csv loop + insert", t_pandas, f"{total / t_pandas:,.0f} rows/s"),
        ]))
        print(f"  append overhead over (a): {t_append / t_bare - 1:+.0%}  (target <= +25%); "
              f"with the publish {t_ours / t_bare - 1:+.0%}")
        print(f"  speed-up over (b): {t_pandas / t_ours:.1f}x  (target >= 3x)")
        print("  where the append's time goes:")
        for label, secs in WHERE:
            print(f"    {label:<52} {secs:7.3f} s  {secs / t_ours:4.0%}")
        shutil.rmtree(root / "incoming")


if __name__ == "__main__":
    main()
