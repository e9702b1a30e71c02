"""Readers never block the daily append.

Other programs hold the store open for hours: a notebook or the DuckDB command
line with a read-only connection, or even a read-write one. Appends, retracts,
replacements and spec updates must still run at once and succeed; a held
connection keeps the snapshot it opened; a connection opened after a commit
sees exactly the committed rows; a store written by the single-file layout of
earlier versions is converted on its first write with nothing lost.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import duckdb
import pytest

from trendledger import Ledger
from trendledger.store.publish import Layout

from .audit import attack_rounds, audit, cli, tally
from .conftest import SPEC, Lab

CELLS = 4
ROWS = 3

#: A program that holds one connection to a file and answers questions on it, line by
#: line, as a notebook would: "?" asks for (rows, checksum, batches), anything else is SQL
#: to run (for the read-write client).
HOLDER = textwrap.dedent(
    """
    import sys, duckdb
    con = duckdb.connect(sys.argv[1], read_only=sys.argv[2] == "ro")
    print("open", flush=True)
    for line in sys.stdin:
        line = line.strip()
        if line == "?":
            rows, total = con.execute(
                "SELECT count(*), coalesce(sum(capacity_ah), 0) FROM measurements"
            ).fetchall()[0]
            batches = con.execute("SELECT count(*) FROM ingest_batches").fetchall()[0][0]
            print(rows, repr(total), batches, flush=True)
        else:
            con.execute(line)
            print("done", flush=True)
    """
)


class Holder:
    """A second process holding the store's path open, read-only or read-write."""

    def __init__(self, path: Path, mode: str) -> None:
        self.proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(path), mode],
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        assert self.ask_line("") == "open"

    def ask_line(self, line: str) -> str:
        assert self.proc.stdin is not None and self.proc.stdout is not None
        if line:
            self.proc.stdin.write(line + "\n")
            self.proc.stdin.flush()
        return self.proc.stdout.readline().strip()

    def state(self) -> tuple[int, float, int]:
        rows, total, batches = self.ask_line("?").split()
        return int(rows), float(total), int(batches)

    def close(self) -> None:
        if self.proc.poll() is None:
            assert self.proc.stdin is not None
            self.proc.stdin.close()
            self.proc.wait(timeout=60)


def _day(lab: Lab, k: int, bump: float = 0.0) -> dict[tuple[str, str, int], float]:
    """Write day k's files (one per cell); return the rows they hold, keyed as stored."""
    day = f"2026-03-{k + 1:02d}"
    rows: dict[tuple[str, str, int], float] = {}
    cells = {}
    for c in range(CELLS):
        cell = f"c{c:02d}"
        points = [(k * ROWS + i, 3.0 - 1e-3 * (k * ROWS + i) - 1e-4 * c + bump)
                  for i in range(ROWS)]
        cells[cell] = points
        rows.update({(day, cell, x): y for x, y in points})
    lab.day(day, cells)
    return rows


def _published_rows(store: Path) -> dict[tuple[str, str, int], float]:
    """Every row a new connection to the store's path sees (plain DuckDB, read-only)."""
    con = duckdb.connect(str(store), read_only=True)
    try:
        found = con.execute(
            "SELECT strftime(day, '%Y-%m-%d'), cell, cycle, capacity_ah FROM measurements"
        ).fetchall()
    finally:
        con.close()
    out = {(d, c, x): y for d, c, x, y in found}
    assert len(out) == len(found), "a row is stored twice"
    return out


def _checksum(rows: dict[tuple[str, str, int], float]) -> tuple[int, float]:
    return len(rows), sum(rows.values())


def test_held_reader_never_blocks_appends_retracts_replacements_or_spec_updates(
        lab: Lab) -> None:
    expected = _day(lab, 0)
    with lab.init() as led:
        led.append()
    holder = Holder(lab.store, "ro")
    try:
        held = holder.state()
        assert held[:2] == pytest.approx(_checksum(expected)) and held[2] == 1
        batch_rows: dict[int, dict[tuple[str, str, int], float]] = {1: dict(expected)}
        appends = 20
        for k in range(1, appends + 1):
            new = _day(lab, k)
            with Ledger.open(lab.store, wait=0) as led:  # no waiting for the reader
                summary = led.append()
            assert (summary.files, summary.rows) == (CELLS, CELLS * ROWS)
            assert summary.batch_id is not None
            batch_rows[summary.batch_id] = new
            expected.update(new)
            assert _published_rows(lab.store) == expected
            assert holder.state() == held  # the held snapshot never moves
        tally("appends raced", appends)

        # a retract of a whole batch
        result = cli("retract", "--batch", "5", "--why", "sensor swap", "--wait", "0",
                     "--store", str(lab.store))
        assert result.returncode == 0, result.stderr
        for key in batch_rows[5]:
            del expected[key]
        assert _published_rows(lab.store) == expected
        assert holder.state() == held

        # a replacement: one file of day 3 sent again with corrected values
        fixed = _day(lab, 3, bump=0.5)
        replaced = {k: v for k, v in fixed.items() if k[1] == "c01"}
        for cell in ("c00", "c02", "c03"):
            lab.day("2026-03-04", {cell: [(x, expected[("2026-03-04", cell, x)])
                                          for (d, c, x) in sorted(fixed) if c == cell]})
        result = cli("append", "--replace", "--wait", "0", "--store", str(lab.store),
                     cwd=lab.root)
        assert result.returncode == 0, result.stderr
        assert "1 replaced" in result.stdout
        expected.update(replaced)
        assert _published_rows(lab.store) == expected
        assert holder.state() == held

        # a spec update: a second fit on the same columns
        lab.spec.write_text(SPEC + '\n[[fit]]\nname = "fade2"\ngroup = ["cell"]\n'
                            'x = "cycle"\ny = "capacity_ah"\n', encoding="utf-8")
        result = cli("spec", "update", str(lab.spec), "--wait", "0", "--store", str(lab.store))
        assert result.returncode == 0, result.stderr
        with Ledger.open(lab.store, read_only=True, wait=0) as led:
            fits = led.fits("fade2", sort="cell")
        # the new fit covers every stored row: n per cell counted from the files written
        per_cell = [sum(1 for (_, c, _) in expected if c == cell) for cell in fits["cell"]]
        assert list(fits["n"]) == per_cell and len(per_cell) == CELLS
        assert holder.state() == held
    finally:
        holder.close()
    # (audit's per-batch totals do not allow for a replaced file, so check is the judge here)
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 0, result.stdout
    assert "published copy and writer's copy agree" in result.stdout
    assert f"{len(expected)} row(s)" in result.stdout


def test_read_write_client_on_the_published_file_changes_nothing(lab: Lab) -> None:
    """The DuckDB command line opens read-write by default: what it does stays in its copy."""
    expected = _day(lab, 0)
    with lab.init() as led:
        led.append()
    client = Holder(lab.store, "rw")
    try:
        assert client.ask_line("DELETE FROM measurements WHERE cell = 'c00'") == "done"
        assert client.ask_line("UPDATE ingest_batches SET rows = 0") == "done"
        assert Layout.of(lab.store).wal.exists()  # its log, beside the published copy
        # trendledger's readers are not kept out and see the store, not the client's edits
        result = cli("query", "SELECT count(*) AS n FROM measurements", "--format", "csv",
                     "--wait", "0", "--store", str(lab.store))
        assert result.returncode == 0, result.stderr
        assert result.stdout.split() == ["n", str(len(expected))]
        for k in range(1, 1 + attack_rounds(3)):
            expected.update(_day(lab, k))
            result = cli("append", "--wait", "0", "--store", str(lab.store), cwd=lab.root)
            assert result.returncode == 0, result.stderr
            assert _published_rows(lab.store) == expected  # no data lost, none forged
            # the client keeps writing into its own, replaced copy
            assert client.ask_line(f"DELETE FROM measurements WHERE cycle = {k}") == "done"
        # after a checkpoint it starts a new log by name, beside the newer copy, and dies
        # with it there: DuckDB would refuse that log for this copy, trendledger sets it aside
        assert client.ask_line("CHECKPOINT") == "done"
        assert client.ask_line("DELETE FROM measurements") == "done"
        assert Layout.of(lab.store).wal.exists()
        client.proc.send_signal(signal.SIGKILL)
        client.proc.wait(timeout=60)
        tally("kills survived")
    finally:
        client.close()
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 0, result.stdout + result.stderr
    assert "published copy and writer's copy agree" in result.stdout
    assert _published_rows(lab.store) == expected
    assert not Layout.of(lab.store).wal.exists()
    assert list(lab.root.glob("trendledger.duckdb.wal.*.discarded"))
    expected.update(_day(lab, 9))
    assert cli("append", "--store", str(lab.store), cwd=lab.root).returncode == 0
    assert _published_rows(lab.store) == expected
    state = audit(lab.store)
    assert state.problems == [] and state.rows == len(expected)


OLD_WRITER = textwrap.dedent(
    """
    import os, sys
    from pathlib import Path
    import duckdb
    from trendledger.spec import load
    from trendledger.store import ingest

    # What earlier versions did: append on the store's own file; then die after COMMIT,
    # before the log is folded into the file.
    con = duckdb.connect(sys.argv[1])
    summary = ingest.append(con, load(Path(sys.argv[2])), Path(sys.argv[2]).parent)
    print(summary.rows, flush=True)
    os._exit(0)
    """
)


def test_single_file_store_of_earlier_versions_is_converted_on_first_write(lab: Lab) -> None:
    first = _day(lab, 0)
    with lab.init() as led:
        led.append()
    # earlier versions kept one file and no writer's copy or lock file
    layout = Layout.of(lab.store)
    for extra in (layout.writer, layout.lock):
        extra.unlink()
    second = _day(lab, 1)
    old = subprocess.run([sys.executable, "-c", OLD_WRITER, str(lab.store), str(lab.spec)],
                         capture_output=True, text=True, cwd=lab.root)
    assert old.returncode == 0, old.stderr
    assert old.stdout.strip() == str(CELLS * ROWS)
    assert layout.wal.exists()  # the committed batch is only in the log
    before = {**first, **second}

    # a reader of the unconverted store sees both batches (DuckDB replays the log)
    with Ledger.open(lab.store, read_only=True) as led:
        assert led.con.execute("SELECT count(*) FROM measurements").fetchall() == \
            [(len(before),)]
    third = _day(lab, 2)
    result = cli("append", "--store", str(lab.store), cwd=lab.root)
    assert result.returncode == 0, result.stderr
    assert layout.writer.exists() and not layout.wal.exists()
    assert _published_rows(lab.store) == {**before, **third}
    with Ledger.open(lab.store, read_only=True) as led:
        batches = led.lineage()
        assert list(batches["batch_id"]) == [1, 2, 3]
        assert list(batches["rows"]) == [CELLS * ROWS] * 3
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 0, result.stdout
    assert "published copy and writer's copy agree: 3 batch(es)" in result.stdout
    state = audit(lab.store)
    assert state.problems == [] and state.rows == 3 * CELLS * ROWS


def test_check_names_a_published_copy_that_differs(lab: Lab) -> None:
    _day(lab, 0)
    with lab.init() as led:
        led.append()
    # edit the published copy behind trendledger's back, as a read-write client that
    # closed cleanly would (its change is folded into that file)
    con = duckdb.connect(str(lab.store))
    con.execute("UPDATE measurements SET capacity_ah = capacity_ah + 1 WHERE cell = 'c01'")
    con.close()
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 1, result.stdout
    assert "published copy and writer's copy differ:" in result.stdout
    assert "rows: " in result.stdout
    # the next write publishes the store again, and the copies agree
    _day(lab, 1)
    assert cli("append", "--store", str(lab.store), cwd=lab.root).returncode == 0
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 0 and "agree" in result.stdout, result.stdout


def test_publish_is_reported_and_the_path_is_a_whole_store(lab: Lab) -> None:
    _day(lab, 0)
    with lab.init() as led:
        led.append()
        done = led.last_publish
        assert done is not None and done.how in ("reflink", "copy")
        assert done.bytes == Layout.of(lab.store).writer.stat().st_size
        # the published file is a complete DuckDB database with the views (no log needed)
        assert not Layout.of(lab.store).wal.exists()
    con = duckdb.connect(str(lab.store), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM fit_fade").fetchall() == [(CELLS,)]
    finally:
        con.close()
    assert os.stat(lab.store).st_size == done.bytes
