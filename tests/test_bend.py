"""Where a group's line bends (sql/views/bend_rounds.sql, bend.sql).

Checked against references outside the project: an exhaustive numpy search over every split
(numpy.linalg.lstsq), ruptures' exact dynamic-programming segmentation (Dynp, linear cost),
pwlf's fit with given breaks, statsmodels OLS on the current segment or on the hinge design,
scipy's bounded scalar minimiser inside each interval, and the size of the test by simulation
of straight lines. The demo's knee cells are the planted bends of demo_data.expected().
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from trendledger import Ledger, demo_data
from trendledger.errors import StoreError

SPEC = """\
[source]
files = "in/{{part}}.csv"

[source.columns]
g = "VARCHAR"
x = "DOUBLE"
y = "DOUBLE"

[[fit]]
name = "t"
group = ["g"]
x = "x"
y = "y"
bend = "{kind}"
bend_min = {bend_min}
alpha = {alpha}
level = 0.95
"""

Groups = dict[str, tuple[np.ndarray, np.ndarray]]


def bend_store(root: Path, groups: Groups, kind: str, *, bend_min: float = 0.15,
               alpha: float = 0.01, extra: str = "") -> Path:
    """A store over one file holding every group's rows (repr keeps each float exact)."""
    (root / "in").mkdir(parents=True)
    (root / "spec.toml").write_text(SPEC.format(kind=kind, bend_min=bend_min, alpha=alpha)
                                    + extra)
    lines = ["g,x,y"]
    for name, (x, y) in groups.items():
        lines += [f"{name},{float(a)!r},{float(b)!r}" for a, b in zip(x, y, strict=True)]
    (root / "in" / "all.csv").write_text("\n".join(lines) + "\n")
    with Ledger.init(root / "spec.toml") as led:
        led.append()
    return root / "trendledger.duckdb"


def views(store: Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(first round of every group, indexed by group; the bend view, indexed by group)."""
    with Ledger.open(store, read_only=True) as led:
        rounds = led.fits("t", view="bend_rounds", where="round = 1").set_index("g")
        bend = led.bend("t").set_index("g")
    return rounds, bend


# --- the reference searches (numpy) -----------------------------------------------------------

def least(n: int, bend_min: float) -> int:
    """The least number of points on a side: greatest(5, ceil(bend_min n)) as in the view."""
    return max(5, math.ceil(bend_min * n))


def intervals(x: np.ndarray, bend_min: float) -> tuple[np.ndarray, list[int]]:
    """Distinct x in order and the allowed splits k (the left side is xs[:k])."""
    xs, counts = np.unique(x, return_counts=True)
    m = least(len(x), bend_min)
    left = np.cumsum(counts)
    allowed = [k for k in range(1, len(xs))
               if left[k - 1] >= m and len(x) - left[k - 1] >= m and k >= 2 and len(xs) - k >= 2]
    return xs, allowed


def rss_line(x: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    design = np.column_stack([np.ones_like(x), x])
    coef = np.linalg.lstsq(design, y, rcond=None)[0]
    resid = y - design @ coef
    return float(resid @ resid), coef


def rss_hinge(x: np.ndarray, y: np.ndarray, t: float) -> float:
    design = np.column_stack([np.ones_like(x), x, np.maximum(x - t, 0.0)])
    resid = y - design @ np.linalg.lstsq(design, y, rcond=None)[0]
    return float(resid @ resid)


def free_search(x: np.ndarray, y: np.ndarray, bend_min: float) -> dict[float, float]:
    """RSS of the two separate lines for every allowed split, by the first x of the later side."""
    xs, allowed = intervals(x, bend_min)
    out = {}
    for k in allowed:
        left = x <= xs[k - 1]
        out[float(xs[k])] = rss_line(x[left], y[left])[0] + rss_line(x[~left], y[~left])[0]
    return out


def joined_search(x: np.ndarray, y: np.ndarray, bend_min: float) -> tuple[float, float]:
    """(join point, RSS) of the best continuous two-line fit: for every allowed interval, the
    two sides' lines where they meet inside it, else the hinge at either end (Hudson 1966)."""
    xs, allowed = intervals(x, bend_min)
    best = (math.nan, math.inf)
    for k in allowed:
        lo, hi = float(xs[k - 1]), float(xs[k])
        left = x <= lo
        rl, cl = rss_line(x[left], y[left])
        rr, cr = rss_line(x[~left], y[~left])
        if cl[1] != cr[1]:
            meet = (cr[0] - cl[0]) / (cl[1] - cr[1])
            if lo < meet < hi and rl + rr < best[1]:
                best = (meet, rl + rr)
        for t in (lo, hi):
            r = rss_hinge(x, y, t)
            if r < best[1]:
                best = (t, r)
    return best


def random_groups(rng: np.random.Generator, count: int) -> Groups:
    """Groups of 10 to 2,000 points: ties in x, bends near either end or inside, constant
    segments, straight lines; x sometimes far from zero."""
    out: Groups = {}
    for i in range(count):
        n = int(round(math.exp(rng.uniform(math.log(10), math.log(2000)))))
        design = i % 4
        if design == 0:
            x = np.arange(n, dtype=float)
        elif design == 1:  # ties: several points per x
            x = np.sort(rng.integers(0, max(n // 3, 4), n)).astype(float)
        elif design == 2:
            x = np.sort(rng.uniform(0, 50, n))
        else:  # far from zero
            x = 1e4 + np.sort(rng.uniform(0, 1, n))
        shape = i % 5
        q = float(np.quantile(x, rng.choice([0.05, 0.2, 0.5, 0.8, 0.95])))
        span = float(x.max() - x.min()) or 1.0
        if shape == 4 and design != 1:  # constant segments, no noise
            y = np.where(x < q, 1.0, 2.5)
        else:
            slope = rng.normal() / span
            y = 3 + slope * (x - x.min()) + rng.normal(0, 0.1, n)
            if shape in (1, 2):  # joined bend
                y += rng.normal(0, 3) / span * np.maximum(x - q, 0)
            if shape == 3:  # jump and a new slope
                y += np.where(x >= q, rng.normal(0, 0.5) + rng.normal(0, 2) / span * (x - q), 0)
        out[f"g{i:03d}"] = (x, y)
    return out


@pytest.fixture(scope="module")
def exact_groups() -> Groups:
    return random_groups(np.random.default_rng(20260301), 220)


# --- exactness --------------------------------------------------------------------------------

def test_free_split_is_the_exhaustive_least_squares_split(exact_groups: Groups,
                                                          tmp_path: Path) -> None:
    rounds, _ = views(bend_store(tmp_path, exact_groups, "free"))
    agreed = 0
    for name, (x, y) in exact_groups.items():
        scores = free_search(x, y, 0.15)
        if not scores:
            assert name not in rounds.index, name  # too small to search: no round
            continue
        row = rounds.loc[name]
        best = min(scores.values())
        syy = float(((y - y.mean()) ** 2).sum())
        # reference: exhaustive numpy lstsq over every split. RSS to 1e-9 relative (plus a
        # rounding floor of 1e-12 syy where the best split fits exactly, rss near 0)
        tol = 1e-9 * best + 1e-12 * syy
        assert abs(row.rss_bent - best) <= tol, name
        # our split is a least-squares split (ties in RSS may pick either)
        assert scores[row.bend_x] <= best + tol, name
        agreed += row.bend_x == min(scores, key=scores.__getitem__)
        # one line: numpy lstsq over the whole segment
        assert row.rss_one == pytest.approx(rss_line(x, y)[0], rel=1e-9, abs=1e-12 * syy)
    assert agreed >= 0.95 * len(rounds)


def test_free_split_matches_ruptures_dynamic_programming(exact_groups: Groups,
                                                         tmp_path: Path) -> None:
    rpt = pytest.importorskip("ruptures")
    # ruptures splits between any two points: compare on the groups without ties in x
    groups = {k: v for k, v in exact_groups.items() if len(np.unique(v[0])) == len(v[0])}
    rounds, _ = views(bend_store(tmp_path, groups, "free"))
    checked = 0
    for name, (x, y) in groups.items():
        if name not in rounds.index or len(x) > 600:  # Dynp is quadratic in pure Python
            continue
        scores = free_search(x, y, 0.15)
        ordered = sorted(scores.values())
        if len(ordered) > 1 and ordered[1] - ordered[0] <= 1e-9 * ordered[0] + 1e-12:
            continue  # two splits tie: either is right
        signal = np.column_stack([y, np.ones_like(x), x])
        # ruptures.Dynp, linear cost (y on the columns after the first), one break point
        algo = rpt.Dynp(model="linear", min_size=least(len(x), 0.15), jump=1).fit(signal)
        split = algo.predict(n_bkps=1)[0]
        assert int((x < rounds.loc[name].bend_x).sum()) == split, name
        checked += 1
    assert checked >= 50


def test_joined_bend_is_the_exhaustive_least_squares_join(exact_groups: Groups,
                                                          tmp_path: Path) -> None:
    rounds, _ = views(bend_store(tmp_path, exact_groups, "joined"))
    for name, (x, y) in exact_groups.items():
        t, best = joined_search(x, y, 0.15)
        if math.isnan(t):
            assert name not in rounds.index, name
            continue
        row = rounds.loc[name]
        syy = float(((y - y.mean()) ** 2).sum())
        tol = 1e-9 * best + 1e-12 * syy
        # reference: numpy lstsq of the two sides and of the hinge at each interval's ends
        assert abs(row.rss_bent - best) <= tol, name
        # and the hinge fitted at our join point gives that RSS (numpy lstsq, 3 parameters)
        assert rss_hinge(x, y, row.bend_x) <= best + tol, name


def test_joined_optimum_inside_each_interval_by_a_scalar_minimiser(tmp_path: Path) -> None:
    # scipy.optimize.minimize_scalar (bounded) of the hinge fit's RSS over each interval: an
    # independent check that the best join point is where the sides' lines meet or at an end
    rng = np.random.default_rng(7)
    groups: Groups = {}
    for i in range(12):
        n = int(rng.integers(12, 60))
        x = np.sort(rng.uniform(0, 10, n)).round(2)
        y = 1 + 0.3 * x + rng.normal(0, 0.2, n) + rng.normal(0, 1) * np.maximum(x - 5, 0)
        groups[f"s{i}"] = (x, y)
    rounds, _ = views(bend_store(tmp_path, groups, "joined"))
    for name, (x, y) in groups.items():
        xs, allowed = intervals(x, 0.15)
        best = min(
            min(optimize.minimize_scalar(lambda t, x=x, y=y: rss_hinge(x, y, t),
                                         bounds=(xs[k - 1], xs[k]), method="bounded",
                                         options={"xatol": 1e-10}).fun,
                rss_hinge(x, y, xs[k - 1]), rss_hinge(x, y, xs[k]))
            for k in allowed
        )
        assert rounds.loc[name].rss_bent == pytest.approx(best, rel=1e-7), name


def test_joined_bend_matches_pwlf_fit_with_breaks(exact_groups: Groups, tmp_path: Path) -> None:
    pwlf = pytest.importorskip("pwlf")
    groups = dict(list(exact_groups.items())[:60])
    rounds, _ = views(bend_store(tmp_path, groups, "joined"))
    checked = 0
    for name, (x, y) in groups.items():
        if name not in rounds.index:
            continue
        row = rounds.loc[name]
        syy = float(((y - y.mean()) ** 2).sum())
        # pwlf.PiecewiseLinFit.fit_with_breaks: continuous piecewise line with the given breaks
        model = pwlf.PiecewiseLinFit(x, y)
        ssr = model.fit_with_breaks([x.min(), row.bend_x, x.max()])
        assert row.rss_bent == pytest.approx(ssr, rel=1e-8, abs=1e-11 * syy), name
        if row.rss_one - row.rss_bent > 1e-6 * syy:  # a real bend: slopes well defined
            slopes = model.calc_slopes()
            assert row.slope_before == pytest.approx(slopes[0], rel=1e-6, abs=1e-9), name
            assert row.slope_after == pytest.approx(slopes[1], rel=1e-6, abs=1e-9), name
        checked += 1
    assert checked >= 40


# --- the current segment's line ---------------------------------------------------------------

def bent_groups(rng: np.random.Generator) -> Groups:
    out: Groups = {}
    for i in range(8):
        n = int(rng.integers(40, 300))
        x = np.sort(rng.uniform(0, 100, n)).round(1)
        knee = rng.uniform(35, 65)
        y = 10 - 0.02 * x - rng.uniform(0.1, 0.3) * np.maximum(x - knee, 0)
        if i % 2:
            y = y - np.where(x >= knee, 1.0, 0.0)
        out[f"b{i}"] = (x, y + rng.normal(0, 0.3, n))
    return out


def test_free_current_segment_matches_statsmodels_ols(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    groups = bent_groups(np.random.default_rng(11))
    _, bend = views(bend_store(tmp_path, groups, "free"))
    for name, (x, y) in groups.items():
        row = bend.loc[name]
        assert row.bends >= 1, name
        later = x >= row.bend_x
        # statsmodels OLS on the current segment alone
        res = sm.OLS(y[later], sm.add_constant(x[later])).fit()
        assert row.n == later.sum()
        assert row.slope == pytest.approx(res.params[1], rel=1e-9)
        assert row.intercept == pytest.approx(res.params[0], rel=1e-9)
        assert row.r2 == pytest.approx(res.rsquared, rel=1e-9)
        assert row.resid_sd == pytest.approx(math.sqrt(res.scale), rel=1e-9)
        assert row.slope_se == pytest.approx(res.bse[1], rel=1e-9)
        lo, hi = res.conf_int(alpha=0.05)[1]
        assert (row.slope_lo, row.slope_hi) == pytest.approx((lo, hi), rel=1e-8)
        assert row.df == res.df_resid
        assert row.slope_p == pytest.approx(res.pvalues[1], rel=1e-6, abs=1e-300)
        # the standard error of the line at any x (statsmodels get_prediction, se_mean)
        at = np.array([x.min(), 150.0])
        se = res.get_prediction(sm.add_constant(at)).se_mean
        ours = np.sqrt(row.centre_se ** 2 + row.slope_se ** 2 * (at - row.centre_x) ** 2)
        assert ours == pytest.approx(se, rel=1e-8)


def test_joined_current_segment_matches_statsmodels_on_the_hinge_design(tmp_path: Path) -> None:
    sm = pytest.importorskip("statsmodels.api")
    groups = {k: v for k, v in bent_groups(np.random.default_rng(12)).items()
              if k in ("b0", "b2", "b4", "b6")}  # the continuous ones
    store = bend_store(tmp_path, groups, "joined", extra="limit = 0.0\n")
    rounds, bend = views(store)
    with Ledger.open(store, read_only=True) as led:
        crossing = led.fits("t", view="crossing").set_index("g")
    for name, (x, y) in groups.items():
        row = bend.loc[name]
        assert row.bends == 1, name
        t = row.bend_x
        # statsmodels OLS on [1, x, max(x - t, 0)] over the searched segment (the whole group)
        design = np.column_stack([np.ones_like(x), x, np.maximum(x - t, 0)])
        res = sm.OLS(y, design).fit()
        a, b, d = res.params
        cov = res.cov_params()
        contrast = np.array([0.0, 1.0, 1.0])
        assert row.slope == pytest.approx(b + d, rel=1e-9)
        assert row.slope_before == pytest.approx(b, rel=1e-9)
        assert row.intercept == pytest.approx(a - d * t, rel=1e-9)
        assert row.slope_se == pytest.approx(math.sqrt(contrast @ cov @ contrast), rel=1e-8)
        assert row.resid_sd == pytest.approx(math.sqrt(res.scale), rel=1e-9)
        assert row.r2 == pytest.approx(res.rsquared, rel=1e-9)
        assert row.df == res.df_resid
        # Student t tail of slope / slope_se (scipy.stats.t.sf)
        p = 2 * stats.t.sf(abs(row.slope / row.slope_se), res.df_resid)
        assert row.slope_p == pytest.approx(p, rel=1e-6, abs=1e-300)
        tq = stats.t.ppf(0.975, res.df_resid)
        assert row.slope_lo == pytest.approx(b + d - tq * row.slope_se, rel=1e-8)
        assert row.n == (x >= t).sum()
        # the standard error of the later line at x (statsmodels get_prediction, se_mean)
        at = np.array([t + 1.0, 120.0, 300.0])
        se = res.get_prediction(np.column_stack([np.ones(3), at, at - t])).se_mean
        ours = np.sqrt(row.centre_se ** 2 + row.slope_se ** 2 * (at - row.centre_x) ** 2)
        assert ours == pytest.approx(se, rel=1e-8)
        assert rounds.loc[name].rss_bent == pytest.approx(res.ssr, rel=1e-9)
        # the crossing of 0 from the later line, and its Fieller interval: where the 95 %
        # confidence band of the hinge fit's mean (statsmodels get_prediction) holds the limit,
        # found by scipy.optimize.brentq on either side
        cross = crossing.loc[name]
        # the bend, as the bend view finds it (to rounding: the crossing view reads it through
        # a join whose plan may sum in another order)
        assert cross.basis == "since_bend" and cross.from_x == pytest.approx(t, rel=1e-12)
        at = (0.0 - (a - d * t)) / (b + d)
        assert cross.cross_x == pytest.approx(at, rel=1e-9)

        def band(v: float, alpha: float = 0.05, res=res, t=t) -> tuple[float, float]:
            lo, hi = res.get_prediction(np.array([[1.0, v, v - t]])).conf_int(alpha=alpha)[0]
            return float(lo), float(hi)

        # a falling line: the lower edge meets the floor first, the upper edge last
        lo = optimize.brentq(lambda v: band(v)[0], t, at, xtol=1e-12)
        hi = optimize.brentq(lambda v: band(v)[1], at, 10 * at, xtol=1e-12)
        assert (cross.cross_lo, cross.cross_hi) == pytest.approx((lo, hi), rel=1e-8)
        bound = optimize.brentq(lambda v: band(v, 0.10)[0], t, at, xtol=1e-12)
        assert cross.cross_bound == pytest.approx(bound, rel=1e-8)


# --- the test's size and power ----------------------------------------------------------------

def straight_lines(rng: np.random.Generator, count: int) -> Groups:
    out: Groups = {}
    for i in range(count):
        n = int(rng.integers(20, 501))
        design = i % 3
        if design == 0:
            x = np.arange(n, dtype=float)
        elif design == 1:
            x = np.sort(rng.uniform(0, 100, n))
        else:  # ties and gaps
            x = np.sort(rng.integers(0, n // 2, n)).astype(float) ** 1.2
        out[f"n{i:04d}"] = (x, 2 + rng.normal() * x / x.max() + rng.normal(0, 1, n))
    return out


@pytest.mark.parametrize("kind", ["joined", "free"])
def test_size_on_straight_lines_by_simulation(kind: str, tmp_path: Path) -> None:
    count = 2400
    groups = straight_lines(np.random.default_rng(314 if kind == "joined" else 271), count)
    rounds, _ = views(bend_store(tmp_path, groups, kind))
    p = rounds["bend_p"].to_numpy()
    assert len(p) == count and np.isfinite(p).all()
    for alpha in (0.01, 0.05):
        rate = float((p < alpha).mean())
        # the simulation's 99 % binomial band around alpha (scipy.stats.binom)
        lo, hi = stats.binom.ppf([0.005, 0.995], count, alpha) / count
        assert lo <= rate <= hi, (kind, alpha, rate, lo, hi)


# --- the demo ---------------------------------------------------------------------------------

EXPECTED = demo_data.expected()


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo's rows appended in one batch (see test_watch.demo_store)."""
    root = tmp_path_factory.mktemp("demo")
    plan = demo_data.DEFAULT_PLAN
    demo_data.write_all(root, plan)
    demo_data.write_retransmit(root, plan)
    demo_data.write_day(root, plan.resent[0], plan, corrected=True)
    with Ledger.init(root / "spec.toml") as led:
        led.append()
    return root / "trendledger.duckdb"


@pytest.fixture(scope="module")
def demo_bend(demo_store: Path) -> pd.DataFrame:
    with Ledger.open(demo_store, read_only=True) as led:
        return led.bend("fade").set_index("cell")


def test_demo_bends_are_the_knee_cells(demo_bend: pd.DataFrame) -> None:
    knees = EXPECTED["knee"]
    # every other cell, the glitching channel included, shows no bend at the spec's alpha 0.01
    assert set(demo_bend.index[demo_bend["bends"] > 0]) == set(knees)
    for cell, knee in knees.items():
        row = demo_bend.loc[cell]
        assert row.bends == 1
        # the knee the generator used: the last cycle before the faster fade
        assert abs(row.bend_x - (knee["first_cycle_after"] - 1)) <= 8, cell
        assert row.bend_p < 1e-12  # power: the knees are unmistakable
        assert row.slope == pytest.approx(-knee["rate_after"], rel=0.05)
        # the projection from the current segment against the crossing of the generator's own
        # post-knee law (demo_data.expected()["eol_cycle"])
        crossing = (2.4 - row.intercept) / row.slope
        assert crossing == pytest.approx(EXPECTED["eol_cycle"][cell], rel=0.05)
    assert demo_bend.loc[EXPECTED["glitch"]["cell"]].bend_p >= 0.01


def test_demo_crossing_projects_from_the_current_segment(demo_store: Path,
                                                         demo_bend: pd.DataFrame) -> None:
    with Ledger.open(demo_store, read_only=True) as led:
        crossing = led.fits("fade", view="crossing").set_index("cell")
    knees = EXPECTED["knee"]
    assert set(crossing.index[crossing["basis"] == "since_bend"]) == set(knees)
    for cell in knees:
        row = crossing.loc[cell]
        assert row.from_x == pytest.approx(demo_bend.loc[cell].bend_x, rel=1e-12)
        # the generator's own post-knee law reaches 2.4 Ah at eol_cycle (demo_data.expected())
        assert row.cross_x == pytest.approx(EXPECTED["eol_cycle"][cell], rel=0.05)
        assert row.cross_lo < row.cross_bound < row.cross_x < row.cross_hi
    steady = crossing.loc[EXPECTED["steady"][0]]
    assert steady.basis == "whole" and steady.from_x == 1.0


# --- the CLI and the API ----------------------------------------------------------------------

def test_cli_now_shows_the_bend_view_with_tiny_p_values(tmp_path: Path) -> None:
    from .test_cli import tl

    x = np.arange(200, dtype=float)
    # a sharp knee with little noise: the p-value underflows float64 (stored as 0)
    bent = 5 - 0.001 * x - 0.05 * np.maximum(x - 120, 0) + np.random.default_rng(3).normal(
        0, 1e-3, 200)
    store = bend_store(tmp_path, {"knee": (x, bent), "line": (x, 5 - 0.001 * x + np.sin(x))},
                       "joined")
    code, out, _ = tl("fits", "t", "--now", "--store", str(store))
    assert code == 0
    lines = {line.split()[0]: line for line in out.splitlines() if line.startswith(("knee", "li"))}
    assert "< 1e-300" in lines["knee"]  # output.TINY_P, not 0
    assert "< 1e-300" not in lines["line"]
    assert "not a safety or release decision" in out  # the projection caution
    code, out, _ = tl("fits", "t", "--now", "--format", "json", "--store", str(store))
    assert code == 0
    with Ledger.open(store, read_only=True) as led:
        assert led.bend("t").loc[lambda d: d.g == "knee", "bend_p"].item() == 0.0
    code, _, err = tl("fits", "t", "--now", "--view", "points", "--store", str(store))
    assert code == 2 and "--now shows the bend view" in err


def test_bend_none_never_bends_and_projects_from_the_whole_line(tmp_path: Path) -> None:
    x = np.arange(60, dtype=float)
    knee = 5 - 0.01 * x - 0.2 * np.maximum(x - 30, 0) + np.sin(x) / 100
    store = bend_store(tmp_path, {"a": (x, knee)}, "none")
    with Ledger.open(store, read_only=True) as led:
        assert led.fits("t", view="bend_rounds").empty
        row = led.bend("t").iloc[0]
        fit = led.fits("t").iloc[0]
    assert row.bends == 0 and row.bend_note == "no bend search: the fit has bend = none"
    # the whole-history line of the fit view
    assert (row.slope, row.intercept, row.n, row.from_x) == (fit.slope, fit.intercept, fit.n,
                                                           fit.x_min)


def test_a_fit_through_the_origin_has_no_bend_view(tmp_path: Path) -> None:
    x = np.arange(1, 30, dtype=float)
    store = bend_store(tmp_path, {"a": (x, 2 * x)}, "joined")
    spec = (tmp_path / "spec.toml").read_text().replace("level = 0.95",
                                                        "level = 0.95\nthrough_origin = true")
    (tmp_path / "spec.toml").write_text(spec)
    with Ledger.open(store) as led:
        led.update_spec(tmp_path / "spec.toml")
        assert not any(v.startswith("fit_t_bend") for v in led.views()["name"])
        with pytest.raises(StoreError, match="through the origin"):
            led.bend("t")


def test_demo_bent_alert_names_exactly_the_knee_cells(demo_store: Path) -> None:
    with Ledger.open(demo_store, read_only=True) as led:
        alerts = led.watch("fade")
    bent = alerts[alerts["reason"] == "bent"].set_index("cell")
    # demo_data.expected()["knee"]: the planted knees, and nothing else bends at alpha 0.01
    assert set(bent.index) == set(EXPECTED["knee"])
    assert (bent["severity"] == 8).all()
    for cell, detail in bent["detail"].items():
        knee = EXPECTED["knee"][cell]["first_cycle_after"] - 1
        assert detail.startswith("the line bent at x = "), detail
        assert abs(float(detail.split("x = ")[1].split(":")[0]) - knee) <= 8, detail
        assert detail.endswith("p < 1e-300"), detail
    # the projection from the current segment is not within the 200-cycle horizon either
    assert "crossing_soon" not in set(alerts["reason"])
