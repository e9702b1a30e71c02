"""The per-group regression view, sql/views/fit.sql, with its line with an intercept and through
the origin (sql/parts/line_intercept.sql, line_origin.sql; the variants "fit" and "fit_origin").

Each test builds a small DuckDB store in a temporary folder: a ``measurements`` table, the
Student t macros from sql/macros/t_dist.sql and a view rendered from the template, then
reads the view as any client would. Accuracy is shown as LRE, the number of correct
significant digits, -log10(|estimate - reference| / |reference|), capped at 15.
"""

from __future__ import annotations

import math
import shutil
import subprocess
import sys
from decimal import Decimal, localcontext
from fractions import Fraction
from pathlib import Path

import duckdb
import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from sqlglot import exp

from trendledger.views import templates
from trendledger.views.templates import Fragment, Part

from . import strd
from .conftest import nist_dir

COLUMNS = [
    "n", "x_min", "x_max", "slope", "intercept", "r2", "r2_adj", "resid_sd", "slope_se",
    "intercept_se", "slope_t", "slope_p", "slope_lo", "slope_hi", "intercept_lo",
    "intercept_hi", "status", "n_outside",
]
STATISTICS = COLUMNS[3:-2]
DIGITS = 50  # decimal digits for the exact references' square roots
# Relative tolerance of p-values and confidence limits, which carry the Student t macros of
# sql/macros/t_dist.sql (stated there as good to about 13 significant digits).
T_RTOL = 1e-9
# The template of the sums a fit view reads: the two-pass moments over every row.
MOMENTS = "moments_full"


# --- a store to test in -------------------------------------------------------------------


def open_store(path: Path, config: dict[str, str] | None = None) -> duckdb.DuckDBPyConnection:
    """A DuckDB file with an empty measurements table and the t macros installed."""
    con = duckdb.connect(str(path), config=config or {})
    con.execute(
        "CREATE TABLE measurements (cell VARCHAR, x DOUBLE, y DOUBLE, file_id BIGINT)"
    )
    for statement in templates.load("macros/t_dist.sql").render({}):
        con.execute(statement)
    return con


def create_view(
    con: duckdb.DuckDBPyConnection,
    file: str = "fit",
    *,
    view: str = "fit_test",
    group: tuple[str, ...] = ("cell",),
    level: float = 0.95,
) -> str:
    origin = file == "fit_origin"
    values = {"view": view, "source": "measurements", "group": list(group), "x": "x", "y": "y",
              "level": level, "moments_view": f"{view}_moments", "key": list(group),
              # no form of x or y: no row is outside a form's domain
              "outside": exp.false(),
              "line": Part("line_origin" if origin else "line_intercept"),
              "line_stats": Fragment("fragments/line_stats.sql"),
              "sums": Fragment(f"fragments/sums_{'origin' if origin else 'intercept'}.sql"),
              "y_resolution_or_null": None}  # no recorded step: the data's own residual sd
    # the fit reads the sums of a moments view (moments_full.sql, summing about the origin for a
    # fit through it)
    for statement in templates.load(f"views/{MOMENTS}.sql").render(
            {**values, "view": f"{view}_moments"}):
        con.execute(statement)
    for statement in templates.load("views/fit.sql").render(values):
        con.execute(statement)
    return view


def insert(con: duckdb.DuckDBPyConnection, rows: list[tuple]) -> None:
    """Append (cell, x, y) or (cell, x, y, file_id) rows; None, NaN and inf pass through."""
    if not rows:
        return
    cells, xs, ys, files = zip(*(row if len(row) == 4 else (*row, 1) for row in rows),
                               strict=True)
    con.execute(
        "INSERT INTO measurements SELECT unnest(?::VARCHAR[]), unnest(?::DOUBLE[]), "
        "unnest(?::DOUBLE[]), unnest(?::BIGINT[])",
        [list(cells), [_float(v) for v in xs], [_float(v) for v in ys], list(files)],
    )


def _float(value) -> float | None:
    return None if value is None else float(value)


def insert_groups(con: duckdb.DuckDBPyConnection, groups: dict) -> None:
    insert(con, [(cell, x, y) for cell, (xs, ys) in groups.items()
                 for x, y in zip(xs, ys, strict=True)])


def fetch(con: duckdb.DuckDBPyConnection, view: str) -> dict[object, dict[str, object]]:
    """The view's rows keyed by the (single) group column."""
    cur = con.execute(f'SELECT * FROM "{view}"')
    names = [d[0] for d in cur.description]
    return {row[0]: dict(zip(names, row, strict=True)) for row in cur.fetchall()}


@pytest.fixture
def con(tmp_path: Path):
    connection = open_store(tmp_path / "fit.duckdb")
    yield connection
    connection.close()


# --- exact references and digits ----------------------------------------------------------


def to_decimal(value: float | Fraction | Decimal) -> Decimal:
    with localcontext() as ctx:
        ctx.prec = DIGITS
        if isinstance(value, Fraction):
            return Decimal(value.numerator) / Decimal(value.denominator)
        return +Decimal(value)


def sqrt_exact(value: Fraction) -> Decimal:
    with localcontext() as ctx:
        ctx.prec = DIGITS
        return to_decimal(value).sqrt()


def lre(estimate: float, reference: float | Fraction | Decimal) -> float:
    """Correct significant digits of ``estimate``; the reference is kept exact."""
    est, ref = to_decimal(estimate), to_decimal(reference)
    if est == ref:
        return 15.0
    with localcontext() as ctx:
        ctx.prec = DIGITS
        err = abs(est - ref) / abs(ref) if ref != 0 else abs(est)
    return min(15.0, -math.log10(float(err)))


def exact_line(xs: list[float], ys: list[float]) -> dict[str, Fraction | Decimal]:
    """Ordinary least squares with an intercept for the float64 inputs, in exact arithmetic."""
    fx = [Fraction(v) for v in xs]
    fy = [Fraction(v) for v in ys]
    n = len(fx)
    mx, my = sum(fx) / n, sum(fy) / n
    sxx = sum((v - mx) ** 2 for v in fx)
    syy = sum((v - my) ** 2 for v in fy)
    sxy = sum((a - mx) * (b - my) for a, b in zip(fx, fy, strict=True))
    slope = sxy / sxx
    rss = syy - sxy * sxy / sxx  # exact here, whatever it costs in float64
    s2 = rss / (n - 2)
    return {
        "slope": slope,
        "intercept": my - slope * mx,
        "r2": 1 - rss / syy,
        "r2_adj": 1 - rss / syy * Fraction(n - 1, n - 2),
        "resid_sd": sqrt_exact(s2),
        "slope_se": sqrt_exact(s2 / sxx),
        "intercept_se": sqrt_exact(s2 * (Fraction(1, n) + mx * mx / sxx)),
    }


# --- the views' shape ---------------------------------------------------------------------


@pytest.mark.parametrize("file", ["fit", "fit_origin"])
def test_columns_and_types(con, file):
    view = create_view(con, file, group=("cell", "file_id"))
    described = con.execute(f'DESCRIBE "{view}"').fetchall()
    assert [r[0] for r in described] == ["cell", "file_id", *COLUMNS]
    types = {r[0]: r[1] for r in described}
    assert types["n"] == "BIGINT"
    assert types["status"] == "VARCHAR"
    assert types["n_outside"] == "BIGINT"
    assert all(types[c] == "DOUBLE" for c in COLUMNS[1:-2])


def test_description_is_plain_text():
    description = templates.load("views/fit.sql").description
    assert 20 < len(description) < 300 and "__" not in description


# --- NIST StRD certified values -----------------------------------------------------------


def nist(name: str) -> strd.Dataset:
    folder = nist_dir()
    if folder is None:
        pytest.skip("NIST StRD files not found: set TRENDLEDGER_NIST_DIR or provide "
                    "../shared/reference/nist-strd/ beside the repository")
    return strd.read(folder / f"{name}.dat")


def fit_dataset(con, data: strd.Dataset, file: str, xs=None, ys=None) -> dict[str, object]:
    xs = data.column("x") if xs is None else xs
    ys = data.column("y") if ys is None else ys
    insert(con, [(data.name, x, y) for x, y in zip(xs, ys, strict=True)])
    return fetch(con, create_view(con, file))[data.name]


def anova_digits(data: strd.Dataset, row: dict[str, object]) -> dict[str, float]:
    """LRE of the certified analysis of variance table, rebuilt from resid_sd and slope_t.

    With one slope the residual mean square is resid_sd^2 and F = slope_t^2 is the regression
    mean square (= sum of squares, 1 degree of freedom) over the residual mean square.
    """
    df_reg, ss_reg, ms_reg = data.anova["Regression"]
    df_res, ss_res, ms_res = data.anova["Residual"]
    assert df_reg == 1
    mean_square = row["resid_sd"] ** 2
    f_stat = row["slope_t"] ** 2
    return {
        "regression SS": lre(f_stat * mean_square, ss_reg.exact),
        "regression MS": lre(f_stat * mean_square, ms_reg.exact),
        "residual SS": lre(mean_square * df_res, ss_res.exact),
        "residual MS": lre(mean_square, ms_res.exact),
        "F": lre(f_stat, data.f_statistic.exact),
    }


def test_norris_certified_values(con):
    # NIST StRD Norris.dat: every certified value of the straight-line fit, the analysis of
    # variance table included.
    data = nist("Norris")
    row = fit_dataset(con, data, "fit")
    b0, b1 = data.parameters["B0"], data.parameters["B1"]
    checks = {
        "intercept": b0[0], "intercept_se": b0[1], "slope": b1[0], "slope_se": b1[1],
        "resid_sd": data.resid_sd, "r2": data.r2,
    }
    assert row["status"] == "ok" and row["n"] == len(data.rows_text)
    assert data.anova["Residual"][0] == row["n"] - 2
    digits = {col: lre(row[col], cert.exact) for col, cert in checks.items()}
    digits |= anova_digits(data, row)
    assert all(d >= 12 for d in digits.values()), digits


@pytest.mark.parametrize("name", ["NoInt1", "NoInt2"])
def test_through_origin_certified_values(con, name):
    # NIST StRD NoInt1.dat and NoInt2.dat: y = B1 x, R-squared uncentred (1 - RSS / sum y^2).
    data = nist(name)
    row = fit_dataset(con, data, "fit_origin")
    b1 = data.parameters["B1"]
    checks = {"slope": b1[0], "slope_se": b1[1], "resid_sd": data.resid_sd, "r2": data.r2}
    assert row["status"] == "ok" and row["n"] == len(data.rows_text)
    assert data.anova["Residual"][0] == row["n"] - 1  # one parameter: n - 1 residual df
    digits = {col: lre(row[col], cert.exact) for col, cert in checks.items()}
    digits |= anova_digits(data, row)
    assert all(d >= 12 for d in digits.values()), digits
    assert row["intercept"] is None and row["intercept_lo"] is None


@pytest.mark.parametrize("shift", [1e6, 1e9])
def test_norris_shifted_against_exact_arithmetic(con, shift):
    # NIST StRD Norris.dat with x and y moved by +shift; the reference is the exact least
    # squares answer (fractions.Fraction) for the shifted float64 inputs; numpy.polyfit on the
    # same inputs is the bar not to fall below.
    data = nist("Norris")
    xs = [v + shift for v in data.column("x")]
    ys = [v + shift for v in data.column("y")]
    row = fit_dataset(con, data, "fit", xs, ys)
    exact = exact_line(xs, ys)
    digits = {col: lre(row[col], exact[col]) for col in exact}
    for col in ("slope", "r2", "resid_sd", "slope_se", "intercept_se", "r2_adj"):
        assert digits[col] >= 12, digits
    assert digits["intercept"] >= 10, digits
    slope, intercept = np.polyfit(np.array(xs), np.array(ys), 1)
    assert digits["slope"] >= lre(float(slope), exact["slope"]) - 0.5
    assert digits["intercept"] >= lre(float(intercept), exact["intercept"]) - 0.5


# --- many groups against reference libraries ----------------------------------------------


def random_groups(seed: int) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Groups of every kind: ordinary ones of many scales and degenerate ones (seeded)."""
    rng = np.random.default_rng(seed)
    groups = {}
    for i in range(240):
        kind = i % 20
        if kind == 0:
            x, y = rng.normal(size=1), rng.normal(size=1)
        elif kind == 1:
            x, y = rng.normal(size=2), rng.normal(size=2)
        elif kind == 2:
            x, y = np.full(2, 1.5), rng.normal(size=2)
        elif kind == 3:
            n = int(rng.integers(3, 9))
            x, y = np.full(n, -4.25), rng.normal(size=n)
        elif kind == 4:
            x, y = rng.normal(size=6), np.full(6, 0.1)
        elif kind == 5:
            x = np.arange(7.0)
            y = 3 * x - 2
        else:
            n = int(rng.integers(3, 60))
            scale = 10.0 ** rng.uniform(-3, 3)
            # x away from zero by up to 1e4 spreads: far enough to need centring, near
            # enough for the references (polyfit and statsmodels lose digits beyond that;
            # larger shifts are checked against exact arithmetic above)
            offset = scale * [0.0, 0.0, 10.0, -1e3, 1e4][i % 5]
            x = offset + scale * rng.uniform(-1, 1, size=n)
            slope = rng.choice([-1, 1]) * 10.0 ** rng.uniform(-2, 2)
            noise = abs(slope) * scale * 10.0 ** rng.uniform(-4, 1)
            y = 5.0 + slope * (x - offset) + noise * rng.normal(size=n)
        groups[f"g{i:03d}"] = (np.asarray(x, dtype=float), np.asarray(y, dtype=float))
    return groups


def close(ours: float | None, ref: float, scale: float = 0.0, rtol: float = 1e-9) -> bool:
    """Relative agreement; ``scale`` guards estimates near zero (e.g. a slope of no effect)."""
    return ours is not None and abs(ours - ref) <= rtol * max(abs(ref), scale)


@pytest.mark.parametrize("level", [0.95, 0.9])
def test_many_groups_against_numpy_scipy_statsmodels(con, level):
    groups = random_groups(seed=20240601)
    insert_groups(con, groups)
    # Pairs that must not count: NULL, NaN or infinite x or y.
    junk = [("g010", None, 1.0), ("g010", 2.0, None), ("g011", math.nan, 1.0),
            ("g011", 1.0, math.inf), ("g012", -math.inf, 3.0)]
    insert(con, junk)
    rows = fetch(con, create_view(con, level=level))
    assert set(rows) == set(groups)
    checked = 0
    for cell, (x, y) in groups.items():
        row = rows[cell]
        assert row["n"] == len(x)
        if row["status"] != "ok":
            continue
        checked += 1
        slope_scale = math.sqrt(np.var(y) / np.var(x))
        int_scale = abs(float(np.mean(y))) + slope_scale * abs(float(np.mean(x)))
        # numpy.polyfit(x, y, 1)
        slope, intercept = np.polyfit(x, y, 1)
        assert close(row["slope"], slope, slope_scale), cell
        assert close(row["intercept"], intercept, int_scale), cell
        assert row["x_min"] == x.min() and row["x_max"] == x.max()
        # scipy.stats.linregress(x, y)
        lr = stats.linregress(x, y)
        assert math.isclose(row["r2"], lr.rvalue**2, rel_tol=1e-9, abs_tol=1e-12), cell
        # linregress takes the standard errors from 1 - r^2, which keeps only about
        # 1e-16 / (1 - r^2) relative accuracy as r^2 nears 1
        se_rtol = max(1e-9, 1e-15 / (1 - lr.rvalue**2))
        assert close(row["slope_se"], lr.stderr, rtol=se_rtol), cell
        assert close(row["intercept_se"], lr.intercept_stderr, rtol=se_rtol), cell
        if lr.pvalue > 1e-300:
            # far out p falls like t^-(n-2): a relative error in t is n-2 times larger in p
            p_rtol = max(T_RTOL, (len(x) - 2) * se_rtol)
            assert close(row["slope_p"], lr.pvalue, rtol=p_rtol), (cell, row["slope_p"], lr.pvalue)
        else:
            assert row["slope_p"] < 1e-290
        # statsmodels OLS(y, [1, x]).fit()
        fit = sm.OLS(y, sm.add_constant(x)).fit()
        assert math.isclose(row["r2_adj"], fit.rsquared_adj, rel_tol=1e-9, abs_tol=1e-12), cell
        # statsmodels takes the standard errors from the inverse of X'X with X = [1, x], whose
        # condition number is cond(X)^2: for a group with a narrow x range far from 0 the
        # reference itself is good only to about eps cond(X)^2 (numerical linear algebra,
        # common practice; g094 here: statsmodels is 1.4e-9 off the exact rational value
        # that our intercept_se matches). linregress above is the tight check.
        # Its residuals come from those parameters, so near a perfect fit its resid_sd keeps
        # only about 1e-16 / (1 - r^2) as well (se_rtol).
        sm_rtol = max(se_rtol, 2e-16 * float(np.linalg.cond(sm.add_constant(x))) ** 2)
        assert close(row["intercept_se"], fit.bse[0], rtol=sm_rtol), cell
        assert close(row["slope_se"], fit.bse[1], rtol=sm_rtol), cell
        assert close(row["resid_sd"], math.sqrt(fit.scale), rtol=sm_rtol), cell
        assert close(row["slope_t"], fit.tvalues[1], rtol=sm_rtol), cell
        (int_lo, int_hi), (slope_lo, slope_hi) = fit.conf_int(alpha=1 - level)
        for col, ref, scale in [("slope_lo", slope_lo, slope_scale),
                                ("slope_hi", slope_hi, slope_scale),
                                ("intercept_lo", int_lo, int_scale),
                                ("intercept_hi", int_hi, int_scale)]:
            assert close(row[col], ref, scale, rtol=T_RTOL), (cell, col, row[col], ref)
    assert checked >= 160

    # Degenerate groups: the status names the reason; undefined statistics are NULL.
    for cell, (x, y) in groups.items():
        row = rows[cell]
        kind = int(cell[1:]) % 20
        defined = {c for c in STATISTICS if row[c] is not None}
        if kind in (0, 2):  # one point; two points at the same x
            assert row["status"] == "too_few_points" and not defined, cell
        elif kind == 1:  # two points: the line through them, nothing that needs df
            assert row["status"] == "too_few_points" and defined == {"slope", "intercept", "r2"}
            assert close(row["slope"], (y[1] - y[0]) / (x[1] - x[0])) and row["r2"] == 1.0
        elif kind == 3:
            assert row["status"] == "constant_x" and not defined, cell
        elif kind == 4:
            assert row["status"] == "constant_y", cell
            assert row["slope"] == 0.0 and row["intercept"] == 0.1 and row["resid_sd"] == 0.0
            assert row["slope_lo"] == row["slope_hi"] == 0.0
            assert row["r2"] is None and row["slope_t"] is None and row["slope_p"] is None
        elif kind == 5:  # y = 3x - 2 exactly
            assert row["status"] == "perfect_fit", cell
            assert row["slope"] == 3.0 and row["intercept"] == -2.0
            assert row["r2"] == 1.0 and row["slope_se"] == 0.0 and row["slope_t"] is None


def test_through_origin_many_groups_against_statsmodels(con):
    groups = random_groups(seed=7)
    insert_groups(con, groups)
    rows = fetch(con, create_view(con, "fit_origin"))
    checked = 0
    for cell, (x, y) in groups.items():
        row = rows[cell]
        if row["status"] != "ok":
            continue
        checked += 1
        # statsmodels OLS(y, x, hasconst=False).fit(): no constant (even where x is constant),
        # so rsquared is uncentred and rsquared_adj = 1 - (1 - rsquared) n / (n - 1)
        fit = sm.OLS(y, x, hasconst=False).fit()
        scale = math.sqrt(np.sum(y * y) / np.sum(x * x))
        assert close(row["slope"], fit.params[0], scale), cell
        assert close(row["slope_se"], fit.bse[0]), cell
        assert close(row["resid_sd"], math.sqrt(fit.scale)), cell
        assert math.isclose(row["r2"], fit.rsquared, rel_tol=1e-9, abs_tol=1e-12), cell
        assert math.isclose(row["r2_adj"], fit.rsquared_adj, rel_tol=1e-9, abs_tol=1e-12)
        assert close(row["slope_t"], fit.tvalues[0]), cell
        if fit.pvalues[0] > 1e-300:
            assert close(row["slope_p"], fit.pvalues[0], rtol=T_RTOL), cell
        lo, hi = fit.conf_int(alpha=0.05)[0]
        assert close(row["slope_lo"], lo, scale, T_RTOL), cell
        assert close(row["slope_hi"], hi, scale, T_RTOL), cell
        assert row["intercept"] is None and row["intercept_se"] is None
    assert checked >= 190


def test_two_group_columns(con):
    # Each (cell, file_id) is its own group; numpy.polyfit per group is the reference.
    rng = np.random.default_rng(3)
    data = {}
    for cell in ("a", "b"):
        for file_id in (1, 2, 3):
            x = rng.uniform(0, 10, size=12)
            data[(cell, file_id)] = (x, file_id * x + rng.normal(size=12))
    insert(con, [(c, xv, yv, f) for (c, f), (x, y) in data.items()
                 for xv, yv in zip(x, y, strict=True)])
    view = create_view(con, group=("cell", "file_id"))
    got = {(r[0], r[1]): r[2] for r in con.execute(f'SELECT cell, file_id, slope FROM "{view}"')
           .fetchall()}
    assert set(got) == set(data)
    for key, (x, y) in data.items():
        assert close(got[key], np.polyfit(x, y, 1)[0]), key


# --- a published example ------------------------------------------------------------------

# Anscombe, F. J. (1973). Graphs in Statistical Analysis. The American Statistician 27(1),
# 17-21: the four data sets of the paper's table, which share one fitted line.
ANSCOMBE_X = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5]
ANSCOMBE = {
    "I": (ANSCOMBE_X, [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68]),
    "II": (ANSCOMBE_X, [9.14, 8.14, 8.74, 8.77, 9.26, 8.10, 6.13, 3.10, 9.13, 7.26, 4.74]),
    "III": (ANSCOMBE_X, [7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73]),
    "IV": ([8, 8, 8, 8, 8, 8, 8, 19, 8, 8, 8],
           [6.58, 5.76, 7.71, 8.84, 8.47, 7.04, 5.25, 12.50, 5.56, 7.91, 6.89]),
}


def test_anscombe_quartet(con):
    # Anscombe (1973): every set gives slope 0.500, intercept 3.00 and r2 0.67.
    insert_groups(con, ANSCOMBE)
    rows = fetch(con, create_view(con))
    for name in ANSCOMBE:
        row = rows[name]
        assert row["n"] == 11 and row["status"] == "ok"
        assert f"{row['slope']:.3f}" == "0.500", name
        assert f"{row['intercept']:.2f}" == "3.00", name
        assert f"{row['r2']:.2f}" == "0.67", name
        # the paper's standard error of the slope, 0.118, and t = 4.24 (quoted from memory)
        assert f"{row['slope_se']:.3f}" == "0.118" and f"{row['slope_t']:.2f}" == "4.24", name


# --- properties -----------------------------------------------------------------------------

points = st.lists(
    st.tuples(st.integers(-10_000, 10_000), st.integers(-10_000, 10_000)),
    min_size=3, max_size=30,
).filter(lambda pts: len({p[0] for p in pts}) > 1)


@pytest.fixture(scope="module")
def prop_store(tmp_path_factory):
    connection = open_store(tmp_path_factory.mktemp("prop") / "fit.duckdb")
    create_view(connection)
    yield connection
    connection.close()


def fit_points(con, rows: list[tuple]) -> dict[object, dict[str, object]]:
    con.execute("DELETE FROM measurements")
    insert(con, rows)
    return fetch(con, "fit_test")


def slope_scale(pts) -> float:
    x = np.array([p[0] for p in pts], dtype=float)
    y = np.array([p[1] for p in pts], dtype=float)
    return math.sqrt(np.var(y) / np.var(x))


# Each view query costs about 0.1 s (mostly planning the t macros): few examples, and the
# compared fits share one query where they can.


@settings(max_examples=20, deadline=None)
@given(pts=points, dx=st.integers(-10**9, 10**9), dy=st.integers(-10**9, 10**9))
def test_slope_invariant_under_shift(prop_store, pts, dx, dy):
    # Integer data and integer shifts below 2^53: the shifted inputs are exact.
    rows = fit_points(prop_store, [("base", float(x), float(y)) for x, y in pts]
                      + [("moved", float(x + dx), float(y + dy)) for x, y in pts])
    base, moved = rows["base"], rows["moved"]
    assert base["status"] == moved["status"]
    if base["slope"] is not None:
        bound = 1e-12 * (abs(base["slope"]) + slope_scale(pts))
        assert abs(moved["slope"] - base["slope"]) <= bound


@settings(max_examples=20, deadline=None)
@given(pts=points, c=st.floats(1e-3, 1e3) | st.floats(-1e3, -1e-3))
def test_slope_scales_with_y(prop_store, pts, c):
    rows = fit_points(prop_store, [("base", float(x), float(y)) for x, y in pts]
                      + [("scaled", float(x), c * y) for x, y in pts])
    base, scaled = rows["base"], rows["scaled"]
    if base["slope"] is not None:
        bound = 1e-12 * abs(c) * (abs(base["slope"]) + slope_scale(pts))
        assert abs(scaled["slope"] - c * base["slope"]) <= bound


@settings(max_examples=20, deadline=None)
@given(xy=st.lists(st.tuples(st.floats(-1e6, 1e6), st.floats(-1e6, 1e6)), max_size=30))
def test_r2_between_0_and_1(prop_store, xy):
    row = fit_points(prop_store, [("a", x, y) for x, y in xy]).get("a")
    if row is None or row["r2"] is None:
        return
    assert 0.0 <= row["r2"] <= 1.0
    if row["status"] == "ok":
        assert row["r2_adj"] <= row["r2"] and row["resid_sd"] >= 0
        assert row["slope_lo"] <= row["slope"] <= row["slope_hi"]


others = st.lists(
    st.tuples(st.sampled_from(["b", "c", None]),
              st.floats(allow_nan=True, allow_infinity=True) | st.none(),
              st.floats(-1e3, 1e3) | st.none()),
    max_size=30,
)


@settings(max_examples=15, deadline=None)
@given(pts=points, noise=others)
def test_group_does_not_depend_on_other_groups(prop_store, pts, noise):
    mine = [("a", float(x), float(y)) for x, y in pts]
    alone = fit_points(prop_store, mine)["a"]
    mixed = fit_points(prop_store, noise[: len(noise) // 2] + mine + noise[len(noise) // 2 :])
    together = mixed["a"]
    for col in COLUMNS:
        if isinstance(alone[col], float):
            assert math.isclose(together[col], alone[col], rel_tol=1e-12), col
        else:
            assert together[col] == alone[col], col


# --- nothing undefined leaks out ----------------------------------------------------------

NASTY = {
    "no_points": ([None, 1.0, math.nan], [1.0, None, 2.0]),
    "one_point": ([1.0], [2.0]),
    "two_points": ([1.0, 2.0], [2.0, 5.0]),
    "two_same_x": ([1.0, 1.0], [2.0, 5.0]),
    "two_same_y": ([1.0, 2.0], [0.1, 0.1]),
    "constant_x": ([3.0] * 5, [1.0, 2.0, 3.0, 4.0, 5.0]),
    "constant_y": ([1.0, 2.0, 3.0, 4.0, 5.0], [0.1] * 5),
    "zero_y": ([1.0, 2.0, 3.0, 4.0, 5.0], [0.0] * 5),
    "zero_x": ([0.0] * 4, [1.0, 2.0, 3.0, 4.0]),
    "line": ([1.0, 2.0, 3.0, 4.0, 5.0], [3.0, 5.0, 7.0, 9.0, 11.0]),
    "huge": ([1e200, 2e200, 3e200, 5e200], [1e200, -3e200, 5e200, 1e199]),
    "huge_y": ([1.0, 2.0, 3.0, 5.0], [1e300, -3e300, 5e300, 1e299]),
    "largest": ([1.7e308, -1.7e308, 1e308], [1.7e308, 1e308, -1.7e308]),
    "tiny": ([1e-200, 2e-200, 3e-200, 5e-200], [1e-200, -3e-200, 5e-200, 1e-199]),
    "subnormal_x": ([1e-310, 2e-310, 3e-310, 5e-310], [1.0, -3.0, 5.0, 1.0]),
    "big_offset": ([1e15 + i for i in range(6)], [1e15 + 2 * i + i % 2 for i in range(6)]),
    "with_inf": ([1.0, 2.0, 3.0, 4.0, math.inf, 5.0], [1.0, 3.0, 2.0, 5.0, 1.0, -math.inf]),
    None: ([1.0, 2.0, 3.0, 4.0], [2.0, 1.0, 4.0, 3.0]),
}

NASTY_STATUS = {
    "fit": {
        "no_points": "too_few_points", "one_point": "too_few_points",
        "two_points": "too_few_points", "two_same_x": "too_few_points",
        "two_same_y": "too_few_points",
        "constant_x": "constant_x", "zero_x": "constant_x", "constant_y": "constant_y",
        "zero_y": "constant_y", "line": "perfect_fit", "huge": "out_of_range",
        "huge_y": "out_of_range", "largest": "out_of_range", "tiny": "out_of_range",
        "subnormal_x": "out_of_range", "big_offset": "ok", "with_inf": "ok", None: "ok",
    },
    # big_offset through the origin is left out: its residuals (about 1 against y near 1e15)
    # sit at the rounding level, where ok and perfect_fit are both fair answers
    "fit_origin": {
        "no_points": "too_few_points", "one_point": "too_few_points", "two_points": "ok",
        "two_same_x": "ok", "two_same_y": "ok", "constant_x": "ok", "zero_x": "x_all_zero",
        "constant_y": "ok", "zero_y": "y_all_zero", "line": "ok", "huge": "out_of_range",
        "huge_y": "out_of_range", "largest": "out_of_range", "tiny": "out_of_range",
        "subnormal_x": "out_of_range", "with_inf": "ok", None: "ok",
    },
}


@pytest.mark.parametrize("file", ["fit", "fit_origin"])
def test_no_nan_or_infinity_on_a_nasty_table(con, file):
    insert_groups(con, NASTY)
    rows = fetch(con, create_view(con, file))
    assert set(rows) == set(NASTY)
    for cell, row in rows.items():
        for col in COLUMNS[1:-2]:
            value = row[col]
            assert value is None or math.isfinite(value), (cell, col, value)
        if cell in NASTY_STATUS[file]:
            assert row["status"] == NASTY_STATUS[file][cell], cell
        if row["status"] == "out_of_range":
            assert all(row[c] is None for c in STATISTICS), cell
    assert rows["no_points"]["n"] == 0 and rows["with_inf"]["n"] == 4
    assert rows[None]["n"] == 4  # a NULL group key is a group like any other
    if file == "fit":
        # two points, same y: the exact flat line, nothing that needs degrees of freedom
        flat = rows["two_same_y"]
        assert (flat["slope"], flat["intercept"], flat["r2"]) == (0.0, 0.1, None)
        assert rows["two_points"]["slope"] == 3.0 and rows["two_points"]["r2"] == 1.0


# --- any DuckDB client ----------------------------------------------------------------------


def test_view_reads_in_the_duckdb_cli(tmp_path):
    # The store is written in the 1.5 storage format; the 1.5 command-line client reads it.
    cli = shutil.which("duckdb", path=str(Path(sys.executable).parent)) or shutil.which("duckdb")
    if cli is None:
        pytest.skip("no duckdb command-line client on PATH or beside the interpreter")
    path = tmp_path / "cli.duckdb"
    con = open_store(path, {"storage_compatibility_version": "v1.5.0"})
    insert(con, [("a", float(x), 2.0 * x + x % 3) for x in range(10)])
    create_view(con, view="fit_a")
    create_view(con, "fit_origin", view="fit_b")
    expected = con.execute("SELECT slope, slope_p, status FROM fit_a").fetchone()
    con.close()
    out = subprocess.run(
        [cli, "-readonly", "-csv", "-noheader", str(path),
         "-c", "SELECT slope, slope_p, status FROM fit_a; SELECT status FROM fit_b"],
        capture_output=True, text=True, check=True, timeout=60,
    ).stdout.split()
    slope, p, status = out[0].split(",")
    assert math.isclose(float(slope), expected[0], rel_tol=1e-15)
    assert math.isclose(float(p), expected[1], rel_tol=1e-12)
    assert status == expected[2] == "ok" and out[1] == "ok"
