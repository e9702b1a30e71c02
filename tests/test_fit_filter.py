"""A fit's row filter (spec: where = "..."): rows of another kind stay in the store and out of
the fit. Checked against statsmodels OLS on the kept rows, selected in Python; the stored sums
against the full recompute from every row after appends and a retract."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from trendledger import Ledger
from trendledger.errors import SpecError

from .conftest import Lab

SPEC_FILTER = """\
[source]
files = "in/{day}/{cell}.csv"

[source.columns]
cycle = "INTEGER"
kind = "VARCHAR"
capacity = "DOUBLE"

[source.fields]
day = "DATE"
cell = "VARCHAR"

[[fit]]
name = "standard"
group = ["cell"]
x = "cycle"
y = "capacity"
where = "kind = 'standard'"

[[fit]]
name = "log_late"
group = ["cell"]
x = "cycle"
y = "ln(capacity)"
where = "kind = 'standard' AND cycle >= 10"
"""
DAYS = ("2026-03-02", "2026-03-03", "2026-03-04")


def _rows(seed: int) -> dict[str, dict[str, list[tuple[int, str, float]]]]:
    """Per day and cell: standard cycles falling slowly, a capacity check every 10th cycle
    far above the line (it would be an outlier in the fit), a zero capacity now and then."""
    rng = np.random.default_rng(seed)
    out: dict[str, dict[str, list[tuple[int, str, float]]]] = {}
    for d, day in enumerate(DAYS):
        out[day] = {}
        for c in range(12):
            rows = []
            for cycle in range(d * 20 + 1, d * 20 + 21):
                kind = "check" if cycle % 10 == 0 else "standard"
                cap = 3.0 - 0.004 * cycle + rng.normal(0, 0.01)
                if kind == "check":
                    cap += 0.3
                if cycle % 13 == 0 and c % 2 == 0:
                    cap = 0.0  # outside ln: counted in n_outside of log_late only if kept
                rows.append((cycle, kind, cap))
            out[day][f"c{c:02d}"] = rows
    return out


ROWS = _rows(1605)


def _expected(cells: dict[str, list[tuple[int, str, float]]], name: str):
    """statsmodels OLS per cell on the rows the fit keeps (selected and transformed here)."""
    out = {}
    for cell, rows in cells.items():
        keep = [(c, v) for c, k, v in rows if k == "standard"
                and (name == "standard" or c >= 10)]
        outside = sum(1 for _, v in keep if name == "log_late" and v <= 0)
        keep = [(c, v) for c, v in keep if name == "standard" or v > 0]
        x = np.array([c for c, _ in keep], float)
        y = np.array([v for _, v in keep], float)
        if name == "log_late":
            y = np.log(y)
        out[cell] = (sm.OLS(y, sm.add_constant(x)).fit(), len(keep), outside)
    return out


def _check(led: Ledger, cells: dict[str, list[tuple[int, str, float]]]) -> None:
    for name in ("standard", "log_late"):
        fit = led.fits(name).set_index("cell")
        full = led.fits(name, view="full").set_index("cell").loc[fit.index]
        # the stored sums give what a fresh recompute from every row gives
        pd.testing.assert_frame_equal(fit, full, rtol=1e-9, check_dtype=False)
        for cell, (res, n, outside) in _expected(cells, name).items():
            row = fit.loc[cell]
            assert row["n"] == n and row["n_outside"] == outside, (name, cell)
            # statsmodels OLS on the kept rows
            assert row["slope"] == pytest.approx(res.params[1], rel=1e-9)
            assert row["intercept"] == pytest.approx(res.params[0], rel=1e-9)
            assert row["resid_sd"] == pytest.approx(math.sqrt(res.scale), rel=1e-8)
            assert row["slope_se"] == pytest.approx(res.bse[1], rel=1e-8)
            assert row["r2"] == pytest.approx(res.rsquared, rel=1e-9)


def _write(lab: Lab, day: str) -> None:
    for cell, rows in ROWS[day].items():
        lab.write(f"in/{day}/{cell}.csv", "cycle,kind,capacity\n"
                  + "".join(f"{c},{k},{v!r}\n" for c, k, v in rows))


def test_filtered_fit_follows_appends_and_a_retract(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", SPEC_FILTER)
    _write(lab, DAYS[0])
    with lab.init() as led:
        led.append()
    for day in DAYS[1:]:
        _write(lab, day)
        with lab.open() as led:
            led.append()
    cells = {c: [r for day in DAYS for r in ROWS[day][c]] for c in ROWS[DAYS[0]]}
    with lab.open() as led:
        _check(led, cells)
        # the capacity checks stay in the store
        kinds = dict(led.con.execute(
            "SELECT kind, count(*) FROM measurements GROUP BY kind").fetchall())
        assert kinds["check"] == 6 * 12
        # and out of the points view of a filtered fit
        points = led.fits("standard", view="points")
        assert len(points) == sum(1 for rows in cells.values() for r in rows if r[1] == "standard")
        led.retract(why="calibration drift", file=f"in/{DAYS[1]}/c03.csv")
    cells["c03"] = [r for day in (DAYS[0], DAYS[2]) for r in ROWS[day]["c03"]]
    with lab.open(read_only=True) as led:
        _check(led, cells)


@pytest.mark.parametrize(("condition", "says"), [
    ("ln(capacity) > 0", "function"),
    ("kinds = 'standard'", "kinds"),
    ("kind = 'standard'; DROP TABLE measurements", ";"),
    ("(SELECT 1) = 1", "refused"),
])
def test_refused_filters(tmp_path: Path, condition: str, says: str) -> None:
    spec = SPEC_FILTER.replace("where = \"kind = 'standard'\"\n",
                               "where = '''" + condition + "'''\n", 1)
    lab = Lab(tmp_path / "lab", spec)
    with pytest.raises(SpecError) as err:
        lab.init()
    text = str(err.value)
    assert "[[fit]] standard: where = " in text and says.lower() in text.lower()
    assert "\n" not in text
    assert not lab.store.exists()
