"""Time zones: the store reads and cuts date-times in UTC or the spec's zone, never the
machine's. Each check runs the real command under two TZ settings."""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest

from trendledger.errors import SpecError
from trendledger.spec import parse

from .audit import TRENDLEDGER
from .conftest import Lab

SPEC = """\
[source]
files = "incoming/{day}/{cell}.csv"
{zone}
[source.columns]
taken_at = "TIMESTAMPTZ"
cycle = "INTEGER"
capacity_ah = "DOUBLE"

[source.fields]
day = "VARCHAR"
cell = "VARCHAR"

[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
window = "day"
"""
#: Two cycles a day near midnight UTC: 23:00 UTC is already the next day in Auckland
#: (UTC+13 in March, daylight time), 01:00 UTC is still the previous day in Los Angeles.
ROWS = [("2026-03-02 01:00:00+00", 1, 3.0), ("2026-03-02 23:00:00+00", 2, 2.98),
        ("2026-03-03 01:00:00+00", 3, 2.97), ("2026-03-03 23:00:00+00", 4, 2.95),
        ("2026-03-04 01:00:00+00", 5, 2.93), ("2026-03-04 23:00:00+00", 6, 2.92),
        ("2026-03-05 10:00:00", 7, 2.9)]  # no offset: read in the spec's zone


def _run(lab: Lab, tz: str, *args: str) -> str:
    env = {**os.environ, "TZ": tz}
    proc = subprocess.run([TRENDLEDGER, *args, "--store", str(lab.store)], env=env,
                          capture_output=True, text=True, cwd=lab.root, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout


def _lab(root: Path, zone: str | None) -> Lab:
    lab = Lab(root, SPEC.replace("{zone}", f'timezone = "{zone}"\n' if zone else ""))
    lab.write("incoming/d1/c01.csv", "taken_at,cycle,capacity_ah\n"
              + "".join(f"{a},{c},{v}\n" for a, c, v in ROWS))
    return lab


@pytest.mark.parametrize("zone", [None, "Pacific/Auckland"])
def test_views_are_the_same_under_any_machine_zone(tmp_path: Path, zone: str | None) -> None:
    seen = {}
    for tz in ("UTC", "America/Los_Angeles"):
        lab = _lab(tmp_path / tz.replace("/", "_"), zone)
        _run(lab, tz, "init", "--spec", str(lab.spec))
        _run(lab, tz, "append")
        seen[tz] = (
            _run(lab, tz, "fits", "--view", "windows", "--format", "csv"),
            _run(lab, tz, "query", "SELECT cycle, CAST(taken_at AS VARCHAR) AS taken_at "
                 "FROM measurements ORDER BY cycle", "--format", "csv"),
        )
    assert seen["UTC"] == seen["America/Los_Angeles"]
    windows, times = seen["UTC"]
    starts = [line.split(",")[1] for line in windows.splitlines()[1:]]
    # the calendar days each zone puts the seven times in (worked out by hand from the
    # offsets: UTC+0; Auckland +13 in March 2026)
    assert starts == ["2026-03-02", "2026-03-03", "2026-03-04", "2026-03-05"]
    # a time written without an offset is read in the spec's zone, not the machine's
    assert times.splitlines()[7] == ("7,2026-03-05 10:00:00+00" if zone is None
                                     else "7,2026-03-05 10:00:00+13")


def test_auckland_days_differ_from_utc_days(tmp_path: Path) -> None:
    counts = {}
    for zone in (None, "Pacific/Auckland"):
        lab = _lab(tmp_path / str(zone).replace("/", "_"), zone)
        _run(lab, "Europe/Berlin", "init", "--spec", str(lab.spec))
        _run(lab, "Europe/Berlin", "append")
        out = _run(lab, "Europe/Berlin", "query",
                   "SELECT CAST(window_start AS VARCHAR) AS d, n FROM fit_fade_windows "
                   "ORDER BY d", "--format", "csv")
        counts[zone] = [tuple(line.split(",")) for line in out.splitlines()[1:]]
    # UTC days: 1+2 on 2 March, 3+4 on 3 March, 5+6 on 4 March, 7 on 5 March
    assert counts[None] == [("2026-03-02", "2"), ("2026-03-03", "2"), ("2026-03-04", "2"),
                            ("2026-03-05", "1")]
    # Auckland days: cycle 1 on 2 March; 2+3 on 3 March; 4+5 on 4 March; 6+7 on 5 March
    assert counts["Pacific/Auckland"] == [("2026-03-02", "1"), ("2026-03-03", "2"),
                                          ("2026-03-04", "2"), ("2026-03-05", "2")]


def test_an_unknown_zone_is_named() -> None:
    with pytest.raises(SpecError, match="unknown time zone 'Mars/Olympus'"):
        parse(SPEC.replace("{zone}", 'timezone = "Mars/Olympus"\n'))
