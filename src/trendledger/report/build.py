"""``trendledger report``: one self-contained HTML page about one fit, with its images.

The page (``DIR/index.html``) embeds every image as a base64 PNG and carries its own
style and a small sorting script, so it opens from disk with no network; a content
security policy in the page forbids loading anything else. The same images are
written beside it as PNG files for slides and mail.

Sections: an overview of every group (two fit columns, alerting groups marked and
labelled), one panel per alerting or requested group (data, fitted line, its band,
flagged outliers, the limit and the projected crossing), the window slopes of those
groups over time, and tables: fits, alerts, and the lineage of the batches covered.

Everything is read from the store's views; a companion view the store lacks
(windows, points, crossing, alerts ...) leaves its part out with a note saying so.
"""

from __future__ import annotations

import base64
import hashlib
import html
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import duckdb
import numpy as np
import pandas as pd
from sqlglot import exp

from trendledger.errors import TrendledgerError
from trendledger.outputs import check_not_store, write_owned
from trendledger.query.output import TINY_P, is_p_value
from trendledger.spec import Fit, Spec, did_you_mean
from trendledger.version import __version__
from trendledger.views import forms
from trendledger.views.read import view_columns

if TYPE_CHECKING:
    from trendledger.report.plots import Drawn


class Store(Protocol):
    """What the report reads of an open store (a Ledger has it): this module never imports
    the Ledger, so imports point one way only."""

    path: Path
    con: duckdb.DuckDBPyConnection
    spec: Spec

    @property
    def info(self) -> dict[str, str]: ...

CAUTION = ("Statistical projection, not a safety or release decision; follow your local "
           "standards and qualified review.")
#: Name of the label column the report adds to every view it reads.
LABEL = "tl_report_group"  # the reserved prefix: no user column can take it
#: Hidden file in the report folder listing the files the report wrote there.
MARKER = ".trendledger-report"
#: Panels per image: more groups make several images rather than one giant one.
PANELS_PER_IMAGE = 12
DEFAULT_PAIR = ("slope", "r2")
#: Under the fleet section: pooling units is a decision for qualified review.
POOL_CAUTION = ("Pooling units for a shelf life is a regulated decision: the fleet view "
                "supports it, qualified review makes it.")


class ReportError(TrendledgerError):
    """The report cannot be made (matplotlib missing, an unwritable folder)."""


# -- reading the store ---------------------------------------------------------------------


def _ident(name: str) -> str:
    return exp.to_identifier(name, quoted=True).sql("duckdb")


def label_sql(group: Sequence[str]) -> str:
    """SQL for a group's label: its key values as text, joined by ' / '."""
    parts = [f"coalesce(CAST({_ident(g)} AS VARCHAR), '(null)')" for g in group]
    return parts[0] if len(parts) == 1 else "concat_ws(' / ', " + ", ".join(parts) + ")"


def _read(con: duckdb.DuckDBPyConnection, view: str, group: Sequence[str],
          labels: Sequence[str] | None = None) -> pd.DataFrame:
    """Rows of ``view`` with a label column, optionally only for the given groups."""
    label = label_sql(group)
    sql = f"SELECT *, {label} AS {_ident(LABEL)} FROM {_ident(view)}"
    if labels is None:
        return con.execute(sql).df()
    return con.execute(sql + f" WHERE list_contains($labels, {label})",
                       {"labels": list(labels)}).df()


def natural_key(text: str) -> list[Any]:
    """Sort key that puts c2 before c10."""
    return [(0, int(t), "") if t.isdigit() else (1, 0, t.lower())
            for t in re.split(r"(\d+)", text) if t]


def _num(value: Any) -> float | None:
    if value is None or value is pd.NA:
        return None
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


@dataclass
class Views:
    """Which views of the fit the store has, with their columns (empty when absent)."""

    fit: Fit
    columns: dict[str, list[str]]

    def has(self, kind: str) -> bool:
        return bool(self.columns.get(kind))

    def name(self, kind: str) -> str:
        return self.fit.view if kind == "fit" else f"{self.fit.view}_{kind}"


KINDS = ("fit", "moments", "windows", "points", "change", "bend", "crossing", "alerts", "fleet",
         "fleet_units")


def find_views(con: duckdb.DuckDBPyConnection, fit: Fit) -> Views:
    found = Views(fit, {})
    for kind in KINDS:
        found.columns[kind] = view_columns(con, found.name(kind))
    return found


# -- plain words for alert reasons ---------------------------------------------------------

#: The alerts view's reasons (sql/views/alerts.sql) in plain words.
REASONS: dict[str, str] = {
    "too_few_points": "too few points to fit a line (fewer than 3)",
    "low_r2": "the straight line explains too little of the variation (r2 below the spec's "
              "min_r2)",
    "outliers": "some readings lie far from the line (flagged by the outlier test)",
    "slope_changed": "the latest window's slope differs from the trend of all earlier data",
    "bent": "the line bent: the trend since the bend is the one that holds now",
    "crossing_soon": "the conservative (one-sided 95 %) bound of the line reaches a limit within "
                     "the horizon, or already has",
    "out_of_limits": "the line is past a limit at the latest x",
    "out_of_trend": "the latest readings lie outside the prediction interval of the line "
                    "through the earlier readings",
    "not_straight": "the readings curve: a quadratic term is significant (the line is not "
                    "straight)",
    "x_went_back": "x decreased from one reading to the next in time (a counter reset?)",
    "silent": "no readings in the latest batches while its fleet kept reporting",
    "unlike_fleet": "its slope is unlike the slopes of the other units of its fleet (z test "
                    "against their random-effects mean, Bonferroni over the fleet)",
}
#: Reasons whose detail is a projection: the alert table then carries the caution.
PROJECTIONS = frozenset({"crossing_soon", "out_of_limits"})
#: For a reason this version does not know: (pattern in the code, plain words).
REASON_GUESSES: tuple[tuple[str, str], ...] = (
    (r"r2|linear", REASONS["low_r2"]),
    (r"bend|bent|knee", REASONS["bent"]),
    (r"change|shift|break", REASONS["slope_changed"]),
    (r"outlier", REASONS["outliers"]),
    (r"limit|cross|horizon", REASONS["crossing_soon"]),
    (r"few", REASONS["too_few_points"]),
    (r"fleet|sibling", REASONS["unlike_fleet"]),
)


def plain_reason(code: Any) -> str:
    text = "" if code is None or code is pd.NA else str(code)
    if text in REASONS:
        return REASONS[text]
    for pattern, words in REASON_GUESSES:
        if re.search(pattern, text.lower()):
            return words
    return text.replace("_", " ")


# -- the report's data ---------------------------------------------------------------------


@dataclass
class Section:
    """One part of the page: a heading, images, HTML fragments and notes."""

    key: str
    title: str
    intro: str = ""
    lead: list[str] = field(default_factory=list)  # HTML shown before the images
    images: list[tuple[str, bytes, str]] = field(default_factory=list)  # file, png, alt text
    parts: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _parse_since(since: str | date | None) -> date | None:
    if since is None or isinstance(since, date):
        return since
    try:
        return date.fromisoformat(since.strip())
    except ValueError as err:
        raise ReportError(f"--since {since!r} is not a date", hint="write YYYY-MM-DD") from err


def _parse_pair(pair: str | Sequence[str] | None, columns: list[str],
                frame: pd.DataFrame) -> tuple[str, str]:
    if pair is None:
        names: list[str] = list(DEFAULT_PAIR)
    elif isinstance(pair, str):
        names = [p.strip() for p in pair.split(",") if p.strip()]
    else:
        names = [str(p).strip() for p in pair]
    if len(names) != 2:
        raise ReportError("--pair takes two fit columns, e.g. slope,r2")
    for col in names:
        if col not in columns:
            raise ReportError(f"--pair: {col!r} is not a column of the fit view",
                             hint=did_you_mean(col, columns))
        if not pd.api.types.is_numeric_dtype(frame[col]) or pd.api.types.is_bool_dtype(
                frame[col]):
            raise ReportError(f"--pair: {col!r} is not a numeric column")
    return names[0], names[1]


def _split_groups(groups: Iterable[str] | None) -> list[str]:
    out: list[str] = []
    for item in groups or []:
        for part in str(item).split(","):
            if part.strip() and part.strip() not in out:
                out.append(part.strip())
    return out


def _alerts(con: duckdb.DuckDBPyConnection, views: Views, fits: pd.DataFrame
            ) -> tuple[pd.DataFrame, str | None]:
    """The alerts (with the label column) and a note when they are a stand-in."""
    fit = views.fit
    if views.has("alerts"):
        frame = _read(con, views.name("alerts"), fit.group)
        if "reason" not in frame:
            frame["reason"] = "alert"
        # By group, the most severe reason first.
        rank = (-pd.to_numeric(frame["severity"], errors="coerce").fillna(0)
                if "severity" in frame else pd.Series(0, index=frame.index))
        order = sorted(range(len(frame)),
                       key=lambda i: (natural_key(frame[LABEL].iloc[i]), rank.iloc[i]))
        return frame.iloc[order].reset_index(drop=True), None
    floor = fit.min_r2 if fit.min_r2 is not None else 0.0
    low = fits[fits["r2"].notna() & (fits["r2"] < floor)] if "r2" in fits else fits[:0]
    frame = low[[*fit.group, LABEL]].copy()
    frame["reason"] = "low_r2"
    frame["detail"] = [f"r2 = {v:.4g}, below min_r2 = {floor:g}" for v in low["r2"]]
    note = (f"The store has no alerts view ({views.name('alerts')}); alerting groups here are "
            f"those whose r2 is below min_r2 = {floor:g} (unset: none), read from the fit view.")
    return frame, note


def _points(con: duckdb.DuckDBPyConnection, views: Views, labels: list[str]
            ) -> tuple[pd.DataFrame, str | None]:
    """x, y and an outlier flag per row of the given groups."""
    fit = views.fit
    if views.has("points"):
        frame = _read(con, views.name("points"), fit.group, labels)
        flag = next((c for c in views.columns["points"] if "outlier" in c.lower()
                     and pd.api.types.is_bool_dtype(frame[c])), None)
        frame["_outlier"] = frame[flag].fillna(False).astype(bool) if flag else False
        note = None if flag else "The points view has no outlier flag; none are marked."
        frame = frame[np.isfinite(frame["x"].astype(float)) & np.isfinite(frame["y"].astype(float))]
        return frame[[LABEL, "x", "y", "_outlier"]], note
    x, y = _ident(fit.x), _ident(fit.y)
    label = label_sql(fit.group)
    frame = con.execute(
        f"SELECT {label} AS {_ident(LABEL)}, CAST({x} AS DOUBLE) AS x, CAST({y} AS DOUBLE) AS y "
        f"FROM measurements WHERE isfinite(CAST({x} AS DOUBLE)) AND isfinite(CAST({y} AS DOUBLE)) "
        f"AND list_contains($labels, {label})",
        {"labels": labels},
    ).df()
    frame["_outlier"] = False
    return frame, (f"The store has no points view ({views.name('points')}): the data come from "
                   "the measurements table and no outliers are marked.")


def _crossings(con: duckdb.DuckDBPyConnection, views: Views, labels: list[str]
               ) -> pd.DataFrame | None:
    if not _has_limit(views.fit) or not views.has("crossing"):
        return None
    return _read(con, views.name("crossing"), views.fit.group, labels)


def _has_limit(fit: Fit) -> bool:
    return fit.limit is not None or fit.lower is not None or fit.upper is not None


def _side_that_matters(rows: pd.DataFrame) -> pd.Series:
    """Of a group's crossing rows (one per side), the side past its limit, else the side whose
    bound meets its limit first, else the first."""
    if "past" in rows and rows["past"].fillna(False).astype(bool).any():
        return rows[rows["past"].fillna(False).astype(bool)].iloc[0]
    if "cross_bound" in rows and rows["cross_bound"].notna().any():
        return rows.loc[pd.to_numeric(rows["cross_bound"]).idxmin()]
    return rows.iloc[0]


def _changes(con: duckdb.DuckDBPyConnection, views: Views, labels: list[str]
             ) -> dict[str, str]:
    """Per group, the change view's verdict on the latest window in a few words."""
    if not views.has("change") or "difference_p" not in views.columns["change"]:
        return {}
    out: dict[str, str] = {}
    frame = _read(con, views.name("change"), views.fit.group, labels)
    for label, raw in zip(frame[LABEL], frame["difference_p"], strict=True):
        p = _num(raw)
        if p is not None:
            verdict = "differs" if p < views.fit.alpha else "no clear change"
            out[label] = f"· latest window {verdict}, p = {p:.2g}"
    return out


def _lineage(con: duckdb.DuckDBPyConnection, since: date | None
             ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per batch counts taken from ingest_files, and the files that were not simply loaded."""
    cutoff = {"since": datetime.combine(since, datetime.min.time()) if since else None}
    batches = con.execute(
        """
        SELECT b.batch_id, b.started_at, b.status, b.command, b.spec_hash, b.tool_version,
               count(f.file_id) AS files,
               count(f.file_id) FILTER (WHERE f.status = 'loaded') AS loaded,
               count(f.file_id) FILTER (WHERE f.status = 'replaced') AS replaced,
               count(f.file_id) FILTER (WHERE f.status = 'rejected') AS rejected,
               count(f.file_id) FILTER (WHERE f.status = 'retracted') AS retracted,
               CAST(coalesce(sum(f.rows), 0) AS BIGINT) AS rows,
               CAST(coalesce(sum(f.rows) FILTER (WHERE f.status = 'loaded'), 0) AS BIGINT)
                   AS rows_in_store
        FROM ingest_batches AS b
        LEFT JOIN ingest_files AS f ON f.batch_id = b.batch_id
        WHERE $since IS NULL OR b.started_at >= $since
        GROUP BY ALL
        ORDER BY b.batch_id
        """,
        cutoff,
    ).df()
    odd = con.execute(
        """
        SELECT f.file_id, f.batch_id, f.path, f.status, f.rows, f.message,
               n.file_id AS replaced_by, n.batch_id AS replaced_in
        FROM ingest_files AS f
        JOIN ingest_batches AS b ON b.batch_id = f.batch_id
        LEFT JOIN ingest_files AS n ON n.replaces = f.file_id
        WHERE f.status <> 'loaded' AND ($since IS NULL OR b.started_at >= $since)
        ORDER BY f.file_id
        """,
        cutoff,
    ).df()
    return batches, odd


# -- HTML ----------------------------------------------------------------------------------


def _esc(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _is_missing(value: Any) -> bool:
    if value is None or value is pd.NA or value is pd.NaT:
        return True
    return isinstance(value, float) and math.isnan(value)


def cell(value: Any, digits: int = 6, p_value: bool = False) -> tuple[str, str]:
    """(text shown, sort value) of one table cell; a p-value of 0 underflowed float64."""
    if _is_missing(value):
        return "", ""
    if isinstance(value, bool | np.bool_):
        return ("yes" if value else "no"), ("1" if value else "0")
    if isinstance(value, int | np.integer):
        return f"{int(value)}", f"{int(value)}"
    if isinstance(value, float | np.floating):
        f = float(value)
        if not math.isfinite(f):
            return str(f), ""
        if p_value and f == 0:
            return TINY_P, repr(f)
        return f"{f:.{digits}g}", repr(f)
    if isinstance(value, pd.Timestamp | datetime):
        # A DATE column arrives as a midnight timestamp: show it as the date it is.
        midnight = (value.hour, value.minute, value.second, value.microsecond) == (0, 0, 0, 0)
        text = value.date().isoformat() if midnight else value.isoformat(sep=" ",
                                                                         timespec="seconds")
        return text, text
    if isinstance(value, date):
        return value.isoformat(), value.isoformat()
    return str(value), ""


def table(
    frame: pd.DataFrame,
    columns: Sequence[str],
    *,
    table_id: str,
    headings: dict[str, str] | None = None,
    row_class: Sequence[str] | None = None,
    row_group: Sequence[str] | None = None,
    foot: dict[str, Any] | None = None,
    html_columns: Sequence[str] = (),
    classes: dict[str, str] | None = None,
) -> str:
    """A sortable HTML table; ``html_columns`` hold ready-made (escaped) HTML."""
    classes = classes or {}
    headings = headings or {}
    out = [f'<table class="sortable" id="{_esc(table_id)}"><thead><tr>']
    for col in columns:
        out.append(f'<th scope="col" data-col="{_esc(col)}">{_esc(headings.get(col, col))}</th>')
    out.append("</tr></thead><tbody>")
    for i, rec in enumerate(frame[list(columns)].itertuples(index=False, name=None)):
        attrs = ""
        if row_class is not None and row_class[i]:
            attrs += f' class="{_esc(row_class[i])}"'
        if row_group is not None:
            attrs += f' data-group="{_esc(row_group[i])}"'
        out.append(f"<tr{attrs}>")
        for col, value in zip(columns, rec, strict=True):
            extra = classes.get(col, "")
            if col in html_columns:
                attr = f' class="{_esc(extra)}"' if extra else ""
                out.append(f"<td{attr}>{value}</td>")
                continue
            text, key = cell(value, p_value=is_p_value(col))
            numeric = key != "" and _num(key) is not None
            names = " ".join(n for n in ("num" if numeric else "", extra) if n)
            cls = f' class="{names}"' if names else ""
            sort = f' data-v="{_esc(key)}"' if key else ""
            out.append(f"<td{cls}{sort}>{_esc(text)}</td>")
        out.append("</tr>")
    out.append("</tbody>")
    if foot is not None:
        out.append('<tfoot><tr class="total">')
        for col in columns:
            text, _ = cell(foot.get(col))
            out.append(f'<td data-col="{_esc(col)}">{_esc(text)}</td>')
        out.append("</tr></tfoot>")
    out.append("</table>")
    return "".join(out)


STYLE = """
:root { --ink: #1c2430; --muted: #5b6673; --line: #d5dde6; --wash: #f4f6f8;
        --accent: #24507d; --warn: #a8430f; --warn-wash: #fbf1e8; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }
main, header.top, footer { max-width: 1180px; margin: 0 auto; padding: 0 24px; }
header.top { padding-top: 28px; padding-bottom: 8px; border-bottom: 3px solid var(--accent); }
header.top h1 { font-size: 26px; margin: 0 0 4px; font-weight: 650; }
header.top p { margin: 2px 0; color: var(--muted); }
dl.facts { display: grid; grid-template-columns: repeat(auto-fill, minmax(150px, 1fr));
           gap: 8px; margin: 16px 0 4px; }
dl.facts div { border: 1px solid var(--line); border-radius: 6px; padding: 6px 10px; }
dl.facts dt { font-size: 12px; color: var(--muted); text-transform: uppercase;
              letter-spacing: .04em; }
dl.facts dd { margin: 0; font-size: 20px; font-weight: 600; font-variant-numeric: tabular-nums; }
dl.facts div.flag { border-color: var(--warn); border-width: 2px; }
nav.toc { margin: 14px 0 0; font-size: 14px; }
nav.toc a { margin-right: 14px; color: var(--accent); }
section { margin: 34px 0; }
h2 { font-size: 20px; margin: 0 0 8px; padding-left: 10px; border-left: 5px solid var(--accent); }
h3 { font-size: 16px; margin: 22px 0 6px; }
p.intro { margin: 4px 0 12px; max-width: 70em; }
p.note { color: var(--muted); font-size: 14px; margin: 6px 0; padding-left: 10px;
         border-left: 2px solid var(--line); }
figure { margin: 12px 0; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--line); }
figcaption { font-size: 13px; color: var(--muted); }
div.caution { border: 2px solid var(--warn); background: var(--warn-wash); padding: 8px 12px;
              border-radius: 4px; margin: 10px 0; max-width: 70em; }
div.caution strong { color: var(--warn); text-transform: uppercase; letter-spacing: .05em;
                     margin-right: 6px; }
.scroll { overflow-x: auto; max-height: 560px; overflow-y: auto; border: 1px solid var(--line); }
table { border-collapse: collapse; font-size: 13px; width: 100%; }
th, td { padding: 3px 9px; text-align: left; border-bottom: 1px solid var(--line);
         white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
thead th { position: sticky; top: 0; background: var(--wash); font-weight: 600; z-index: 1; }
thead th button { all: unset; cursor: pointer; }
thead th button:focus-visible { outline: 2px solid var(--accent); }
th[aria-sort="ascending"] button::after { content: " \\25B2"; }
th[aria-sort="descending"] button::after { content: " \\25BC"; }
tbody tr:nth-child(even) { background: #fafbfc; }
tr.alert td:first-child { border-left: 4px solid var(--warn); font-weight: 650; }
tr.total td { font-weight: 650; border-top: 2px solid var(--ink); }
td.reason { white-space: normal; min-width: 22em; }
td.reason code, td.detail { color: var(--muted); }
td.detail { white-space: normal; }
footer { margin-top: 40px; padding-top: 10px; padding-bottom: 30px;
         border-top: 1px solid var(--line); color: var(--muted); font-size: 13px; }
footer code { color: var(--ink); word-break: break-all; }
"""

#: Click a header to sort by that column; the script marks the page when it has run.
SCRIPT = """
(function () {
  "use strict";
  function key(td) {
    var v = td.getAttribute("data-v");
    if (v === null || v === "") {
      var t = td.textContent.trim();
      return t === "" ? null : { n: false, v: t.toLowerCase() };
    }
    var f = Number(v);
    return isNaN(f) ? { n: false, v: v.toLowerCase() } : { n: true, v: f };
  }
  function sortBy(table, col, th) {
    var body = table.tBodies[0];
    var up = th.getAttribute("aria-sort") !== "ascending";
    var rows = Array.prototype.slice.call(body.rows);
    var keyed = rows.map(function (row, i) { return { row: row, i: i, k: key(row.cells[col]) }; });
    keyed.sort(function (a, b) {
      if (a.k === null || b.k === null) {
        return a.k === b.k ? a.i - b.i : (a.k === null ? 1 : -1);
      }
      var d;
      if (a.k.n && b.k.n) { d = a.k.v - b.k.v; }
      else if (a.k.n !== b.k.n) { d = a.k.n ? -1 : 1; }
      else { d = a.k.v < b.k.v ? -1 : (a.k.v > b.k.v ? 1 : 0); }
      return (up ? d : -d) || a.i - b.i;
    });
    keyed.forEach(function (item) { body.appendChild(item.row); });
    Array.prototype.forEach.call(th.parentNode.cells, function (other) {
      other.removeAttribute("aria-sort");
    });
    th.setAttribute("aria-sort", up ? "ascending" : "descending");
  }
  var tables = document.querySelectorAll("table.sortable");
  Array.prototype.forEach.call(tables, function (table) {
    if (!table.tHead || !table.tBodies.length) { return; }
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, col) {
      var button = document.createElement("button");
      button.type = "button";
      button.title = "sort by this column";
      while (th.firstChild) { button.appendChild(th.firstChild); }
      th.appendChild(button);
      button.addEventListener("click", function () { sortBy(table, col, th); });
    });
  });
  document.documentElement.setAttribute("data-report-script", "ready");
})();
"""


def _img(file: str, png: bytes, alt: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{_esc(alt)}">'
            f'<figcaption>{_esc(alt)} Also saved as <a href="{_esc(file)}">{_esc(file)}</a>.'
            "</figcaption></figure>")


def page(title: str, head: str, sections: list[Section], footer: str) -> str:
    """The whole document; the policy allows only inline style, this script and data: images."""
    digest = base64.b64encode(hashlib.sha256(SCRIPT.encode("utf-8")).digest()).decode("ascii")
    policy = ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
              f"script-src 'sha256-{digest}'; base-uri 'none'; form-action 'none'")
    body: list[str] = []
    for s in sections:
        body.append(f'<section id="{_esc(s.key)}"><h2>{_esc(s.title)}</h2>')
        if s.intro:
            body.append(f'<p class="intro">{s.intro}</p>')
        body.extend(s.lead)
        body.extend(_img(f, png, alt) for f, png, alt in s.images)
        body.extend(s.parts)
        body.extend(f'<p class="note">{_esc(n)}</p>' for n in s.notes)
        body.append("</section>")
    toc = "".join(f'<a href="#{_esc(s.key)}">{_esc(s.title)}</a>' for s in sections)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{_esc(policy)}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta name="generator" content="trendledger ' + _esc(__version__) + '">'
        '<link rel="icon" href="data:,">'
        f"<title>{_esc(title)}</title><style>{STYLE}</style></head><body>"
        f'<header class="top">{head}<nav class="toc">{toc}</nav></header>'
        f"<main>{''.join(body)}</main><footer>{footer}</footer>"
        f"<script>{SCRIPT}</script></body></html>\n"
    )


# -- building ------------------------------------------------------------------------------


def _chunks(items: list[Any], size: int) -> list[list[Any]]:
    return [items[i:i + size] for i in range(0, len(items), size)] or [[]]


def _plots() -> Any:
    try:
        from trendledger.report import plots
    except ImportError as err:  # matplotlib is an optional extra
        raise ReportError("the report needs matplotlib",
                          hint="pip install 'trendledger[report]'") from err
    return plots


def _subtitle(reasons: dict[str, list[str]], name: str) -> str:
    codes = reasons.get(name)
    if not codes:
        return "(asked for)"
    return "· " + ", ".join(dict.fromkeys(codes))


def build(
    led: Store,
    out: str | Path,
    *,
    name: str | None = None,
    since: str | date | None = None,
    groups: Iterable[str] | None = None,
    pair: str | Sequence[str] | None = None,
    force: bool = False,
) -> Path:
    """Write ``out/index.html`` and the PNG images beside it; returns the page's path.

    The folder may be new, or hold other files: a file of the same name that an
    earlier report did not write is refused unless ``force`` (see ``outputs``).
    """
    check_not_store(Path(out), led.path, "the report")
    plots = _plots()
    fit = led.spec.fit(name)
    con = led.con
    since_day = _parse_since(since)
    views = find_views(con, fit)
    fits = _read(con, fit.view, fit.group)
    fits = fits.iloc[sorted(range(len(fits)), key=lambda i: natural_key(fits[LABEL].iloc[i]))]
    fits = fits.reset_index(drop=True)
    y_col, x_col = _parse_pair(pair, views.columns["fit"], fits)
    labels = list(fits[LABEL])
    asked = _split_groups(groups)
    for g in asked:
        if g not in labels:
            raise ReportError(f"--groups: fit {fit.name!r} has no group {g!r}",
                             hint=did_you_mean(g, labels))
    alerts, alert_note = _alerts(con, views, fits)
    reasons: dict[str, list[str]] = {}
    for lab, code in zip(alerts[LABEL], alerts["reason"], strict=True):
        reasons.setdefault(lab, []).append(str(code))
    # A group the alerts name but the fit view lacks is listed in the table, not drawn.
    alerting = sorted((g for g in reasons if g in set(labels)), key=natural_key)
    detail = alerting + [g for g in sorted(asked, key=natural_key) if g not in reasons]
    fleet_units = (_read(con, views.name("fleet_units"), fit.group)
                   if views.has("fleet_units") else None)
    unlike = ([] if fleet_units is None
              else list(fleet_units.loc[fleet_units["unlike"].fillna(False).astype(bool),
                                        LABEL]))

    target = Path(out)
    sections: list[Section] = []
    images: dict[str, bytes] = {}

    def keep(file: str, drawn: Drawn) -> bytes:
        images[file] = drawn.png()
        drawn.figure.clear()
        return images[file]

    # 1. overview
    over = Section("overview", "Overview",
                   f"Every group of fit <b>{_esc(fit.name)}</b> as one point: "
                   f"<b>{_esc(y_col)}</b> against <b>{_esc(x_col)}</b>. Alerting groups are "
                   "orange diamonds with their names; groups asked for are blue squares; "
                   "units whose slope is unlike their fleet's are ringed.")
    plotted = fits[fits[x_col].notna() & fits[y_col].notna()]
    if len(plotted) < len(fits):
        over.notes.append(f"{len(fits) - len(plotted)} group(s) have no {x_col} or {y_col} "
                          "(see their status in the fits table) and are not plotted.")
    if len(plotted):
        ref: tuple[float, str] | None = None
        if x_col == "r2" and fit.min_r2 is not None:
            ref = (fit.min_r2, f"min_r2 {fit.min_r2:g}")
        drawn = plots.overview(
            plotted[x_col].astype(float), plotted[y_col].astype(float), list(plotted[LABEL]),
            alerting=alerting, chosen=asked, unlike=unlike, x_title=x_col, y_title=y_col,
            x_line=ref,
            title=f"{fit.name}: {fit.shown('y')} against {fit.shown('x')}, "
                  f"per {', '.join(fit.group)}")
        unplaced = drawn.unplaced
        over.images.append(("overview.png", keep("overview.png", drawn),
                            f"{y_col} against {x_col} for {len(plotted)} groups, "
                            f"{len(alerting)} alerting."))
        if unplaced:
            over.notes.append("No room to label: " + ", ".join(unplaced) + ".")
    else:
        over.notes.append("No group has values to plot yet.")
    if alert_note:
        over.notes.append(alert_note)
    sections.append(over)

    # 2. one panel per alerting or requested group
    panels_sec = Section("groups", "Alerting groups",
                         "Each alerting group (and each group asked for with --groups): the "
                         f"data, the fitted line with its {fit.level * 100:g} % confidence band "
                         "of the mean line, flagged outliers, and where a limit is set the "
                         "limit and the projected crossing with its interval.")
    crossing = _crossings(con, views, detail) if detail else None
    if not detail:
        panels_sec.notes.append("No group raised an alert and none was asked for.")
    else:
        points, point_note = _points(con, views, detail)
        if point_note:
            panels_sec.notes.append(point_note)
        moments = (_read(con, views.name("moments"), fit.group, detail)
                   if views.has("moments") else None)
        bends = (_read(con, views.name("bend"), fit.group, detail)
                 if views.has("bend") else None)
        trend = (_read(con, views.name("trend"), fit.group, detail)
                 if views.has("trend") else None)
        items = [_panel_data(fit, fits, points, moments, crossing, g,
                             _subtitle(reasons, g), bends, trend) for g in detail]
        for i, chunk in enumerate(_chunks(items, PANELS_PER_IMAGE)):
            file = "groups.png" if len(items) <= PANELS_PER_IMAGE else f"groups-{i + 1}.png"
            # drawn on the fit's scale (ln(y) ...), axes named so, the limit taken there too
            drawn = plots.panels(chunk, x_title=fit.shown("x"), y_title=fit.shown("y"),
                                 level=fit.level)
            panels_sec.images.append((file, keep(file, drawn),
                                      f"{fit.shown('y')} against {fit.shown('x')} for "
                                      + ", ".join(p.name for p in chunk) + "."))
        if _has_limit(fit):
            panels_sec.lead.append(f'<div class="caution"><strong>Caution</strong>'
                                   f"{_esc(CAUTION)}</div>")
            if crossing is None:
                panels_sec.notes.append(
                    f"The store has no crossing view ({views.name('crossing')}): no limit is "
                    "drawn and no crossing is projected.")
            else:
                crossing = crossing.copy()
                # beside the projection from the line that holds now, the whole history's
                by_label = fits.set_index(LABEL)
                crossing["whole_cross_x"] = [
                    _x_units(fit, _whole_cross(fit, by_label.loc[g]))
                    if g in by_label.index else None
                    for g in crossing[LABEL]]
                cols = [*fit.group, *(c for c in ("side", "limit_value", "cross_x", "cross_lo",
                                                   "cross_hi", "cross_bound", "extrapolation_end",
                                                   "basis", "from_x", "whole_cross_x", "note")
                                      if c in crossing)]
                what = (f"the limit {fit.limit:g}" if fit.limit is not None
                        else "the limits, per side")
                panels_sec.parts.append(
                    f"<h3>Projected crossing of {what}"
                    + (f" ({_esc(fit.y)}'s own units; the panels draw it as "
                       f"{_esc(fit.shown('y'))}, the crossings below are in {_esc(fit.x)}'s "
                       "own units)" if fit.x_form or fit.y_form else "") + "</h3>"
                    '<div class="scroll">' + table(crossing, cols, table_id="crossing")
                    + "</div>")
    sections.append(panels_sec)

    # 3. slope history
    hist = Section("history", "Slope history",
                   "The slope of each window with its interval, against the slope of the whole "
                   "history (dashed, with its interval shaded). Windows whose interval misses "
                   "the whole-history slope are orange squares: the trend has changed there. "
                   "Where the store has a change view, each title says whether the latest "
                   "window's slope differs from the line through all earlier data (p against "
                   "the fit's alpha).")
    if not views.has("windows"):
        hist.notes.append(f"The store has no windows view ({views.name('windows')}); set "
                          "window or window_x in the fit to get one.")
    elif not detail:
        hist.notes.append("No group to show.")
    else:
        windows = _read(con, views.name("windows"), fit.group, detail)
        if since_day is not None and not pd.api.types.is_numeric_dtype(windows["window_end"]):
            # window_end is the first day after the window
            windows = windows[pd.to_datetime(windows["window_end"]) > pd.Timestamp(since_day)]
            hist.notes.append(f"Windows with days on or after {since_day.isoformat()}.")
        by_label = fits.set_index(LABEL)
        change = _changes(con, views, detail)
        entries = []
        for g in detail:
            w = windows[windows[LABEL] == g].sort_values("window_start")
            entries.append(plots.History(
                g, w, _num(by_label.at[g, "slope"]), _num(by_label.at[g, "slope_lo"]),
                _num(by_label.at[g, "slope_hi"]), change.get(g, "")))
        unit = "date" if not pd.api.types.is_numeric_dtype(windows["window_start"]) else fit.x
        for i, chunk in enumerate(_chunks(entries, PANELS_PER_IMAGE)):
            file = "history.png" if len(entries) <= PANELS_PER_IMAGE else f"history-{i + 1}.png"
            drawn = plots.history(chunk, x_title=unit, y_title=f"slope of {fit.shown('y')}")
            hist.images.append((file, keep(file, drawn), "Window slopes for "
                                + ", ".join(h.name for h in chunk) + "."))
    sections.append(hist)

    # 4. fleets
    sections.append(_fleet_section(con, views, fleet_units, plots, keep))

    # 5. tables
    sections.append(_alert_section(fit, alerts, alert_note))
    sections.append(_fits_section(fit, fits, reasons, (y_col, x_col)))
    batches, odd = _lineage(con, since_day)
    sections.append(_lineage_section(batches, odd, since_day))

    index = target / "index.html"
    head = _head(led, fit, fits, alerting, batches, since_day)
    html = page(f"trendledger report: {fit.name}", head, sections, _footer(led, views, batches))
    # Images of an earlier report in the same folder would no longer match the page: the
    # marker lists what that report wrote, and only those files are replaced or removed.
    write_owned(target, {**images, index.name: html.encode("utf-8")}, led.path,
                        force=force, marker=MARKER, what="the report")
    return index


#: At most this many fleets are drawn (the table lists every fleet).
FLEETS_DRAWN = 6
#: Columns of the fleet view shown in the report, in order.
FLEET_COLUMNS = ("units", "slope_fixed", "slope_mean", "slope_tau", "slope_q_p", "slope_i2",
                 "same_slope_p", "same_intercept_p", "pool", "pooled_slope", "pooled_cross_x",
                 "pooled_cross_bound", "note")


def _fleet_section(con: duckdb.DuckDBPyConnection, views: Views,
                   units: pd.DataFrame | None, plots: Any,
                   keep: Any) -> Section:
    """Each fleet: its units' slopes against the fleet band, and the fleet view's table."""
    fit = views.fit
    sec = Section("fleets", "Fleets",
                  "Each unit's slope with its interval against the other units of its fleet "
                  "(units sharing the fit's fleet columns; every unit when it names none): the "
                  "dashed line is the fleet's random-effects mean slope, the shaded band the "
                  "mean \u00b1 1.96 tau, where the slopes of 95 % of units like these would "
                  "lie. Orange squares are units unlike their fleet (z test against the others' "
                  f"mean, Bonferroni over the fleet at alpha {fit.alpha:g}). The table gives "
                  "the poolability tests of ICH Q1E and, where they allow it, the pooled line.")
    if units is None or not views.has("fleet"):
        sec.notes.append(f"The store has no fleet views ({views.name('fleet')}); run "
                         "`trendledger spec update` with this version to install them.")
        return sec
    sec.lead.append(f'<div class="caution"><strong>Caution</strong>{_esc(POOL_CAUTION)}</div>')
    keys = list(fit.fleet)
    fleets = (_read(con, views.name("fleet"), keys) if keys
              else con.execute(f"SELECT *, 'all units' AS {_ident(LABEL)} "
                               f"FROM {_ident(views.name('fleet'))}").df())
    fleets = fleets.sort_values(LABEL, key=lambda c: c.map(natural_key)).reset_index(drop=True)
    fleet_label = (units[keys].astype(str).agg(" / ".join, axis=1) if keys
                   else pd.Series("all units", index=units.index))
    fit_rows = _read(con, fit.view, fit.group).set_index(LABEL)
    items = []
    for _, row in fleets.head(FLEETS_DRAWN).iterrows():
        mine = units[fleet_label == row[LABEL]]
        frame = pd.DataFrame({
            "name": mine[LABEL].to_numpy(),
            "slope": mine["slope"].to_numpy(float),
            "slope_lo": fit_rows.loc[mine[LABEL], "slope_lo"].to_numpy(float),
            "slope_hi": fit_rows.loc[mine[LABEL], "slope_hi"].to_numpy(float),
            "unlike": mine["unlike"].to_numpy(),
        })
        items.append(plots.Fleet(str(row[LABEL]), frame, _num(row["slope_mean"]),
                                 _num(row["slope_tau"])))
    if items:
        drawn = plots.fleet(items, y_title=f"slope of {fit.shown('y')}")
        sec.images.append(("fleets.png", keep("fleets.png", drawn),
                           "Unit slopes against their fleet for "
                           + ", ".join(f.name for f in items) + "."))
    if len(fleets) > FLEETS_DRAWN:
        sec.notes.append(f"{len(fleets)} fleets; the first {FLEETS_DRAWN} are drawn.")
    flagged = units[units["unlike"].fillna(False).astype(bool)]
    if not flagged.empty:
        cols = [*fit.group, *(c for c in ("slope", "fleet_slope", "fleet_tau", "slope_z",
                                           "slope_z_p", "slope_shrunk") if c in flagged)]
        sec.parts.append("<h3>Units unlike their fleet</h3>"
                         '<div class="scroll">' + table(flagged, cols, table_id="unlike")
                         + "</div>")
    cols = [*keys, *(c for c in FLEET_COLUMNS if c in fleets.columns)]
    sec.parts.append("<h3>Fleets</h3>"
                     '<div class="scroll">' + table(fleets, cols, table_id="fleets") + "</div>")
    return sec


def _whole_cross(fit: Fit, row: pd.Series) -> float | None:
    """Where the whole-history line reaches the limit (a point estimate, for comparison), on
    the fit's scale (the limit taken through y's form)."""
    slope, intercept = _num(row.get("slope")), _num(row.get("intercept"))
    limit = forms.forward(fit.y_form, fit.limit)
    if limit is None or not slope or intercept is None:
        return None
    return (limit - intercept) / slope


def _x_units(fit: Fit, u: float | None) -> float | None:
    """A value on the fit's x scale back in x's own units (the inverse of x's form)."""
    if u is None or fit.x_form is None:
        return u
    if fit.x_form == "ln":
        return math.exp(u) if u < 709 else None
    if fit.x_form == "log10":
        return 10.0 ** u if u < 308 else None
    if fit.x_form == "sqrt":
        return u * u if u >= 0 else None
    return 1.0 / u if u != 0 else None


def _bend_data(fit: Fit, bends: pd.DataFrame | None, name: str) -> Any:
    from trendledger.report.plots import Bend

    if bends is None:
        return None
    rows = bends[bends[LABEL] == name]
    if not len(rows) or not (_num(rows["bends"].iloc[0]) or 0) > 0:
        return None
    r = rows.iloc[0]
    values = [_num(r.get(c)) for c in ("bend_x", "slope", "intercept", "centre_x", "centre_se",
                                        "slope_se")]
    if any(v is None for v in values):
        return None
    se, hi, slope = _num(r.get("slope_se")), _num(r.get("slope_hi")), _num(r.get("slope"))
    t = (hi - slope) / se if se and hi is not None and slope is not None else None
    x, slope_now, intercept, centre_x, centre_se, slope_se = (float(v) for v in values)  # type: ignore[arg-type]
    return Bend(x, slope_now, intercept, centre_x, centre_se, slope_se, t)


def _panel_data(fit: Fit, fits: pd.DataFrame, points: pd.DataFrame,
                moments: pd.DataFrame | None, crossing: pd.DataFrame | None, name: str,
                subtitle: str, bends: pd.DataFrame | None = None,
                trend: pd.DataFrame | None = None) -> Any:
    from trendledger.report.plots import Crossing, Panel

    row = fits[fits[LABEL] == name].iloc[0]
    mine = points[points[LABEL] == name]
    x = mine["x"].to_numpy(float)
    y = mine["y"].to_numpy(float)
    x_mean = sxx = None
    if moments is not None and "x_mean" in moments and "sxx" in moments:
        m = moments[moments[LABEL] == name]
        if len(m):
            x_mean, sxx = _num(m["x_mean"].iloc[0]), _num(m["sxx"].iloc[0])
    if (x_mean is None or sxx is None) and len(x):
        x_mean = float(np.mean(x))
        sxx = float(np.sum((x - x_mean) ** 2))
    slope, se, hi = _num(row.get("slope")), _num(row.get("slope_se")), _num(row.get("slope_hi"))
    # The fit's own t quantile, recovered from its interval: slope_hi = slope + t * slope_se.
    t = (hi - slope) / se if slope is not None and se and hi is not None else None
    cross = None
    limit = forms.forward(fit.y_form, fit.limit)  # drawn on the fit's scale
    other: float | None = None
    beyond = np.zeros(len(x), dtype=bool)
    if crossing is not None:
        c = crossing[crossing[LABEL] == name]
        if len(c):
            # the side that matters is drawn with its projection (a relative limit is the
            # unit's own), the other side's limit beside it
            r = _side_that_matters(c)
            limit = _num(r.get("limit_value")) if "limit_value" in r else limit
            for _, side in c.iterrows():
                value = _num(side.get("limit_value"))
                if value is None or "side" not in side:
                    continue
                beyond |= (y < value) if side["side"] == "lower" else (y > value)
                if side["side"] != r.get("side"):
                    other = value
            # the crossing view answers in x's own units; the panel is on the fit's scale
            ends = [forms.forward(fit.x_form, _num(r.get(k)))
                    for k in ("cross_x", "cross_lo", "cross_hi", "cross_bound")]
            if fit.x_form == "reciprocal":
                ends[1], ends[2] = ends[2], ends[1]
            cross = Crossing(ends[0], ends[1], ends[2], ends[3],
                             None if _is_missing(r.get("note")) else str(r["note"]))
    return Panel(
        name=name, x=x, y=y, outlier=mine["_outlier"].to_numpy(bool), slope=slope,
        intercept=_num(row.get("intercept")), resid_sd=_num(row.get("resid_sd")),
        n=int(row["n"]) if not _is_missing(row.get("n")) else len(x), x_mean=x_mean, sxx=sxx,
        t=t, through_origin=fit.through_origin, limit=limit, crossing=cross,
        subtitle=subtitle, bend=_bend_data(fit, bends, name),
        whole_cross=_whole_cross(fit, row), other_limit=other, beyond=beyond,
        off_trend=_off_trend(trend, name, x, y))


def _off_trend(trend: pd.DataFrame | None, name: str, x: np.ndarray,
               y: np.ndarray) -> np.ndarray:
    """Which of a group's readings the trend view finds outside the prediction interval of
    the earlier line (its rows are the latest batch's; matched by x and y)."""
    out = np.zeros(len(x), dtype=bool)
    if trend is None or "outside" not in trend:
        return out
    t = trend[(trend[LABEL] == name) & trend["outside"].fillna(False).astype(bool)]
    for tx, ty in zip(t["x"].to_numpy(float), t["y"].to_numpy(float), strict=True):
        out |= (x == tx) & (y == ty)
    return out


def _alert_section(fit: Fit, alerts: pd.DataFrame, note: str | None) -> Section:
    sec = Section("alerts", "Alerts",
                  f"{alerts[LABEL].nunique()} group(s), {len(alerts)} alert(s). The reason is "
                  "given in plain words, with the view's code beside it.")
    if note:
        sec.notes.append(note)
    if alerts.empty:
        sec.parts.append("<p>No alerts.</p>")
        return sec
    if alerts["reason"].astype(str).isin(PROJECTIONS).any():
        sec.lead.append(f'<div class="caution"><strong>Caution</strong>{_esc(CAUTION)}</div>')
    frame = alerts.copy()
    frame["_why"] = [f"{_esc(plain_reason(c))} <code>{_esc(c)}</code>" for c in frame["reason"]]
    shown = [c for c in frame.columns if c not in {LABEL, "_why", "reason", *fit.group}]
    cols = [*fit.group, "_why", *shown]
    body = table(frame, cols, table_id="alerts", headings={"_why": "reason"},
                 row_group=list(frame[LABEL]), html_columns=("_why",),
                 classes={"_why": "reason", "detail": "detail"})
    sec.parts.append('<div class="scroll">' + body + "</div>")
    return sec


def _fits_section(fit: Fit, fits: pd.DataFrame, reasons: dict[str, list[str]],
                  pair: tuple[str, str]) -> Section:
    sec = Section("fits", "Fits",
                  f"Every group of fit <b>{_esc(fit.name)}</b>: {_esc(fit.y)} against "
                  f"{_esc(fit.x)}, intervals at {fit.level * 100:g} %. Click a heading to "
                  "sort; alerting groups are marked in the first column and in bold.")
    preferred = ["n", "slope", "slope_lo", "slope_hi", "intercept", "r2", "resid_sd", "slope_p",
                 "status"]
    if fit.through_origin:
        preferred.remove("intercept")
    cols = [*fit.group, "_alert", *(c for c in preferred if c in fits.columns)]
    cols += [c for c in pair if c not in cols]
    frame = fits.copy()
    frame["_alert"] = ["alert" if lab in reasons else "" for lab in frame[LABEL]]
    sec.parts.append('<div class="scroll">' + table(
        frame, cols, table_id="fits", headings={"_alert": "alert"},
        row_class=["alert" if lab in reasons else "" for lab in frame[LABEL]],
        row_group=list(frame[LABEL])) + "</div>")
    return sec


def _lineage_section(batches: pd.DataFrame, odd: pd.DataFrame, since: date | None) -> Section:
    covered = f"started on or after {since.isoformat()} (UTC)" if since else "in the store"
    sec = Section("lineage", "Lineage",
                  f"The {len(batches)} batch(es) {covered}, counted from the file lineage "
                  "(<code>ingest_files</code>): every file each batch recorded, by what became "
                  "of it, and its rows.")
    frame = batches.copy()
    frame["spec"] = [str(h)[:12] for h in frame["spec_hash"]]
    cols = ["batch_id", "started_at", "status", "files", "loaded", "replaced", "rejected",
            "retracted", "rows", "rows_in_store", "spec", "tool_version", "command"]
    sums = {c: int(frame[c].sum()) for c in ("files", "loaded", "replaced", "rejected",
                                            "retracted", "rows", "rows_in_store")}
    foot = {"batch_id": "total", **sums}
    headings = {"rows_in_store": "rows stored", "tool_version": "tool", "started_at":
                "started (UTC)"}
    sec.parts.append('<div class="scroll">' + table(frame, cols, table_id="lineage-batches",
                                                     headings=headings, foot=foot) + "</div>")
    rejected = odd[odd["status"] == "rejected"]
    sec.parts.append(f"<h3>Rejected files ({len(rejected)})</h3>")
    if len(rejected):
        sec.parts.append('<div class="scroll">' + table(
            rejected, ["batch_id", "path", "message"], table_id="lineage-rejected",
            headings={"message": "why"}) + "</div>")
    else:
        sec.parts.append("<p>None.</p>")
    other = odd[odd["status"] != "rejected"].copy()
    if len(other):
        other["what"] = [_fate(r) for r in other.itertuples(index=False)]
        sec.parts.append(f"<h3>Replaced or retracted files ({len(other)})</h3>")
        sec.parts.append('<div class="scroll">' + table(
            other, ["file_id", "batch_id", "path", "status", "rows", "what"],
            table_id="lineage-changed") + "</div>")
    return sec


def _fate(r: Any) -> str:
    if r.status == "replaced" and not _is_missing(r.replaced_by):
        return f"replaced by file {int(r.replaced_by)} in batch {int(r.replaced_in)}"
    return "" if _is_missing(r.message) else str(r.message)


def _head(led: Store, fit: Fit, fits: pd.DataFrame, alerting: list[str], batches: pd.DataFrame,
          since: date | None) -> str:
    made = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    last = batches["started_at"].max() if len(batches) else None
    facts = [
        ("groups", str(len(fits)), False),
        ("alerting", str(len(alerting)), bool(alerting)),
        ("batches", str(len(batches)), False),
        ("files loaded", str(int(batches["loaded"].sum())) if len(batches) else "0", False),
        ("files rejected", str(int(batches["rejected"].sum())) if len(batches) else "0",
         bool(len(batches) and batches["rejected"].sum())),
        ("rows stored", f"{int(batches['rows_in_store'].sum()):,}" if len(batches) else "0",
         False),
    ]
    cells = "".join(f'<div{" class=flag" if flag else ""}><dt>{_esc(k)}</dt><dd>{_esc(v)}</dd>'
                    "</div>" for k, v, flag in facts)
    scope = f"batches since {since.isoformat()}" if since else "all batches"
    latest = f"; latest batch started {cell(last)[0]} UTC" if last is not None else ""
    return (f"<h1>Trend report: {_esc(fit.name)}</h1>"
            f"<p>{_esc(fit.y)} against {_esc(fit.x)} per {_esc(', '.join(fit.group))}; "
            f"made {made}; lineage of {scope}{_esc(latest)}.</p>"
            f'<dl class="facts">{cells}</dl>')


def _footer(led: Store, views: Views, batches: pd.DataFrame) -> str:
    info = led.info
    used = [views.name(k) for k in KINDS if views.has(k)]
    hashes = dict(led.con.execute("SELECT name, sql_hash FROM tl_views").fetchall())
    view_text = ", ".join(v + (f" (sql sha256 {str(hashes[v])[:12]})" if hashes.get(v) else "")
                          for v in used)
    last = int(batches["batch_id"].max()) if len(batches) else None
    return (
        f"<p>Store <code>{_esc(Path(led.path).resolve())}</code>; spec sha256 "
        f"<code>{_esc(info.get('spec_hash', led.spec.digest))}</code>; schema "
        f"{_esc(info.get('schema_version', '?'))}; made by trendledger "
        f"<code>{_esc(__version__)}</code>"
        + (f"; last batch in this report: {last}" if last is not None else "") + ".</p>"
        f"<p>Views read: {_esc(view_text)}.</p>"
        "<p>This page is self-contained: it loads nothing from the network.</p>"
    )
