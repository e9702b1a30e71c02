"""Limits on both sides, relative limits, the conservative bound and the extrapolation rule.

sql/views/crossing.sql gives one row per unit and side; sql/views/alerts.sql raises
out_of_limits (the line that holds now is past a limit at the latest x) and crossing_soon (the
one-sided 95% bound meets a limit within the horizon). References: statsmodels OLS and
get_prediction(...).conf_int for the bands, scipy.optimize.brentq for where a band meets a limit,
numpy for the first readings, and the ICH Q1E extrapolation rule on worked numbers.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize

from trendledger import Ledger, SpecError
from trendledger.spec import Limit, parse

from .conftest import SPEC, Lab

RTOL = 1e-8


def _spec(extra: str) -> str:
    return SPEC + extra


# --- spec ---------------------------------------------------------------------------------------


def test_spec_reads_both_sides_absolute_or_relative() -> None:
    fit = parse(_spec('lower = { fraction = 0.8, of = "start" }\nupper = 3.5\n'
                      "extrapolation_cap = 12\n")).fit("fade")
    assert fit.lower == Limit(fraction=0.8)
    assert fit.upper == Limit(value=3.5)
    assert fit.limit is None and fit.extrapolation_cap == 12.0


@pytest.mark.parametrize(("extra", "words"), [
    ("limit = 2.4\nlower = 2.0\n", "give limit (the side the slope points to) or lower/upper"),
    ("lower = { fraction = 0.8 }\n", 'of = \\"start\\"'),
    ('lower = { fraction = -1, of = "start" }\n', "a positive fraction"),
    ('lower = { fraction = 0.8, of = "start", by = 1 }\n', "unknown key 'by'"),
    ("lower = 3.0\nupper = 2.0\n", "lower must be below upper"),
    ('upper = "high"\n', "upper must be a number"),
    ("lower = 1\nextrapolation_cap = 0\n", "extrapolation_cap must be positive"),
])
def test_spec_refuses_bad_limits(extra: str, words: str) -> None:
    with pytest.raises(SpecError) as err:
        parse(_spec(extra), path="spec.toml")
    assert words.replace('\\"', '"') in str(err.value)


# --- a fleet of sensors with a two-sided tolerance --------------------------------------------


def _ols(x: np.ndarray, y: np.ndarray):
    return sm.OLS(y, sm.add_constant(x)).fit()


def _edge(res, at: float, side: str) -> float:
    """statsmodels get_prediction: the one-sided 95% bound of the mean line at x (the two-sided
    90% band's lower edge for a floor, upper edge for a ceiling)."""
    lo, hi = res.get_prediction(np.array([[1.0, at]])).conf_int(alpha=0.10)[0]
    return float(lo if side == "lower" else hi)


def _sensors() -> dict[str, list[tuple[int, float]]]:
    rng = np.random.default_rng(18)
    xs = np.arange(0, 60)

    def pairs(y: np.ndarray) -> list[tuple[int, float]]:
        return list(zip(xs.tolist(), [float(v) for v in y], strict=True))

    return {
        # drifted below the floor -0.5 long ago: reads about -1.0 at the end
        "sunk": pairs(-0.017 * xs + rng.normal(0, 0.02, xs.size)),
        # rising toward the ceiling 0.5: the line meets it near x = 71, the bound sooner
        "rising": pairs(0.007 * xs + rng.normal(0, 0.02, xs.size)),
        # flat and noisy, well inside both limits
        "flat": pairs(rng.normal(0, 0.05, xs.size)),
    }


@pytest.fixture(scope="module")
def sensors(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("sensors") / "lab",
              _spec("lower = -0.5\nupper = 0.5\nhorizon = 30\n"))
    lab.series(_sensors(), per_day=10)
    with lab.init() as led:
        led.append()
    return lab.store


def test_crossing_has_a_row_per_unit_and_side(sensors: Path) -> None:
    with Ledger.open(sensors, read_only=True) as led:
        crossing = led.fits("fade", view="crossing")
    assert sorted(zip(crossing["cell"], crossing["side"], strict=True)) == [
        (c, s) for c in ("flat", "rising", "sunk") for s in ("lower", "upper")]
    assert set(crossing.loc[crossing["side"] == "lower", "limit_value"]) == {-0.5}
    sunk = crossing.set_index(["cell", "side"]).loc[("sunk", "lower")]
    assert bool(sunk["past"]) and sunk["note"] == "past the limit at the latest x"
    x = np.arange(0, 60, dtype=float)
    res = _ols(x, np.array([y for _, y in _sensors()["sunk"]]))
    # reference: statsmodels OLS params, the line at the latest x and where it met -0.5
    assert sunk["line_at_latest"] == pytest.approx(res.params[0] + res.params[1] * 59, rel=RTOL)
    assert sunk["cross_x"] == pytest.approx((-0.5 - res.params[0]) / res.params[1], rel=RTOL)


@pytest.mark.parametrize(("cell", "side"), [("rising", "upper"), ("sunk", "lower"),
                                            ("flat", "lower"), ("flat", "upper")])
def test_bound_against_statsmodels(sensors: Path, cell: str, side: str) -> None:
    with Ledger.open(sensors, read_only=True) as led:
        row = led.fits("fade", view="crossing").set_index(["cell", "side"]).loc[(cell, side)]
    x = np.arange(0, 60, dtype=float)
    res = _ols(x, np.array([y for _, y in _sensors()[cell]]))
    limit = -0.5 if side == "lower" else 0.5
    # the bound is inside the limit at the first x (sunk) or the data's centre and leaves it at
    # cross_bound, where the one-sided 95% bound (statsmodels get_prediction, alpha 0.10)
    # equals the limit; reference: scipy.optimize.brentq on that bound
    start, stop = (0.0, 59.0) if cell == "sunk" else (29.5, 1e7)
    bound = optimize.brentq(lambda at: _edge(res, at, side) - limit, start, stop, xtol=1e-9)
    assert row["cross_bound"] == pytest.approx(bound, rel=1e-7)
    if cell == "flat":
        # slope not significant (statsmodels pvalues): the bound is still given
        assert res.pvalues[1] > 0.01
        assert "slope not significant at alpha 0.01" in row["note"]
        assert "extrapolated: beyond extrapolation_end (ICH Q1E rule)" in row["note"]


def test_alerts_per_side(sensors: Path) -> None:
    with Ledger.open(sensors, read_only=True) as led:
        alerts = led.watch("fade")
    pairs = sorted(zip(alerts["cell"], alerts["reason"], strict=True))
    limit_pairs = [p for p in pairs if p[1] in ("out_of_limits", "crossing_soon")]
    assert limit_pairs == [("rising", "crossing_soon"), ("sunk", "out_of_limits")]
    detail = dict(zip(alerts["cell"] + alerts["reason"], alerts["detail"], strict=True))
    assert detail["sunkout_of_limits"].endswith("below the lower limit -0.5")
    assert detail["risingcrossing_soon"].startswith(
        "the one-sided 95% bound meets the upper limit 0.5 at x = ")


def test_legacy_limit_is_the_side_the_slope_points_to(tmp_path: Path) -> None:
    # a floor given as `limit` on a sensor already below it: out_of_limits, not a crossing to
    # come, and not 'slope points away'
    lab = Lab(tmp_path / "lab", _spec("limit = -0.5\nhorizon = 30\n"))
    lab.series({"sunk": _sensors()["sunk"]}, per_day=10)
    with lab.init() as led:
        led.append()
        crossing = led.fits("fade", view="crossing")
        alerts = led.watch("fade")
    assert list(crossing["side"]) == ["lower"]
    assert "out_of_limits" in set(alerts["reason"])
    assert "crossing_soon" not in set(alerts["reason"])


# --- relative limits ----------------------------------------------------------------------------


def test_limit_relative_to_the_first_reading(tmp_path: Path) -> None:
    rng = np.random.default_rng(80)
    cells = {}
    for i, start in enumerate((3.05, 2.9)):
        xs = np.repeat(np.arange(0, 40), 2)  # two readings per cycle, the first x included
        cells[f"c{i}"] = [(int(x), float(start - 0.012 * x + rng.normal(0, 0.01)))
                          for x in xs]
    lab = Lab(tmp_path / "lab", _spec('lower = { fraction = 0.8, of = "start" }\n'
                                      "horizon = 40\n"))
    lab.series(cells, per_day=8)
    with lab.init() as led:
        led.append()
        crossing = led.fits("fade", view="crossing").set_index("cell")
    for cell, rows in cells.items():
        x = np.array([r[0] for r in rows], dtype=float)
        y = np.array([r[1] for r in rows])
        start = float(y[x == x.min()].mean())  # numpy: the mean of the readings at the first x
        row = crossing.loc[cell]
        assert row["start_y"] == pytest.approx(start, rel=1e-12)
        assert row["limit_value"] == pytest.approx(0.8 * start, rel=1e-12)
        res = _ols(x, y)
        # reference: scipy.optimize.brentq on statsmodels get_prediction(...).conf_int(0.10)
        bound = optimize.brentq(lambda at, r=res, s=start: _edge(r, at, "lower") - 0.8 * s,
                                39, 1000, xtol=1e-10)
        assert row["cross_bound"] == pytest.approx(bound, rel=1e-7)


# --- the ICH Q1E extrapolation rule -------------------------------------------------------------

# Worked numbers from the guideline's text (ICH Q1E, Appendix A, from memory): where long-term
# data show little change, a shelf life may be extrapolated to up to twice the period covered
# by long-term data, but not more than 12 months beyond it: 12 months of data support up to 24,
# 18 months up to 30 (not 36).
@pytest.mark.parametrize(("months", "cap", "end"), [
    (12, 12.0, 24.0), (18, 12.0, 30.0), (18, None, 36.0), (6, 12.0, 12.0)])
def test_extrapolation_rule(tmp_path: Path, months: int, cap: float | None, end: float) -> None:
    pulls = [m for m in (0, 3, 6, 9, 12, 18) if m <= months]
    rng = np.random.default_rng(months)
    rows = [(m, float(100.0 - 0.1 * m + rng.normal(0, 0.3))) for m in pulls for _ in range(3)]
    extra = "lower = 95\n" + (f"extrapolation_cap = {cap}\n" if cap else "")
    lab = Lab(tmp_path / "lab", _spec(extra))
    lab.series({"lot1": rows}, per_day=3)
    with lab.init() as led:
        led.append()
        row = led.fits("fade", view="crossing").iloc[0]
    assert row["extrapolation_end"] == end
    note = row["note"] or ""
    projection = row["cross_bound"] if pd.notna(row["cross_bound"]) else row["cross_x"]
    assert ("extrapolated" in note) is bool(pd.notna(projection) and projection > end)


# --- fleet-wide error control -------------------------------------------------------------------

UNITS = 240
CHANGED = ("u000", "u001", "u002", "u003", "u004", "u005")


def _fleet() -> dict[str, list[tuple[int, float]]]:
    """240 straight noisy units, 30 readings each; six of them change slope in the last 10."""
    rng = np.random.default_rng(1995)
    xs = np.arange(0, 30)
    out = {}
    for i in range(UNITS):
        name = f"u{i:03d}"
        y = 3.0 - 0.002 * xs + rng.normal(0, 0.01, xs.size)
        if name in CHANGED:
            y = y - 0.02 * np.clip(xs - 19, 0, None)  # a steeper fall in the last window
        out[name] = list(zip(xs.tolist(), [float(v) for v in y], strict=True))
    return out


@pytest.fixture(scope="module")
def fleet(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = ("window_x = 10\nalpha_change = 0.05\nalpha_outliers = 0.05\nbend = \"none\"\n")
    spec = (_spec(base) + SPEC[SPEC.index("[[fit]]"):].replace('"fade"', '"perunit"')
            + base + 'error_control = "unit"\n')
    lab = Lab(tmp_path_factory.mktemp("fleet") / "lab", spec)
    lab.series(_fleet(), per_day=30)
    with lab.init() as led:
        led.append()
    return lab.store


def test_benjamini_hochberg_against_statsmodels(fleet: Path) -> None:
    from statsmodels.stats.multitest import multipletests

    with Ledger.open(fleet, read_only=True) as led:
        change = led.fits("fade", view="change").dropna(subset=["difference_p"])
        alerts = led.watch("fade")
        per_unit = led.watch("perunit")
    assert len(change) == UNITS
    # reference: statsmodels.stats.multitest.multipletests(method="fdr_bh")
    reject, adjusted, _, _ = multipletests(change["difference_p"], alpha=0.05, method="fdr_bh")
    expected = dict(zip(change["cell"], adjusted, strict=True))
    changed = alerts[alerts["reason"] == "slope_changed"]
    assert set(changed["cell"]) == set(change["cell"][reject])
    assert set(CHANGED) <= set(changed["cell"])
    for cell, detail in zip(changed["cell"], changed["detail"], strict=True):
        assert f", {expected[cell]:.2g} adjusted over {UNITS} units (Benjamini-Hochberg)" in detail
    # false alarms among the 234 straight units: per unit, within the binomial band at 0.05
    # (scipy binom, two-sided 99.9 %); together, about none (BH holds the false discovery
    # rate at 0.05: under the complete null the chance of any false alarm is at most 0.05)
    from scipy import stats

    straight = UNITS - len(CHANGED)
    lo, hi = stats.binom.ppf([0.0005, 0.9995], straight, 0.05)
    false_unit = set(per_unit.loc[per_unit["reason"] == "slope_changed", "cell"]) - set(CHANGED)
    assert lo <= len(false_unit) <= hi
    false_fdr = set(changed["cell"]) - set(CHANGED)
    assert len(false_fdr) <= 1
    outliers_unit = (per_unit["reason"] == "outliers").sum()
    outliers_fdr = (alerts["reason"] == "outliers").sum()
    assert lo <= outliers_unit <= hi and outliers_fdr <= 1


# --- out-of-trend readings ----------------------------------------------------------------------


def _pulls(rng: np.random.Generator, low: float = 0.0) -> list[tuple[int, float]]:
    """A stability lot: assay (%) at months 0 to 18, three readings a pull; the last pull
    (month 21) is ``low`` below the line."""
    rows = [(m, float(100.0 - 0.12 * m + rng.normal(0, 0.15)))
            for m in (0, 3, 6, 9, 12, 18) for _ in range(3)]
    return rows + [(21, float(100.0 - 0.12 * 21 - low + rng.normal(0, 0.15)))]


def _two_batches(lab: Lab, lots: dict[str, list[tuple[int, float]]]) -> None:
    """Every reading but each lot's last in one batch, the last readings in a second."""
    lab.series({k: v[:-1] for k, v in lots.items()}, per_day=100)
    with lab.init() as led:
        led.append()
    for lot, rows in lots.items():
        x, y = rows[-1]
        lab.write(f"incoming/2026-09-01/{lot}.csv", f"cycle,capacity_ah\n{x},{y!r}\n")
    with lab.open() as led:
        led.append()


@pytest.fixture(scope="module")
def lots(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    rng = np.random.default_rng(1802)
    data = {f"lot{i:03d}": _pulls(rng) for i in range(220)}
    data["lowpull"] = _pulls(rng, low=1.8)  # a pull 1.8 % low
    lab = Lab(tmp_path_factory.mktemp("lots") / "lab",
              _spec('alpha_trend = 0.05\nbend = "none"\n')
              + SPEC[SPEC.index("[[fit]]"):].replace('"fade"', '"perunit"')
              + 'alpha_trend = 0.05\nbend = "none"\nerror_control = "unit"\n')
    _two_batches(lab, data)
    return lab.store, data


def test_prediction_interval_against_statsmodels(lots: tuple[Path, dict]) -> None:
    store, data = lots
    with Ledger.open(store, read_only=True) as led:
        trend = led.fits("fade", view="trend").set_index("cell")
    assert len(trend) == len(data)
    for lot in ("lot000", "lot001", "lowpull"):
        rows = data[lot]
        x = np.array([r[0] for r in rows[:-1]], dtype=float)
        y = np.array([r[1] for r in rows[:-1]])
        res = _ols(x, y)
        pred = res.get_prediction(np.array([[1.0, rows[-1][0]]]))
        # reference: statsmodels get_prediction(...).conf_int(obs=True) on the earlier rows
        lo, hi = pred.conf_int(obs=True, alpha=0.05)[0]
        row = trend.loc[lot]
        assert row["n_before"] == len(x)
        assert row["y_before"] == pytest.approx(pred.predicted_mean[0], rel=1e-10)
        assert (row["pred_lo"], row["pred_hi"]) == pytest.approx((lo, hi), rel=1e-10)
        # reference: scipy.stats.t two-sided p of the standardised prediction error
        from scipy import stats

        se = math_sqrt(pred.se_mean[0] ** 2 + res.scale)
        t = (rows[-1][1] - pred.predicted_mean[0]) / se
        assert row["trend_p"] == pytest.approx(2 * stats.t.sf(abs(t), res.df_resid), rel=1e-6)
    assert bool(trend.loc["lowpull", "outside"])


def math_sqrt(v: float) -> float:
    return float(np.sqrt(v))


def test_out_of_trend_alerts(lots: tuple[Path, dict]) -> None:
    from scipy import stats
    from statsmodels.stats.multitest import multipletests

    store, data = lots
    with Ledger.open(store, read_only=True) as led:
        trend = led.fits("fade", view="trend")
        fdr = led.watch("fade")
        unit = led.watch("perunit")
    fdr_hits = set(fdr.loc[fdr["reason"] == "out_of_trend", "cell"])
    unit_hits = set(unit.loc[unit["reason"] == "out_of_trend", "cell"])
    assert "lowpull" in fdr_hits and "lowpull" in unit_hits
    # reference: statsmodels multipletests(method="fdr_bh") on the trend view's p-values
    reject = multipletests(trend["trend_p"], alpha=0.05, method="fdr_bh")[0]
    assert fdr_hits == set(trend["cell"][reject])
    # 220 lots on their line: per unit about 5 % false alarms, within the binomial band
    # (scipy binom, two-sided 99.9 %); together about none
    lo, hi = stats.binom.ppf([0.0005, 0.9995], 220, 0.05)
    assert lo <= len(unit_hits - {"lowpull"}) <= hi
    assert len(fdr_hits - {"lowpull"}) <= 1


# --- a straight line, or not --------------------------------------------------------------------


def test_straight_view_against_statsmodels_and_no_alarm_for_a_flat_unit(tmp_path: Path) -> None:
    rng = np.random.default_rng(2)
    xs = np.arange(0, 50)
    cells = {
        "flat": [(int(x), float(3.0 + rng.normal(0, 0.05))) for x in xs],  # r2 near 0
        "curve": [(int(x), float(3.0 - 0.0004 * x * x + rng.normal(0, 0.01))) for x in xs],
        "line": [(int(x), float(3.0 - 0.01 * x + rng.normal(0, 0.01))) for x in xs],
    }
    lab = Lab(tmp_path / "lab", _spec('lower = 2.0\nupper = 4.0\nhorizon = 10\n'
                                      'error_control = "unit"\nbend = "none"\n'))
    lab.series(cells, per_day=10)
    with lab.init() as led:
        led.append()
        straight = led.fits("fade", view="straight").set_index("cell")
        fits = led.fits("fade").set_index("cell")
        alerts = led.watch("fade")
    for cell, rows in cells.items():
        x = np.array([r[0] for r in rows], dtype=float)
        y = np.array([r[1] for r in rows])
        # reference: statsmodels OLS of y on 1, x, x^2: the t value and p of the x^2 term
        res = sm.OLS(y, np.column_stack([np.ones_like(x), x, x * x])).fit()
        row = straight.loc[cell]
        assert row["curvature"] == pytest.approx(res.params[2], rel=1e-7)
        assert row["curvature_t"] == pytest.approx(res.tvalues[2], rel=1e-7)
        assert row["curvature_p"] == pytest.approx(res.pvalues[2], rel=1e-6)
    assert fits.loc["flat", "r2"] < 0.1
    reasons = set(zip(alerts["cell"], alerts["reason"], strict=True))
    assert ("curve", "not_straight") in reasons
    assert not {r for r in reasons if r[0] in ("flat", "line")}  # the flat unit raises nothing


def test_straight_units_raise_about_no_not_straight(fleet: Path) -> None:
    # the 240-unit fleet above: 234 straight units; per unit at the fit's alpha 0.01 about 2
    # false alarms (binomial band, scipy), together about none
    from scipy import stats

    with Ledger.open(fleet, read_only=True) as led:
        fdr = led.watch("fade")
        unit = led.watch("perunit")
    lo, hi = stats.binom.ppf([0.0005, 0.9995], UNITS - len(CHANGED), 0.01)
    unit_hits = set(unit.loc[unit["reason"] == "not_straight", "cell"]) - set(CHANGED)
    assert lo <= len(unit_hits) <= hi
    assert len(set(fdr.loc[fdr["reason"] == "not_straight", "cell"]) - set(CHANGED)) <= 1
    assert "low_r2" not in set(fdr["reason"])  # min_r2 is unset


# --- rounded data -------------------------------------------------------------------------------


def test_resolution_floors_the_residual_sd(tmp_path: Path) -> None:
    spec = SPEC.replace('format = "csv"', 'format = "csv"\nresolution = { capacity_ah = 0.01 }')
    rng = np.random.default_rng(7)
    cells = {
        # values rounded to 2 decimals that happen to lie on a line
        "rounded": [(x, round(3.0 - 0.01 * x, 2)) for x in range(20)],
        # noise well above the rounding: the floor changes nothing
        "noisy": [(x, round(3.0 - 0.01 * x + float(rng.normal(0, 0.05)), 2)) for x in range(20)],
    }
    lab = Lab(tmp_path / "lab", spec)
    lab.series(cells, per_day=5)
    with lab.init() as led:
        led.append()
        fits = led.fits("fade").set_index("cell")
    floor = 0.01 / np.sqrt(12)  # Sheppard's correction: the sd of a uniform rounding error
    row = fits.loc["rounded"]
    assert row["status"] == "ok"
    assert row["resid_sd"] == pytest.approx(floor, rel=1e-12)
    x = np.arange(20.0)
    # numpy: the slope's standard error with that residual sd, s / sqrt(sxx)
    assert row["slope_se"] == pytest.approx(floor / np.sqrt(((x - x.mean()) ** 2).sum()),
                                            rel=1e-10)
    assert row["slope_lo"] < row["slope"] < row["slope_hi"]
    # reference: statsmodels OLS, the residual sd sqrt(scale) of the noisy cell
    res = _ols(x, np.array([y for _, y in cells["noisy"]]))
    assert res.scale > floor ** 2
    assert fits.loc["noisy", "resid_sd"] == pytest.approx(np.sqrt(res.scale), rel=1e-9)


def test_spec_refuses_a_bad_resolution() -> None:
    for bad, words in (("{ capacity = 0.01 }", "not a declared column"),
                       ("{ capacity_ah = 0 }", "must be a positive number"),
                       ("0.01", "must be a table")):
        with pytest.raises(SpecError) as err:
            parse(SPEC.replace('format = "csv"', f'format = "csv"\nresolution = {bad}'))
        assert words in str(err.value)


# --- data order and silent units ----------------------------------------------------------------


def test_x_went_back_and_latest_x_in_time(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", _spec("silent_after = 2\n"))

    def day(name: str, cells: dict[str, range]) -> None:
        # a straight line with a small alternating wobble: nothing else to find in it
        lab.day(name, {c: [(x, 3.0 - 0.01 * x + 0.002 * (-1) ** x) for x in xs]
                       for c, xs in cells.items()})

    day("2026-03-02", {"reset": range(0, 10), "steady": range(0, 10), "quiet": range(0, 10)})
    with lab.init() as led:
        led.append()
    day("2026-03-03", {"reset": range(10, 20), "steady": range(10, 20)})
    with lab.open() as led:
        led.append()
    # the counter of 'reset' starts again from 0 on the third day
    day("2026-03-04", {"reset": range(0, 4), "steady": range(20, 24)})
    with lab.open() as led:
        led.append()
        alerts = led.watch("fade")
    reasons = {(c, r): d for c, r, d in zip(alerts["cell"], alerts["reason"], alerts["detail"],
                                             strict=True)}
    assert reasons[("reset", "x_went_back")] == (
        "x went back 1 time(s) from one reading to the next in time, e.g. from 19 to 0 "
        "(a counter reset?)")
    latest = dict(zip(alerts["cell"], alerts["latest_x"], strict=True))
    assert latest["reset"] == 3.0  # the latest reading's x, not the largest (19)
    # quiet sent nothing in the last two batches that brought readings to the fit
    assert reasons[("quiet", "silent")].startswith("no readings in the last 2 batch(es)")
    assert not [(c, r, d) for (c, r), d in reasons.items() if c == "steady"], reasons
    # the silent unit, the most severe, comes first; then the counter reset
    assert list(alerts["cell"])[:2] == ["quiet", "reset"]
