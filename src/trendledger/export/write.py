"""Hand the store to other engines: Parquet files plus the views in each engine's SQL.

``export(source, folder)`` writes::

    folder/
      manifest.json                     what the export holds (see below)
      measurements/<field>=<value>/     the data, one Hive partition per value of a field
      ingest_batches/data.parquet       the lineage
      ingest_files/data.parquet
      <table>/data.parquet              any other store table a view reads (none today: the
                                        views recompute the fits from the rows, see
                                        views.RECOMPUTED)
      views/{duckdb,spark,postgres,trino}.sql

Spark, Trino and DuckDB read the Parquet folders where they are; PostgreSQL gets tables
to load them into. Each ``views/<dialect>.sql`` defines the sources, the SQL functions the
views need there and every view of the store (``tl_views``), re-rendered from the
templates and translated by :mod:`trendledger.dialects`.

Exporting again is incremental and safe to repeat. The manifest keeps, per partition, a
fingerprint of what it holds: its row count, and a digest over the files whose rows it
holds (their file id, content hash, row count and a hash of their rows in the store). A
partition is rewritten only when its fingerprint changed; one whose rows are all gone
(a retracted day) is removed. New files are written to a hidden staging folder inside the
export folder and swapped in partition by partition, the old ones moved aside first, so
a reader or a crash never sees half a partition, and a stale file never survives a
rewrite (DuckDB's ``COPY ... PARTITION_BY`` would leave one behind, or duplicate rows with
``APPEND``). The manifest is written last; an export that stopped half way is finished
by the next one.

This module writes the files; :mod:`trendledger.export_layout` says what goes out and
:mod:`trendledger.export_sql` writes the SQL files.

Connections. DuckDB writes the files, so the connection must be allowed to write files.
Given a store path, ``export`` opens its own read-only connection without the locked
settings a read-only :class:`~trendledger.ledger.Ledger` uses (readers are not blocked;
a writer makes it wait). A read-write Ledger's own connection works too; a read-only
Ledger's cannot write files by design and is refused with a hint.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import fcntl
import hashlib
import json
import os
import re
import shutil
import time
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any
from urllib.parse import quote

import duckdb
from sqlglot import exp

from trendledger.errors import first_line
from trendledger.export import dialects
from trendledger.export.layout import DATA, Column, ExportError, Layout, connection, layout
from trendledger.export.scripts import (
    FORMAT,
    Script,
    load_commands,
    script,
    split_script,
    sql,
    sql_ident,
    sql_string,
)
from trendledger.export.scripts import digest as script_digest
from trendledger.outputs import OutputError, check_not_store, no_links
from trendledger.store import db as store
from trendledger.trace import Writer
from trendledger.version import __version__

__all__ = ["ExportError", "Script", "export", "load_commands", "split_script", "sql"]

MANIFEST = "manifest.json"
VIEWS = "views"
FILE = "data.parquet"
_LOCK = ".trendledger-export.lock"
_STAGING = ".staging-"
_TRASH = ".trash-"
_LEFTOVER = re.compile(rf"({re.escape(_STAGING)}|{re.escape(_TRASH)})[0-9a-f]{{32}}")
#: Hive's folder name for a NULL partition value (Spark, Trino and DuckDB read it as NULL).
NULL_PARTITION = "__HIVE_DEFAULT_PARTITION__"


# -- the export ---------------------------------------------------------------------------------


def _folder_name(field_name: str, value: str | None) -> str:
    """Hive-style ``field=value`` folder name, the value percent-encoded."""
    if value is None:
        return f"{field_name}={NULL_PARTITION}"
    return f"{field_name}={quote(value, safe='')}"


def _fingerprints(con: duckdb.DuckDBPyConnection, lay: Layout) -> dict[str, dict[str, Any]]:
    """Per partition value: rows, files, batches and a digest of what it holds."""
    part = exp.column(lay.partition_by, quoted=True)
    cells = [exp.column(c.name, quoted=True) for c in lay.columns]
    query = exp.select(
        exp.alias_(exp.Cast(this=part, to=exp.DataType.build("VARCHAR")), "tl_key"),
        exp.column("file_id", quoted=True),
        exp.alias_(exp.Count(this=exp.Star()), "tl_rows"),
        exp.alias_(exp.Cast(this=exp.Sum(this=exp.Anonymous(this="hash", expressions=cells)),
                            to=exp.DataType.build("VARCHAR")), "tl_hash"),
    ).from_(exp.to_table(DATA, quoted=True)).group_by(exp.Literal.number(1),
                                                      exp.Literal.number(2))
    rows = con.execute(query.sql("duckdb")).fetchall()
    lineage = {r[0]: (r[1], r[2]) for r in con.execute(
        "SELECT file_id, sha256, batch_id FROM ingest_files").fetchall()}
    grouped: dict[str, list[tuple[Any, ...]]] = {}
    for key, file_id, n, digest in rows:
        grouped.setdefault(NULL_PARTITION if key is None else key, []).append(
            (file_id, n, digest))
    out: dict[str, dict[str, Any]] = {}
    for key, files in grouped.items():
        files.sort(key=lambda f: (f[0] is None, f[0] or 0))
        h = hashlib.sha256()
        batches: set[int] = set()
        for file_id, n, digest in files:
            sha, batch = lineage.get(file_id, ("", None))
            if batch is not None:
                batches.add(int(batch))
            h.update(f"{file_id}:{sha}:{n}:{digest}\n".encode())
        out[key] = {
            "folder": _folder_name(lay.partition_by, None if key == NULL_PARTITION else key),
            "rows": sum(f[1] for f in files),
            "files": [f[0] for f in files],
            "batches": sorted(batches),
            "fingerprint": h.hexdigest(),
        }
    return out


def _table_fingerprint(con: duckdb.DuckDBPyConnection, table: str,
                       columns: tuple[Column, ...]) -> dict[str, Any]:
    cells = [exp.column(c.name, quoted=True) for c in columns]
    query = exp.select(
        exp.Count(this=exp.Star()),
        exp.Cast(this=exp.Sum(this=exp.Anonymous(this="hash", expressions=cells)),
                 to=exp.DataType.build("VARCHAR")),
    ).from_(exp.to_table(table, quoted=True))
    found = store.first_row(con, query.sql("duckdb"))
    n, digest = found if found else (0, None)
    signature = json.dumps([[c.name, c.type] for c in columns])
    return {"rows": int(n), "fingerprint": hashlib.sha256(
        f"{signature}:{n}:{digest}".encode()).hexdigest()}


def _copy_partitions(con: duckdb.DuckDBPyConnection, lay: Layout, keys: list[str],
                     target: Path) -> None:
    """Write the rows of the given partition values to target/tl_slot=<i>/ (one COPY)."""
    slot = "tl_slot"
    while slot in {c.name for c in lay.columns}:
        slot += "_"
    names = [exp.column(c.name, table="m", quoted=True) for c in lay.data_columns]
    pairs = exp.select(
        exp.alias_(exp.Anonymous(this="unnest", expressions=[
            exp.Array(expressions=[exp.Literal.string(k) for k in keys])]), "tl_key"),
        exp.alias_(exp.Anonymous(this="unnest", expressions=[
            exp.Array(expressions=[exp.Literal.number(i) for i in range(len(keys))])]), slot),
    )
    key = exp.Coalesce(this=exp.Cast(this=exp.column(lay.partition_by, table="m", quoted=True),
                                     to=exp.DataType.build("VARCHAR")),
                       expressions=[exp.Literal.string(NULL_PARTITION)])
    query = (
        exp.select(*names, exp.column(slot, table="k"))
        .from_(exp.alias_(exp.to_table(DATA, quoted=True), "m", table=True))
        .join(exp.alias_(exp.Subquery(this=pairs), "k", table=True),
              on=exp.EQ(this=key, expression=exp.column("tl_key", table="k")))
    )
    con.execute(
        f"COPY ({query.sql('duckdb')}) TO {sql_string(str(target), 'duckdb')} "
        f"(FORMAT parquet, PARTITION_BY ({sql_ident(slot, 'duckdb')}))"
    )
    for i in range(len(keys)):  # a partition value may own no row file if COPY wrote none
        (target / f"{slot}={i}").mkdir(parents=True, exist_ok=True)
    for i, _ in enumerate(keys):
        (target / f"{slot}={i}").rename(target / f"slot-{i}")


def _copy_table(con: duckdb.DuckDBPyConnection, table: str, target: Path) -> None:
    query = exp.select(exp.Star()).from_(exp.to_table(table, quoted=True))
    con.execute(f"COPY ({query.sql('duckdb')}) TO {sql_string(str(target), 'duckdb')} "
                "(FORMAT parquet)")


@contextlib.contextmanager
def _locked(folder: Path) -> Iterator[None]:
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / _LOCK, "w") as handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as err:
            raise ExportError("another export is writing this folder", file=str(folder)) from err
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _claim(folder: Path, store_path: Path | None) -> bool:
    """Check, before anything is written, that the export may write ``folder``.

    It must be new, empty (hidden files count), or an earlier export (its
    manifest proves it), with no symbolic link anywhere inside, since a link
    would lead the export's writes and removals out of the folder. Returns
    whether the folder is new (then a failed export removes it again).
    """
    try:
        check_not_store(folder, store_path, "the export")
    except OutputError as err:
        raise ExportError(err.message, file=err.file, hint=err.hint) from None
    if not folder.exists():
        if folder.is_symlink():
            raise ExportError("the export folder is a broken link", file=str(folder))
        return True
    if not folder.is_dir():
        raise ExportError("the export folder is a file", file=str(folder),
                          hint="name a new or empty folder")
    manifest = folder / MANIFEST
    if manifest.is_symlink() or (not manifest.is_file() and any(folder.iterdir())):
        raise ExportError("the folder is not empty and holds no trendledger export",
                          file=str(folder), hint="export to a new or empty folder")
    try:
        no_links(folder)
    except OutputError as err:
        raise ExportError(err.message, file=err.file, hint=err.hint) from None
    return False


def _store_path(source: Any) -> Path | None:
    if isinstance(source, str | Path):
        return Path(source)
    path = getattr(source, "path", None)
    return Path(path) if isinstance(path, str | Path) else None


def _read_manifest(folder: Path) -> dict[str, Any] | None:
    path = folder / MANIFEST
    if not path.is_file():
        return None
    try:
        found = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise ExportError(f"cannot read the export's manifest: {err}", file=str(path)) from err
    if not isinstance(found, dict):
        raise ExportError("the export's manifest is not a JSON object", file=str(path))
    return found


def _write_atomic(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.{uuid.uuid4().hex}")
    temporary.write_text(text, encoding="utf-8")
    os.replace(temporary, path)


def _clean(folder: Path) -> None:
    """Remove what an interrupted export left behind (names only an export makes)."""
    for leftover in folder.iterdir():
        if _LEFTOVER.fullmatch(leftover.name) and leftover.is_dir() \
                and not leftover.is_symlink():
            shutil.rmtree(leftover, ignore_errors=True)


def export(
    source: Any,
    folder: str | Path,
    partition_by: str | None = None,
    *,
    dialects_wanted: tuple[str, ...] = dialects.DIALECTS,
    wait: float = 5.0,
    trace: Writer | None = None,
) -> dict[str, Any]:
    """Export the store to ``folder`` (see the module notes); returns what was done.

    ``source`` is a store path (opened read-only, allowed to write files), a read-write
    Ledger, or a DuckDB connection that may write files. A folder that cannot be written
    (a file of that name, no such parent, a full disk) raises :class:`ExportError`; the
    partitions already in place stay whole, and the next export finishes the job.
    """
    try:
        return _export(source, folder, partition_by, dialects_wanted, wait, trace)
    except OSError as err:
        raise ExportError(f"cannot write the export: {err.strerror or err}",
                          file=str(err.filename or folder)) from err
    except duckdb.IOException as err:
        raise ExportError(f"cannot write the export: {first_line(err)}",
                          file=str(folder)) from err


def _export(source: Any, folder: str | Path, partition_by: str | None,
            dialects_wanted: tuple[str, ...], wait: float, trace: Writer | None
            ) -> dict[str, Any]:
    started = time.perf_counter()
    target = Path(folder).resolve()
    created = _claim(target, _store_path(source))
    try:
        return _export_locked(source, target, partition_by, dialects_wanted, wait, trace,
                              started)
    except BaseException:
        # A refused or failed export leaves nothing behind: not the folder it made, not
        # its lock file in an empty folder; an earlier export stays whole.
        if created:
            shutil.rmtree(target, ignore_errors=True)
        elif not (target / MANIFEST).is_file():
            (target / _LOCK).unlink(missing_ok=True)
        raise


def _export_locked(source: Any, target: Path, partition_by: str | None,
                   dialects_wanted: tuple[str, ...], wait: float, trace: Writer | None,
                   started: float) -> dict[str, Any]:
    with connection(source, wait=wait, write_files=True, trace=trace) as con, _locked(target):
        old = _read_manifest(target)
        _clean(target)
        staging = target / f"{_STAGING}{uuid.uuid4().hex}"
        trash = target / f"{_TRASH}{uuid.uuid4().hex}"
        staging.mkdir()
        try:
            con.execute("BEGIN TRANSACTION")  # one snapshot for data, lineage and views
            try:
                lay = layout(con, partition_by)
                result = _export_data(con, lay, target, old, staging, trash)
            finally:
                con.execute("ROLLBACK")  # read only: nothing to keep
            location = str(target)
            scripts: dict[str, str] = {}
            unavailable: dict[str, dict[str, str]] = {}
            old_scripts = (old or {}).get("views", {})
            for dialect in dialects_wanted:
                key = script_digest(lay, dialect, location)
                path = target / VIEWS / f"{dialect}.sql"
                if old_scripts.get(dialect, {}).get("digest") == key and path.is_file():
                    scripts[dialect] = key
                    unavailable[dialect] = old_scripts[dialect].get("unavailable", {})
                    continue
                made = script(lay, dialect, location)
                _write_atomic(path, made.text)
                scripts[dialect] = key
                unavailable[dialect] = made.unavailable
            manifest = {
                "format": FORMAT,
                "tool": f"trendledger {__version__}",
                "exported_at": dt.datetime.now(dt.UTC).replace(tzinfo=None)
                .isoformat(timespec="seconds"),
                "spec_hash": lay.spec.digest,
                "table": DATA,
                "partition_by": lay.partition_by,
                "columns": [[c.name, c.type] for c in lay.columns],
                "rows": result["rows"],
                "batches": result["batches"],
                "partitions": result["partitions"],
                "tables": result["tables"],
                "views": {d: {"digest": scripts[d], "unavailable": unavailable[d]}
                          for d in scripts},
            }
            _write_atomic(target / MANIFEST, json.dumps(manifest, indent=1, sort_keys=True))
        finally:
            shutil.rmtree(staging, ignore_errors=True)
            shutil.rmtree(trash, ignore_errors=True)
    return {
        "folder": str(target),
        "partition_by": lay.partition_by,
        "rows": result["rows"],
        "partitions": len(result["partitions"]),
        "written": result["written"],
        "removed": result["removed"],
        "unchanged": result["unchanged"],
        "batches": result["batches"],
        "tables": {t: v["rows"] for t, v in result["tables"].items()},
        "tables_written": result["tables_written"],
        "views": {d: str(target / VIEWS / f"{d}.sql") for d in dialects_wanted},
        "unavailable": {d: u for d, u in unavailable.items() if u},
        "seconds": round(time.perf_counter() - started, 3),
    }


def _export_data(con: duckdb.DuckDBPyConnection, lay: Layout, target: Path,
                 old: dict[str, Any] | None, staging: Path, trash: Path) -> dict[str, Any]:
    """Write what changed into staging, then swap it in; the manifest's new content."""
    data = target / DATA
    signature = [[c.name, c.type] for c in lay.columns]
    same_shape = old is not None and old.get("format") == FORMAT \
        and old.get("partition_by") == lay.partition_by and old.get("columns") == signature
    before: dict[str, dict[str, Any]] = {}
    if same_shape and old is not None:
        before = old.get("partitions", {})
    if not same_shape and data.exists():
        trash.mkdir(exist_ok=True)
        data.rename(trash / DATA)  # a new layout: nothing of the old one is kept
    now = _fingerprints(con, lay)
    changed = sorted(k for k, v in now.items()
                     if before.get(k, {}).get("fingerprint") != v["fingerprint"]
                     or not (data / v["folder"]).is_dir())
    removed = sorted(k for k in before if k not in now)
    if changed:
        _copy_partitions(con, lay, changed, staging / DATA)
    tables: dict[str, dict[str, Any]] = {}
    tables_written: list[str] = []
    old_tables = (old or {}).get("tables", {})
    for table, columns in lay.tables.items():
        found = _table_fingerprint(con, table, columns)
        tables[table] = found
        if old_tables.get(table, {}).get("fingerprint") != found["fingerprint"] \
                or not (target / table / FILE).is_file():
            _copy_table(con, table, staging / f"{table}.parquet")
            tables_written.append(table)
    # swap in: each partition folder is replaced whole, the old one moved aside first
    data.mkdir(exist_ok=True)
    trash.mkdir(exist_ok=True)
    stamp = dt.datetime.now(dt.UTC).replace(tzinfo=None).isoformat(timespec="seconds")
    for i, key in enumerate(changed):
        final = data / now[key]["folder"]
        if final.exists():
            final.rename(trash / f"old-{i}")
        (staging / DATA / f"slot-{i}").rename(final)
        now[key]["written_at"] = stamp
    for key in now:
        if key not in changed:
            now[key]["written_at"] = before[key].get("written_at", stamp)
    wanted = {v["folder"] for v in now.values()}
    for i, stale in enumerate(p for p in sorted(data.iterdir()) if p.name not in wanted):
        stale.rename(trash / f"stale-{i}")  # retracted partitions, strays of a crash
    for table in tables_written:
        (target / table).mkdir(exist_ok=True)
        os.replace(staging / f"{table}.parquet", target / table / FILE)
    for table in old_tables:
        if table not in tables and (target / table).is_dir():
            (target / table).rename(trash / f"table-{table}")
    batches = sorted({b for v in now.values() for b in v["batches"]})
    return {
        "rows": sum(v["rows"] for v in now.values()),
        "batches": batches,
        "partitions": now,
        "written": changed,
        "removed": removed,
        "unchanged": len(now) - len(changed),
        "tables": tables,
        "tables_written": tables_written,
    }
