"""Open, create and describe the DuckDB files that hold everything.

One writing process or many reading processes may hold a DuckDB file at a
time; DuckDB enforces that with a file lock. Writers therefore work on a
private copy and publish it at the store's path (:mod:`trendledger.store.publish`),
so readers and writers never meet on one file. A lock DuckDB still reports
(a foreign client holding a file read-write) becomes :class:`BusyError`, after
waiting for it to be released.
"""

from __future__ import annotations

import datetime as dt
import time
import tomllib
from collections.abc import Callable
from pathlib import Path
from typing import Any

import duckdb
from sqlglot import exp

from trendledger.errors import BusyError, StoreError, first_line
from trendledger.spec import Spec
from trendledger.spec import parse as parse_spec
from trendledger.store.publish import Layout
from trendledger.trace import Writer
from trendledger.trace import wrap as trace_wrap
from trendledger.version import __version__
from trendledger.views import templates

#: The store's own tables are built by sql/schema/NNN_*.sql, applied in order;
#: a store records the last one it has and is upgraded in place on a write open.
SCHEMA_VERSION = 4
#: Oldest DuckDB storage format we write, so 1.5.x clients can open the file.
STORAGE_VERSION = "v1.5.0"
DEFAULT_NAME = "trendledger.duckdb"

Trace = Callable[[str, object], None]


def utcnow() -> dt.datetime:
    """Wall-clock UTC time from the client (DuckDB's now() is the transaction start)."""
    return dt.datetime.now(dt.UTC).replace(tzinfo=None)


def _is_lock_error(err: Exception) -> bool:
    text = str(err)
    return "Could not set lock" in text or "Conflicting lock" in text


def connect(
    path: Path,
    *,
    read_only: bool,
    wait: float = 0.0,
    config: dict[str, Any] | None = None,
    trace: Writer | None = None,
    busy: str | None = None,
) -> duckdb.DuckDBPyConnection:
    """Open an existing DuckDB file of a store, waiting up to ``wait`` seconds for another
    process's lock; ``busy`` is what the error says then.

    ``trace`` receives every statement run on the connection (see :mod:`trendledger.trace`).
    """
    if not path.exists():
        raise StoreError(
            "no store here", file=str(path),
            hint="create one with 'trendledger init --spec FILE' or pass --store",
        )
    deadline = time.monotonic() + max(wait, 0.0)
    delay = 0.05
    while True:
        try:
            settings = dict(config or {})
            lock = bool(settings.pop("lock_configuration", False))
            con = trace_wrap(duckdb.connect(str(path), read_only=read_only, config=settings),
                             trace)
            # Session settings first, then the lock: DuckDB's own progress bar would
            # write to our stdout, and a locked connection can no longer turn it off.
            con.execute("SET enable_progress_bar = false")
            _spec_zone(con)
            if lock:
                con.execute("SET lock_configuration = true")
        except duckdb.IOException as err:
            if not _is_lock_error(err):
                raise StoreError(f"cannot open the store: {first_line(err)}",
                                 file=str(path)) from err
            if time.monotonic() >= deadline:
                raise BusyError(busy or held_message(err), file=str(path)) from err
            time.sleep(delay)
            delay = min(delay * 2, 0.5)
            continue
        except duckdb.Error as err:
            raise StoreError(f"cannot open the store: {first_line(err)}", file=str(path)) from err
        try:
            found = con.execute(
                "SELECT value FROM tl_meta WHERE key = 'schema_version'"
            ).fetchall()
        except duckdb.Error as err:
            con.close()
            raise StoreError("this file is not a trendledger store", file=str(path)) from err
        version = int(found[0][0]) if found else 0
        if version > SCHEMA_VERSION:
            con.close()
            raise StoreError(
                f"the store has schema version {version}, newer than this tool's "
                f"{SCHEMA_VERSION}", file=str(path), hint="upgrade trendledger",
            )
        if version < SCHEMA_VERSION and not read_only:
            try:
                migrate(con, version)
            except BaseException:
                con.close()
                raise
        return con


def held_message(err: Exception) -> str:
    """The busy message for a file another program holds read-write (trendledger's own
    writers never hold the file people read), naming that program as DuckDB does."""
    holder = ""
    text = str(err)
    if "held in " in text:
        holder = " (" + text.split("held in ", 1)[1].splitlines()[0].strip().rstrip(".") + ")"
    return (f"the file is open read-write in another program{holder}; close it there or "
            "open it read-only (duckdb -readonly), then retry or pass --wait SECONDS")


def set_zone(con: duckdb.DuckDBPyConnection, zone: str) -> None:
    """Do date-time arithmetic in ``zone``: DuckDB's default is the machine's zone, so the
    same store would read a time without offset, or cut a day, differently in each office."""
    try:
        con.execute("SET TimeZone = " + exp.Literal.string(zone).sql("duckdb"))
    except duckdb.Error as err:
        raise StoreError(f"DuckDB does not know the time zone {zone!r}: {first_line(err)}",
                         hint="give another IANA name under [source] timezone") from err


def _spec_zone(con: duckdb.DuckDBPyConnection) -> None:
    """Set the zone the stored spec names (default UTC) on a new connection."""
    try:
        rows = con.execute("SELECT value FROM tl_meta WHERE key = 'spec'").fetchall()
    except duckdb.Error:
        return  # not a store: the caller says so next
    zone = "UTC"
    if rows and rows[0][0]:
        try:
            source = tomllib.loads(rows[0][0]).get("source", {})
        except tomllib.TOMLDecodeError:
            source = {}
        if isinstance(source, dict) and isinstance(source.get("timezone"), str):
            zone = source["timezone"]
    set_zone(con, zone)


def first_row(
    con: duckdb.DuckDBPyConnection, sql: str, params: object = None
) -> tuple[Any, ...] | None:
    """The first row of a query, reading the result to its end.

    DuckDB 2 refuses further work on a connection while a result is only partly
    fetched, so ``fetchone()`` on a longer result would leave the connection stuck.
    """
    rows = con.execute(sql, params).fetchall()
    return tuple(rows[0]) if rows else None


def schema_steps() -> list[tuple[int, str]]:
    """(version, relative path) of every schema file, in order."""
    steps = []
    for path in sorted((templates.sql_dir() / "schema").glob("*.sql")):
        steps.append((int(path.name.split("_", 1)[0]), f"schema/{path.name}"))
    return steps


def migrate(con: duckdb.DuckDBPyConnection, version: int) -> list[int]:
    """Apply every schema step above ``version`` in one transaction; record each one."""
    applied = []
    con.execute("BEGIN TRANSACTION")
    try:
        for step, relative in schema_steps():
            if step <= version:
                continue
            for stmt in templates.load(relative).render({}):
                con.execute(stmt)
            applied.append(step)
        set_meta(con, "schema_version", str(SCHEMA_VERSION))
        for step in applied:
            if step >= 2:  # the log table itself arrives with step 2
                con.execute("INSERT INTO tl_migrations VALUES (?, ?, ?)",
                            [step, utcnow(), __version__])
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return applied


def measurements_ddl(spec: Spec) -> str:
    """CREATE TABLE for the data: declared columns, template fields, then file_id."""
    columns = [
        exp.ColumnDef(
            this=exp.to_identifier(name, quoted=True),
            kind=exp.DataType.build(typ, dialect="duckdb"),
        )
        for name, typ in spec.all_columns.items()
    ]
    columns.append(
        exp.ColumnDef(this=exp.to_identifier("file_id", quoted=True),
                      kind=exp.DataType.build("BIGINT"))
    )
    create = exp.Create(
        this=exp.Schema(this=exp.to_table("measurements"), expressions=columns),
        kind="TABLE",
    )
    return create.sql(dialect="duckdb")


def create(store_path: Path, spec: Spec, *, root: Path, trace: Writer | None = None) -> None:
    """Create the writer's copy of a new store for ``spec`` (the caller holds the writer's
    lock, has removed an old store and publishes the new one)."""
    path = Layout.of(store_path).writer
    try:
        con = trace_wrap(duckdb.connect(
            str(path), config={"storage_compatibility_version": STORAGE_VERSION}), trace)
    except duckdb.Error as err:
        discard(store_path)  # e.g. a full disk: a 0-byte file would read as "already exists"
        raise StoreError(f"cannot create the store: {first_line(err)}", file=str(path)) from err
    try:
        con.execute("BEGIN")
        for stmt in templates.load("schema/001_base.sql").render({}):
            con.execute(stmt)
        con.execute(measurements_ddl(spec))
        meta = {
            "schema_version": "1",
            "spec": spec.text,
            "spec_hash": spec.digest,
            "root": str(root.resolve()),
            "created_at": utcnow().isoformat(timespec="seconds"),
            "created_by": __version__,
        }
        con.executemany("INSERT INTO tl_meta VALUES (?, ?)", list(meta.items()))
        con.execute("COMMIT")
        # A new store climbs the same schema steps as an old one: one code path.
        migrate(con, 1)
    except BaseException:
        con.close()
        discard(store_path)
        raise
    con.close()


def discard(path: Path) -> None:
    """Delete a store this process has just created and failed to finish: both copies,
    their logs and the lock file."""
    for leftover in Layout.of(path).files():
        leftover.unlink(missing_ok=True)


def meta(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    return {k: v for k, v in con.execute("SELECT key, value FROM tl_meta").fetchall()}


def set_meta(con: duckdb.DuckDBPyConnection, key: str, value: str) -> None:
    con.execute("DELETE FROM tl_meta WHERE key = ?", [key])
    con.execute("INSERT INTO tl_meta VALUES (?, ?)", [key, value])


def stored_spec(con: duckdb.DuckDBPyConnection) -> Spec:
    text = meta(con).get("spec")
    if text is None:
        raise StoreError("the store holds no spec")
    return parse_spec(text, path="<spec stored in the store>")


def resolve(store: str | Path | None, env: str | None, default_dir: Path | None = None) -> Path:
    """Which store a command means: --store, then $TRENDLEDGER_STORE, then the default name."""
    if store:
        return Path(store)
    if env:
        return Path(env)
    return (default_dir or Path.cwd()) / DEFAULT_NAME
