"""Computed columns ([source.computed]): named expressions of declared columns that fits,
forms and filters read. Checked against statsmodels OLS on the same values computed in Python
with numpy; a division by zero must give NULL (the row counts nowhere), never an error, NaN or
infinity."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm

from trendledger.errors import SpecError

from .conftest import Lab

HEAD = """\
[source]
files = "in/{day}/{cell}.csv"

[source.columns]
cycle = "INTEGER"
charge_ah = "DOUBLE"
discharge_ah = "DOUBLE"
note = "VARCHAR"

[source.computed]
efficiency = "discharge_ah / charge_ah"
loss = "ln(charge_ah / discharge_ah) * 1000"
spread = "sqrt(abs(charge_ah - discharge_ah)) + exp(cycle / 1000)"

[source.fields]
day = "DATE"
cell = "VARCHAR"
"""
FITS = """
[[fit]]
name = "ce"
group = ["cell"]
x = "cycle"
y = "efficiency"

[[fit]]
name = "loss_log"
group = ["cell"]
x = "sqrt(cycle)"
y = "loss"
where = "efficiency < 1 AND cycle > 2"

[[fit]]
name = "spread"
group = ["cell"]
x = "cycle"
y = "spread"
"""


def _data() -> dict[str, list[tuple[int, float, float]]]:
    rng = np.random.default_rng(3)
    out = {}
    for c in range(30):
        rows = []
        for cycle in range(1, 26):
            charge = 3.0 + rng.normal(0, 0.01)
            discharge = charge * (0.999 - 0.0002 * cycle + rng.normal(0, 0.0003))
            if cycle % 9 == 0:
                charge = 0.0  # a division by zero: NULL efficiency, the row counts nowhere
            rows.append((cycle, charge, discharge))
        out[f"c{c:02d}"] = rows
    return out


DATA = _data()


def _python(name: str, rows: list[tuple[int, float, float]]) -> tuple[np.ndarray, np.ndarray]:
    """The fit's x and y computed with numpy on the rows it keeps."""
    cyc = np.array([r[0] for r in rows], float)
    ch = np.array([r[1] for r in rows], float)
    dis = np.array([r[2] for r in rows], float)
    if name == "spread":  # no division: every row counts
        return cyc, np.sqrt(np.abs(ch - dis)) + np.exp(cyc / 1000)
    ok = ch != 0
    cyc, ch, dis = cyc[ok], ch[ok], dis[ok]
    if name == "ce":
        return cyc, dis / ch
    keep = (dis / ch < 1) & (cyc > 2)  # loss_log's filter
    return np.sqrt(cyc[keep]), np.log(ch[keep] / dis[keep]) * 1000


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory) -> Lab:
    lab = Lab(tmp_path_factory.mktemp("computed") / "lab", HEAD + FITS)
    for cell, rows in DATA.items():
        lab.write(f"in/2026-03-02/{cell}.csv", "cycle,charge_ah,discharge_ah,note\n" + "".join(
            f"{a},{b!r},{c!r},x\n" for a, b, c in rows))
    with lab.init() as led:
        led.append()
    return lab


@pytest.mark.parametrize("name", ["ce", "loss_log", "spread"])
def test_computed_fits_against_statsmodels(lab: Lab, name: str) -> None:
    with lab.open(read_only=True) as led:
        fit = led.fits(name).set_index("cell")
        points = led.fits(name, view="points")
    for cell, rows in DATA.items():
        x, y = _python(name, rows)
        res = sm.OLS(y, sm.add_constant(x)).fit()  # statsmodels OLS on numpy's values
        row = fit.loc[cell]
        assert row["n"] == x.size
        assert row["slope"] == pytest.approx(res.params[1], rel=1e-8)
        assert row["intercept"] == pytest.approx(res.params[0], rel=1e-8)
        assert row["resid_sd"] == pytest.approx(math.sqrt(res.scale), rel=1e-7)
        assert row["r2"] == pytest.approx(res.rsquared, rel=1e-8, abs=1e-12)
    # a division by zero is NULL in the points view: no NaN, no infinity
    values = points["y_value"].astype(float)
    assert not np.isinf(values).any()
    zero = points["x_value"].astype(float) % 9 == 0
    if name == "ce":
        assert values[zero].isna().all() and values[~zero].notna().all()


@pytest.mark.parametrize(("expression", "says"), [
    ("discharge_ah || 'x'", "only columns, numbers"),
    ("random()", "only columns, numbers"),
    ("cos(charge_ah)", "only columns, numbers"),
    ("(SELECT 1)", "only columns, numbers"),
    ("ln(charge_ah, 2)", "only columns, numbers"),
    ("charges_ah / 2", "'charges_ah' is not a declared column"),
    ("note * 2", "'note' has type VARCHAR"),
])
def test_refused_expressions(tmp_path: Path, expression: str, says: str) -> None:
    spec = HEAD.replace('spread = "sqrt(abs(charge_ah - discharge_ah)) + exp(cycle / 1000)"',
                        f"bad = {expression!r}".replace("'", '"', 1)[:-1] + '"'
                        if "'" not in expression else f'bad = "{expression}"')
    lab = Lab(tmp_path / "lab", spec + FITS.split("[[fit]]\nname = \"spread\"")[0])
    with pytest.raises(SpecError) as err:
        lab.init()
    text = str(err.value)
    assert "[source.computed] bad" in text and says in text and "\n" not in text
    assert not lab.store.exists()


def test_group_cannot_be_computed(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", HEAD + FITS.replace('group = ["cell"]', 'group = ["efficiency"]',
                                                    1))
    with pytest.raises(SpecError, match="group = 'efficiency' is a computed column"):
        lab.init()
