"""Named ``$parameters``: which a query uses, and whether the given values fit them.

Values are always bound by DuckDB, never written into the text. DuckDB matches
parameter names without regard to case, so two values whose names differ only
in case (``--param p=1 --param P=2``) are refused rather than one being dropped.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable, Mapping

from sqlglot import exp

from trendledger.errors import QueryRefused


def parameter_names(tree: exp.Expression) -> set[str]:
    """The ``$name`` placeholders used in ``tree``, spelled as written.

    The CLI needs them to check that every ``--param`` is used and every
    placeholder has a value before anything runs.
    """
    names: set[str] = set()
    for node in tree.find_all(exp.Placeholder):
        name = node.name
        if node.this is not None and not name.isdigit():
            names.add(name)
    return names


def check_params(tree: exp.Expression, params: Mapping[str, object]) -> None:
    """Refuse unless ``params`` gives a value to every placeholder and nothing else.

    DuckDB matches parameter names without regard to case, so we do too. An
    unused value is refused as well: it is nearly always a typo, and running the
    query without it would give a silently different answer.
    """
    wanted = {name.casefold(): name for name in parameter_names(tree)}
    given = {str(name).casefold(): str(name) for name in params}
    missing = sorted(wanted[key] for key in wanted.keys() - given.keys())
    if missing:
        listed = ", ".join(f"${name}" for name in missing)
        raise QueryRefused(
            f"refused: no value for parameter {listed}",
            hint=f"pass --param {missing[0]}=VALUE",
        )
    unused = sorted(given[key] for key in given.keys() - wanted.keys())
    if unused:
        listed = ", ".join(unused)
        if wanted:
            close = difflib.get_close_matches(unused[0], sorted(wanted.values()), n=1)
            uses = ", ".join(f"${name}" for name in sorted(wanted.values()))
            hint = f"did you mean {close[0]}?" if close else f"the query uses {uses}"
        else:
            hint = "the query has no $name placeholders"
        raise QueryRefused(f"refused: parameter {listed} is not used by the query", hint=hint)


def collect_params(pairs: Iterable[tuple[str, object]]) -> dict[str, object]:
    """One value per parameter name; a name given twice, in any case, is refused.

    Keeping the last of two values (or the one DuckDB happens to match) would
    run a query different from the one the user meant.
    """
    seen: dict[str, str] = {}
    params: dict[str, object] = {}
    for name, value in pairs:
        key = name.casefold()
        if key in seen:
            same = "twice" if seen[key] == name else f"twice ({seen[key]} and {name})"
            raise QueryRefused(
                f"refused: parameter {name} is given {same}; names ignore case, as in DuckDB",
                hint="give each parameter one value",
            )
        seen[key] = name
        params[name] = value
    return params
