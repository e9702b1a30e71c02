"""Alerts (sql/views/alerts.sql) and ``trendledger watch``.

Two stores: the bundled Bench 7 demo (49 cells, three knee cells, one glitching channel, one
cell fading fast in a straight line), whose
alerts must name exactly the cells the scenario plants (demo_data.expected() is the source),
and a small lab whose cells are built to trip one reason each, read through the API and the CLI.
"""

from __future__ import annotations

import json
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize

from trendledger import Ledger, demo_data
from trendledger.views.watch import CAUTION, SEVERITY, failing

from .conftest import Lab
from .test_cli import tl

# --- the demo scenario --------------------------------------------------------------------

EXPECTED = demo_data.expected()
KNEES = sorted(EXPECTED["knee"])
GLITCH = EXPECTED["glitch"]["cell"]
FAST = EXPECTED["fast"]["cell"]


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo's final store, in one batch instead of ninety (the same rows, faster).

    ``trendledger demo`` appends day by day, refuses the cut file and later loads it in full,
    and replaces the file sent in mAh by its correction; its store ends holding every cell's
    corrected readings. Writing all days, the re-sent file and the correction first and
    appending once leaves the same rows (checked against demo_data.cell_rows below).
    """
    root = tmp_path_factory.mktemp("demo")
    plan = demo_data.DEFAULT_PLAN
    demo_data.write_all(root, plan)
    demo_data.write_retransmit(root, plan)
    demo_data.write_day(root, plan.resent[0], plan, corrected=True)
    with Ledger.init(root / "spec.toml") as led:
        summary = led.append()
        assert summary.rejected == 0
        assert summary.rows == len(plan.cells) * plan.n_days * plan.cycles_per_day
        day, cell = plan.resent
        got = led.query("SELECT cycle, capacity_ah FROM measurements WHERE cell = $c "
                        "AND day = $d ORDER BY cycle", {"c": cell, "d": plan.date_of(day)})
        want = [(r.cycle, r.capacity_ah) for r in demo_data.cell_rows(plan, cell, day)]
        assert list(got.itertuples(index=False, name=None)) == want
    return root / "trendledger.duckdb"


@pytest.fixture(scope="module")
def demo_alerts(demo_store: Path) -> pd.DataFrame:
    with Ledger.open(demo_store, read_only=True) as led:
        return led.watch()


def test_demo_names_the_knee_cells_and_the_glitching_channel(demo_alerts: pd.DataFrame) -> None:
    reasons = demo_alerts.groupby("unit_label")["reason"].apply(set)
    for cell in KNEES:
        # the knee is a change of slope in the latest week (demo_data.expected()["knee"])
        assert "slope_changed" in reasons[cell], cell
    # the glitching channel's low readings are outliers
    assert "outliers" in reasons[GLITCH]
    assert not any("crossing_soon" in r for r in reasons)  # expected()["within_horizon"] == []
    assert EXPECTED["within_horizon"] == []


def test_demo_outliers_are_exactly_the_glitch_readings(demo_store: Path) -> None:
    with Ledger.open(demo_store, read_only=True) as led:
        flagged = led.fits(view="points", where="outlier")
    # demo_data.expected()["glitch"]: the cycles of the readings that came out too low; the
    # noise of every cell is cut at 3 sd, so a Bonferroni test over a history finds nothing else
    assert set(flagged["cell"]) == {GLITCH}
    assert sorted(flagged["x"]) == sorted(float(r["cycle"]) for r in EXPECTED["glitch"]["readings"])


def test_demo_alerts_name_no_other_cell(demo_alerts: pd.DataFrame) -> None:
    # demo_data.expected(): the knee cells, the glitching channel and the fast cell, and no
    # steady cell
    assert set(demo_alerts["unit_label"]) == {*KNEES, GLITCH, FAST}


def test_demo_unlike_fleet_names_exactly_the_fast_cell(demo_alerts: pd.DataFrame) -> None:
    # demo_data.expected()["fast"]: the one cell fading in a straight line far faster than its
    # siblings; the knee cells fade faster too, but bend (low_r2), so their slope is not compared
    unlike = demo_alerts[demo_alerts["reason"] == "unlike_fleet"]
    assert list(unlike["unit_label"]) == [FAST]
    assert set(demo_alerts.loc[demo_alerts["unit_label"] == FAST, "reason"]) == {"unlike_fleet"}
    detail = unlike["detail"].iloc[0]
    assert detail.startswith("slope -0.0004") and "against -0.0001" in detail
    assert "for its 48 siblings (z -" in detail and "< 0.01 / 49)" in detail


def test_demo_alert_rows(demo_alerts: pd.DataFrame) -> None:
    assert list(demo_alerts.columns) == ["fit_name", "unit_label", "cell", "reason", "severity",
                                         "detail", "latest_x", "latest_date"]
    last = EXPECTED["last_cycle"]
    assert (demo_alerts["latest_x"] == last).all()
    end = demo_data.DEFAULT_PLAN.date_of(demo_data.DEFAULT_PLAN.n_days - 1)
    assert (pd.to_datetime(demo_alerts["latest_date"]) == pd.Timestamp(end)).all()
    assert set(demo_alerts["reason"]) <= set(SEVERITY)
    assert (demo_alerts["severity"] == demo_alerts["reason"].map(SEVERITY.index) + 1).all()
    knee = demo_alerts[(demo_alerts["unit_label"] == KNEES[0])
                       & (demo_alerts["reason"] == "slope_changed")]["detail"].iloc[0]
    assert knee.startswith("slope -0.00") and "in the window from 2026-05-25" in knee
    glitch = demo_alerts[(demo_alerts["unit_label"] == GLITCH)
                         & (demo_alerts["reason"] == "outliers")]["detail"].iloc[0]
    assert glitch.startswith("5 reading(s) flagged (Bonferroni, alpha 0.01) at x = ")


def test_demo_watch_cli(demo_store: Path) -> None:
    code, out, _ = tl("watch", "--store", str(demo_store))
    assert code == 1  # default: fail on any alert
    lines = out.splitlines()
    assert lines[0].endswith("unit(s) (fit fade)")
    heads = [line for line in lines[1:] if line and not line.startswith(" ")]
    assert {h.split()[0] for h in heads} >= {*KNEES, GLITCH}
    assert all("(latest 2026-05-30, x 360)" in h for h in heads)
    assert CAUTION not in out  # no projection shown
    assert tl("watch", "fade", "--fail-on", "crossing_soon", "--store", str(demo_store))[0] == 0
    assert tl("watch", "--fail-on", "slope_changed", "--store", str(demo_store))[0] == 1
    code, out, _ = tl("watch", "--format", "json", "--store", str(demo_store))
    rows = json.loads(out)
    assert {r["unit_label"] for r in rows} >= {*KNEES, GLITCH} and code == 1
    code, _, err = tl("watch", "--fail-on", "nothing", "--store", str(demo_store))
    assert code == 2 and "too_few_points" in err


# --- a lab with one cell per reason -------------------------------------------------------

LAB_SPEC = """\
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
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
limit = 2.0
horizon = 50
window = "week"

[[fit]]
name = "plain"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
limit = 2.0
horizon = 50

[[fit]]
name = "nolimit"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
window = "week"

[[fit]]
name = "origin"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
through_origin = true
limit = 2.0
horizon = 50
window = "week"
"""
START = date(2026, 3, 2)


def _cells() -> dict[str, list[tuple[int, int, float]]]:
    """(day, cycle, capacity) per cell; two weeks of four cycles a day."""
    rng = np.random.default_rng(11)

    def line(a: float, b: float, days: range) -> list[tuple[int, int, float]]:
        out = []
        for d in days:
            for k in range(4):
                x = d * 4 + k + 1
                noise = float(np.clip(rng.normal(0, 0.002), -0.004, 0.004))
                out.append((d, x, round(a + b * x + noise, 6)))
        return out

    return {
        "soon": line(2.6, -0.008, range(14)),  # meets 2.0 at x = 75, latest x 56
        "past": line(2.2, -0.008, range(14)),  # met 2.0 at x = 25, inside the data
        "fine": line(3.0, -0.001, range(14)),  # meets 2.0 at x = 1000
        "early": line(3.0, -0.001, range(10)),  # like fine, but its data end four days sooner
        "few": [(0, 1, 2.9), (0, 2, 2.89)],  # two readings
    }


@pytest.fixture(scope="module")
def lab_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    lab = Lab(tmp_path_factory.mktemp("alerts") / "lab", LAB_SPEC)
    for cell, rows in _cells().items():
        for d in sorted({r[0] for r in rows}):
            text = "cycle,capacity_ah\n" + "".join(
                f"{x},{y!r}\n" for day, x, y in rows if day == d)
            lab.write(f"incoming/{(START + timedelta(days=d)).isoformat()}/{cell}.csv", text)
    with lab.init() as led:
        led.append()
    return lab.store


def test_each_cell_trips_its_reason(lab_store: Path) -> None:
    with Ledger.open(lab_store, read_only=True) as led:
        got = led.watch("fade")
    pairs = sorted(zip(got["unit_label"], got["reason"], strict=True))
    assert pairs == [("few", "too_few_points"), ("past", "out_of_limits"),
                     ("soon", "crossing_soon")]
    detail = dict(zip(got["unit_label"], got["detail"], strict=True))
    rows = _cells()["soon"]
    x = np.array([r[1] for r in rows], dtype=float)
    res = sm.OLS(np.array([r[2] for r in rows]), sm.add_constant(x)).fit()

    def lower_bound(at: float) -> float:
        # statsmodels get_prediction: the two-sided 90% band's lower edge is the one-sided 95%
        # lower bound of the mean line
        return float(res.get_prediction(np.array([[1.0, at]])).conf_int(alpha=0.10)[0, 0])

    # reference: scipy.optimize.brentq on that bound; numpy polyfit for the line's own crossing
    bound = optimize.brentq(lambda at: lower_bound(at) - 2.0, 56, 200, xtol=1e-10)
    b, a = np.polyfit(x, [r[2] for r in rows], 1)
    assert detail["soon"] == (
        f"the one-sided 95% bound meets the lower limit 2 at x = {bound:.4g}, "
        f"{bound - 56:.3g} after the latest x (horizon 50); the line meets it at "
        f"x = {(2.0 - a) / b:.4g}")
    assert detail["past"].startswith("the line is at 1.75")
    assert detail["past"].endswith("at the latest x 56, below the lower limit 2")
    assert detail["few"] == "2 pair(s); a line needs 3"


def test_newest_unit_first(lab_store: Path) -> None:
    with Ledger.open(lab_store, read_only=True) as led:
        got = led.watch("fade")
    # few's only day is the first: it comes last; soon and past share the latest day and x
    assert list(got["unit_label"]) == ["past", "soon", "few"]
    assert pd.to_datetime(got["latest_date"]).is_monotonic_decreasing


def test_views_follow_the_fit_settings(lab_store: Path) -> None:
    with Ledger.open(lab_store, read_only=True) as led:
        names = set(led.views()["name"])
        plain = led.fits("plain", view="alerts")
        nolimit = led.watch("nolimit")
    # no window: no windows or change view, and the alerts view without slope_changed
    assert {"fit_plain_alerts", "fit_plain_points", "fit_plain_crossing"} <= names
    assert not {"fit_plain_windows", "fit_plain_change"} & names
    assert sorted(zip(plain["cell"], plain["reason"], strict=True)) == [
        ("few", "too_few_points"), ("past", "out_of_limits"), ("soon", "crossing_soon")]
    # no limit: no crossing view and no crossing_soon
    assert "fit_nolimit_crossing" not in names and "fit_nolimit_change" in names
    assert list(nolimit["reason"]) == ["too_few_points"]
    # through the origin: points, crossing, windows and change serve both lines
    # (test_origin_views.py, test_origin_windows.py); the views that assume an intercept are
    # left out
    assert {n for n in names if n.startswith("fit_origin")} >= {
        "fit_origin", "fit_origin_moments", "fit_origin_points", "fit_origin_crossing"}
    assert not {f"fit_origin_{k}" for k in ("break", "alerts", "trend", "straight")} & names


def test_watch_cli_groups_by_unit_and_cautions(lab_store: Path) -> None:
    code, out, _ = tl("watch", "fade", "--store", str(lab_store))
    assert code == 1
    lines = out.splitlines()
    assert lines[0] == "3 alert(s) on 3 unit(s) (fit fade)"
    assert lines[2] == "past  (latest 2026-03-15, x 56)"
    assert lines[3].startswith("  out_of_limits   the line is at 1.75")
    assert lines[-1] == CAUTION  # a projection is shown
    code, out, err = tl("watch", "fade", "--format", "csv", "--store", str(lab_store))
    assert CAUTION in err and CAUTION not in out
    # every fit with an alerts view: the header names the fit
    code, out, _ = tl("watch", "--store", str(lab_store))
    assert "fade: soon  (latest 2026-03-15, x 56)" in out
    assert "nolimit: few  (latest 2026-03-02, x 2)" in out


@pytest.mark.parametrize("fail_on, fails", [
    (None, True), ("too_few_points", True), ("low_r2", True), ("outliers", True),
    ("slope_changed", True), ("crossing_soon", True)])
def test_fail_on_levels(lab_store: Path, fail_on: str | None, fails: bool) -> None:
    with Ledger.open(lab_store, read_only=True) as led:
        nolimit = led.watch("nolimit")  # too_few_points only
        fade = led.watch("fade")  # up to crossing_soon
    assert failing(fade, fail_on) is fails
    assert failing(nolimit, fail_on) is (fail_on in (None, "too_few_points"))


def test_failing_follows_the_severity_order() -> None:
    frame = pd.DataFrame({"reason": ["low_r2", "outliers"]})
    assert failing(frame) and failing(frame, "low_r2") and failing(frame, "outliers")
    assert not failing(frame, "slope_changed") and not failing(frame, "crossing_soon")
    assert not failing(frame.iloc[:0])
    assert SEVERITY == ("too_few_points", "x_went_back", "low_r2", "not_straight", "outliers",
                        "unlike_fleet", "slope_changed", "bent", "out_of_trend", "silent",
                        "crossing_soon", "out_of_limits")


def test_duckdb_cli_reads_the_alerts_and_the_break_macro(demo_store: Path,
                                                         demo_alerts: pd.DataFrame) -> None:
    import subprocess

    from .test_clients import duckdb_cli

    def run(sql: str) -> list[dict[str, object]]:
        out = subprocess.run([duckdb_cli(), "-readonly", "-json", str(demo_store), "-c", sql],
                             capture_output=True, text=True, check=True).stdout
        return json.loads(out) if out.strip() else []

    rows = run("SELECT cell, reason, detail FROM fit_fade_alerts ORDER BY cell, reason")
    api = demo_alerts.sort_values(["cell", "reason"])
    assert [(r["cell"], r["reason"], r["detail"]) for r in rows] == list(
        api[["cell", "reason", "detail"]].itertuples(index=False, name=None))
    knee = run(f"SELECT f, p FROM fit_fade_break(228) WHERE cell = '{KNEES[0]}'")
    assert knee[0]["f"] > 1000 and knee[0]["p"] < 1e-100
