"""Lineage: list batches and files, retract them, and check the store against the disk."""

from __future__ import annotations

import hashlib
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import InputError, StoreError
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
    """Remove the rows of a batch or of one file; the lineage keeps them as 'retracted'."""
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
        con.execute("DELETE FROM measurements WHERE list_contains($ids, file_id)", {"ids": ids})
        moments.update(con, stored_spec(con), [], ids)  # moments.py: the fits' stored sums
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


@dataclass
class CheckReport:
    """What ``check`` found; ``ok`` is False when the store and the disk disagree."""

    fine: int = 0
    missing: list[str] = field(default_factory=list)
    changed: list[str] = field(default_factory=list)
    count_mismatch: list[str] = field(default_factory=list)
    same_content: list[list[str]] = field(default_factory=list)
    duplicate_rows: list[str] = field(default_factory=list)
    #: "path: why" for a loaded file that is no longer a regular file inside the allowed
    #: folders (a folder, a named pipe, a link out): checked by the same rule as append
    unreadable: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.changed and not self.count_mismatch and not self.unreadable

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
    rows = con.execute(
        """
        SELECT f.path, f.sha256, f.rows, coalesce(m.n, 0) AS stored
        FROM ingest_files AS f
        LEFT JOIN (SELECT file_id, count(*) AS n FROM measurements GROUP BY file_id) AS m
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
    return report
