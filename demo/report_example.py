"""A reporting script as a lab engineer would write it.

Every Monday: the ten cells whose capacity falls fastest, with how sure we are
of each slope, written to a CSV for the weekly meeting.

    python demo/report_example.py demo/run/trendledger.duckdb weekly.csv
"""

from __future__ import annotations

import sys
from pathlib import Path

from trendledger import Ledger


def steepest(store: Path, limit: int = 10):
    """The ``limit`` steepest fades (most negative slopes) of fit 'fade', steepest first."""
    with Ledger.open(store, read_only=True) as led:
        table = led.fits("fade", where="status = 'ok'", sort="slope", limit=limit)
        latest = led.query("SELECT max(day) AS day FROM measurements")["day"].iloc[0]
    table = table[["cell", "n", "slope", "slope_lo", "slope_hi", "r2", "status"]].copy()
    # Ah per cycle is hard to read in a meeting; mAh per 100 cycles is not.
    for col in ("slope", "slope_lo", "slope_hi"):
        table[col.replace("slope", "mah_per_100")] = table[col] * 1000 * 100
    table.insert(0, "week_ending", latest)
    return table


def main() -> None:
    store = Path(sys.argv[1]) if len(sys.argv) > 1 else Path("demo/run/trendledger.duckdb")
    out = Path(sys.argv[2]) if len(sys.argv) > 2 else Path("weekly_steepest.csv")
    table = steepest(store)
    table.to_csv(out, index=False)
    print(f"wrote {len(table)} cells to {out}")
    print(table[["cell", "mah_per_100", "mah_per_100_lo", "mah_per_100_hi", "r2"]]
          .to_string(index=False, float_format=lambda v: f"{v:.3f}"))


if __name__ == "__main__":
    main()
