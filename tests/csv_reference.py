"""The reference reading of a CSV file: what the store must load from it, or that it refuses.

The hostile-input tests compare every generated file's outcome with this reading.
Python's csv module splits the records; the rules below turn them into typed rows
for a spec with an INTEGER, a DOUBLE and a VARCHAR column (in that order). Where
DuckDB's reader and the csv module legitimately differ, the rule the store keeps
is written down here, and test_hostile_input.py pins it with a plain example.

 1. Bytes. An empty file is refused. The bytes must be UTF-8; a leading UTF-8 BOM is
    dropped. Anything else (Latin-1 accents, UTF-16, stray bytes) is refused.
 2. Header. The first physical line (up to the first \\r or \\n), split by the csv module
    in strict mode, names stripped of whitespace, must equal the declared columns in
    order. Spaces between a closing quote and the next delimiter are allowed; any other
    text there refuses the file (DuckDB would skip such a header by returning no rows).
 3. Records. ``csv.reader(strict=True)`` with the spec's delimiter, ``"`` as quote and
    doubled quotes as escape. A csv error (text after a closing quote, a quote left
    open at the end of the file) refuses the file. The first record is the header.
 4. Line ends. DuckDB reads one kind of line end per file (\\n, \\r\\n or a lone \\r), the
    kind the header ends with, and refuses most files that mix kinds; it lets a few pass
    (a \\n right after a delimiter in a \\r\\n file). So a file whose records do not all
    end like the header may be refused; if it loads, its rows must be the csv module's.
    Line ends inside quotes are data and may be of any kind.
 5. Blank lines are skipped.
 6. A record has exactly one field per column. DuckDB also allows a trailing delimiter:
    extra fields at the end of a record are ignored when they are all empty.
 7. An empty field is NULL in every column, quoted ("") or not: DuckDB cannot tell a
    quoted empty string from a missing value, and the csv module cannot either. So is
    a field that is exactly one of the spec's missing-value texts (by default NaN and
    nan, quoted or not; ' nan' is not one).
 8. INTEGER. Whitespace (space, \\t, \\n, \\r, \\v, \\f) around the value is ignored, but a
    field of only whitespace is refused, not NULL. Decimal notation as in rule 10, or
    0x/0b hexadecimal/binary digits. The value must be whole: '12.0' and '1e3' load
    as 12 and 1000, '2.5' is refused (DuckDB alone would round it to 3; the store
    refuses it on purpose). Whole means "equal as a double", so a fraction below
    double precision ('1.0000000000000000001') passes as the whole number. It must
    fit in 32 bits.
 9. DOUBLE. Whitespace as for INTEGER; decimal notation as in rule 10, read like
    Python's float(). Other spellings of NaN ('NAN', '+nan') and infinities, written
    or reached by overflow ('1e400'), are refused by the store on purpose
    (ingest._nonfinite_problems). A locale comma ('3,14') is no number: it is refused
    (or, with ',' as delimiter, splits the field).
10. Decimal notation: optional sign, digits with single underscores between digits,
    optional fraction, optional exponent ('-1_000.5e-3', '.5', '5.'). Only ASCII digits.
11. VARCHAR. The field's text exactly: spaces, control characters and NUL included.

Gray zone. For two kinds of input the reading is not defined, and the tests check only
that the outcome is clean and whole (exact rows or a refusal naming the file):
 a. Whitespace between a delimiter (or a line start) and an opening quote, or between
    a closing quote and the next delimiter: DuckDB drops it and reads ``1, "x"`` as x;
    the csv module keeps it, or refuses ``"x" ,``.
 b. A file over 1.9 MB: DuckDB refuses records longer than 2,000,000 bytes.

12. Long lines. A physical line (between \r or \n line ends, quotes ignored) longer
    than 1,000,000 bytes refuses the file, naming the line: DuckDB 2.0.1 drops such
    a line without a word when it is the last one (measured: a 50 MB last line read
    as nothing), so the store measures lines itself (ingest.MAX_LINE_BYTES).
"""

from __future__ import annotations

import csv
import io
import math
import re
import sys
from collections.abc import Iterator
from dataclasses import dataclass, field
from decimal import ROUND_HALF_UP, Decimal

COLUMNS = ("cycle", "capacity_ah", "note")
WHITESPACE = " \t\n\r\x0b\x0c"
_DIGITS = r"[0-9]+(?:_[0-9]+)*"
DECIMAL = re.compile(rf"[+-]?(?:{_DIGITS}(?:\.(?:{_DIGITS})?)?|\.{_DIGITS})(?:[eE][+-]?{_DIGITS})?")
HEX = re.compile(r"0[xX][0-9a-fA-F]+")
BINARY = re.compile(r"0[bB][01]+")
NONFINITE = re.compile(r"[+-]?(?:inf|infinity|nan)", re.IGNORECASE)
LARGEST = 1_900_000
#: rule 12 (ingest.MAX_LINE_BYTES)
LONGEST_LINE = 1_000_000

Row = tuple[int | None, float | None, str | None]


class Refused(Exception):
    """The reference refuses the file; the message says why (for failure reports)."""


@dataclass
class Reading:
    """Rows the store must hold for a file, or why it must refuse it."""

    rows: list[Row] | None = None
    refused: str | None = None
    #: why the store may refuse the file although it has rows (then it must load these rows)
    may_refuse: list[str] = field(default_factory=list)
    #: why the reading is not defined at all (then only a clean, whole outcome is required)
    gray: list[str] = field(default_factory=list)

    @property
    def accepted(self) -> bool:
        return self.refused is None

    def allows_refusal(self) -> bool:
        return not self.accepted or bool(self.may_refuse or self.gray)

    def allows_loading(self) -> bool:
        return self.accepted or bool(self.gray)


class _Lines:
    """Physical lines for the csv module, remembering how the last one ended."""

    def __init__(self, text: str) -> None:
        self._lines = iter(io.StringIO(text, newline=""))
        self.last = ""

    def __iter__(self) -> Iterator[str]:
        return self

    def __next__(self) -> str:
        self.last = next(self._lines)
        return self.last


def _ending(line: str) -> str:
    for end in ("\r\n", "\n", "\r"):
        if line.endswith(end):
            return end
    return ""


def read(data: bytes, delimiter: str) -> Reading:
    """The reference reading of ``data`` for the three-column test spec."""
    reading = Reading()
    if len(data) > LONGEST_LINE:
        longest = max(len(line) for line in re.split(rb"\r|\n", data))
        if longest > LONGEST_LINE:
            reading.refused = f"a line of {longest} bytes (rule 12)"
            return reading
    if len(data) > LARGEST:
        reading.gray.append("larger than the line limit could allow")
    try:
        reading.rows = _rows(data, delimiter, reading)
    except Refused as why:
        reading.refused = str(why)
    return reading


def _rows(data: bytes, delimiter: str, reading: Reading) -> list[Row]:
    if not data:
        raise Refused("empty file")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as err:
        raise Refused(f"not UTF-8: {err}") from None
    text = text.removeprefix("\ufeff")
    space = " " if delimiter == "\t" else " \t"
    d, s = re.escape(delimiter), f"[{re.escape(space)}]"
    if re.search(rf'(?:^|[\r\n]|{d}){s}+"|"{s}+(?:$|[\r\n]|{d})', text):
        reading.gray.append("whitespace next to a quote")

    # rule 2: the header as ingest checks it
    first = re.split(r"[\r\n]", text, maxsplit=1)[0]
    first = re.sub(f'" +(?={d}|$)', '"', first)
    limit = csv.field_size_limit(sys.maxsize)
    try:
        header = csv.reader([first], delimiter=delimiter, strict=True)
        names = [n.strip() for n in next(header, [])]
        if names != list(COLUMNS):
            raise Refused(f"header {names!r}")
        lines = _Lines(text)
        records = csv.reader(lines, delimiter=delimiter, quotechar='"', doublequote=True,
                             strict=True)
        out: list[Row] = []
        style = None
        for number, record in enumerate(records):
            end = _ending(lines.last)
            if style is None:
                style = end
            elif end and end != style and not reading.may_refuse:  # rule 4
                reading.may_refuse.append(f"record {number} ends with {end!r}, the header "
                                          f"with {style!r}")
            if number == 0 or not record:  # the header; rule 5
                continue
            out.append(_typed(record))
    except csv.Error as err:
        raise Refused(f"csv: {err}") from None
    finally:
        csv.field_size_limit(limit)
    return out


def _typed(record: list[str]) -> Row:
    if len(record) > len(COLUMNS) and not any(record[len(COLUMNS):]):
        record = record[:len(COLUMNS)]  # rule 6
    if len(record) != len(COLUMNS):
        raise Refused(f"{len(record)} fields")
    # rule 7: the default missing-value texts (spec.MISSING) read as empty
    cycle, capacity, note = ("" if f in ("NaN", "nan") else f for f in record)
    return integer(cycle), double(capacity), (note if note != "" else None)


def _decimal(text: str) -> float | None:
    if not DECIMAL.fullmatch(text):
        return None
    return float(text.replace("_", ""))


def integer(raw: str) -> int | None:
    if raw == "":
        return None
    text = raw.strip(WHITESPACE)
    if HEX.fullmatch(text):
        value = int(text[2:], 16)
    elif BINARY.fullmatch(text):
        value = int(text[2:], 2)
    else:
        as_double = _decimal(text)
        if as_double is None:
            raise Refused(f"{raw!r} is no integer")
        if not math.isfinite(as_double) or abs(as_double) > 2.0**33:
            raise Refused(f"{raw!r} is out of range")
        exact = Decimal(text.replace("_", ""))
        value = int(exact.to_integral_value(rounding=ROUND_HALF_UP))  # DuckDB's rounding
        if float(value) != as_double:
            raise Refused(f"{raw!r} is not a whole number")
    if not -(2**31) <= value < 2**31:
        raise Refused(f"{raw!r} does not fit in 32 bits")
    return value


def double(raw: str) -> float | None:
    if raw == "":
        return None
    text = raw.strip(WHITESPACE)
    if NONFINITE.fullmatch(text):
        raise Refused(f"{raw!r} is not finite")
    value = _decimal(text)
    if value is None:
        raise Refused(f"{raw!r} is no number")
    if not math.isfinite(value):
        raise Refused(f"{raw!r} overflows to infinity")
    return value
