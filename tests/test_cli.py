"""The command line, as a user types it: exit codes, one-line errors, output formats."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from trendledger import Ledger
from trendledger.cli import app

from .conftest import Lab

runner = CliRunner()


def tl(*args: str, cwd: Path | None = None) -> tuple[int, str, str]:
    old = Path.cwd()
    if cwd is not None:
        os.chdir(cwd)
    try:
        result = runner.invoke(app, list(args))
    finally:
        os.chdir(old)
    return result.exit_code, result.stdout, result.stderr


def test_init_append_lineage_round_trip(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99), (3, 2.98)], "c02": [(1, 3.0)]})
    code, out, _ = tl("init", "--spec", str(lab.spec))
    assert code == 0 and "created" in out
    code, out, _ = tl("append", "--store", str(lab.store))
    assert code == 0
    assert out.startswith("batch 1: 2 file(s), 4 row(s) loaded")
    code, out, _ = tl("append", "--store", str(lab.store), "--json")
    assert code == 0 and json.loads(out)["status"] == "nothing new"
    code, out, _ = tl("lineage", "--files", "--format", "json", "--store", str(lab.store))
    assert [r["path"] for r in json.loads(out)] == [
        "incoming/2026-03-02/c01.csv", "incoming/2026-03-02/c02.csv"]
    code, out, _ = tl("lineage", "--format", "csv", "--store", str(lab.store))
    assert out.splitlines()[0].startswith("batch_id,started_at")


def test_store_from_environment(lab: Lab, monkeypatch: pytest.MonkeyPatch) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    monkeypatch.setenv("TRENDLEDGER_STORE", str(lab.root / "elsewhere.duckdb"))
    assert tl("init", "--spec", str(lab.spec))[0] == 0
    assert (lab.root / "elsewhere.duckdb").exists()
    code, out, _ = tl("append")
    assert code == 0 and "1 row(s)" in out


def test_bad_file_gives_one_line_and_exit_3(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    lab.write("incoming/2026-03-02/c02.csv", "cycle,capacity_ah\n1,3.0\n2,lots\n")
    tl("init", "--spec", str(lab.spec))
    code, out, err = tl("append", "--store", str(lab.store))
    assert code == 3
    assert err.count("\n") == 1
    assert err.startswith("trendledger: error: incoming/2026-03-02/c02.csv:3: column capacity_ah")
    assert "Traceback" not in out + err
    code, out, err = tl("append", "--store", str(lab.store), "--skip-bad", "--retry-rejected")
    assert code == 3 and "batch 1: 1 file(s)" in out and "rejected incoming" in err


def test_missing_store_and_bad_spec_are_one_line_errors(lab: Lab, tmp_path: Path) -> None:
    code, _, err = tl("fits", "--store", str(tmp_path / "none.duckdb"))
    assert code == 2 and "no store here" in err and err.count("\n") == 1
    lab.spec.write_text("[source]\nfiles = 'x.csv'\n")
    code, _, err = tl("init", "--spec", str(lab.spec))
    assert code == 2 and "has no {field}" in err


def test_check_exit_code(lab: Lab) -> None:
    (path,) = lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    tl("init", "--spec", str(lab.spec))
    tl("append", "--store", str(lab.store))
    assert tl("check", "--store", str(lab.store))[0] == 0
    path.write_text("cycle,capacity_ah\n1,2.0\n")
    code, out, _ = tl("check", "--store", str(lab.store))
    assert code == 1 and "changed since loaded: incoming/2026-03-02/c01.csv" in out


def test_retract_command(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    tl("init", "--spec", str(lab.spec))
    tl("append", "--store", str(lab.store))
    code, out, _ = tl("retract", "--batch", "1", "--why", "bench unplugged", "--store",
                      str(lab.store))
    assert code == 0 and out.strip() == "retracted 1 file(s), 1 row(s)"
    code, _, err = tl("retract", "--batch", "7", "--why", "x", "--store", str(lab.store))
    assert code == 2 and "no batch 7" in err


def test_installed_entry_point_runs() -> None:
    exe = Path(sys.executable).with_name("trendledger")
    if not exe.exists():
        pytest.skip("the package is not installed in this environment (run make test)")
    out = subprocess.run([str(exe), "--version"], capture_output=True, text=True, check=True)
    assert out.stdout.startswith("trendledger ")


def test_trace_prints_every_statement_with_its_parameters(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99), (3, 2.98)]})
    tl("init", "--spec", str(lab.spec), "--store", str(lab.store))
    code, out, err = tl("--trace", "append", "--store", str(lab.store))
    assert code == 0 and "-- [1] " in err and "INSERT INTO ingest_batches" in err
    code, plain, quiet = tl("query", "SELECT count(*) AS n FROM measurements WHERE cycle > $c",
                            "--param", "c=1", "--store", str(lab.store))
    assert code == 0 and quiet == ""
    code, out, err = tl("--trace", "query",
                        "SELECT count(*) AS n FROM measurements WHERE cycle > $c",
                        "--param", "c=1", "--store", str(lab.store))
    assert code == 0 and out == plain  # the trace goes to stderr only
    assert "WHERE cycle > $c" in err and "parameters: {'c': 1}" in err
    # the API takes any writer
    seen: list[str] = []
    with Ledger.open(lab.store, read_only=True, trace=seen.append) as led:
        led.fits("fade")
    assert any('FROM "fit_fade"' in s for s in seen)


def test_paths_that_cannot_be_used_are_one_line_errors(lab: Lab, tmp_path: Path) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99), (3, 2.98)]})
    tl("init", "--spec", str(lab.spec), "--store", str(lab.store))
    tl("append", "--store", str(lab.store))
    blocker = tmp_path / "afile"
    blocker.write_text("a file, not a folder")
    for fmt in ("csv", "parquet"):
        where = blocker / f"out.{fmt}"
        code, out, err = tl("query", "SELECT 1 AS a", "--format", fmt, "--out", str(where),
                            "--store", str(lab.store))
        assert code == 2 and out == ""
        assert err.startswith(f"trendledger: error: {where}: cannot write the result: ")
        assert err.rstrip().endswith("Not a directory") and err.count("\n") == 1
    # a root that does not exist would report every file missing and pass
    code, out, err = tl("check", "--root", str(tmp_path / "moved"), "--store", str(lab.store))
    assert code == 2 and "the root folder does not exist" in err
