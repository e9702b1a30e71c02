"""Format DataFrames for the terminal and for files: table, csv, json, markdown."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import TrendledgerError, first_line, printable
from trendledger.outputs import check_file
from trendledger.outputs import write_file as write_output

FORMATS = ("table", "csv", "json", "markdown")
#: Widest text cell in a terminal table.
WIDEST = 60


#: How a p-value too small for float64 (stored as 0) reads in a table.
TINY_P = "< 1e-300"


def is_p_value(column: str) -> bool:
    """Columns holding p-values: ``p`` and names ending in ``_p`` (slope_p, bend_p ...)."""
    return column == "p" or column.endswith("_p")


def _cell(value: Any, digits: int, p_value: bool = False) -> str:
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        if p_value and value == 0:
            return TINY_P  # below float64's range, not an exact zero
        return f"{value:.{digits}g}"
    return str(value)


def _plain(value: Any) -> Any:
    """A JSON-ready scalar; NULL stays null, floats keep every digit."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float) and math.isnan(value):
        return None
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if hasattr(value, "item"):
        return value.item()
    return value


def rows(df: pd.DataFrame) -> list[dict[str, Any]]:
    return [
        {col: _plain(v) for col, v in zip(df.columns, rec, strict=True)}
        for rec in df.itertuples(index=False, name=None)
    ]


def render(df: pd.DataFrame, fmt: str = "table", digits: int = 6, *,
           escape: bool = True) -> str:
    """Text for ``df`` in one of FORMATS. Tables round to ``digits``; csv and json do not.

    With ``escape`` (for a terminal) control characters in names and values are
    shown escaped (see ``errors.printable``); JSON escapes them itself.
    """
    if fmt == "csv":
        text = str(df.to_csv(index=False, float_format="%.17g"))
        return "\n".join(printable(line) for line in text.split("\n")) if escape else text
    if fmt == "json":
        return json.dumps(rows(df), indent=1, default=str) + "\n"
    header = [str(c) for c in df.columns]
    tiny = [is_p_value(h) for h in header]
    cells = [[_cell(v, digits, t) for v, t in zip(rec, tiny, strict=True)]
             for rec in df.itertuples(index=False, name=None)]
    if escape:
        cells = [[printable(c) for c in row] for row in cells]
        header = [printable(h) for h in header]
    if fmt == "table":
        # a terminal table stays readable: long text is cut (csv and json keep it whole)
        cells = [[c if len(c) <= WIDEST else c[: WIDEST - 1] + "…" for c in row] for row in cells]
    if fmt == "markdown":
        lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
        lines += ["| " + " | ".join(c.replace("|", "\\|") for c in row) + " |" for row in cells]
        return "\n".join(lines) + "\n"
    if fmt != "table":
        raise ValueError(f"unknown format {fmt!r}")
    widths = [len(h) for h in header]
    for row in cells:
        widths = [max(w, len(c)) for w, c in zip(widths, row, strict=True)]
    numeric = [pd.api.types.is_numeric_dtype(df[c]) for c in df.columns]

    def line(values: list[str]) -> str:
        parts = [v.rjust(w) if num else v.ljust(w)
                 for v, w, num in zip(values, widths, numeric, strict=True)]
        return "  ".join(parts).rstrip()

    out = [line(header), line(["-" * w for w in widths])]
    out += [line(row) for row in cells]
    if not cells:
        out.append("(no rows)")
    return "\n".join(out) + "\n"


def parse_value(raw: str) -> Any:
    """A --param value: an integer or decimal number as a number, quoted text as text."""
    text = raw.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "'\"":
        return text[1:-1]
    if re.fullmatch(r"[+-]?\d+", text):
        return int(text)
    if re.fullmatch(r"[+-]?(\d+\.\d*|\.\d+|\d+)([eE][+-]?\d+)?", text):
        return float(text)
    return raw


def check_target(path: Path, store: Path | None, *, force: bool = False) -> None:
    """Refuse an --out path before the query runs: the store, a folder, an existing file."""
    check_file(path, store, force=force, what="the result")


def write_file(df: pd.DataFrame, path: Path, fmt: str, *, store: Path | None = None,
               force: bool = False) -> None:
    """Write a result to ``path`` as ``fmt`` (a text format, or parquet).

    Never onto the store, never through a link, never over an existing file
    unless ``force`` (see :mod:`trendledger.outputs`); a path that cannot be
    written is a one-line error naming it.
    """
    def writer(scratch: Path) -> None:
        try:
            if fmt == "parquet":
                write_parquet(df, scratch)
            else:
                scratch.write_text(render(df, fmt, escape=False), encoding="utf-8")
        except duckdb.IOException as err:
            raise TrendledgerError(f"cannot write the result: {first_line(err)}",
                                   file=str(path)) from err

    write_output(path, store, writer, force=force, what="the result")


def write_parquet(df: pd.DataFrame, path: Path) -> None:
    """Write a result as Parquet with DuckDB's own writer (no extra dependency)."""
    con = duckdb.connect()
    try:
        con.from_df(df).write_parquet(str(path))
    finally:
        con.close()
