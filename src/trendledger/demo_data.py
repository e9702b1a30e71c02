"""Bundled demo scenario: "Bench 7", a battery test lab cycling 49 lithium cells.

Why this exists: trendledger has to be shown, and tested, on data that has the
awkward features real daily instrument drops have -- units that behave, units that
change behaviour, a flaky channel, a file cut short in transfer and a day that is
sent again with a correction. The scenario is invented and fully deterministic, so
a demo run and a test see the same bytes.

The lab
-------
Every day, for ``n_days`` days starting ``start``, the cycler writes one CSV per
cell to ``incoming/<YYYY-MM-DD>/<cell>.csv`` with the header
``cycle,capacity_ah,temp_c``. Each cell runs ``cycles_per_day`` cycles a day and
the cycle counter keeps running across days (day ``d`` holds cycles
``d*cycles_per_day + 1`` .. ``(d+1)*cycles_per_day``).

* Steady cells lose capacity linearly:
  ``capacity = nominal - fade_rate * cycle + noise``. The fade rate is drawn per
  cell from ``fade_band`` and the noise is Gaussian, truncated at 3 sd so that a
  Bonferroni outlier test over a cell's history has nothing to find.
* Knee cells follow the same law until their knee day, then fade
  ``knee_factor`` times faster (factor drawn per cell from ``knee_factor_band``)
  and run a little warmer.
* The fast cell fades in a clean straight line, ``fast_factor`` times faster than
  the rate drawn for it from ``fade_band``: a unit unlike its siblings.
* The glitch cell fades steadily, but on each of ``glitch_days`` one reading
  (a drawn cycle of that day) comes out ``glitch_drop_band`` Ah too low.
* The truncated file (``truncated``) is written cut in the middle of its last
  line, with no final newline, as if the transfer broke. ``write_retransmit``
  writes the complete file later, at the same path.
* The re-sent file (``resent``) is first delivered with the capacity column in
  mAh instead of Ah (every value 1000 times too large); ``write_day(...,
  corrected=True)`` writes the corrected file, again at the same path.

Every number is a function of (plan, cell, day) only: each (cell, day) pair has
its own random stream derived from the seed, so writing one day alone gives the
same bytes as writing the whole run.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "DEFAULT_PLAN",
    "HEADER",
    "SPEC_TOML",
    "DemoPlan",
    "Row",
    "cell_rows",
    "expected",
    "file_path",
    "write_all",
    "write_day",
    "write_retransmit",
    "write_spec",
]

#: The spec that goes with the demo data (also shipped as ``demo/spec.toml``).
SPEC_TOML = """\
[source]
files = "incoming/{day}/{cell}.csv"
format = "csv"

[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"
temp_c = "DOUBLE"

[source.fields]
day = "DATE"
cell = "VARCHAR"

[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
limit = 2.4          # end-of-life floor, 80 % of the 3.0 Ah nominal capacity (common practice for cells)
horizon = 200        # warn when the projected crossing is within 200 cycles
window = "week"      # slope per calendar week of the `day` field
alpha = 0.01
"""  # noqa: E501 (the limit comment is long on purpose: it says where 2.4 comes from)

#: First line of every data file.
HEADER = "cycle,capacity_ah,temp_c"

# Tags that keep the random streams apart: per-cell constants, per-(cell, day)
# noise, per-(cell, day) glitches. Changing one kind of draw never shifts another.
_STREAM_CELL = 0
_STREAM_DAY = 1
_STREAM_GLITCH = 2

#: How far the noise may stray, in standard deviations (see module docstring).
_NOISE_CLIP = 3.0


def _default_cells() -> tuple[str, ...]:
    return tuple(f"c{i:02d}" for i in range(1, 50))


@dataclass(frozen=True)
class DemoPlan:
    """Everything that defines the scenario; the data is a pure function of it.

    Day numbers are 0-based indexes into the run (day 0 is ``start``). Frozen so a
    plan can be shared and hashed, and so nobody changes the scenario halfway
    through writing it.
    """

    seed: int = 11
    start: date = date(2026, 3, 2)
    n_days: int = 90
    cells: tuple[str, ...] = field(default_factory=_default_cells)
    cycles_per_day: int = 4
    nominal_ah: float = 3.0
    #: fade rate range in Ah per cycle, drawn uniformly per cell
    fade_band: tuple[float, float] = (1.2e-4, 2.0e-4)
    #: standard deviation of the capacity noise in Ah (before rounding to 4 decimals)
    noise_sd: float = 0.0015
    #: (cell, knee day): from the knee day on, the cell fades knee_factor times faster
    knees: tuple[tuple[str, int], ...] = (("c07", 57), ("c23", 61), ("c41", 64))
    knee_factor_band: tuple[float, float] = (7.0, 10.0)
    glitch_cell: str = "c15"
    #: the cell that fades in a straight line fast_factor times faster than its draw
    fast_cell: str = "c49"
    fast_factor: float = 3.0
    #: days on which the glitch cell reports one reading far too low
    glitch_days: tuple[int, ...] = (9, 27, 44, 68, 83)
    #: how far too low, in Ah
    glitch_drop_band: tuple[float, float] = (0.3, 0.8)
    #: (day, cell) whose file arrives cut in the middle of its last line
    truncated: tuple[int, str] = (40, "c33")
    #: (day, cell) whose file is first sent in mAh, then re-sent corrected
    resent: tuple[int, str] = (20, "c30")

    def __post_init__(self) -> None:
        cells = set(self.cells)
        if len(cells) != len(self.cells):
            raise ValueError("cell ids must be unique")
        if self.n_days < 1 or self.cycles_per_day < 2:
            raise ValueError("need at least one day and two cycles per day")
        special = [c for c, _ in self.knees] + [
            self.glitch_cell,
            self.fast_cell,
            self.truncated[1],
            self.resent[1],
        ]
        for cell in special:
            if cell not in cells:
                raise ValueError(f"{cell!r} is not one of the plan's cells")
        days = [d for _, d in self.knees] + [
            *self.glitch_days,
            self.truncated[0],
            self.resent[0],
        ]
        for day in days:
            if not 0 <= day < self.n_days:
                raise ValueError(f"day {day} is outside the run (0..{self.n_days - 1})")
        if self.glitch_cell in self.knee_cells:
            raise ValueError("the glitch cell must fade steadily apart from its glitches")
        if self.fast_cell in (*self.knee_cells, self.glitch_cell):
            raise ValueError("the fast cell must fade in a clean straight line")

    @property
    def knee_cells(self) -> tuple[str, ...]:
        """Cells that change behaviour during the run."""
        return tuple(c for c, _ in self.knees)

    @property
    def steady_cells(self) -> tuple[str, ...]:
        """Cells whose true capacity is a straight line over the whole run.

        The truncated and re-sent cells are steady: only their files are flawed. The fast
        cell is a straight line too, but at a rate outside ``fade_band``, so it is not here.
        """
        odd = set(self.knee_cells) | {self.glitch_cell, self.fast_cell}
        return tuple(c for c in self.cells if c not in odd)

    def date_of(self, day_index: int) -> date:
        """Calendar date of a 0-based day index."""
        return self.start + timedelta(days=day_index)

    def cycles_of(self, day_index: int) -> list[int]:
        """Cycle numbers recorded on a day (the counter runs across days)."""
        first = day_index * self.cycles_per_day + 1
        return list(range(first, first + self.cycles_per_day))


DEFAULT_PLAN = DemoPlan()


@dataclass(frozen=True)
class Row:
    """One reading as the cycler measures it (before any file flaw is applied)."""

    cycle: int
    capacity_ah: float
    temp_c: float

    def line(self) -> str:
        """CSV line without newline, in the file's number formats."""
        return f"{self.cycle},{self.capacity_ah:.4f},{self.temp_c:.1f}"


@dataclass(frozen=True)
class _CellLaw:
    """Per-cell constants, drawn once per cell from the seed."""

    fade_rate: float
    temp_offset: float
    knee_day: int | None
    knee_factor: float


def _rng(plan: DemoPlan, stream: int, cell: str, day: int = 0) -> np.random.Generator:
    # The cell id enters by its bytes, not its position in plan.cells, so adding
    # or reordering cells does not change the other cells' data.
    return np.random.default_rng([plan.seed, stream, day, *cell.encode()])


def _law(plan: DemoPlan, cell: str) -> _CellLaw:
    rng = _rng(plan, _STREAM_CELL, cell)
    fade_rate = float(rng.uniform(*plan.fade_band))
    if cell == plan.fast_cell:
        fade_rate *= plan.fast_factor
    temp_offset = float(rng.normal(0.0, 0.8))
    knee_factor = float(rng.uniform(*plan.knee_factor_band))
    knee_day = dict(plan.knees).get(cell)
    return _CellLaw(fade_rate, temp_offset, knee_day, knee_factor if knee_day is not None else 1.0)


def _glitch(plan: DemoPlan, cell: str, day_index: int) -> tuple[int, float] | None:
    """(row index within the day, drop in Ah) if this cell glitches on this day."""
    if cell != plan.glitch_cell or day_index not in plan.glitch_days:
        return None
    rng = _rng(plan, _STREAM_GLITCH, cell, day_index)
    return int(rng.integers(plan.cycles_per_day)), float(rng.uniform(*plan.glitch_drop_band))


def cell_rows(plan: DemoPlan, cell: str, day_index: int) -> list[Row]:
    """The readings of one cell on one day, rounded as they are written.

    These are the values the corrected / retransmitted files carry; tests and
    later features can use them as ground truth without parsing files.
    """
    if cell not in plan.cells:
        raise ValueError(f"{cell!r} is not one of the plan's cells")
    if not 0 <= day_index < plan.n_days:
        raise ValueError(f"day {day_index} is outside the run (0..{plan.n_days - 1})")
    law = _law(plan, cell)
    rng = _rng(plan, _STREAM_DAY, cell, day_index)
    cycles = np.array(plan.cycles_of(day_index), dtype=float)
    noise = np.clip(
        rng.normal(0.0, plan.noise_sd, cycles.size),
        -_NOISE_CLIP * plan.noise_sd,
        _NOISE_CLIP * plan.noise_sd,
    )
    temp_noise = rng.normal(0.0, 0.3, cycles.size)

    capacity = plan.nominal_ah - law.fade_rate * cycles + noise
    temp = 25.0 + law.temp_offset + temp_noise
    if law.knee_day is not None:
        knee_cycle = law.knee_day * plan.cycles_per_day
        past = np.maximum(cycles - knee_cycle, 0.0)
        capacity -= (law.knee_factor - 1.0) * law.fade_rate * past
        temp += np.where(past > 0, 2.5, 0.0)
    glitch = _glitch(plan, cell, day_index)
    if glitch is not None:
        row, drop = glitch
        capacity[row] -= drop

    return [
        Row(int(c), round(float(q), 4), round(float(t), 1))
        for c, q, t in zip(cycles, capacity, temp, strict=True)
    ]


def file_path(root: Path, plan: DemoPlan, day_index: int, cell: str) -> Path:
    """Where the cycler puts one cell's file for one day."""
    return Path(root) / "incoming" / plan.date_of(day_index).isoformat() / f"{cell}.csv"


def _file_text(plan: DemoPlan, cell: str, day_index: int, corrected: bool) -> str:
    rows = cell_rows(plan, cell, day_index)
    lines = [HEADER]
    if (day_index, cell) == plan.resent and not corrected:
        # First delivery: the channel exported milliamp-hours. With 4 decimals in
        # Ah, the mAh value has exactly 1 decimal, so the error is a pure x1000.
        lines += [f"{r.cycle},{r.capacity_ah * 1000:.1f},{r.temp_c:.1f}" for r in rows]
    else:
        lines += [r.line() for r in rows]
    text = "\n".join(lines) + "\n"
    if (day_index, cell) == plan.truncated and not corrected:
        # Cut inside the capacity field of the last row: "<cycle>,<d.dd" with
        # no newline, so the row has too few columns and the file must be refused.
        last = rows[-1]
        cut = f"{last.cycle},{last.capacity_ah:.4f}"[:-2]
        text = "\n".join(lines[:-1]) + "\n" + cut
    return text


def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    # newline="" so that '\n' is written as is on every platform.
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
    return path


def write_day(
    root: Path, day_index: int, plan: DemoPlan = DEFAULT_PLAN, corrected: bool = False
) -> list[Path]:
    """Write one day's delivery under ``root/incoming/<date>/`` and return the paths.

    With ``corrected=False`` (the normal case) all cells' files are written as first
    delivered, flaws included: the truncated file is cut short, and on the re-sent
    day the re-sent cell's file is in mAh.

    With ``corrected=True`` only the re-sent cell's corrected file is written (the
    lab re-sends just that file, overwriting the bad one at the same path), so the
    returned list has one path. This mirrors what a user sees: one file of an
    already loaded day changes. It is an error on any other day.
    """
    if not 0 <= day_index < plan.n_days:
        raise ValueError(f"day {day_index} is outside the run (0..{plan.n_days - 1})")
    if corrected:
        resent_day, resent_cell = plan.resent
        if day_index != resent_day:
            raise ValueError(f"no correction is sent for day {day_index} (only day {resent_day})")
        text = _file_text(plan, resent_cell, day_index, corrected=True)
        return [_write(file_path(root, plan, day_index, resent_cell), text)]
    return [
        _write(file_path(root, plan, day_index, cell), _file_text(plan, cell, day_index, False))
        for cell in plan.cells
    ]


def write_retransmit(root: Path, plan: DemoPlan = DEFAULT_PLAN) -> Path:
    """Write the truncated file again, complete, at its original path.

    Why separate: the broken file is meant to be refused on its day; the lab sends
    it again later, and the demo calls this when that later delivery comes in.
    """
    day_index, cell = plan.truncated
    text = _file_text(plan, cell, day_index, corrected=True)
    return _write(file_path(root, plan, day_index, cell), text)


def write_spec(root: Path) -> Path:
    """Write ``root/spec.toml`` (the same text as ``SPEC_TOML``)."""
    return _write(Path(root) / "spec.toml", SPEC_TOML)


def write_all(root: Path, plan: DemoPlan = DEFAULT_PLAN) -> None:
    """Write the spec and every day's files as first delivered.

    The correction and the retransmission are not written: they are later events,
    to be played with ``write_day(..., corrected=True)`` and ``write_retransmit``.
    """
    write_spec(root)
    for day_index in range(plan.n_days):
        write_day(root, day_index, plan)


def expected(plan: DemoPlan = DEFAULT_PLAN, horizon: float = 200.0) -> dict[str, Any]:
    """What the scenario contains, for tests of features that should find it.

    Returns plain data (JSON-friendly):

    * ``steady``: cells with a straight-line history (includes the truncated and
      re-sent cells, whose files are flawed but whose readings are not);
    * ``knee``: per knee cell, its knee day, first cycle after the knee, date,
      rate before and after;
    * ``glitch``: the glitch cell with its bad (day, cycle, drop) readings;
    * ``truncated`` / ``resent``: the flawed deliveries, with date and path
      relative to the data root;
    * ``fast``: the fast cell and its fade rate;
    * ``fade_rate``: the true (pre-knee) fade rate of every cell, Ah per cycle;
    * ``true_capacity_end``: noise-free capacity at the last cycle, per cell;
    * ``eol_cycle``: noise-free cycle at which each cell reaches the end-of-life
      floor (80 % of nominal) following its final fade rate;
    * ``within_horizon``: cells whose ``eol_cycle`` is at most ``horizon`` cycles
      after the last cycle (the cells an end-of-life warning should name). With
      the default plan and the spec's horizon of 200 this list is empty: the knee
      cells are projected to reach the floor some 350-450 cycles after the run.
    """
    floor = 0.8 * plan.nominal_ah
    last_cycle = plan.n_days * plan.cycles_per_day
    laws = {cell: _law(plan, cell) for cell in plan.cells}

    knee: dict[str, dict[str, Any]] = {}
    for cell, day in plan.knees:
        law = laws[cell]
        knee[cell] = {
            "day": day,
            "date": plan.date_of(day).isoformat(),
            "first_cycle_after": day * plan.cycles_per_day + 1,
            "rate_before": law.fade_rate,
            "rate_after": law.fade_rate * law.knee_factor,
            "factor": law.knee_factor,
        }

    glitches = []
    for day in sorted(plan.glitch_days):
        got = _glitch(plan, plan.glitch_cell, day)
        assert got is not None
        row, drop = got
        glitches.append({"day": day, "cycle": plan.cycles_of(day)[row], "drop_ah": drop})

    end: dict[str, float] = {}
    eol: dict[str, float] = {}
    for cell, law in laws.items():
        cap = plan.nominal_ah - law.fade_rate * last_cycle
        final_rate = law.fade_rate
        if law.knee_day is not None:
            cap -= (
                (law.knee_factor - 1.0)
                * law.fade_rate
                * (last_cycle - law.knee_day * plan.cycles_per_day)
            )
            final_rate *= law.knee_factor
        end[cell] = cap
        eol[cell] = last_cycle + (cap - floor) / final_rate

    def where(day: int, cell: str) -> dict[str, Any]:
        rel = file_path(Path("."), plan, day, cell)
        return {
            "day": day,
            "cell": cell,
            "date": plan.date_of(day).isoformat(),
            "path": rel.as_posix(),
        }

    return {
        "cells": list(plan.cells),
        "days": plan.n_days,
        "last_cycle": last_cycle,
        "steady": list(plan.steady_cells),
        "knee": knee,
        "glitch": {"cell": plan.glitch_cell, "readings": glitches},
        "fast": {"cell": plan.fast_cell, "rate": laws[plan.fast_cell].fade_rate},
        "truncated": where(*plan.truncated),
        "resent": where(*plan.resent),
        "fade_rate": {cell: law.fade_rate for cell, law in laws.items()},
        "true_capacity_end": end,
        "eol_cycle": eol,
        "within_horizon": [c for c in plan.cells if eol[c] - last_cycle <= horizon],
    }
