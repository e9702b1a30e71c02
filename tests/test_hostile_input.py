"""Hostile and malformed input: every file loads exactly as the reference reads it, or the
batch is refused whole, naming the file.

Hypothesis writes CSV bytes (delimiters, quoting, encodings, line ends, huge fields,
control characters, NUL, locale commas, NaN and inf, blank and long lines, byte-level
damage) and file names (spaces, quotes, unicode, leading dashes, glob characters,
bytes that are not UTF-8). Each example is appended as a new day folder of a store
kept open for the whole module, beside a good file that must never be blamed. The
reference reading and its rules are in csv_reference.py; the example tests at the
end pin the places where those rules follow DuckDB rather than the csv module.
"""

from __future__ import annotations

import datetime as dt
import itertools
import json
import os
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from trendledger import InputError, Ledger

from .audit import audit, cli, one_clean_line, tally
from .conftest import Lab
from .csv_reference import COLUMNS, Reading, read
from .fuzz_settings import budget

DELIMITERS = (",", ";", "\t", "|")


def spec_for(delimiter: str) -> str:
    """The test spec with another delimiter. It declares no fit: these tests aim at the reader
    and the lineage, and each fit's stored sums would add their own cost to every append."""
    return f"""\
[source]
files = "incoming/{{day}}/{{cell}}.csv"
format = "csv"
delimiter = {json.dumps(delimiter)}

[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"
note = "VARCHAR"

[source.fields]
day = "DATE"
cell = "VARCHAR"
"""


def good_file(delimiter: str) -> bytes:
    return delimiter.join(COLUMNS).encode() + b"\n" + delimiter.join(["7", "2.5", "ok"]).encode()


GOOD_ROWS = [(7, 2.5, "ok")]


class Bench:
    """One store per delimiter, kept open; every example gets a day folder of its own."""

    def __init__(self, root: Path, delimiter: str) -> None:
        self.delimiter = delimiter
        self.lab = Lab(root, spec_for(delimiter))
        self.led = self.lab.init()
        self._days = itertools.count()

    def next_day(self) -> str:
        return (dt.date(2000, 1, 1) + dt.timedelta(days=next(self._days))).isoformat()

    def state(self) -> tuple:
        return self.led.con.execute(
            "SELECT (SELECT count(*) FROM measurements), (SELECT count(*) FROM ingest_files), "
            "(SELECT count(*) FROM ingest_batches), (SELECT max(file_id) FROM ingest_files)"
        ).fetchall()[0]

    def rows(self, file_id: int) -> list[tuple]:
        return self.led.con.execute(
            "SELECT cycle, capacity_ah, note FROM measurements WHERE file_id = ? ORDER BY rowid",
            [file_id],
        ).fetchall()


@pytest.fixture(scope="module")
def benches(tmp_path_factory: pytest.TempPathFactory):
    made = {d: Bench(tmp_path_factory.mktemp(f"bench{i}") / "lab", d)
            for i, d in enumerate(DELIMITERS)}
    yield made
    for bench in made.values():
        bench.led.close()


# -- generated CSV content ---------------------------------------------------------------------

HOSTILE_NUMBERS = [
    "", " ", "0", "-0", "+7", " 12 ", "\t3", "12\x0b", "12.0", "1.5", "2.5", "-1.5", "1e3", "1e-1",
    "1_000", "1__0", "_1", "0x1F", "0b101", "-0x10", "NaN", "nan", "inf", "-Infinity", "+Inf",
    "1e400", "-1e400", "1e-400", "3,14", "1.234,5", "\u0661\u0662", "\xa01", "1 2", ".5", "5.",
    ".", "-", "1.5e", "e5", "2147483647", "2147483648", "-2147483648", "-2147483649",
    "2147483647.4", "0.1e1_0", "00012", "\ufeff1", "1\x00",
]
#: Valid but unusual ways to write a number (whitespace, signs, separators, exponents).
ODD_INTEGERS = ["", " 12 ", "\t3", "12\x0b", "+7", "-0", "12.0", "1e3", "1_000", "0x1F",
                "0b101", "00012", "2147483647", "-2147483648", "5."]
ODD_DOUBLES = ["", " 2.5 ", ".5", "5.", "-0", "+.5", "1_000.5", "1e-400", "1E+3", "0.1e1_0",
               "00.250", "-1.5e-3"]
LEVELS = ["clean", "clean", "odd", "hostile"]


def integers_as_text(level: str) -> st.SearchStrategy[str]:
    valid = st.integers(-(2**31), 2**31 - 1).map(str)
    if level == "clean":
        return st.one_of(valid, st.just(""))
    if level == "odd":
        return st.one_of(valid, valid, st.sampled_from(ODD_INTEGERS))
    return st.one_of(valid, st.integers().map(str), st.sampled_from(HOSTILE_NUMBERS),
                     st.text(alphabet="0123456789+-._eE \t", max_size=8))


def doubles_as_text(level: str) -> st.SearchStrategy[str]:
    valid = st.floats(allow_nan=False, allow_infinity=False).map(repr)
    if level == "clean":
        return st.one_of(valid, st.just(""))
    if level == "odd":
        return st.one_of(valid, st.sampled_from(ODD_DOUBLES),
                         st.decimals(min_value=-(10**12), max_value=10**12, allow_nan=False,
                                     allow_infinity=False).map(str),
                         st.floats(allow_nan=False, allow_infinity=False).map(
                             lambda f: f"{f:.6e}"))
    return st.one_of(valid, st.floats(width=32).map(str), st.sampled_from(HOSTILE_NUMBERS),
                     st.text(alphabet="0123456789+-._eE ,", max_size=10))


#: Any code point (NUL, controls, quotes, delimiters, line ends, emoji), or the awkward ones.
NOTES = st.one_of(
    st.text(max_size=20),
    st.text(alphabet=st.sampled_from('",;|\t\r\n \x00\x01\x1b\x7f\\\'\ufeff\u2028é日😀'),
            max_size=12),
    st.just(""),
)


GOOD_HEADERS = [list(COLUMNS)] * 3 + [[" cycle", "capacity_ah ", " note "]]
BAD_HEADERS = [
    ["Cycle", "capacity_ah", "note"], ["cycle", "capacity_ah"],
    ["cycle", "capacity_ah", "note", "extra"], ["capacity_ah", "cycle", "note"],
    ["cycle", "capacity_ah", "note", ""],
]
PIECES = [b"\x00", b'"', b"\r", b"\n", b"\r\n", b",", b";", b"\t", b"|", b"\xff", b"\xc3",
          b"\xef\xbb\xbf", b" ", b"\x1b[31m", b"\xe2\x80\xa8", b'""', b"\\"]
ENDS = ["\n", "\r\n", "\r"]


@st.composite
def csv_files(draw: st.DrawFn, delimiter: str) -> bytes:
    """The bytes of one CSV file: clean, odd but valid, or thoroughly broken."""
    level = draw(st.sampled_from(LEVELS))
    clean, hostile = level == "clean", level == "hostile"
    rows = draw(st.lists(st.tuples(integers_as_text(level), doubles_as_text(level), NOTES),
                         max_size=8))
    if rows and draw(st.integers(0, 14)) == 0:  # one huge field: a very long line
        at = draw(st.integers(0, len(rows) - 1))
        rows[at] = (rows[at][0], rows[at][1], "z" * draw(st.integers(10_000, 150_000)))
    elif rows and draw(st.integers(0, 59)) == 0:  # rarely: past the line limit, often last
        at = draw(st.sampled_from([len(rows) - 1, 0]))
        size = draw(st.sampled_from([1_000_001, 3_000_000, 50_000_000, 100_000_000]))
        rows[at] = (rows[at][0], rows[at][1], "z" * size)
    sep = delimiter if not hostile else draw(st.sampled_from([delimiter] * 6 + list(DELIMITERS)))
    header = draw(st.sampled_from(GOOD_HEADERS if not hostile else GOOD_HEADERS + BAD_HEADERS))
    quoting = draw(st.sampled_from(["minimal", "all"] if clean
                                   else ["minimal", "all", "each"] + ["none"] * hostile))
    end = draw(st.sampled_from(ENDS))

    def field(text: str) -> str:
        how = draw(st.sampled_from(["minimal", "all", "none"])) if quoting == "each" else quoting
        special = any(ch in text for ch in (sep, '"', "\r", "\n"))
        if how == "all" or (how == "minimal" and special):
            return '"' + text.replace('"', '""') + '"'
        return text

    lines = [sep.join(field(h) for h in header)]
    for row in rows:
        trailing = sep * draw(st.integers(0, 2)) if not clean and draw(st.booleans()) else ""
        lines.append(sep.join(field(v) for v in row) + trailing)
    for at in sorted(draw(st.lists(st.integers(1, len(lines)), max_size=2)), reverse=True):
        lines.insert(at, "")  # blank lines
    ends = [end] * len(lines)
    if not clean and draw(st.integers(0, 9)) == 0 and len(lines) > 1:  # one line ends otherwise
        ends[draw(st.integers(0, len(lines) - 2))] = draw(st.sampled_from(ENDS))
    if draw(st.booleans()):
        ends[-1] = ""  # no line end after the last line
    text = "".join(line + e for line, e in zip(lines, ends, strict=True))
    encodings = ["utf-8"] * 4 + ["utf-8-sig"]
    if hostile:
        encodings += ["latin-1", "cp1252", "utf-16", "utf-16-le"]
    data = text.encode(draw(st.sampled_from(encodings)), errors="replace")
    if not hostile:
        return data
    for kind, at, piece in draw(st.lists(
        st.tuples(st.sampled_from(["insert", "delete", "cut"]), st.integers(0, 1 << 20),
                  st.sampled_from(PIECES)), max_size=3,
    )):
        at %= len(data) + 1
        if kind == "insert":
            data = data[:at] + piece + data[at:]
        elif kind == "delete":
            data = data[:at] + data[at + 1:]
        else:
            data = data[:at]
    return data


def _explain(reading: Reading) -> str:
    return (f"reference: {reading.refused or reading.rows!r} "
            f"{reading.may_refuse or ''} {reading.gray or ''}")


@budget(500)
@given(data=st.data())
def test_generated_csv_loads_as_the_reference_reads_it_or_is_refused_whole(
    benches: dict[str, Bench], data: st.DataObject
) -> None:
    delimiter = data.draw(st.sampled_from(DELIMITERS), label="delimiter")
    bench = benches[delimiter]
    files = data.draw(st.lists(csv_files(delimiter), min_size=1, max_size=6), label="files")
    skip_bad = data.draw(st.booleans(), label="skip_bad")
    day = bench.next_day()
    good = f"incoming/{day}/good.csv"
    bench.lab.write(good, good_file(delimiter))
    hostile: dict[str, Reading] = {}
    for i, content in enumerate(files):
        rel = f"incoming/{day}/h{i}.csv"
        bench.lab.write(rel, content)
        hostile[rel] = read(content, delimiter)
    tally("generated CSV files tried", len(files))
    before = bench.state()

    try:
        summary = bench.led.append([str(bench.lab.root / p) for p in [good, *hostile]],
                                   skip_bad=skip_bad)
    except InputError as err:
        assert err.file in hostile, f"the refusal names {err.file!r}, no hostile file: {err}"
        reading = hostile[err.file]
        assert reading.allows_refusal(), f"store refused: {err}; {_explain(reading)}"
        assert bench.state() == before, "a refused batch changed the store"
        tally("generated inputs refused whole", 1)
        return

    outcome = {o.path: o for o in summary.outcomes}
    assert outcome[good].status == "loaded"
    assert bench.rows(outcome[good].file_id) == GOOD_ROWS
    for rel, reading in hostile.items():
        got = outcome[rel]
        if got.status == "loaded":
            stored = bench.rows(got.file_id)
            assert len(stored) == got.rows
            assert reading.allows_loading(), f"store loaded {stored!r}; {_explain(reading)}"
            if not reading.gray:
                assert stored == reading.rows, _explain(reading)
            tally("generated inputs loaded")
        else:
            assert skip_bad and got.status == "rejected", got
            why = f"store: {got.message}; {_explain(reading)}"
            assert reading.allows_refusal(), why
            assert bench.rows(got.file_id) == []
            tally("generated inputs rejected (skip-bad)")


# -- generated file names ----------------------------------------------------------------------

NAME_PIECES = ["-", "--", "[", "]", "[!a]", "*", "?", "**", "{", "}", "{cell}", "'", '"', " ",
               "\\", "\n", "\t", "é", "日本", "😀", ".", "..", "!", "$HOME", "%s", ";", ",", "~",
               "a", "1", "\u200b", "\ufeff", ".csv"]


def _utf8(name: str) -> bool:
    try:
        name.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


names = st.one_of(
    st.text(st.characters(blacklist_characters="/\x00", blacklist_categories=("Cs",)),
            min_size=1, max_size=24),
    st.lists(st.sampled_from(NAME_PIECES), min_size=1, max_size=6).map("".join),
    st.binary(min_size=1, max_size=10)
    .filter(lambda b: b"/" not in b and b"\0" not in b).map(os.fsdecode),
).filter(lambda n: len(os.fsencode(n + ".csv")) <= 255 and n != "good")


@budget(300)
@given(picked=st.lists(names, min_size=1, max_size=3, unique=True),
       how=st.sampled_from(["explicit", "glob"]))
def test_generated_file_names_are_data(benches: dict[str, Bench], picked: list[str],
                                       how: str) -> None:
    bench = benches[","]
    day = bench.next_day()
    folder = bench.lab.root / "incoming" / day
    bench.lab.write(f"incoming/{day}/good.csv", good_file(","))
    for i, name in enumerate(picked):
        (folder / f"{name}.csv").write_bytes(f"cycle,capacity_ah,note\n{i},1.5,{i}\n".encode())
    tally("generated file names tried", len(picked))
    before = bench.state()
    # A glob's * skips names that start with a dot, as in the shell: such files are hidden.
    taken = [n for n in picked if how == "explicit" or not n.startswith(".")]
    with_good = [*taken, "good"]
    if how == "glob" and "*" in picked:
        # a pattern that names an existing file is that file (paths.expand): "*.csv" here
        taken, with_good = ["*"], ["*"]
    patterns = ([str(folder / f"{n}.csv") for n in with_good]
                if how == "explicit" else [str(folder / "*.csv")])
    undecodable = [n for n in taken if not _utf8(n)]
    try:
        summary = bench.led.append(patterns)
    except InputError as err:
        assert undecodable, f"refused a batch of valid names: {err}"
        shown = {f"incoming/{day}/" + os.fsencode(n + ".csv").decode("utf-8", "backslashreplace")
                 for n in undecodable}
        assert err.file in shown and "not UTF-8" in str(err)
        assert bench.state() == before
        return
    assert not undecodable
    loaded = {o.path: o for o in summary.outcomes}
    assert set(loaded) == {f"incoming/{day}/{n}.csv" for n in with_good}
    for i, name in enumerate(picked):
        rel = f"incoming/{day}/{name}.csv"
        if name not in taken:
            continue
        assert loaded[rel].status == "loaded"
        got = bench.led.con.execute(
            "SELECT cell, cycle, note FROM measurements WHERE file_id = ?", [loaded[rel].file_id]
        ).fetchall()
        assert got == [(name, i, str(i))]


# -- the rules where the store follows DuckDB, pinned by example -------------------------------


def _load(bench: Bench, content: bytes) -> list[tuple]:
    path = bench.lab.write(f"incoming/{bench.next_day()}/c01.csv", content)
    summary = bench.led.append([str(path)])
    return bench.rows(summary.outcomes[0].file_id)


def _refused(bench: Bench, content: bytes) -> InputError:
    rel = f"incoming/{bench.next_day()}/c01.csv"
    path = bench.lab.write(rel, content)
    before = bench.state()
    with pytest.raises(InputError) as info:
        bench.led.append([str(path)])
    assert info.value.file == rel
    assert bench.state() == before
    return info.value


@pytest.fixture
def bench(benches: dict[str, Bench]) -> Bench:
    return benches[","]


HEAD = b"cycle,capacity_ah,note\n"


@pytest.mark.parametrize(
    ("body", "rows"),
    [
        (b'1,2, "x"\n', [(1, 2.0, "x")]),  # space before an opening quote: dropped
        (b'1,2,"x" \n', [(1, 2.0, "x")]),  # space after a closing quote: dropped
        (b"1,2,x,\n3,4,y,,\n", [(1, 2.0, "x"), (3, 4.0, "y")]),  # trailing delimiters
        (b'1,,""\n,2,\n', [(1, None, None), (None, 2.0, None)]),  # empty is NULL, quoted or not
        (b" 12 ,\t2.5\x0b, x \n", [(12, 2.5, " x ")]),  # whitespace: numbers only
        (b"12.0,1e3,a\n1e3,.5,b\n0x1F,5.,c\n", [(12, 1000.0, "a"), (1000, 0.5, "b"),
                                                 (31, 5.0, "c")]),
        (b"1_000,1_000.5,x\n", [(1000, 1000.5, "x")]),  # digit separators
        (b"1,2,a\x00b\x01\x1f\n", [(1, 2.0, "a\x00b\x01\x1f")]),  # controls and NUL are text
        (b'1,2,"line\r\nbreak"\n', [(1, 2.0, "line\r\nbreak")]),  # any line end inside quotes
    ],
    ids=["space-before-quote", "space-after-quote", "trailing-delimiter", "empty-is-null",
         "whitespace", "whole-numbers", "underscores", "controls", "quoted-line-end"],
)
def test_rules_that_follow_duckdb(bench: Bench, body: bytes, rows: list[tuple]) -> None:
    assert _load(bench, HEAD + body) == rows


@pytest.mark.parametrize(
    ("body", "words"),
    [
        (b"2.5,1,x\n", "2.5 is not a whole number"),
        (b"-1.5,1,x\n", "-1.5 is not a whole number"),
        (b"1e-1,1,x\n", "not a whole number"),
        (b"2147483648,1,x\n", "INTEGER"),
        (b" ,1,x\n", "INTEGER"),
        (b'1,"3,14",x\n', "DOUBLE"),
        (b"1,NAN,x\n", "NaN or an infinite value"),
        (b"1,-Infinity,x\n", "NaN or an infinite value"),
        (b"1,1e400,x\n", "NaN or an infinite value"),
        (b"1,2,x, \n", "Expected Number of Columns"),
    ],
    ids=["half", "negative-half", "small-fraction", "too-big", "blank", "locale-comma", "NAN",
         "minus-infinity", "overflow", "non-empty-extra-field"],
)
def test_values_the_store_refuses(bench: Bench, body: bytes, words: str) -> None:
    assert words in str(_refused(bench, HEAD + body))


def test_a_fraction_in_an_integer_column_of_a_parquet_file_is_refused(tmp_path: Path) -> None:
    import duckdb

    spec = spec_for(",").replace("{cell}.csv", "{cell}.parquet").replace('format = "csv"',
                                                                         'format = "parquet"')
    lab = Lab(tmp_path / "lab", "\n".join(x for x in spec.splitlines()
                                          if not x.startswith("delimiter")))
    folder = lab.root / "incoming" / "2026-03-02"
    folder.mkdir(parents=True)
    con = duckdb.connect()
    for name, cycle in (("whole", "12.0"), ("half", "2.5")):
        con.execute(f"COPY (SELECT {cycle}::DOUBLE AS cycle, 1.5::DOUBLE AS capacity_ah, "
                    f"'x' AS note) TO '{folder / (name + '.parquet')}'")
    with lab.init() as led:
        with pytest.raises(InputError, match="2.5 is not a whole number") as info:
            led.append()
        assert info.value.file == "incoming/2026-03-02/half.parquet"
        # the refused file waits; asked to retry it, --skip-bad records it as rejected
        assert led.append(skip_bad=True).waiting == 1
        summary = led.append(skip_bad=True, retry_rejected=True)
        assert (summary.files, summary.rejected) == (0, 1)
        assert led.con.execute("SELECT cycle FROM measurements").fetchall() == [(12,)]


@pytest.mark.parametrize("after", [b"\t", b"\xc2\xa0", b"\xe2\x80\xa8", b"x"])
def test_text_after_a_quoted_header_name_is_refused(bench: Bench, after: bytes) -> None:
    """DuckDB would return no rows at all for such a file; the header check stops it."""
    err = _refused(bench, b'"cycle"' + after + b',capacity_ah,note\n1,2,x\n3,4,y\n')
    assert err.line == 1 and "header" in str(err)
    assert _load(bench, b'"cycle"  ,capacity_ah,"note" \n1,2,x\n') == [(1, 2.0, "x")]


def test_one_kind_of_line_end_per_file(bench: Bench) -> None:
    for end in (b"\n", b"\r\n", b"\r"):
        content = end.join([HEAD.strip(), b"1,2,x", b"", b"3,4,y"]) + end
        assert _load(bench, content) == [(1, 2.0, "x"), (3, 4.0, "y")]
    _refused(bench, b"cycle,capacity_ah,note\r\n1,2,x\n3,4,y\n")


WHERE = ["middle", "last", "last without a line end"]
LONG_LINES = [(size, where) for size in (1_000, 999_990, 1_000_001, 3_000_000) for where in WHERE]
LONG_LINES += [(50_000_000, "last"), (100_000_000, "last without a line end")]


@pytest.mark.parametrize(("size", "where"), LONG_LINES)
def test_long_lines_load_whole_or_are_refused_by_line(bench: Bench, size: int,
                                                      where: str) -> None:
    # DuckDB 2.0.1 read a 50 MB last line as nothing (1 row of 2, exit 0); rule 12 of
    # csv_reference.py says what the store does instead
    long_row = b"2,2.5," + b"z" * (size - 6)
    rows = [b"1,1.5,a", long_row, b"3,3.5,c"] if where == "middle" else [b"1,1.5,a", long_row]
    content = HEAD + b"\n".join(rows) + (b"" if where.endswith("line end") else b"\n")
    reading = read(content, ",")
    if reading.accepted:
        assert _load(bench, content) == reading.rows
    else:
        err = _refused(bench, content)
        assert err.line == 3 and "line size limit" in err.message
        assert "zzz" not in str(err)  # the line itself is never quoted


def test_a_record_over_two_million_bytes_is_refused_cleanly(bench: Bench) -> None:
    err = _refused(bench, HEAD + b"1,2," + b"z" * 2_100_000 + b"\n")
    assert "line size" in str(err) and err.line == 2


def test_encodings_other_than_utf8_are_refused(bench: Bench) -> None:
    text = "cycle,capacity_ah,note\n1,2.5,café\n"
    for encoding in ("latin-1", "utf-16", "utf-16-le", "cp1252"):
        _refused(bench, text.encode(encoding))
    assert _load(bench, text.encode("utf-8-sig")) == [(1, 2.5, "café")]


def test_duplicate_rows_are_kept_and_check_reports_them_per_file(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", spec_for(","))
    lab.write("incoming/2026-03-02/c01.csv", HEAD + b"1,2.5,x\n1,2.5,x\n1,2.5,x\n2,2.4,y\n")
    lab.write("incoming/2026-03-02/c02.csv", HEAD + b"1,2.5,x\n")  # same row, other file
    with lab.init() as led:
        assert led.append().rows == 5
        report = led.check()
    assert report.ok
    assert report.duplicate_rows == ["incoming/2026-03-02/c01.csv: 2 repeated row(s)"]
    result = cli("check", "--store", str(lab.store))
    assert result.returncode == 0
    assert "repeated rows: incoming/2026-03-02/c01.csv: 2 repeated row(s)" in result.stdout


def test_a_name_that_is_not_utf8_is_refused_by_name(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", spec_for(","))
    folder = lab.root / "incoming" / "2026-03-02"
    folder.mkdir(parents=True)
    (folder / os.fsdecode(b"caf\xe9.csv")).write_bytes(HEAD + b"1,2.5,x\n")
    (folder / "ok.csv").write_bytes(HEAD + b"2,2.5,y\n")
    with lab.init() as led:
        with pytest.raises(InputError) as info:
            led.append()
        assert info.value.file == "incoming/2026-03-02/caf\\xe9.csv"
        summary = led.append(skip_bad=True)
        assert (summary.files, summary.rejected) == (1, 1)
    result = cli("append", "--store", str(lab.store), "--rehash")
    assert result.returncode == 3 and "caf\\xe9.csv" in result.stderr
    assert "Traceback" not in result.stderr


def test_a_name_with_a_line_end_after_the_extension_does_not_match(bench: Bench) -> None:
    path = bench.lab.write(f"incoming/{bench.next_day()}/c01.csv\n", HEAD + b"1,2.5,x\n")
    with pytest.raises(InputError, match="does not match the template"):
        bench.led.append([str(path)])


def test_hidden_files_are_skipped_by_the_template_but_load_when_named(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", spec_for(","))
    lab.write("incoming/2026-03-02/c01.csv", HEAD + b"1,2.5,x\n")
    hidden = lab.write("incoming/2026-03-02/.c02.csv", HEAD + b"2,2.5,y\n")
    with lab.init() as led:
        assert led.append().files == 1
        assert led.append([str(hidden)]).files == 1
        cells = sorted(c for (c,) in led.con.execute("SELECT cell FROM measurements").fetchall())
    assert cells == [".c02", "c01"]


def test_hostile_names_through_the_command_line(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "lab", spec_for(","))
    names = ["-x", "--store", "[1] *", "it's \"q\"", "日本 é", "a{b}", "?"]
    folder = lab.root / "incoming" / "2026-03-02"
    for i, name in enumerate(names):
        lab.write(f"incoming/2026-03-02/{name}.csv", HEAD + f"{i},2.5,x\n".encode())
    lab.init().close()
    result = cli("append", "--store", str(lab.store), "--",
                 *(f"{n}.csv" for n in names), cwd=folder)
    assert result.returncode == 0, result.stderr
    assert f"{len(names)} file(s), {len(names)} row(s) loaded" in result.stdout
    with Ledger.open(lab.store, read_only=True) as led:
        got = dict(led.con.execute("SELECT cell, cycle FROM measurements").fetchall())
    assert got == {n: i for i, n in enumerate(names)}
    result = cli("append", "--store", str(lab.store), "--", "nothing-[here].csv", cwd=folder)
    assert result.returncode == 3 and one_clean_line(result.stderr)


def test_every_bench_store_still_checks_out(benches: dict[str, Bench]) -> None:
    """After all the generated batches: check passes and every account adds up."""
    for bench in benches.values():
        bench.led.close()
        state = audit(bench.lab.store)
        assert state.problems == []
        bench.led = Ledger.open(bench.lab.store)
