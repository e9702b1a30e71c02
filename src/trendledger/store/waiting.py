"""Refused files that wait: a file an append refused is not tried again until it changes.

An unattended daily append must keep loading good files while one bad file waits
for a person. Each refusal is kept in ``tl_rejected`` by path and content hash;
a later append passes over a file whose bytes are still the refused ones (unless
asked to retry), reports it as waiting, and tries it again as soon as its content
changes. A person can set a waiting file aside for good, with a reason.
"""

from __future__ import annotations

import datetime as dt
import getpass
import os
from dataclasses import dataclass

import duckdb
import pandas as pd

from trendledger.errors import StoreError


@dataclass(frozen=True)
class Refusal:
    """The open refusal of one path: the content refused and whether it is set aside."""

    sha256: str
    bytes: int
    modified_at: dt.datetime | None
    message: str
    set_aside: str | None


def os_user() -> str | None:
    """The operating-system user running the command, recorded per batch and per action."""
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no passwd entry and no LOGNAME/USER in a bare container
        uid = getattr(os, "getuid", None)
        return f"uid {uid()}" if uid else None


def open_refusals(con: duckdb.DuckDBPyConnection) -> dict[str, Refusal]:
    """The latest open refusal per path (open: neither loaded since nor superseded)."""
    rows = con.execute(
        """
        SELECT path, sha256, bytes, modified_at, message, set_aside_reason
        FROM tl_rejected
        WHERE closed_at IS NULL
        QUALIFY row_number() OVER (PARTITION BY path ORDER BY last_refused_at DESC) = 1
        """
    ).fetchall()
    return {r[0]: Refusal(r[1], int(r[2]), r[3], r[4], r[5]) for r in rows}


def record(con: duckdb.DuckDBPyConnection, refused: list[tuple[str, str, int,
           dt.datetime | None, str]], now: dt.datetime) -> None:
    """Remember refused files (path, sha256, bytes, modified_at, message).

    The same content refused again counts up; other content of the same path
    supersedes the older refusal, which is closed.
    """
    for path, sha, size, mtime, message in refused:
        same = con.execute(
            "UPDATE tl_rejected SET last_refused_at = ?, refusals = refusals + 1, message = ?, "
            "bytes = ?, modified_at = ? WHERE path = ? AND sha256 = ? AND closed_at IS NULL "
            "RETURNING 1",
            [now, message, size, mtime, path, sha],
        ).fetchall()
        if same:
            continue
        con.execute("UPDATE tl_rejected SET closed_at = ? WHERE path = ? AND closed_at IS NULL",
                    [now, path])
        con.execute(
            "INSERT INTO tl_rejected VALUES (?, ?, ?, ?, ?, ?, 1, ?, NULL, NULL, NULL, NULL, NULL)",
            [path, sha, size, mtime, now, now, message],
        )


def close(con: duckdb.DuckDBPyConnection, loaded: dict[str, int], now: dt.datetime) -> None:
    """A path that loads (file id given) closes its open refusal."""
    if not loaded:
        return
    frame = pd.DataFrame({"path": list(loaded), "file_id": list(loaded.values())})
    con.register("tl_loaded_paths", frame)
    try:
        con.execute(
            "UPDATE tl_rejected AS r SET closed_at = ?, closed_by_file = l.file_id "
            "FROM tl_loaded_paths AS l WHERE r.path = l.path AND r.closed_at IS NULL",
            [now],
        )
    finally:
        con.unregister("tl_loaded_paths")


def listing(con: duckdb.DuckDBPyConnection, every: bool = False) -> pd.DataFrame:
    """Files waiting after a refusal (with ``every``, also those set aside or closed)."""
    where = "" if every else "WHERE closed_at IS NULL AND set_aside_at IS NULL"
    return con.execute(
        "SELECT path, message, refusals, first_refused_at, last_refused_at, sha256, "
        f"set_aside_at, set_aside_reason, set_aside_by, closed_at, closed_by_file "
        f"FROM tl_rejected {where} ORDER BY path, first_refused_at"
    ).df()


def count(con: duckdb.DuckDBPyConnection) -> int:
    rows = con.execute(
        "SELECT count(*) FROM tl_rejected WHERE closed_at IS NULL AND set_aside_at IS NULL"
    ).fetchall()
    return int(rows[0][0])


def set_aside(con: duckdb.DuckDBPyConnection, path: str, why: str,
              now: dt.datetime) -> int:
    """Set a waiting file aside for good: appends pass over it even after it changes."""
    if not why.strip():
        raise StoreError("say why with --why; the reason is kept with the file")
    rows = con.execute(
        "UPDATE tl_rejected SET set_aside_at = ?, set_aside_reason = ?, set_aside_by = ? "
        "WHERE path = ? AND closed_at IS NULL AND set_aside_at IS NULL RETURNING 1",
        [now, why, os_user(), path],
    ).fetchall()
    if not rows:
        raise StoreError(f"file {path!r} is not waiting",
                         hint="see 'trendledger waiting' for the refused files")
    return len(rows)
