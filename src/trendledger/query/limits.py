"""Bounds on what one read may cost: time, rows shown, memory.

The guard decides *what* a query may do; these limits decide *how much*. A
read that never ends (``range(10^12)``, an endless recursive CTE,
``sleep_ms``) would otherwise hold a read lock on the store and make every
writer wait. The memory limit and the private temporary folder are connection
settings (:mod:`trendledger.store.sandbox`); the time limit interrupts the statement
from a timer thread; the row limit stops fetching once enough rows are in.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Iterator
from contextlib import contextmanager

import duckdb
import pandas as pd

from trendledger.errors import QueryRefused

#: Seconds a query or a fits read may run before it is stopped.
DEFAULT_TIMEOUT = 60.0
#: Rows printed to a terminal before the rest is left out (files get every row).
DEFAULT_MAX_ROWS = 10_000


def check_timeout(seconds: float | None) -> float | None:
    """A usable time limit, or None for no limit (0 means none too)."""
    if seconds is None or seconds == 0:
        return None
    if not math.isfinite(seconds) or seconds < 0:
        raise QueryRefused("--timeout must be a number of seconds, zero for no limit",
                           hint="for example: --timeout 30")
    return float(seconds)


@contextmanager
def time_limit(con: duckdb.DuckDBPyConnection, seconds: float | None,
               what: str = "the query") -> Iterator[None]:
    """Interrupt whatever ``con`` runs after ``seconds``; raise a one-line refusal then."""
    limit = check_timeout(seconds)
    if limit is None:
        yield
        return
    fired = threading.Event()

    def stop() -> None:
        fired.set()
        con.interrupt()

    timer = threading.Timer(limit, stop)
    timer.daemon = True
    timer.start()
    try:
        yield
    except duckdb.InterruptException as err:
        if fired.is_set():
            raise QueryRefused(
                f"{what} was stopped after {limit:g} s (the time limit)",
                hint="narrow it, or pass --timeout SECONDS (0 for no limit)",
            ) from err
        raise
    finally:
        timer.cancel()


def fetch(result: duckdb.DuckDBPyConnection, max_rows: int | None) -> pd.DataFrame:
    """The rows of an executed statement as a DataFrame, at most ``max_rows`` of them.

    Fetching stops as soon as there are more than ``max_rows``, so a huge result
    is never built in memory just to be cut; ``attrs["truncated"]`` says so.
    """
    if max_rows is None:
        return result.df()
    chunks: list[pd.DataFrame] = []
    count = 0
    while count <= max_rows:
        chunk = result.fetch_df_chunk(1)
        if chunk.empty:
            if not chunks:
                chunks.append(chunk)
            break
        chunks.append(chunk)
        count += len(chunk)
    frame = pd.concat(chunks, ignore_index=True) if len(chunks) > 1 else chunks[0]
    truncated = len(frame) > max_rows
    if truncated:
        frame = frame.iloc[:max_rows].copy()
    frame.attrs["truncated"] = truncated
    return frame
