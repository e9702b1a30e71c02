"""Per-group fit speed: trendledger's views against DuckDB, pandas + numpy and statsmodels.

10M rows in 10,000 groups, appended to a store as Parquet files (one per day). Times, each
computing every output column of every group:

* ``fit_<name>`` (the stored per-group sums, kept up to date by every append),
* ``fit_<name>_full`` (the full two-pass recompute from every row),
* (a) a bare DuckDB ``regr_slope / regr_intercept / regr_r2 ... GROUP BY`` on the same table,
* (b) pandas ``groupby().apply(numpy.polyfit)``,
* (c) statsmodels ``OLS`` per group.

(b) and (c) run on a sample of groups (``--sample``, default 1,000) and are scaled to all
groups, which the output says; pass ``--sample 0`` for full runs. Run
``python bench/fit_bench.py [--rows 10_000_000 --groups 10_000]``; shrink with --rows.
Target: the full two-pass view within 2x of (a).
"""

from __future__ import annotations

import argparse
import datetime as dt
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
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
FILE_ROWS = 1_000_000


def write_files(led: Ledger, root: Path, rows: int, groups: int) -> list[Path]:
    """``rows`` readings spread evenly over ``groups`` units, in files of up to 1M rows."""
    paths = []
    for i, start in enumerate(range(0, rows, FILE_ROWS)):
        stop = min(rows, start + FILE_ROWS)
        folder = root / "incoming" / (START + dt.timedelta(days=i)).isoformat()
        folder.mkdir(parents=True)
        path = folder / "readings.parquet"
        led.con.execute(
            f"""
            COPY (
                SELECT
                    printf('u%05d', r % {groups}) AS unit,
                    r // {groups} * 0.01 AS t,
                    100.0 + r % 7 + (1e-3 * (r % 13) - 5e-3) * (r // {groups} * 0.01)
                        + 0.01 * sin(r * 12.9898) AS value
                FROM range({start}, {stop}) AS a(r)
            ) TO '{path}' (FORMAT parquet)
            """
        )
        paths.append(path)
    return paths


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


def polyfit_groups(frame: pd.DataFrame) -> pd.DataFrame:
    def one(g: pd.DataFrame) -> pd.Series:
        slope, intercept = np.polyfit(g["t"].to_numpy(), g["value"].to_numpy(), 1)
        return pd.Series({"slope": slope, "intercept": intercept})

    return frame.groupby("unit")[["t", "value"]].apply(one)


def statsmodels_groups(frame: pd.DataFrame) -> list[object]:
    import statsmodels.api as sm

    out = []
    for _, g in frame.groupby("unit"):
        fit = sm.OLS(g["value"].to_numpy(), sm.add_constant(g["t"].to_numpy())).fit()
        out.append((fit.params, fit.bse, fit.rsquared, fit.pvalues, fit.conf_int()))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--sample", type=int, default=1_000,
                    help="groups timed for pandas and statsmodels, scaled up (0: all groups)")
    ap.add_argument("--repeat", type=int, default=3, help="best of N for the DuckDB timings")
    args = ap.parse_args()
    print(f"fit: {args.rows:,} rows in {args.groups:,} groups")
    with tempfile.TemporaryDirectory(prefix="tl-fit-") as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        with Ledger.init(root / "spec.toml", root / "trendledger.duckdb") as led:
            paths = write_files(led, root, args.rows, args.groups)
            t_append, summary = timed(lambda: led.append([str(p) for p in paths]))
            assert summary.rows == args.rows
            t_fit, n_fit = timed(lambda: materialise(led, "SELECT * FROM fit_drift"),
                                 args.repeat)
            t_moments, _ = timed(lambda: materialise(led, "SELECT * FROM fit_drift_moments"),
                                 args.repeat)
            t_full, n_full = timed(lambda: materialise(led, "SELECT * FROM fit_drift_full"),
                                   args.repeat)
            t_full_sums, _ = timed(
                lambda: materialise(led, "SELECT * FROM fit_drift_full_moments"), args.repeat)
            t_bare, n_bare = timed(lambda: materialise(led, BARE), args.repeat)
            assert n_fit == n_full == n_bare == args.groups

            sample = args.sample if 0 < args.sample < args.groups else args.groups
            scale = args.groups / sample
            chosen = led.con.execute(
                "SELECT unit, t, value FROM measurements WHERE unit IN "
                "(SELECT DISTINCT unit FROM measurements ORDER BY unit LIMIT ?)", [sample]
            ).df()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                t_pandas, _ = timed(lambda: polyfit_groups(chosen))
                start = time.perf_counter()
                statsmodels_groups(chosen)
                t_sm = time.perf_counter() - start
    note = "" if scale == 1 else f", {sample:,} groups timed, x{scale:g}"
    print(table([
        ("fit_drift (stored sums, every column)", t_fit, f"{t_full / t_fit:,.0f}x faster "
         "than the full recompute"),
        ("  of which fit_drift_moments (the sums)", t_moments, ""),
        ("fit_drift_full (two passes over every row)", t_full, f"{t_full / t_bare:.2f}x (a)"),
        ("  of which fit_drift_full_moments (the sums)", t_full_sums,
         f"{t_full_sums / t_bare:.2f}x (a); the rest is the Student t quantiles and p-values"),
        ("(a) DuckDB regr_slope/intercept/r2 GROUP BY", t_bare, "slope, intercept, r2 only"),
        ("(b) pandas groupby().apply(numpy.polyfit)", t_pandas * scale,
         f"slope, intercept only{note}"),
        ("(c) statsmodels OLS per group", t_sm * scale, f"all statistics{note}"),
        ("append of the rows (one batch, sums built)", t_append, f"{args.rows:,} rows"),
    ]))
    print(f"  full two-pass view / (a): {t_full / t_bare:.2f}x (target <= 2x); its two-pass "
          f"sums alone / (a): {t_full_sums / t_bare:.2f}x")
    print(f"  stored-sums view / (a): {t_fit / t_bare:.2f}x; full view / stored-sums view: "
          f"{t_full / t_fit:.0f}x")
    print(f"  (b) / full view: {t_pandas * scale / t_full:.1f}x; (c) / full view: "
          f"{t_sm * scale / t_full:.1f}x")


if __name__ == "__main__":
    main()
