"""Every client sees the same numbers: the CLI, the Python API and the DuckDB command line."""

from __future__ import annotations

import csv
import io
import json
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from trendledger import Ledger, QueryRefused

from .conftest import Lab
from .test_cli import tl


def _filled(lab: Lab) -> None:
    for day in range(5):
        cells = {}
        for c in range(1, 7):
            cycles = [day * 4 + k for k in range(1, 5)]
            cells[f"c{c:02d}"] = [
                (x, 3.0 - 0.001 * (c + 1) * x + 0.0003 * ((x * c) % 3)) for x in cycles
            ]
        lab.day(f"2026-03-{day + 2:02d}", cells)
    with lab.init() as led:
        led.append()


def duckdb_cli() -> str:
    beside = Path(sys.executable).with_name("duckdb")
    found = str(beside) if beside.exists() else shutil.which("duckdb")
    if found is None:
        pytest.skip("the duckdb command-line client is not installed (test extra: duckdb-cli)")
    return found


def test_duckdb_cli_reads_the_same_fits_as_the_api(lab: Lab) -> None:
    _filled(lab)
    with Ledger.open(lab.store, read_only=True) as led:
        api = led.fits("fade", sort="cell")
    listing = subprocess.run(
        [duckdb_cli(), "-readonly", "-csv", str(lab.store), "-c",
         "SELECT view_name FROM duckdb_views() WHERE NOT internal ORDER BY 1"],
        capture_output=True, text=True, check=True,
    ).stdout.split()
    assert "fit_fade" in listing
    out = subprocess.run(
        [duckdb_cli(), "-readonly", "-json", str(lab.store), "-c",
         "SELECT * FROM fit_fade ORDER BY cell"],
        capture_output=True, text=True, check=True,
    ).stdout
    rows = json.loads(out)
    assert [r["cell"] for r in rows] == list(api["cell"])
    for col in ("n", "slope", "intercept", "r2", "slope_se", "slope_lo", "slope_hi", "slope_p"):
        for got, want in zip((r[col] for r in rows), api[col], strict=True):
            if got is None:  # NULL in SQL is NaN in a pandas float column
                assert want != want, col
                continue
            # the 1.5 client prints doubles with 17 significant digits: identical bits
            assert got == pytest.approx(want, rel=1e-15, abs=0), col


def test_query_api_and_cli_agree(lab: Lab) -> None:
    _filled(lab)
    sql = ("SELECT f.cell, f.slope, count(DISTINCT m.file_id) AS files FROM fit_fade AS f "
           "JOIN measurements AS m USING (cell) WHERE f.cell <> $skip GROUP BY ALL ORDER BY cell")
    with Ledger.open(lab.store, read_only=True) as led:
        api = led.query(sql, {"skip": "c03"})
    code, out, _ = tl("query", sql, "--param", "skip=c03", "--format", "csv",
                      "--store", str(lab.store))
    assert code == 0
    cli = list(csv.DictReader(io.StringIO(out)))
    assert [r["cell"] for r in cli] == list(api["cell"]) == ["c01", "c02", "c04", "c05", "c06"]
    assert [float(r["slope"]) for r in cli] == list(api["slope"])
    assert {int(r["files"]) for r in cli} == {5}


def test_query_refuses_writes_and_leaves_store_identical(lab: Lab) -> None:
    _filled(lab)
    before = lab.store.read_bytes()
    for sql in ("DROP TABLE measurements", "SELECT * FROM read_csv('/etc/passwd')",
                "COPY measurements TO '/tmp/x.csv'", "SELECT 1; DELETE FROM measurements"):
        code, _, err = tl("query", sql, "--store", str(lab.store))
        assert code == 5 and err.startswith("trendledger: error: refused"), sql
        with Ledger.open(lab.store, read_only=True) as led, pytest.raises(QueryRefused):
            led.query(sql)
    assert lab.store.read_bytes() == before


def test_query_to_parquet_file(lab: Lab, tmp_path: Path) -> None:
    _filled(lab)
    target = tmp_path / "fits.parquet"
    code, out, _ = tl("query", "SELECT cell, slope FROM fit_fade", "--format", "parquet",
                      "--out", str(target), "--store", str(lab.store))
    assert code == 0 and out.strip() == "wrote 6 row(s) to " + str(target)
    import duckdb

    assert duckdb.connect().execute(f"SELECT count(*) FROM '{target}'").fetchall() == [(6,)]


HOLDER = textwrap.dedent(
    """
    import sys, time
    from trendledger import Ledger
    with Ledger.open(sys.argv[1]) as led:
        print("holding", flush=True)
        time.sleep(float(sys.argv[2]))
        summary = led.append()
        print("appended", summary.rows, flush=True)
    """
)


def test_reader_during_a_write_gets_in_at_once_and_sees_the_last_commit(lab: Lab) -> None:
    _filled(lab)
    lab.day("2026-03-09", {"c01": [(30, 2.9)], "c02": [(30, 2.9)]})
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(lab.store), "2.5"],
                              stdout=subprocess.PIPE, text=True, cwd=lab.root)
    try:
        assert holder.stdout is not None
        assert holder.stdout.readline().strip() == "holding"
        # the writer holds its lock, but readers open the published copy without waiting
        code, out, err = tl("query", "SELECT count(*) AS n FROM measurements", "--format",
                            "csv", "--wait", "0", "--store", str(lab.store))
        assert code == 0, err
        assert out.split() == ["n", str(6 * 5 * 4)]
        with Ledger.open(lab.store, read_only=True, wait=0) as led:
            assert led.fits("fade")["n"].sum() == 6 * 5 * 4
    finally:
        rest = holder.communicate(timeout=60)[0]
    assert holder.returncode == 0 and "appended 2" in rest
    # a reader started after the commit sees the new rows
    code, out, err = tl("query", "SELECT count(*) AS n FROM measurements", "--format", "csv",
                        "--wait", "0", "--store", str(lab.store))
    assert code == 0, err
    assert out.split() == ["n", str(6 * 5 * 4 + 2)]


def test_two_appends_at_once_one_waits(lab: Lab) -> None:
    _filled(lab)
    lab.day("2026-03-09", {"c01": [(30, 2.9)]})
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(lab.store), "1.5"],
                              stdout=subprocess.PIPE, text=True, cwd=lab.root)
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "holding"
        code, _, err = tl("append", "--wait", "0", "--store", str(lab.store))
        # the message names the other writer and when it started, never a reader
        assert code == 4 and "another append or retract running since " in err, err
        assert f"(pid {holder.pid}: " in err
        code, out, err = tl("append", "--wait", "30", "--store", str(lab.store))
        assert code == 0, err
        assert out.startswith("nothing new")  # the first append already took the file
    finally:
        holder.communicate(timeout=60)
    assert holder.returncode == 0
    assert lab.counts()[0] == 6 * 5 * 4 + 1
