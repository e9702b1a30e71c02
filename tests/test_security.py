"""Attacks on the store from the files it reads, the queries it runs and the paths it writes.

Each test is one breach or crash found by attacking the tool as a hostile (or careless)
user would: real links, folders, named pipes and processes in a temporary folder. What
must hold after each: nothing outside the spec's folder (and the folders the spec
allows) is read, nothing the tool does not own is overwritten or deleted, nothing is
dropped without a word, and every refusal is one line with a documented exit code.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import threading
import time
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from trendledger import InputError, Ledger
from trendledger.cli import app
from trendledger.errors import QueryRefused
from trendledger.outputs import OutputError

from .audit import TRENDLEDGER, audit, cli, one_clean_line
from .conftest import SPEC, Lab

runner = CliRunner()


def tl(*args: str) -> tuple[int, str, str]:
    result = runner.invoke(app, list(args))
    return result.exit_code, result.stdout, result.stderr


def csv_text(rows: list[tuple[int, float]]) -> str:
    return "cycle,capacity_ah\n" + "".join(f"{c},{v}\n" for c, v in rows)


@pytest.fixture
def loaded(lab: Lab) -> Lab:
    """A lab with a store holding one day of two cells."""
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99), (3, 2.98)],
                           "c02": [(1, 3.1), (2, 3.08), (3, 3.05)]})
    lab.init().close()
    with lab.open() as led:
        led.append()
    return lab


# -- files: links, non-regular files, contents in messages -------------------------------


def test_a_link_out_of_the_spec_folder_is_refused(lab: Lab, tmp_path: Path) -> None:
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "x.csv").write_text(csv_text([(1, 9.0), (2, 8.0), (3, 7.0)]))
    lab.init().close()
    before = lab.counts()
    link = lab.root / "incoming" / "2026-03-02" / "c01.csv"
    link.parent.mkdir(parents=True)
    link.symlink_to(elsewhere / "x.csv")
    with lab.open() as led, pytest.raises(InputError) as refusal:
        led.append()
    assert refusal.value.file == "incoming/2026-03-02/c01.csv"
    assert "outside the spec's folder" in refusal.value.message
    assert lab.counts() == before


def test_allowed_folders_keep_linked_instrument_shares_working(tmp_path: Path) -> None:
    share = tmp_path / "mnt" / "cyclers"
    share.mkdir(parents=True)
    (share / "c01.csv").write_text(csv_text([(1, 3.0), (2, 2.9), (3, 2.8)]))
    spec = SPEC.replace('format = "csv"\n', f'format = "csv"\nallow = ["{share}"]\n')
    lab = Lab(tmp_path / "lab", spec)
    (lab.root / "incoming").mkdir()
    (lab.root / "incoming" / "2026-03-02").symlink_to(share, target_is_directory=True)
    with lab.init() as led:
        summary = led.append()
    assert summary.rows == 3
    assert [o.path for o in summary.outcomes] == ["incoming/2026-03-02/c01.csv"]


def test_a_link_to_a_system_file_never_lands_in_the_lineage(lab: Lab) -> None:
    # before: the first line of the system's user list was stored in ingest_files.message
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99)]})
    for name, target in (("c02.csv", "/etc/passwd"), ("c03.csv", "/proc/self/environ")):
        (lab.root / "incoming" / "2026-03-02" / name).symlink_to(target)
    lab.init().close()
    with lab.open() as led:
        summary = led.append(skip_bad=True)
        messages = [m for (m,) in led.con.execute(
            "SELECT message FROM ingest_files WHERE status = 'rejected'").fetchall()]
    assert summary.rows == 2 and summary.rejected == 2
    assert len(messages) == 2
    for message in messages:
        assert "outside the spec's folder" in message
        assert "root" not in message and "PATH" not in message and "=" not in message


def test_a_folder_or_a_named_pipe_is_refused_by_name_without_hanging(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99)]})
    day = lab.root / "incoming" / "2026-03-02"
    os.mkfifo(day / "c02.csv")  # an open() that waits for a writer would hang the append
    (day / "c03.csv").mkdir()
    lab.init().close()
    before = lab.counts()
    with lab.open() as led, pytest.raises(InputError) as refusal:
        led.append()
    assert refusal.value.file == "incoming/2026-03-02/c02.csv"
    assert "named pipe" in refusal.value.message
    assert lab.counts() == before
    with lab.open() as led:
        summary = led.append([str(day / "c03.csv"), str(day / "c01.csv")], skip_bad=True)
    rejected = {o.path: o.message for o in summary.outcomes if o.status == "rejected"}
    assert "a folder" in rejected["incoming/2026-03-02/c03.csv"]


# -- files: read once, hash what was loaded ------------------------------------------------

A_ROWS = [(1, 1.0), (2, 1.5), (3, 2.0)]
B_ROWS = [(1, 5.0), (2, 4.0), (3, 3.0), (4, 2.0)]


def _loaded_matches_hash(led: Ledger, path: str) -> bool:
    """The stored rows of ``path`` are those of the content whose hash the lineage keeps."""
    sha, file_id = led.con.execute(
        "SELECT sha256, file_id FROM ingest_files WHERE path = ? AND status = 'loaded'",
        [path]).fetchall()[0]
    rows = [(c, v) for c, v in led.con.execute(
        "SELECT cycle, capacity_ah FROM measurements WHERE file_id = ? ORDER BY cycle",
        [file_id]).fetchall()]
    by_hash = {hashlib.sha256(csv_text(r).encode()).hexdigest(): r for r in (A_ROWS, B_ROWS)}
    return by_hash.get(sha) == rows


def test_a_file_swapped_just_before_duckdb_reads_is_loaded_as_it_was_hashed(lab: Lab) -> None:
    # before: the swapped file's rows were loaded under the first file's hash; the
    # progress report "read 0" comes between the hashing and DuckDB's read
    path = lab.write("incoming/2026-03-02/c01.csv", csv_text(A_ROWS))
    spare = lab.root / "spare.csv"
    lab.init().close()

    def swap(stage: str, done: int, total: int) -> None:
        if stage == "read" and done == 0:
            spare.write_text(csv_text(B_ROWS))
            os.replace(spare, path)

    with lab.open() as led:
        led.append(progress=swap)
        assert _loaded_matches_hash(led, "incoming/2026-03-02/c01.csv")
    assert path.read_text() == csv_text(B_ROWS)
    with lab.open(read_only=True) as led:
        assert led.check().changed == ["incoming/2026-03-02/c01.csv"]


def test_a_file_swapped_in_a_real_race_is_loaded_with_its_own_hash(lab: Lab) -> None:
    path = lab.write("incoming/2026-03-02/c01.csv", csv_text(A_ROWS))
    lab.init().close()
    stop = threading.Event()

    def swapper() -> None:
        flip = False
        while not stop.is_set():
            spare = lab.root / f"spare-{flip}.csv"
            spare.write_text(csv_text(B_ROWS if flip else A_ROWS))
            os.replace(spare, path)
            flip = not flip

    thread = threading.Thread(target=swapper, daemon=True)
    thread.start()
    seen = set()
    try:
        with lab.open() as led:
            for _ in range(25):
                led.append(replace=True, rehash=True, allow_shrink=True)
                assert _loaded_matches_hash(led, "incoming/2026-03-02/c01.csv")
                seen.add(led.con.execute(
                    "SELECT count(*) FROM measurements").fetchall()[0][0])
    finally:
        stop.set()
        thread.join()
    assert seen == {3, 4}, "the race never loaded both contents: the swap missed the window"


def test_check_on_a_file_replaced_by_a_folder_or_a_pipe_does_not_crash_or_hang(
        loaded: Lab) -> None:
    day = loaded.root / "incoming" / "2026-03-02"
    (day / "c01.csv").unlink()
    (day / "c01.csv").mkdir()
    (day / "c02.csv").unlink()
    os.mkfifo(day / "c02.csv")
    code, out, err = tl("check", "--store", str(loaded.store))
    assert code == 1 and err == ""
    assert "incoming/2026-03-02/c01.csv: is a folder" in out
    assert "incoming/2026-03-02/c02.csv: is a named pipe" in out


# -- outputs -------------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_query_out_never_writes_onto_the_store(loaded: Lab, fmt: str) -> None:
    # before: the store became a 6-byte text file, exit 0
    before = loaded.store.read_bytes()
    code, out, err = tl("query", "SELECT 1 AS a", "--format", fmt, "--out", str(loaded.store),
                        "--force", "--store", str(loaded.store))
    assert code == 2 and out == "" and "the store's own files" in err
    link = loaded.root / "result.csv"
    link.symlink_to(loaded.store)
    code, out, err = tl("query", "SELECT 1 AS a", "--format", fmt, "--out", str(link),
                        "--force", "--store", str(loaded.store))
    assert code == 2 and "the store's own files" in err
    assert loaded.store.read_bytes() == before
    assert audit(loaded.store).problems == []


def test_query_out_refuses_a_foreign_file_unless_forced_and_replaces_links(
        loaded: Lab, tmp_path: Path) -> None:
    mine = tmp_path / "notes.csv"
    mine.write_text("keep me")
    code, _, err = tl("query", "SELECT 1 AS a", "--format", "csv", "--out", str(mine),
                      "--store", str(loaded.store))
    assert code == 2 and "already there" in err and mine.read_text() == "keep me"
    target = tmp_path / "target.txt"
    target.write_text("not yours")
    link = tmp_path / "out.csv"
    link.symlink_to(target)
    code, _, _ = tl("query", "SELECT 1 AS a", "--format", "csv", "--out", str(link), "--force",
                    "--store", str(loaded.store))
    assert code == 0
    assert target.read_text() == "not yours"  # the link was replaced, not followed
    assert not link.is_symlink() and link.read_text() == "a\n1\n"


def test_report_keeps_the_users_files_and_replaces_only_its_own(loaded: Lab,
                                                                tmp_path: Path) -> None:
    out = tmp_path / "report"
    out.mkdir()
    (out / "history-2019.png").write_bytes(b"the user's own picture")
    (out / "overview.png").write_bytes(b"another picture of the user's")
    with loaded.open(read_only=True) as led:
        with pytest.raises(OutputError, match="already there"):
            led.report(out=out)
        assert (out / "overview.png").read_bytes() == b"another picture of the user's"
        assert not (out / "index.html").exists()
        (out / "overview.png").unlink()
        page = led.report(out=out)
        page = led.report(out=out)  # its own files are replaced without --force
    assert page.is_file() and (out / "overview.png").read_bytes().startswith(b"\x89PNG")
    assert (out / "history-2019.png").read_bytes() == b"the user's own picture"


def test_export_never_follows_a_link_out_of_its_folder(loaded: Lab, tmp_path: Path) -> None:
    from trendledger.export.write import ExportError, export

    target = tmp_path / "out"
    export(loaded.store, target)
    victim = tmp_path / "victim"
    victim.mkdir()
    (victim / "precious.txt").write_text("keep")
    partition = next((target / "measurements").iterdir())
    os.rename(partition, tmp_path / "moved-away")
    partition.symlink_to(victim, target_is_directory=True)
    with pytest.raises(ExportError, match="symbolic link"):
        export(loaded.store, target)
    assert [p.name for p in victim.iterdir()] == ["precious.txt"]


def test_export_refuses_a_folder_of_hidden_folders_and_leaves_it_alone(loaded: Lab,
                                                                       tmp_path: Path) -> None:
    from trendledger.export.write import ExportError, export

    target = tmp_path / "out"
    (target / ".staging-mine").mkdir(parents=True)
    (target / ".staging-mine" / "work.txt").write_text("mine")
    with pytest.raises(ExportError, match="not empty"):
        export(loaded.store, target)
    assert sorted(p.name for p in target.iterdir()) == [".staging-mine"]
    assert (target / ".staging-mine" / "work.txt").read_text() == "mine"
    code, _, err = tl("export", str(loaded.store.parent), "--store", str(loaded.store))
    assert code == 2 and one_clean_line(err)  # the store's own folder is not an export


# -- the query guard ------------------------------------------------------------------------

DOTTED = [
    'SELECT * FROM "{tmp}/x".csv',
    'SELECT * FROM measurements JOIN "{tmp}/x".csv USING (cycle)',
    'WITH t AS (SELECT * FROM "{tmp}/x".csv) SELECT * FROM t',
    'DESCRIBE "{tmp}/x".csv',
    'SHOW "{tmp}/x".csv',
    'SUMMARIZE "{tmp}/x".csv',
    'PIVOT "{tmp}/x".csv ON a IN (1) USING count(*)',
    "SELECT * FROM x.csv",
    'SELECT * FROM "x"."csv"',
    "SELECT * FROM nowhere",
    "SELECT * FROM pg_catalog.pg_tables",
    "SELECT * FROM information_schema.tables",
]


def test_names_split_dotted_or_unknown_are_refused_in_every_shape(loaded: Lab) -> None:
    # before: DuckDB joined the parts into a path and read a CSV planted in the store's
    # temporary folder (external access off does not cover that folder)
    planted = loaded.root / "trendledger.duckdb.tmp"
    planted.mkdir()
    (planted / "x.csv").write_text("a,b\n1,2\n")
    with loaded.open(read_only=True) as led:
        for shape in DOTTED:
            sql = shape.format(tmp=planted)
            with pytest.raises(QueryRefused) as refusal:
                led.query(sql)
            assert refusal.value.message.startswith("refused:"), sql
        assert len(led.query("SELECT * FROM measurements")) == 6
        # and the connection alone, with the guard out of the way, reads nothing there
        with pytest.raises(duckdb.Error):
            led.con.execute(f'SELECT * FROM "{planted}/x".csv').fetchall()
        assert led.con.execute("SELECT current_setting('memory_limit')").fetchall()[0][0]


def test_queries_are_stopped_at_the_time_limit_and_writers_get_in(loaded: Lab) -> None:
    endless = subprocess.Popen(
        [TRENDLEDGER, "query", "WITH RECURSIVE r(i) AS (SELECT 1 UNION ALL SELECT i + 1 "
         "FROM r) SELECT count(*) FROM r", "--timeout", "1", "--store", str(loaded.store)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    time.sleep(0.5)
    loaded.day("2026-03-03", {"c01": [(4, 2.97)]})
    done = cli("append", "--wait", "20", "--store", str(loaded.store))
    out, err = endless.communicate(timeout=60)
    assert endless.returncode == 5 and one_clean_line(err) and "time limit" in err
    assert done.returncode == 0, done.stderr


def test_terminal_output_has_a_row_limit(loaded: Lab) -> None:
    code, out, err = tl("query", "SELECT * FROM range(50)", "--max-rows", "10", "--format",
                        "csv", "--store", str(loaded.store))
    assert code == 0 and out.splitlines()[1:] == [str(i) for i in range(10)]
    assert "first 10 rows" in err


def test_a_query_may_start_with_a_dash_after_double_dash(loaded: Lab) -> None:
    code, out, _ = tl("query", "--store", str(loaded.store), "--format", "csv", "--",
                      "-- a note first\nSELECT 42 AS answer")
    assert code == 0 and out == "answer\n42\n"


def test_parameter_names_that_clash_are_refused(loaded: Lab) -> None:
    code, out, err = tl("query", "SELECT $p AS v", "--param", "p=1", "--param", "P=2",
                        "--store", str(loaded.store))
    assert code == 5 and out == "" and "given twice" in err


@pytest.mark.parametrize("where", ["cell", "cell > 1", " + ".join(["n"] * 3000) + " > 0"])
@pytest.mark.parametrize("extra", [[], ["--view", "points"], ["--break-at", "2"]])
def test_where_conditions_that_fail_in_duckdb_are_one_line(loaded: Lab, where: str,
                                                           extra: list[str]) -> None:
    code, _, err = tl("fits", "--where", where, *extra, "--store", str(loaded.store))
    assert code == 5 and one_clean_line(err), err[:300]


# -- messages -------------------------------------------------------------------------------


def test_control_characters_in_names_are_escaped_when_printed(lab: Lab) -> None:
    # before: lineage cleared the screen and set the terminal's title
    name = "c\x1b]0;owned\x07\x1b[2J01"
    lab.write(f"incoming/2026-03-02/{name}.csv", csv_text([(1, 3.0), (2, 2.9)]))
    lab.init().close()
    with lab.open() as led:
        led.append()
    code, out, _ = tl("lineage", "--files", "--store", str(lab.store))
    assert code == 0 and "\x1b" not in out and "\x07" not in out
    assert "c\\x1b]0;owned\\x07\\x1b[2J01.csv" in out


def test_deeply_nested_json_is_refused_by_line(tmp_path: Path) -> None:
    spec = SPEC.replace('"incoming/{day}/{cell}.csv"', '"incoming/{day}/{cell}.jsonl"').replace(
        'format = "csv"', 'format = "jsonl"')
    lab = Lab(tmp_path / "lab", spec)
    lab.write("incoming/2026-03-02/c01.jsonl", '{"cycle": 1, "capacity_ah": 3.0}\n'
              + "[" * 200_000 + "]" * 200_000 + "\n")
    lab.init().close()
    with lab.open() as led, pytest.raises(InputError) as refusal:
        led.append()
    assert refusal.value.line == 2 and "nested too deeply" in refusal.value.message


def test_corrupt_parquet_files_are_refused_by_name(tmp_path: Path) -> None:
    spec = SPEC.replace('"incoming/{day}/{cell}.csv"', '"incoming/{day}/{cell}.parquet"') \
        .replace('format = "csv"', 'format = "parquet"')
    lab = Lab(tmp_path / "lab", spec)
    good = tmp_path / "good.parquet"
    con = duckdb.connect()
    con.execute(f"COPY (SELECT i::INTEGER AS cycle, 3.0 - i / 100 AS capacity_ah "
                f"FROM range(1, 200) t(i)) TO '{good}' (FORMAT parquet)")
    con.close()
    data = good.read_bytes()
    damaged = {
        "truncated": data[: len(data) // 2],
        "no-footer": data[:-8],
        "bad-footer": data[:-4] + b"XXXX",
        "flipped": data[:40] + bytes(b ^ 0xFF for b in data[40:400]) + data[400:],
        "short-length": data[:-8] + (10**6).to_bytes(4, "little") + b"PAR1",
    }
    lab.init().close()
    for kind, content in damaged.items():
        lab.write(f"incoming/2026-03-02/{kind}.parquet", content)
        before = lab.counts()
        with lab.open() as led, pytest.raises(InputError) as refusal:
            led.append()
        assert refusal.value.file == f"incoming/2026-03-02/{kind}.parquet", kind
        assert lab.counts() == before
        (lab.root / f"incoming/2026-03-02/{kind}.parquet").unlink()


def test_a_gzip_bomb_is_refused_without_unpacking_it_whole(tmp_path: Path) -> None:
    import gzip

    from trendledger.store import ingest

    spec = SPEC.replace('"incoming/{day}/{cell}.csv"', '"incoming/{day}/{cell}.csv.gz"')
    lab = Lab(tmp_path / "lab", spec)
    header = b"cycle,capacity_ah\n1,3.0\n"
    # rows that unpack past the limit: the limit is lowered for the test (common practice:
    # test a size limit with a small one rather than a gigabyte file)
    body = header + b"2,2.9\n" * 400_000
    lab.write("incoming/2026-03-02/c01.csv.gz", gzip.compress(body))
    lab.init().close()
    old = ingest.MAX_UNPACKED_BYTES
    ingest.MAX_UNPACKED_BYTES = 1_000_000
    try:
        with lab.open() as led, pytest.raises(InputError, match="unpacks to more than"):
            led.append()
    finally:
        ingest.MAX_UNPACKED_BYTES = old
    assert json.dumps(lab.counts()[:3]) == json.dumps([0, 0, 0])


@pytest.mark.parametrize("quoted", [False, True])
def test_a_row_with_thousands_of_fields_is_refused_by_line(lab: Lab, quoted: bool) -> None:
    # before: DuckDB's second pass to find the bad line took 75 s on 160k fields
    first = '"2"' if quoted else "2"
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah\n1,2.0\n" + first + ","
              + ",".join(["7"] * 160_000) + "\n3,1.0\n")
    lab.init().close()
    with lab.open() as led, pytest.raises(InputError) as refusal:
        led.append()
    assert refusal.value.line == 3 and "160,001 fields" in refusal.value.message


@pytest.mark.parametrize(("allow", "said"), [
    ('"/mnt/cyclers"', "a list of folders"),
    ('["mnt/cyclers"]', "not an absolute folder path"),
    ('["/"]', "the whole file system"),
])
def test_allowed_folders_must_be_absolute_and_not_everything(tmp_path: Path, allow: str,
                                                            said: str) -> None:
    from trendledger.errors import SpecError
    from trendledger.spec import parse

    text = SPEC.replace('format = "csv"\n', f'format = "csv"\nallow = {allow}\n')
    with pytest.raises(SpecError, match=said):
        parse(text, path="spec.toml")
