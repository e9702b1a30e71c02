"""Per-row diagnostics and the projected crossing for fits through the origin.

sql/views/points.sql and sql/views/crossing.sql take the line through the origin from
sql/parts/line_origin.sql and cross_origin.sql (the slots __line__ and __cross__) for a fit with
``through_origin = true``. One store
is built from real files in a temporary lab and read through the API. Every statistic is checked
against statsmodels on the same rows, fitted without a constant (OLS(y, x)): the influence
measures of OLSInfluence, the Bonferroni outlier test of OLSResults.outlier_test, and for the
crossing a direct numerical solution (scipy.optimize.brentq) of where the confidence band of
OLSResults.get_prediction meets the limit.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize
from statsmodels.stats.outliers_influence import OLSInfluence

from trendledger import Ledger
from trendledger.export.write import export
from trendledger.views import install as views

from .conftest import Lab

LIMIT = 3.0
FLOOR = -3.0
LEVEL = 0.95
ALPHA = 0.01
WIDE_LEVEL = 0.99
WIDE_ALPHA = 0.3

HEAD = """\
[source]
files = "incoming/{day}/{cell}.csv"
format = "csv"

[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"

[source.fields]
day = "DATE"
cell = "VARCHAR"
"""


def _fit(name: str, *, origin: bool, limit: float, level: float, alpha: float) -> str:
    return (f'\n[[fit]]\nname = "{name}"\ngroup = ["cell"]\nx = "cycle"\ny = "capacity_ah"\n'
            f"through_origin = {'true' if origin else 'false'}\nlimit = {limit}\n"
            f"level = {level}\nalpha = {alpha}\n")


# fade: rising toward a ceiling; floor: falling toward a floor below 0; wide: a level far above
# 1 - alpha, so a slope can be significant while its crossing interval is unbounded; line: the
# same rows with an intercept, for the column list and types
SPEC_ORIGIN = (HEAD
               + _fit("fade", origin=True, limit=LIMIT, level=LEVEL, alpha=ALPHA)
               + _fit("floor", origin=True, limit=FLOOR, level=LEVEL, alpha=ALPHA)
               + _fit("wide", origin=True, limit=LIMIT, level=WIDE_LEVEL, alpha=WIDE_ALPHA)
               + _fit("line", origin=False, limit=LIMIT, level=LEVEL, alpha=ALPHA))

# float64 both ways, different summation orders
RTOL = 1e-9
# values that are differences of nearly equal numbers (residuals) may also be off by rounding
# in absolute terms
ATOL = 1e-13


def _noise(rng: np.random.Generator, size: int, sd: float) -> np.ndarray:
    # cut at 2.5 sd: no clean row can pass a Bonferroni test at 0.01 over 40 rows
    return np.clip(rng.normal(0.0, 1.0, size), -2.5, 2.5) * sd


def _with_t(rng: np.random.Generator, xs: np.ndarray, t: float) -> np.ndarray:
    """y whose least-squares slope through the origin is exactly t standard errors from 0."""
    noise = _noise(rng, xs.size, 1.0)
    resid = noise - xs * float(np.dot(xs, noise) / np.dot(xs, xs))  # orthogonal to x
    resid = resid / math.sqrt(float(np.dot(resid, resid)) / (xs.size - 1)) * 0.05
    se = 0.05 / math.sqrt(float(np.dot(xs, xs)))
    return t * se * xs + resid


def _series() -> dict[str, list[tuple[int, float | None]]]:
    """(cycle, capacity) per cell; the comment says what each cell is for."""
    rng = np.random.default_rng(20261202)
    xs = np.arange(1, 41)

    def pairs(x: np.ndarray, y: np.ndarray) -> list[tuple[int, float | None]]:
        return list(zip(x.astype(int).tolist(), y.tolist(), strict=True))

    spike = 0.04 * xs + _noise(rng, xs.size, 0.02)
    spike[[9, 25]] += [0.5, -0.4]  # cycles 10 and 26: gross outliers
    late = np.arange(100, 120)
    both = np.arange(-10, 11)
    return {
        # rising toward the ceiling 3 (crosses near x = 60), clean
        "rise": pairs(xs, 0.05 * xs + _noise(rng, xs.size, 0.02)),
        # rising, two gross outliers (Bonferroni flags them)
        "spike": pairs(xs, spike),
        # falling toward the floor -3 (fit floor); points away from the ceiling (fit fade)
        "sink": pairs(xs, -0.05 * xs + _noise(rng, xs.size, 0.02)),
        # crossed the ceiling inside the data (near x = 30)
        "past": pairs(xs, 0.1 * xs + _noise(rng, xs.size, 0.02)),
        # the line meets the ceiling at x near 60, before the first x (100): points away
        "late": pairs(late, 0.05 * late + _noise(rng, late.size, 0.02)),
        # x on both sides of 0, falling: the line meets the ceiling at x = -6, inside the data
        # but at a negative x, and moves away from it
        "both": pairs(both, -0.5 * both + _noise(rng, both.size, 0.02)),
        # slope 1.6 standard errors from 0 (p near 0.12)
        "noisy": pairs(xs, _with_t(rng, xs, 1.6)),
        # slope 2.2 standard errors from 0 (p near 0.034): significant at 0.3, the 90% interval
        # is bounded, the 99% one is not
        "mid": pairs(xs, _with_t(rng, xs, 2.2)),
        # a perfect line through the origin (binary fractions: exact float64 sums)
        "exact": [(int(x), 0.0625 * x) for x in range(1, 9)],
        # three points: one residual degree of freedom left without a row
        "three": [(1, 0.05), (2, 0.11), (3, 0.14)],
        # two points: residual degrees of freedom 1, none left without a row
        "two": [(1, 0.05), (2, 0.11)],
        # one point: the line through it and the origin, nothing else
        "one": [(2, 0.1)],
        # every x is 0: no slope
        "zero": [(0, 0.1), (0, 0.2), (0, 0.15)],
        # every y is 0: slope 0
        "nil": [(int(x), 0.0) for x in range(1, 6)],
        # one x other than 0: that row is its own fitted value (leverage 1)
        "lone": [(0, -0.1), (0, 0.05), (0, 0.1), (5, 0.3)],
        # rows whose capacity is missing count nowhere
        "gaps": [(int(x), None if x % 5 == 0 else 0.05 * x + 0.003 * (x % 3))
                 for x in range(1, 21)],
    }


SERIES = _series()


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("origin") / "lab", SPEC_ORIGIN)
    lab.series(SERIES)
    with lab.init() as led:
        led.append()
    return lab.store


@pytest.fixture(scope="module")
def points(store: Path) -> pd.DataFrame:
    with Ledger.open(store, read_only=True) as led:
        return led.fits("fade", view="points")


def _xy(cell: str) -> tuple[np.ndarray, np.ndarray]:
    rows = [(x, y) for x, y in SERIES[cell] if y is not None]
    return (np.array([r[0] for r in rows], float), np.array([r[1] for r in rows], float))


def _ols(cell: str) -> sm.regression.linear_model.RegressionResultsWrapper:
    """statsmodels OLS of y on x without a constant (a line through the origin)."""
    x, y = _xy(cell)
    return sm.OLS(y, x[:, None]).fit()


def _hat(cell: str) -> np.ndarray:
    """Diagonal of the hat matrix X pinv(X) (numpy), for groups too small for OLSInfluence."""
    x, _ = _xy(cell)
    design = x[:, None]
    return np.diag(design @ np.linalg.pinv(design))


def _cell(frame: pd.DataFrame, cell: str) -> pd.DataFrame:
    return frame[frame["cell"] == cell].sort_values(["x", "y"]).reset_index(drop=True)


def _rows(frame: pd.DataFrame, cell: str) -> pd.DataFrame:
    """The counted rows of a cell, in the order of _xy (the series order, x ascending)."""
    got = _cell(frame, cell).dropna(subset=["y"])
    x, y = _xy(cell)
    order = np.lexsort((y, x))
    assert np.array_equal(got["x"].to_numpy(), x[order])
    assert np.array_equal(got["y"].to_numpy(), y[order])
    assert np.array_equal(order, np.arange(x.size)), "series must be sorted for the comparison"
    return got


# --- installation ------------------------------------------------------------------------------


def test_origin_fits_use_the_same_templates(store: Path) -> None:
    with Ledger.open(store, read_only=True) as led:
        spec = led.spec
        listed = led.views().set_index("name")
        described = {
            v: led.con.execute(f'DESCRIBE "{v}"').fetchall()
            for v in ("fit_fade_points", "fit_line_points", "fit_fade_crossing",
                      "fit_line_crossing")
        }
    for fit in ("fade", "floor", "wide"):
        # one points template for both lines; the line through the origin comes from its part
        assert views.template_for(spec.fit(fit), "points") == "views/points.sql"
        assert views.fit_values(spec, spec.fit(fit))["line"] == "line_origin"
        assert views.template_for(spec.fit(fit), "crossing") == "views/crossing.sql"
        assert views.fit_values(spec, spec.fit(fit))["cross"] == "cross_origin"
        assert listed.loc[f"fit_{fit}_points", "kind"] == "points"
        assert listed.loc[f"fit_{fit}_crossing", "kind"] == "crossing"
        # no window here, so no windows or change view (tests/test_origin_windows.py has
        # them); break and alerts are not composed for the line through the origin yet
        for kind in ("change", "break", "alerts"):
            assert f"fit_{fit}_{kind}" not in listed.index
    assert views.fit_values(spec, spec.fit("line"))["line"] == "line_intercept"
    # the same columns in the same order with the same types as with an intercept
    assert described["fit_fade_points"] == described["fit_line_points"]
    assert described["fit_fade_crossing"] == described["fit_line_crossing"]


def test_columns(points: pd.DataFrame) -> None:
    assert list(points.columns) == [
        "cell", "x", "y", "file_id", "y_line", "residual", "residual_scaled", "residual_t",
        "leverage", "cook_distance", "outlier_p", "outlier", "x_value", "y_value",
        "y_line_lo", "y_line_hi", "y_fitted", "y_fitted_lo", "y_fitted_hi"]
    assert len(points) == sum(len(rows) for rows in SERIES.values())


def test_export_translates_the_origin_views(store: Path, tmp_path: Path) -> None:
    done = export(store, tmp_path / "out")
    for dialect, missing in done["unavailable"].items():
        assert not {n for n in missing if n.endswith(("_points", "_crossing"))}, dialect
    for dialect in ("spark", "postgres", "trino"):
        text = (tmp_path / "out" / "views" / f"{dialect}.sql").read_text()
        for fit in ("fade", "floor", "wide"):
            for kind in ("points", "crossing"):
                created = rf"CREATE (OR REPLACE )?(TEMPORARY )?VIEW [`\"]fit_{fit}_{kind}[`\"] AS"
                assert re.search(created, text), (dialect, fit, kind)


# --- points ------------------------------------------------------------------------------------

FULL = ["rise", "spike", "sink", "past", "late", "both", "noisy", "mid", "three", "gaps"]


@pytest.mark.parametrize("cell", FULL)
def test_influence_matches_statsmodels(points: pd.DataFrame, cell: str) -> None:
    got = _rows(points, cell)
    res = _ols(cell)
    infl = OLSInfluence(res)
    # reference: statsmodels OLS without constant, fittedvalues and resid
    np.testing.assert_allclose(got["y_line"], res.fittedvalues, rtol=RTOL)
    np.testing.assert_allclose(got["residual"], res.resid, rtol=RTOL, atol=ATOL)
    # reference: statsmodels OLS without constant, OLSInfluence.hat_matrix_diag
    np.testing.assert_allclose(got["leverage"], infl.hat_matrix_diag, rtol=RTOL)
    # reference: statsmodels OLS without constant, OLSInfluence.resid_studentized_internal
    np.testing.assert_allclose(got["residual_scaled"], infl.resid_studentized_internal,
                               rtol=RTOL, atol=ATOL)
    # reference: statsmodels OLS without constant, OLSInfluence.resid_studentized_external
    np.testing.assert_allclose(got["residual_t"], infl.resid_studentized_external,
                               rtol=RTOL, atol=ATOL)
    # reference: statsmodels OLS without constant, OLSInfluence.cooks_distance[0]
    np.testing.assert_allclose(got["cook_distance"], infl.cooks_distance[0], rtol=RTOL,
                               atol=1e-20)


@pytest.mark.parametrize("cell", FULL)
def test_outlier_flags_match_bonferroni_outlier_test(points: pd.DataFrame, cell: str) -> None:
    got = _rows(points, cell)
    # reference: statsmodels OLS without constant, outlier_test(method="bonf"): columns
    # student_resid, unadj_p, bonf(p)
    table = np.asarray(_ols(cell).outlier_test(method="bonf"))
    np.testing.assert_allclose(got["residual_t"], table[:, 0], rtol=RTOL, atol=ATOL)
    np.testing.assert_allclose(got["outlier_p"], table[:, 2], rtol=RTOL, atol=1e-300)
    assert list(got["outlier"]) == list(table[:, 2] < ALPHA)


def test_only_the_planted_outliers_are_flagged(points: pd.DataFrame) -> None:
    flagged = points[points["outlier"].fillna(False).astype(bool)]
    # _series: cycles 10 and 26 of spike were moved by 0.5 and -0.4 (25 and 20 noise sd)
    assert sorted(zip(flagged["cell"], flagged["x"], strict=True)) == [
        ("spike", 10.0), ("spike", 26.0)]


def test_two_points_have_internal_but_not_external_residuals(points: pd.DataFrame) -> None:
    got = _rows(points, "two")
    res = _ols("two")
    infl = OLSInfluence(res)
    # reference: statsmodels OLS without constant, fittedvalues and OLSInfluence
    np.testing.assert_allclose(got["y_line"], res.fittedvalues, rtol=RTOL)
    np.testing.assert_allclose(got["leverage"], infl.hat_matrix_diag, rtol=RTOL)
    np.testing.assert_allclose(got["residual_scaled"], infl.resid_studentized_internal,
                               rtol=RTOL)
    np.testing.assert_allclose(got["cook_distance"], infl.cooks_distance[0], rtol=RTOL)
    # n - 2 = 0 degrees of freedom without a row
    assert got[["residual_t", "outlier_p"]].isna().all().all()
    assert got["outlier"].isna().all()


def test_one_point_has_its_line_and_nothing_else(points: pd.DataFrame) -> None:
    got = _rows(points, "one")
    # the line through (2, 0.1) and the origin passes through the point
    assert got["y_line"].tolist() == [0.1] and got["residual"].tolist() == [0.0]
    # reference: numpy hat matrix X pinv(X)
    np.testing.assert_allclose(got["leverage"], _hat("one"), rtol=RTOL)
    assert got[["residual_scaled", "residual_t", "cook_distance", "outlier_p"]].isna().all().all()
    assert got["outlier"].isna().all()


def test_all_x_zero_has_no_line(points: pd.DataFrame) -> None:
    got = _cell(points, "zero")
    assert len(got) == 3
    assert got[["y_line", "residual", "residual_scaled", "residual_t", "leverage",
                "cook_distance", "outlier_p"]].isna().all().all()
    assert got["outlier"].isna().all()


def test_perfect_and_zero_lines_have_no_outliers(points: pd.DataFrame) -> None:
    for cell, slope in (("exact", 0.0625), ("nil", 0.0)):
        got = _rows(points, cell)
        # the series are y = x / 16 and y = 0 exactly (_series)
        np.testing.assert_allclose(got["y_line"], slope * got["x"], rtol=RTOL)
        assert (got["residual"].abs() < 1e-12).all(), cell
        # reference: numpy hat matrix X pinv(X)
        np.testing.assert_allclose(got["leverage"], _hat(cell), rtol=RTOL)
        assert got[["residual_scaled", "residual_t", "cook_distance",
                    "outlier_p"]].isna().all().all(), cell
        assert got["outlier"].tolist() == [False] * len(got), cell


# statsmodels warns while it studentises the leverage-1 row (a fit without it has no x)
@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.SingularMatrixWarning")
def test_row_with_leverage_one(points: pd.DataFrame) -> None:
    got = _rows(points, "lone")
    res = _ols("lone")
    infl = OLSInfluence(res)
    # reference: statsmodels OLS without constant, OLSInfluence.hat_matrix_diag
    np.testing.assert_allclose(got["leverage"], infl.hat_matrix_diag, rtol=RTOL, atol=ATOL)
    np.testing.assert_allclose(got["y_line"], res.fittedvalues, rtol=RTOL, atol=ATOL)
    rows = got["leverage"] < 1
    assert rows.tolist() == [True, True, True, False]
    # the rows at x = 0; reference: statsmodels OLSInfluence and outlier_test(method="bonf")
    table = np.asarray(res.outlier_test(method="bonf"))
    np.testing.assert_allclose(got.loc[rows, "residual_scaled"],
                               infl.resid_studentized_internal[rows], rtol=RTOL)
    np.testing.assert_allclose(got.loc[rows, "residual_t"],
                               infl.resid_studentized_external[rows], rtol=RTOL)
    np.testing.assert_allclose(got.loc[rows, "cook_distance"], infl.cooks_distance[0][rows],
                               rtol=RTOL, atol=1e-300)
    np.testing.assert_allclose(got.loc[rows, "outlier_p"], table[rows.to_numpy(), 2], rtol=RTOL)
    # the row at x = 5 is its own fitted value: no scaled residual, no test
    last = got.iloc[3]
    assert abs(last["residual"]) < 1e-15
    assert pd.isna(last["residual_scaled"]) and pd.isna(last["residual_t"])
    assert pd.isna(last["cook_distance"]) and pd.isna(last["outlier_p"])
    assert pd.isna(last["outlier"])


def test_missing_rows_have_no_statistics(points: pd.DataFrame) -> None:
    gaps = _cell(points, "gaps")
    missing = gaps[gaps["y"].isna()]
    assert len(missing) == 4
    assert missing[["residual", "residual_scaled", "residual_t", "leverage", "cook_distance",
                    "outlier_p"]].isna().all().all()
    assert missing["outlier"].isna().all()
    # the line is still evaluated at their x; reference: statsmodels OLS without constant
    np.testing.assert_allclose(missing["y_line"], _ols("gaps").params[0] * missing["x"],
                               rtol=RTOL)


def test_points_agree_with_the_fit_view(store: Path, points: pd.DataFrame) -> None:
    with Ledger.open(store, read_only=True) as led:
        fits = led.fits("fade").set_index("cell")
    for cell in ("rise", "spike", "past"):
        got = _rows(points, cell)
        # reference: the slope of fit_fade, times x
        np.testing.assert_array_equal(got["y_line"], fits.loc[cell, "slope"] * got["x"])


# --- crossing ----------------------------------------------------------------------------------


def _crossing(store: Path, fit: str) -> pd.DataFrame:
    with Ledger.open(store, read_only=True) as led:
        return led.fits(fit, view="crossing").set_index("cell")


@pytest.fixture(scope="module")
def crossing(store: Path) -> pd.DataFrame:
    return _crossing(store, "fade")


def _band(res, x: float, alpha: float) -> tuple[float, float]:
    """statsmodels get_prediction: the confidence band of the mean line at x."""
    lo, hi = res.get_prediction(np.array([[x]])).conf_int(alpha=alpha)[0]
    return float(lo), float(hi)


def _solve(f, a: float, b: float) -> float:
    """scipy.optimize.brentq on [a, b], b doubled until f changes sign."""
    for _ in range(80):
        if f(a) * f(b) < 0:
            return float(optimize.brentq(f, a, b, xtol=1e-13, rtol=1e-15))
        b *= 2
    raise AssertionError("no sign change")


def _check_crossing(row: pd.Series, cell: str, limit: float, level: float,
                    note: str | None = None) -> None:
    res = _ols(cell)
    slope = float(res.params[0])
    cross = limit / slope  # reference: statsmodels OLS without constant, params
    assert row["note"] == note if note else pd.isna(row["note"])
    assert row["cross_x"] == pytest.approx(cross, rel=RTOL)

    # both ends: where the level band (get_prediction, alpha = 1 - level) has the limit on its
    # edge; the band is 0 wide at x = 0 and holds the limit at the crossing
    def outside(x: float) -> float:
        lo, hi = _band(res, x, 1 - level)
        return (lo - limit) * (hi - limit)

    tiny = cross * 1e-6
    # reference: scipy.optimize.brentq on statsmodels get_prediction(x).conf_int
    assert row["cross_lo"] == pytest.approx(_solve(outside, tiny, cross), rel=RTOL)
    assert row["cross_hi"] == pytest.approx(_solve(outside, cross, 2 * cross), rel=RTOL)
    # cross_bound: the one-sided 95% bound (the two-sided 90% band) on the side the line heads
    # to, the lower edge toward a floor (falling), the upper toward a ceiling (rising);
    # reference: scipy.optimize.brentq on statsmodels get_prediction(x).conf_int(alpha=0.10)
    side = 0 if slope < 0 else 1
    bound = _solve(lambda x: _band(res, x, 0.10)[side] - limit, tiny, cross)
    assert row["cross_bound"] == pytest.approx(bound, rel=RTOL)
    assert row["cross_lo"] < row["cross_bound"] < row["cross_x"] < row["cross_hi"]


@pytest.mark.parametrize("cell", ["rise", "spike", "past"])
def test_fieller_interval_toward_a_ceiling(crossing: pd.DataFrame, cell: str) -> None:
    note = "past the limit at the latest x" if cell == "past" else None
    _check_crossing(crossing.loc[cell], cell, LIMIT, LEVEL, note)


def test_fieller_interval_toward_a_floor(store: Path) -> None:
    _check_crossing(_crossing(store, "floor").loc["sink"], "sink", FLOOR, LEVEL)


def test_fieller_interval_at_another_level(store: Path) -> None:
    _check_crossing(_crossing(store, "wide").loc["rise"], "rise", LIMIT, WIDE_LEVEL)


def test_crossing_notes(crossing: pd.DataFrame) -> None:
    # `limit` is the side the slope points to: a ceiling for a rising line, a floor for a
    # falling one; a line already past it says so and its crossing lies before the latest x
    assert LIMIT / _ols("sink").params[0] < 0
    assert 0 < LIMIT / _ols("late").params[0] < 100
    assert -10 < LIMIT / _ols("both").params[0] < 0
    assert crossing.loc["sink", "side"] == crossing.loc["both", "side"] == "lower"
    assert crossing.loc["late", "side"] == crossing.loc["rise", "side"] == "upper"
    for cell in ("sink", "late", "both"):
        assert crossing.loc[cell, "note"] == "past the limit at the latest x"
        assert bool(crossing.loc[cell, "past"])
        # reference: statsmodels OLS without constant, params
        assert crossing.loc[cell, "cross_x"] == pytest.approx(LIMIT / _ols(cell).params[0],
                                                              rel=RTOL)
    assert crossing.loc["nil", "note"] == "flat line never reaches the limit"
    assert crossing.loc["one", "note"] == "no line: too_few_points"
    assert crossing.loc["zero", "note"] == "no line: x_all_zero"
    for cell in ("nil", "one", "zero"):
        assert crossing.loc[cell, ["cross_x", "cross_lo", "cross_hi",
                                   "cross_bound"]].isna().all(), cell


@pytest.mark.parametrize("cell", ["noisy", "mid"])
def test_bound_is_given_for_a_slope_that_is_not_significant(crossing: pd.DataFrame,
                                                            cell: str) -> None:
    # ICH Q1E estimates a shelf life from the one-sided 95% bound whether or not the slope is
    # significant; reference: statsmodels OLS without constant, pvalues (n - 1 df)
    res = _ols(cell)
    assert float(res.pvalues[0]) >= ALPHA
    row = crossing.loc[cell]
    assert row["note"].startswith("slope not significant at alpha 0.01")
    cross = LIMIT / float(res.params[0])
    assert row["cross_x"] == pytest.approx(cross, rel=RTOL)
    # reference: scipy.optimize.brentq on statsmodels get_prediction(x).conf_int(alpha=0.10),
    # upper edge (rising toward the ceiling)
    bound = _solve(lambda x: _band(res, x, 0.10)[1] - LIMIT, cross * 1e-6, cross)
    assert row["cross_bound"] == pytest.approx(bound, rel=RTOL)


def test_rising_group_points_away_from_a_floor(store: Path) -> None:
    # reference: statsmodels OLS without constant, params: the floor is met at a negative x
    assert FLOOR / _ols("rise").params[0] < 0
    row = _crossing(store, "floor").loc["rise"]
    assert row["side"] == "upper"  # `limit` follows the slope: a rising line's is a ceiling
    assert row["note"] == "past the limit at the latest x"


def test_exact_line_crosses_with_zero_width(crossing: pd.DataFrame) -> None:
    row = crossing.loc["exact"]
    # x / 16 = 3 at x = 48
    assert row["cross_x"] == row["cross_lo"] == row["cross_hi"] == row["cross_bound"] == 48.0
    # the data cover x 1 to 8: twice that period ends at 8 + 7 = 15, well before 48
    assert row["extrapolation_end"] == 15.0
    assert row["note"] == "extrapolated: beyond extrapolation_end (ICH Q1E rule)"


def test_unbounded_interval_at_a_high_level(store: Path) -> None:
    wide = _crossing(store, "wide")
    # noisy: |t| = 1.6 is below both the 99% two-sided and the 95% one-sided quantile
    # (reference: statsmodels OLS without constant, tvalues and pvalues)
    res = _ols("noisy")
    assert res.tvalues[0] == pytest.approx(1.6, rel=1e-9)
    assert ALPHA < res.pvalues[0] < WIDE_ALPHA
    row = wide.loc["noisy"]
    assert row["cross_x"] == pytest.approx(LIMIT / res.params[0], rel=RTOL)
    assert row[["cross_lo", "cross_hi"]].isna().all()
    # the one-sided bound still leaves the ceiling (|t| = 1.6 < t(0.95, 39)): the bound widens
    # faster than the line rises, so it meets the limit before the line does
    # reference: scipy.optimize.brentq on statsmodels get_prediction(x).conf_int(alpha=0.10)
    bound = _solve(lambda x: _band(res, x, 0.10)[1] - LIMIT, 1e-6, row["cross_x"])
    assert row["cross_bound"] == pytest.approx(bound, rel=RTOL)
    assert row["note"] == ("interval unbounded at level 0.99; extrapolated: beyond "
                           "extrapolation_end (ICH Q1E rule)")
    # mid: |t| = 2.2 lies between them: the bound is given, the 99% interval is not
    res = _ols("mid")
    assert res.tvalues[0] == pytest.approx(2.2, rel=1e-9)
    row = wide.loc["mid"]
    cross = LIMIT / res.params[0]
    assert row["cross_x"] == pytest.approx(cross, rel=RTOL)
    assert pd.isna(row["cross_lo"]) and pd.isna(row["cross_hi"])
    # reference: scipy.optimize.brentq on statsmodels get_prediction(x).conf_int(alpha=0.10),
    # upper edge (rising toward the ceiling)
    bound = _solve(lambda x: _band(res, x, 0.10)[1] - LIMIT, cross * 1e-6, cross)
    assert row["cross_bound"] == pytest.approx(bound, rel=RTOL)
    assert row["note"] == ("interval unbounded at level 0.99; extrapolated: beyond "
                           "extrapolation_end (ICH Q1E rule)")
