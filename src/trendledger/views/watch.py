"""Today's alerts and the break test: read the per-fit views, order, print, decide the exit code.

The statistics live in SQL (``sql/views/alerts.sql``, ``change.sql``, ``points.sql``,
``crossing.sql``, ``break.sql``); this module only reads them:

* :func:`alerts` gathers the ``fit_<name>_alerts`` view of one fit or of all fits into one
  table, grouped by unit (the group's values), newest unit first;
* :func:`render` prints that table grouped by unit, with :data:`CAUTION` under any projection;
* :func:`failing` decides ``trendledger watch --fail-on``'s exit code from :data:`SEVERITY`;
* :func:`break_test` calls the ``fit_<name>_break(x)`` table macro (Chow test at x).
"""

from __future__ import annotations

import math
from typing import Any

import duckdb
import pandas as pd
from sqlglot import exp

from trendledger.errors import QueryRefused
from trendledger.query.guard import check_where
from trendledger.spec import Fit, Spec, did_you_mean
from trendledger.views.read import view_columns

#: Printed under every output that shows a projected crossing of a limit.
CAUTION = ("statistical projection, an extrapolation of the current segment, which can bend "
           "again; not a safety or release decision; follow your local standards and qualified "
           "review")

#: Printed under every output that shows the fleet view's poolability decision or pooled line.
POOL_CAUTION = ("pooling units for a shelf life is a regulated decision: the fleet view supports "
                "it, qualified review makes it")

#: Alert reasons from least to most severe; ``--fail-on R`` fails on R and every later one.
#: The alerts views carry the same order as ``severity`` (1 = too_few_points).
SEVERITY: tuple[str, ...] = (
    "too_few_points",
    "x_went_back",
    "low_r2",
    "not_straight",
    "outliers",
    "unlike_fleet",
    "slope_changed",
    "bent",
    "out_of_trend",
    "silent",
    "crossing_soon",
    "out_of_limits",
)

#: Reasons whose detail is a projection (their output carries CAUTION).
PROJECTIONS = frozenset({"crossing_soon", "out_of_limits"})

#: Columns of the alerts views after the group columns.
ALERT_COLUMNS = ("reason", "severity", "detail", "latest_x", "latest_date")


def _ident(name: str) -> str:
    return exp.to_identifier(name, quoted=True).sql(dialect="duckdb")


def alerts(con: duckdb.DuckDBPyConnection, spec: Spec, name: str | None = None) -> pd.DataFrame:
    """Alerts of the fit ``name`` (every fit when None), one row per unit and reason.

    Columns: those of the alerts views, ``fit_name``, ``unit_label`` (the group values as
    text), the group columns, then
    ``reason``, ``severity``, ``detail``, ``latest_x``, ``latest_date``. Units come by their
    most severe reason, then the one silent longest first (earliest latest date), then by
    latest x, descending; within a unit the most severe reason first. A fit without an alerts
    view contributes nothing.
    """
    fits = [spec.fit(name)] if name is not None else list(spec.fits)
    frames = []
    for fit in fits:
        view = fit.view + "_alerts"
        if not view_columns(con, view):
            continue
        frame = con.execute(f"SELECT * FROM {_ident(view)}").df()
        frames.append(frame)
    if not frames:
        return pd.DataFrame(columns=["fit_name", "unit_label", *ALERT_COLUMNS])
    out = pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]
    if out.empty:
        return out
    # the most severe unit first, then the one silent longest (its latest date, when the spec
    # has one), then its latest x (sort keys kept aside, never added as columns: a group
    # column may take any free name)
    dates = pd.to_datetime(out["latest_date"], errors="coerce")
    key = [out["fit_name"], out["unit_label"]]
    unit_worst = out["severity"].groupby(key, sort=False).transform("max")
    unit_date = dates.groupby(key, sort=False).transform("max")
    unit_x = out["latest_x"].groupby(key, sort=False).transform("max")
    order = pd.DataFrame({"w": unit_worst, "d": unit_date, "x": unit_x, "f": out["fit_name"],
                          "u": out["unit_label"], "s": out["severity"]})
    order = order.sort_values(["w", "d", "x", "f", "u", "s"],
                              ascending=[False, True, False, True, True, False],
                              na_position="last", kind="stable")
    return out.loc[order.index].reset_index(drop=True)


def _number(value: Any) -> str:
    if value is None or value is pd.NA:
        return ""
    if isinstance(value, float):
        return "" if math.isnan(value) else f"{value:g}"
    return str(value)


def _day(value: Any) -> str:
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, float) and math.isnan(value):
        return ""
    if isinstance(value, pd.Timestamp) and value == value.normalize():
        return value.date().isoformat()
    return value.isoformat() if hasattr(value, "isoformat") else str(value)


def render(frame: pd.DataFrame) -> str:
    """The alerts grouped by unit, newest unit first, as plain text lines."""
    if frame.empty:
        return "no alerts\n"
    several = frame["fit_name"].nunique() > 1
    units = frame[["fit_name", "unit_label"]].drop_duplicates()
    lines = [f"{len(frame)} alert(s) on {len(units)} unit(s)"
             + ("" if several else f" (fit {frame['fit_name'].iloc[0]})")]
    width = max(len(str(r)) for r in frame["reason"])
    for (fit, unit), rows in frame.groupby(["fit_name", "unit_label"], sort=False):
        first = rows.iloc[0]
        parts = [_day(first["latest_date"])]
        if _number(first["latest_x"]):
            parts.append(f"x {_number(first['latest_x'])}")
        when = ", ".join(w for w in parts if w)
        head = f"{fit}: {unit}" if several else str(unit)
        lines.append("")
        lines.append(f"{head}  (latest {when})" if when else head)
        for _, row in rows.iterrows():
            lines.append(f"  {str(row['reason']):<{width}}  {row['detail']}")
    if frame["reason"].isin(PROJECTIONS).any():
        lines.append("")
        lines.append(CAUTION)
    return "\n".join(lines) + "\n"


def threshold(fail_on: str | None) -> int:
    """The severity (1-based) ``--fail-on`` stands for; None means any alert."""
    if fail_on is None:
        return 1
    if fail_on not in SEVERITY:
        raise QueryRefused(f"unknown alert reason {fail_on!r} for --fail-on",
                           hint=did_you_mean(fail_on, SEVERITY))
    return SEVERITY.index(fail_on) + 1


def failing(frame: pd.DataFrame, fail_on: str | None = None) -> bool:
    """True when an alert is at or above ``fail_on`` in :data:`SEVERITY` (any alert if None)."""
    if frame.empty:
        return False
    level = threshold(fail_on)
    return bool((frame["reason"].map(lambda r: SEVERITY.index(r) + 1 if r in SEVERITY else 0)
                 >= level).any())


#: Columns of the break macro after the group columns (sql/views/break.sql).
BREAK_COLUMNS = ("n_below", "n_above", "f", "df1", "df2", "p", "note")


def break_test(
    con: duckdb.DuckDBPyConnection,
    fit: Fit,
    at: float,
    *,
    where: str | None = None,
    sort: str | None = None,
    desc: bool = False,
    limit: int | None = None,
) -> pd.DataFrame:
    """Chow test for a break at x = ``at`` in every group of ``fit`` (``fit_<name>_break``)."""
    macro = fit.view + "_break"
    found = con.execute(
        "SELECT count(*) FROM duckdb_functions() WHERE function_name = ? "
        "AND function_type = 'table_macro'", [macro]).fetchall()
    if not found or not found[0][0]:
        raise QueryRefused(f"the store has no break test {macro!r}",
                           hint="run `trendledger spec update` with this version to install it")
    if not math.isfinite(float(at)):
        raise QueryRefused("--break-at must be a finite number")
    columns = [*fit.group, *BREAK_COLUMNS]
    sql = f"SELECT * FROM {_ident(macro)}($at) AS tested"
    if where:
        sql += " WHERE " + check_where(where, columns).sql(dialect="duckdb")
    if sort:
        if sort not in columns:
            raise QueryRefused(f"cannot sort by {sort!r}: not a column of {macro}",
                               hint=did_you_mean(sort, columns))
        sql += f" ORDER BY {_ident(sort)} {'DESC' if desc else 'ASC'} NULLS LAST"
    if limit is not None:
        if limit < 0:
            raise QueryRefused("--limit must be zero or more")
        sql += f" LIMIT {int(limit)}"
    return con.execute(sql, {"at": float(at)}).df()
