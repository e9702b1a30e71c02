"""trendledger: daily instrument batches in one DuckDB store, per-unit linear trends in SQL."""

from trendledger.ledger import Ledger  # noqa: E402
from trendledger.version import __version__

from .errors import (  # noqa: E402
    BusyError,
    InputError,
    QueryRefused,
    SpecError,
    StoreError,
    TrendledgerError,
)

__all__ = [
    "BusyError",
    "InputError",
    "Ledger",
    "QueryRefused",
    "SpecError",
    "StoreError",
    "TrendledgerError",
    "__version__",
]
