"""Lineage: list batches and files, retract them, and check the store against the disk."""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
from sqlglot import exp

from trendledger.errors import InputError, StoreError, first_line
from trendledger.store import history
from trendledger.store.db import first_row, stored_spec, utcnow
from trendledger.store.ingest import cannot_write, database_path, rollback_quietly
from trendledger.store.paths import outside, read_once
from trendledger.views import moments


def batches(con: duckdb.DuckDBPyConnection, batch: int | None = None) -> pd.DataFrame:
    """One row per batch, newest last."""
    where, params = ("WHERE batch_id = $batch", {"batch": batch}) if batch is not None else ("", {})
    return con.execute(
        f"SELECT * FROM ingest_batches {where} ORDER BY batch_id", params
    ).df()


def files(
    con: duckdb.DuckDBPyConnection, batch: int | None = None, path: str | None = None
) -> pd.DataFrame:
    """One row per file of every batch; ``path`` is a glob over the recorded relative paths."""
    clauses: list[str] = []
    params: dict[str, object] = {}
    if batch is not None:
        clauses.append("batch_id = $batch")
        params["batch"] = batch
    if path is not None:
        clauses.append("path GLOB $path")
        params["path"] = path
    where = ("WHERE " + " AND ".join(clauses)) if clauses else ""
    return con.execute(
        f"SELECT * FROM ingest_files {where} ORDER BY file_id", params
    ).df()


def retract(
    con: duckdb.DuckDBPyConnection,
    *,
    why: str,
    batch: int | None = None,
    path: str | None = None,
) -> dict[str, int]:
    """Take the rows of a batch or of one file out of the fits; the lineage marks them
    'retracted' and the rows move to measurements_history, so ``restore`` can undo it."""
    if (batch is None) == (path is None):
        raise InputError("name either a batch or a file to retract")
    if not why.strip():
        raise InputError("say why with --why; the reason is kept in the lineage")
    if batch is not None:
        found = first_row(con, "SELECT status FROM ingest_batches WHERE batch_id = ?", [batch])
        if found is None:
            raise StoreError(f"there is no batch {batch}")
        if found[0] == "retracted":
            raise StoreError(f"batch {batch} is already retracted")
        ids = [r[0] for r in con.execute(
            "SELECT file_id FROM ingest_files WHERE batch_id = ? AND status = 'loaded'",
            [batch]).fetchall()]
    else:
        row = first_row(
            con, "SELECT file_id FROM ingest_files WHERE path = ? AND status = 'loaded'", [path]
        )
        if row is None:
            known = first_row(con, "SELECT count(*) FROM ingest_files WHERE path = ?", [path])
            what = "has no loaded rows" if known and known[0] else "is not in the lineage"
            raise StoreError(f"file {path!r} {what}",
                             hint="paths are relative to the spec's folder; see 'lineage --files'")
        ids = [row[0]]
    now = utcnow()
    where = database_path(con)
    con.execute("BEGIN TRANSACTION")
    try:
        removed = first_row(
            con, "SELECT count(*) FROM measurements WHERE list_contains($ids, file_id)",
            {"ids": ids},
        )
        # what the lineage said before, so that restore can put it back exactly
        before = {
            "files": [[int(r[0]), r[1], r[2], r[3].isoformat() if r[3] else None]
                      for r in con.execute(
                          "SELECT file_id, status, message, changed_at FROM ingest_files "
                          "WHERE list_contains($ids, file_id)", {"ids": ids}).fetchall()],
            "batch": [list(r[:1]) + [r[1].isoformat() if r[1] else None, r[2]]
                      for r in con.execute(
                          "SELECT status, retracted_at, retract_reason FROM ingest_batches "
                          "WHERE batch_id = ?", [batch]).fetchall()] if batch is not None else [],
        }
        history.move(con, ids, how="retracted", why=why, now=now, batch=batch)
        moments.update(con, stored_spec(con), [], ids)  # moments.py: the fits' stored sums
        history.event(con, "retract", now=now, batch=batch, files=ids,
                      rows=int(removed[0]) if removed else 0, reason=why,
                      before=json.dumps(before))
        con.execute(
            "UPDATE ingest_files SET status = 'retracted', changed_at = $now, message = $why "
            "WHERE list_contains($ids, file_id)",
            {"now": now, "why": why, "ids": ids},
        )
        if batch is not None:
            con.execute(
                "UPDATE ingest_batches SET status = 'retracted', retracted_at = ?, "
                "retract_reason = ? WHERE batch_id = ?",
                [now, why, batch],
            )
    except BaseException:
        rollback_quietly(con)
        raise
    try:
        con.execute("COMMIT")
    except duckdb.Error as err:  # a full disk or a read-only folder: nothing was changed
        rollback_quietly(con)
        raise cannot_write(err, where) from err
    return {"files": len(ids), "rows": int(removed[0]) if removed else 0}


def restore(
    con: duckdb.DuckDBPyConnection,
    *,
    why: str,
    batch: int | None = None,
    path: str | None = None,
) -> dict[str, int]:
    """Undo a retraction: the rows come back from measurements_history and the lineage rows
    of the batch or file read as they did before it; tl_events logs the undoing."""
    if (batch is None) == (path is None):
        raise InputError("name either a batch or a file to restore")
    if not why.strip():
        raise InputError("say why with --why; the reason is kept in the lineage")
    only: int | None = None
    if batch is not None:
        found = first_row(con, "SELECT status FROM ingest_batches WHERE batch_id = ?", [batch])
        if found is None:
            raise StoreError(f"there is no batch {batch}")
        if found[0] != "retracted":
            raise StoreError(f"batch {batch} is not retracted")
        event = first_row(
            con, "SELECT before FROM tl_events WHERE action = 'retract' AND batch_id = ? "
            "ORDER BY event_id DESC LIMIT 1", [batch])
    else:
        row = first_row(
            con, "SELECT file_id FROM ingest_files WHERE path = ? AND status = 'retracted' "
            "ORDER BY file_id DESC LIMIT 1", [path])
        if row is None:
            raise StoreError(f"file {path!r} is not retracted",
                             hint="paths are relative to the spec's folder; see 'lineage --files'")
        only = int(row[0])
        event = first_row(
            con, "SELECT before FROM tl_events WHERE action = 'retract' AND "
            "list_contains(file_ids, ?) ORDER BY event_id DESC LIMIT 1", [row[0]])
    if event is None or event[0] is None:
        raise StoreError("this retraction was made before retracted rows were kept; "
                         "its rows are gone", hint="append the files again after changing them")
    before = json.loads(event[0])
    files = [f for f in before["files"] if f[1] != "retracted"]
    if only is not None:
        files = [f for f in files if f[0] == only]
    ids = [int(f[0]) for f in files]
    again = con.execute(
        "SELECT o.path, n.file_id FROM ingest_files AS o JOIN ingest_files AS n "
        "ON n.path = o.path AND n.file_id > o.file_id AND n.status = 'loaded' "
        "WHERE list_contains($ids, o.file_id) ORDER BY o.path",
        {"ids": ids}).fetchall()
    if again:
        raise StoreError(f"{again[0][0]} was loaded again since, as file {again[0][1]}",
                         hint="retract that file first, or leave the retraction as it is")
    now = utcnow()
    where = database_path(con)
    con.execute("BEGIN TRANSACTION")
    try:
        rows = history.restore(con, ids)
        moments.update(con, stored_spec(con), ids, [])  # moments.py: the fits' stored sums
        for file_id, status, message, changed in files:
            con.execute("UPDATE ingest_files SET status = ?, message = ?, changed_at = ? "
                        "WHERE file_id = ?", [status, message, changed, file_id])
        if batch is not None and before["batch"]:
            status, retracted_at, reason = before["batch"][0]
            con.execute("UPDATE ingest_batches SET status = ?, retracted_at = ?, "
                        "retract_reason = ? WHERE batch_id = ?",
                        [status, retracted_at, reason, batch])
        history.event(con, "restore", now=now, batch=batch, files=ids, rows=rows, reason=why)
    except BaseException:
        rollback_quietly(con)
        raise
    try:
        con.execute("COMMIT")
    except duckdb.Error as err:
        rollback_quietly(con)
        raise cannot_write(err, where) from err
    return {"files": len(ids), "rows": rows}


@dataclass
class CheckReport:
    """What ``check`` found; ``ok`` is False when the store and the disk disagree."""

    fine: int = 0
    missing: list[str] = field(default_factory=list)
    changed: list[str] = field(default_factory=list)
    count_mismatch: list[str] = field(default_factory=list)
    same_content: list[list[str]] = field(default_factory=list)
    duplicate_rows: list[str] = field(default_factory=list)
    #: The published copy against the writer's copy: how they differ (nothing when equal),
    #: and whether they could be compared at all (not while a write is running).
    copies_differ: list[str] = field(default_factory=list)
    copies_compared: bool = False
    copies_note: str = ""
    #: per fit, groups whose x value comes from more than one file (without a natural key,
    #: overlapping or cumulative files count such rows twice in every fit); reported, like
    #: repeated rows, but data as loaded, not a disagreement between store and disk
    repeated_x: list[str] = field(default_factory=list)
    #: "path: why" for a loaded file that is no longer a regular file inside the allowed
    #: folders (a folder, a named pipe, a link out): checked by the same rule as append
    unreadable: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return (not self.changed and not self.count_mismatch and not self.copies_differ
                and not self.unreadable)

    def to_dict(self) -> dict[str, Any]:
        return {**asdict(self), "ok": self.ok}


def check(con: duckdb.DuckDBPyConnection, root: Path,
          allowed: tuple[str, ...] = ()) -> CheckReport:
    """Re-hash every loaded file still on disk and recount its rows in the store.

    A file is read as ``append`` reads it: through links only into the spec's
    folder and ``allowed``, only if it is a regular file, in one open.
    """
    root = root.resolve()
    report = CheckReport()
    # rows a later file replaced by natural key moved to the history; they still count
    # for the file that brought them
    rows = con.execute(
        """
        SELECT f.path, f.sha256, f.rows, coalesce(m.n, 0) + coalesce(h.n, 0) AS stored
        FROM ingest_files AS f
        LEFT JOIN (SELECT file_id, count(*) AS n FROM measurements GROUP BY file_id) AS m
          USING (file_id)
        LEFT JOIN (SELECT file_id, count(*) AS n FROM measurements_history
                   WHERE removed_how = 'replaced by key' GROUP BY file_id) AS h
          USING (file_id)
        WHERE f.status = 'loaded'
        ORDER BY f.path
        """
    ).fetchall()
    for path, sha, recorded, stored in rows:
        if int(recorded) != int(stored):
            report.count_mismatch.append(
                f"{path}: lineage says {recorded} rows, store has {stored}"
            )
        full = root / path
        if not os.path.lexists(full):
            report.missing.append(path)
            continue
        if (why := outside(full, root, allowed)) is not None:
            report.unreadable.append(f"{path}: {why}")
            continue
        try:
            data, _ = read_once(full.resolve())
        except FileNotFoundError:
            report.missing.append(path)
            continue
        except OSError as err:
            report.unreadable.append(f"{path}: cannot read ({err.strerror})")
            continue
        except ValueError as err:
            report.unreadable.append(f"{path}: {err}")
            continue
        digest = hashlib.sha256(data).hexdigest()
        if digest != sha:
            report.changed.append(path)
        else:
            report.fine += 1
    orphans = first_row(
        con,
        "SELECT count(*) FROM measurements WHERE file_id NOT IN "
        "(SELECT file_id FROM ingest_files WHERE status = 'loaded')",
    )
    if orphans and orphans[0]:
        report.count_mismatch.append(f"{orphans[0]} rows belong to no loaded file")
    for (paths,) in con.execute(
        "SELECT list(path ORDER BY path) FROM ingest_files WHERE status = 'loaded' "
        "GROUP BY sha256 HAVING count(*) > 1"
    ).fetchall():
        report.same_content.append(list(paths))
    # A row repeated within one file is kept (it is data) but reported here.
    for (path, n) in con.execute(
        """
        SELECT f.path, d.extra FROM (
            SELECT file_id, count(*) - count(DISTINCT m) AS extra
            FROM measurements AS m GROUP BY file_id
        ) AS d JOIN ingest_files AS f USING (file_id)
        WHERE d.extra > 0 ORDER BY f.path
        """
    ).fetchall():
        report.duplicate_rows.append(f"{path}: {n} repeated row(s)")
    spec = stored_spec(con)
    if not spec.source.key:
        for fit in spec.fits:
            if fit.x in spec.all_columns:  # a computed x is no stored column to look up
                report.repeated_x.extend(history.repeated_x(con, fit))
    return report


# -- the published copy against the writer's copy ---------------------------------------------

#: What two copies of one store must agree on: every batch, the lineage by status, and the
#: rows (count and an order-free sum of row hashes). ``{db}`` is our own catalog alias.
_FINGERPRINT = {
    "batches": "SELECT batch_id, status, files, rows FROM {db}ingest_batches ORDER BY batch_id",
    "files": "SELECT status, count(*), coalesce(sum(rows), 0) FROM {db}ingest_files "
             "GROUP BY status ORDER BY status",
    "rows": "SELECT count(*), coalesce(sum(hash(m)::HUGEINT), 0) FROM {db}measurements AS m",
}


def _fingerprint(con: duckdb.DuckDBPyConnection, db: str = "") -> dict[str, list[tuple]]:
    return {what: con.execute(sql.format(db=db)).fetchall() for what, sql in _FINGERPRINT.items()}


def compare_copies(con: duckdb.DuckDBPyConnection, other: Path,
                   report: CheckReport) -> None:
    """Compare the copy open on ``con`` with the store file ``other`` (the other copy), read
    through a separate in-memory connection; fill the report's ``copies_*`` fields."""
    if not other.exists():
        report.copies_note = f"{other.name} does not exist yet (made by the next write)"
        return
    side = duckdb.connect()
    try:
        literal = exp.Literal.string(str(other)).sql(dialect="duckdb")
        try:
            side.execute(f"ATTACH {literal} AS other_copy (READ_ONLY)")
        except duckdb.Error as err:
            report.copies_note = ("not compared: a write is running"
                                  if "lock" in str(err).lower() else
                                  f"not compared: {first_line(err)}")
            return
        mine, theirs = _fingerprint(con), _fingerprint(side, "other_copy.")
    finally:
        side.close()
    report.copies_compared = True
    words = {"batches": "batches", "files": "lineage by status", "rows": "rows"}
    for what, label in words.items():
        if mine[what] != theirs[what]:
            report.copies_differ.append(f"{label}: {mine[what][:3]} against {theirs[what][:3]}")
    rows = mine["rows"][0][0] if mine["rows"] else 0
    report.copies_note = f"{len(mine['batches'])} batch(es), {rows} row(s)"
