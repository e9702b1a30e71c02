"""Bend search speed: the bend views against the full two-pass fit and a bare regr_* GROUP BY.

10M rows in 10,000 groups (every tenth group bends two thirds of the way), appended as Parquet
files. Times, each computing every column of every group inside DuckDB:

* ``fit_<name>_bend`` for a joined and a free fit (the bend search, all rounds, the current
  segment's line),
* ``fit_<name>_full`` (the full two-pass fit over every row),
* (a) a bare DuckDB ``regr_slope / regr_intercept / regr_r2 ... GROUP BY``,
* upkeep: a one-day append (a few rows per group, every group touched) against reading the bend
  view after it (the view is computed when read: nothing is stored for it).

Run ``python bench/bend_bench.py [--rows 10_000_000 --groups 10_000]``; shrink with --rows.
Target: the bend view within 4x of the full two-pass fit.
"""

from __future__ import annotations

import argparse
import datetime as dt
import tempfile
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
name = "wear"
group = ["unit"]
x = "t"
y = "value"
bend = "joined"
[[fit]]
name = "step"
group = ["unit"]
x = "t"
y = "value"
bend = "free"
"""
START = dt.date(2025, 1, 1)
FILE_ROWS = 1_000_000


def write_file(led: Ledger, root: Path, day: int, start: int, stop: int, groups: int,
               per_group: int) -> Path:
    folder = root / "incoming" / (START + dt.timedelta(days=day)).isoformat()
    folder.mkdir(parents=True)
    path = folder / "readings.parquet"
    knee = 0.667 * per_group * 0.01
    led.con.execute(
        f"""
        COPY (
            SELECT
                printf('u%05d', r % {groups}) AS unit,
                r // {groups} * 0.01 AS t,
                100.0 - 0.5 * (r // {groups} * 0.01)
                    - CASE WHEN r % {groups} % 10 = 0
                           THEN 4.0 * greatest(r // {groups} * 0.01 - {knee}, 0) ELSE 0 END
                    + 0.05 * sin(r * 12.9898) AS value
            FROM range({start}, {stop}) AS a(r)
        ) TO '{path}' (FORMAT parquet)
        """
    )
    return path


def materialise(led: Ledger, sql: str) -> int:
    """Compute every column of every row inside DuckDB (no conversion to Python)."""
    led.con.execute(f"CREATE OR REPLACE TEMP TABLE bench_out AS {sql}")
    row = led.con.execute("SELECT count(*) FROM bench_out").fetchone()
    return int(row[0]) if row else 0


BARE = """
SELECT unit, count(*) AS n, regr_slope(value, t) AS slope, regr_intercept(value, t) AS intercept,
       regr_r2(value, t) AS r2
FROM measurements GROUP BY unit
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=2, help="best of N for the DuckDB timings")
    args = ap.parse_args()
    per_group = args.rows // args.groups
    print(f"bend: {args.rows:,} rows in {args.groups:,} groups")
    with tempfile.TemporaryDirectory(prefix="tl-bend-") as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        with Ledger.init(root / "spec.toml", root / "trendledger.duckdb") as led:
            paths = [write_file(led, root, i, s, min(args.rows, s + FILE_ROWS), args.groups,
                                per_group)
                     for i, s in enumerate(range(0, args.rows, FILE_ROWS))]
            led.append([str(p) for p in paths])
            t_joined, n_joined = timed(lambda: materialise(led, "SELECT * FROM fit_wear_bend"),
                                       args.repeat)
            t_free, n_free = timed(lambda: materialise(led, "SELECT * FROM fit_step_bend"),
                                   args.repeat)
            t_full, n_full = timed(lambda: materialise(led, "SELECT * FROM fit_wear_full"),
                                   args.repeat)
            t_bare, n_bare = timed(lambda: materialise(led, BARE), args.repeat)
            assert n_joined == n_free == n_full == n_bare == args.groups
            bent = led.con.execute("SELECT count(*) FROM bench_out").fetchone()
            found = led.con.execute(
                "SELECT count(*) FILTER (WHERE bends > 0) FROM fit_wear_bend").fetchone()
            # a one-day append: 4 rows per group, every group touched
            day = write_file(led, root, len(paths), args.rows, args.rows + 4 * args.groups,
                             args.groups, per_group)
            t_append, _ = timed(lambda: led.append([str(day)]))
            t_after, _ = timed(lambda: materialise(led, "SELECT * FROM fit_wear_bend"))
    assert bent is not None and found is not None
    print(table([
        ("fit_wear_bend (joined: search, test, rounds, line)", t_joined,
         f"{t_joined / t_full:.2f}x full, {t_joined / t_bare:.1f}x (a); "
         f"{found[0]:,} groups bent"),
        ("fit_step_bend (free)", t_free,
         f"{t_free / t_full:.2f}x full, {t_free / t_bare:.1f}x (a)"),
        ("fit_wear_full (two passes over every row)", t_full, f"{t_full / t_bare:.2f}x (a)"),
        ("(a) DuckDB regr_slope/intercept/r2 GROUP BY", t_bare, "slope, intercept, r2 only"),
        ("one-day append (4 rows per group)", t_append, ""),
        ("fit_wear_bend read after it", t_after, f"{t_after / t_append:.1f}x the append"),
    ]))
    print(f"  joined bend / full fit: {t_joined / t_full:.2f}x, free bend / full fit: "
          f"{t_free / t_full:.2f}x (target <= 4x); bend after a day / append: "
          f"{t_after / t_append:.1f}x (target <= 3x)")


if __name__ == "__main__":
    main()
