"""The column names the views use, read from the SQL files: a user column must not take one.

A group column is carried through every view beside the view's own columns, and the x, y and
date fields are read inside the same queries as the views' working columns, so a user name
equal to any of them would be ambiguous (a DuckDB binder error, or worse a silently wrong
column). The names are collected from the parsed templates (every ``expr AS name``), so a new
view or a new working column is covered without a list to keep by hand.
"""

from __future__ import annotations

from functools import cache

from sqlglot import exp

from trendledger.views import templates

#: Prefix reserved for the store's own names (tables tl_*, macros tl_t_*, lambda variables):
#: no user column may start with it, so new working columns can always take it.
PREFIX = "tl_"

#: Folders whose templates run with the user's columns in scope.
FOLDERS = ("views", "parts", "moments")
#: Fragments that carry the group columns beside their own (the sums, keyed by the group);
#: the other fragments read only columns of their own making.
KEYED_FRAGMENTS = ("fragments/sums_intercept.sql", "fragments/sums_origin.sql")


@cache
def view_columns() -> dict[str, tuple[str, ...]]:
    """Output column (lower case) -> the view kinds (template names) that have it."""
    out: dict[str, set[str]] = {}
    for tpl in templates.load_dir("views"):
        for stmt in tpl.statements:
            query = stmt.expression if isinstance(stmt, exp.Create) else stmt
            if not isinstance(query, exp.Query):
                continue
            for name in query.named_selects:
                if not templates.PLACEHOLDER.match(name) and name != "*":
                    out.setdefault(name.lower(), set()).add(tpl.name)
    return {name: tuple(sorted(kinds)) for name, kinds in out.items()}


@cache
def working_columns() -> frozenset[str]:
    """Every name a template gives a column inside its queries (lower case)."""
    found: set[str] = set()
    scanned = [tpl for folder in FOLDERS for tpl in templates.load_dir(folder)]
    for tpl in [*scanned, *(templates.load(f) for f in KEYED_FRAGMENTS)]:
        for stmt in tpl.statements:
            found.update(a.alias.lower() for a in stmt.find_all(exp.Alias))
            for fn in stmt.find_all(exp.Lambda):
                found.update(str(v.name).lower() for v in fn.expressions)
    return frozenset(n for n in found if n and not templates.PLACEHOLDER.match(n))


def clash(name: str, *, group: bool = True) -> str | None:
    """Why a fit's column cannot be called ``name``, in one clause, or None when it can.

    Group columns are carried into every view, so they may take neither an output nor a
    working column's name; x and y are read once, at the start of each query, and may take
    any name without the reserved prefix (names.test checks every view column as x and y).
    """
    low = name.lower()
    if low.startswith(PREFIX):
        return f"names starting with {PREFIX!r} are reserved for the store's own tables and columns"
    if not group:
        return None
    kinds = view_columns().get(low)
    if kinds:
        return (f"{name!r} is a column of the {', '.join(kinds)} view"
                f"{'s' if len(kinds) > 1 else ''}")
    if low in working_columns():
        return f"{name!r} is a working column inside the views"
    return None
