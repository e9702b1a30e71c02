"""The price of never blocking readers: disk and publish time of the read copy at 10M rows.

Every write ends by publishing: checkpoint the writer's copy, copy it beside the store
(a reflink where the file system shares blocks, a kernel copy otherwise), flush, rename it
over the store's path. This bench fills a store with ``--days`` x ``--cells`` x ``--per-day``
rows (default 100 x 1,000 x 100 = 10M, as Parquet files appended in one batch), then appends
``--small`` more days of one small file each and reports, per small append, the whole
append and its publish step. Baselines measured in the same run: a plain ``cp`` of the
writer's copy with fsync, and the small append's work before the publish.
Run ``python bench/publish_bench.py [--days 100 --cells 1000 --per-day 100 --small 3]``.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import shutil
import tempfile
import time
from pathlib import Path

import duckdb
from common import table, timed

from trendledger import Ledger
from trendledger.store.publish import Layout

SPEC = """\
[source]
files = "incoming/{day}/readings.parquet"
format = "parquet"
[source.columns]
cell = "VARCHAR"
cycle = "INTEGER"
capacity_ah = "DOUBLE"
[source.fields]
day = "DATE"
[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
"""
START = dt.date(2026, 1, 1)


def write_day(con: duckdb.DuckDBPyConnection, root: Path, day: int, cells: int,
              per_day: int) -> None:
    folder = root / "incoming" / (START + dt.timedelta(days=day)).isoformat()
    folder.mkdir(parents=True)
    target = folder / "readings.parquet"
    con.execute(
        "COPY (SELECT printf('c%05d', g) AS cell, CAST($day * $per + k AS INTEGER) AS cycle, "
        "3.0 - 1e-4 * ($day * $per + k) - 1e-6 * g + 0.001 * sin(g * 12.9898 + k * 78.233) "
        "AS capacity_ah FROM range($cells) AS a(g), range($per) AS b(k)) "
        f"TO '{target}' (FORMAT parquet)",
        {"day": day, "per": per_day, "cells": cells},
    )


def on_disk(path: Path) -> int:
    """Bytes the file takes on disk (allocated blocks), not its apparent size."""
    return os.stat(path).st_blocks * 512 if path.exists() else 0


def plain_copy(src: Path, dst: Path) -> None:
    shutil.copyfile(src, dst)
    fd = os.open(dst, os.O_RDONLY)
    os.fsync(fd)
    os.close(fd)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--days", type=int, default=100)
    ap.add_argument("--cells", type=int, default=1000)
    ap.add_argument("--per-day", type=int, default=100)
    ap.add_argument("--small", type=int, default=3)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="tl-publish-", dir=os.environ.get("TMPDIR")) as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        gen = duckdb.connect()
        for day in range(args.days):
            write_day(gen, root, day, args.cells, args.per_day)
        total = args.days * args.cells * args.per_day
        store = root / "trendledger.duckdb"
        layout = Layout.of(store)
        start = time.perf_counter()
        with Ledger.init(root / "spec.toml", store) as led:
            assert led.append().rows == total
            big = led.last_publish
        t_fill = time.perf_counter() - start
        assert big is not None
        print(f"publish: {total:,} rows in {args.days} files, appended in {t_fill:.1f} s "
              f"(its publish {big.seconds:.2f} s, {big.how})")

        size = layout.writer.stat().st_size
        disk_w, disk_p = on_disk(layout.writer), on_disk(layout.published)
        print(f"  writer's copy {size / 2**20:,.0f} MiB; on disk: writer's copy "
              f"{disk_w / 2**20:,.0f} MiB + published copy {disk_p / 2**20:,.0f} MiB "
              f"(the published copy adds {disk_p / max(disk_w, 1):.0%})")

        rows = []
        for k in range(args.small):
            write_day(gen, root, args.days + k, args.cells, 1)
            start = time.perf_counter()
            with Ledger.open(store) as led:
                summary = led.append()
                done = led.last_publish
            whole = time.perf_counter() - start
            assert summary.rows == args.cells and done is not None
            rows.append((whole, done.seconds))
        t_cp, _ = timed(lambda: plain_copy(layout.writer, root / "plain-copy"), repeat=3)
        (root / "plain-copy").unlink()
        whole = min(r[0] for r in rows)
        pub = min(r[1] for r in rows)
        print(table([
            (f"small append ({args.cells:,} rows) in all", whole, "open, append, publish, close"),
            ("  of which the publish", pub, f"{pub / whole:.0%} of the append"),
            ("(a) plain cp + fsync of the writer's copy", t_cp,
             f"{size / 2**20 / t_cp:,.0f} MiB/s"),
        ]))
        print(f"  publish / plain copy: {pub / t_cp:.2f}x; publish per GiB: "
              f"{pub / (size / 2**30):.2f} s")


if __name__ == "__main__":
    main()
