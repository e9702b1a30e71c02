"""Names never collide: every column name of every view, the reserved prefix and common field
names, as group, x and y columns, are either refused when the spec is parsed (one line naming
the clash) or work through every command (append, fits, points, watch, report, export).

The names are read from the SQL templates themselves (views.names), so a new view column is
tested without editing this file.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from trendledger import Ledger
from trendledger.errors import SpecError
from trendledger.spec import RESERVED, parse
from trendledger.views import names

from .audit import fuzz_scale
from .conftest import Lab

COMMON = ["unit", "day", "date", "x", "y", "value", "group", "reason", "batch", "file"]
#: About how many names a normal run tries as x and y (all of them with TRENDLEDGER_FUZZ=long).
SAMPLE = 6
CANDIDATES = sorted({*names.view_columns(), *COMMON, "tl_x", "tl_unit"})


def group_spec(name: str) -> str:
    stamp = "stamp" if name.lower() != "stamp" else "stamp2"
    return f"""
[source]
files = "incoming/{{{stamp}}}/{{{name}}}.csv"
[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"
[source.fields]
{stamp} = "DATE"
[[fit]]
name = "fade"
group = ["{name}"]
x = "cycle"
y = "capacity_ah"
window = "week"
limit = 2.5
horizon = 100
"""


def xy_spec(pairs: list[tuple[str, str]], origin: bool = False) -> str:
    columns = sorted({n for pair in pairs for n in pair})
    text = '[source]\nfiles = "incoming/{stamp}/{cell}.csv"\n[source.columns]\n'
    text += "".join(f'"{c}" = "DOUBLE"\n' for c in columns)
    text += '[source.fields]\nstamp = "DATE"\n'
    for i, (x, y) in enumerate(pairs):
        # the first fit has every optional view; the others the fit, points and alerts
        extra = "window_x = 4\nlimit = 2.5\nhorizon = 100\n" if i == 0 else ""
        text += (f'[[fit]]\nname = "f{i}"\ngroup = ["cell"]\nx = "{x}"\ny = "{y}"\n{extra}'
                 f'through_origin = {str(origin).lower()}\n')
    return text


def parses(text: str) -> SpecError | None:
    try:
        parse(text, path="spec.toml")
    except SpecError as err:
        return err
    return None


def run_everything(led: Ledger, tmp: Path, report: bool = True) -> None:
    """Every command a user runs, on every fit of the store."""
    for fit in led.spec.fits:
        assert len(led.fits(fit.name)) > 0
        for view in ("points", "windows", "crossing", "alerts"):
            # through-origin fits have no windows or alerts view yet
            if fit.through_origin and view == "alerts":
                continue
            windowed = (fit.window or fit.window_x) and not fit.through_origin
            if windowed or view not in ("windows", "crossing"):
                if view != "crossing" or fit.limit is not None:
                    led.fits(fit.name, view=view)
    led.watch()
    if report:
        led.report(led.spec.fits[0].name, out=tmp / "report")
    led.export(tmp / "export")


def day_rows(cells: int = 2, start: int = 1) -> dict[str, list[tuple[int, float]]]:
    # invented readings: a falling line with a small wobble, one cell far off the line
    return {f"c{c}": [(x, 3.0 - 0.01 * c * x + 0.002 * (x % 3)) for x in range(start, start + 6)]
            for c in range(cells)}


@pytest.mark.parametrize("name", CANDIDATES)
def test_group_name_is_refused_with_one_line_or_accepted(name: str) -> None:
    err = parses(group_spec(name))
    if err is None:
        assert name in COMMON, f"{name!r} is a view column and was accepted as a group column"
        return
    message = str(err)
    assert "\n" not in message and repr(name) in message
    if name.lower() in names.view_columns() and name.lower() not in RESERVED:
        # the sentence names the views that have the column
        assert all(kind in message for kind in names.view_columns()[name.lower()])


@pytest.mark.slow
def test_accepted_group_names_work_through_every_command(tmp_path: Path) -> None:
    accepted = [n for n in COMMON if parses(group_spec(n)) is None]
    # today only the view columns x, y and reason are refused among the common names
    assert sorted(set(COMMON) - set(accepted)) == ["reason", "x", "y"]
    if fuzz_scale() == 1:
        # a normal run nests three of them (each fit's views over deep folders take minutes);
        # TRENDLEDGER_FUZZ=long nests them all
        accepted = accepted[:3]
    folders = "/".join(f"{{{n}}}" for n in accepted[:-1]) + f"/{{{accepted[-1]}}}.csv"
    text = (f'[source]\nfiles = "incoming/{{stamp}}/{folders}"\n[source.columns]\n'
            'cycle = "INTEGER"\ncapacity_ah = "DOUBLE"\n[source.fields]\nstamp = "DATE"\n')
    for i, name in enumerate(accepted):
        text += (f'[[fit]]\nname = "g{i}"\ngroup = ["{name}"]\nx = "cycle"\n'
                 'y = "capacity_ah"\nwindow = "week"\nlimit = 2.5\nhorizon = 100\n')
    lab = Lab(tmp_path, text)
    lab.init().close()
    for day, start in (("2026-03-02", 1), ("2026-03-09", 7)):
        for cell, rows in day_rows(start=start).items():
            path = "/".join(cell for _ in accepted)
            lab.write(f"incoming/{day}/{path}.csv",
                      "cycle,capacity_ah\n" + "".join(f"{x},{y!r}\n" for x, y in rows))
    with lab.open() as led:
        led.append(command="test")
        run_everything(led, tmp_path)
        got = led.watch()
        assert set(got["unit_label"]) <= {"c0", "c1"} and len(got) > 0


def test_reserved_prefix_is_refused_everywhere() -> None:
    for role in ("columns", "fields"):
        text = group_spec("cell").replace("cycle = ", "tl_cycle = ") if role == "columns" \
            else group_spec("tl_cell")
        err = parses(text)
        assert err is not None and "'tl_'" in str(err)


@pytest.mark.slow
@pytest.mark.parametrize("origin", [False, True])
def test_view_and_common_names_work_as_x_and_y(tmp_path: Path, origin: bool) -> None:
    usable = [n for n in CANDIDATES if not n.lower().startswith(names.PREFIX)
              and n not in ("cell", "stamp") and n not in RESERVED]
    if fuzz_scale() == 1:
        # a normal run takes every few names (a store with a fit per name takes an hour on two
        # cores); TRENDLEDGER_FUZZ=long takes them all
        usable = usable[::max(1, len(usable) // SAMPLE)]
    refused = [n for n in CANDIDATES if n.lower().startswith(names.PREFIX)]
    for name in refused:
        assert parses(xy_spec([(name, "capacity")])) is not None
    # each name once as x and once as y, in fits of one store: fit i reads x = name i and
    # y = name i + 1, so name i is the y of fit i - 1
    pairs = [(usable[i], usable[(i + 1) % len(usable)]) for i in range(len(usable))]
    text = xy_spec(pairs, origin)
    assert parses(text) is None
    lab = Lab(tmp_path, text)
    lab.init().close()
    columns = sorted({n for pair in pairs for n in pair})
    for day, start in (("2026-03-02", 1), ("2026-03-09", 7)):
        for c in range(2):
            lines = ",".join(f'"{n}"' for n in columns) + "\n"
            for k in range(start, start + 6):
                lines += ",".join(repr(3.0 - 0.01 * (c + 1) * k + 0.001 * ((k + j) % 3))
                                  for j in range(len(columns))) + "\n"
            lab.write(f"incoming/{day}/c{c}.csv", lines)
    with lab.open() as led:
        led.append(command="test")
        run_everything(led, tmp_path)
