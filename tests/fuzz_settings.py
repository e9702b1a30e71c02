"""How hard the generated tests attack: a short run by default, a long one on demand.

``TRENDLEDGER_FUZZ=long`` multiplies every example budget by 25 (a number instead of
``long`` multiplies by that number). The same variable lengthens the crash and race
loops by a fifth of that factor (``audit.attack_rounds``).

    TRENDLEDGER_FUZZ=long .venv/bin/pytest tests/test_hostile_input.py -q

The profiles are also registered under hypothesis' own names, so
``--hypothesis-profile=trendledger-long`` works as well for tests that do not set their
own budget.
"""

from __future__ import annotations

from hypothesis import HealthCheck, settings

from .audit import fuzz_scale

_COMMON = {
    "deadline": None,  # a DuckDB append takes tens of milliseconds, more on a busy machine
    "suppress_health_check": [HealthCheck.too_slow, HealthCheck.data_too_large,
                              HealthCheck.large_base_example],
    "print_blob": True,  # a failure prints the line that replays it
}

settings.register_profile("trendledger", max_examples=100, **_COMMON)
settings.register_profile("trendledger-long", max_examples=2500, **_COMMON)


def budget(examples: int) -> settings:
    """Settings for a generated test with ``examples`` examples in a normal run."""
    return settings(max_examples=examples * fuzz_scale(), **_COMMON)
