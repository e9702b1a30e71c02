"""The public entry object: one store, opened on a path, with a method per CLI verb."""

from __future__ import annotations

import os
import sys
from datetime import date
from pathlib import Path
from types import TracebackType
from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import QueryRefused, StoreError, TrendledgerError, first_line
from trendledger.query import limits
from trendledger.spec import Spec
from trendledger.spec import load as load_spec
from trendledger.store import db as store
from trendledger.store import evolve, ingest, lineage, sandbox
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

    def __init__(self, path: Path, con: duckdb.DuckDBPyConnection, read_only: bool) -> None:
        self.path = path
        self.con = con
        self.read_only = read_only
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
        store.create(target, spec, root=root, force=force, trace=trace)
        led = cls.open(target, trace=trace)
        try:
            led._install_views()
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
        con = store.connect(target, read_only=read_only, wait=wait,
                            config=read_config(target) if read_only else None, trace=trace)
        return cls(target, con, read_only)

    def close(self) -> None:
        self.con.close()

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
        if self.read_only:
            raise StoreError("the store was opened read-only", file=str(self.path))

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
        progress: Progress | None = None,
        command: str | None = None,
    ) -> BatchSummary:
        """Append files (default: every file the spec's template matches) as one batch."""
        self._writable()
        return ingest.append(
            self.con, self.spec, self.root, patterns,
            replace=replace, skip_bad=skip_bad, rehash=rehash, progress=progress,
            command=command if command is not None else " ".join(sys.argv),
        )

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
        """Remove a batch's or a file's rows; the lineage keeps them, marked retracted."""
        self._writable()
        return lineage.retract(self.con, why=why, batch=batch, path=file)

    def check(self, root: str | Path | None = None) -> CheckReport:
        """Re-hash loaded files on disk and recount rows; see :class:`CheckReport`."""
        folder = Path(root) if root else self.root
        if not folder.is_dir():  # every file would read as missing, and check would pass
            raise TrendledgerError("the root folder does not exist", file=str(folder),
                                   hint="pass the folder the data moved to with --root")
        return lineage.check(self.con, folder, self.spec.source.allow)

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

    def watch(self, name: str | None = None) -> pd.DataFrame:
        """Today's alerts of fit ``name`` (all fits when None), newest unit first (watch.alerts)."""
        from trendledger.views.watch import alerts

        return alerts(self.con, self.spec, name)

    def update_spec(self, spec_path: str | Path, note: str | None = None) -> SpecChange:
        """Switch the store to a changed spec: new columns and fits; nothing stored is lost."""
        self._writable()
        new = load_spec(Path(spec_path))
        change = evolve.apply(self.con, self.spec, new, note=note)
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


def default_store(store_option: str | None) -> Path:
    return store.resolve(store_option, os.environ.get("TRENDLEDGER_STORE"))
