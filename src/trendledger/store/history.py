"""Keep every value: rows leave ``measurements`` only by moving to ``measurements_history``.

A retraction, a replaced file and a row replaced by its natural key each move the
old rows, with who, when, how and why; a retraction can be undone by moving its rows
back. The fits read only ``measurements``; the history is a plain table any DuckDB
client (or ``trendledger query``) can read. SQL in ``sql/history/``.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence

import duckdb
from sqlglot import exp

from trendledger.spec import Fit
from trendledger.store.waiting import os_user
from trendledger.views import templates


def _run(con: duckdb.DuckDBPyConnection, relative: str, params: dict[str, object],
         values: dict[str, templates.Value] | None = None) -> None:
    for sql in templates.load(relative).render(values or {}):
        used = {k: v for k, v in params.items() if f"${k}" in sql}
        con.execute(sql, used or None)


def move(con: duckdb.DuckDBPyConnection, ids: Sequence[int], *, how: str, why: str | None,
         now: dt.datetime, batch: int | None = None, by_file: int | None = None) -> None:
    """Move every row of the files ``ids`` into the history (inside the caller's transaction)."""
    if not ids:
        return
    _run(con, "history/move.sql", {"ids": [int(i) for i in ids], "now": now, "batch": batch,
                                   "by_file": by_file, "how": how, "why": why,
                                   "user": os_user()})


def supersede(con: duckdb.DuckDBPyConnection, key: Sequence[str], ids: Sequence[int], *,
              now: dt.datetime, batch: int, why: str | None) -> dict[int, int]:
    """Move the rows that the files ``ids`` replace by natural key; returns, per file that
    replaced rows, how many (inside the caller's transaction)."""
    if not key or not ids:
        return {}
    params: dict[str, object] = {"ids": [int(i) for i in ids], "now": now, "batch": batch,
                                 "why": why, "user": os_user()}
    _run(con, "history/supersede.sql", params, {"key": list(key)})
    # DuckDB compares ROW(NULL, 'a') = ROW(NULL, 'a') as true; a key with a missing part
    # must match nothing, so such rows leave the list (identifiers quoted by sqlglot)
    missing = exp.or_(*[exp.column(k, quoted=True).is_(exp.null()) for k in key])
    con.execute("DELETE FROM tl_superseded WHERE row_id IN "
                f"(SELECT rowid FROM measurements WHERE {missing.sql('duckdb')})")
    _run(con, "history/supersede_move.sql", params)
    rows = con.execute("SELECT winner, count(*) FROM tl_superseded GROUP BY winner").fetchall()
    return {int(w): int(n) for w, n in rows}


def superseded_files(con: duckdb.DuckDBPyConnection) -> list[int]:
    """File ids that lost rows in the last ``supersede`` (their fits' groups are stale)."""
    return [int(r[0]) for r in con.execute(
        "SELECT DISTINCT file_id FROM tl_superseded").fetchall()]


def restore(con: duckdb.DuckDBPyConnection, ids: Sequence[int]) -> int:
    """Move the retracted rows of ``ids`` back into measurements; returns how many."""
    found = con.execute(
        "SELECT count(*) FROM measurements_history WHERE list_contains($ids, file_id) "
        "AND removed_how = 'retracted'", {"ids": [int(i) for i in ids]}).fetchall()
    _run(con, "history/restore.sql", {"ids": [int(i) for i in ids]})
    return int(found[0][0])


def event(con: duckdb.DuckDBPyConnection, action: str, *, now: dt.datetime,
          batch: int | None = None, files: Sequence[int] = (), rows: int | None = None,
          reason: str | None = None, before: str | None = None) -> None:
    """Log one action on the lineage (retract, restore) in tl_events; ``before`` keeps the
    lineage rows as they were (JSON), so that a retraction can be undone exactly."""
    con.execute(
        "INSERT INTO tl_events SELECT coalesce(max(event_id), 0) + 1, ?, ?, ?, ?, ?, ?, ?, ? "
        "FROM tl_events",
        [now, os_user(), action, batch, [int(i) for i in files], rows, reason, before],
    )


def repeated_x(con: duckdb.DuckDBPyConnection, fit: Fit, shown: int = 3) -> list[str]:
    """One line for a fit whose groups hold an x value from several files (none if not)."""
    [sql] = templates.load("history/repeated_x.sql").render(
        {"group": list(fit.group), "x": fit.x, "source": "measurements"})
    rows = con.execute(sql).fetchall()
    if not rows:
        return []
    width = len(fit.group)
    examples = "; ".join(
        f"{', '.join(str(v) for v in r[:width])} {fit.x} {r[width]} in files "
        f"{', '.join(str(i) for i in r[width + 1])}" for r in rows[:shown])
    more = f"; {len(rows) - shown} more" if len(rows) > shown else ""
    return [f"fit {fit.name}: {len(rows)} {fit.x} value(s) of a group come from more than one "
            f"file and are counted twice ({examples}{more}); declare [source] key to let a "
            "later file replace earlier rows"]
