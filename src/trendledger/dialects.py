"""Translate the store's DuckDB views for Spark SQL, PostgreSQL and Trino.

The views are rendered from ``sql/views/*.sql`` as DuckDB SQL. Here each one is parsed
with sqlglot, rewritten as a syntax tree and printed for the target engine. Nothing is
done by string replacement; every rewrite below is a tree transform.

The work happens in two stages.

Macro lowering (the same for every target). The t-distribution macros of
``sql/macros/t_dist.sql`` exist only in DuckDB, so each call is expanded in place, as
DuckDB itself does, with fresh names for every lambda variable so that no expansion can
capture another's variables. DuckDB's list idioms are then turned into plain expressions:

* ``list_transform([value], lambda v: body)[1]`` binds one value to a name; it becomes a
  :class:`Let` node, printed per engine (a lambda over a one-element array in Spark and
  Trino, a scalar sub-select in PostgreSQL);
* a struct literal bound that way becomes one binding per field;
* ``list_reduce`` over a list known when the SQL is written (``range(24, 0, -1)``,
  ``[a, 1, 2]``) is unrolled into nested bindings;
* ``lgamma`` (absent from the three engines) becomes the Stirling series after shifting the
  argument to 10 or more: ``lgamma(a) = S(a + 10) - ln(a (a + 1) ... (a + 9))``;
* a binding whose value is a plain name or constant, or that is used at most once, is
  substituted in place.

Engine rewrites (per target):

* ``isfinite`` / ``isinf`` / ``isnan`` become comparisons with infinity and NaN (Trino
  has ``is_finite``, ``is_infinite``, ``is_nan``);
* ``fsum`` (compensated sum) becomes ``SUM`` and ``favg`` becomes ``AVG``: the
  compensation is lost, the value is the same to rounding;
* every division casts its left side to DOUBLE (DuckDB's ``/`` always divides as float),
  and in Spark and PostgreSQL, where dividing by zero is an error, divides by
  ``NULLIF(d, 0)``: a division by zero gives NULL there, where DuckDB gives an infinity or
  NaN;
* in PostgreSQL, which raises errors where DuckDB returns NaN or infinities, ``sqrt``,
  ``ln`` and ``exp`` are guarded to give DuckDB's values (``exp`` below ``-708`` gives 0);
  Spark's ``ln`` gets the same guard because it returns NULL for 0;
* ``regr_*`` aggregates the engine lacks (Trino has only ``regr_slope`` and
  ``regr_intercept``) become ``COUNT`` / ``AVG`` / ``VAR_POP`` / ``COVAR_POP`` over the
  pairs where both values are present;
* ``greatest`` / ``least`` skip NULLs in DuckDB, Spark and PostgreSQL but not in Trino,
  where they become ``array_max`` / ``array_min`` of the non-NULL arguments;
* ``any_value`` becomes ``arbitrary`` (Trino), ``any_value(x, true)`` (Spark) or the
  first non-NULL element of ``array_agg`` (PostgreSQL 15 lacks it);
* ``row_number() OVER ()`` in a grouped select is ordered by the group keys: Spark
  requires an order, and engines that inline a CTE at each use (Trino) must number the
  groups the same way every time;
* ``ROW(a, b) IS NOT DISTINCT FROM ROW(c, d)`` compares column by column;
* ``AS [NOT] MATERIALIZED`` hints are dropped where the engine lacks them;
* views become ``TEMPORARY`` views in Spark; in PostgreSQL each view is dropped first so
  that a changed view can be created again.

A function the target does not know makes the view :class:`Unsupported`; the caller says
so in the exported SQL instead of writing a view that would fail.
"""

from __future__ import annotations

import functools
import itertools
import re
import sys
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import sqlglot
from sqlglot import exp

#: Targets, in the order the export writes them.
DIALECTS: tuple[str, ...] = ("duckdb", "spark", "postgres", "trino")

#: Lowest argument at which Stirling's series alone gives ln Gamma to double precision.
_STIRLING_FROM = 10
#: Natural logarithm of sqrt(2 pi).
_LN_SQRT_2PI = "0.91893853320467274178"

#: Functions sqlglot does not model (so it prints them unchanged) that a target does have.
_KNOWN: dict[str, frozenset[str]] = {
    "duckdb": frozenset(),
    "spark": frozenset({"row"}),
    "postgres": frozenset({"row"}),
    "trino": frozenset({"row", "is_finite", "is_infinite", "is_nan"}),
}
#: Aggregates each target has natively (the rest are rewritten).
_NATIVE_REGR: dict[str, frozenset[str]] = {
    "spark": frozenset({"regrslope", "regrintercept", "regrcount", "regrr2", "regravgx",
                        "regravgy", "regrsxx", "regrsyy", "regrsxy"}),
    "postgres": frozenset({"regrslope", "regrintercept", "regrcount", "regrr2", "regravgx",
                           "regravgy", "regrsxx", "regrsyy", "regrsxy"}),
    "trino": frozenset({"regrslope", "regrintercept"}),
}
_REDUCE_NAMES = frozenset({"list_reduce", "array_reduce", "reduce"})
#: A macro argument of at most this many syntax nodes is pasted where its parameter stands
#: (as DuckDB does); a larger one used more than once is bound to a name.
_PASTE_UP_TO = 12
_COMPENSATED_SUMS = frozenset({"fsum", "sumkahan", "kahan_sum"})
_COMPENSATED_AVGS = frozenset({"favg"})


class Unsupported(Exception):
    """A view uses something the target engine has no equivalent for."""


class Let(exp.Expression):
    """``this`` evaluated with the name ``alias`` bound to the value ``expression``."""

    arg_types = {"this": True, "expression": True, "var": True}

    @property
    def bound(self) -> exp.Identifier:
        """The bound name."""
        var = self.args["var"]
        assert isinstance(var, exp.Identifier)
        return var


@dataclass(frozen=True)
class Macro:
    """A scalar DuckDB macro: name, parameter names and body."""

    name: str
    params: tuple[str, ...]
    body: exp.Expr


@dataclass(frozen=True)
class Translated:
    """One view for one target: its statements, or why it cannot be had there."""

    name: str
    statements: tuple[str, ...]
    unsupported: str | None = None


# -- small helpers ----------------------------------------------------------------------------


class _Names:
    """Fresh variable names: the original name (minus an earlier suffix) plus a counter."""

    def __init__(self) -> None:
        self._count = itertools.count(1)

    def fresh(self, base: str) -> str:
        root = re.sub(r"_v\d+$", "", base)
        return f"{root}_v{next(self._count)}"


@contextmanager
def _deep_recursion(limit: int = 20000) -> Iterator[None]:
    """Expanded macros make deep trees; printing them recurses once per level."""
    old = sys.getrecursionlimit()
    sys.setrecursionlimit(max(old, limit))
    try:
        yield
    finally:
        sys.setrecursionlimit(old)


def _double() -> exp.DataType:
    return exp.DataType.build("DOUBLE")


def _special(value: str) -> exp.Cast:
    """CAST('Infinity' AS DOUBLE) and friends; every engine reads these spellings."""
    return exp.Cast(this=exp.Literal.string(value), to=_double())


def _num(value: float | int | str) -> exp.Expr:
    text = str(value)
    if text.startswith("-"):
        return exp.Neg(this=exp.Literal.number(text[1:]))
    return exp.Literal.number(text)


def _paren(node: exp.Expr) -> exp.Expr:
    if isinstance(node, exp.Paren | exp.Literal | exp.Column | exp.Identifier | exp.Func
                  | exp.Cast | exp.Null | exp.Boolean | exp.Subquery | exp.Bracket | Let):
        return node
    return exp.Paren(this=node)


def _size(node: exp.Expr) -> int:
    return sum(1 for _ in node.walk())


def _atomic(node: exp.Expr) -> bool:
    while isinstance(node, exp.Paren | exp.Neg):
        node = node.this
    if isinstance(node, exp.Cast):
        return _atomic(node.this)
    return isinstance(node, exp.Literal | exp.Identifier | exp.Column | exp.Null | exp.Boolean)


def _func_name(node: exp.Expr) -> str:
    if isinstance(node, exp.Anonymous):
        return str(node.this).lower()
    return node.key


def _is_ref(node: exp.Identifier) -> bool:
    """True if the identifier is a use of a variable, not a field, key, binder or name."""
    parent = node.parent
    key = node.arg_key
    if isinstance(parent, exp.Dot) and key == "expression":
        return False
    if isinstance(parent, exp.PropertyEQ) and key == "this":
        return False
    if isinstance(parent, exp.Lambda) and key == "expressions":
        return False
    if isinstance(parent, Let) and key == "var":
        return False
    return not isinstance(parent, exp.Column | exp.Table | exp.TableAlias | exp.Alias
                          | exp.ColumnDef | exp.Schema)


def _refs(tree: exp.Expr, name: str) -> list[exp.Identifier]:
    return [n for n in tree.find_all(exp.Identifier) if n.name == name and _is_ref(n)]


def _post_order(tree: exp.Expr,
                fn: Callable[[exp.Expr], exp.Expr | None]) -> exp.Expr:
    """Apply ``fn`` to every node, children before parents; a returned node replaces it."""
    for node in reversed(list(tree.walk(bfs=False))):
        new = fn(node)
        if new is None or new is node:
            continue
        if isinstance(new, exp.Binary | exp.Unary) and not isinstance(new, exp.Paren):
            new = exp.Paren(this=new)  # sqlglot prints the tree as is, without adding parentheses
        if node is tree:
            tree = new
        else:
            node.replace(new)
    return tree


def _ident(name: str) -> exp.Identifier:
    return exp.Identifier(this=name, quoted=False)


def _from_text(text: str, variables: Iterable[str]) -> exp.Expr:
    """Parse our own fixed expression text; names in ``variables`` become variable uses."""
    tree = sqlglot.parse_one(text, read="duckdb")
    names = set(variables)
    for col in list(tree.find_all(exp.Column)):
        if not col.table and col.name in names:
            if col is tree:
                return _ident(col.name)
            col.replace(_ident(col.name))
    return tree


# -- macros -------------------------------------------------------------------------------------


def macro_library(statements: Iterable[str]) -> dict[str, Macro]:
    """The scalar macros among DuckDB ``CREATE MACRO`` statements, by lower-case name."""
    out: dict[str, Macro] = {}
    for text in statements:
        for stmt in sqlglot.parse(text, read="duckdb"):
            if not isinstance(stmt, exp.Create) or str(stmt.args.get("kind", "")).upper() \
                    != "MACRO":
                continue
            head = stmt.this
            body = stmt.expression
            if not isinstance(head, exp.UserDefinedFunction) or body is None:
                continue
            name = head.this.name if isinstance(head.this, exp.Table) else str(head.this)
            params = tuple(p.name for p in head.expressions)
            out[name.lower()] = Macro(name, params, body)
    return out


def _rename(node: exp.Expr, env: dict[str, str], names: _Names) -> None:
    """Give every variable bound inside ``node`` a fresh name, in place."""
    stack: list[tuple[exp.Expr, dict[str, str]]] = [(node, env)]
    while stack:
        current, scope = stack.pop()
        if isinstance(current, exp.Lambda):
            inner = dict(scope)
            for param in current.expressions:
                fresh = names.fresh(param.name)
                inner[param.name] = fresh
                param.set("this", fresh)
            stack.append((current.this, inner))
            continue
        if isinstance(current, Let):
            stack.append((current.expression, scope))
            inner = dict(scope)
            fresh = names.fresh(current.bound.name)
            inner[current.bound.name] = fresh
            current.bound.set("this", fresh)
            stack.append((current.this, inner))
            continue
        if isinstance(current, exp.Identifier):
            if current.name in scope and _is_ref(current):
                current.set("this", scope[current.name])
            continue
        for child in current.iter_expressions():
            stack.append((child, scope))


def _instantiate(macro: Macro, args: list[exp.Expr], names: _Names) -> exp.Expr:
    if len(args) != len(macro.params):
        raise Unsupported(f"macro {macro.name} takes {len(macro.params)} argument(s), "
                          f"got {len(args)}")
    body = macro.body.copy()
    _rename(body, {}, names)
    # DuckDB pastes an argument wherever its parameter stands; a composite argument is
    # bound once here instead (the same value: macros have no side effects), which keeps
    # the expansion small; bindings used once are substituted later anyway.
    values: dict[str, exp.Expr] = {}
    bound: list[tuple[str, exp.Expr]] = []
    uses: dict[str, int] = {}
    for col in body.find_all(exp.Column):
        if not col.table:
            uses[col.name] = uses.get(col.name, 0) + 1
    for param, arg in zip(macro.params, args, strict=True):
        if _atomic(arg) or uses.get(param, 0) <= 1 or _size(arg) <= _PASTE_UP_TO:
            values[param] = arg
        else:
            var = names.fresh(f"tl_p_{param}")
            values[param] = _ident(var)
            bound.append((var, arg))
    if isinstance(body, exp.Column) and not body.table and body.name in values:
        body = _paren(values[body.name].copy())
    else:
        for col in list(body.find_all(exp.Column)):
            if not col.table and col.name in values:
                col.replace(_paren(values[col.name].copy()))
    for var, arg in reversed(bound):
        body = Let(this=body, expression=arg, var=_ident(var))
    return exp.Paren(this=body)


def expand_macros(tree: exp.Expr, macros: dict[str, Macro],
                  names: _Names | None = None) -> exp.Expr:
    """Replace every call of a macro by its body, innermost first, until none is left."""
    names = names or _Names()
    for _ in range(64):
        calls = [n for n in tree.find_all(exp.Anonymous) if _func_name(n) in macros]
        if not calls:
            return tree
        for call in reversed(calls):
            new = _instantiate(macros[_func_name(call)], list(call.expressions), names)
            if call is tree:
                tree = new
            else:
                call.replace(new)
    raise Unsupported("macros nest too deeply (a macro calls itself?)")


# -- lowering DuckDB list idioms ----------------------------------------------------------------


def _literal_int(node: exp.Expr) -> int:
    sign = 1
    while isinstance(node, exp.Neg | exp.Paren):
        if isinstance(node, exp.Neg):
            sign = -sign
        node = node.this
    if isinstance(node, exp.Literal) and not node.is_string:
        return sign * int(str(node.this))
    raise Unsupported(f"list bound {node.sql('duckdb')} is not a constant")


def _static_list(node: exp.Expr) -> list[exp.Expr]:
    """The elements of a list whose length is fixed in the SQL text."""
    element_type: exp.DataType | None = None
    if isinstance(node, exp.Cast) and node.to.is_type(exp.DataType.Type.ARRAY):
        element_type = node.to.expressions[0] if node.to.expressions else None
        node = node.this
    if isinstance(node, exp.Array):
        items = [e.copy() for e in node.expressions]
    elif isinstance(node, exp.GenerateSeries):
        start = _literal_int(node.args["start"])
        end = _literal_int(node.args["end"])
        step = _literal_int(node.args["step"]) if node.args.get("step") else 1
        if not node.args.get("is_end_exclusive"):
            end += 1 if step > 0 else -1
        items = [_num(k) for k in range(start, end, step)]
    else:
        raise Unsupported(f"cannot unroll a reduce over {node.sql('duckdb')}")
    if element_type is not None:
        items = [exp.Cast(this=i, to=element_type.copy()) for i in items]
    return items


def _to_let(node: exp.Expr) -> exp.Expr | None:
    """``list_transform([v], lambda x: body)[1]`` -> Let(x = v in body)."""
    if not isinstance(node, exp.Bracket) or not isinstance(node.this, exp.Transform):
        return None
    source, fn = node.this.this, node.this.expression
    index = node.expressions
    if not (isinstance(source, exp.Array) and len(source.expressions) == 1
            and isinstance(fn, exp.Lambda) and len(fn.expressions) == 1
            and len(index) == 1 and isinstance(index[0], exp.Literal)
            and str(index[0].this) == "0"):
        return None
    return Let(this=fn.this, expression=source.expressions[0], var=fn.expressions[0])


def _unroll(node: exp.Expr, names: _Names) -> exp.Expr | None:
    """``list_reduce(list, lambda acc, x: body[, init])`` over a constant list -> bindings."""
    if not (isinstance(node, exp.Anonymous) and _func_name(node) in _REDUCE_NAMES):
        return None
    args = list(node.expressions)
    if len(args) not in (2, 3) or not isinstance(args[1], exp.Lambda) \
            or len(args[1].expressions) not in (2, 3):
        raise Unsupported("list_reduce needs a list, a two-argument lambda and an optional start")
    items = _static_list(args[0])
    if len(args) == 3:
        acc = args[2].copy()
    else:
        if not items:
            raise Unsupported("list_reduce over an empty list without a start value")
        acc, items = items[0], items[1:]
    for position, item in enumerate(items, start=2 if len(args) == 2 else 1):
        fn = args[1].copy()
        _rename(fn, {}, names)
        acc_name = fn.expressions[0].name
        item_name = fn.expressions[1].name
        body = fn.this
        index_name = fn.expressions[2].name if len(fn.expressions) == 3 else None
        if index_name:
            for ref in _refs(body, index_name):
                ref.replace(_num(position))
        for ref in _refs(body, item_name):
            ref.replace(_paren(item.copy()))
        acc = Let(this=body, expression=acc, var=_ident(acc_name))
    return acc


def _fold(node: exp.Expr, trino: bool) -> exp.Expr | None:
    """``list_reduce(list, lambda acc, x: body[, init])`` -> the engine's own fold.

    Spark's ``aggregate`` and Trino's ``reduce`` want the state's type fixed: it is
    DOUBLE here (the folds of the views are numeric).
    """
    if not (isinstance(node, exp.Anonymous) and _func_name(node) in _REDUCE_NAMES):
        return None
    args = list(node.expressions)
    if len(args) not in (2, 3) or not isinstance(args[1], exp.Lambda) \
            or len(args[1].expressions) != 2:
        raise Unsupported("list_reduce needs a list, a two-argument lambda and an optional start")
    items, fn = args[0], args[1]
    if len(args) == 3:
        start = args[2]
    else:
        elements = _static_list(items)
        if not elements:
            raise Unsupported("list_reduce over an empty list without a start value")
        start, items = elements[0], exp.Array(expressions=elements[1:])
    fn.set("this", exp.Cast(this=fn.this, to=_double()))
    acc = fn.expressions[0].name
    finish = exp.Lambda(this=_ident(acc), expressions=[_ident(acc)]) if trino else None
    return exp.Reduce(this=items, initial=exp.Cast(this=start, to=_double()), merge=fn,
                      finish=finish)


def _split_struct(node: exp.Expr, names: _Names) -> exp.Expr | None:
    """Let(c = {a: e1, b: e2} in body) -> Let(c_a = e1 in Let(c_b = e2 in body[c.a -> c_a]))."""
    if not isinstance(node, Let):
        return None
    value = node.expression
    while isinstance(value, exp.Paren):
        value = value.this
    if not isinstance(value, exp.Struct):
        return None
    var = node.bound.name
    fields: list[tuple[str, exp.Expr]] = []
    for item in value.expressions:
        if not isinstance(item, exp.PropertyEQ):
            raise Unsupported("a struct literal needs named fields")
        key = item.this.name if isinstance(item.this, exp.Identifier) else str(item.this.this)
        fields.append((key, item.expression))
    fresh = {key: names.fresh(f"{var}_{key}") for key, _ in fields}
    body = node.this
    for dot in list(body.find_all(exp.Dot)):
        target = dot.this
        if isinstance(target, exp.Identifier) and target.name == var and _is_ref(target):
            field = dot.expression.name
            if field not in fresh:
                raise Unsupported(f"struct {var} has no field {field}")
            if dot is body:
                body = _ident(fresh[field])
            else:
                dot.replace(_ident(fresh[field]))
    if _refs(body, var):
        raise Unsupported("a struct is used whole, not field by field")
    for key, value in reversed(fields):
        body = Let(this=body, expression=value, var=_ident(fresh[key]))
    return body


#: Coefficients B(2k) / (2k (2k - 1)) of Stirling's series for ln Gamma, k = 1 .. 8.
_STIRLING = ("0.08333333333333333", "-0.002777777777777778", "0.0007936507936507937",
             "-0.0005952380952380953", "0.0008417508417508417", "-0.0019175269175269176",
             "0.00641025641025641", "-0.029550653594771242")


def _stirling(v: str) -> str:
    """ln Gamma(v) for v >= 10 as SQL text over the variable v.

    Terms to v^-15: the first one left out is below 2e-18 at v = 10.
    """
    w = f"(1 / ({v} * {v}))"
    series = _STIRLING[-1]
    for coefficient in reversed(_STIRLING[:-1]):
        series = f"({coefficient} + {w} * {series})"
    return f"(({v} - 0.5) * ln({v}) - {v} + {_LN_SQRT_2PI} + {series} / {v})"


def _lgamma(node: exp.Expr, names: _Names) -> exp.Expr | None:
    """lgamma(a) for a > 0 from Stirling's series, shifting arguments below 10 up by 10:
    ``lgamma(a) = S(a + 10) - ln(a (a + 1) ... (a + 9))``.

    NULL for a <= 0 (DuckDB gives infinity or the value on the negative axis): the
    views only take it of half the degrees of freedom.
    """
    if _func_name(node) != "lgamma":
        return None
    args = list(node.expressions) if isinstance(node, exp.Anonymous) else [node.this]
    if len(args) != 1:
        raise Unsupported("lgamma takes one argument")
    z, w = names.fresh("tl_lg_z"), names.fresh("tl_lg_w")
    product = " * ".join([z] + [f"({z} + {k})" for k in range(1, _STIRLING_FROM)])
    shifted = _from_text(f"{_stirling(w)} - ln({product})", [z, w])
    inner = Let(this=shifted, expression=_from_text(f"{z} + {_STIRLING_FROM}", [z]),
                var=_ident(w))
    case = _from_text(
        f"CASE WHEN {z} >= {_STIRLING_FROM} THEN {_stirling(z)} WHEN {z} > 0 THEN tl_lg_here END",
        [z],
    )
    for col in list(case.find_all(exp.Column)):
        if col.name == "tl_lg_here":
            col.replace(inner)
    value = exp.Cast(this=args[0].copy(), to=_double())
    return Let(this=case, expression=value, var=_ident(z))


def _simplify_lets(tree: exp.Expr) -> exp.Expr:
    """Substitute each binding used at most once, or whose value is a name or a constant.

    One pass, innermost binding first, with an index of every variable use (names are
    unique after renaming), so large expansions cost linear time.
    """
    uses: dict[str, list[exp.Identifier]] = {}

    def index(node: exp.Expr, delta: int) -> None:
        for ident in node.find_all(exp.Identifier):
            if _is_ref(ident):
                found = uses.setdefault(ident.name, [])
                if delta > 0:
                    found.append(ident)
                else:
                    found[:] = [u for u in found if u is not ident]

    index(tree, +1)
    for node in reversed(list(tree.walk(bfs=False))):
        if not isinstance(node, Let):
            continue
        refs = uses.pop(node.bound.name, [])
        if len(refs) > 1 and not _atomic(node.expression):
            uses[node.bound.name] = refs
            continue
        if not refs:
            index(node.expression, -1)
        body = node.this
        for i, ref in enumerate(refs):
            last = i == len(refs) - 1
            value = node.expression if last else node.expression.copy()
            if not last:
                index(value, +1)
            value = _paren(value)
            if ref is body:
                body = value
            else:
                ref.replace(value)
        body = _paren(body) if isinstance(body, exp.Binary | exp.Unary) else body
        if node is tree:
            tree = body
        else:
            node.replace(body)
    return tree


def lower(tree: exp.Expr, macros: dict[str, Macro], *, portable_lgamma: bool,
          fold: str | None = None, names: _Names | None = None) -> exp.Expr:
    """Expand macros and turn DuckDB list idioms into Let bindings (see the module notes).

    ``fold`` names the engine ("spark", "trino") whose own fold replaces ``list_reduce``;
    otherwise the reduce is unrolled.
    """
    names = names or _Names()
    tree = expand_macros(tree, macros, names)
    tree = _post_order(tree, _to_let)
    if fold:
        tree = _post_order(tree, lambda n: _fold(n, fold == "trino"))
    tree = _post_order(tree, lambda n: _unroll(n, names))
    tree = _post_order(tree, lambda n: _split_struct(n, names))
    if portable_lgamma:
        tree = _post_order(tree, lambda n: _lgamma(n, names))
    return _simplify_lets(tree)


# -- engine rewrites ----------------------------------------------------------------------------


class _Rewriter:
    """Per-target rewrites, applied children first."""

    def __init__(self, target: str, keep_lets: bool = False) -> None:
        self.target = target
        self.keep_lets = keep_lets
        self.names = _Names()
        self.lets = itertools.count(1)

    # helpers
    def inf(self) -> exp.Expr:
        return _special("Infinity")

    def div(self, left: exp.Expr, right: exp.Expr) -> exp.Expr:
        numerator = exp.Cast(this=_paren(left), to=_double())
        denominator: exp.Expr = _paren(right)
        if self.target in ("spark", "postgres"):
            denominator = exp.Nullif(this=right, expression=exp.Literal.number(0))
        return exp.Div(this=numerator, expression=denominator, typed=True, safe=False)

    def bind(self, value: exp.Expr, build: Callable[[exp.Expr], exp.Expr]
             ) -> exp.Expr:
        """build(v) where v stands for value: the value itself if small, else a binding."""
        if _size(value) <= 30:
            return build(value)
        name = self.names.fresh("tl_b")
        let = Let(this=build(_ident(name)), expression=value, var=_ident(name))
        return let if self.keep_lets else self.let(let)

    def let(self, node: Let) -> exp.Expr:
        if self.target == "postgres":
            return _subquery_let(node, next(self.lets))
        return _array_let(node, self.target)

    # the rewrite
    def __call__(self, node: exp.Expr) -> exp.Expr | None:
        name = _func_name(node)
        target = self.target
        if isinstance(node, Let):
            return None if self.keep_lets else self.let(node)
        if name == "isfinite":
            (arg,) = node.expressions
            if target == "trino":
                return exp.Anonymous(this="is_finite", expressions=[arg])
            return exp.Paren(this=exp.LT(this=exp.Abs(this=arg), expression=self.inf()))
        if isinstance(node, exp.IsInf):
            if target == "trino":
                return exp.Anonymous(this="is_infinite", expressions=[node.this])
            return exp.Paren(this=exp.EQ(this=exp.Abs(this=node.this), expression=self.inf()))
        if isinstance(node, exp.IsNan):
            if target == "trino":
                return exp.Anonymous(this="is_nan", expressions=[node.this])
            # NaN equals NaN in Spark and PostgreSQL; NULL stays NULL as in DuckDB
            return exp.Paren(this=exp.EQ(this=_paren(node.this), expression=_special("NaN")))
        if name in _COMPENSATED_SUMS:
            return exp.Sum(this=node.expressions[0])
        if name in _COMPENSATED_AVGS:
            return exp.Avg(this=node.expressions[0])
        if isinstance(node, exp.Cast) and node.this.is_string \
                and str(node.this.this).lower() in ("inf", "+inf", "-inf") \
                and node.to.is_type(exp.DataType.Type.DOUBLE, exp.DataType.Type.FLOAT):
            text = "-Infinity" if str(node.this.this).startswith("-") else "Infinity"
            return _special(text)
        if isinstance(node, exp.Div):
            return self.div(node.this, node.expression)
        if name.startswith("regr") and isinstance(node, exp.AggFunc) \
                and name not in _NATIVE_REGR.get(target, frozenset()):
            return self.regr(node)
        if isinstance(node, exp.Greatest | exp.Least) and target == "trino":
            return self.extreme(node)
        if isinstance(node, exp.IgnoreNulls) and isinstance(node.this, exp.AnyValue):
            return self.any_value(node.this.this)
        if isinstance(node, exp.AnyValue) and not isinstance(node.parent, exp.IgnoreNulls):
            return self.any_value(node.this)
        if target == "postgres" and isinstance(node, exp.Sqrt | exp.Ln | exp.Exp):
            return self.guard_math(node)
        if target == "spark" and isinstance(node, exp.Ln):
            return self.guard_math(node)
        if isinstance(node, exp.Window):
            return self.numbered(node)
        if isinstance(node, exp.NullSafeEQ):
            return self.rows_equal(node)
        if isinstance(node, exp.CTE) and target in ("spark", "trino"):
            node.set("materialized", None)
        return None

    def regr(self, node: exp.Expr) -> exp.Expr:
        y, x = node.this, node.expression
        both = exp.and_(exp.Not(this=exp.Is(this=_paren(y.copy()), expression=exp.Null())),
                        exp.Not(this=exp.Is(this=_paren(x.copy()), expression=exp.Null())),
                        copy=False)
        xs = exp.Case(ifs=[exp.If(this=both.copy(), true=x.copy())])
        ys = exp.Case(ifs=[exp.If(this=both.copy(), true=y.copy())])
        count = exp.Count(this=exp.Case(ifs=[exp.If(this=both, true=exp.Literal.number(1))]))
        var_x = exp.VariancePop(this=xs.copy())
        var_y = exp.VariancePop(this=ys.copy())
        cov = exp.CovarPop(this=y.copy(), expression=x.copy())
        slope = self.div(cov.copy(), var_x.copy())
        name = _func_name(node)
        if name == "regrcount":
            return count
        if name == "regravgx":
            return exp.Avg(this=xs)
        if name == "regravgy":
            return exp.Avg(this=ys)
        if name == "regrsxx":
            return exp.Mul(this=var_x, expression=count)
        if name == "regrsyy":
            return exp.Mul(this=var_y, expression=count)
        if name == "regrsxy":
            return exp.Mul(this=cov, expression=count)
        if name == "regrslope":
            return exp.Paren(this=slope)
        if name == "regrintercept":
            return exp.Paren(this=exp.Sub(this=exp.Avg(this=ys), expression=exp.Mul(
                this=exp.Paren(this=slope), expression=exp.Avg(this=xs))))
        if name == "regrr2":
            ratio = self.div(exp.Mul(this=cov.copy(), expression=cov.copy()),
                             exp.Mul(this=var_x.copy(), expression=var_y.copy()))
            return exp.Case(ifs=[
                exp.If(this=exp.EQ(this=var_x.copy(), expression=exp.Literal.number(0)),
                       true=exp.Null()),
                exp.If(this=exp.EQ(this=var_y.copy(), expression=exp.Literal.number(0)),
                       true=exp.Literal.number("1.0")),
            ], default=ratio)
        raise Unsupported(f"no rewrite for {name}")

    def extreme(self, node: exp.Greatest | exp.Least) -> exp.Expr:
        items = [node.this, *node.expressions]
        var = self.names.fresh("tl_e")
        keep = exp.Lambda(this=exp.Not(this=exp.Is(this=_ident(var), expression=exp.Null())),
                          expressions=[_ident(var)])
        kept = exp.ArrayFilter(this=exp.Array(expressions=items), expression=keep)
        return exp.ArrayMax(this=kept) if isinstance(node, exp.Greatest) \
            else exp.ArrayMin(this=kept)

    def any_value(self, arg: exp.Expr) -> exp.Expr:
        if self.target == "trino":
            return exp.Anonymous(this="arbitrary", expressions=[arg])
        if self.target == "spark":
            return exp.Anonymous(this="any_value", expressions=[arg, exp.true()])
        if self.target == "postgres":
            agg = exp.Filter(this=exp.ArrayAgg(this=arg.copy()), expression=exp.Where(
                this=exp.Not(this=exp.Is(this=arg.copy(), expression=exp.Null()))))
            return exp.Bracket(this=exp.Paren(this=agg), expressions=[exp.Literal.number(0)])
        return exp.AnyValue(this=arg)

    def guard_math(self, node: exp.Sqrt | exp.Ln | exp.Exp) -> exp.Expr:
        zero = exp.Literal.number(0)

        def build(v: exp.Expr) -> exp.Expr:
            def use() -> exp.Expr:
                return v.copy()

            if isinstance(node, exp.Sqrt):
                return exp.Case(ifs=[
                    exp.If(this=exp.GTE(this=use(), expression=zero.copy()),
                           true=exp.Sqrt(this=use())),
                    exp.If(this=exp.LT(this=use(), expression=zero.copy()),
                           true=_special("NaN")),
                ])
            if isinstance(node, exp.Ln):
                return exp.Case(ifs=[
                    exp.If(this=exp.GT(this=use(), expression=zero.copy()),
                           true=exp.Ln(this=use())),
                    exp.If(this=exp.EQ(this=use(), expression=zero.copy()),
                           true=_special("-Infinity")),
                    exp.If(this=exp.LT(this=use(), expression=zero.copy()),
                           true=_special("NaN")),
                ])
            # exp: PostgreSQL raises on overflow and underflow of finite arguments
            return exp.Case(ifs=[
                exp.If(this=exp.LT(this=use(), expression=_num(-708.39)),
                       true=exp.Literal.number("0.0")),
                exp.If(this=exp.and_(exp.GT(this=use(), expression=_num(709.78)),
                                     exp.LT(this=use(), expression=self.inf()), copy=False),
                       true=self.inf()),
            ], default=exp.Exp(this=use()))

        return self.bind(node.this, build)

    def numbered(self, node: exp.Window) -> exp.Expr | None:
        if not isinstance(node.this, exp.RowNumber) or node.args.get("order") \
                or node.args.get("partition_by"):
            return None
        select = node.find_ancestor(exp.Select)
        if select is None:
            return None
        group = select.args.get("group")
        if group is not None and group.expressions:
            keys = [g.copy() for g in group.expressions]
        else:
            # every other output of the select: rows that tie on all of them are
            # interchangeable, so any numbering of them gives the same result
            keys = []
            for item in select.expressions:
                item = item.this if isinstance(item, exp.Alias) else item
                if isinstance(item, exp.Star) or item.find(exp.Star):
                    raise Unsupported("row_number() OVER () over SELECT * has no order")
                if item.find(exp.Window, exp.AggFunc) is None:
                    keys.append(item.copy())
            if not keys:
                return None
        node.set("order", exp.Order(expressions=[exp.Ordered(this=k, nulls_first=True)
                                                 for k in keys]))
        return None

    def rows_equal(self, node: exp.NullSafeEQ) -> exp.Expr | None:
        left, right = node.this, node.expression
        if not (_func_name(left) == "row" and _func_name(right) == "row"):
            return None
        a, b = list(left.expressions), list(right.expressions)
        if len(a) != len(b):
            raise Unsupported("ROW() comparison of different widths")
        parts = [exp.NullSafeEQ(this=x, expression=y) for x, y in zip(a, b, strict=True)]
        return exp.Paren(this=exp.and_(*parts, copy=False)) if len(parts) > 1 else parts[0]


def _strip_comments(tree: exp.Expr) -> None:
    for node in tree.walk():
        node.comments = None


def _array_let(node: Let, target: str) -> exp.Expr:
    """A binding as a lambda over a one-element array: ``transform([value], v -> body)[1]``."""
    lam = exp.Lambda(this=node.this, expressions=[node.bound])
    # the index is written in the target's own base, so sqlglot need not work out types
    base = sqlglot.Dialect.get_or_raise(target).INDEX_OFFSET
    return exp.Bracket(
        this=exp.Transform(this=exp.Array(expressions=[node.expression]), expression=lam),
        expressions=[exp.Literal.number(base)], offset=base,
    )


def _flatten(node: exp.Expr) -> tuple[list[tuple[str, exp.Expr]], exp.Expr]:
    """Hoist every binding out of ``node`` (but not out of a lambda): (bindings, rest).

    Bindings come out in an order where each value uses only earlier ones. Values bound
    inside a CASE branch are then computed whatever the branch: fine for an engine where
    no arithmetic raises an error once divisions are guarded (Spark).
    """
    if isinstance(node, Let):
        before, value = _flatten(node.expression)
        after, body = _flatten(node.this)
        return [*before, (node.bound.name, value), *after], body
    if isinstance(node, exp.Lambda):
        node.set("this", _leveled(*_flatten(node.this)))
        return [], node
    bindings: list[tuple[str, exp.Expr]] = []
    for key, child in list(node.args.items()):
        if isinstance(child, exp.Expr):
            found, new = _flatten(child)
            bindings.extend(found)
            if new is not child:
                node.set(key, _paren(new) if isinstance(new, exp.Binary | exp.Unary) else new)
        elif isinstance(child, list):
            items = []
            for item in child:
                if isinstance(item, exp.Expr):
                    found, new = _flatten(item)
                    bindings.extend(found)
                    items.append(new)
                else:
                    items.append(item)
            node.set(key, items)
    return bindings, node


def _leveled(bindings: list[tuple[str, exp.Expr]], body: exp.Expr
             ) -> exp.Expr:
    """Bind hoisted values with as few nested lambdas as their dependencies allow (Spark).

    Values that do not depend on each other go into one struct: one lambda per level of
    dependency instead of one per value, which is what Spark's analyser pays for.
    """
    if not bindings:
        return body
    level: dict[str, int] = {}
    for name, value in bindings:
        used = {i.name for i in value.find_all(exp.Identifier) if i.name in level and _is_ref(i)}
        level[name] = 1 + max((level[u] for u in used), default=-1)
    depth = max(level.values())
    for lvl in range(depth, -1, -1):
        group = [(n, v) for n, v in bindings if level[n] == lvl]
        if len(group) == 1:
            name, value = group[0]
            body = _array_let(Let(this=body, expression=value, var=_ident(name)), "spark")
            continue
        holder = f"tl_s{lvl}_{group[0][0]}"
        names = {n for n, _ in group}
        for ident in list(body.find_all(exp.Identifier)):
            if ident.name in names and _is_ref(ident):
                field = exp.Dot(this=_ident(holder), expression=_ident(ident.name))
                if ident is body:
                    body = field
                else:
                    ident.replace(field)
        packed = exp.Struct(expressions=[exp.PropertyEQ(this=_ident(n), expression=v)
                                         for n, v in group])
        body = _array_let(Let(this=body, expression=packed, var=_ident(holder)), "spark")
    return body


def _subquery_let(node: Let, number: int) -> exp.Expr:
    """A binding as a scalar sub-select: ``(SELECT body FROM (SELECT value AS v OFFSET 0))``.

    OFFSET 0 keeps the planner from pulling the value up into (and so repeating it at)
    every use.
    """
    inner = exp.Select(
        expressions=[exp.Alias(this=node.expression, alias=node.bound)],
        offset=exp.Offset(expression=exp.Literal.number(0)),
    )
    alias = exp.TableAlias(this=_ident(f"tl_let_{number}"))
    outer = exp.Select(expressions=[node.this],
                       from_=exp.From(this=exp.Subquery(this=inner, alias=alias)))
    return exp.Subquery(this=outer)


def double_macros(statements: Iterable[str]) -> set[str]:
    """Macros that take and return DOUBLE, as DuckDB itself types them.

    Such a macro can become a SQL function of the target (``DOUBLE PRECISION`` in and
    out); any other is expanded where it is called.
    """
    return set(_double_macros(tuple(statements)))


@functools.cache
def _double_macros(texts: tuple[str, ...]) -> frozenset[str]:
    import duckdb

    con = duckdb.connect()
    try:
        for text in texts:
            con.execute(text)
        out = set()
        for macro in macro_library(texts).values():
            call = exp.Anonymous(this=macro.name, expressions=[
                exp.Cast(this=exp.Null(), to=_double()) for _ in macro.params])
            try:
                found = con.execute(f"SELECT typeof({call.sql('duckdb')})").fetchall()
            except duckdb.Error:
                continue
            if found and found[0][0] == "DOUBLE":
                out.add(macro.name.lower())
        return frozenset(out)
    finally:
        con.close()


class Porter:
    """Translates views for one target, sharing the lowered macros between them.

    Each macro a view calls is lowered and rewritten for the target once. In Spark and
    PostgreSQL a macro that takes and returns DOUBLE (see :func:`double_macros`) becomes a
    SQL function of the same name, defined by :meth:`functions`; every other macro (and
    every macro in Trino) is expanded where it is called, each argument bound once.
    """

    #: prefix of a macro parameter inside a lowered body (no column is named like this)
    ARG = "tl_arg_"

    def __init__(self, target: str, macro_statements: Iterable[str],
                 functions: Iterable[str] = (), *, portable_lgamma: bool | None = None
                 ) -> None:
        if target not in DIALECTS:
            raise ValueError(f"unknown dialect {target!r}; choose one of {', '.join(DIALECTS)}")
        self.target = target
        self.macros = macro_library(list(macro_statements))
        self.as_functions = ({f.lower() for f in functions} & set(self.macros)
                             if target in ("spark", "postgres") else set())
        #: lgamma from the Stirling series (no engine but DuckDB has lgamma); DuckDB can be
        #: asked to use it too, to check it
        self.portable_lgamma = target != "duckdb" if portable_lgamma is None else portable_lgamma
        #: Spark and Trino fold lists with their own higher-order function (their planners
        #: choke on the deep expression an unrolled fold makes); PostgreSQL has none
        #: Spark and Trino fold lists with their own higher-order function; PostgreSQL has
        #: none, so its folds are unrolled
        self.fold = target if target in ("spark", "trino") else None
        self._bodies: dict[str, tuple[exp.Expr, dict[str, int]]] = {}
        self._used: list[str] = []

    # macros
    def _rewrite(self, tree: exp.Expr) -> exp.Expr:
        """The target's rewrites, bindings included."""
        if self.target == "duckdb":
            # sub-selects, as for PostgreSQL: DuckDB tires of deeply nested lambdas
            numbers = itertools.count(1)
            return _post_order(tree, lambda n: _subquery_let(n, next(numbers))
                               if isinstance(n, Let) else None)
        spark = self.target == "spark"
        tree = _post_order(tree, _Rewriter(self.target, keep_lets=spark))
        if spark:
            # Spark's analyser pays per nested lambda: bind by levels of dependency
            with _deep_recursion():
                return _leveled(*_flatten(tree))
        return tree

    def _body(self, key: str) -> tuple[exp.Expr, dict[str, int]]:
        """The macro's body lowered and rewritten for the target, and its parameter uses.

        Parameters are free variables named ``tl_arg_<name>``.
        """
        if key not in self._bodies:
            macro = self.macros[key]
            body = macro.body.copy()
            params = set(macro.params)
            for col in list(body.find_all(exp.Column)):
                if not col.table and col.name in params:
                    ident = _ident(self.ARG + col.name)
                    if col is body:
                        body = ident
                    else:
                        col.replace(ident)
            with _deep_recursion():
                body = lower(body, self.macros, portable_lgamma=self.portable_lgamma,
                             fold=self.fold)
                body = self._rewrite(body)
            uses = {p: 0 for p in macro.params}
            for ident in body.find_all(exp.Identifier):
                if ident.name.startswith(self.ARG) and _is_ref(ident):
                    param = ident.name[len(self.ARG):]
                    if param in uses:
                        uses[param] += 1
            self._bodies[key] = (body, uses)
        return self._bodies[key]

    def _bind(self, body: exp.Expr, name: str, value: exp.Expr) -> exp.Expr:
        let = Let(this=body, expression=value, var=_ident(name))
        if self.target in ("postgres", "duckdb"):
            return _subquery_let(let, 0)
        return _array_let(let, self.target)

    def _inline(self, key: str, args: list[exp.Expr]) -> exp.Expr:
        macro = self.macros[key]
        cached, uses = self._body(key)
        body = cached.copy()
        values = dict(zip(macro.params, args, strict=True))
        direct = {p for p in macro.params if uses[p] <= 1 or _atomic(values[p])}
        for ident in list(body.find_all(exp.Identifier)):
            param = ident.name[len(self.ARG):] if ident.name.startswith(self.ARG) else None
            if param in direct and _is_ref(ident):
                value = _paren(values[param].copy())
                if ident is body:
                    body = value
                else:
                    ident.replace(value)
        for param in reversed(macro.params):
            if param not in direct:
                body = self._bind(body, self.ARG + param, values[param])
        return exp.Paren(this=body)

    def _expand(self, tree: exp.Expr) -> exp.Expr:
        """Keep calls of function macros; replace other macro calls by their lowered body."""
        calls = [n for n in tree.find_all(exp.Anonymous) if _func_name(n) in self.macros]
        for call in reversed(calls):  # innermost first: arguments may call macros too
            key = _func_name(call)
            macro = self.macros[key]
            args = list(call.expressions)
            if len(args) != len(macro.params):
                raise Unsupported(f"macro {macro.name} takes {len(macro.params)} argument(s)")
            if key in self.as_functions:
                if key not in self._used:
                    self._used.append(key)
                continue
            new = self._inline(key, args)
            if call is tree:
                tree = new
            else:
                call.replace(new)
        return tree

    def _port(self, tree: exp.Expr) -> exp.Expr:
        with _deep_recursion():
            _strip_comments(tree)
            tree = lower(tree, {}, portable_lgamma=self.portable_lgamma, fold=self.fold)
            tree = self._rewrite(tree)
            tree = self._expand(tree)
            if self.target != "duckdb":
                self._check(tree)
        return tree

    def _check(self, tree: exp.Expr) -> None:
        """Refuse what the target would not run: DuckDB-only functions, lists and lambdas."""
        known = _KNOWN[self.target] | set(self._used)
        for node in tree.walk():
            if isinstance(node, Let):
                raise Unsupported("internal: an unlowered binding")
            if isinstance(node, exp.Anonymous):
                name = _func_name(node)
                if name not in known:
                    raise Unsupported(f"uses DuckDB's {name}(), which {self.target} lacks")
            if self.target == "postgres" and isinstance(
                    node, exp.Lambda | exp.Struct | exp.Transform | exp.Array):
                raise Unsupported(f"uses DuckDB's lists or lambdas ({node.key}), which "
                                  "postgres lacks")

    # public
    def expression(self, sql: str) -> str:
        """One DuckDB query (e.g. ``SELECT tl_t_crit(0.025, 10)``) for the target.

        With ``target="duckdb"`` the lowering is printed back as DuckDB SQL (bindings as
        sub-selects), so DuckDB can check it against its own macros.
        """
        tree = self._port(sqlglot.parse_one(sql, read="duckdb"))
        with _deep_recursion():
            return tree.sql(dialect=self.target)

    def view(self, name: str, statements: Iterable[str]) -> Translated:
        """A rendered view (DuckDB ``CREATE VIEW`` statements) for the target."""
        if self.target == "duckdb":
            return Translated(name, tuple(statements))
        out: list[str] = []
        try:
            for text in statements:
                for stmt in sqlglot.parse(text, read="duckdb"):
                    if stmt is not None:
                        out.extend(self._view_statement(stmt))
        except Unsupported as err:
            return Translated(name, (), str(err))
        except sqlglot.errors.SqlglotError as err:
            return Translated(name, (), f"sqlglot cannot translate it: {err}")
        return Translated(name, tuple(out))

    def _view_statement(self, stmt: exp.Expr) -> list[str]:
        if not (isinstance(stmt, exp.Create)
                and str(stmt.args.get("kind", "")).upper() == "VIEW"):
            kind = str(stmt.args.get("kind", "")).upper() if isinstance(stmt, exp.Create) else ""
            if "MACRO" in kind or "FUNCTION" in kind:
                raise Unsupported("a table macro, a view that takes arguments, exists only in "
                                  "DuckDB")
            raise Unsupported(f"only CREATE VIEW statements are translated, not {stmt.key}")
        query = stmt.expression
        if query is None:
            raise Unsupported("a view without a query")
        query = self._port(query)
        view = stmt.this.copy()
        target = self.target
        with _deep_recursion():
            if target == "spark":
                create = exp.Create(
                    this=view, kind="VIEW", replace=True, expression=query,
                    properties=exp.Properties(expressions=[exp.TemporaryProperty()]))
                return [create.sql(dialect="spark", pretty=True)]
            if target == "postgres":
                drop = exp.Drop(tables=[view.copy()], kind="VIEW", exists=True, cascade=True)
                create = exp.Create(this=view, kind="VIEW", expression=query)
                return [drop.sql(dialect="postgres"), create.sql(dialect="postgres", pretty=True)]
            create = exp.Create(this=view, kind="VIEW", replace=True, expression=query)
            return [create.sql(dialect=target, pretty=True)]

    def functions(self) -> list[str]:
        """CREATE FUNCTION statements for the macros the translated views called."""
        out = []
        for key in self._used:
            macro = self.macros[key]
            body = self._body(key)[0].copy()
            name = exp.to_identifier(macro.name.lower())
            params = {self.ARG + p: p for p in macro.params}
            for ident in list(body.find_all(exp.Identifier)):
                if ident.name in params and _is_ref(ident):
                    param = params[ident.name]
                    if self.target == "postgres":
                        # qualified by the function's name: never mistaken for a column
                        ident.replace(exp.column(param, table=name.name))
                    else:
                        ident.set("this", param)
            with _deep_recursion():
                self._check(body)
                if self.target == "postgres":
                    signature = ", ".join(f"{exp.to_identifier(p).sql('postgres')} "
                                          "DOUBLE PRECISION" for p in macro.params)
                    out.append(
                        f"CREATE OR REPLACE FUNCTION {name.sql('postgres')}({signature})\n"
                        "RETURNS DOUBLE PRECISION LANGUAGE sql IMMUTABLE PARALLEL SAFE\n"
                        f"RETURN {body.sql(dialect='postgres')}"
                    )
                else:
                    signature = ", ".join(f"{exp.to_identifier(p).sql('spark')} DOUBLE"
                                          for p in macro.params)
                    out.append(
                        f"CREATE OR REPLACE TEMPORARY FUNCTION {name.sql('spark')}({signature})\n"
                        f"RETURNS DOUBLE\nRETURN {body.sql(dialect='spark')}"
                    )
        return out


def column_type(duckdb_type: str, target: str) -> str:
    """A DuckDB column type (as DESCRIBE prints it) spelled for ``target``.

    Parquet written by DuckDB marks TIMESTAMP as local time, which Spark reads as
    TIMESTAMP_NTZ; TIMESTAMP WITH TIME ZONE is Spark's TIMESTAMP.
    """
    text = duckdb_type.upper()
    if target == "spark":
        if text in ("TIMESTAMP", "TIMESTAMP_US", "DATETIME"):
            return "TIMESTAMP_NTZ"
        if text in ("TIMESTAMP WITH TIME ZONE", "TIMESTAMPTZ"):
            return "TIMESTAMP"
    if text == "HUGEINT":
        return {"spark": "DECIMAL(38, 0)", "postgres": "NUMERIC(39, 0)",
                "trino": "DECIMAL(38, 0)"}.get(target, text)
    if text == "UBIGINT":
        return {"spark": "DECIMAL(20, 0)", "postgres": "NUMERIC(20, 0)",
                "trino": "DECIMAL(20, 0)"}.get(target, text)
    return exp.DataType.build(duckdb_type, dialect="duckdb").sql(dialect=target)
