"""Append a batch of files to the store: one globbed read, one transaction.

The flow: expand the patterns, match each path against the template, hash the
bytes, decide per file (new / unchanged / identical / changed / bad), then in
one transaction read every new file with a single DuckDB ``read_*`` call,
attach the template fields and a ``file_id``, write the lineage and commit.
Any failure before COMMIT leaves the store exactly as it was.
"""

from __future__ import annotations

import codecs
import csv
import datetime as dt
import hashlib
import io
import json
import os
import re
import tempfile
import zlib
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd
import sqlglot
from sqlglot import exp

from trendledger.errors import InputError, StoreError, excerpt, printable
from trendledger.spec import FLOATS, NUMERIC, Spec
from trendledger.store import history, waiting
from trendledger.store.db import first_row, utcnow
from trendledger.store.paths import (
    PathTemplate,
    expand,
    irregular,
    outside,
    read_once,
    relative_to_root,
)
from trendledger.version import __version__
from trendledger.views import moments

Progress = Callable[[str, int, int], None]
GLOBBY = set("*?[]{}\\")
INTEGERS = NUMERIC - FLOATS


@dataclass
class FileOutcome:
    """What happened to one file of a batch."""

    path: str
    status: str  # loaded | skipped | rejected | unchanged | waiting | set aside
    rows: int = 0
    message: str | None = None
    file_id: int | None = None
    replaces: int | None = None


@dataclass
class BatchSummary:
    """The result of one append, as printed by the CLI and returned by the API."""

    batch_id: int | None
    status: str
    files: int = 0
    rows: int = 0
    skipped: int = 0
    unchanged: int = 0
    rejected: int = 0
    replaced: int = 0
    replaced_rows: int = 0
    waiting: int = 0
    set_aside: int = 0
    started_at: str | None = None
    finished_at: str | None = None
    outcomes: list[FileOutcome] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass
class _Candidate:
    path: Path
    relative: str
    fields: dict[str, str]
    data: bytes | None = None
    sha256: str = ""
    size: int = 0
    mtime: dt.datetime | None = None
    replaces: int | None = None
    problem: InputError | None = None
    file_id: int = 0
    link: str = ""
    decision: str = "load"  # load | skip | unchanged | waiting | aside
    note: str | None = None
    expected_rows: int | None = None  # data lines counted in Python, checked after the read


def _mtime(stat: os.stat_result) -> dt.datetime:
    return dt.datetime.fromtimestamp(stat.st_mtime, dt.UTC).replace(tzinfo=None)


def _utf8_name(path: Path) -> bool:
    try:
        str(path).encode("utf-8")
    except UnicodeEncodeError:  # undecodable bytes come back from the OS as surrogates
        return False
    return True


def _current(con: duckdb.DuckDBPyConnection) -> dict[str, tuple[int, str, int, Any, str]]:
    """Latest live or retracted lineage row per path: what a new file is compared with."""
    rows = con.execute(
        """
        SELECT path, file_id, sha256, bytes, modified_at, status
        FROM ingest_files
        WHERE status IN ('loaded', 'retracted')
        QUALIFY row_number() OVER (PARTITION BY path ORDER BY file_id DESC) = 1
        """
    ).fetchall()
    return {r[0]: (r[1], r[2], r[3], r[4], r[5]) for r in rows}


def _text_head(data: bytes, gz: bool, path: str) -> bytes:
    if not gz:
        return data
    try:
        return zlib.decompressobj(wbits=31).decompress(data, 1 << 20)
    except zlib.error as err:
        raise InputError(f"not a valid gzip file ({err})", file=path) from err


def _check_header(spec: Spec, data: bytes, path: str) -> None:
    """DuckDB ignores the header when columns are declared, so we compare it ourselves."""
    head = _text_head(data, spec.source.compression == "gzip", path)
    if head.startswith(codecs.BOM_UTF8):
        head = head[len(codecs.BOM_UTF8):]
    # The header ends at the first line break of any kind (\n, \r\n or an old-style \r).
    first = head.split(b"\n", 1)[0].split(b"\r", 1)[0]
    try:
        line = first.decode("utf-8")
    except UnicodeDecodeError as err:
        raise InputError("the header is not UTF-8 text", file=path, line=1) from err
    delim = spec.source.delimiter or ("\t" if spec.source.format == "tsv" else ",")
    # Strict: DuckDB skips a header with text after a closing quote ('"cycle"x,...') by
    # returning no rows at all, without an error. Spaces there are fine for both.
    line = re.sub(f'" +(?={re.escape(delim)}|$)', '"', line)
    try:
        names = next(csv.reader([line], delimiter=delim, strict=True), [])
    except csv.Error as err:
        raise InputError(f"the header cannot be read ({err})", file=path, line=1) from err
    names = [n.strip() for n in names]
    want = [spec.source.header(n) for n in spec.source.columns]
    if names != want:
        missing = [n for n in want if n not in names]
        extra = [n for n in names if n not in want]
        if missing or extra:
            parts = []
            if missing:
                parts.append("missing " + ", ".join(missing))
            if extra:
                parts.append("unexpected " + ", ".join(excerpt(e) for e in extra[:5])
                             + (f" and {len(extra) - 5} more" if len(extra) > 5 else ""))
            detail = "; ".join(parts)
        else:
            detail = "columns in another order"
        raise InputError(
            f"header {excerpt(','.join(names), 80)} does not match the spec ({detail}); expected "
            f"{','.join(want)!r}",
            file=path, line=1,
        )


def _check_utf8(spec: Spec, data: bytes, path: str) -> str:
    """DuckDB replaces undecodable bytes before casting; we name the line instead."""
    raw = data
    if spec.source.compression == "gzip":
        raw = _gunzip(data, path)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as err:
        line = raw.count(b"\n", 0, err.start) + 1
        raise InputError(
            f"bytes that are not UTF-8 text (byte 0x{raw[err.start]:02x}); "
            "save the file as UTF-8", file=path, line=line,
        ) from err


def _check_quotes(spec: Spec, text: str, path: str) -> None:
    """Refuse a file that ends inside a quoted field.

    DuckDB 2.0 reports such a quote when it reads up to four files at once, but when
    a batch has five or more it drops the open record (and every line after the
    quote) without a word, so the check cannot be left to it. A quote opens a field
    when it comes first in the field, after optional spaces; inside, "" is a quote.
    """
    if '"' not in text:
        return
    delim = spec.source.delimiter or ("\t" if spec.source.format == "tsv" else ",")
    start = "|".join(re.escape(c) for c in (delim, "\r", "\n"))
    quoted = re.compile(f'(?:^|(?<={start}))[ ]*"[^"]*(?:""[^"]*)*("?)')
    for found in quoted.finditer(text.removeprefix("\ufeff")):
        if not found.group(1):
            line = text.count("\n", 0, found.start()) + 1 if "\n" in text else None
            raise InputError("a quote opened here is never closed", file=path, line=line)


def _check_line_endings(spec: Spec, text: str, path: str) -> None:
    """Refuse a file that mixes CRLF and LF line ends, naming the first line that differs.

    DuckDB fixes one line ending per file and otherwise fails with "the CSV parser
    state machine reached an invalid state" and no line. Line breaks inside quoted
    fields do not count: they are data.
    """
    if "\r\n" not in text or "\n" not in text.replace("\r\n", ""):
        return
    masked = _mask_quoted(spec, text) if '"' in text else text
    ends = [(m.start(), m.group(0)) for m in re.finditer(r"\r\n|(?<!\r)\n", masked)]
    if not ends or all(kind == ends[0][1] for _, kind in ends):
        return
    first_kind = ends[0][1]
    pos, kind = next((p, k) for p, k in ends if k != first_kind)
    line = text.count("\n", 0, pos) + 1
    name = {"\r\n": "CRLF (Windows)", "\n": "LF (Unix)"}
    raise InputError(
        f"this line ends with {name[kind]} but line {text.count(chr(10), 0, ends[0][0]) + 1} "
        f"with {name[first_kind]}; save the file with one kind of line ending",
        file=path, line=line,
    )


def _check_jsonl(spec: Spec, data: bytes, path: str) -> None:
    """Every object must carry exactly the declared keys: DuckDB would fill NULLs silently."""
    raw = _gunzip(data, path) if spec.source.compression == "gzip" else data
    want = {spec.source.header(n) for n in spec.source.columns}
    for number, line in enumerate(io.BytesIO(raw), start=1):
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
        except (json.JSONDecodeError, UnicodeDecodeError) as err:
            raise InputError(f"not valid JSON: {err}", file=path, line=number) from err
        except RecursionError as err:
            raise InputError("JSON nested too deeply to read", file=path, line=number) from err
        if not isinstance(obj, dict):
            raise InputError("each line must be a JSON object", file=path, line=number)
        keys = set(obj)
        if keys != want:
            missing = sorted(want - keys)
            extra = sorted(keys - want)
            what = "; ".join(
                p for p in (
                    "missing " + ", ".join(missing) if missing else "",
                    "unexpected " + ", ".join(extra) if extra else "",
                ) if p
            )
            raise InputError(f"keys do not match the spec ({what})", file=path, line=number)
        for name, typ in spec.source.columns.items():
            _check_json_number(obj[spec.source.header(name)], name, typ, path, number)


#: Column types DuckDB would fill from a JSON number by rounding it (1.5 -> 2, true -> 1).
_WHOLE = frozenset({"TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT",
                    "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT"})
_NUMERIC = _WHOLE | {"FLOAT", "DOUBLE", "REAL"}


def _check_json_number(value: object, name: str, typ: str, path: str, line: int) -> None:
    """Refuse what DuckDB would change silently: a fraction or a boolean in a number column."""
    base = typ.split("(")[0].upper()
    if base not in _NUMERIC and not base.startswith("DECIMAL"):
        return
    if isinstance(value, bool):
        raise InputError(f"column {name} ({typ}) holds {json.dumps(value)}, not a number",
                         file=path, line=line)
    if base in _WHOLE and isinstance(value, float) and not value.is_integer():
        raise InputError(f"column {name} ({typ}) holds {value!r}, not a whole number "
                         "(it would be rounded)", file=path, line=line)


#: Longest line we accept, in bytes. DuckDB refuses a CSV line of 2,000,000 bytes or more
#: in the middle of a file, but silently drops such a line at the end of one (DuckDB
#: 2.0.1, measured), so lines are measured here before DuckDB sees them.
MAX_LINE_BYTES = 1_000_000
#: Largest size a compressed file may unpack to (a small .gz can unpack to gigabytes).
MAX_UNPACKED_BYTES = 1 << 30


def _gunzip(data: bytes, path: str) -> bytes:
    """Unpack gzip data in pieces, refusing more than MAX_UNPACKED_BYTES of output."""
    unpacker = zlib.decompressobj(wbits=31)
    parts: list[bytes] = []
    size = 0
    rest = data
    try:
        while rest:
            part = unpacker.decompress(rest, 1 << 24)
            size += len(part)
            if size > MAX_UNPACKED_BYTES:
                raise InputError(f"unpacks to more than {MAX_UNPACKED_BYTES:,} bytes; "
                                 "split it into smaller files", file=path)
            parts.append(part)
            rest = unpacker.unconsumed_tail
            if unpacker.eof:
                if unpacker.unused_data:  # another gzip member follows
                    rest = unpacker.unused_data
                    unpacker = zlib.decompressobj(wbits=31)
                else:
                    break
        if not unpacker.eof:
            raise InputError("not a valid gzip file (it ends too early)", file=path)
    except zlib.error as err:
        raise InputError(f"not a valid gzip file ({err})", file=path) from err
    return b"".join(parts)


def _scan_lines(spec: Spec, data: bytes, path: str) -> int | None:
    """Refuse a line longer than MAX_LINE_BYTES, naming it; count the data lines.

    Returns the number of non-empty lines after the header (what DuckDB must
    read) when the file has no quote character, else None: a quoted field may
    hold a line break, and :func:`_count_quoted` counts those files.
    """
    raw = _gunzip(data, path) if spec.source.compression == "gzip" else data
    if not raw:
        return None
    codes = np.frombuffer(raw, dtype=np.uint8)
    breaks = np.flatnonzero((codes == 10) | (codes == 13))
    edges = np.concatenate(([-1], breaks, [len(codes)]))
    lengths = np.diff(edges) - 1
    longest = int(lengths.argmax())
    if lengths[longest] > MAX_LINE_BYTES:
        # count \r\n as one break when naming the line
        line = int(np.count_nonzero(codes[breaks[:longest]] == 10)) + 1 if longest else 1
        raise InputError(f"the line is {int(lengths[longest]):,} bytes long, over the line "
                         f"size limit of {MAX_LINE_BYTES:,} bytes", file=path, line=line)
    if spec.source.format == "jsonl" or b'"' in raw:
        return None
    delim = (spec.source.delimiter or ("\t" if spec.source.format == "tsv" else ",")).encode()
    if len(delim) == 1:
        at = np.flatnonzero(codes == delim[0])
        most = _max_fields(spec)
        if len(at) >= most:
            per_line = np.bincount(np.searchsorted(breaks, at), minlength=len(edges) - 1)
            worst = int(per_line.argmax())
            if per_line[worst] + 1 > most:
                line = int(np.count_nonzero(codes[breaks[:worst]] == 10)) + 1
                raise InputError(f"the row has {int(per_line[worst]) + 1:,} fields; the spec "
                                 f"declares {len(spec.source.columns)}", file=path, line=line)
    return max(int(np.count_nonzero(lengths)) - 1, 0)


def _max_fields(spec: Spec) -> int:
    """Most fields a row may have before it is refused outright (DuckDB ignores empty
    trailing fields, so a few more than the columns are allowed; thousands are not)."""
    return max(1024, 8 * len(spec.source.columns))


def _count_quoted(spec: Spec, text: str, path: str) -> int | None:
    """Records after the header of a CSV text with quotes, as DuckDB reads them (None if
    the csv module cannot split it: then DuckDB's own errors are all there is). A row
    with far more fields than the spec declares is refused here, naming its line."""
    delim = spec.source.delimiter or ("\t" if spec.source.format == "tsv" else ",")
    reader = csv.reader(io.StringIO(text.removeprefix("\ufeff"), newline=""),
                        delimiter=delim, quotechar='"', doublequote=True)
    limit = csv.field_size_limit()
    csv.field_size_limit(max(limit, len(text) + 1))  # a quoted field may be the whole file
    most = _max_fields(spec)
    try:
        records = 0
        for row in reader:
            if len(row) > most:
                raise InputError(f"the row has {len(row):,} fields; the spec declares "
                                 f"{len(spec.source.columns)}", file=path, line=reader.line_num)
            records += bool(row)
        return max(records - 1, 0)
    except csv.Error:
        return None
    finally:
        csv.field_size_limit(limit)


def _count_problems(con: duckdb.DuckDBPyConnection, by_id: dict[int, _Candidate]) -> None:
    """A file whose rows DuckDB read are fewer or more than its data lines is refused.

    DuckDB may skip a line without an error (see MAX_LINE_BYTES); the store must
    never hold part of a file while the lineage says all of it.
    """
    lo, hi = min(by_id), max(by_id)
    counts = dict(con.execute(
        "SELECT file_id, count(*) FROM measurements WHERE file_id BETWEEN ? AND ? "
        "GROUP BY file_id", [lo, hi]).fetchall())
    for fid, cand in by_id.items():
        got = int(counts.get(fid, 0))
        if cand.problem is None and cand.expected_rows is not None \
                and got != cand.expected_rows:
            cand.problem = InputError(
                f"DuckDB read {got} row(s) but the file has {cand.expected_rows} data line(s); "
                "nothing of it was loaded", file=cand.relative)


def _inspect(spec: Spec, cand: _Candidate) -> None:
    """Cheap checks in Python that DuckDB would not do or would do silently."""
    if cand.size == 0:
        raise InputError("the file is empty (0 bytes)", file=cand.relative)
    fmt = spec.source.format
    assert cand.data is not None
    if fmt in ("csv", "tsv"):
        cand.expected_rows = _scan_lines(spec, cand.data, cand.relative)
        text = _check_utf8(spec, cand.data, cand.relative)
        if cand.expected_rows is None:
            cand.expected_rows = _count_quoted(spec, text, cand.relative)
        _check_header(spec, cand.data, cand.relative)
        _check_quotes(spec, text, cand.relative)
        _check_line_endings(spec, text, cand.relative)
    elif fmt == "jsonl":
        _scan_lines(spec, cand.data, cand.relative)
        _check_jsonl(spec, cand.data, cand.relative)
    elif fmt == "parquet" and not cand.data.startswith(b"PAR1"):
        raise InputError("not a Parquet file (no PAR1 magic bytes)", file=cand.relative)


def _field_problems(con: duckdb.DuckDBPyConnection, spec: Spec,
                    cands: list[_Candidate]) -> None:
    """Mark files whose template fields do not parse as their declared types."""
    for name, typ in spec.source.fields.items():
        if typ in ("VARCHAR", "TEXT", "STRING"):
            continue
        values = sorted({c.fields[name] for c in cands if c.problem is None})
        if not values:
            continue
        cast = exp.TryCast(this=exp.column("v"), to=exp.DataType.build(typ, dialect="duckdb"))
        bad = {
            v for (v,) in con.execute(
                f"SELECT v FROM unnest($values) AS t(v) WHERE {cast.sql('duckdb')} IS NULL",
                {"values": values},
            ).fetchall()
        }
        for c in cands:
            if c.problem is None and c.fields[name] in bad:
                c.problem = InputError(
                    f"template field {{{name}}} = {c.fields[name]!r} is not a valid {typ}",
                    file=c.relative,
                )


def _read_call(spec: Spec, *, rejects: bool = False) -> str:
    """The one DuckDB table function call that reads every file of the batch.

    The normal read is strict (stops at the first error). Only when it fails do
    we read again with ``rejects`` to collect every bad line of every file: the
    rejects bookkeeping costs DuckDB about half again the read time.
    """
    src = spec.source
    comp = f", compression='{src.compression}'"
    if src.format in ("csv", "tsv"):
        # Integer columns come in as text and are cast by _whole_number, which refuses
        # '2.5' where DuckDB would round it; the rejects read keeps the declared types
        # so that DuckDB names the line of a value that is no number at all.
        cols = exp.Struct(expressions=[
            exp.PropertyEQ(this=exp.Literal.string(src.header(n)), expression=exp.Literal.string(
                "VARCHAR" if (t in INTEGERS and not rejects) or n in src.censored
                or n in src.column_missing else t))
            for n, t in src.columns.items()
        ]).sql("duckdb")
        delim = src.delimiter or ("\t" if src.format == "tsv" else ",")
        delim_sql = exp.Literal.string(delim).sql("duckdb")
        # The spec's missing-value texts, as a list literal of quoted strings.
        nulls = exp.Array(expressions=[exp.Literal.string(t) for t in src.missing]).sql("duckdb")
        decimal = ", decimal_separator=','" if src.decimal == "," else ""
        extra = (", store_rejects=true, ignore_errors=true, rejects_table='tl_rejects', "
                 "rejects_scan='tl_reject_scans'") if rejects else ""
        return (
            f"read_csv($links, columns={cols}, auto_detect=false, header=true, "
            f"delim={delim_sql}, quote='\"', escape='\"', nullstr={nulls}{decimal}, "
            f"filename=true{comp}{extra})"
        )
    if src.format == "jsonl":
        cols = exp.Struct(expressions=[
            exp.PropertyEQ(this=exp.Literal.string(src.header(n)),
                           expression=exp.Literal.string(t))
            for n, t in src.columns.items()
        ]).sql("duckdb")
        return (f"read_json($links, columns={cols}, format='newline_delimited', "
                f"filename=true{comp})")
    return "read_parquet($links, filename=true)"


def _whole_number(col: exp.Expression, name: str, typ: str) -> exp.Expression:
    """Cast to an integer type, stopping at a value the cast would round.

    DuckDB turns '2.5' into 3 when it reads or casts into an integer column. The
    store must not change a value silently, so such a value fails the read like
    any other bad value; '12.0' and '1e3' are whole numbers and load as 12 and 1000.
    """
    as_int = exp.cast(col.copy(), exp.DataType.build(typ, dialect="duckdb"))
    lossy = exp.NEQ(
        this=exp.TryCast(this=col.copy(), to=exp.DataType.build("DOUBLE")),
        expression=exp.cast(as_int.copy(), exp.DataType.build("DOUBLE")),
    )
    message = exp.DPipe(
        this=exp.DPipe(this=exp.Literal.string(f"column {name}: "),
                       expression=exp.cast(col.copy(), exp.DataType.build("VARCHAR"))),
        expression=exp.Literal.string(f" is not a whole number; as {typ} it would be rounded"),
    )
    return exp.Case(ifs=[exp.If(this=lossy, true=exp.Anonymous(this="error",
                                                               expressions=[message]))],
                    default=as_int)


def _select_sql(spec: Spec, *, join: bool = True, rejects: bool = False) -> str:
    """SELECT the declared columns (and, joined to the batch's files, fields and file_id)."""
    src = spec.source
    select: list[exp.Expression] = []
    derived: list[exp.Expression] = []
    for name, typ in src.columns.items():
        col: exp.Expression = exp.column(src.header(name), table="r", quoted=True)
        if name in src.column_missing:
            col = _parse(_column_missing(col, src.column_missing[name]))
            if name not in src.censored and typ not in INTEGERS:
                select.append(_typed(col, name, typ, src.decimal))
                continue
        if name in src.censored:
            value, side, limit = _censored(col, name, typ, src.censored[name], src.decimal)
            select.append(value)
            derived += [side, limit]
        elif typ in INTEGERS and (src.format == "parquet" or name in src.column_missing
                                or (src.format in ("csv", "tsv") and not rejects)):
            select.append(_whole_number(col, name, typ))
        elif src.format == "parquet":
            select.append(exp.cast(col, exp.DataType.build(typ, dialect="duckdb")))
        else:
            select.append(col)
    if not join:
        cols = ", ".join(s.sql("duckdb") for s in [*select, *derived])
        return f"SELECT {cols} FROM {_read_call(spec, rejects=rejects)} AS r"
    for name, typ in src.fields.items():
        select.append(exp.cast(exp.column(name, table="f", quoted=True),
                               exp.DataType.build(typ, dialect="duckdb")))
    select += derived
    select.append(exp.column("file_id", table="f"))
    cols = ", ".join(s.sql("duckdb") for s in select)
    return (f"SELECT {cols} FROM {_read_call(spec)} AS r "
            "JOIN tl_batch_files AS f ON r.filename = f.link")


def _censored(col: exp.Expression, name: str, typ: str, treat: str,
              decimal: str) -> tuple[exp.Expression, exp.Expression, exp.Expression]:
    """A value written beyond a reporting limit ('<0.05', '>200'): the column holds NULL
    ("omit") or, below the limit, half the limit ("half"); <name>_censored says which side
    and <name>_limit holds the limit. Anything else must be a number."""
    text = f"trim(CAST({col.sql('duckdb')} AS VARCHAR))"
    number = "replace({t}, ',', '.')" if decimal == "," else "{t}"
    beyond = f"(starts_with({text}, '<') OR starts_with({text}, '>'))"
    limit_text = number.format(t=f"trim(substr({text}, 2))")
    plain_text = number.format(t=text)
    kind = exp.DataType.build(typ, dialect="duckdb").sql("duckdb")
    bad = exp.DPipe(this=exp.DPipe(this=exp.Literal.string(f"column {name}: "),
                                   expression=_parse(text)),
                    expression=exp.Literal.string(" is neither a number nor a censored value "
                                                  "such as <0.05")).sql("duckdb")
    limit = (f"CASE WHEN {beyond} THEN coalesce(TRY_CAST({limit_text} AS DOUBLE), "
             f"error({bad})) END")
    below = f"{limit} / 2" if treat == "half" else "NULL"
    value = (f"CASE WHEN starts_with({text}, '<') THEN CAST({below} AS {kind}) "
             f"WHEN starts_with({text}, '>') THEN CAST(NULL AS {kind}) "
             f"WHEN {col.sql('duckdb')} IS NULL THEN CAST(NULL AS {kind}) "
             f"ELSE coalesce(TRY_CAST({plain_text} AS {kind}), error({bad})) END")
    side = (f"CASE WHEN starts_with({text}, '<') THEN 'below' "
            f"WHEN starts_with({text}, '>') THEN 'above' END")
    return _parse(value), _parse(side), _parse(limit)


def _column_missing(col: exp.Expression, tokens: tuple[str, ...]) -> str:
    """The cell text, NULL when it is one of the column's own missing-value texts."""
    listed = ", ".join(exp.Literal.string(t).sql("duckdb") for t in tokens)
    return f"CASE WHEN {col.sql('duckdb')} IN ({listed}) THEN NULL ELSE {col.sql('duckdb')} END"


def _typed(col: exp.Expression, name: str, typ: str, decimal: str) -> exp.Expression:
    """Cast cell text to a column's type, stopping with the column's name at a bad value."""
    text = col.sql("duckdb")
    kind = exp.DataType.build(typ, dialect="duckdb").sql("duckdb")
    if decimal == "," and (typ in FLOATS or typ.startswith("DECIMAL")):
        text = f"replace({text}, ',', '.')"
    bad = exp.DPipe(this=exp.DPipe(this=exp.Literal.string(f"column {name}: "),
                                   expression=_parse(text)),
                    expression=exp.Literal.string(f" is not a valid {typ}")).sql("duckdb")
    return _parse(f"CASE WHEN {text} IS NULL THEN NULL WHEN TRY_CAST({text} AS {kind}) IS NULL "
                  f"THEN error({bad}) ELSE CAST({text} AS {kind}) END")


def _parse(sql: str) -> exp.Expression:
    tree = sqlglot.parse_one(sql, read="duckdb")
    assert isinstance(tree, exp.Expression)
    return tree


def _insert_sql(spec: Spec) -> str:
    names = [*spec.source.columns, *spec.source.fields, *spec.source.derived(), "file_id"]
    targets = ", ".join(exp.to_identifier(n, quoted=True).sql("duckdb") for n in names)
    return f"INSERT INTO measurements ({targets}) {_select_sql(spec)}"


def _stage_files(con: duckdb.DuckDBPyConnection, spec: Spec, cands: list[_Candidate]) -> None:
    names = list(spec.source.fields)
    defs = ", ".join(f"{exp.to_identifier(n, quoted=True).sql('duckdb')} VARCHAR" for n in names)
    con.execute("DROP TABLE IF EXISTS tl_batch_files")
    con.execute(f"CREATE TEMP TABLE tl_batch_files (link VARCHAR, file_id BIGINT, {defs})")
    frame = pd.DataFrame({
        "link": [c.link for c in cands],
        "file_id": pd.array([c.file_id for c in cands], dtype="int64"),
        **{f"f{i}": [c.fields[n] for c in cands] for i, n in enumerate(names)},
    })
    _insert_frame(con, "tl_batch_files", frame)


def _insert_frame(con: duckdb.DuckDBPyConnection, table: str, frame: pd.DataFrame) -> None:
    """Insert a DataFrame by position in one statement (executemany is one call per row)."""
    con.register("tl_frame", frame)
    try:
        con.execute(f"INSERT INTO {table} SELECT * FROM tl_frame")
    finally:
        con.unregister("tl_frame")


def _reject_problems(con: duckdb.DuckDBPyConnection, spec: Spec,
                     by_link: dict[str, _Candidate]) -> None:
    """Turn DuckDB's stored CSV rejects into one problem per file (its first bad line)."""
    try:
        rows = con.execute(
            """
            SELECT s.file_path, e.line, e.column_name, e.error_type, e.error_message
            FROM tl_rejects AS e JOIN tl_reject_scans AS s USING (scan_id, file_id)
            ORDER BY s.file_path, e.line
            """
        ).fetchall()
    except duckdb.CatalogException:
        return
    for link, line, column, kind, message in rows:
        cand = by_link.get(link)
        if cand is None or cand.problem is not None:
            continue
        text = _short(str(message).split("\n")[0], link, cand.relative)
        if kind == "INVALID ENCODING":
            text = "bytes that are not UTF-8 text"
        cand.problem = InputError(text, file=cand.relative,
                                  line=_physical_line(spec, cand, int(line)),
                                  column=column or None)


def _physical_line(spec: Spec, cand: _Candidate, record: int) -> int:
    """The line as an editor counts it. DuckDB counts records (the header is record 1),
    so a quoted field spanning lines earlier in the file would shift its number."""
    if cand.data is None:
        return record
    raw = cand.data
    try:
        if spec.source.compression == "gzip":
            raw = _gunzip(raw, cand.relative)
        text = raw.decode("utf-8")
    except (OSError, EOFError, zlib.error, UnicodeDecodeError, InputError):
        return record
    if '"' not in text:
        return record
    masked = _mask_quoted(spec, text)
    starts = [0] + [m.end() for m in re.finditer(r"\r\n|\n|\r", masked)]
    if record > len(starts):
        return record
    return text.count("\n", 0, starts[record - 1]) + 1


def _mask_quoted(spec: Spec, text: str) -> str:
    """The text with line breaks inside quoted fields blanked (same length, same offsets)."""
    delim = spec.source.delimiter or ("\t" if spec.source.format == "tsv" else ",")
    start = "|".join(re.escape(c) for c in (delim, "\r", "\n"))
    quoted = re.compile(f'(?:^|(?<={start}))[ ]*"[^"]*(?:""[^"]*)*"')
    return quoted.sub(lambda m: re.sub(r"[\r\n]", " ", m.group(0)), text)


def _nonfinite_problems(con: duckdb.DuckDBPyConnection, spec: Spec,
                        by_id: dict[int, _Candidate]) -> None:
    """NaN and infinity are refused: one of them would poison every sum of its group."""
    floats = [n for n, t in spec.source.columns.items() if t in FLOATS]
    if not floats or not by_id:
        return
    lo, hi = min(by_id), max(by_id)
    for name in floats:
        col = exp.to_identifier(name, quoted=True).sql("duckdb")
        rows = con.execute(
            f"SELECT DISTINCT file_id FROM measurements WHERE file_id BETWEEN ? AND ? "
            f"AND (isnan({col}) OR isinf({col}))",
            [lo, hi],
        ).fetchall()
        for (fid,) in rows:
            cand = by_id[fid]
            if cand.problem is None:
                cand.problem = InputError(
                    "holds NaN or an infinite value; leave the cell empty for a missing value "
                    "or list the text under [source] missing",
                    file=cand.relative, column=name,
                )


#: Words of DuckDB I/O errors that blame the machine (disk, folder, memory), not a data file.
_MACHINE_WORDS = ("No space left", "Disk quota", "Read-only file system", "Could not write",
                  "Could not truncate", "Could not fsync", "Input/output error")


def _machine_trouble(err: duckdb.Error) -> bool:
    if isinstance(err, duckdb.OutOfMemoryException | duckdb.FatalException):
        return True
    return isinstance(err, duckdb.IOException) and any(w in str(err) for w in _MACHINE_WORDS)


def database_path(con: duckdb.DuckDBPyConnection) -> str | None:
    """The file behind a connection, for error messages (asked before anything can fail)."""
    try:
        row = first_row(
            con, "SELECT path FROM duckdb_databases() WHERE database_name = current_database()"
        )
    except duckdb.Error:
        return None
    return str(row[0]) if row and row[0] else None


def cannot_write(err: duckdb.Error, where: str | None) -> StoreError:
    """One clear line for a write the machine refused: the transaction was undone."""
    text = str(err).strip()
    first = text.splitlines()[0] if text else type(err).__name__
    return StoreError(
        f"could not write the store, nothing was changed: {first}", file=where,
        hint="free some disk space or make the folder writable, then run the command again",
    )


def rollback_quietly(con: duckdb.DuckDBPyConnection) -> None:
    """Undo the open transaction, if DuckDB has not already undone it after a failed COMMIT."""
    try:
        con.execute("ROLLBACK")
    except duckdb.Error:
        pass


class _ReadFailed(Exception):
    """The batch read raised (JSON, Parquet); the files are probed one by one afterwards."""

    def __init__(self, cands: list[_Candidate], err: duckdb.Error) -> None:
        super().__init__(str(err))
        self.cands = cands
        self.err = err


def _locate_failures(con: duckdb.DuckDBPyConnection, spec: Spec, failed: _ReadFailed) -> None:
    """Find the bad files of a failed read, outside any transaction.

    CSV: one more read that records every rejected line. Other formats, or a
    CSV error the rejects do not explain: read the files one by one.
    """
    if spec.source.format in ("csv", "tsv"):
        for table in ("tl_rejects", "tl_reject_scans"):
            con.execute(f"DROP TABLE IF EXISTS {table}")
        try:
            con.execute(
                "CREATE OR REPLACE TEMP TABLE tl_probe AS "
                + _select_sql(spec, join=False, rejects=True),
                {"links": [c.link for c in failed.cands]},
            )
            _reject_problems(con, spec, {c.link: c for c in failed.cands})
        except duckdb.Error:
            pass
    if all(c.problem is None for c in failed.cands):
        sql = f"CREATE OR REPLACE TEMP TABLE tl_probe AS {_select_sql(spec, join=False)}"
        for c in failed.cands:
            try:
                con.execute(sql, {"links": [c.link]})
            except duckdb.Error as one:
                c.problem = _from_duckdb(one, c.relative, c.link)
    con.execute("DROP TABLE IF EXISTS tl_probe")
    if all(c.problem is None for c in failed.cands):
        first = str(failed.err).splitlines()[0]
        raise InputError(f"the batch could not be read: {first}") from failed.err


#: Longest DuckDB message kept for a rejected file: DuckDB quotes the offending value,
#: and the lineage (readable by every query user) must not hold a file's contents.
MAX_MESSAGE = 200


def _short(text: str, link: str | None = None, relative: str | None = None) -> str:
    """One line of a DuckDB message, its staged path named as the user's, escaped, cut."""
    if link and relative:
        text = text.replace(link, relative)
    text = printable(text)
    return text if len(text) <= MAX_MESSAGE else text[: MAX_MESSAGE - 1] + "…"


def _from_duckdb(err: duckdb.Error, relative: str, link: str | None = None) -> InputError:
    text = str(err)
    line = None
    for marker in ("in line ", "Line: "):
        if marker in text:
            tail = text.split(marker, 1)[1]
            digits = "".join(ch for ch in tail[:12] if ch.isdigit())
            line = int(digits) if digits else None
            break
    first = text.splitlines()[0]
    for prefix in ("Invalid Input Error: ", "Conversion Error: ", "Binder Error: "):
        first = first.replace(prefix, "")
    return InputError(_short(first, link, relative), file=relative, line=line)


def _parquet_problems(con: duckdb.DuckDBPyConnection, spec: Spec,
                      by_link: dict[str, _Candidate]) -> None:
    want = [spec.source.header(n) for n in spec.source.columns]
    sql = ("SELECT file_name, list(name ORDER BY rowid) FROM "
           "(SELECT *, row_number() OVER () AS rowid FROM parquet_schema($links)) "
           "WHERE type IS NOT NULL GROUP BY file_name")
    try:
        rows = con.execute(sql, {"links": list(by_link)}).fetchall()
    except duckdb.Error as err:
        if _machine_trouble(err):
            raise
        # a damaged file (truncated, no footer, flipped bytes): find it, name it
        rows = []
        for link, cand in by_link.items():
            try:
                rows += con.execute(sql, {"links": [link]}).fetchall()
            except duckdb.Error as one:
                if _machine_trouble(one):
                    raise
                problem = _from_duckdb(one, cand.relative, link)
                problem.message = "not a readable Parquet file: " + problem.message.replace(
                    f" '{cand.relative}'", "")
                cand.problem = problem
    for link, names in rows:
        cand = by_link[link]
        if sorted(names) != sorted(want) and cand.problem is None:
            cand.problem = InputError(
                f"columns {', '.join(names)} do not match the spec ({', '.join(want)})",
                file=cand.relative,
            )


def append(
    con: duckdb.DuckDBPyConnection,
    spec: Spec,
    root: Path,
    patterns: list[str] | None = None,
    *,
    replace: bool = False,
    skip_bad: bool = False,
    rehash: bool = False,
    retry_rejected: bool = False,
    allow_shrink: bool = False,
    why: str | None = None,
    command: str | None = None,
    progress: Progress | None = None,
    base: Path | None = None,
) -> BatchSummary:
    """Append the files matched by ``patterns`` (default: the spec's template) as one batch.

    Raises :class:`InputError` naming the first bad file unless ``skip_bad``;
    in that case good files land and bad ones are recorded as rejected. Either
    way a refused file waits (waiting.py): later appends pass over it until its
    content changes, or ``retry_rejected`` asks for it. Replaced rows (a changed file
    with ``replace``, or rows whose natural key a newer file holds) move to the history
    with ``why``; a replacement with fewer rows than the old version needs ``allow_shrink``.
    """
    started = utcnow()
    root = root.resolve()
    template = PathTemplate(spec.source.files)
    matcher = template.regex
    if patterns:
        paths = expand(patterns, base or Path.cwd())
        if not paths:
            raise InputError("no file matches " + ", ".join(repr(p) for p in patterns))
    else:
        paths = expand([template.glob], root)
    known = _current(con)
    refusals = waiting.open_refusals(con)

    cands: list[_Candidate] = []
    total = len(paths)
    for i, path in enumerate(paths):
        if progress:
            progress("hash", i, total)
        rel = relative_to_root(path, root)
        if not _utf8_name(path):
            # Such a name cannot be stored, printed or handed to DuckDB as text.
            shown = os.fsencode(rel or str(path)).decode("utf-8", "backslashreplace")
            c = _Candidate(path=path, relative=shown, fields={})
            c.problem = InputError("the file name is not UTF-8 text; rename the file",
                                   file=shown)
            cands.append(c)
            continue
        if rel is None:
            c = _Candidate(path=path, relative=str(path), fields={})
            c.problem = InputError("is outside the spec's folder " + str(root), file=str(path))
            cands.append(c)
            continue
        found = matcher.match(rel)
        matched = found.groupdict() if found else template.match(rel)
        c = _Candidate(path=path, relative=rel, fields=matched if isinstance(matched, dict) else {})
        cands.append(c)
        if isinstance(matched, str):
            c.problem = InputError(matched, file=rel)
            continue
        if (refusal := outside(path, root, spec.source.allow)) is not None:
            c.problem = InputError(refusal, file=rel)
            continue
        try:
            stat = path.stat()
        except OSError as err:
            c.problem = InputError(f"cannot read: {err.strerror}", file=rel)
            continue
        if (kind := irregular(stat)) is not None:
            c.problem = InputError(f"is {kind}, not a regular file", file=rel)
            continue
        c.size, c.mtime = stat.st_size, _mtime(stat)
        prev = known.get(rel)
        if (prev is not None and not rehash and prev[2] == c.size and prev[3] == c.mtime):
            c.decision = "unchanged"
            continue
        refused = refusals.get(rel)
        if retry_rejected or (replace and prev is not None and prev[4] == "loaded"):
            refused = None
        if refused is not None:
            c.note = refused.set_aside or refused.message
            if refused.set_aside is not None:
                c.decision = "aside"
                continue
            if not rehash and refused.bytes == c.size and refused.modified_at == c.mtime:
                c.decision = "waiting"
                continue
        try:
            # Read once: these bytes are hashed, checked and staged for DuckDB, so a
            # file swapped meanwhile is loaded with the hash of what was loaded.
            c.data, stat = read_once(path.resolve())
        except OSError as err:
            c.problem = InputError(f"cannot read: {err.strerror}", file=rel)
            continue
        except ValueError as err:
            c.problem = InputError(str(err), file=rel)
            continue
        c.mtime = _mtime(stat)
        c.size = len(c.data)
        c.sha256 = hashlib.sha256(c.data).hexdigest()
        if refused is not None and refused.sha256 == c.sha256:
            c.decision = "waiting"
            continue
        if prev is not None:
            prev_id, prev_hash, _, _, prev_status = prev
            if prev_hash == c.sha256:
                c.decision = "skip"
                c.note = (f"same content as file {prev_id}"
                          + (" (retracted earlier)" if prev_status == "retracted" else ""))
                continue
            if prev_status == "loaded":
                if not replace:
                    c.problem = InputError(
                        f"changed since it was loaded as file {prev_id}",
                        file=rel, hint="pass --replace to retract the old rows and load it",
                    )
                    continue
                c.replaces = prev_id
        try:
            _inspect(spec, c)
        except InputError as err:
            c.problem = err
    if progress:
        progress("hash", total, total)

    _field_problems(con, spec, cands)
    try:
        return _write(con, spec, cands, started=started, skip_bad=skip_bad, command=command,
                      progress=progress, options=_Options(allow_shrink, why))
    except InputError:
        _remember_refused(con, cands)
        raise


def _refused(cands: list[_Candidate]) -> list[tuple[str, str, int, dt.datetime | None, str]]:
    """Refused files with known content: what waiting.record keeps."""
    out = []
    for c in cands:
        if c.problem is not None and c.sha256:
            line = f"line {c.problem.line}: " if c.problem.line is not None else ""
            out.append((c.relative, c.sha256, c.size, c.mtime,
                        line + c.problem.detail()))
    return out


def _remember_refused(con: duckdb.DuckDBPyConnection, cands: list[_Candidate]) -> None:
    """After a refused batch, note the bad files in their own small transaction.

    The data and the lineage are untouched (the batch did not happen); only the
    refusal is kept, so that tomorrow's plain append passes over the same bytes.
    """
    refused = _refused(cands)
    if not refused:
        return
    try:
        con.execute("BEGIN TRANSACTION")
        waiting.record(con, refused, utcnow())
        con.execute("COMMIT")
    except duckdb.Error:
        rollback_quietly(con)  # the refusal itself is what the user must hear about


def _first_problem(cands: list[_Candidate]) -> InputError | None:
    bad = [c for c in cands if c.problem is not None]
    if not bad:
        return None
    first = bad[0].problem
    assert first is not None
    more = f"; {len(bad) - 1} more bad file(s) found so far" if len(bad) > 1 else ""
    return InputError(
        first.message + more,
        file=first.file, line=first.line, column=first.column,
        hint=(first.hint + "; " if first.hint else "")
        + "nothing was written; fix the file or pass --skip-bad to load the good ones; "
        "until its content changes, later appends pass over it (--retry-rejected tries it)",
    )


@dataclass(frozen=True)
class _Options:
    allow_shrink: bool = False
    why: str | None = None


def _write(
    con: duckdb.DuckDBPyConnection,
    spec: Spec,
    cands: list[_Candidate],
    *,
    started: dt.datetime,
    skip_bad: bool,
    command: str | None,
    progress: Progress | None,
    options: _Options,
) -> BatchSummary:
    if not skip_bad and (err := _first_problem(cands)) is not None:
        raise err
    to_load = [c for c in cands if c.problem is None and c.decision == "load"]
    skipped = [c for c in cands if c.problem is None and c.decision == "skip"]
    unchanged = [c for c in cands if c.problem is None and c.decision == "unchanged"]
    if not to_load and not skipped and not any(c.problem for c in cands):
        return BatchSummary(
            batch_id=None, status="nothing new", unchanged=len(unchanged),
            waiting=sum(c.decision == "waiting" for c in cands),
            set_aside=sum(c.decision == "aside" for c in cands),
            started_at=started.isoformat(timespec="seconds"),
            finished_at=utcnow().isoformat(timespec="seconds"),
            outcomes=[_passed_over(c) for c in cands],
        )

    where = database_path(con)
    with tempfile.TemporaryDirectory(prefix="trendledger-") as tmp:
        while True:
            con.execute("BEGIN TRANSACTION")
            try:
                summary = _transaction(con, spec, cands, to_load, skipped, unchanged, Path(tmp),
                                       started=started, skip_bad=skip_bad, command=command,
                                       progress=progress, options=options)
            except _ReadFailed as failed:
                rollback_quietly(con)
                _locate_failures(con, spec, failed)
                if not skip_bad and (err := _first_problem(cands)) is not None:
                    raise err from None
                continue
            except duckdb.Error as err:
                rollback_quietly(con)
                if not _machine_trouble(err):
                    raise
                raise cannot_write(err, where) from err
            except BaseException:
                rollback_quietly(con)
                raise
            try:
                con.execute("COMMIT")
            except duckdb.Error as err:
                # DuckDB has already undone the transaction; the store is as it was.
                rollback_quietly(con)
                raise cannot_write(err, where) from err
            return summary


def _shrink_problems(con: duckdb.DuckDBPyConnection, cands: list[_Candidate],
                     allow: bool) -> None:
    """A replacement holding fewer rows than the version it replaces needs allow_shrink:
    a cumulative file cut short by the instrument would otherwise drop rows silently."""
    replacing = {c.replaces: c for c in cands if c.replaces is not None and c.problem is None}
    if not replacing:
        return
    old = dict(con.execute("SELECT file_id, rows FROM ingest_files WHERE list_contains($ids, "
                           "file_id)", {"ids": list(replacing)}).fetchall())
    new = dict(con.execute(
        "SELECT file_id, count(*) FROM measurements WHERE list_contains($ids, file_id) "
        "GROUP BY file_id", {"ids": [c.file_id for c in replacing.values()]}).fetchall())
    for prev, c in replacing.items():
        was, now = int(old.get(prev, 0)), int(new.get(c.file_id, 0))
        c.note = f"{was} rows -> {now} rows"
        if now < was and not allow:
            c.problem = InputError(
                f"{was} rows -> {now} rows: the new version holds fewer rows than file {prev}",
                file=c.relative, hint="pass --allow-shrink if the rows should go")


def _passed_over(c: _Candidate) -> FileOutcome:
    """The outcome of a file that gets no lineage row: unchanged, waiting or set aside."""
    status = {"unchanged": "unchanged", "waiting": "waiting", "aside": "set aside"}[c.decision]
    return FileOutcome(c.relative, status, message=c.note if status != "unchanged" else None)


def _transaction(
    con: duckdb.DuckDBPyConnection,
    spec: Spec,
    cands: list[_Candidate],
    to_load: list[_Candidate],
    skipped: list[_Candidate],
    unchanged: list[_Candidate],
    tmp: Path,
    *,
    started: dt.datetime,
    skip_bad: bool,
    command: str | None,
    progress: Progress | None,
    options: _Options,
) -> BatchSummary:
    batch_id = first_row(con, "SELECT coalesce(max(batch_id), 0) + 1 FROM ingest_batches")
    next_file = first_row(con, "SELECT coalesce(max(file_id), 0) + 1 FROM ingest_files")
    assert batch_id is not None and next_file is not None
    bid, fid = int(batch_id[0]), int(next_file[0])
    for c in cands:
        if c.decision in ("load", "skip") or c.problem is not None:
            c.file_id = fid  # only files that get a lineage row take an id
            fid += 1

    # DuckDB reads a private copy of the bytes that were hashed and checked, never the
    # path again: a file replaced since is loaded as it was read, under its own hash.
    # The plain names also keep DuckDB from expanding glob characters ("a[1].csv").
    suffix = ".gz" if spec.source.compression == "gzip" else ""
    for c in to_load:
        staged = tmp / f"f{c.file_id}.{spec.source.format}{suffix}"
        if c.data is not None and not staged.exists():  # a retried transaction reuses it
            staged.write_bytes(c.data)
        c.link = str(staged)
    by_link = {c.link: c for c in to_load}
    if to_load:
        if progress:
            progress("read", 0, len(to_load))
        if spec.source.format == "parquet":
            _parquet_problems(con, spec, by_link)
        good = [c for c in to_load if c.problem is None]
        if good:
            _stage_files(con, spec, good)
            try:
                con.execute(_insert_sql(spec), {"links": [c.link for c in good]})
            except duckdb.Error as err:
                if _machine_trouble(err):
                    raise  # a full disk or a read-only folder, not a bad file
                raise _ReadFailed(good, err) from err
            _nonfinite_problems(con, spec, {c.file_id: c for c in good})
            _shrink_problems(con, good, options.allow_shrink)
            _count_problems(con, {c.file_id: c for c in good})
        if progress:
            progress("read", len(to_load), len(to_load))
    if not skip_bad and (problem := _first_problem(cands)) is not None:
        raise problem
    bad_ids = [c.file_id for c in to_load if c.problem is not None]
    if bad_ids:
        con.execute("DELETE FROM measurements WHERE list_contains($ids, file_id)", {"ids": bad_ids})

    loaded = [c for c in to_load if c.problem is None]
    counts = dict(
        con.execute(
            "SELECT file_id, count(*) FROM measurements WHERE file_id BETWEEN ? AND ? "
            "GROUP BY file_id",
            [min(c.file_id for c in loaded), max(c.file_id for c in loaded)],
        ).fetchall()
    ) if loaded else {}

    now = utcnow()
    replaced = [c for c in loaded if c.replaces is not None]
    for c in replaced:
        assert c.replaces is not None
        # the old rows are kept in measurements_history, not deleted (history.py)
        history.move(con, [c.replaces], how="replaced", why=options.why, now=now, batch=bid,
                     by_file=c.file_id)
        because = f": {options.why}" if options.why else ""
        con.execute(
            "UPDATE ingest_files SET status = 'replaced', changed_at = ?, "
            "message = ? WHERE file_id = ?",
            [now, f"replaced by file {c.file_id} in batch {bid}{because}", c.replaces],
        )
    by_key = history.supersede(con, spec.source.key, [c.file_id for c in loaded], now=now,
                               batch=bid, why=options.why) if spec.source.key and loaded else {}
    losers = history.superseded_files(con) if by_key else []
    # moments.py: the fits' stored sums follow the final rows of the batch
    moments.update(con, spec, [c.file_id for c in loaded],
                   [c.replaces for c in replaced if c.replaces is not None]
                   + [i for i in losers if i < min(c.file_id for c in loaded)])

    outcomes: list[FileOutcome] = []
    lineage = []
    message: str | None
    for c in cands:
        if c.decision in ("unchanged", "waiting", "aside") and c.problem is None:
            outcomes.append(_passed_over(c))
            continue
        if c.problem is not None:
            line = f"line {c.problem.line}: " if c.problem.line is not None else ""
            status, rows, message = "rejected", 0, line + c.problem.detail()
        elif c.decision == "skip":
            status, rows, message = "skipped", 0, c.note
        else:
            status, rows = "loaded", int(counts.get(c.file_id, 0))
            notes = []
            if c.replaces is not None:
                notes.append(f"replaces file {c.replaces} ({c.note})")
            if by_key.get(c.file_id):
                notes.append(f"replaces {by_key[c.file_id]} row(s) of earlier files by key")
            message = "; ".join(notes) or None
        outcomes.append(FileOutcome(c.relative, status, rows, message, c.file_id, c.replaces))
        lineage.append([c.file_id, bid, c.relative, c.sha256, c.size, c.mtime, rows, status,
                        message, c.replaces, None])
    if lineage:
        columns = ["file_id", "batch_id", "path", "sha256", "bytes", "modified_at", "rows",
                   "status", "message", "replaces", "changed_at"]
        frame = pd.DataFrame(lineage, columns=columns).astype(
            {"file_id": "int64", "batch_id": "int64", "bytes": "int64", "rows": "int64",
             "replaces": "Int64", "modified_at": "datetime64[us]", "changed_at": "datetime64[us]",
             "message": "object"}
        )
        _insert_frame(con, "ingest_files", frame)
    waiting.record(con, _refused(cands), now)
    waiting.close(con, {c.relative: c.file_id for c in loaded}, now)
    total_rows = sum(o.rows for o in outcomes)
    n_rejected = sum(1 for o in outcomes if o.status == "rejected")
    status = "partial" if n_rejected else "committed"
    finished = utcnow()
    con.execute(
        "INSERT INTO ingest_batches VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, NULL, NULL, ?)",
        [bid, started, finished, status, len(loaded), total_rows, len(skipped), n_rejected,
         __version__, spec.digest, command, waiting.os_user()],
    )
    return BatchSummary(
        batch_id=bid, status=status, files=len(loaded), rows=total_rows, skipped=len(skipped),
        unchanged=len(unchanged), rejected=n_rejected, replaced=len(replaced),
        replaced_rows=sum(by_key.values()),
        waiting=sum(c.decision == "waiting" for c in cands),
        set_aside=sum(c.decision == "aside" for c in cands),
        started_at=started.isoformat(timespec="seconds"),
        finished_at=finished.isoformat(timespec="seconds"), outcomes=outcomes,
    )
