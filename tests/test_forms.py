"""Fits of a form of a column: ln, log10, sqrt and reciprocal of x or of y (sql/parts/forms.sql).

One store holds random groups with rows outside every form's domain, and one fit per form
and axis. Each fit is checked against statsmodels OLS on the same rows transformed in Python
with numpy: every column of the fit view, the points view's line and band
(OLSResults.get_prediction) mapped back to y's units, and the crossing view's ends (the roots
of the band's quadratic, from OLSResults.cov_params and scipy's Student t quantile) mapped
back to x's units. A simulation checks the coverage of the slope interval of ln(y) for a
first-order loss.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from trendledger import Ledger
from trendledger.errors import SpecError

from .conftest import Lab

LIMIT = 30.0
LEVEL = 0.95
ALPHA = 0.05
GROUPS = 120
# float64 both ways, different summation orders
RTOL = 1e-9
# quantiles and tails go through the Student t macros (about 13 significant digits)
T_RTOL = 1e-7

FORMS = ("ln", "log10", "sqrt", "reciprocal")
FORWARD = {"ln": np.log, "log10": np.log10, "sqrt": np.sqrt, "reciprocal": lambda v: 1.0 / v}
INSIDE = {"ln": lambda v: v > 0, "log10": lambda v: v > 0, "sqrt": lambda v: v >= 0,
          "reciprocal": lambda v: v != 0}
BACK = {"ln": np.exp, "log10": lambda u: 10.0 ** u, "sqrt": lambda u: u * u,
        "reciprocal": lambda u: 1.0 / u}

HEAD = """\
[source]
files = "in/{day}/{cell}.csv"

[source.columns]
cycle = "DOUBLE"
value = "DOUBLE"

[source.fields]
day = "DATE"
cell = "VARCHAR"
"""


def _fit(name: str, x: str, y: str) -> str:
    return (f'\n[[fit]]\nname = "{name}"\ngroup = ["cell"]\nx = "{x}"\ny = "{y}"\n'
            f'limit = {LIMIT}\nlevel = {LEVEL}\nalpha = {ALPHA}\nbend = "none"\n')


#: (fit name, x form, y form)
FITS = [*((f"y_{f}", None, f) for f in FORMS), *((f"x_{f}", f, None) for f in FORMS)]
SPEC_FORMS = HEAD + "".join(
    _fit(name, f"{xf}(cycle)" if xf else "cycle", f"{yf}(value)" if yf else "value")
    for name, xf, yf in FITS)


def _data() -> dict[str, list[tuple[float, float | None]]]:
    """Random groups: a falling value against cycle, with rows outside the forms' domains."""
    rng = np.random.default_rng(16)
    out: dict[str, list[tuple[float, float | None]]] = {}
    for g in range(GROUPS):
        n = int(rng.integers(3, 15))
        xs = np.arange(1.0, n + 1)
        if g % 5 == 0:
            xs = np.concatenate([[0.0], xs])  # x = 0: outside ln, log10 and reciprocal of x
        k = rng.uniform(0.02, 0.12)
        ys = 50.0 * np.exp(-k * xs + rng.normal(0, 0.03, xs.size))
        rows: list[tuple[float, float | None]] = [
            (float(x), float(y)) for x, y in zip(xs, ys, strict=True)]
        if g % 3 == 0:
            rows.append((float(n + 1), 0.0))  # outside ln, log10 and reciprocal of y
        if g % 4 == 0:
            rows.append((float(n + 2), -1.0))  # outside ln, log10 and sqrt of y
        if g % 7 == 0:
            rows.append((float(n + 3), None))  # missing: not counted as outside
        out[f"c{g:03d}"] = rows
    return out


DATA = _data()


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("forms") / "lab", SPEC_FORMS)
    for cell, rows in DATA.items():
        # two files per group on two days, so the stored sums are merged once
        half = len(rows) // 2
        for day, part in (("2026-03-02", rows[:half]), ("2026-03-03", rows[half:])):
            text = "cycle,value\n" + "".join(
                f"{x!r},{'' if y is None else repr(y)}\n" for x, y in part)
            lab.write(f"in/{day}/{cell}.csv", text)
    with lab.init() as led:
        led.append()
    return lab.store


@pytest.fixture(scope="module")
def views(store: Path) -> dict[str, dict[str, pd.DataFrame]]:
    out: dict[str, dict[str, pd.DataFrame]] = {}
    with Ledger.open(store, read_only=True) as led:
        for name, _, _ in FITS:
            out[name] = {v: led.fits(name, view=None if v == "fit" else v)
                         for v in ("fit", "points", "crossing", "full")}
    return out


def _rows(cell: str, xf: str | None, yf: str | None) -> tuple[np.ndarray, np.ndarray, int]:
    """The rows a fit counts, transformed with numpy, and how many a form leaves out."""
    x = np.array([r[0] for r in DATA[cell] if r[1] is not None], float)
    y = np.array([r[1] for r in DATA[cell] if r[1] is not None], float)
    keep = np.ones(x.size, bool)
    for form, v in ((xf, x), (yf, y)):
        if form:
            keep &= INSIDE[form](v)
    with np.errstate(divide="ignore", invalid="ignore"):
        tx = FORWARD[xf](x) if xf else x
        ty = FORWARD[yf](y) if yf else y
    return tx[keep], ty[keep], int((~keep).sum())


def _ols(tx: np.ndarray, ty: np.ndarray):
    return sm.OLS(ty, sm.add_constant(tx)).fit()


@pytest.mark.parametrize(("name", "xf", "yf"), FITS)
def test_fit_view_against_statsmodels(views, name: str, xf: str | None, yf: str | None) -> None:
    fit = views[name]["fit"].set_index("cell")
    assert len(fit) == GROUPS
    checked = 0
    for cell in DATA:
        tx, ty, outside = _rows(cell, xf, yf)
        row = fit.loc[cell]
        # the rows left out by the form, counted by numpy on the same rows
        assert row["n_outside"] == outside
        assert row["n"] == tx.size
        if tx.size < 3:
            assert row["status"] == "too_few_points"
            continue
        assert row["status"] == "ok"
        res = _ols(tx, ty)  # statsmodels OLS on the transformed rows
        lo, hi = res.conf_int(alpha=1 - LEVEL).T
        expected = {
            "x_min": tx.min(), "x_max": tx.max(),
            "intercept": res.params[0], "slope": res.params[1],
            "r2": res.rsquared, "r2_adj": res.rsquared_adj, "resid_sd": math.sqrt(res.scale),
            "intercept_se": res.bse[0], "slope_se": res.bse[1], "slope_t": res.tvalues[1],
            "intercept_lo": lo[0], "intercept_hi": hi[0], "slope_lo": lo[1], "slope_hi": hi[1],
        }
        for col, want in expected.items():
            assert row[col] == pytest.approx(want, rel=T_RTOL, abs=1e-12), (cell, col)
        assert row["slope_p"] == pytest.approx(res.pvalues[1], rel=1e-6, abs=1e-300), cell
        checked += 1
    assert checked >= 100
    # the stored sums (merged from two batches) give the full recompute's rows
    full = views[name]["full"].set_index("cell").loc[fit.index]
    pd.testing.assert_frame_equal(fit.drop(columns="n_outside"), full.drop(columns="n_outside"),
                                  rtol=1e-9, check_dtype=False)
    assert (fit["n_outside"] == full["n_outside"]).all()


@pytest.mark.parametrize(("name", "xf", "yf"), FITS)
def test_points_against_statsmodels(views, name: str, xf: str | None, yf: str | None) -> None:
    points = views[name]["points"]
    checked = 0
    for cell, rows in points.groupby("cell"):
        tx, ty, _ = _rows(str(cell), xf, yf)
        assert len(rows) == len(DATA[str(cell)])
        # the columns' own values, as stored
        raw = sorted((x, np.nan if y is None else y) for x, y in DATA[str(cell)])
        got = sorted(zip(rows["x_value"], rows["y_value"].fillna(np.nan), strict=True))
        np.testing.assert_allclose(np.array(got, float), np.array(raw, float), rtol=0)
        if tx.size < 3:
            continue
        res = _ols(tx, ty)
        on = rows[rows["x"].notna()].sort_values("x")
        exog = sm.add_constant(on["x"].to_numpy(float), has_constant="add")
        pred = res.get_prediction(exog)  # statsmodels: the mean line and its confidence band
        band = pred.conf_int(alpha=1 - LEVEL)
        np.testing.assert_allclose(on["y_line"], pred.predicted_mean, rtol=RTOL, atol=1e-12)
        np.testing.assert_allclose(on["y_line_lo"], band[:, 0], rtol=T_RTOL, atol=1e-12)
        np.testing.assert_allclose(on["y_line_hi"], band[:, 1], rtol=T_RTOL, atol=1e-12)
        # in y's own units: the line and band mapped back through y's form (ends swap for
        # reciprocal, which is decreasing)
        back = BACK[yf] if yf else (lambda u: u)
        lo_b, hi_b = back(band[:, 0]), back(band[:, 1])
        if yf == "reciprocal":
            lo_b, hi_b = hi_b, lo_b
            spans = (band[:, 0] <= 0) & (band[:, 1] >= 0)
            lo_b[spans] = np.nan
            hi_b[spans] = np.nan
        if yf == "sqrt":  # the values of y whose square root lies in the band
            lo_b = np.where(band[:, 1] >= 0, np.maximum(band[:, 0], 0) ** 2, np.nan)
            hi_b = np.where(band[:, 1] >= 0, hi_b, np.nan)
        fitted = back(pred.predicted_mean)
        if yf == "sqrt":  # a line below 0 is the square root of no value of y
            fitted = np.where(pred.predicted_mean >= 0, fitted, np.nan)
        np.testing.assert_allclose(on["y_fitted"].astype(float), fitted, rtol=RTOL, atol=1e-12)
        np.testing.assert_allclose(on["y_fitted_lo"].astype(float), lo_b, rtol=T_RTOL, atol=1e-12)
        np.testing.assert_allclose(on["y_fitted_hi"].astype(float), hi_b, rtol=T_RTOL, atol=1e-12)
        assert (on["y_fitted_lo"].dropna() <= on["y_fitted_hi"].dropna()).all()
        # the rows that count: residuals and leverages of statsmodels' fit
        counted = on[on["y"].notna()].sort_values(["x", "y"])
        order = np.lexsort((ty, tx))
        np.testing.assert_allclose(counted["residual"], res.resid[order], rtol=1e-7, atol=1e-12)
        infl = res.get_influence()  # statsmodels OLSInfluence
        np.testing.assert_allclose(counted["leverage"], infl.hat_matrix_diag[order], rtol=1e-9)
        checked += 1
    assert checked >= 100


def _fieller(res, limit: float, t: float) -> tuple[float, float] | None:
    """Roots of (a + b u - limit)^2 = t^2 var(a + b u), var from statsmodels' cov_params."""
    a, b = res.params
    v = res.cov_params()
    c = a - limit
    qa = b * b - t * t * v[1, 1]
    qb = 2 * (c * b - t * t * v[0, 1])
    qc = c * c - t * t * v[0, 0]
    if qa <= 0:
        return None
    disc = math.sqrt(qb * qb - 4 * qa * qc)
    return (-qb - disc) / (2 * qa), (-qb + disc) / (2 * qa)


@pytest.mark.parametrize(("name", "xf", "yf"), FITS)
def test_crossing_back_in_x_units(views, name: str, xf: str | None, yf: str | None) -> None:
    crossing = views[name]["crossing"].set_index("cell")
    fit = views[name]["fit"].set_index("cell")
    limit = float(FORWARD[yf](LIMIT)) if yf else LIMIT  # the limit on the fit's scale
    back = BACK[xf] if xf else (lambda u: u)
    forward = FORWARD[xf] if xf else (lambda v: v)
    checked = 0
    for cell in DATA:
        row = crossing.loc[cell]
        # every row with a crossing, its interval and its bound (a note may still say
        # 'extrapolated' or 'past the limit at the latest x': the numbers stand)
        if pd.isna(row["cross_x"]) or pd.isna(row["cross_lo"]) or pd.isna(row["cross_bound"]):
            continue
        tx, ty, _ = _rows(cell, xf, yf)
        res = _ols(tx, ty)
        a, b = res.params
        u = (limit - a) / b
        # round trip: x's form of cross_x is the crossing on the fit's scale, from the fit
        # view's own line (1e-12 relative)
        own = (limit - fit.loc[cell, "intercept"]) / fit.loc[cell, "slope"]
        assert float(forward(row["cross_x"])) == pytest.approx(own, rel=1e-12, abs=1e-12)
        assert row["cross_x"] == pytest.approx(float(back(u)), rel=1e-8)
        df = tx.size - 2
        ends = _fieller(res, limit, stats.t.ppf(1 - (1 - LEVEL) / 2, df))  # scipy Student t
        bound = _fieller(res, limit, stats.t.ppf(0.95, df))
        assert ends is not None and bound is not None
        lo, hi = float(back(ends[0])), float(back(ends[1]))
        near = float(back(bound[0]))
        if xf == "reciprocal":  # decreasing: the ends swap, the bound comes from the far end
            lo, hi, near = hi, lo, float(back(bound[1]))
        if xf == "sqrt":
            lo = max(ends[0], 0.0) ** 2
        assert row["cross_lo"] == pytest.approx(lo, rel=T_RTOL), cell
        assert row["cross_hi"] == pytest.approx(hi, rel=T_RTOL), cell
        assert row["cross_bound"] == pytest.approx(near, rel=T_RTOL), cell
        # interval ends in order, the crossing inside, for every form
        assert row["cross_lo"] <= row["cross_x"] <= row["cross_hi"]
        checked += 1
    assert checked >= 20, checked


def test_coverage_of_a_first_order_rate(tmp_path: Path) -> None:
    """y = y0 exp(-k t) with multiplicative (log-normal) noise: the 95% interval of the
    slope of ln(y) holds -k in at least 93% of 500 replicates (coverage, by simulation; the
    binomial standard error at 95% of 500 is about 1%)."""
    k, y0, reps = 0.02, 100.0, 500
    spec = HEAD + _fit("decay", "cycle", "ln(value)")
    lab = Lab(tmp_path / "lab", spec)
    rng = np.random.default_rng(1601)
    t = np.array([0.0, 3, 6, 9, 12, 18, 24, 36])
    for r in range(reps):
        y = y0 * np.exp(-k * t) * np.exp(rng.normal(0, 0.05, t.size))
        lab.write(f"in/2026-03-02/r{r:03d}.csv",
                  "cycle,value\n" + "".join(f"{float(a)!r},{float(b)!r}\n"
                                            for a, b in zip(t, y, strict=True)))
    with lab.init() as led:
        led.append()
        fit = led.fits("decay")
    assert len(fit) == reps
    covered = ((fit["slope_lo"] <= -k) & (-k <= fit["slope_hi"])).mean()
    assert covered >= 0.93, covered


@pytest.mark.parametrize(("y", "says"), [
    ("ln(value) + 1", "allowed forms"),
    ("exp(value)", "allowed forms"),
    ("ln(value, cycle)", "allowed forms"),
    ("ln(cycle * value)", "allowed forms"),
    ("log(value)", "allowed forms"),
    ("ln(nothing)", "'nothing' is not a declared column"),
])
def test_refusals(tmp_path: Path, y: str, says: str) -> None:
    lab = Lab(tmp_path / "lab", HEAD + _fit("bad", "cycle", y))
    with pytest.raises(SpecError) as err:
        lab.init()
    text = str(err.value)
    assert says in text and "\n" not in text
    if says == "allowed forms":
        assert "ln(column), log10(column), sqrt(column), reciprocal(column)" in text
    assert not lab.store.exists()


def test_limit_outside_the_form_is_refused(tmp_path: Path) -> None:
    spec = HEAD + _fit("bad", "cycle", "ln(value)").replace(f"limit = {LIMIT}", "limit = 0")
    lab = Lab(tmp_path / "lab", spec)
    with pytest.raises(SpecError, match=r"limit = 0 is given in value's own units"):
        lab.init()


def test_sided_limits_on_a_form_of_y_are_refused(tmp_path: Path) -> None:
    # reciprocal(y) turns a floor into a ceiling and a fraction of the start means something
    # else on the fit's scale: a form of y takes `limit` only, said in one line
    for side in ('lower = 2.0', 'upper = { fraction = 0.8, of = "start" }'):
        spec = HEAD + _fit("bad", "cycle", "reciprocal(value)").replace(
            f"limit = {LIMIT}", side)
        lab = Lab(tmp_path / side[:5], spec)
        with pytest.raises(SpecError, match=r"takes `limit`") as err:
            lab.init()
        assert "\n" not in str(err.value) and not lab.store.exists()


def test_report_draws_the_fit_scale_and_names_it(tmp_path: Path) -> None:
    spec = HEAD + _fit("decay", "cycle", "ln(value)")
    lab = Lab(tmp_path / "lab", spec)
    rng = np.random.default_rng(7)
    for cell in ("a", "b"):
        t = np.arange(0.0, 30.0, 2.0)
        y = 50.0 * np.exp(-0.04 * t + rng.normal(0, 0.01, t.size))
        lab.write(f"in/2026-03-02/{cell}.csv", "cycle,value\n" + "".join(
            f"{float(a)!r},{float(b)!r}\n" for a, b in zip(t, y, strict=True)))
    with lab.init() as led:
        led.append()
        page = led.report("decay", out=tmp_path / "report", groups=["a"])
        crossing = led.fits("decay", view="crossing").set_index("cell")
    text = page.read_text(encoding="utf-8")
    assert "ln(value) against cycle" in text
    # the table gives the crossing in cycle's own units, as the crossing view does
    assert f"{crossing.loc['a', 'cross_x']:.4g}"[:4] in text
    assert "the crossings below are in cycle's own units" in text


def test_changing_the_form_is_a_recorded_spec_change(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", HEAD + _fit("decay", "cycle", "value"))
    rows = [(float(t), 50.0 * math.exp(-0.03 * t) * (1 + 0.01 * (-1) ** int(t)))
            for t in range(12)]
    lab.write("in/2026-03-02/a.csv", "cycle,value\n" + "".join(f"{a!r},{b!r}\n" for a, b in rows))
    with lab.init() as led:
        led.append()
    lab.spec.write_text(HEAD + _fit("decay", "cycle", "ln(value)"), encoding="utf-8")
    with lab.open() as led:
        change = led.update_spec(lab.spec, note="first-order loss")
        fit = led.fits("decay")
    assert change.changed_fits == ["decay"]
    # statsmodels OLS of ln(value) on the same rows
    res = sm.OLS(np.log([b for _, b in rows]), sm.add_constant([a for a, _ in rows])).fit()
    assert fit["slope"].iloc[0] == pytest.approx(res.params[1], rel=1e-9)
    with lab.open(read_only=True) as led:
        history = led.con.execute(
            "SELECT spec, note FROM tl_spec_history ORDER BY version").fetchall()
        assert led.spec.fit("decay").shown("y") == "ln(value)"
    # the stored spec keeps both choices, the change with its note
    assert 'y = "value"' in history[0][0] and 'y = "ln(value)"' in history[-1][0]
    assert history[-1][1] == "first-order loss"
