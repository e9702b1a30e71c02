"""trendledger: daily instrument batches in one DuckDB store, per-unit linear trends in SQL."""

__version__ = "0.1.0"

from trendledger.ledger import Ledger  # noqa: E402

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
