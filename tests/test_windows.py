"""Trends over time: window fits (windows.sql, with a window key part), the slope change of the
latest window (change.sql) and the Chow break test (break.sql, ``fits --break-at``).

One store from real files: five weeks of four cycles a day for a few cells, read through the
API and the CLI. References: numpy.polyfit on the same slices for the window fits, statsmodels
OLS fits of the two slices and the Welch-Satterthwaite formula written out for the change, and
statsmodels' restricted/unrestricted F test (OLSResults.compare_f_test) for the break.
"""

from __future__ import annotations

import math
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from trendledger import Ledger, QueryRefused

from .conftest import SPEC, Lab
from .test_cli import tl

START = date(2026, 3, 2)  # a Monday: weeks start on Mondays
DAYS = 35
WIDTH = 40.0
SPAN = """
[[fit]]
name = "span"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
window_x = 40
"""
SPEC_WINDOWS = SPEC + 'window = "week"\n' + SPAN
RTOL = 1e-9
T_RTOL = 1e-8


def _rows() -> pd.DataFrame:
    """cell, day, cycle, capacity; four cycles a day, the cycle counter runs across days."""
    rng = np.random.default_rng(7)
    out = []
    for cell, days in (("s1", range(DAYS)), ("s2", range(DAYS)), ("knee", range(DAYS)),
                       ("late", [*range(28), 28]), ("new", range(28, DAYS))):
        slope = {"s1": -0.001, "s2": -0.0015}.get(cell, -0.0012)
        for d in days:
            for k in range(4 if not (cell == "late" and d == 28) else 2):
                x = d * 4 + k + 1
                y = 3.0 + slope * x + rng.normal(0, 0.002)
                if cell == "knee" and d >= 28:
                    y -= 0.005 * (x - 112)  # six times faster in the last week
                out.append((cell, START + timedelta(days=d), x, round(float(y), 6)))
    return pd.DataFrame(out, columns=["cell", "day", "cycle", "capacity_ah"])


ROWS = _rows()


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("windows") / "lab", SPEC_WINDOWS)
    for (cell, day), rows in ROWS.groupby(["cell", "day"]):
        text = "cycle,capacity_ah\n" + "".join(
            f"{c},{v!r}\n" for c, v in zip(rows["cycle"], rows["capacity_ah"], strict=True))
        lab.write(f"incoming/{day.isoformat()}/{cell}.csv", text)
    with lab.init() as led:
        led.append()
    return lab.store


def _read(store: Path, fit: str, view: str) -> pd.DataFrame:
    with Ledger.open(store, read_only=True) as led:
        return led.fits(fit, view=view)


def _line(x: np.ndarray, y: np.ndarray, level: float = 0.95) -> dict[str, float]:
    """numpy.polyfit with its unscaled covariance, scaled by rss / (n - 2) here."""
    (slope, intercept), cov = np.polyfit(x, y, 1, cov="unscaled")
    resid = y - (intercept + slope * x)
    n = len(x)
    rss = float(resid @ resid)
    syy = float(((y - y.mean()) ** 2).sum())
    se = math.sqrt(rss / (n - 2) * cov[0, 0])
    t = stats.t.ppf(1 - (1 - level) / 2, n - 2)  # scipy Student t quantile
    return {"slope": slope, "intercept": intercept, "r2": 1 - rss / syy,
            "resid_sd": math.sqrt(rss / (n - 2)), "slope_se": se,
            "slope_lo": slope - t * se, "slope_hi": slope + t * se,
            "slope_p": 2 * stats.t.sf(abs(slope / se), n - 2)}


# --- window fits --------------------------------------------------------------------------


def test_week_windows_match_polyfit_on_each_week(store: Path) -> None:
    got = _read(store, "fade", "windows")
    assert list(got.columns[:4]) == ["cell", "window_start", "window_end", "n"]
    monday = ROWS["day"].map(lambda d: d - timedelta(days=d.weekday()))
    want = ROWS.assign(week=monday).groupby(["cell", "week"])
    assert len(got) == want.ngroups
    for (cell, week), rows in want:
        row = got[(got["cell"] == cell) & (pd.to_datetime(got["window_start"])
                                           == pd.Timestamp(week))].iloc[0]
        assert pd.Timestamp(row["window_end"]) == pd.Timestamp(week + timedelta(days=7))
        assert row["n"] == len(rows)
        if len(rows) < 3:
            assert row["status"] == "too_few_points"
            continue
        assert row["status"] == "ok"
        # numpy.polyfit on the same slice
        ref = _line(rows["cycle"].to_numpy(float), rows["capacity_ah"].to_numpy(float))
        for col in ("slope", "intercept", "r2", "resid_sd", "slope_se"):
            assert row[col] == pytest.approx(ref[col], rel=1e-7), (cell, week, col)
        for col in ("slope_lo", "slope_hi", "slope_p"):
            assert row[col] == pytest.approx(ref[col], rel=1e-7), (cell, week, col)


def test_span_windows_match_polyfit_on_each_span(store: Path) -> None:
    got = _read(store, "span", "windows")
    k = np.floor(ROWS["cycle"] / WIDTH)
    want = ROWS.assign(k=k).groupby(["cell", "k"])
    assert len(got) == want.ngroups
    for (cell, kk), rows in want:
        row = got[(got["cell"] == cell) & (got["window_start"] == kk * WIDTH)].iloc[0]
        assert row["window_end"] == (kk + 1) * WIDTH
        assert rows["cycle"].between(row["window_start"], row["window_end"] - 1e-9).all()
        assert row["n"] == len(rows)
        if len(rows) < 3:
            continue
        ref = _line(rows["cycle"].to_numpy(float), rows["capacity_ah"].to_numpy(float))
        for col in ("slope", "intercept", "r2", "resid_sd", "slope_se", "slope_p"):
            assert row[col] == pytest.approx(ref[col], rel=1e-7), (cell, kk, col)


def test_window_sums_are_those_of_the_slice(store: Path) -> None:
    got = _read(store, "fade", "windows")
    row = got[(got["cell"] == "s1")
              & (pd.to_datetime(got["window_start"]) == pd.Timestamp("2026-03-09"))].iloc[0]
    rows = ROWS[(ROWS["cell"] == "s1") & (ROWS["day"] >= date(2026, 3, 9))
                & (ROWS["day"] < date(2026, 3, 16))]
    x, y = rows["cycle"].to_numpy(float), rows["capacity_ah"].to_numpy(float)
    # numpy: centred sums of the week's rows
    assert row["x_mean"] == pytest.approx(x.mean(), rel=RTOL)
    assert row["sxx"] == pytest.approx(((x - x.mean()) ** 2).sum(), rel=RTOL)
    assert row["sxy"] == pytest.approx(((x - x.mean()) * (y - y.mean())).sum(), rel=1e-8)
    assert row["syy"] == pytest.approx(((y - y.mean()) ** 2).sum(), rel=1e-8)
    resid = y - np.polyval(np.polyfit(x, y, 1), x)
    assert row["rss"] == pytest.approx(float(resid @ resid), rel=1e-7)


# --- slope change of the latest window -----------------------------------------------------


def _welch(recent: pd.DataFrame, before: pd.DataFrame) -> dict[str, float]:
    """statsmodels OLS of each slice; the Welch-Satterthwaite degrees of freedom written out."""
    fits = [sm.OLS(s["capacity_ah"].to_numpy(float),
                   sm.add_constant(s["cycle"].to_numpy(float))).fit() for s in (recent, before)]
    (br, vr, nr), (bb, vb, nb) = [(f.params[1], f.bse[1] ** 2, f.nobs) for f in fits]
    df = (vr + vb) ** 2 / (vr ** 2 / (nr - 2) + vb ** 2 / (nb - 2))
    t = (br - bb) / math.sqrt(vr + vb)
    return {"slope_recent": br, "slope_recent_se": math.sqrt(vr), "slope_before": bb,
            "slope_before_se": math.sqrt(vb), "difference": br - bb,
            "difference_se": math.sqrt(vr + vb), "difference_t": t, "difference_df": df,
            "difference_p": 2 * stats.t.sf(abs(t), df)}  # scipy Student t tail


@pytest.mark.parametrize("fit", ["fade", "span"])
def test_change_matches_two_slice_fits_and_welch_df(store: Path, fit: str) -> None:
    got = _read(store, fit, "change").set_index("cell")
    for cell in ("s1", "s2", "knee"):
        rows = ROWS[ROWS["cell"] == cell]
        if fit == "fade":
            key = rows["day"].map(lambda d: d - timedelta(days=d.weekday()))
        else:
            key = np.floor(rows["cycle"] / WIDTH)
        recent, before = rows[key == key.max()], rows[key < key.max()]
        want = _welch(recent, before)
        row = got.loc[cell]
        assert row["n_recent"] == len(recent) and row["n_before"] == len(before)
        assert pd.isna(row["note"])
        for col, value in want.items():
            rel = T_RTOL if col == "difference_p" else 1e-7
            assert row[col] == pytest.approx(value, rel=rel), (fit, cell, col)
        lo, hi = sorted((len(recent) - 2, len(before) - 2))
        assert lo <= row["difference_df"] <= lo + hi


def test_knee_is_a_change_and_steady_cells_are_not(store: Path) -> None:
    got = _read(store, "fade", "change").set_index("cell")
    assert got.loc["knee", "difference_p"] < 1e-10
    assert got.loc["knee", "difference"] == pytest.approx(-0.005, rel=0.1)
    assert (got.loc[["s1", "s2"], "difference_p"] > 0.01).all()


def test_change_says_why_it_cannot_test(store: Path) -> None:
    got = _read(store, "fade", "change").set_index("cell")
    assert got.loc["new", "note"] == "no earlier window"
    assert got.loc["new", "n_before"] == 0 and pd.isna(got.loc["new", "slope_before"])
    assert got.loc["late", "note"] == "too few points recently"
    assert got.loc["late", "n_recent"] == 2
    assert got.loc[["new", "late"], ["difference_t", "difference_p"]].isna().all().all()


# --- Chow test ----------------------------------------------------------------------------


def _chow(cell: str, at: float) -> tuple[float, float, float]:
    """statsmodels: the two-line model (x, a step and a step in slope at ``at``) against one
    line, by OLSResults.compare_f_test; returns (F, p, df_diff)."""
    rows = ROWS[ROWS["cell"] == cell]
    x = rows["cycle"].to_numpy(float)
    y = rows["capacity_ah"].to_numpy(float)
    step = (x >= at).astype(float)
    full = sm.OLS(y, np.column_stack([np.ones_like(x), x, step, step * x])).fit()
    one = sm.OLS(y, sm.add_constant(x)).fit()
    f, p, df_diff = full.compare_f_test(one)
    return float(f), float(p), float(df_diff)


@pytest.mark.parametrize("at", [60.0, 112.5])
def test_break_matches_restricted_against_unrestricted_fit(store: Path, at: float) -> None:
    with Ledger.open(store, read_only=True) as led:
        got = led.fits("fade", break_at=at).set_index("cell")
    assert list(got.columns) == ["n_below", "n_above", "f", "df1", "df2", "p", "note"]
    for cell in ("s1", "s2", "knee"):
        f, p, df_diff = _chow(cell, at)
        row = got.loc[cell]
        n = int((ROWS["cell"] == cell).sum())
        assert (row["df1"], row["df2"]) == (df_diff, n - 4)
        assert row["n_below"] == int(((ROWS["cell"] == cell) & (ROWS["cycle"] < at)).sum())
        assert row["f"] == pytest.approx(f, rel=1e-7), (cell, at)
        # scipy's F tail for the reference p (statsmodels computes it the same way)
        assert row["p"] == pytest.approx(stats.f.sf(f, 2, n - 4), rel=1e-7, abs=1e-300)
        assert row["p"] == pytest.approx(p, rel=1e-7, abs=1e-300)
    assert got.loc["knee", "p"] < 1e-10 if at == 112.5 else True


def test_break_notes_and_cli(store: Path) -> None:
    with Ledger.open(store, read_only=True) as led:
        low = led.fits("fade", break_at=0).set_index("cell")
        assert (low["note"] == "too few points below").all()
        assert low["f"].isna().all() and low["p"].isna().all()
        picked = led.fits("fade", "p < 0.001", break_at=112.5, sort="p")
        assert list(picked["cell"]) == ["knee"]
        with pytest.raises(QueryRefused):
            led.fits("fade", break_at=112.5, sort="nope")
    code, out, _ = tl("fits", "fade", "--break-at", "112.5", "--format", "csv",
                      "--store", str(store))
    assert code == 0
    table = pd.read_csv(pd.io.common.StringIO(out)).set_index("cell")
    assert table.loc["knee", "df2"] == (ROWS["cell"] == "knee").sum() - 4
