"""Files as instruments write them: missing-value texts, headers with units, decimal commas,
mixed line endings, and reader errors that name the line an editor shows."""

from __future__ import annotations

import json

import duckdb
import numpy as np
import pytest

from trendledger.errors import InputError, SpecError
from trendledger.spec import parse

from .conftest import SPEC, Lab

CYCLER = """\
[source]
files = "incoming/{day}/{cell}.csv"
missing = ["", "NaN", "-9999", "n/a"]

[source.columns]
cycle = { type = "INTEGER", header = "Cycle_Index" }
capacity_ah = { type = "DOUBLE", header = "Discharge_Capacity(Ah)" }
temp_c = { type = "DOUBLE", header = "Temp [°C]" }

[source.fields]
day = "DATE"
cell = "VARCHAR"

[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
"""
HEAD = "Cycle_Index,Discharge_Capacity(Ah),Temp [°C]\n"


def _rows(led) -> list[tuple]:  # type: ignore[no-untyped-def]
    return led.con.execute(
        "SELECT cycle, capacity_ah, temp_c FROM measurements ORDER BY file_id, rowid").fetchall()


def test_missing_texts_load_as_null_and_the_fit_skips_them(tmp_path) -> None:  # type: ignore[no-untyped-def]
    lab = Lab(tmp_path / "lab", CYCLER)
    lab.write("incoming/2026-03-02/c01.csv", HEAD + "1,4.95,25.0\n2,NaN,-9999\n3,4.91,n/a\n"
              "4,,25.5\n-9999,4.80,26.0\n5,4.88,\n6,4.86,24.9\n")
    with lab.init() as led:
        assert led.append().rows == 7
        assert _rows(led) == [(1, 4.95, 25.0), (2, None, None), (3, 4.91, None),
                              (4, None, 25.5), (None, 4.80, 26.0), (5, 4.88, None),
                              (6, 4.86, 24.9)]
        fit = led.fits("fade").iloc[0]
        # numpy.polyfit on the rows with both cycle and capacity: cycles 1, 3, 5, 6
        x, y = np.array([1, 3, 5, 6]), np.array([4.95, 4.91, 4.88, 4.86])
        slope, intercept = np.polyfit(x, y, 1)
        assert fit["n"] == 4
        assert fit["slope"] == pytest.approx(slope, rel=1e-12)
        assert fit["intercept"] == pytest.approx(intercept, rel=1e-12)


def test_default_missing_texts_and_what_still_refuses(lab: Lab) -> None:
    assert parse(SPEC).source.missing == ("", "NaN", "nan")
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah\n1,NaN\n2,nan\n3,\n4,-9999\n")
    lab.write("incoming/2026-03-02/c02.csv", "cycle,capacity_ah\n1,3.0\n2,inf\n")
    lab.write("incoming/2026-03-02/c03.csv", "cycle,capacity_ah\n1,3.0\n2,n/a\n")
    with lab.init() as led:
        summary = led.append(skip_bad=True)
        problems = {o.path.rsplit("/", 1)[1]: o.message for o in summary.outcomes}
        # -9999 is a number unless the spec lists it
        assert led.con.execute("SELECT capacity_ah FROM measurements ORDER BY cycle").fetchall() \
            == [(None,), (None,), (None,), (-9999.0,)]
        assert problems["c02.csv"].startswith("column capacity_ah: holds NaN or an infinite")
        assert problems["c03.csv"].startswith("line 3: column capacity_ah:")
        assert '"n/a"' in problems["c03.csv"]


def test_headers_with_units_map_to_plain_column_names(tmp_path) -> None:  # type: ignore[no-untyped-def]
    lab = Lab(tmp_path / "lab", CYCLER)
    lab.write("incoming/2026-03-02/c01.csv", HEAD + "1,4.95,25.0\n2,4.93,25.1\n")
    lab.write("incoming/2026-03-03/c01.csv", "Cycle_Index,capacity_ah,Temp [°C]\n3,4.9,25\n")
    with lab.init() as led:
        with pytest.raises(InputError) as info:
            led.append()
        # the header check compares with the mapped names, and says which it wanted
        assert info.value.file == "incoming/2026-03-03/c01.csv" and info.value.line == 1
        assert "missing Discharge_Capacity(Ah)" in info.value.message
        assert "unexpected 'capacity_ah'" in info.value.message
        (lab.root / "incoming/2026-03-03/c01.csv").unlink()
        assert led.append().rows == 2
        assert _rows(led) == [(1, 4.95, 25.0), (2, 4.93, 25.1)]


def test_header_mapping_reads_json_keys_and_parquet_columns(tmp_path) -> None:  # type: ignore[no-untyped-def]
    for fmt in ("jsonl", "parquet"):
        spec = CYCLER.replace("{cell}.csv", "{cell}." + fmt).replace(
            'missing = ["", "NaN", "-9999", "n/a"]\n', "")
        lab = Lab(tmp_path / fmt, spec)
        path = lab.root / "incoming" / "2026-03-02" / f"c01.{fmt}"
        path.parent.mkdir(parents=True)
        rows = [{"Cycle_Index": 1, "Discharge_Capacity(Ah)": 4.95, "Temp [°C]": 25.0},
                {"Cycle_Index": 2, "Discharge_Capacity(Ah)": None, "Temp [°C]": 25.2}]
        text = "".join(json.dumps(r) + "\n" for r in rows)
        if fmt == "jsonl":
            path.write_text(text, encoding="utf-8")
        else:
            staged = tmp_path / "rows.jsonl"
            staged.write_text(text, encoding="utf-8")
            con = duckdb.connect()
            con.execute("COPY (SELECT * FROM read_json($src)) TO "
                        + "'" + str(path).replace("'", "''") + "' (FORMAT parquet)",
                        {"src": str(staged)})
            con.close()
        with lab.init() as led:
            assert led.append().rows == 2
            assert _rows(led) == [(1, 4.95, 25.0), (2, None, 25.2)]


def test_decimal_comma_files_equal_their_dot_twins(tmp_path) -> None:  # type: ignore[no-untyped-def]
    dot = Lab(tmp_path / "dot", CYCLER)
    comma = Lab(tmp_path / "comma", CYCLER.replace(
        "[source]\n", '[source]\ndelimiter = ";"\ndecimal = ","\n'))
    body = [(1, "4.95", "25.0"), (2, "4.9375", "-9999"), (3, "1.5e-1", "25.25"), (4, "", "3")]
    dot.write("incoming/2026-03-02/c01.csv",
              HEAD + "".join(f"{c},{v},{t}\n" for c, v, t in body))
    comma.write("incoming/2026-03-02/c01.csv",
                HEAD.replace(",", ";") + "".join(
                    f"{c};{v.replace('.', ',')};{t.replace('.', ',')}\n" for c, v, t in body))
    with dot.init() as a, comma.init() as b:
        a.append()
        b.append()
        assert _rows(a) == _rows(b)
        assert _rows(b)[1] == (2, 4.9375, None) and _rows(b)[2][1] == 0.15


@pytest.mark.parametrize(("change", "words"), [
    ('missing = ["", "NaN", "-9999", "n/a"]', 'missing = []'),
    ('missing = ["", "NaN", "-9999", "n/a"]', 'missing = "NaN"'),
    ('missing = ["", "NaN", "-9999", "n/a"]', 'decimal = ","'),
    ('missing = ["", "NaN", "-9999", "n/a"]', 'decimal = ";"'),
    ('header = "Temp [°C]"', 'header = "Cycle_Index"'),
    ('header = "Temp [°C]"', 'header = " Temp"'),
    ('header = "Temp [°C]"', 'heading = "Temp"'),
])
def test_spec_mistakes_in_the_new_keys_are_named(change: str, words: str) -> None:
    with pytest.raises(SpecError) as info:
        parse(CYCLER.replace(change, words))
    text = str(info.value)
    expected = {
        "missing = []": "missing: a list",
        'missing = "NaN"': "missing: a list",
        'decimal = ","': "delimiter is not a comma",
        'decimal = ";"': "decimal:",
        'header = "Cycle_Index"': "is already read by cycle",
        'header = " Temp"': "without spaces",
        'heading = "Temp"': "unknown key 'heading'",
    }[words]
    assert expected in text


def test_missing_texts_are_for_csv_only() -> None:
    spec = CYCLER.replace("{cell}.csv", "{cell}.parquet")
    with pytest.raises(SpecError, match="JSON and Parquet files write null"):
        parse(spec)


@pytest.mark.parametrize(("content", "line", "kinds"), [
    (b"cycle,capacity_ah\n1,3.0\r\n2,2.9\r\n", 2, ("CRLF", "LF")),
    (b"cycle,capacity_ah\r\n1,3.0\r\n2,2.9\n3,2.8\n", 3, ("LF", "CRLF")),
])
def test_mixed_line_endings_name_the_first_line_that_differs(
        lab: Lab, content: bytes, line: int, kinds: tuple[str, str]) -> None:
    lab.write("incoming/2026-03-02/c01.csv", content)
    lab.init().close()
    before = lab.counts()
    with lab.open() as led, pytest.raises(InputError) as info:
        led.append()
    assert (info.value.file, info.value.line) == ("incoming/2026-03-02/c01.csv", line)
    assert info.value.message.startswith(f"this line ends with {kinds[0]}")
    assert f"line 1 with {kinds[1]}" in info.value.message
    assert lab.counts() == before


def test_a_line_break_inside_quotes_is_data_not_a_mixed_ending(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = SPEC.replace('capacity_ah = "DOUBLE"', 'capacity_ah = "DOUBLE"\nnote = "VARCHAR"')
    lab = Lab(tmp_path / "lab", spec)
    lab.write("incoming/2026-03-02/c01.csv",
              b'cycle,capacity_ah,note\r\n1,3.0,"two\nlines"\r\n2,2.9,ok\r\n')
    with lab.init() as led:
        assert led.append().rows == 2


def test_reader_errors_give_the_physical_line_after_multiline_fields(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = SPEC.replace('capacity_ah = "DOUBLE"', 'note = "VARCHAR"\ncapacity_ah = "DOUBLE"')
    lab = Lab(tmp_path / "lab", spec)
    # records 2 and 3 each span several lines: "bad" is on line 7 of the file, record 4
    lab.write("incoming/2026-03-02/c01.csv",
              'cycle,note,capacity_ah\n1,"two\nlines",4.5\n2,"three\nmore\nlines",4.4\n'
              "3,x,bad\n")
    with lab.init() as led:
        with pytest.raises(InputError) as info:
            led.append()
        assert (info.value.line, info.value.column) == (7, "capacity_ah")
        assert str(info.value).startswith("incoming/2026-03-02/c01.csv:7: column capacity_ah")


def test_a_column_may_list_its_own_missing_texts(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = CYCLER.replace('cycle = { type = "INTEGER", header = "Cycle_Index" }',
                          'cycle = { type = "INTEGER", header = "Cycle_Index", missing = ["x"] }'
                          ).replace('temp_c = { type = "DOUBLE", header = "Temp [°C]" }',
                                    'temp_c = { type = "DOUBLE", header = "Temp [°C]", '
                                    'missing = ["-1", "OVR"] }')
    lab = Lab(tmp_path / "lab", spec)
    # -1 means "no reading" only for the thermocouple; a capacity of -1 is a value
    lab.write("incoming/2026-03-02/c01.csv", HEAD + "1,-1,-1\nx,4.9,OVR\n3,4.8,25.5\n4,,NaN\n")
    with lab.init() as led:
        led.append()
        assert _rows(led) == [(1, -1.0, None), (None, 4.9, None), (3, 4.8, 25.5),
                              (4, None, None)]
        lab.write("incoming/2026-03-03/c01.csv", HEAD + "5,4.7,hot\n")
        with pytest.raises(InputError) as info:
            led.append()
        assert info.value.file == "incoming/2026-03-03/c01.csv"
        assert "column temp_c: hot is not a valid DOUBLE" in info.value.message
        lab.write("incoming/2026-03-03/c01.csv", HEAD + "2.5,4.7,25\n")
        with pytest.raises(InputError, match="2.5 is not a whole number"):
            led.append()


def test_a_column_missing_list_with_a_decimal_comma(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec = CYCLER.replace('temp_c = { type = "DOUBLE", header = "Temp [°C]" }',
                          'temp_c = { type = "DOUBLE", header = "Temp [°C]", missing = ["-1"] }'
                          ).replace("[source]\n", '[source]\ndelimiter = ";"\ndecimal = ","\n')
    lab = Lab(tmp_path / "lab", spec)
    lab.write("incoming/2026-03-02/c01.csv",
              HEAD.replace(",", ";") + "1;4,95;-1\n2;4,9;25,25\n")
    with lab.init() as led:
        led.append()
        assert _rows(led) == [(1, 4.95, None), (2, 4.9, 25.25)]
