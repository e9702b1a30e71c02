"""Lower the store's DuckDB macros and list idioms into plain SQL expressions.

The first step of translating a view for another engine, the same for every target
(:mod:`trendledger.dialects` is the second). The t-distribution macros of
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
"""

from __future__ import annotations

import itertools
import re
import sys
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import sqlglot
from sqlglot import exp

#: Lowest argument at which Stirling's series alone gives ln Gamma to double precision.
_STIRLING_FROM = 10
#: Natural logarithm of sqrt(2 pi).
_LN_SQRT_2PI = "0.91893853320467274178"

_REDUCE_NAMES = frozenset({"list_reduce", "array_reduce", "reduce"})
#: A macro argument of at most this many syntax nodes is pasted where its parameter stands
#: (as DuckDB does); a larger one used more than once is bound to a name.
_PASTE_UP_TO = 12


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


# -- small helpers ----------------------------------------------------------------------------


class Names:
    """Fresh variable names: the original name (minus an earlier suffix) plus a counter."""

    def __init__(self) -> None:
        self._count = itertools.count(1)

    def fresh(self, base: str) -> str:
        root = re.sub(r"_v\d+$", "", base)
        return f"{root}_v{next(self._count)}"


@contextmanager
def deep_recursion(limit: int = 20000) -> Iterator[None]:
    """Expanded macros make deep trees; printing them recurses once per level."""
    old = sys.getrecursionlimit()
    sys.setrecursionlimit(max(old, limit))
    try:
        yield
    finally:
        sys.setrecursionlimit(old)


def double() -> exp.DataType:
    return exp.DataType.build("DOUBLE")


def special(value: str) -> exp.Cast:
    """CAST('Infinity' AS DOUBLE) and friends; every engine reads these spellings."""
    return exp.Cast(this=exp.Literal.string(value), to=double())


def num(value: float | int | str) -> exp.Expr:
    text = str(value)
    if text.startswith("-"):
        return exp.Neg(this=exp.Literal.number(text[1:]))
    return exp.Literal.number(text)


def paren(node: exp.Expr) -> exp.Expr:
    if isinstance(node, exp.Paren | exp.Literal | exp.Column | exp.Identifier | exp.Func
                  | exp.Cast | exp.Null | exp.Boolean | exp.Subquery | exp.Bracket | Let):
        return node
    return exp.Paren(this=node)


def size(node: exp.Expr) -> int:
    return sum(1 for _ in node.walk())


def atomic(node: exp.Expr) -> bool:
    while isinstance(node, exp.Paren | exp.Neg):
        node = node.this
    if isinstance(node, exp.Cast):
        return atomic(node.this)
    return isinstance(node, exp.Literal | exp.Identifier | exp.Column | exp.Null | exp.Boolean)


def func_name(node: exp.Expr) -> str:
    if isinstance(node, exp.Anonymous):
        return str(node.this).lower()
    return node.key


def is_ref(node: exp.Identifier) -> bool:
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


def refs_to(tree: exp.Expr, name: str) -> list[exp.Identifier]:
    return [n for n in tree.find_all(exp.Identifier) if n.name == name and is_ref(n)]


def post_order(tree: exp.Expr,
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


def to_ident(name: str) -> exp.Identifier:
    return exp.Identifier(this=name, quoted=False)


def from_text(text: str, variables: Iterable[str]) -> exp.Expr:
    """Parse our own fixed expression text; names in ``variables`` become variable uses."""
    tree = sqlglot.parse_one(text, read="duckdb")
    names = set(variables)
    for col in list(tree.find_all(exp.Column)):
        if not col.table and col.name in names:
            if col is tree:
                return to_ident(col.name)
            col.replace(to_ident(col.name))
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


def _rename(node: exp.Expr, env: dict[str, str], names: Names) -> None:
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
            if current.name in scope and is_ref(current):
                current.set("this", scope[current.name])
            continue
        for child in current.iter_expressions():
            stack.append((child, scope))


def _instantiate(macro: Macro, args: list[exp.Expr], names: Names) -> exp.Expr:
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
        if atomic(arg) or uses.get(param, 0) <= 1 or size(arg) <= _PASTE_UP_TO:
            values[param] = arg
        else:
            var = names.fresh(f"tl_p_{param}")
            values[param] = to_ident(var)
            bound.append((var, arg))
    if isinstance(body, exp.Column) and not body.table and body.name in values:
        body = paren(values[body.name].copy())
    else:
        for col in list(body.find_all(exp.Column)):
            if not col.table and col.name in values:
                col.replace(paren(values[col.name].copy()))
    for var, arg in reversed(bound):
        body = Let(this=body, expression=arg, var=to_ident(var))
    return exp.Paren(this=body)


def expand_macros(tree: exp.Expr, macros: dict[str, Macro],
                  names: Names | None = None) -> exp.Expr:
    """Replace every call of a macro by its body, innermost first, until none is left."""
    names = names or Names()
    for _ in range(64):
        calls = [n for n in tree.find_all(exp.Anonymous) if func_name(n) in macros]
        if not calls:
            return tree
        for call in reversed(calls):
            new = _instantiate(macros[func_name(call)], list(call.expressions), names)
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
        items = [num(k) for k in range(start, end, step)]
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


def _unroll(node: exp.Expr, names: Names) -> exp.Expr | None:
    """``list_reduce(list, lambda acc, x: body[, init])`` over a constant list -> bindings."""
    if not (isinstance(node, exp.Anonymous) and func_name(node) in _REDUCE_NAMES):
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
            for ref in refs_to(body, index_name):
                ref.replace(num(position))
        for ref in refs_to(body, item_name):
            ref.replace(paren(item.copy()))
        acc = Let(this=body, expression=acc, var=to_ident(acc_name))
    return acc


def _fold(node: exp.Expr, trino: bool) -> exp.Expr | None:
    """``list_reduce(list, lambda acc, x: body[, init])`` -> the engine's own fold.

    Spark's ``aggregate`` and Trino's ``reduce`` want the state's type fixed: it is
    DOUBLE here (the folds of the views are numeric).
    """
    if not (isinstance(node, exp.Anonymous) and func_name(node) in _REDUCE_NAMES):
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
    fn.set("this", exp.Cast(this=fn.this, to=double()))
    acc = fn.expressions[0].name
    finish = exp.Lambda(this=to_ident(acc), expressions=[to_ident(acc)]) if trino else None
    return exp.Reduce(this=items, initial=exp.Cast(this=start, to=double()), merge=fn,
                      finish=finish)


def _split_struct(node: exp.Expr, names: Names) -> exp.Expr | None:
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
        if isinstance(target, exp.Identifier) and target.name == var and is_ref(target):
            field = dot.expression.name
            if field not in fresh:
                raise Unsupported(f"struct {var} has no field {field}")
            if dot is body:
                body = to_ident(fresh[field])
            else:
                dot.replace(to_ident(fresh[field]))
    if refs_to(body, var):
        raise Unsupported("a struct is used whole, not field by field")
    for key, value in reversed(fields):
        body = Let(this=body, expression=value, var=to_ident(fresh[key]))
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


def _lgamma(node: exp.Expr, names: Names) -> exp.Expr | None:
    """lgamma(a) for a > 0 from Stirling's series, shifting arguments below 10 up by 10:
    ``lgamma(a) = S(a + 10) - ln(a (a + 1) ... (a + 9))``.

    NULL for a <= 0 (DuckDB gives infinity or the value on the negative axis): the
    views only take it of half the degrees of freedom.
    """
    if func_name(node) != "lgamma":
        return None
    args = list(node.expressions) if isinstance(node, exp.Anonymous) else [node.this]
    if len(args) != 1:
        raise Unsupported("lgamma takes one argument")
    z, w = names.fresh("tl_lg_z"), names.fresh("tl_lg_w")
    product = " * ".join([z] + [f"({z} + {k})" for k in range(1, _STIRLING_FROM)])
    shifted = from_text(f"{_stirling(w)} - ln({product})", [z, w])
    inner = Let(this=shifted, expression=from_text(f"{z} + {_STIRLING_FROM}", [z]),
                var=to_ident(w))
    case = from_text(
        f"CASE WHEN {z} >= {_STIRLING_FROM} THEN {_stirling(z)} WHEN {z} > 0 THEN tl_lg_here END",
        [z],
    )
    for col in list(case.find_all(exp.Column)):
        if col.name == "tl_lg_here":
            col.replace(inner)
    value = exp.Cast(this=args[0].copy(), to=double())
    return Let(this=case, expression=value, var=to_ident(z))


def _simplify_lets(tree: exp.Expr) -> exp.Expr:
    """Substitute each binding used at most once, or whose value is a name or a constant.

    One pass, innermost binding first, with an index of every variable use (names are
    unique after renaming), so large expansions cost linear time.
    """
    uses: dict[str, list[exp.Identifier]] = {}

    def index(node: exp.Expr, delta: int) -> None:
        for ident in node.find_all(exp.Identifier):
            if is_ref(ident):
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
        if len(refs) > 1 and not atomic(node.expression):
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
            value = paren(value)
            if ref is body:
                body = value
            else:
                ref.replace(value)
        body = paren(body) if isinstance(body, exp.Binary | exp.Unary) else body
        if node is tree:
            tree = body
        else:
            node.replace(body)
    return tree


def lower(tree: exp.Expr, macros: dict[str, Macro], *, portable_lgamma: bool,
          fold: str | None = None, names: Names | None = None) -> exp.Expr:
    """Expand macros and turn DuckDB list idioms into Let bindings (see the module notes).

    ``fold`` names the engine ("spark", "trino") whose own fold replaces ``list_reduce``;
    otherwise the reduce is unrolled.
    """
    names = names or Names()
    tree = expand_macros(tree, macros, names)
    tree = post_order(tree, _to_let)
    if fold:
        tree = post_order(tree, lambda n: _fold(n, fold == "trino"))
    tree = post_order(tree, lambda n: _unroll(n, names))
    tree = post_order(tree, lambda n: _split_struct(n, names))
    if portable_lgamma:
        tree = post_order(tree, lambda n: _lgamma(n, names))
    return _simplify_lets(tree)
