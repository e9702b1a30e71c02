"""Print every SQL statement a connection runs, with its parameters (``--trace``).

The fastest way to see what the store did: each statement goes to the given writer
(stderr from the CLI) as it is sent to DuckDB, before it runs, so the last one printed
is the one that failed.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, cast

import duckdb

Writer = Callable[[str], object]


class Traced:
    """A DuckDB connection that reports ``execute``/``executemany``/``sql`` calls.

    Everything else is the connection's own (attribute access is passed through), so
    library code uses it as the connection it wraps.
    """

    def __init__(self, con: duckdb.DuckDBPyConnection, write: Writer) -> None:
        self.raw = con
        self._write = write
        self._count = 0

    def _show(self, query: object, parameters: object = None) -> None:
        self._count += 1
        text = str(query).strip()
        lines = [f"-- [{self._count}] " + text.replace("\n", "\n--     ")]
        if parameters not in (None, [], {}, ()):
            lines.append(f"--     parameters: {parameters!r}")
        self._write("\n".join(lines))

    def execute(self, query: object, parameters: object = None) -> Any:
        self._show(query, parameters)
        if parameters is None:
            return self.raw.execute(query)  # type: ignore[arg-type]
        return self.raw.execute(query, parameters)  # type: ignore[arg-type]

    def executemany(self, query: object, parameters: Sequence[Any]) -> Any:
        rows = list(parameters)
        self._show(query, f"{len(rows)} row(s), first {rows[0]!r}" if rows else "0 rows")
        return self.raw.executemany(query, rows)  # type: ignore[arg-type]

    def sql(self, query: str, *args: Any, **kwargs: Any) -> Any:
        self._show(query, kwargs.get("params"))
        return self.raw.sql(query, *args, **kwargs)

    def __getattr__(self, name: str) -> Any:
        return getattr(self.raw, name)

    def __enter__(self) -> Traced:
        return self

    def __exit__(self, *exc: object) -> None:
        self.raw.close()


def wrap(con: duckdb.DuckDBPyConnection, write: Writer | None) -> duckdb.DuckDBPyConnection:
    """``con`` itself, or a traced stand-in for it when ``write`` is given."""
    if write is None:
        return con
    return cast(duckdb.DuckDBPyConnection, Traced(con, write))


def unwrap(con: object) -> object:
    """The DuckDB connection under a traced one (for isinstance checks)."""
    return con.raw if isinstance(con, Traced) else con
