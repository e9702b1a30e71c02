"""Concurrency: appends that race each other, and readers that meet a writer.

One process writes a store at a time. Appends started together over
overlapping files must all finish (the later ones wait, with ``--wait``) or
fail with the documented busy message and exit code 4; either way every file
ends up loaded exactly once. Readers never meet a writer: they open the
published copy at once and see the last commit; a writer never waits for them.
"""

from __future__ import annotations

import datetime as dt
import json
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from trendledger import Ledger

from .audit import TRENDLEDGER, attack_rounds, audit, cli, one_clean_line, tally
from .conftest import Lab

#: The busy message names the other writer and when it started (never a reader).
BUSY = re.compile(r"another append or retract running since \d{4}-\d\d-\d\d "
                  r"\d\d:\d\d:\d\d UTC \(pid \d+: [^)]*\); retry or pass --wait SECONDS$")
CELLS = 300
ROWS_EACH = 3
#: Three appends per round: two over overlapping parts of the day, one over all of it;
#: each pattern with the hundreds of the cell numbers it covers.
PATTERNS = {"c[01]??.csv": {0, 1}, "c[12]??.csv": {1, 2}, "*.csv": {0, 1, 2}}


def _covers(pattern: str, cell: int) -> bool:
    return cell // 100 in PATTERNS[pattern]


def _new_day(lab: Lab, day: str) -> None:
    lab.day(day, {
        f"c{i:03d}": [(k, 3.0 - 1e-3 * k - 1e-6 * i) for k in range(ROWS_EACH)]
        for i in range(CELLS)
    })


@pytest.fixture
def filled(lab: Lab) -> Lab:
    lab.day("2026-03-02", {f"c{i:03d}": [(0, 3.0)] for i in range(10)})
    with lab.init() as led:
        led.append()
    return lab


def _race(lab: Lab, day: str, wait: str) -> list[tuple[str, subprocess.CompletedProcess]]:
    """Start one append per pattern at once over the day's folder; collect what each said."""
    procs = [
        (pattern, subprocess.Popen(
            [TRENDLEDGER, "append", "--json", "--wait", wait, "--store", str(lab.store),
             f"incoming/{day}/{pattern}"],
            cwd=lab.root, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        ))
        for pattern in PATTERNS
    ]
    done = []
    for pattern, proc in procs:
        out, err = proc.communicate(timeout=300)
        done.append((pattern, subprocess.CompletedProcess(proc.args, proc.returncode, out, err)))
    tally("appends raced", len(procs))
    return done


@pytest.mark.slow
@pytest.mark.parametrize("wait", ["30", "0"], ids=["waiting", "not-waiting"])
def test_racing_appends_load_every_file_exactly_once(filled: Lab, wait: str) -> None:
    lab = filled
    rounds = attack_rounds(5)
    expected_rows = 10
    busy_seen = 0
    for r in range(rounds):
        day = (dt.date(2026, 4, 1) + dt.timedelta(days=r)).isoformat()
        _new_day(lab, day)
        results = _race(lab, day, wait)
        loaded_by: dict[str, int] = {}
        winners = []
        for pattern, result in results:
            if result.returncode == 4:
                assert wait == "0", result.stderr
                assert one_clean_line(result.stderr), result.stderr
                assert BUSY.search(result.stderr.strip()), result.stderr
                busy_seen += 1
                continue
            assert result.returncode == 0, result.stderr
            winners.append(pattern)
            summary = json.loads(result.stdout)
            for outcome in summary["outcomes"]:
                if outcome["status"] == "loaded":
                    loaded_by[outcome["path"]] = loaded_by.get(outcome["path"], 0) + 1
        assert winners, "every racing append failed"
        # each file was loaded by exactly one of the appends that ran, and by no other
        want = {f"incoming/{day}/c{i:03d}.csv" for i in range(CELLS)
                if any(_covers(p, i) for p in winners)}
        assert set(loaded_by) == want
        assert set(loaded_by.values()) == {1}
        state = audit(lab.store)
        assert state.problems == []
        expected_rows += ROWS_EACH * len(want)
        assert state.rows == expected_rows
        if len(want) < CELLS:  # the losers' files are still there to load: nothing was lost
            result = cli("append", "--wait", "30", "--store", str(lab.store), cwd=lab.root)
            assert result.returncode == 0, result.stderr
            expected_rows += ROWS_EACH * (CELLS - len(want))
        state = audit(lab.store)
        assert state.problems == [] and state.rows == expected_rows
        assert all(state.loaded[f"incoming/{day}/c{i:03d}.csv"] == ROWS_EACH
                   for i in range(CELLS))
    print(f"{rounds} rounds, {3 * rounds} appends, {busy_seen} refused as busy")


# A writer that holds the store inside its transaction until this test lets it go.
GATED_WRITER = textwrap.dedent(
    """
    import sys
    from trendledger import Ledger

    def progress(stage, done, total):
        if stage == "read" and done == 0:
            print("writing", flush=True)
            sys.stdin.readline()

    with Ledger.open(sys.argv[1]) as led:
        summary = led.append(progress=progress)
    print("appended", summary.rows, flush=True)
    """
)


def _gated_writer(lab: Lab) -> subprocess.Popen:
    proc = subprocess.Popen([sys.executable, "-c", GATED_WRITER, str(lab.store)], cwd=lab.root,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    assert proc.stdout.readline().strip() == "writing"
    return proc


def _release(proc: subprocess.Popen) -> str:
    out, _ = proc.communicate("\n", timeout=120)
    assert proc.returncode == 0
    return out


def test_reader_during_a_write_gets_in_at_once_and_sees_the_last_commit(filled: Lab) -> None:
    lab = filled
    _new_day(lab, "2026-04-01")
    writer = _gated_writer(lab)
    try:
        result = cli("query", "SELECT count(*) AS n FROM measurements", "--format", "csv",
                     "--wait", "0", "--store", str(lab.store))
        assert result.returncode == 0, result.stderr
        assert result.stdout.split() == ["n", "10"]  # the writer has not committed yet
        result = cli("fits", "--wait", "0", "--store", str(lab.store), "--format", "csv")
        assert result.returncode == 0 and len(result.stdout.splitlines()) == 1 + 10
        # a second writer meanwhile is told who is writing, and since when
        result = cli("append", "--wait", "0", "--store", str(lab.store), cwd=lab.root)
        assert result.returncode == 4
        assert one_clean_line(result.stderr) and BUSY.search(result.stderr.strip())
        assert f"(pid {writer.pid}: " in result.stderr
    finally:
        out = _release(writer)
    assert f"appended {CELLS * ROWS_EACH}" in out
    result = cli("fits", "--wait", "0", "--store", str(lab.store), "--format", "csv")
    assert result.returncode == 0 and len(result.stdout.splitlines()) == 1 + CELLS
    tally("appends raced")


def test_writer_during_a_read_does_not_wait(filled: Lab) -> None:
    lab = filled
    _new_day(lab, "2026-04-01")
    with Ledger.open(lab.store, read_only=True) as reader:
        assert reader.con.execute("SELECT count(*) FROM measurements").fetchall() == [(10,)]
        result = cli("append", "--wait", "0", "--store", str(lab.store), cwd=lab.root)
        assert result.returncode == 0, result.stderr
        assert f"{CELLS} file(s), {CELLS * ROWS_EACH} row(s) loaded" in result.stdout
        # the held connection keeps its snapshot
        assert reader.con.execute("SELECT count(*) FROM measurements").fetchall() == [(10,)]
    state = audit(lab.store)
    assert state.problems == [] and state.rows == 10 + CELLS * ROWS_EACH
    tally("appends raced")


def test_a_waiting_append_after_a_killed_writer_gets_in(filled: Lab, tmp_path: Path) -> None:
    """The writer dies holding the lock: the waiting append takes over and loads everything."""
    lab = filled
    _new_day(lab, "2026-04-01")
    writer = _gated_writer(lab)
    waiting = subprocess.Popen([TRENDLEDGER, "append", "--wait", "30", "--store",
                                str(lab.store)], cwd=lab.root, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    writer.kill()
    writer.communicate(timeout=60)
    assert writer.returncode == -9
    out, err = waiting.communicate(timeout=120)
    assert waiting.returncode == 0, err
    assert f"{CELLS} file(s), {CELLS * ROWS_EACH} row(s) loaded" in out
    state = audit(lab.store)
    assert state.problems == [] and state.rows == 10 + CELLS * ROWS_EACH
    tally("appends raced", 2)
    tally("kills survived")
