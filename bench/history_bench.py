"""Fits as history grows: 365 daily appends of 10,000 groups (about 11M rows in all).

Each day is one Parquet file of ``--groups`` x ``--per-day`` rows, written by DuckDB and
appended through the API (one batch per day). After days 30, 180 and 365 the bench times the
all-history fit ``fit_<name>`` (which reads the stored per-group sums) and, in the same run,
the full two-pass recompute ``fit_<name>_full`` over every row; it also prints the append
time per day and per new row. Run ``python bench/history_bench.py [--days 365 --groups 10000
--per-day 3]``; shrink with --days/--groups. Targets: the all-history fit flat in history (day
365 within 1.5x of day 30) and at least 50x faster than the full recompute at day 365; append
time proportional to the new rows, not to the history.
"""

from __future__ import annotations

import argparse
import datetime as dt
import tempfile
import time
from pathlib import Path

from common import table, timed

from trendledger import Ledger

SPEC = """\
[source]
files = "incoming/{day}/readings.parquet"
format = "parquet"
[source.columns]
unit = "VARCHAR"
t = "DOUBLE"
value = "DOUBLE"
[source.fields]
day = "DATE"
[[fit]]
name = "drift"
group = ["unit"]
x = "t"
y = "value"
"""
START = dt.date(2025, 1, 1)


def write_day(led: Ledger, root: Path, day: int, groups: int, per_day: int) -> Path:
    """One day's readings: every unit, ``per_day`` times, on its own noisy line."""
    folder = root / "incoming" / (START + dt.timedelta(days=day)).isoformat()
    folder.mkdir(parents=True)
    path = folder / "readings.parquet"
    # written by the store's own connection: the file is data, the store is not touched
    led.con.execute(
        f"""
        COPY (
            SELECT
                printf('u%05d', g) AS unit,
                {day} + (k + 0.5) / {per_day} AS t,
                100.0 + g % 7 + (1e-3 * (g % 13) - 5e-3) * ({day} + (k + 0.5) / {per_day})
                    + 0.01 * sin(g * 12.9898 + k * 78.233 + {day} * 37.719) AS value
            FROM range({groups}) AS a(g), range({per_day}) AS b(k)
        ) TO '{path}' (FORMAT parquet)
        """
    )
    return path


def materialise(led: Ledger, view: str) -> int:
    """Compute every column of every row of a view inside DuckDB (no Python conversion)."""
    led.con.execute(f'CREATE OR REPLACE TEMP TABLE bench_out AS SELECT * FROM "{view}"')
    row = led.con.execute("SELECT count(*) FROM bench_out").fetchone()
    return int(row[0]) if row else 0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--days", type=int, default=365)
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--per-day", type=int, default=3)
    ap.add_argument("--repeat", type=int, default=3, help="best of N for the fit timings")
    args = ap.parse_args()
    checkpoints = sorted({d for d in (30, 180, 365) if d <= args.days} | {args.days})
    rows_per_day = args.groups * args.per_day
    print(f"history: {args.days} daily appends x {rows_per_day:,} rows "
          f"({args.groups:,} groups x {args.per_day}) = {args.days * rows_per_day:,} rows")
    results: dict[int, tuple[float, float, float, float]] = {}
    with tempfile.TemporaryDirectory(prefix="tl-history-") as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        started = time.perf_counter()
        with Ledger.init(root / "spec.toml", root / "trendledger.duckdb") as led:
            appends: list[float] = []
            for day in range(args.days):
                path = write_day(led, root, day, args.groups, args.per_day)
                seconds, summary = timed(lambda p=path: led.append([str(p)]))
                assert summary.rows == rows_per_day, summary
                appends.append(seconds)
                if day + 1 in checkpoints:
                    t_fit, n_fit = timed(lambda: materialise(led, "fit_drift"), args.repeat)
                    t_full, n_full = timed(lambda: materialise(led, "fit_drift_full"))
                    assert n_fit == n_full == args.groups
                    recent = appends[-10:]
                    results[day + 1] = (t_fit, t_full, sum(recent) / len(recent),
                                        time.perf_counter() - started)
                    print(f"  day {day + 1}: fit {t_fit:.3f} s, full recompute {t_full:.3f} s, "
                          f"append {results[day + 1][2]:.3f} s/day")
            # one day four times as large: append time follows the new rows
            big = write_day(led, root, args.days, args.groups, 4 * args.per_day)
            t_big, _ = timed(lambda: led.append([str(big)]))
    rows = []
    for day, (t_fit, t_full, t_append, _) in results.items():
        rows.append((f"day {day}: fit_drift (stored sums)", t_fit,
                     f"{t_full / t_fit:,.0f}x faster than the full recompute"))
        rows.append((f"day {day}: fit_drift_full (two passes, all rows)", t_full,
                     f"{day * rows_per_day:,} rows"))
        rows.append((f"day {day}: append, mean of the last 10 days", t_append,
                     f"{t_append / rows_per_day * 1e6:.2f} us per new row"))
    rows.append(("append of a 4x day at the end", t_big,
                 f"{t_big / (4 * rows_per_day) * 1e6:.2f} us per new row"))
    print(table(rows))
    first, last = min(results), max(results)
    print(f"  fit at day {last} / day {first}: {results[last][0] / results[first][0]:.2f}x "
          "(target <= 1.5x)")
    print(f"  full recompute / fit at day {last}: {results[last][1] / results[last][0]:,.0f}x "
          "(target >= 50x)")
    print(f"  append at day {last} / day {first}: {results[last][2] / results[first][2]:.2f}x; "
          f"4x day / 1x day: {t_big / results[last][2]:.2f}x")
    print(f"  total bench time {time.perf_counter() - started:.0f} s")


if __name__ == "__main__":
    main()
