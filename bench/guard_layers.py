"""Which layer stops which hostile query: the guard's modules against the locked connection.

For every query of the hostile corpus (``tests/test_guard.py``'s REFUSED list, plus
dotted and split names that DuckDB would read as files), this runs:

* the locked read-only connection alone, as before (external access off, settings
  locked), with DuckDB's default temporary folder beside the store, where a CSV is
  planted;
* the same connection with a private temporary folder and a memory limit (what a
  read-only Ledger opens today, :mod:`trendledger.store.sandbox`);
* the guard, noting which of its modules refused the query.

It prints, per guard module, how many queries it refused that the connection alone
would have run: what each layer adds. Not a speed benchmark; it measures protection.
Run ``python bench/guard_layers.py`` (a few seconds).
"""

from __future__ import annotations

import importlib.util
import sys
import tempfile
import traceback
from collections import Counter
from pathlib import Path

import duckdb

from trendledger.errors import QueryRefused
from trendledger.query.guard import check_query
from trendledger.query.run import store_names
from trendledger.store.sandbox import LOCKED, read_config

HERE = Path(__file__).resolve().parent


def corpus() -> tuple[str, list[str]]:
    spec = importlib.util.spec_from_file_location("guard_cases", HERE.parent / "tests" /
                                                  "test_guard.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.SCHEMA, [sql for sql, _ in module.REFUSED]


def runs(con: duckdb.DuckDBPyConnection, sql: str) -> bool:
    try:
        result = con.execute(sql)
        if result is None:  # no statement at all: nothing ran
            return False
        result.fetchall()
    except Exception:
        return False
    return True


def refused_by(sql: str, catalog: str, names: list[str]) -> str | None:
    """The guard module that refused ``sql`` (None if accepted)."""
    try:
        check_query(sql, catalog=catalog, names=names)
    except QueryRefused as refusal:
        frames = traceback.extract_tb(refusal.__traceback__)
        modules = [Path(f.filename).stem for f in frames if "trendledger/query" in f.filename]
        return modules[-1] if modules else "guard"
    return None


def main() -> None:
    schema, hostile = corpus()
    with tempfile.TemporaryDirectory() as tmp:
        store = Path(tmp) / "store.duckdb"
        with duckdb.connect(str(store)) as writer:
            writer.execute(schema)
        planted = Path(tmp) / "store.duckdb.tmp"
        planted.mkdir()
        (planted / "x.csv").write_text("a,b\n1,2\n")
        hostile += [f'SELECT * FROM "{planted}/x".csv', f"SELECT * FROM '{planted}/x.csv'",
                    f'SUMMARIZE "{planted}/x".csv', f'DESCRIBE "{planted}/x".csv']

        con = duckdb.connect(str(store), read_only=True, config=dict(LOCKED))
        catalog, names = store_names(con)
        alone = {sql: runs(con, sql) for sql in hostile}
        con.close()
        con = duckdb.connect(str(store), read_only=True, config=read_config(store))
        private = {sql: runs(con, sql) for sql in hostile}
        con.close()

        by_module: Counter[str] = Counter()
        added: Counter[str] = Counter()
        print(f"{'locked':>6} {'+temp':>6}  {'guard module':<12} query")
        for sql in hostile:
            module = refused_by(sql, catalog, names) or "ACCEPTED"
            by_module[module] += 1
            if alone[sql]:
                added[module] += 1
            shown = " ".join(sql.split())[:70]
            print(f"{'runs' if alone[sql] else 'stops':>6} {'runs' if private[sql] else 'stops':>6}"
                  f"  {module:<12} {shown}")
        print()
        print(f"{len(hostile)} hostile queries; the locked connection alone runs "
              f"{sum(alone.values())}, with a private temporary folder "
              f"{sum(private.values())}.")
        for module, count in sorted(by_module.items()):
            print(f"  {module:<12} refuses {count:3d}, of which the connection alone would run "
                  f"{added[module]}")
        if by_module.get("ACCEPTED"):
            sys.exit("a hostile query was accepted by the guard")


if __name__ == "__main__":
    main()
