"""The public entry object: one store, opened on a path, with a method per CLI verb."""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Iterator
from datetime import date
from pathlib import Path
from types import TracebackType
from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import (
    BusyError,
    InputError,
    QueryRefused,
    StoreError,
    TrendledgerError,
    first_line,
)
from trendledger.query import limits
from trendledger.spec import Spec
from trendledger.spec import load as load_spec
from trendledger.store import db as store
from trendledger.store import evolve, ingest, lineage, publish, sandbox, waiting
from trendledger.store.evolve import SpecChange
from trendledger.store.ingest import BatchSummary, Progress
from trendledger.store.lineage import CheckReport
from trendledger.trace import Writer
from trendledger.views import install as views
from trendledger.views import read as fits_mod

#: Seconds a command waits for another process's lock before giving up.
DEFAULT_WAIT = 5.0
#: A read-only connection that cannot touch files or change its own settings.
LOCKED = sandbox.LOCKED
read_config = sandbox.read_config


class Ledger:
    """A trendledger store.

    >>> with Ledger.open("trendledger.duckdb", read_only=True) as led:  # doctest: +SKIP
    ...     led.fits("fade").head()
    """

    def __init__(self, path: Path, con: duckdb.DuckDBPyConnection, read_only: bool,
                 lock: publish.WriterLock | None = None) -> None:
        self.path = path
        self.con = con
        self.read_only = read_only
        self._lock = lock
        #: What the last publish did (how the copy was made, bytes, seconds).
        self.last_publish: publish.Published | None = None
        self._meta = store.meta(con)
        self.spec: Spec = store.stored_spec(con)

    # -- opening ---------------------------------------------------------------------------
    @classmethod
    def init(
        cls, spec_path: str | Path, store_path: str | Path | None = None, *, force: bool = False,
        trace: Writer | None = None,
    ) -> Ledger:
        """Create a store for the spec (default: ``trendledger.duckdb`` beside it) and open it."""
        spec_file = Path(spec_path)
        spec = load_spec(spec_file)
        root = spec_file.resolve().parent
        target = Path(store_path) if store_path else root / store.DEFAULT_NAME
        layout = publish.Layout.of(target)
        if layout.exists() and not force:
            raise StoreError("a store already exists here", file=str(target),
                             hint="pass --force to replace it (its data is lost)")
        target.parent.mkdir(parents=True, exist_ok=True)
        lock = publish.WriterLock.acquire(layout, wait=DEFAULT_WAIT, command=_command("init"))
        assert lock is not None
        try:
            for old in layout.files():
                if old != layout.lock:
                    old.unlink(missing_ok=True)
            lock.mark("writing")
            store.create(target, spec, root=root, trace=trace)
            con = store.connect(layout.writer, read_only=False, trace=trace)
        except BaseException:
            lock.release()
            store.discard(target)
            raise
        led = cls(target, con, False, lock)
        try:
            led._install_views()
            led._publish(None)
        except BaseException as err:  # half a store would block the next init
            led.close()
            store.discard(target)
            if isinstance(err, duckdb.Error):
                raise StoreError(f"cannot create the store: {first_line(err)}",
                                 file=str(target)) from err
            raise
        return led

    @classmethod
    def open(
        cls, path: str | Path, *, read_only: bool = False, wait: float = DEFAULT_WAIT,
        trace: Writer | None = None,
    ) -> Ledger:
        """Open an existing store; a read-only store cannot write and cannot read files.

        ``trace`` (e.g. ``print``) receives every SQL statement with its parameters.
        """
        target = Path(path)
        if read_only:
            # A killed writer may have left its last commit unpublished, or a foreign
            # client a log beside the published copy: publish afresh first.
            publish.settle(target)
            try:
                con = store.connect(target, read_only=True, wait=0,
                                    config=read_config(target), trace=trace)
            except BusyError:
                # Another program holds the published copy read-write; unless a writer is
                # running, a fresh copy at the path lets readers in at once.
                publish.settle(target, fresh=True)
                con = store.connect(target, read_only=True, wait=wait,
                                    config=read_config(target), trace=trace)
            return cls(target, con, True)
        layout = publish.Layout.of(target)
        if not layout.exists():
            store.connect(target, read_only=True)  # raises the usual "no store here"
        lock = publish.WriterLock.acquire(layout, wait=wait, command=_command())
        assert lock is not None
        try:
            if not publish.convert(lock):  # a store of an earlier version gets its copy
                publish.finish_due_publish(lock)
            con = store.connect(layout.writer, read_only=False, wait=wait, trace=trace,
                                busy="the writer's copy of the store is held by another "
                                     "program; close it there, then retry")
        except BaseException:
            lock.release()
            raise
        return cls(target, con, False, lock)

    def close(self) -> None:
        try:
            self.con.close()
        finally:
            if self._lock is not None:
                self._lock.release()

    def __enter__(self) -> Ledger:
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        value: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # -- facts -----------------------------------------------------------------------------
    @property
    def root(self) -> Path:
        """The spec's folder: file paths in the lineage are relative to it."""
        return Path(self._meta["root"])

    @property
    def info(self) -> dict[str, str]:
        """Store metadata (spec hash, schema version, creation time) without the spec text."""
        return {k: v for k, v in self._meta.items() if k != "spec"}

    def _writable(self) -> None:
        if self.read_only or self._lock is None:
            raise StoreError("the store was opened read-only", file=str(self.path))

    @contextlib.contextmanager
    def _changing(self, progress: Progress | None = None) -> Iterator[None]:
        """Around one change of the writer's copy: mark a publish as due, and publish the
        change when it is done. Our own errors leave the store as it was (nothing was
        committed), so no publish is due after them; anything else leaves it due."""
        self._writable()
        assert self._lock is not None
        self._lock.mark("writing")
        try:
            yield
        except TrendledgerError:
            self._lock.mark("published")
            raise
        self._publish(progress)

    def _publish(self, progress: Progress | None) -> None:
        assert self._lock is not None
        self.last_publish = publish.publish(self.con, self._lock, progress)

    def _install_views(self) -> int:
        self._writable()
        self.con.execute("BEGIN TRANSACTION")
        try:
            n = views.install(self.con, self.spec)
            self.con.execute("COMMIT")
        except BaseException:
            self.con.execute("ROLLBACK")
            raise
        return n

    # -- verbs -----------------------------------------------------------------------------
    def append(
        self,
        patterns: list[str] | None = None,
        *,
        replace: bool = False,
        skip_bad: bool = False,
        rehash: bool = False,
        retry_rejected: bool = False,
        allow_shrink: bool = False,
        why: str | None = None,
        progress: Progress | None = None,
        command: str | None = None,
    ) -> BatchSummary:
        """Append files (default: every file the spec's template matches) as one batch.

        A file refused earlier waits until its content changes; ``retry_rejected``
        tries such files again (see :meth:`waiting`). Rows a replacement takes out move to
        ``measurements_history`` with ``why``; a replacement with fewer rows than the old
        version is refused unless ``allow_shrink``.
        """
        refused: InputError | None = None
        with self._changing(progress):
            try:
                summary = ingest.append(
                    self.con, self.spec, self.root, patterns,
                    replace=replace, skip_bad=skip_bad, rehash=rehash,
                    retry_rejected=retry_rejected, allow_shrink=allow_shrink, why=why,
                    progress=progress,
                    command=command if command is not None else " ".join(sys.argv),
                )
            except InputError as err:
                # the batch did not happen, but the note that its bad files wait was
                # committed (waiting.py): publish it, then say why the batch was refused
                refused = err
        if refused is not None:
            raise refused
        return summary

    def lineage(
        self, files: bool = False, *, batch: int | None = None, path: str | None = None
    ) -> pd.DataFrame:
        """Batches, or with ``files=True`` every file; filter by batch id or a path glob."""
        if files:
            return lineage.files(self.con, batch=batch, path=path)
        return lineage.batches(self.con, batch=batch)

    def retract(
        self, *, why: str, batch: int | None = None, file: str | None = None
    ) -> dict[str, int]:
        """Take a batch's or a file's rows out of the fits; they move to
        ``measurements_history`` and the lineage marks them retracted."""
        with self._changing():
            done = lineage.retract(self.con, why=why, batch=batch, path=file)
        return done

    def restore(
        self, *, why: str, batch: int | None = None, file: str | None = None
    ) -> dict[str, int]:
        """Undo a retraction: the rows come back and the lineage reads as before it."""
        with self._changing():
            done = lineage.restore(self.con, why=why, batch=batch, path=file)
        return done

    def waiting(self, every: bool = False) -> pd.DataFrame:
        """Files refused by an append and not tried since (``every``: also those set aside
        or loaded later), with the reason and how often they were refused."""
        return waiting.listing(self.con, every)

    def set_aside(self, file: str, *, why: str) -> None:
        """Set a waiting file aside for good: appends pass over it, the reason is kept."""
        with self._changing():
            self.con.execute("BEGIN TRANSACTION")
            try:
                waiting.set_aside(self.con, file, why, store.utcnow())
                self.con.execute("COMMIT")
            except BaseException:
                self.con.execute("ROLLBACK")
                raise

    def check(self, root: str | Path | None = None) -> CheckReport:
        """Re-hash loaded files on disk, recount rows, and compare the published copy with
        the writer's; see :class:`CheckReport`."""
        folder = Path(root) if root else self.root
        if not folder.is_dir():  # every file would read as missing, and check would pass
            raise TrendledgerError("the root folder does not exist", file=str(folder),
                                   hint="pass the folder the data moved to with --root")
        report = lineage.check(self.con, folder, self.spec.source.allow)
        layout = publish.Layout.of(self.path)
        other = layout.writer if self.read_only else layout.published
        lineage.compare_copies(self.con, other, report)
        return report

    def fits(
        self,
        name: str | None = None,
        where: str | None = None,
        *,
        sort: str | None = None,
        desc: bool = False,
        limit: int | None = None,
        view: str | None = None,
        break_at: float | None = None,
        timeout: float | None = limits.DEFAULT_TIMEOUT,
    ) -> pd.DataFrame:
        """Per-group fits of ``name`` (optional with one fit); ``view`` picks a companion view.

        ``break_at=x`` gives the Chow test for a break at x per group instead (watch.break_test).
        The read is stopped after ``timeout`` seconds (None: no limit).
        """
        fit = self.spec.fit(name)
        try:
            with limits.time_limit(self.con, timeout, "the fits read"):
                if break_at is not None:
                    from trendledger.views.watch import break_test

                    if view:
                        raise StoreError("give either a companion view or a break point, "
                                         "not both")
                    return break_test(self.con, fit, break_at, where=where, sort=sort,
                                      desc=desc, limit=limit)
                target = fit.view + (f"_{view}" if view else "")
                return fits_mod.read(self.con, target, where=where, sort=sort, desc=desc,
                                     limit=limit)
        except duckdb.Error as err:
            # e.g. a --where that is no condition (a text column) or compares text with a number
            raise QueryRefused(f"the fits read failed: {first_line(err)}",
                               hint="check the --where condition" if where else None) from err

    def fleet(
        self,
        name: str | None = None,
        where: str | None = None,
        *,
        units: bool = False,
        sort: str | None = None,
        desc: bool = False,
        limit: int | None = None,
    ) -> pd.DataFrame:
        """Each fleet of ``name``'s units taken together (``fit_<name>_fleet``: pooled and
        random-effects slopes, spread, poolability), or with ``units=True`` each unit against
        the others of its fleet (``fit_<name>_fleet_units``)."""
        fit = self.spec.fit(name)
        target = fit.view + ("_fleet_units" if units else "_fleet")
        return fits_mod.read(self.con, target, where=where, sort=sort, desc=desc, limit=limit)

    def bend(
        self,
        name: str | None = None,
        where: str | None = None,
        *,
        sort: str | None = None,
        desc: bool = False,
        limit: int | None = None,
    ) -> pd.DataFrame:
        """Per group, where the line of fit ``name`` bends and the line since the last
        significant bend (the ``fit_<name>_bend`` view; see sql/views/bend.sql)."""
        fit = self.spec.fit(name)
        if fit.through_origin:
            raise StoreError(f"fit {fit.name!r} has no bend view: it is fitted through the "
                             "origin", hint="the bend search needs lines with an intercept")
        return fits_mod.read(self.con, fit.view + "_bend", where=where, sort=sort, desc=desc,
                             limit=limit)

    def watch(self, name: str | None = None) -> pd.DataFrame:
        """Today's alerts of fit ``name`` (all fits when None), newest unit first (watch.alerts)."""
        from trendledger.views.watch import alerts

        return alerts(self.con, self.spec, name)

    def update_spec(self, spec_path: str | Path, note: str | None = None) -> SpecChange:
        """Switch the store to a changed spec: new columns and fits; nothing stored is lost."""
        self._writable()
        new = load_spec(Path(spec_path))
        with self._changing():
            change = evolve.apply(self.con, self.spec, new, note=note)
        store.set_zone(self.con, new.source.timezone)
        self.spec = new
        self._meta = store.meta(self.con)
        return change

    def views(self) -> pd.DataFrame:
        """Installed views and macro files with their descriptions."""
        rows = views.listing(self.con)
        return pd.DataFrame(rows, columns=["name", "kind", "fit", "description"])

    def query(
        self,
        sql: str,
        params: dict[str, Any] | None = None,
        *,
        timeout: float | None = limits.DEFAULT_TIMEOUT,
        max_rows: int | None = None,
    ) -> pd.DataFrame:
        """Run one read-only statement with bound named parameters (``$name``).

        Stopped after ``timeout`` seconds (None: no limit); with ``max_rows`` at
        most that many rows are fetched and ``attrs["truncated"]`` says if more were.
        """
        from trendledger.query.run import run

        return run(self.con, sql, params or {}, timeout=timeout, max_rows=max_rows)

    def report(
        self,
        name: str | None = None,
        *,
        out: str | Path,
        since: str | date | None = None,
        groups: list[str] | None = None,
        pair: str | None = None,
        force: bool = False,
    ) -> Path:
        """Write ``out/index.html`` (self-contained) and its PNG images; returns the page.

        Files in ``out`` that an earlier report did not write are never replaced
        unless ``force``."""
        from trendledger.report.build import build

        return build(self, out, name=name, since=since, groups=groups, pair=pair, force=force)

    def export(self, folder: str | Path, partition_by: str | None = None) -> dict[str, Any]:
        """Write Parquet data, lineage and every view in Spark/PostgreSQL/Trino/DuckDB SQL to
        ``folder`` (incremental); needs a read-write ledger, see :mod:`trendledger.export`."""
        from trendledger.export.write import export

        return export(self, folder, partition_by)

    def sql(self, dialect: str = "duckdb", location: str = ".") -> str:
        """The views (and the sources over an export at ``location``) in ``dialect``'s SQL:
        what ``export`` writes to ``views/<dialect>.sql``."""
        from trendledger.export.write import sql

        return sql(self, dialect, location).text


def _command(fallback: str = "") -> str:
    """The command line, recorded with the writer's lock so a busy message can name it."""
    words = [os.path.basename(sys.argv[0])] + sys.argv[1:] if sys.argv and sys.argv[0] else []
    return " ".join(words) or fallback


def default_store(store_option: str | None) -> Path:
    return store.resolve(store_option, os.environ.get("TRENDLEDGER_STORE"))
