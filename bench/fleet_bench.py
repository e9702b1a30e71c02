"""Fleet view speed: each unit against its fleet, from the stored per-unit sums.

10,000 units (``--units``) with 20 readings each, in fleets of ``--fleet-size`` units (100 by
default; ``--fleet-size 0`` makes one fleet of every unit), appended to a store in one batch.
Times, each computing every output column of every row inside DuckDB:

* ``fit_<name>`` (the stored per-unit fit: the baseline),
* ``fit_<name>_fleet`` (one row per fleet: fixed, DerSimonian-Laird and Paule-Mandel random
  effects, Cochran's Q, I^2, the poolability tests and the pooled line),
* ``fit_<name>_fleet_units`` (one row per unit: leave-one-out fleet slope and tau, z, p,
  empirical-Bayes slope),
* (a) pandas over the stored fit + statsmodels ``combine_effects`` per fleet, methods "dl"
  and "pm" (the fleet view's meta-analysis columns only).

Run ``python bench/fleet_bench.py [--units 10000 --fleet-size 100]``. Target: both views
within 10x of reading the stored fit view.
"""

from __future__ import annotations

import argparse
import tempfile
import warnings
from pathlib import Path

from common import table, timed

from trendledger import Ledger

SPEC = """\
[source]
files = "incoming/{day}/readings.parquet"
format = "parquet"
[source.columns]
lot = "INTEGER"
unit = "INTEGER"
t = "DOUBLE"
value = "DOUBLE"
[source.fields]
day = "DATE"
[[fit]]
name = "drift"
group = ["lot", "unit"]
fleet = ["lot"]
x = "t"
y = "value"
limit = 90.0
"""
READINGS = 20


def write_file(led: Ledger, root: Path, units: int, fleet_size: int) -> Path:
    """Every unit's readings in one Parquet file: slopes spread between units, noise within."""
    folder = root / "incoming" / "2025-01-01"
    folder.mkdir(parents=True)
    path = folder / "readings.parquet"
    size = fleet_size if fleet_size > 0 else units
    led.con.execute(
        f"""
        COPY (
            SELECT
                u // {size} AS lot,
                u AS unit,
                k * 1.0 AS t,
                100.0 - (0.1 + 0.01 * sin(u * 7.77)) * k + 0.05 * sin((u * 31 + k) * 12.9898)
                    AS value
            FROM range({units}) AS a(u), range({READINGS}) AS b(k)
        ) TO '{path}' (FORMAT parquet)
        """
    )
    return path


def materialise(led: Ledger, view: str) -> int:
    """Compute every column of every row inside DuckDB (no conversion to Python)."""
    led.con.execute(f'CREATE OR REPLACE TEMP TABLE bench_out AS SELECT * FROM "{view}"')
    row = led.con.execute("SELECT count(*) FROM bench_out").fetchone()
    return int(row[0]) if row else 0


def statsmodels_fleets(led: Ledger) -> int:
    from statsmodels.stats.meta_analysis import combine_effects

    fits = led.con.execute("SELECT lot, slope, slope_se FROM fit_drift").df()
    done = 0
    for _, g in fits.groupby("lot"):
        b, v = g["slope"].to_numpy(), g["slope_se"].to_numpy() ** 2
        combine_effects(b, v, method_re="dl")
        combine_effects(b, v, method_re="pm")
        done += 1
    return done


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--units", type=int, default=10_000)
    ap.add_argument("--fleet-size", type=int, default=100, help="units per fleet (0: one fleet)")
    ap.add_argument("--repeat", type=int, default=3, help="best of N for the DuckDB timings")
    args = ap.parse_args()
    fleets = -(-args.units // args.fleet_size) if args.fleet_size > 0 else 1
    print(f"fleet: {args.units:,} units x {READINGS} readings in {fleets:,} fleet(s)")
    with tempfile.TemporaryDirectory(prefix="tl-fleet-") as tmp:
        root = Path(tmp)
        (root / "spec.toml").write_text(SPEC)
        with Ledger.init(root / "spec.toml", root / "trendledger.duckdb") as led:
            path = write_file(led, root, args.units, args.fleet_size)
            led.append([str(path)])
            t_fit, n_fit = timed(lambda: materialise(led, "fit_drift"), args.repeat)
            t_fleet, n_fleet = timed(lambda: materialise(led, "fit_drift_fleet"), args.repeat)
            t_units, n_units = timed(lambda: materialise(led, "fit_drift_fleet_units"),
                                     args.repeat)
            assert n_fit == n_units == args.units and n_fleet == fleets
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                t_sm, _ = timed(lambda: statsmodels_fleets(led))
    print(table([
        ("fit_drift (stored per-unit fit)", t_fit, "baseline"),
        ("fit_drift_fleet", t_fleet, f"{t_fleet / t_fit:.1f}x the fit view"),
        ("fit_drift_fleet_units", t_units, f"{t_units / t_fit:.1f}x the fit view"),
        ("(a) pandas + statsmodels combine_effects", t_sm,
         f"dl and pm per fleet; {t_sm / t_fleet:.1f}x the fleet view"),
    ]))
    print(f"  fleet view / fit view: {t_fleet / t_fit:.1f}x, units view / fit view: "
          f"{t_units / t_fit:.1f}x (target <= 10x)")


if __name__ == "__main__":
    main()
