"""Tests for the bundled "Bench 7" demo scenario.

The demo has to show every feature of trendledger, so these tests check that the
generated files really contain what the scenario promises: steady cells that are
straight lines, knee cells that are not, a glitching channel whose bad readings a
Bonferroni outlier test finds, one truncated file and one corrected re-send.
Each numeric check is paired with a control showing that the same check fails
on data that lacks the property.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import replace
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm

from trendledger.demo_data import (
    DEFAULT_PLAN,
    HEADER,
    SPEC_TOML,
    DemoPlan,
    cell_rows,
    expected,
    file_path,
    write_all,
    write_day,
    write_retransmit,
)

PLAN = DEFAULT_PLAN
REPO = Path(__file__).resolve().parents[1]
ROW = re.compile(r"^\d+,\d+\.\d{4},-?\d+\.\d$")
ALPHA = 0.01
MIN_R2_STEADY = 0.98


# --------------------------------------------------------------------------- helpers


def tree_bytes(root: Path) -> dict[str, bytes]:
    return {
        p.relative_to(root).as_posix(): p.read_bytes()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


def parse(path: Path) -> tuple[str, list[tuple[int, float, float]]]:
    """Header and rows of a complete data file."""
    lines = path.read_text(encoding="utf-8").splitlines()
    rows = []
    for line in lines[1:]:
        cycle, cap, temp = line.split(",")
        rows.append((int(cycle), float(cap), float(temp)))
    return lines[0], rows


def series(root: Path, cell: str, plan: DemoPlan = PLAN) -> tuple[np.ndarray, np.ndarray]:
    """All (cycle, capacity) readings of a cell, read back from the files."""
    cycles: list[int] = []
    caps: list[float] = []
    for day in range(plan.n_days):
        _, rows = parse(file_path(root, plan, day, cell))
        cycles += [r[0] for r in rows]
        caps += [r[1] for r in rows]
    return np.array(cycles, dtype=float), np.array(caps)


def fit(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """(slope, r2) of an ordinary least-squares line."""
    slope, intercept = np.polyfit(x, y, 1)
    resid = y - (slope * x + intercept)
    r2 = 1.0 - float(np.sum(resid**2)) / float(np.sum((y - y.mean()) ** 2))
    return float(slope), r2


def bonferroni_outliers(x: np.ndarray, y: np.ndarray, alpha: float = ALPHA) -> list[int]:
    """Indexes flagged by statsmodels' Bonferroni outlier test on a straight-line fit."""
    result = sm.OLS(y, sm.add_constant(x)).fit()
    table = np.asarray(result.outlier_test(method="bonf"))
    return [int(i) for i in np.flatnonzero(table[:, 2] < alpha)]


def week_of(plan: DemoPlan, cycle: float) -> tuple[int, int]:
    day = (int(cycle) - 1) // plan.cycles_per_day
    iso = plan.date_of(day).isocalendar()
    return iso.year, iso.week


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def first(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The run as first delivered (truncated file cut, re-sent file in mAh)."""
    root = tmp_path_factory.mktemp("first")
    write_all(root)
    return root


@pytest.fixture(scope="module")
def final(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The run after the correction and the retransmission have arrived."""
    root = tmp_path_factory.mktemp("final")
    write_all(root)
    write_day(root, PLAN.resent[0], corrected=True)
    write_retransmit(root)
    return root


# --------------------------------------------------------------------------- spec


def test_spec_constant_matches_shipped_file() -> None:
    assert (REPO / "demo" / "spec.toml").read_text(encoding="utf-8") == SPEC_TOML


def test_spec_parses_and_fits_the_scenario() -> None:
    spec = tomllib.loads(SPEC_TOML)
    assert spec["source"]["files"] == "incoming/{day}/{cell}.csv"
    assert list(spec["source"]["columns"]) == HEADER.split(",")
    (fade,) = spec["fit"]
    assert fade["limit"] == pytest.approx(0.8 * PLAN.nominal_ah)
    assert fade["alpha"] == ALPHA


def test_write_all_writes_the_spec(first: Path) -> None:
    assert (first / "spec.toml").read_text(encoding="utf-8") == SPEC_TOML


# --------------------------------------------------------------------------- determinism


def test_same_bytes_twice(first: Path, tmp_path: Path) -> None:
    write_all(tmp_path)
    assert tree_bytes(tmp_path) == tree_bytes(first)


def test_seed_changes_the_data(tmp_path: Path) -> None:
    a = write_day(tmp_path / "a", 3)
    b = write_day(tmp_path / "b", 3, replace(PLAN, seed=8))
    assert [p.read_bytes() for p in a] != [p.read_bytes() for p in b]


@pytest.mark.parametrize("day", [0, 10, PLAN.resent[0], PLAN.truncated[0], PLAN.n_days - 1])
def test_one_day_alone_equals_that_day_of_the_full_run(
    first: Path, tmp_path: Path, day: int
) -> None:
    paths = write_day(tmp_path, day)
    assert len(paths) == len(PLAN.cells)
    for path in paths:
        assert path.read_bytes() == (first / path.relative_to(tmp_path)).read_bytes()


def test_data_of_a_cell_does_not_depend_on_the_other_cells() -> None:
    keep = set(PLAN.cells) - {"c11", "c13", "c20"}
    other = replace(PLAN, cells=tuple(c for c in PLAN.cells[::-1] if c in keep))
    assert cell_rows(other, "c12", 33) == cell_rows(PLAN, "c12", 33)


# --------------------------------------------------------------------------- structure


def test_layout_49_files_per_day_on_consecutive_dates(first: Path) -> None:
    days = sorted(p.name for p in (first / "incoming").iterdir())
    want = [(date(2026, 3, 2) + timedelta(days=i)).isoformat() for i in range(90)]
    assert days == want
    for name in days:
        files = sorted(p.name for p in (first / "incoming" / name).iterdir())
        assert files == [f"c{i:02d}.csv" for i in range(1, 50)]


def test_every_complete_file_has_header_four_rows_and_unix_newlines(first: Path) -> None:
    broken = file_path(first, PLAN, *PLAN.truncated)
    in_mah = file_path(first, PLAN, *PLAN.resent)
    mah_row = re.compile(r"^\d+,\d+\.\d,-?\d+\.\d$")
    for path in (first / "incoming").rglob("*.csv"):
        raw = path.read_bytes()
        assert b"\r" not in raw
        if path == broken:
            continue
        assert raw.endswith(b"\n")
        lines = raw.decode("utf-8").split("\n")[:-1]
        assert lines[0] == HEADER
        assert len(lines) == 1 + PLAN.cycles_per_day
        pattern = mah_row if path == in_mah else ROW
        assert all(pattern.match(line) for line in lines[1:]), path


def test_cycles_run_on_across_days(final: Path) -> None:
    last = PLAN.n_days * PLAN.cycles_per_day
    for cell in PLAN.cells:
        cycles, _ = series(final, cell)
        assert cycles.tolist() == list(range(1, last + 1)), cell


def test_values_in_files_equal_cell_rows(final: Path) -> None:
    for cell in ("c01", "c07", "c15", "c48"):
        for day in (0, 45, 89):
            _, rows = parse(file_path(final, PLAN, day, cell))
            want = [(r.cycle, r.capacity_ah, r.temp_c) for r in cell_rows(PLAN, cell, day)]
            assert rows == want


# --------------------------------------------------------------------------- truncated file


def test_truncated_file_is_cut_mid_line(first: Path) -> None:
    day, cell = PLAN.truncated
    text = file_path(first, PLAN, day, cell).read_text(encoding="utf-8")
    assert not text.endswith("\n")
    lines = text.split("\n")
    assert lines[0] == HEADER
    assert len(lines) == 1 + PLAN.cycles_per_day
    assert all(ROW.match(line) for line in lines[1:-1])
    # the last line stops inside the capacity field: too few columns to load
    assert re.fullmatch(r"\d+,\d\.\d\d", lines[-1]), lines[-1]
    assert not ROW.match(lines[-1])


def test_retransmit_completes_the_truncated_file(first: Path, tmp_path: Path) -> None:
    day, cell = PLAN.truncated
    write_all(tmp_path)
    cut = file_path(tmp_path, PLAN, day, cell).read_bytes()
    path = write_retransmit(tmp_path)
    assert path == file_path(tmp_path, PLAN, day, cell)
    full = path.read_bytes()
    assert full.endswith(b"\n") and full.startswith(cut) and len(full) > len(cut)
    header, rows = parse(path)
    assert header == HEADER and len(rows) == PLAN.cycles_per_day
    # nothing else changed
    before, after = tree_bytes(first), tree_bytes(tmp_path)
    changed = [k for k in before if before[k] != after[k]]
    assert changed == [path.relative_to(tmp_path).as_posix()]


# --------------------------------------------------------------------------- re-sent day


def test_correction_rewrites_only_the_resent_file(first: Path, tmp_path: Path) -> None:
    day, cell = PLAN.resent
    write_all(tmp_path)
    paths = write_day(tmp_path, day, corrected=True)
    assert paths == [file_path(tmp_path, PLAN, day, cell)]
    before, after = tree_bytes(first), tree_bytes(tmp_path)
    changed = [k for k in before if before[k] != after[k]]
    assert changed == [paths[0].relative_to(tmp_path).as_posix()]


def test_first_delivery_has_capacity_in_mah_and_nothing_else_wrong(
    first: Path, final: Path
) -> None:
    day, cell = PLAN.resent
    bad_header, bad = parse(file_path(first, PLAN, day, cell))
    good_header, good = parse(file_path(final, PLAN, day, cell))
    assert bad_header == good_header == HEADER
    assert [r[0] for r in bad] == [r[0] for r in good]  # cycles
    assert [r[2] for r in bad] == [r[2] for r in good]  # temperatures
    for b, g in zip(bad, good, strict=True):
        assert b[1] == pytest.approx(g[1] * 1000, abs=1e-6)
        assert 2.0 < g[1] < 3.1


def test_correction_only_exists_for_the_resent_day(tmp_path: Path) -> None:
    with pytest.raises(ValueError):
        write_day(tmp_path, PLAN.resent[0] + 1, corrected=True)


# --------------------------------------------------------------------------- steady cells


def test_steady_cells_are_straight_lines_with_slope_in_band(final: Path) -> None:
    lo, hi = PLAN.fade_band
    rates = expected()["fade_rate"]
    for cell in PLAN.steady_cells:
        slope, r2 = fit(*series(final, cell))
        assert r2 > MIN_R2_STEADY, (cell, r2)
        assert lo - 5e-6 < -slope < hi + 5e-6, (cell, slope)
        assert -slope == pytest.approx(rates[cell], abs=5e-6), cell


def test_fast_cell_is_a_straight_line_faster_than_every_steady_cell(final: Path) -> None:
    slope, r2 = fit(*series(final, PLAN.fast_cell))
    assert r2 > MIN_R2_STEADY
    assert -slope == pytest.approx(expected()["fast"]["rate"], abs=5e-6)
    assert -slope > 2 * PLAN.fade_band[1]


def test_linearity_check_rejects_the_uncorrected_delivery(first: Path) -> None:
    # control: the same check fails when the mAh file is taken at face value
    _, r2 = fit(*series(first, PLAN.resent[1]))
    assert r2 < MIN_R2_STEADY


def test_steady_cells_have_no_bonferroni_outliers(final: Path) -> None:
    flagged = {c: bonferroni_outliers(*series(final, c)) for c in PLAN.steady_cells}
    assert {c: f for c, f in flagged.items() if f} == {}


def test_outlier_check_finds_a_single_dip_in_a_steady_cell(final: Path) -> None:
    # control: the smallest glitch size, planted in one steady cell, is found
    x, y = series(final, "c02")
    y = y.copy()
    y[200] -= PLAN.glitch_drop_band[0]
    assert bonferroni_outliers(x, y) == [200]


# --------------------------------------------------------------------------- knee cells


@pytest.mark.parametrize("cell", PLAN.knee_cells)
def test_knee_cells_bend(final: Path, cell: str) -> None:
    x, y = series(final, cell)
    _, r2 = fit(x, y)
    assert r2 < 0.9  # below the spec's min_r2: a straight line is a poor summary

    early = x <= 60 * PLAN.cycles_per_day
    early_slope, early_r2 = fit(x[early], y[early])
    last_week = np.array([week_of(PLAN, c) == week_of(PLAN, x[-1]) for c in x])
    late_slope, _ = fit(x[last_week], y[last_week])
    assert late_slope < 0 and early_slope < 0
    assert late_slope / early_slope >= 4.0, (cell, early_slope, late_slope)

    knee_day = expected()["knee"][cell]["day"]
    before = x <= knee_day * PLAN.cycles_per_day
    pre_slope, pre_r2 = fit(x[before], y[before])
    lo, hi = PLAN.fade_band
    assert lo - 1e-5 < -pre_slope < hi + 1e-5
    assert pre_r2 > 0.9


def test_knee_checks_would_pass_a_steady_cell(final: Path) -> None:
    # control: a steady cell does not meet either knee criterion
    x, y = series(final, "c02")
    _, r2 = fit(x, y)
    assert r2 >= 0.9
    early = x <= 60 * PLAN.cycles_per_day
    last_week = np.array([week_of(PLAN, c) == week_of(PLAN, x[-1]) for c in x])
    ratio = fit(x[last_week], y[last_week])[0] / fit(x[early], y[early])[0]
    assert ratio < 4.0


# --------------------------------------------------------------------------- glitch cell


def test_glitch_cell_outliers_are_exactly_the_planted_ones(final: Path) -> None:
    x, y = series(final, PLAN.glitch_cell)
    flagged = sorted(int(x[i]) for i in bonferroni_outliers(x, y))
    readings = expected()["glitch"]["readings"]
    assert 4 <= len(readings) <= 6
    assert flagged == sorted(r["cycle"] for r in readings)
    lo, hi = PLAN.glitch_drop_band
    assert all(lo <= r["drop_ah"] <= hi for r in readings)


def test_glitch_cell_is_steady_apart_from_its_glitches(final: Path) -> None:
    x, y = series(final, PLAN.glitch_cell)
    bad = np.isin(x, [r["cycle"] for r in expected()["glitch"]["readings"]])
    slope, r2 = fit(x[~bad], y[~bad])
    lo, hi = PLAN.fade_band
    assert r2 > MIN_R2_STEADY and lo - 5e-6 < -slope < hi + 5e-6
    # control: with the glitches left in, it is no longer a clean line
    assert fit(x, y)[1] < MIN_R2_STEADY


# --------------------------------------------------------------------------- expected()


def test_expected_partitions_the_cells() -> None:
    e = expected()
    steady, knee, glitch = set(e["steady"]), set(e["knee"]), {e["glitch"]["cell"]}
    fast = {e["fast"]["cell"]}
    assert len(steady) == 44 and knee == {"c07", "c23", "c41"} and glitch == {"c15"}
    assert fast == {"c49"}
    assert steady | knee | glitch | fast == set(PLAN.cells)
    assert not (steady & knee or steady & glitch or knee & glitch)
    assert not fast & (steady | knee | glitch)
    # the fast cell fades fast_factor times faster than the band its siblings are drawn from
    assert e["fast"]["rate"] >= PLAN.fast_factor * PLAN.fade_band[0]
    assert e["truncated"]["path"] == "incoming/2026-04-11/c33.csv"
    assert e["resent"]["path"] == "incoming/2026-03-22/c30.csv"
    for k in e["knee"].values():
        assert 55 <= k["day"] <= 65 and 6.0 <= k["factor"] <= 10.0


def test_expected_end_of_life_projection() -> None:
    e = expected()
    floor, last = 0.8 * PLAN.nominal_ah, e["last_cycle"]
    # knee cells head for the floor far sooner than steady ones
    assert max(e["eol_cycle"][c] for c in e["knee"]) < min(e["eol_cycle"][c] for c in e["steady"])
    assert all(e["true_capacity_end"][c] > floor for c in PLAN.cells)
    assert e["within_horizon"] == []
    assert set(expected(horizon=500)["within_horizon"]) == set(e["knee"])
    assert last == 360


def test_plan_rejects_unknown_cells_and_days() -> None:
    with pytest.raises(ValueError):
        replace(PLAN, glitch_cell="c99")
    with pytest.raises(ValueError):
        replace(PLAN, truncated=(90, "c33"))
    with pytest.raises(ValueError):
        replace(PLAN, glitch_cell="c07")
