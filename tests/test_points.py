"""Per-row diagnostics (sql/views/points.sql) and the projected crossing (sql/views/crossing.sql).

One store is built from real files in a temporary lab and read through the API and the CLI, as
a user would. Every statistic is checked against statsmodels on the same rows: the influence
measures of OLSInfluence, the Bonferroni outlier test of OLSResults.outlier_test, and for the
crossing a direct numerical solution (scipy.optimize.brentq) of where the confidence band of
OLSResults.get_prediction meets the limit.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize
from statsmodels.stats.outliers_influence import OLSInfluence

from trendledger import Ledger
from trendledger.views.watch import CAUTION

from .conftest import SPEC, Lab
from .test_cli import tl

LIMIT = 2.0
LEVEL = 0.95
ALPHA = 0.01
# a second fit on the same rows whose level is far above 1 - alpha: a slope can then be
# significant at alpha while its crossing interval is unbounded at the level
WIDE = """
[[fit]]
name = "wide"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
limit = 2.0
level = 0.99
alpha = 0.3
"""
SPEC_POINTS = SPEC + f"limit = {LIMIT}\nlevel = {LEVEL}\nalpha = {ALPHA}\n" + WIDE
# Rounding tolerance against statsmodels (float64 both ways, different summation orders).
RTOL = 1e-9
# p-values and quantiles go through the Student t macros (about 13 significant digits).
T_RTOL = 1e-8


def _series() -> dict[str, list[tuple[int, float | None]]]:
    """(cycle, capacity) per cell; the comment says what each cell is for."""
    rng = np.random.default_rng(20260302)
    xs = np.arange(1, 41)
    out: dict[str, list[tuple[int, float | None]]] = {}
    # a: falling toward the floor, two gross outliers (Bonferroni flags them)
    y = 3.0 - 0.01 * xs + rng.normal(0, 0.02, xs.size)
    y[[7, 29]] -= [0.4, 0.3]
    out["a"] = list(zip(xs.tolist(), y.tolist(), strict=True))
    # b: falling, clean (no flag)
    out["b"] = list(zip(xs.tolist(), (2.9 - 0.008 * xs + rng.normal(0, 0.03, xs.size)).tolist(),
                        strict=True))
    # up: below the limit and rising toward it (a ceiling)
    out["up"] = list(zip(xs.tolist(), (1.0 + 0.012 * xs + rng.normal(0, 0.03, xs.size)).tolist(),
                         strict=True))
    # away: above the limit and rising, away from it
    out["away"] = list(zip(xs.tolist(), (3.0 + 0.01 * xs + rng.normal(0, 0.02, xs.size)).tolist(),
                           strict=True))
    # noisy: slope about 1.6 standard errors from 0 (p near 0.1)
    noise = np.clip(rng.normal(0, 1, xs.size), -2.0, 2.0)
    fitted = np.polyval(np.polyfit(xs, noise, 1), xs)
    resid = (noise - fitted) / np.std(noise - fitted, ddof=2) * 0.05
    se = 0.05 / math.sqrt(float(np.sum((xs - xs.mean()) ** 2)))
    out["noisy"] = list(zip(xs.tolist(), (2.5 - 1.6 * se * xs + resid).tolist(), strict=True))
    # exact: a perfect line (binary fractions, so the float64 sums are exact)
    out["exact"] = [(int(x), 3.0 - 0.0078125 * x) for x in range(1, 9)]
    # three: three points, too few for an externally studentised residual
    out["three"] = [(1, 3.0), (2, 2.9), (3, 2.95)]
    # two: two points, too few for a fit with residual degrees of freedom
    out["two"] = [(1, 3.0), (2, 2.9)]
    # gaps: rows whose capacity is missing count nowhere
    out["gaps"] = [(int(x), None if x % 5 == 0 else 2.8 - 0.01 * x + 0.003 * (x % 3))
                   for x in range(1, 21)]
    # flat: every capacity the same
    out["flat"] = [(int(x), 2.5) for x in range(1, 11)]
    return out


SERIES = _series()


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("points") / "lab", SPEC_POINTS)
    lab.series(SERIES)
    with lab.init() as led:
        led.append()
    return lab.store


@pytest.fixture(scope="module")
def points(store: Path) -> pd.DataFrame:
    with Ledger.open(store, read_only=True) as led:
        return led.fits("fade", view="points")


def _ols(cell: str) -> sm.regression.linear_model.RegressionResultsWrapper:
    rows = [(x, y) for x, y in SERIES[cell] if y is not None]
    x = np.array([r[0] for r in rows], float)
    y = np.array([r[1] for r in rows], float)
    return sm.OLS(y, sm.add_constant(x)).fit()


def _cell(points: pd.DataFrame, cell: str) -> pd.DataFrame:
    return points[points["cell"] == cell].sort_values("x").reset_index(drop=True)


# --- points --------------------------------------------------------------------------------


def test_columns(points: pd.DataFrame) -> None:
    assert list(points.columns) == [
        "cell", "x", "y", "file_id", "y_line", "residual", "residual_scaled", "residual_t",
        "leverage", "cook_distance", "outlier_p", "outlier", "x_value", "y_value",
        "y_line_lo", "y_line_hi", "y_fitted", "y_fitted_lo", "y_fitted_hi"]
    assert len(points) == sum(len(rows) for rows in SERIES.values())


@pytest.mark.parametrize("cell", ["a", "b", "up", "noisy", "gaps"])
def test_influence_matches_statsmodels(points: pd.DataFrame, cell: str) -> None:
    got = _cell(points, cell).dropna(subset=["y"])
    res = _ols(cell)
    infl = OLSInfluence(res)
    # statsmodels OLSResults.fittedvalues / resid
    np.testing.assert_allclose(got["y_line"], res.fittedvalues, rtol=RTOL)
    np.testing.assert_allclose(got["residual"], res.resid, rtol=1e-7, atol=1e-12)
    # statsmodels OLSInfluence: hat_matrix_diag, resid_studentized_internal,
    # resid_studentized_external, cooks_distance
    np.testing.assert_allclose(got["leverage"], infl.hat_matrix_diag, rtol=RTOL)
    np.testing.assert_allclose(got["residual_scaled"], infl.resid_studentized_internal,
                               rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(got["residual_t"], infl.resid_studentized_external,
                               rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(got["cook_distance"], infl.cooks_distance[0], rtol=1e-7,
                               atol=1e-14)


@pytest.mark.parametrize("cell", ["a", "b", "up", "noisy", "gaps"])
def test_outlier_flags_match_bonferroni_outlier_test(points: pd.DataFrame, cell: str) -> None:
    got = _cell(points, cell).dropna(subset=["y"])
    # statsmodels OLSResults.outlier_test(method="bonf"): columns student_resid, unadj_p, bonf(p)
    table = _ols(cell).outlier_test(method="bonf")
    np.testing.assert_allclose(got["residual_t"], table[:, 0], rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(got["outlier_p"], table[:, 2], rtol=T_RTOL, atol=1e-300)
    assert list(got["outlier"]) == list(table[:, 2] < ALPHA)


def test_gross_outliers_are_flagged_and_clean_rows_are_not(points: pd.DataFrame) -> None:
    flagged = points[points["outlier"].fillna(False).astype(bool)]
    assert sorted(zip(flagged["cell"], flagged["x"], strict=True)) == [("a", 8.0), ("a", 30.0)]


def test_missing_rows_have_no_statistics(points: pd.DataFrame) -> None:
    gaps = _cell(points, "gaps")
    missing = gaps[gaps["y"].isna()]
    assert len(missing) == 4
    assert missing[["residual", "residual_scaled", "residual_t", "leverage", "cook_distance",
                    "outlier_p"]].isna().all().all()
    assert missing["outlier"].isna().all()
    # the line is still evaluated at their x
    res = _ols("gaps")
    np.testing.assert_allclose(missing["y_line"], res.params[0] + res.params[1] * missing["x"],
                               rtol=RTOL)


def test_exact_and_flat_groups_have_no_outliers(points: pd.DataFrame) -> None:
    for cell in ("exact", "flat"):
        got = _cell(points, cell)
        assert (got["residual"].abs() < 1e-12).all(), cell
        assert got["residual_scaled"].isna().all() and got["residual_t"].isna().all(), cell
        assert not got["outlier"].astype(bool).any(), cell


def test_three_points_have_internal_but_not_external_residuals(points: pd.DataFrame) -> None:
    got = _cell(points, "three")
    infl = OLSInfluence(_ols("three"))
    np.testing.assert_allclose(got["residual_scaled"], infl.resid_studentized_internal,
                               rtol=1e-7)
    assert got["residual_t"].isna().all() and got["outlier"].isna().all()


def test_file_id_points_to_the_file_of_the_row(store: Path, points: pd.DataFrame) -> None:
    with Ledger.open(store, read_only=True) as led:
        files = led.lineage(files=True).set_index("file_id")["path"]
    row = _cell(points, "a").iloc[9]  # cycle 10: third day, first file of that day
    assert files[row["file_id"]] == "incoming/2026-03-04/a.csv"


# --- crossing -------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def crossing(store: Path) -> pd.DataFrame:
    with Ledger.open(store, read_only=True) as led:
        return led.fits("fade", view="crossing").set_index("cell")


def _band(res, x: float, alpha: float) -> tuple[float, float]:
    """statsmodels get_prediction: the confidence band of the mean line at x."""
    lo, hi = res.get_prediction(np.array([[1.0, x]])).conf_int(alpha=alpha)[0]
    return float(lo), float(hi)


def _root(f, a: float, b: float) -> float:
    """scipy.optimize.brentq after widening [a, b] until f changes sign."""
    width = b - a
    for _ in range(60):
        if f(a) * f(b) < 0:
            return float(optimize.brentq(f, a, b, xtol=1e-12, rtol=1e-14))
        width *= 2
        a, b = (a - width, b) if f(b) < 0 or abs(f(a)) < abs(f(b)) else (a, b + width)
    raise AssertionError("no sign change")


@pytest.mark.parametrize("cell", ["a", "b", "up"])
def test_fieller_interval_matches_the_confidence_band(crossing: pd.DataFrame, cell: str) -> None:
    res = _ols(cell)
    a, b = res.params
    cross = (LIMIT - a) / b
    row = crossing.loc[cell]
    # the ICH Q1E rule: up to twice the period the data cover (numpy on the cell's x)
    x = np.array([r[0] for r in SERIES[cell]], dtype=float)
    assert row["extrapolation_end"] == 2 * x.max() - x.min()
    if row["cross_bound"] > row["extrapolation_end"]:
        assert row["note"] == "extrapolated: beyond extrapolation_end (ICH Q1E rule)"
    else:
        assert row["note"] is None or pd.isna(row["note"])
    assert row["cross_x"] == pytest.approx(cross, rel=RTOL)
    # both ends: where the level band (get_prediction, alpha = 1 - level) has the limit on
    # its edge, found by brentq on either side of the crossing
    def outside(x: float) -> float:
        lo, hi = _band(res, x, 1 - LEVEL)
        return (lo - LIMIT) * (hi - LIMIT)

    lo_end = _root(outside, cross - 50, cross)
    hi_end = _root(outside, cross, cross + 50)
    assert row["cross_lo"] == pytest.approx(lo_end, rel=T_RTOL)
    assert row["cross_hi"] == pytest.approx(hi_end, rel=T_RTOL)
    # cross_bound: the one-sided 95% bound (the two-sided 90% band) on the side the line
    # heads to: the lower edge for a floor (falling), the upper edge for a ceiling (rising)
    side = 0 if b < 0 else 1
    bound = _root(lambda x: _band(res, x, 0.10)[side] - LIMIT, cross - 50, cross)
    assert row["cross_bound"] == pytest.approx(bound, rel=T_RTOL)
    assert row["cross_lo"] < row["cross_bound"] < row["cross_x"] < row["cross_hi"]


def test_crossing_notes(crossing: pd.DataFrame) -> None:
    # `limit` is the side the slope points to: for the rising cell above it, a ceiling that
    # it is past already
    assert crossing.loc["away", "side"] == "upper"
    assert crossing.loc["away", "note"] == "past the limit at the latest x"
    assert bool(crossing.loc["away", "past"])
    assert crossing.loc["flat", "note"] == "flat line never reaches the limit"
    assert crossing.loc["two", "note"] == "no line: too_few_points"
    for cell in ("flat", "two"):
        assert crossing.loc[cell, ["cross_x", "cross_lo", "cross_hi", "cross_bound"]].isna().all()
    # the p-value itself is the fit view's slope_p; the note names the alpha it failed, and
    # the projection stands beside it (ICH Q1E projects from the bound whatever the slope)
    for cell in ("three", "noisy"):
        assert crossing.loc[cell, "note"].startswith("slope not significant at alpha 0.01")
        assert pd.notna(crossing.loc[cell, "cross_x"])


def test_exact_line_crosses_with_zero_width(crossing: pd.DataFrame) -> None:
    row = crossing.loc["exact"]
    # 3 - x / 128 = 2 at x = 128
    assert row["cross_x"] == row["cross_lo"] == row["cross_hi"] == row["cross_bound"] == 128.0
    # the data cover x 1 to 8: the ICH Q1E rule supports a projection to 15 at most
    assert row["extrapolation_end"] == 15.0
    assert row["note"] == "extrapolated: beyond extrapolation_end (ICH Q1E rule)"


def test_unbounded_interval_at_a_high_level(store: Path) -> None:
    # fit "wide": alpha 0.3 lets the noisy slope (p near 0.1) through, level 0.99 does not
    with Ledger.open(store, read_only=True) as led:
        row = led.fits("wide", view="crossing").set_index("cell").loc["noisy"]
    res = _ols("noisy")
    assert 0.05 < res.pvalues[1] < 0.3
    assert row["cross_x"] == pytest.approx((LIMIT - res.params[0]) / res.params[1], rel=RTOL)
    assert pd.isna(row["cross_lo"]) and pd.isna(row["cross_hi"])
    # |t| is about 1.6, below the one-sided 95% quantile too: the bound widens faster than the
    # line falls and meets the floor before the line does; reference: the root of statsmodels
    # get_prediction(x).conf_int(alpha=0.10)'s lower edge less the limit
    cross = (LIMIT - res.params[0]) / res.params[1]
    bound = _root(lambda x: _band(res, x, 0.10)[0] - LIMIT, 40.0, cross)
    assert row["cross_bound"] == pytest.approx(bound, rel=T_RTOL)
    assert row["note"].startswith("interval unbounded at level 0.99")


def test_cli_crossing_carries_the_caution(store: Path) -> None:
    code, out, _ = tl("fits", "fade", "--view", "crossing", "--store", str(store))
    assert code == 0 and out.rstrip().endswith(CAUTION)
    code, out, err = tl("fits", "fade", "--view", "crossing", "--format", "csv",
                        "--store", str(store))
    assert code == 0 and CAUTION not in out and CAUTION in err
    code, out, _ = tl("fits", "fade", "--view", "points", "--store", str(store))
    assert code == 0 and CAUTION not in out
