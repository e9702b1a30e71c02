"""The windows view of a fit through the origin, against statsmodels.

sql/views/windows.sql is composed of the same pieces as the fit view (the sums fragment, the
line statistics fragment and the slot __line__), so a fit with ``through_origin = true`` and a
window gets it with no twin file. Each window's row is checked against statsmodels OLS without
a constant (OLS(y, x)) on that window's rows, and its sums against numpy.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from trendledger import Ledger

from .conftest import Lab

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
name = "span"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
through_origin = true
window_x = 25
level = 0.9

[[fit]]
name = "weekly"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
through_origin = true
window = "week"
"""

RTOL = 1e-9


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory) -> tuple[Lab, dict[str, list[tuple[int, float]]]]:
    rng = np.random.default_rng(7)
    series: dict[str, list[tuple[int, float]]] = {}
    for k, gain in enumerate((0.012, 0.02, -0.004)):
        xs = np.arange(1, 81)
        ys = gain * xs + rng.normal(0.0, 0.01 + 0.01 * k, xs.size)
        series[f"c{k}"] = [(int(x), float(y)) for x, y in zip(xs, ys, strict=True)]
    # a cell whose readings lie exactly on a line through the origin
    series["exact"] = [(x, 0.25 * x) for x in range(1, 41)]
    # a cell whose latest window holds one reading
    series["late"] = [(x, 0.01 * x + 0.001 * (x % 3)) for x in range(1, 51)]
    lab = Lab(tmp_path_factory.mktemp("origin_windows"), SPEC)
    lab.series(series, per_day=5)
    lab.init().close()
    with lab.open() as led:
        led.append(command="test")
    return lab, series


def _window_rows(series: list[tuple[int, float]], lo: float, hi: float) -> tuple[np.ndarray,
                                                                                 np.ndarray]:
    x = np.array([r[0] for r in series if lo <= r[0] < hi], float)
    y = np.array([r[1] for r in series if lo <= r[0] < hi], float)
    return x, y


def test_span_windows_match_statsmodels_without_a_constant(lab) -> None:
    lab_, series = lab
    with Ledger.open(lab_.store, read_only=True) as led:
        got = led.fits("span", view="windows")
    # spans [0, 25) ... [75, 100): cycles 1 to 80 in four windows per noisy cell, the exact
    # cell's 1 to 40 in two, the late cell's 1 to 50 in three, the last with cycle 50 alone
    assert len(got) == 4 * 3 + 2 + 3
    checked = 0
    for _, row in got.iterrows():
        x, y = _window_rows(series[row["cell"]], row["window_start"], row["window_end"])
        assert row["n"] == x.size and row["x_min"] == x.min() and row["x_max"] == x.max()
        assert pd.isna(row["intercept"]) and pd.isna(row["intercept_se"])
        # the window's sums about the origin (numpy)
        assert math.isclose(row["sxx"], float(x @ x), rel_tol=RTOL)
        assert math.isclose(row["sxy"], float(x @ y), rel_tol=RTOL)
        assert math.isclose(row["syy"], float(y @ y), rel_tol=RTOL)
        if x.size == 1:
            # one pair: its line through the origin, nothing that needs a residual
            assert row["status"] == "too_few_points" and pd.isna(row["slope_se"])
            assert math.isclose(row["slope"], y[0] / x[0], rel_tol=RTOL)
            continue
        if row["cell"] == "exact":
            assert row["status"] == "perfect_fit" and row["slope"] == pytest.approx(0.25, rel=1e-15)
            assert row["resid_sd"] == 0.0 and row["r2"] == 1.0
            continue
        # statsmodels OLS(y, x): no constant, n - 1 residual degrees of freedom, uncentred r2
        ols = sm.OLS(y, x[:, None]).fit()
        assert row["status"] == "ok"
        for col, ref in (("slope", ols.params[0]), ("slope_se", ols.bse[0]),
                         ("slope_t", ols.tvalues[0]), ("slope_p", ols.pvalues[0]),
                         ("r2", ols.rsquared), ("r2_adj", ols.rsquared_adj),
                         ("resid_sd", math.sqrt(ols.scale)), ("rss", ols.ssr)):
            assert math.isclose(row[col], ref, rel_tol=1e-7), (row["cell"], col, row[col], ref)
        lo, hi = ols.conf_int(alpha=0.1)[0]
        assert math.isclose(row["slope_lo"], lo, rel_tol=1e-7)
        assert math.isclose(row["slope_hi"], hi, rel_tol=1e-7)
        checked += 1
    assert checked == 4 * 3 + 2


def test_calendar_windows_of_an_origin_fit_cover_every_row(lab) -> None:
    lab_, series = lab
    with Ledger.open(lab_.store, read_only=True) as led:
        got = led.fits("weekly", view="windows")
        whole = led.fits("weekly").set_index("cell")
    # every counted pair lies in exactly one window; the windows' sums about the origin add up
    # to the whole fit's (sxx = sum(x^2) over all rows)
    for cell, rows in series.items():
        part = got[got["cell"] == cell]
        assert part["n"].sum() == len(rows) == whole.loc[cell, "n"]
        x = np.array([r[0] for r in rows], float)
        assert math.isclose(part["sxx"].sum(), float(x @ x), rel_tol=RTOL)
        assert (part["window_end"] > part["window_start"]).all()


def test_change_view_of_an_origin_fit_matches_statsmodels(lab) -> None:
    # the latest window's slope against one line through the origin over every earlier row,
    # each from statsmodels OLS(y, x) without a constant; Welch's t with the
    # Welch-Satterthwaite degrees of freedom (scipy.stats.t for the p-value)
    from scipy import stats

    lab_, series = lab
    with Ledger.open(lab_.store, read_only=True) as led:
        change = led.fits("span", view="change").set_index("cell")
        windows = led.fits("span", view="windows")
    for cell, rows in series.items():
        row = change.loc[cell]
        latest = windows[windows["cell"] == cell]["window_start"].max()
        assert row["window_start"] == latest
        x = np.array([r[0] for r in rows], float)
        y = np.array([r[1] for r in rows], float)
        before = x < latest
        assert row["n_before"] == before.sum() and row["n_recent"] == (~before).sum()
        if (~before).sum() < 2:
            assert row["note"] == "too few points recently"
            continue
        ols_b = sm.OLS(y[before], x[before][:, None]).fit()
        ols_r = sm.OLS(y[~before], x[~before][:, None]).fit()
        assert math.isclose(row["slope_before"], ols_b.params[0], rel_tol=1e-9)
        assert math.isclose(row["slope_recent"], ols_r.params[0], rel_tol=1e-9)
        if cell == "exact":
            # no residual on either side (statsmodels leaves rounding of about 1e-17)
            assert row["slope_before_se"] == 0.0 and ols_b.bse[0] < 1e-15
            assert row["note"] == "both lines fit exactly"
            continue
        assert math.isclose(row["slope_before_se"], ols_b.bse[0], rel_tol=1e-7)
        vr, vb = ols_r.bse[0] ** 2, ols_b.bse[0] ** 2
        df = (vr + vb) ** 2 / (vr**2 / ols_r.df_resid + vb**2 / ols_b.df_resid)
        t = (ols_r.params[0] - ols_b.params[0]) / math.sqrt(vr + vb)
        assert pd.isna(row["note"])
        assert math.isclose(row["difference_t"], t, rel_tol=1e-7)
        assert math.isclose(row["difference_df"], df, rel_tol=1e-7)
        assert math.isclose(row["difference_p"], 2 * stats.t.sf(abs(t), df), rel_tol=1e-6)
