"""The spec: what the files look like and which trends to fit.

A spec is a small TOML file written by the person who owns the store. It is
parsed once, validated with errors that name the key, and saved inside the
store so that every later command needs only the store path.
"""

from __future__ import annotations

import difflib
import hashlib
import re
import tomllib
import zoneinfo
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import sqlglot
from sqlglot import exp

from trendledger.errors import QueryRefused, SpecError
from trendledger.query.where import check_where
from trendledger.views import names

FORMATS = ("csv", "tsv", "parquet", "jsonl")
WINDOWS = ("day", "week", "month")
#: How a group's line may bend (sql/views/bend.sql): two lines that meet, two lines with a
#: jump between them, or no bend search at all.
BENDS = ("joined", "free", "none")

# DuckDB types a column or template field may declare. Parametrised DECIMAL is
# matched separately. Kept to plain scalar types: they load from every format.
TYPES = {
    "BOOLEAN", "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT",
    "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT",
    "FLOAT", "REAL", "DOUBLE", "VARCHAR", "TEXT", "STRING",
    "DATE", "TIME", "TIMESTAMP", "TIMESTAMPTZ", "TIMESTAMP WITH TIME ZONE",
}
NUMERIC = {
    "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
    "UINTEGER", "UBIGINT", "FLOAT", "REAL", "DOUBLE",
}
FLOATS = {"FLOAT", "REAL", "DOUBLE"}
DECIMAL = re.compile(r"^DECIMAL\(\s*(\d+)\s*,\s*(\d+)\s*\)$")
NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
FIELD = re.compile(r"\{([^{}]*)\}")
GLOB_CHARS = set("*?[]")
# Names the store uses for its own columns.
RESERVED = {"file_id"}
#: Cell texts read as missing (NULL) when the spec names none: what instruments and
#: spreadsheets write for "no value".
MISSING = ("", "NaN", "nan")
#: The forms a fit's x or y may take instead of a column's own values (sql/parts/forms.sql):
#: the line is fitted on that scale and answered back in the column's units.
FORMS = ("ln", "log10", "sqrt", "reciprocal")
#: A value the form cannot take, for the limit's check: (test, what the domain is).
FORM_DOMAINS = {
    "ln": (lambda v: v > 0, "above 0"),
    "log10": (lambda v: v > 0, "above 0"),
    "sqrt": (lambda v: v >= 0, "0 or above"),
    "reciprocal": (lambda v: v != 0, "other than 0"),
}


@dataclass(frozen=True)
class Limit:
    """One side of a tolerance: an absolute value, or a fraction of the unit's start.

    The start is the mean of the unit's readings at its first (smallest) x: the first reading.
    """

    value: float | None = None
    fraction: float | None = None


@dataclass(frozen=True)
class Fit:
    """One regression definition: y against x, per group."""

    name: str
    group: tuple[str, ...]
    x: str
    y: str
    level: float = 0.95
    through_origin: bool = False
    limit: float | None = None
    horizon: float | None = None
    window: str | None = None
    window_x: float | None = None
    #: raise low_r2 below this r2 (None: never; not_straight is the test of a straight line)
    min_r2: float | None = None
    alpha: float = 0.01
    #: the group columns whose values make a fleet of units (empty: the whole fit is one fleet)
    fleet: tuple[str, ...] = ()
    #: significance of the poolability tests (ICH Q1E uses 0.25)
    pool_alpha: float = 0.25
    bend: str = "joined"
    bend_min: float = 0.15
    #: two-sided tolerance: a floor and a ceiling, each absolute or relative to the unit's start
    #: (``limit`` is the side the slope points to)
    lower: Limit | None = None
    upper: Limit | None = None
    #: the longest projection beyond the latest x, in x units (ICH Q1E: 12 months); the other
    #: half of the rule, at most the period the data cover, always applies
    extrapolation_cap: float | None = None
    #: the level of each test, each ``alpha`` unless given: the window slope against the earlier
    #: one, the outlier test, the latest readings against the earlier line (out-of-trend)
    alpha_change: float = 0.01
    alpha_outliers: float = 0.01
    alpha_trend: float = 0.01
    #: "fdr": each test's p-values are judged across the units of the fit (Benjamini-Hochberg);
    #: "unit": each unit on its own
    error_control: str = "fdr"
    #: raise `silent` for a unit with no rows in this many of its fleet's latest batches
    silent_after: int | None = None
    #: the form x and y are fitted in (one of FORMS), None for the column's own values
    x_form: str | None = None
    y_form: str | None = None
    #: a row filter (restricted like ``fits --where``): rows it does not hold stay in the store
    #: and out of this fit; None fits every row
    where: str | None = None

    @property
    def view(self) -> str:
        return f"fit_{self.name}"

    def shown(self, axis: str) -> str:
        """How the fit names its x or y: the column, or the form of it, e.g. ``ln(assay)``."""
        col, form = (self.x, self.x_form) if axis == "x" else (self.y, self.y_form)
        return f"{form}({col})" if form else col


@dataclass(frozen=True)
class Source:
    """Where the files are and what is inside them."""

    files: str
    format: str
    columns: dict[str, str]
    fields: dict[str, str]
    delimiter: str | None = None
    #: the header (or JSON key, or Parquet column) each column is read from, when it is
    #: not the column's own name: {"capacity_ah": "Discharge_Capacity(Ah)"}
    headers: dict[str, str] = field(default_factory=dict)
    #: texts read as missing in csv/tsv files, in every column
    missing: tuple[str, ...] = MISSING
    #: the decimal mark of numbers in csv/tsv files: "." or ","
    decimal: str = "."
    #: natural key: a row whose key a later file also holds is replaced by that file's row
    key: tuple[str, ...] = ()
    #: the zone date-time values are read and cut into windows in (never the machine's)
    timezone: str = "UTC"
    #: columns that accept values written beyond a reporting limit ('<0.05', '>200'), with
    #: what the column holds for them: "omit" (NULL) or "half" (half the limit, below only)
    censored: dict[str, str] = field(default_factory=dict)
    #: texts read as missing in one column only, besides ``missing`` (csv and tsv)
    column_missing: dict[str, tuple[str, ...]] = field(default_factory=dict)
    #: folders outside the spec's folder that files may really live in (through links)
    allow: tuple[str, ...] = ()
    #: the step each column's values are recorded to (0.01 for two decimals): a fit's residual
    #: standard deviation is never taken below resolution / sqrt(12), the rounding noise
    resolution: dict[str, float] = field(default_factory=dict)
    #: named columns computed from declared ones when a fit reads them, never stored:
    #: {"efficiency": "discharge_ah / charge_ah"} (views/forms.py turns them into SQL)
    computed: dict[str, str] = field(default_factory=dict)

    def derived(self) -> dict[str, str]:
        """Columns the store adds for censored columns: which side, and the limit."""
        out: dict[str, str] = {}
        for name in self.censored:
            out[f"{name}_censored"] = "VARCHAR"
            out[f"{name}_limit"] = "DOUBLE"
        return out

    @property
    def compression(self) -> str:
        return "gzip" if self.files.endswith(".gz") else "none"

    def header(self, name: str) -> str:
        """The name a column has in the files."""
        return self.headers.get(name, name)


@dataclass(frozen=True)
class Spec:
    """A validated spec, with the text it came from (saved in the store)."""

    source: Source
    fits: tuple[Fit, ...]
    text: str = field(repr=False)
    path: str | None = None

    @property
    def digest(self) -> str:
        """sha256 of the spec text: printed on reports so results can be traced."""
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()

    def fit(self, name: str | None) -> Fit:
        """The fit called ``name`` (or the only one), with a did-you-mean on a typo."""
        if name is None:
            if len(self.fits) == 1:
                return self.fits[0]
            names = ", ".join(f.name for f in self.fits)
            raise SpecError(f"the spec defines several fits ({names}); name one")
        for f in self.fits:
            if f.name == name:
                return f
        known = [f.name for f in self.fits]
        raise SpecError(f"no fit named {name!r}", hint=did_you_mean(name, known))

    @property
    def all_columns(self) -> dict[str, str]:
        """Columns of the measurements table, in order: file columns, then template fields."""
        return {**self.source.columns, **self.source.fields, **self.source.derived()}


def did_you_mean(word: str, choices: list[str] | tuple[str, ...]) -> str | None:
    close = difflib.get_close_matches(word, list(choices), n=1)
    if close:
        return f"did you mean {close[0]!r}?"
    if choices:
        return "choose from " + ", ".join(choices)
    return None


def normalise_type(value: Any, where: str, path: str | None) -> str:
    if not isinstance(value, str):
        raise SpecError(f"{where}: the type must be a string such as \"DOUBLE\"", file=path)
    text = " ".join(value.strip().upper().split())
    if text in TYPES or DECIMAL.match(text):
        return text
    raise SpecError(
        f"{where}: unknown type {value!r}",
        file=path,
        hint=did_you_mean(text, sorted(TYPES)),
    )


def _check_name(name: str, where: str, path: str | None) -> None:
    if not NAME.match(name):
        raise SpecError(
            f"{where}: name {name!r} must start with a letter or _ and hold only letters, "
            "digits and _",
            file=path,
        )
    if name.lower() in RESERVED:
        raise SpecError(f"{where}: {name!r} is used by the store itself; rename it", file=path)
    if name.lower().startswith("tl_"):
        raise SpecError(f"{where}: {name!r}: names starting with 'tl_' are reserved for the "
                        "store's own tables and working columns; rename it", file=path)


def _check_role(name: str, key: str, where: str, path: str | None) -> None:
    """Refuse a column name that would collide inside the views (views.names says why)."""
    why = names.clash(name, group=key == "group")
    if why:
        raise SpecError(f"{where}: {key} = {name!r} cannot be used: {why}; rename the column "
                        "(for example with a suffix)", file=path)


def template_fields(template: str) -> list[str]:
    return FIELD.findall(template)


def _table(
    doc: dict[str, Any], key: str, path: str | None, required: bool = True
) -> dict[str, Any]:
    value = doc.get(key)
    if value is None:
        if required:
            raise SpecError(f"missing [{key}] table", file=path)
        return {}
    if not isinstance(value, dict):
        raise SpecError(f"{key} must be a table", file=path)
    return value


def _unknown_keys(table: dict[str, Any], allowed: set[str], where: str, path: str | None) -> None:
    for key in table:
        if key not in allowed:
            raise SpecError(
                f"{where}: unknown key {key!r}", file=path, hint=did_you_mean(key, sorted(allowed))
            )


def _number(raw: dict[str, Any], key: str, where: str, path: str | None) -> float | None:
    value = raw.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise SpecError(f"{where}: {key} must be a number", file=path)
    return float(value)


def _parse_source(doc: dict[str, Any], path: str | None) -> Source:
    raw = _table(doc, "source", path)
    _unknown_keys(raw, {"files", "format", "columns", "fields", "delimiter", "missing",
                        "decimal", "key", "timezone", "allow", "resolution",
                        "computed"}, "[source]", path)
    files = raw.get("files")
    if not isinstance(files, str) or not files.strip():
        raise SpecError("[source] files: give a path template such as \"in/{day}/{unit}.csv\"",
                        file=path)
    if files.startswith("/") or ".." in Path(files).parts:
        raise SpecError("[source] files: the template must be relative to the spec's folder "
                        "and stay inside it", file=path)
    if GLOB_CHARS & set(FIELD.sub("", files)):
        raise SpecError("[source] files: use {name} fields, not glob characters (* ? [ ])",
                        file=path)
    names = template_fields(files)
    if not names:
        raise SpecError("[source] files: the template has no {field}; name the part of the "
                        "path that changes, e.g. {day}/{unit}.csv", file=path)
    if re.search(r"\}\{", files):
        raise SpecError("[source] files: two fields side by side cannot be told apart; "
                        "put a separator between them", file=path)
    fmt = raw.get("format")
    if fmt is None:
        fmt = _guess_format(files)
    if fmt not in FORMATS:
        raise SpecError(f"[source] format: {fmt!r} is not one of {', '.join(FORMATS)}", file=path,
                        hint=did_you_mean(str(fmt), FORMATS))
    if fmt == "parquet" and files.endswith(".gz"):
        raise SpecError("[source] files: parquet files carry their own compression; drop .gz",
                        file=path)
    delimiter = raw.get("delimiter")
    if delimiter is not None and (fmt not in ("csv", "tsv") or not isinstance(delimiter, str)
                                  or len(delimiter) != 1):
        raise SpecError("[source] delimiter: one character, for csv or tsv files", file=path)

    columns_raw = _table(raw, "columns", path)
    if not columns_raw:
        raise SpecError("[source.columns] declares no column", file=path)
    columns: dict[str, str] = {}
    headers: dict[str, str] = {}
    censored: dict[str, str] = {}
    column_missing: dict[str, tuple[str, ...]] = {}
    for name, typ in columns_raw.items():
        _check_name(name, "[source.columns]", path)
        where = f"[source.columns] {name}"
        if isinstance(typ, dict):
            _unknown_keys(typ, {"type", "header", "censored", "missing"}, where, path)
            if typ.get("missing") is not None:
                column_missing[name] = _missing(typ["missing"], fmt, path, where)
            treat = typ.get("censored")
            if treat is not None:
                if treat not in ("omit", "half"):
                    raise SpecError(f"{where}: censored must be \"omit\" (store NULL) or "
                                    "\"half\" (half the limit)", file=path)
                censored[name] = treat
            header = typ.get("header")
            if header is not None:
                if not isinstance(header, str) or not header.strip() or header != header.strip():
                    raise SpecError(f"{where}: header must be the column's name as the files "
                                    "write it, without spaces around it", file=path)
                if header != name:
                    headers[name] = header
            typ = typ.get("type")
        columns[name] = normalise_type(typ, where, path)
        if name in censored and columns[name] not in FLOATS and not DECIMAL.match(columns[name]):
            raise SpecError(f"{where}: censored values need a DOUBLE or DECIMAL column",
                            file=path)
        if name in censored and fmt not in ("csv", "tsv"):
            raise SpecError(f"{where}: censored values ('<0.05') are read from csv or tsv "
                            "files", file=path)
    seen_headers: dict[str, str] = {}
    for name in columns:
        head = headers.get(name, name)
        if head.lower() in seen_headers:
            raise SpecError(f"[source.columns] {name}: header {head!r} is already read by "
                            f"{seen_headers[head.lower()]}", file=path)
        seen_headers[head.lower()] = name
    missing = _missing(raw.get("missing"), fmt, path)
    decimal = raw.get("decimal", ".")
    if decimal not in (".", ","):
        raise SpecError("[source] decimal: \".\" or \",\"", file=path)
    if decimal == "," and (fmt not in ("csv", "tsv") or (delimiter or
                                                          ("\t" if fmt == "tsv" else ",")) == ","):
        raise SpecError("[source] decimal = \",\": for csv or tsv files whose delimiter is not a "
                        "comma; add delimiter = \";\"", file=path)
    fields_raw = _table(raw, "fields", path, required=False)
    fields: dict[str, str] = {}
    seen: set[str] = set()
    for name in names:
        if not name:
            raise SpecError("[source] files: empty {} in the template", file=path)
        _check_name(name, "[source] files", path)
        if name in seen:
            raise SpecError(f"[source] files: field {{{name}}} appears twice", file=path)
        seen.add(name)
        fields[name] = normalise_type(fields_raw.get(name, "VARCHAR"), f"[source.fields] {name}",
                                      path)
    for name in fields_raw:
        if name not in seen:
            raise SpecError(f"[source.fields] {name}: not a field of the template {files!r}",
                            file=path, hint=did_you_mean(name, names))
    lowered: dict[str, str] = {}
    derived = [f"{n}_{part}" for n in censored for part in ("censored", "limit")]
    for name in [*columns, *fields, *derived]:
        # DuckDB column names are case-insensitive: Cell and cell would collide.
        if name.lower() in lowered:
            raise SpecError(f"name {name!r} is declared twice (as a column and a field, or in "
                            "two cases)", file=path)
        lowered[name.lower()] = name
    key = _key(raw.get("key"), {**columns, **fields}, path)
    computed = _computed(_table(raw, "computed", path, required=False),
                         {**columns, **fields}, lowered, path)
    return Source(files=files, format=fmt, columns=columns, fields=fields, delimiter=delimiter,
                  computed=computed,
                  headers=headers, missing=missing, decimal=decimal, key=key,
                  timezone=_zone(raw.get("timezone", "UTC"), path), censored=censored,
                  column_missing=column_missing, allow=_parse_allow(raw.get("allow", []), path),
                  resolution=_resolution(raw.get("resolution", {}), columns, path))


#: What a computed column's expression may hold besides columns, numbers, + - * / and
#: parentheses: these functions of one value (views/forms.py guards their domains).
COMPUTED_FUNCTIONS = {"abs": exp.Abs, "ln": exp.Ln, "log10": exp.Log, "sqrt": exp.Sqrt,
                      "exp": exp.Exp}
_COMPUTED_NODES = (exp.Column, exp.Identifier, exp.Literal, exp.Paren, exp.Add, exp.Sub,
                   exp.Mul, exp.Div, exp.Neg, *COMPUTED_FUNCTIONS.values())


def computed_tree(text: str) -> exp.Expr:
    """A computed column's expression parsed (checked by the spec parser)."""
    return sqlglot.parse_one(text, read="duckdb")


def _computed(raw: dict[str, Any], known: dict[str, str], lowered: dict[str, str],
              path: str | None) -> dict[str, str]:
    """``[source.computed]``: name = "expression over declared columns and fields"."""
    out: dict[str, str] = {}
    allowed = ", ".join(COMPUTED_FUNCTIONS)
    for name, text in raw.items():
        where = f"[source.computed] {name}"
        _check_name(name, "[source.computed]", path)
        if name.lower() in lowered:
            raise SpecError(f"{where}: a column or field is already called {name!r}", file=path)
        refused = SpecError(
            f"{where}: {text!r} is not an expression of declared numeric columns; only "
            f"columns, numbers, + - * /, parentheses and the functions {allowed} of one value "
            "are allowed", file=path)
        if not isinstance(text, str) or not text.strip():
            raise refused
        try:
            tree = computed_tree(text)
        except sqlglot.errors.SqlglotError:
            raise refused from None
        for node in tree.walk():
            if not isinstance(node, _COMPUTED_NODES) or (
                    isinstance(node, exp.Log) and not (
                        isinstance(node.this, exp.Literal) and node.this.this == "10"
                        and node.expression is not None)) or (
                    isinstance(node, exp.Literal) and node.is_string):
                raise refused
            if isinstance(node, exp.Column):
                if node.table or node.name not in known:
                    raise SpecError(f"{where}: {node.sql()!r} is not a declared column or field",
                                    file=path, hint=did_you_mean(node.name, list(known)))
                typ = known[node.name]
                if typ not in NUMERIC and not DECIMAL.match(typ):
                    raise SpecError(f"{where}: {node.name!r} has type {typ}; a computed column "
                                    "reads numeric columns", file=path)
        out[name] = text
        lowered[name.lower()] = name
    return out


def _zone(value: Any, path: str | None) -> str:
    """An IANA time zone name, checked against the system's zone database."""
    if isinstance(value, str) and value and not value.startswith(("/", ".")):
        try:
            zoneinfo.ZoneInfo(value)
            return value
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            pass
    raise SpecError(f"[source] timezone: unknown time zone {value!r}; give an IANA name such "
                    "as \"Europe/Berlin\" or \"UTC\"", file=path)


def _key(value: Any, known: dict[str, str], path: str | None) -> tuple[str, ...]:
    """The natural key: declared columns or template fields that name one row."""
    if value is None:
        return ()
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise SpecError("[source] key: a list of columns or fields, e.g. [\"cell\", \"cycle\"]",
                        file=path)
    for name in value:
        if name not in known:
            raise SpecError(f"[source] key: {name!r} is not a declared column or field",
                            file=path, hint=did_you_mean(name, list(known)))
    if len(set(value)) != len(value):
        raise SpecError("[source] key lists a column twice", file=path)
    return tuple(value)


def _missing(value: Any, fmt: str, path: str | None,
             where: str = "[source]") -> tuple[str, ...]:
    """The missing-value texts: a list of strings, for csv and tsv (JSON and Parquet have null)."""
    if value is None:
        return MISSING
    if fmt not in ("csv", "tsv"):
        raise SpecError(f"{where} missing: for csv or tsv files; JSON and Parquet files write "
                        "null for a missing value", file=path)
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise SpecError(f"{where} missing: a list of texts, e.g. [\"\", \"NaN\", \"-9999\"]",
                        file=path)
    return tuple(dict.fromkeys(value))


def _parse_allow(raw: Any, path: str | None) -> tuple[str, ...]:
    """``[source] allow``: absolute folders that linked files may really live in."""
    if not isinstance(raw, list) or not all(isinstance(item, str) for item in raw):
        raise SpecError('[source] allow: a list of folders, e.g. allow = ["/mnt/cyclers"]',
                        file=path)
    for item in raw:
        if not item.startswith("/"):
            raise SpecError(f"[source] allow: {item!r} is not an absolute folder path",
                            file=path, hint='write it from the root, e.g. "/mnt/cyclers"')
        if item.rstrip("/") == "":
            raise SpecError("[source] allow: the whole file system (\"/\") cannot be allowed",
                            file=path, hint="name the folder the instrument files are in")
    return tuple(raw)


def _resolution(raw: Any, columns: dict[str, str], path: str | None) -> dict[str, float]:
    """[source] resolution: the recorded step of numeric columns, e.g. { capacity_ah = 0.01 }."""
    if not isinstance(raw, dict):
        raise SpecError("[source] resolution must be a table of column = step, e.g. "
                        "resolution = { capacity_ah = 0.01 }", file=path)
    out: dict[str, float] = {}
    for name, step in raw.items():
        if name not in columns:
            raise SpecError(f"[source] resolution: {name!r} is not a declared column", file=path,
                            hint=did_you_mean(name, list(columns)))
        if isinstance(step, bool) or not isinstance(step, int | float) or not step > 0:
            raise SpecError(f"[source] resolution: {name} must be a positive number, the step "
                            "its values are recorded to (e.g. 0.01)", file=path)
        out[name] = float(step)
    return out


def _guess_format(files: str) -> str:
    name = files[:-3] if files.endswith(".gz") else files
    for fmt, ext in (("csv", ".csv"), ("tsv", ".tsv"), ("parquet", ".parquet"),
                     ("jsonl", ".jsonl"), ("jsonl", ".ndjson")):
        if name.endswith(ext):
            return fmt
    return "csv"


FIT_KEYS = {
    "name", "group", "x", "y", "level", "through_origin", "limit", "horizon", "window",
    "window_x", "min_r2", "alpha", "fleet", "pool_alpha",
    "bend", "bend_min", "where", "lower", "upper", "extrapolation_cap",
    "alpha_change", "alpha_outliers", "alpha_trend", "error_control", "silent_after",
}
ERROR_CONTROLS = ("fdr", "unit")


def _parse_fit(raw: Any, index: int, source: Source, path: str | None) -> Fit:
    where = f"[[fit]] #{index + 1}"
    if not isinstance(raw, dict):
        raise SpecError(f"{where} must be a table", file=path)
    _unknown_keys(raw, FIT_KEYS, where, path)
    name = raw.get("name")
    if not isinstance(name, str):
        raise SpecError(f"{where}: give it a name", file=path)
    where = f"[[fit]] {name}"
    _check_name(name, where, path)
    declared = {**source.columns, **source.fields}
    # x, y and the filter may read computed columns (DOUBLE); group and fleet may not
    known = {**declared, **{c: "DOUBLE" for c in source.computed}}

    def column(key: str, value: Any) -> str:
        if not isinstance(value, str):
            raise SpecError(f"{where}: {key} must be a column name", file=path)
        if key == "group" and value in source.computed:
            raise SpecError(f"{where}: group = {value!r} is a computed column; group by "
                            "declared columns or fields", file=path)
        if value not in known:
            raise SpecError(f"{where}: {key} = {value!r} is not a declared column or field",
                            file=path, hint=did_you_mean(value, list(known)))
        return value

    x_form, x_text = _form(raw.get("x"), "x", where, path)
    y_form, y_text = _form(raw.get("y"), "y", where, path)
    x = column("x", x_text)
    y = column("y", y_text)
    for key, col in (("x", x), ("y", y)):
        if known[col] not in NUMERIC and not DECIMAL.match(known[col]):
            raise SpecError(f"{where}: {key} = {col!r} has type {known[col]}; it must be numeric",
                            file=path)
    group_raw = raw.get("group", [])
    if isinstance(group_raw, str):
        group_raw = [group_raw]
    if not isinstance(group_raw, list) or not group_raw:
        raise SpecError(f"{where}: group must list at least one column, e.g. group = [\"unit\"]",
                        file=path)
    group = tuple(column("group", g) for g in group_raw)
    if len(set(group)) != len(group):
        raise SpecError(f"{where}: group lists a column twice", file=path)
    for key, col in (*(("group", g) for g in group), ("x", x), ("y", y)):
        _check_role(col, key, where, path)
    if x in group or y in group:
        raise SpecError(f"{where}: x and y cannot also be group columns", file=path)
    if x == y:
        raise SpecError(f"{where}: x and y are the same column", file=path)

    level = _number(raw, "level", where, path)
    if level is not None and not 0.5 <= level < 1:
        raise SpecError(f"{where}: level must be between 0.5 and 1, e.g. 0.95", file=path)
    alpha = _number(raw, "alpha", where, path)
    if alpha is not None and not 0 < alpha < 0.5:
        raise SpecError(f"{where}: alpha must be between 0 and 0.5, e.g. 0.01", file=path)
    min_r2 = _number(raw, "min_r2", where, path)
    if min_r2 is not None and not 0 <= min_r2 <= 1:
        raise SpecError(f"{where}: min_r2 must be between 0 and 1", file=path)
    horizon = _number(raw, "horizon", where, path)
    if horizon is not None and horizon <= 0:
        raise SpecError(f"{where}: horizon must be positive", file=path)
    window_x = _number(raw, "window_x", where, path)
    if window_x is not None and window_x <= 0:
        raise SpecError(f"{where}: window_x must be positive", file=path)
    window = raw.get("window")
    if window is not None:
        if window not in WINDOWS:
            raise SpecError(f"{where}: window must be one of {', '.join(WINDOWS)}", file=path,
                            hint=did_you_mean(str(window), WINDOWS))
        if not any(t.startswith(("DATE", "TIMESTAMP")) for t in known.values()):
            raise SpecError(f"{where}: window = {window!r} needs a DATE or TIMESTAMP field",
                            file=path)
        if window_x is not None:
            raise SpecError(f"{where}: give window or window_x, not both", file=path)
    origin = raw.get("through_origin", False)
    if not isinstance(origin, bool):
        raise SpecError(f"{where}: through_origin must be true or false", file=path)
    fleet = _fleet(raw.get("fleet", []), group, known, where, path)
    pool_alpha = _number(raw, "pool_alpha", where, path)
    if pool_alpha is not None and not 0 < pool_alpha < 1:
        raise SpecError(f"{where}: pool_alpha must be between 0 and 1, e.g. 0.25", file=path)
    bend = raw.get("bend", "joined")
    if bend not in BENDS:
        raise SpecError(f"{where}: bend must be one of {', '.join(BENDS)}", file=path,
                        hint=did_you_mean(str(bend), BENDS))
    bend_min = _number(raw, "bend_min", where, path)
    if bend_min is not None and not 0 < bend_min < 0.5:
        raise SpecError(f"{where}: bend_min is the least share of a group's points on each "
                        "side of a bend, above 0 and below 0.5, e.g. 0.15", file=path)
    lower, upper, cap = _tolerance(raw, where, path)
    limit = _number(raw, "limit", where, path)
    if limit is not None and y_form is not None:
        inside, domain = FORM_DOMAINS[y_form]
        if not inside(limit):
            raise SpecError(f"{where}: limit = {limit:g} is given in {y}'s own units and "
                            f"{y_form}({y}) needs a value {domain}", file=path)
    if y_form is not None and (lower is not None or upper is not None):
        # a form turns a floor into a ceiling (reciprocal) and a fraction of the start into
        # something else on the fit's scale: only the plain limit is carried through a form
        raise SpecError(f"{where}: a fit of {y_form}({y}) takes `limit` (in {y}'s own units, the "
                        "side its slope points to); lower, upper and relative limits need a "
                        "plain y", file=path)
    row_filter = raw.get("where")
    if row_filter is not None:
        filter_condition(row_filter, known, where, path)
    return Fit(
        name=name, group=group, x=x, y=y,
        x_form=x_form, y_form=y_form, where=row_filter,
        level=level if level is not None else 0.95,
        through_origin=origin,
        limit=limit,
        horizon=horizon,
        window=window,
        window_x=window_x,
        min_r2=min_r2,
        alpha=alpha if alpha is not None else 0.01,
        fleet=fleet,
        pool_alpha=pool_alpha if pool_alpha is not None else 0.25,
        bend=bend,
        bend_min=bend_min if bend_min is not None else 0.15,
        lower=lower, upper=upper, extrapolation_cap=cap,
        **_alphas(raw, alpha if alpha is not None else 0.01, where, path),
    )


def _alphas(raw: dict[str, Any], alpha: float, where: str, path: str | None) -> dict[str, Any]:
    """The level of each test (``alpha`` unless given) and how p-values are judged."""
    out: dict[str, Any] = {}
    for key in ("alpha_change", "alpha_outliers", "alpha_trend"):
        value = _number(raw, key, where, path)
        if value is not None and not 0 < value < 0.5:
            raise SpecError(f"{where}: {key} must be between 0 and 0.5, e.g. 0.01", file=path)
        out[key] = value if value is not None else alpha
    control = raw.get("error_control", "fdr")
    if control not in ERROR_CONTROLS:
        raise SpecError(f"{where}: error_control must be \"fdr\" (Benjamini-Hochberg across the "
                        "units of the fit) or \"unit\" (each unit on its own)", file=path,
                        hint=did_you_mean(str(control), ERROR_CONTROLS))
    out["error_control"] = control
    silent = raw.get("silent_after")
    if silent is not None and (isinstance(silent, bool) or not isinstance(silent, int)
                               or silent < 1):
        raise SpecError(f"{where}: silent_after is a number of batches, a whole number of at "
                        "least 1, e.g. 3", file=path)
    out["silent_after"] = silent
    return out


def _tolerance(raw: dict[str, Any], where: str,
               path: str | None) -> tuple[Limit | None, Limit | None, float | None]:
    """``lower`` and ``upper`` (a number, or ``{ fraction = 0.8, of = "start" }``) and the cap."""
    sides: dict[str, Limit | None] = {}
    for side in ("lower", "upper"):
        value = raw.get(side)
        if value is None:
            sides[side] = None
        elif isinstance(value, dict):
            _unknown_keys(value, {"fraction", "of"}, f"{where}: {side}", path)
            fraction = _number(value, "fraction", f"{where}: {side}", path)
            if fraction is None or fraction <= 0 or value.get("of") != "start":
                raise SpecError(f"{where}: {side} relative to the unit's first reading is "
                                "written { fraction = 0.8, of = \"start\" } (a positive "
                                "fraction)", file=path)
            sides[side] = Limit(fraction=fraction)
        else:
            sides[side] = Limit(value=_number(raw, side, where, path))
    lower, upper = sides["lower"], sides["upper"]
    if (lower or upper) and raw.get("limit") is not None:
        raise SpecError(f"{where}: give limit (the side the slope points to) or lower/upper, "
                        "not both", file=path)
    if (lower and upper and lower.value is not None and upper.value is not None
            and not lower.value < upper.value):
        raise SpecError(f"{where}: lower must be below upper", file=path)
    cap = _number(raw, "extrapolation_cap", where, path)
    if cap is not None and cap <= 0:
        raise SpecError(f"{where}: extrapolation_cap must be positive (x units beyond the "
                        "latest x, e.g. 12 for months)", file=path)
    return lower, upper, cap
def filter_condition(text: Any, known: dict[str, str], where: str = "[[fit]]",
                     path: str | None = None) -> exp.Expr:
    """A fit's ``where``: a condition over declared columns and fields, checked like
    ``fits --where`` (columns, literals, comparisons, arithmetic, no function call)."""
    if not isinstance(text, str):
        raise SpecError(f"{where}: where must be a condition in a string, e.g. "
                        "where = \"cycle_kind = 'standard'\"", file=path)
    try:
        return check_where(text, list(known))
    except QueryRefused as err:
        reason = err.message.removeprefix("refused: ").replace("the --where condition",
                                                               "the condition")
        reason = reason.replace("--where", "where")
        raise SpecError(f"{where}: where = {text!r}: {reason}", file=path,
                        hint=err.hint) from None


def _form(value: Any, key: str, where: str, path: str | None) -> tuple[str | None, Any]:
    """Split ``x`` or ``y`` into (form, column): ``"ln(assay)"`` gives ("ln", "assay"), a
    plain column name gives (None, name). Anything else is refused in one sentence."""
    if not isinstance(value, str) or "(" not in value:
        return None, value
    allowed = ", ".join(f"{f}(column)" for f in FORMS)
    refused = SpecError(f"{where}: {key} = {value!r} is neither a column nor one of the "
                        f"allowed forms {allowed} of one declared column", file=path)
    try:
        node = sqlglot.parse_one(value, read="duckdb")
    except sqlglot.errors.SqlglotError:
        raise refused from None
    name = re.match(r"\s*([A-Za-z0-9_]+)\s*\(", value)
    form = name.group(1).lower() if name else None
    kinds = {"ln": exp.Ln, "log10": exp.Log, "sqrt": exp.Sqrt, "reciprocal": exp.Anonymous}
    if form not in kinds or not isinstance(node, kinds[form]):
        raise refused
    args = [a for a in node.iter_expressions()
            if not (form == "log10" and isinstance(a, exp.Literal) and a.this == "10")]
    if (len(args) != 1 or not isinstance(args[0], exp.Column) or args[0].table
            or (isinstance(node, exp.Log) and node.this is not None and not (
                isinstance(node.this, exp.Literal) and node.this.this == "10"))):
        raise refused
    return form, args[0].name


def _fleet(raw: Any, group: tuple[str, ...], known: dict[str, str], where: str,
           path: str | None) -> tuple[str, ...]:
    """The fleet fields: a strict subset of the group columns (the units are the groups).

    The fleet views read only the stored per-unit sums, which carry the group columns and
    nothing else, so a field that is constant within each unit (a lot, a rack) belongs in
    ``group`` as well: it does not split any unit and makes the fleet key available.
    """
    if isinstance(raw, str):
        raw = [raw]
    if not isinstance(raw, list) or not all(isinstance(f, str) for f in raw):
        raise SpecError(f"{where}: fleet must list group columns, e.g. fleet = [\"lot\"]",
                        file=path)
    for name in raw:
        if name not in known:
            raise SpecError(f"{where}: fleet = {name!r} is not a declared column or field",
                            file=path, hint=did_you_mean(name, list(group)))
        if name not in group:
            raise SpecError(
                f"{where}: fleet = {name!r} is not a group column; a fleet is a set of units, "
                f"so add {name!r} to group (a field that is constant within each unit does "
                "not split any unit)", file=path)
    if len(set(raw)) != len(raw):
        raise SpecError(f"{where}: fleet lists a column twice", file=path)
    if len(raw) >= len(group):
        raise SpecError(f"{where}: fleet must leave at least one group column to tell the "
                        "units of a fleet apart", file=path)
    return tuple(raw)


def parse(text: str, path: str | None = None) -> Spec:
    """Parse and validate spec text; ``path`` only labels errors."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        match = re.search(r"line (\d+), column (\d+)", str(err))
        raise SpecError(
            f"not valid TOML: {str(err).split(' (at')[0]}",
            file=path,
            line=int(match.group(1)) if match else None,
            column=int(match.group(2)) if match else None,
        ) from err
    _unknown_keys(doc, {"source", "fit"}, "spec", path)
    source = _parse_source(doc, path)
    fits_raw = doc.get("fit", [])
    if not isinstance(fits_raw, list):
        raise SpecError("fit: write each fit as a [[fit]] table", file=path)
    fits = tuple(_parse_fit(raw, i, source, path) for i, raw in enumerate(fits_raw))
    names = [f.name for f in fits]
    for n in names:
        if names.count(n) > 1:
            raise SpecError(f"[[fit]] {n}: two fits share this name", file=path)
    return Spec(source=source, fits=fits, text=text, path=path)


def load(path: Path) -> Spec:
    """Read and validate a spec file."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as err:
        raise SpecError("spec file not found", file=str(path)) from err
    except UnicodeDecodeError as err:
        raise SpecError("spec file is not UTF-8 text", file=str(path)) from err
    return parse(text, path=str(path))
