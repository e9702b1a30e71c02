"""Appending daily batches: identity, replacement, formats, bad input, atomicity."""

from __future__ import annotations

import datetime as dt
import gzip
import json

import duckdb
import pytest

from trendledger import InputError, Ledger, StoreError

from .conftest import SPEC, Lab


def test_first_append_loads_rows_with_fields_and_lineage(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99)], "c02": [(1, 3.0)]})
    with lab.init() as led:
        summary = led.append()
        assert (summary.batch_id, summary.files, summary.rows) == (1, 2, 3)
        rows = led.con.execute(
            "SELECT cell, day, cycle, capacity_ah, file_id FROM measurements ORDER BY cell, cycle"
        ).fetchall()
        files = led.lineage(files=True)
    assert rows == [
        ("c01", dt.date(2026, 3, 2), 1, 3.0, 1),
        ("c01", dt.date(2026, 3, 2), 2, 2.99, 1),
        ("c02", dt.date(2026, 3, 2), 1, 3.0, 2),
    ]
    assert list(files["path"]) == ["incoming/2026-03-02/c01.csv", "incoming/2026-03-02/c02.csv"]
    assert list(files["rows"]) == [2, 1]
    assert set(files["status"]) == {"loaded"}
    assert all(len(h) == 64 for h in files["sha256"])


def test_reappend_adds_nothing(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)], "c02": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        again = led.append()
        assert again.batch_id is None and again.rows == 0 and again.unchanged == 2
        rehashed = led.append(rehash=True)
        assert rehashed.rows == 0 and rehashed.skipped == 2
    assert lab.counts()[0] == 2


def test_changed_file_is_refused_then_replaced(lab: Lab) -> None:
    (path,) = lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
    with lab.init() as led:
        led.append()
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah\n1,3.0\n2,2.95\n3,2.9\n")
    before = lab.counts()
    with lab.open() as led, pytest.raises(InputError, match="changed since it was loaded"):
        led.append()
    assert lab.counts() == before
    with lab.open() as led:
        summary = led.append(replace=True)
        assert summary.replaced == 1 and summary.rows == 3
        values = led.con.execute("SELECT capacity_ah FROM measurements ORDER BY cycle").fetchall()
        files = led.lineage(files=True)
    assert values == [(3.0,), (2.95,), (2.9,)]
    assert list(files["status"]) == ["replaced", "loaded"]
    assert files["replaces"].iloc[1] == files["file_id"].iloc[0]
    assert path.exists()


def test_identical_content_under_two_paths_loads_both(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)], "c02": [(1, 3.0)]})
    with lab.init() as led:
        assert led.append().rows == 2
        report = led.check()
    assert report.same_content == [["incoming/2026-03-02/c01.csv", "incoming/2026-03-02/c02.csv"]]


def test_path_not_matching_template_is_refused_with_reason(lab: Lab) -> None:
    path = lab.write("incoming/c01.csv", "cycle,capacity_ah\n1,3.0\n")
    with lab.init() as led, pytest.raises(InputError, match="2 path segment"):
        led.append([str(path)])


def test_field_that_is_not_a_date_is_refused(lab: Lab) -> None:
    lab.day("2026-02-30", {"c01": [(1, 3.0)]})
    with lab.init() as led, pytest.raises(InputError, match=r"\{day\} = '2026-02-30'"):
        led.append()


@pytest.mark.parametrize(
    ("content", "line", "words"),
    [
        (b"cycle,capacity_ah\n1,3.0\n2,abc\n", 3, "abc"),
        (b"cycle,capacity\n1,3.0\n", 1, "header"),
        (b"cycle,capacity_ah,temp\n1,3.0,20\n", 1, "unexpected 'temp'"),
        (b"capacity_ah,cycle\n3.0,1\n", 1, "another order"),
        (b"cycle,capacity_ah\n1,3.0\n2,2.9", None, None),  # no final newline: still valid
        (b"cycle,capacity_ah\n1,3.0\n2\n", 3, "Expected Number of Columns"),
        (b"cycle,capacity_ah\n1,3.0\n2,2.\xff9\n", 3, "not UTF-8"),
        (b"", None, "empty"),
        (b"cycle,capacity_ah\n1,+nan\n", None, "NaN"),
        (b"cycle,capacity_ah\n1,inf\n", None, "infinite"),
        (b"cycle,capacity_ah\n1,\"3.0\n", None, None),
    ],
)
def test_bad_file_refuses_whole_batch(lab: Lab, content: bytes, line: int | None,
                                      words: str | None) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
    lab.day("2026-03-03", {"c01": [(2, 2.9)], "c02": [(1, 3.0)]})
    lab.write("incoming/2026-03-03/c03.csv", content)
    before = lab.counts()
    with lab.open() as led:
        if words is None and line is None and content.endswith(b"2.9"):
            assert led.append().rows == 4
            return
        with pytest.raises(InputError) as info:
            led.append()
    err = info.value
    assert err.file == "incoming/2026-03-03/c03.csv"
    if line is not None:
        assert err.line == line
    if words is not None:
        assert words in str(err)
    assert "nothing was written" in str(err)
    assert lab.counts() == before


def test_skip_bad_loads_good_files_and_records_the_bad(lab: Lab) -> None:
    lab.day("2026-03-03", {"c01": [(1, 3.0)], "c02": [(1, 3.0)]})
    lab.write("incoming/2026-03-03/c03.csv", "cycle,capacity_ah\n1,x\n")
    with lab.init() as led:
        summary = led.append(skip_bad=True)
        assert (summary.files, summary.rejected, summary.status) == (2, 1, "partial")
        files = led.lineage(files=True)
    bad = files[files["path"].str.endswith("c03.csv")].iloc[0]
    assert bad["status"] == "rejected" and "line 2" in bad["message"]
    # fixed later: a rejected file is tried again
    lab.write("incoming/2026-03-03/c03.csv", "cycle,capacity_ah\n1,2.99\n")
    with lab.open() as led:
        assert led.append().files == 1
    assert lab.counts()[0] == 3


def test_failure_after_half_the_work_leaves_store_unchanged(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
    lab.day("2026-03-03", {f"c{i:02d}": [(1, 3.0), (2, 2.9)] for i in range(1, 9)})
    before = lab.counts()

    def explode(stage: str, done: int, total: int) -> None:
        if stage == "read" and done == total:  # rows are in the table, lineage not yet
            raise RuntimeError("power cut")

    with lab.open() as led, pytest.raises(RuntimeError, match="power cut"):
        led.append(progress=explode)
    assert lab.counts() == before
    with lab.open() as led:
        assert led.append().rows == 16


def test_dialects_crlf_bom_quotes(lab: Lab) -> None:
    lab.write("incoming/2026-03-02/c01.csv", b"\xef\xbb\xbfcycle,capacity_ah\r\n1,3.0\r\n2,2.9\r\n")
    lab.write("incoming/2026-03-02/c02.csv", 'cycle,capacity_ah\n"1","3.0"\n"2",2.5\n')
    with lab.init() as led:
        assert led.append().rows == 4
        got = led.con.execute("SELECT cell, cycle, capacity_ah FROM measurements "
                              "ORDER BY cell, cycle").fetchall()
    assert got == [("c01", 1, 3.0), ("c01", 2, 2.9), ("c02", 1, 3.0), ("c02", 2, 2.5)]


def test_quoted_delimiter_in_a_text_column(tmp_path) -> None:
    spec = SPEC.replace('capacity_ah = "DOUBLE"', 'capacity_ah = "DOUBLE"\nnote = "VARCHAR"')
    lab = Lab(tmp_path, spec)
    lab.write("incoming/2026-03-02/c01.csv",
              'cycle,capacity_ah,note\n1,3.0,"rest, then charge"\n2,2.9,"said ""ok"""\n')
    with lab.init() as led:
        led.append()
        notes = [r[0] for r in led.con.execute("SELECT note FROM measurements ORDER BY cycle")
                 .fetchall()]
    assert notes == ["rest, then charge", 'said "ok"']


def test_paths_with_spaces_quotes_and_sql_are_data(lab: Lab) -> None:
    name = "it's; DROP TABLE measurements;--"
    lab.write(f"incoming/2026-03-02/{name}.csv", "cycle,capacity_ah\n1,3.0\n")
    lab.write("incoming/2026-03-02/cell [1] *.csv", "cycle,capacity_ah\n1,2.0\n")
    lab.write("incoming/2026-03-02/cell 1 x.csv", "cycle,capacity_ah\n1,1.0\n")
    with lab.init() as led:
        assert led.append().rows == 3
        cells = dict(led.con.execute("SELECT cell, capacity_ah FROM measurements").fetchall())
    assert cells == {name: 3.0, "cell [1] *": 2.0, "cell 1 x": 1.0}


def test_gzip_input(tmp_path) -> None:
    lab = Lab(tmp_path, SPEC.replace("{cell}.csv", "{cell}.csv.gz"))
    body = gzip.compress(b"cycle,capacity_ah\n1,3.0\n2,2.9\n")
    lab.write("incoming/2026-03-02/c01.csv.gz", body)
    with lab.init() as led:
        assert led.append().rows == 2
    lab.write("incoming/2026-03-02/c02.csv.gz", b"not gzip at all")
    with lab.open() as led, pytest.raises(InputError, match="gzip"):
        led.append()


def test_parquet_input(tmp_path) -> None:
    lab = Lab(tmp_path, SPEC.replace("{cell}.csv", "{cell}.parquet").replace('"csv"', '"parquet"'))
    target = lab.root / "incoming/2026-03-02"
    target.mkdir(parents=True)
    con = duckdb.connect()
    con.execute(f"COPY (SELECT 1::INT AS cycle, 3.0::DOUBLE AS capacity_ah UNION ALL "
                f"SELECT 2, 2.9) TO '{target / 'c01.parquet'}'")
    con.execute(f"COPY (SELECT 1::INT AS cycle, 3.0::DOUBLE AS wrong) "
                f"TO '{target / 'c02.parquet'}'")
    with lab.init() as led:
        summary = led.append(skip_bad=True)
        assert (summary.rows, summary.rejected) == (2, 1)
        msg = led.lineage(files=True).set_index("path").loc["incoming/2026-03-02/c02.parquet",
                                                              "message"]
    assert "wrong" in msg


def test_jsonl_input(tmp_path) -> None:
    lab = Lab(tmp_path, SPEC.replace("{cell}.csv", "{cell}.jsonl").replace('"csv"', '"jsonl"'))
    lines = [json.dumps({"cycle": c, "capacity_ah": v}) for c, v in ((1, 3.0), (2, 2.9))]
    lab.write("incoming/2026-03-02/c01.jsonl", "\n".join(lines) + "\n")
    with lab.init() as led:
        assert led.append().rows == 2
    lab.write("incoming/2026-03-02/c02.jsonl", '{"cycle": 1}\n')
    with lab.open() as led, pytest.raises(InputError) as info:
        led.append()
    assert info.value.line == 1 and "missing capacity_ah" in str(info.value)
    lab.write("incoming/2026-03-02/c02.jsonl", '{"cycle": 1, "capacity_ah": "lots"}\n')
    with lab.open() as led, pytest.raises(InputError) as info:
        led.append()
    assert info.value.file == "incoming/2026-03-02/c02.jsonl"
    # DuckDB alone would store 2 and 1 here: a fraction or a boolean in an INTEGER column
    for bad, said in (('{"cycle": 1.5, "capacity_ah": 2.8}', "holds 1.5, not a whole number"),
                      ('{"cycle": true, "capacity_ah": 2.8}', "holds true, not a number"),
                      ('{"cycle": 3, "capacity_ah": false}', "holds false, not a number")):
        lab.write("incoming/2026-03-02/c02.jsonl", '{"cycle": 2, "capacity_ah": 2.9}\n' + bad)
        with lab.open() as led, pytest.raises(InputError, match=said) as info:
            led.append()
        assert info.value.line == 2
    lab.write("incoming/2026-03-02/c02.jsonl", '{"cycle": 4.0, "capacity_ah": 2}\n')
    with lab.open() as led:  # a whole number written as 4.0 is a whole number
        assert led.append().rows == 1
    assert lab.counts()[0] == 3


def test_tsv_input(tmp_path) -> None:
    lab = Lab(tmp_path, SPEC.replace("{cell}.csv", "{cell}.tsv").replace('"csv"', '"tsv"'))
    lab.write("incoming/2026-03-02/c01.tsv", "cycle\tcapacity_ah\n1\t3.0\n")
    with lab.init() as led:
        assert led.append().rows == 1


def test_retract_batch_and_file_keep_lineage(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)], "c02": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        lab.day("2026-03-03", {"c01": [(2, 2.9)], "c02": [(2, 2.9)]})
        led.append()
        assert led.retract(batch=1, why="wrong calibration") == {"files": 2, "rows": 2}
        assert led.retract(file="incoming/2026-03-03/c02.csv", why="probe fell off")["rows"] == 1
        files = led.lineage(files=True)
        batches = led.lineage()
        remaining = led.con.execute("SELECT cell, cycle FROM measurements").fetchall()
        with pytest.raises(StoreError, match="already retracted"):
            led.retract(batch=1, why="again")
        # a retracted file is not loaded again by the daily append
        assert led.append(rehash=True).rows == 0
    assert remaining == [("c01", 2)]
    assert list(files["status"]) == ["retracted", "retracted", "loaded", "retracted"]
    assert files["message"].iloc[0] == "wrong calibration"
    assert batches["status"].iloc[0] == "retracted"


def test_check_finds_edited_and_missing_files(lab: Lab) -> None:
    paths = lab.day("2026-03-02", {"c01": [(1, 3.0)], "c02": [(1, 3.0)], "c03": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        assert led.check().ok
    paths[0].write_text("cycle,capacity_ah\n1,3.5\n")
    paths[1].unlink()
    with lab.open(read_only=True) as led:
        report = led.check()
    assert not report.ok
    assert report.changed == ["incoming/2026-03-02/c01.csv"]
    assert report.missing == ["incoming/2026-03-02/c02.csv"]
    assert report.fine == 1


def test_duplicate_rows_are_kept_and_reported(lab: Lab) -> None:
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah\n1,3.0\n1,3.0\n2,2.9\n")
    with lab.init() as led:
        assert led.append().rows == 3
        report = led.check()
    assert report.ok
    assert report.duplicate_rows == ["incoming/2026-03-02/c01.csv: 1 repeated row(s)"]


def test_read_only_store_refuses_writes(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    lab.init().close()
    with Ledger.open(lab.store, read_only=True) as led:
        with pytest.raises(StoreError, match="read-only"):
            led.append()


def test_init_refuses_existing_store_unless_forced(lab: Lab) -> None:
    lab.init().close()
    with pytest.raises(StoreError, match="already exists"):
        lab.init()
    Ledger.init(lab.spec, lab.store, force=True).close()


def test_failed_init_leaves_no_store_behind(lab: Lab, monkeypatch: pytest.MonkeyPatch) -> None:
    # a full disk while the views are installed: the next init must not find half a store
    def full_disk(self: Ledger) -> None:
        raise duckdb.IOException("could not write file: No space left on device")

    monkeypatch.setattr(Ledger, "_install_views", full_disk)
    with pytest.raises(StoreError, match="cannot create the store: .*No space left"):
        lab.init()
    assert not lab.store.exists()
    assert not lab.store.with_name(lab.store.name + ".wal").exists()
    monkeypatch.undo()
    lab.init().close()  # no "already exists"


def test_store_opens_in_duckdb_1_5_client(lab: Lab) -> None:
    import shutil
    import subprocess
    import sys
    from pathlib import Path

    beside = Path(sys.executable).with_name("duckdb")
    cli = str(beside) if beside.exists() else shutil.which("duckdb")
    if cli is None:
        pytest.skip("the duckdb command-line client is not installed (test extra: duckdb-cli)")
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
    with lab.init() as led:
        led.append()
    out = subprocess.run([cli, "-readonly", "-csv", str(lab.store), "-c",
                          "SELECT count(*) AS n FROM measurements"],
                         capture_output=True, text=True, check=True).stdout
    assert out.split() == ["n", "2"]
