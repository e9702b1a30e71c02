"""Translate the store's DuckDB views for Spark SQL, PostgreSQL and Trino.

The views are rendered from ``sql/views/*.sql`` as DuckDB SQL. Here each one is parsed
with sqlglot, rewritten as a syntax tree and printed for the target engine. Nothing is
done by string replacement; every rewrite is a tree transform. The macros and list
idioms are first lowered to plain expressions (:mod:`trendledger.lowering`).

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
from collections.abc import Callable, Iterable
from dataclasses import dataclass

import sqlglot
from sqlglot import exp

from trendledger.export.lowering import (
    Let,
    Names,
    Unsupported,
    atomic,
    deep_recursion,
    double,
    func_name,
    is_ref,
    lower,
    macro_library,
    num,
    paren,
    post_order,
    size,
    special,
    to_ident,
)

#: Targets, in the order the export writes them.
DIALECTS: tuple[str, ...] = ("duckdb", "spark", "postgres", "trino")

#: Functions sqlglot does not model (so it prints them unchanged) that a target does have.
_KNOWN: dict[str, frozenset[str]] = {
    "duckdb": frozenset(),
    # any_value(x, true): the ignore-nulls form the any_value rewrite writes (Spark 3.4 on)
    "spark": frozenset({"row", "any_value"}),
    # log: the one-argument base-10 LOG the log10 rewrite writes (see _Rewriter)
    "postgres": frozenset({"row", "log"}),
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
_COMPENSATED_SUMS = frozenset({"fsum", "sumkahan", "kahan_sum"})
_COMPENSATED_AVGS = frozenset({"favg"})


@dataclass(frozen=True)
class Translated:
    """One view for one target: its statements, or why it cannot be had there."""

    name: str
    statements: tuple[str, ...]
    unsupported: str | None = None


# -- engine rewrites ----------------------------------------------------------------------------


class _Rewriter:
    """Per-target rewrites, applied children first."""

    def __init__(self, target: str, keep_lets: bool = False) -> None:
        self.target = target
        self.keep_lets = keep_lets
        self.names = Names()
        self.lets = itertools.count(1)

    # helpers
    def inf(self) -> exp.Expr:
        return special("Infinity")

    def div(self, left: exp.Expr, right: exp.Expr) -> exp.Expr:
        numerator = exp.Cast(this=paren(left), to=double())
        denominator: exp.Expr = paren(right)
        if self.target in ("spark", "postgres"):
            denominator = exp.Nullif(this=right, expression=exp.Literal.number(0))
        return exp.Div(this=numerator, expression=denominator, typed=True, safe=False)

    def bind(self, value: exp.Expr, build: Callable[[exp.Expr], exp.Expr]
             ) -> exp.Expr:
        """build(v) where v stands for value: the value itself if small, else a binding."""
        if size(value) <= 30:
            return build(value)
        name = self.names.fresh("tl_b")
        let = Let(this=build(to_ident(name)), expression=value, var=to_ident(name))
        return let if self.keep_lets else self.let(let)

    def let(self, node: Let) -> exp.Expr:
        if self.target == "postgres":
            return _subquery_let(node, next(self.lets))
        return _array_let(node, self.target)

    # the rewrite
    def __call__(self, node: exp.Expr) -> exp.Expr | None:
        name = func_name(node)
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
            return exp.Paren(this=exp.EQ(this=paren(node.this), expression=special("NaN")))
        if name in _COMPENSATED_SUMS:
            return exp.Sum(this=node.expressions[0])
        if name in _COMPENSATED_AVGS:
            return exp.Avg(this=node.expressions[0])
        if isinstance(node, exp.Cast) and node.this.is_string \
                and str(node.this.this).lower() in ("inf", "+inf", "-inf") \
                and node.to.is_type(exp.DataType.Type.DOUBLE, exp.DataType.Type.FLOAT):
            text = "-Infinity" if str(node.this.this).startswith("-") else "Infinity"
            return special(text)
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
        if target == "postgres" and isinstance(node, exp.Log) and node.expression is not None \
                and isinstance(node.this, exp.Literal) and node.this.this == "10":
            # log10 (sql/parts/forms.sql): PostgreSQL's LOG(b, x) takes numeric only, and
            # its one-argument LOG(x) is base 10 for double precision; it raises below 0
            return self.bind(node.expression, lambda v: exp.Case(ifs=[
                exp.If(this=exp.GT(this=v.copy(), expression=exp.Literal.number(0)),
                       true=exp.Anonymous(this="LOG", expressions=[v.copy()]))]))
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
        both = exp.and_(exp.Not(this=exp.Is(this=paren(y.copy()), expression=exp.Null())),
                        exp.Not(this=exp.Is(this=paren(x.copy()), expression=exp.Null())),
                        copy=False)
        xs = exp.Case(ifs=[exp.If(this=both.copy(), true=x.copy())])
        ys = exp.Case(ifs=[exp.If(this=both.copy(), true=y.copy())])
        count = exp.Count(this=exp.Case(ifs=[exp.If(this=both, true=exp.Literal.number(1))]))
        var_x = exp.VariancePop(this=xs.copy())
        var_y = exp.VariancePop(this=ys.copy())
        cov = exp.CovarPop(this=y.copy(), expression=x.copy())
        slope = self.div(cov.copy(), var_x.copy())
        name = func_name(node)
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
        keep = exp.Lambda(this=exp.Not(this=exp.Is(this=to_ident(var), expression=exp.Null())),
                          expressions=[to_ident(var)])
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
                           true=special("NaN")),
                ])
            if isinstance(node, exp.Ln):
                return exp.Case(ifs=[
                    exp.If(this=exp.GT(this=use(), expression=zero.copy()),
                           true=exp.Ln(this=use())),
                    exp.If(this=exp.EQ(this=use(), expression=zero.copy()),
                           true=special("-Infinity")),
                    exp.If(this=exp.LT(this=use(), expression=zero.copy()),
                           true=special("NaN")),
                ])
            # exp: PostgreSQL raises on overflow and underflow of finite arguments
            return exp.Case(ifs=[
                exp.If(this=exp.LT(this=use(), expression=num(-708.39)),
                       true=exp.Literal.number("0.0")),
                exp.If(this=exp.and_(exp.GT(this=use(), expression=num(709.78)),
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
        if not (func_name(left) == "row" and func_name(right) == "row"):
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
                node.set(key, paren(new) if isinstance(new, exp.Binary | exp.Unary) else new)
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
        used = {i.name for i in value.find_all(exp.Identifier) if i.name in level and is_ref(i)}
        level[name] = 1 + max((level[u] for u in used), default=-1)
    depth = max(level.values())
    for lvl in range(depth, -1, -1):
        group = [(n, v) for n, v in bindings if level[n] == lvl]
        if len(group) == 1:
            name, value = group[0]
            body = _array_let(Let(this=body, expression=value, var=to_ident(name)), "spark")
            continue
        holder = f"tl_s{lvl}_{group[0][0]}"
        names = {n for n, _ in group}
        for ident in list(body.find_all(exp.Identifier)):
            if ident.name in names and is_ref(ident):
                field = exp.Dot(this=to_ident(holder), expression=to_ident(ident.name))
                if ident is body:
                    body = field
                else:
                    ident.replace(field)
        packed = exp.Struct(expressions=[exp.PropertyEQ(this=to_ident(n), expression=v)
                                         for n, v in group])
        body = _array_let(Let(this=body, expression=packed, var=to_ident(holder)), "spark")
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
    alias = exp.TableAlias(this=to_ident(f"tl_let_{number}"))
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
                exp.Cast(this=exp.Null(), to=double()) for _ in macro.params])
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
            return post_order(tree, lambda n: _subquery_let(n, next(numbers))
                               if isinstance(n, Let) else None)
        spark = self.target == "spark"
        tree = post_order(tree, _Rewriter(self.target, keep_lets=spark))
        if spark:
            # Spark's analyser pays per nested lambda: bind by levels of dependency
            with deep_recursion():
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
                    ident = to_ident(self.ARG + col.name)
                    if col is body:
                        body = ident
                    else:
                        col.replace(ident)
            with deep_recursion():
                body = lower(body, self.macros, portable_lgamma=self.portable_lgamma,
                             fold=self.fold)
                body = self._rewrite(body)
            uses = {p: 0 for p in macro.params}
            for ident in body.find_all(exp.Identifier):
                if ident.name.startswith(self.ARG) and is_ref(ident):
                    param = ident.name[len(self.ARG):]
                    if param in uses:
                        uses[param] += 1
            self._bodies[key] = (body, uses)
        return self._bodies[key]

    def _bind(self, body: exp.Expr, name: str, value: exp.Expr) -> exp.Expr:
        let = Let(this=body, expression=value, var=to_ident(name))
        if self.target in ("postgres", "duckdb"):
            return _subquery_let(let, 0)
        return _array_let(let, self.target)

    def _inline(self, key: str, args: list[exp.Expr]) -> exp.Expr:
        macro = self.macros[key]
        cached, uses = self._body(key)
        body = cached.copy()
        values = dict(zip(macro.params, args, strict=True))
        direct = {p for p in macro.params if uses[p] <= 1 or atomic(values[p])}
        for ident in list(body.find_all(exp.Identifier)):
            param = ident.name[len(self.ARG):] if ident.name.startswith(self.ARG) else None
            if param in direct and is_ref(ident):
                value = paren(values[param].copy())
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
        calls = [n for n in tree.find_all(exp.Anonymous) if func_name(n) in self.macros]
        for call in reversed(calls):  # innermost first: arguments may call macros too
            key = func_name(call)
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
        with deep_recursion():
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
                name = func_name(node)
                if name not in known:
                    raise Unsupported(f"uses DuckDB's {name}(), which {self.target} lacks")
            if isinstance(node, exp.Format):  # sqlglot maps it, but the {} specs differ
                raise Unsupported(f"formats text with DuckDB's format(), whose {{}} patterns "
                                  f"{self.target} does not read")
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
        with deep_recursion():
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
        if any(w.args.get("recursive") for w in query.find_all(exp.With)):
            # the bend search (bend_rounds.sql) repeats itself on the segment after each bend
            raise Unsupported("a recursive query whose recursive part groups and uses window "
                              "functions (PostgreSQL refuses aggregates there, Spark 4.0 and "
                              "Trino have no such recursion)")
        query = self._port(query)
        view = stmt.this.copy()
        target = self.target
        with deep_recursion():
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
                if ident.name in params and is_ref(ident):
                    param = params[ident.name]
                    if self.target == "postgres":
                        # qualified by the function's name: never mistaken for a column
                        ident.replace(exp.column(param, table=name.name))
                    else:
                        ident.set("this", param)
            with deep_recursion():
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
