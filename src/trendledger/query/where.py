"""The ``--where`` condition of ``fits``: far narrower than a query.

The condition is spliced into a WHERE clause of our own SQL, so it may only
compare values: column names of the view, literals, comparisons, boolean logic,
arithmetic and a CAST to a plain type. This is the only layer in front of a
``--where`` (the locked read-only connection is behind it): a function call
or a subquery there would otherwise run with the tool's own SQL around it.
"""

from __future__ import annotations

import difflib
from collections.abc import Collection

import sqlglot
from sqlglot import exp
from sqlglot.tokens import TokenType

from trendledger.errors import QueryRefused, first_line
from trendledger.query.positions import error_position, node_position, token_column
from trendledger.query.rules import describe_node, function_label
from trendledger.query.statements import DIALECT, MAX_QUERY_CHARS, quiet_sqlglot, tokenize

_WHERE_PREDICATES: tuple[type[exp.Expr], ...] = (
    exp.EQ,
    exp.NEQ,
    exp.LT,
    exp.LTE,
    exp.GT,
    exp.GTE,
    exp.Is,
    exp.NullSafeEQ,
    exp.NullSafeNEQ,
    exp.And,
    exp.Or,
    exp.Not,
    exp.In,
    exp.Between,
    exp.Like,
    exp.ILike,
)
_WHERE_VALUES: tuple[type[exp.Expr], ...] = (
    exp.Column,
    exp.Identifier,
    exp.Literal,
    exp.Boolean,
    exp.Null,
    exp.Add,
    exp.Sub,
    exp.Mul,
    exp.Div,
    exp.Mod,
    exp.Neg,
    exp.Paren,
    exp.Cast,
    exp.DataType,
    exp.DataTypeParam,
)
_PLAIN_TYPES = frozenset(
    {
        exp.DataType.Type.TINYINT,
        exp.DataType.Type.SMALLINT,
        exp.DataType.Type.INT,
        exp.DataType.Type.BIGINT,
        exp.DataType.Type.INT128,
        exp.DataType.Type.FLOAT,
        exp.DataType.Type.DOUBLE,
        exp.DataType.Type.DECIMAL,
        exp.DataType.Type.VARCHAR,
        exp.DataType.Type.TEXT,
        exp.DataType.Type.BOOLEAN,
        exp.DataType.Type.DATE,
        exp.DataType.Type.TIMESTAMP,
    }
)


def check_where(text: str, columns: Collection[str]) -> exp.Expression:
    """Parse a ``--where`` condition and return it with every column quoted.

    Why so narrow: the condition is spliced into a WHERE clause of our own
    SQL, so it must not be able to do anything but compare values. Allowed are
    column names from ``columns``, literals, comparisons (including IS [NOT]
    NULL and IS [NOT] DISTINCT FROM), AND/OR/NOT, IN with a list of literals,
    BETWEEN, LIKE/ILIKE, arithmetic, parentheses and a CAST to a plain type.
    Function calls, subqueries, parameters and ``*`` are refused.

    Every column in the returned tree is a quoted identifier with the exact
    spelling from ``columns``, and comments are dropped, so rendering it with
    ``.sql(dialect="duckdb")`` gives safe text.
    """
    if not isinstance(text, str) or not text.strip():
        raise QueryRefused("refused: the --where condition is empty", hint="for example: r2 > 0.9")
    if len(text) > MAX_QUERY_CHARS:
        raise QueryRefused(f"refused: the --where condition is {len(text)} characters long")
    tokens = tokenize(text, what="the --where condition")
    for token in tokens:
        if token.token_type == TokenType.SEMICOLON:
            raise QueryRefused(
                "refused: ';' in the --where condition; pass one condition, not statements",
                line=token.line,
                column=token_column(token),
            )
    try:
        with quiet_sqlglot():
            parsed = sqlglot.parse_one(text, read=DIALECT)
    except Exception as error:  # any parser failure means "no"
        line, column = error_position(error)
        raise QueryRefused(
            f"refused: cannot parse the --where condition: {first_line(error)}",
            line=line,
            column=column,
        ) from None
    if not isinstance(parsed, exp.Expression):
        raise QueryRefused("refused: the --where condition is empty")

    for node in parsed.walk():
        _check_where_node(node)
    root = parsed.unnest() if isinstance(parsed, exp.Paren) else parsed
    if not isinstance(root, (*_WHERE_PREDICATES, exp.Boolean, exp.Column)):
        raise QueryRefused(
            f"refused: --where needs a condition, not {describe_node(root)}",
            hint="compare a column with a value, for example: slope < 0",
        )

    known = list(columns)
    tree = parsed
    for reference in list(tree.find_all(exp.Column)):
        quoted = exp.column(_resolve_column(reference, known), quoted=True)
        if reference is tree:
            tree = quoted
        else:
            reference.replace(quoted)
    for node in tree.walk():
        node.comments = None
    return tree


def _check_where_node(node: exp.Expr) -> None:
    """Refuse one node of a --where tree unless it is on the short allowed list.

    The order matters: sqlglot models AND, OR and CAST as functions, so the
    allowed shapes are recognised before the general "no functions" rule.
    """
    line, column = node_position(node)
    if isinstance(node, exp.Star) or (isinstance(node, exp.Column) and node.is_star):
        raise QueryRefused(
            "refused: * (star) in the --where condition; name the columns",
            line=line,
            column=column,
        )
    if isinstance(node, exp.Column):
        if node.table or node.args.get("db") or node.args.get("catalog"):
            raise QueryRefused(
                f"refused: qualified column {node.sql(dialect=DIALECT)} in --where; "
                "use the bare column name",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.Identifier):
        if not isinstance(node.parent, exp.Column):
            raise QueryRefused(
                f"refused: name {node.name!r} in a place where --where allows none",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.In):
        _check_where_in(node)
        return
    if isinstance(node, exp.Cast):
        extras = [key for key, value in node.args.items() if value and key not in ("this", "to")]
        if extras:
            raise QueryRefused(
                f"refused: CAST with {', '.join(extras)} in the --where condition",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.DataType):
        if node.this not in _PLAIN_TYPES or any(
            not isinstance(param, exp.DataTypeParam) for param in node.expressions
        ):
            raise QueryRefused(
                f"refused: cast to {node.sql(dialect=DIALECT)} in the --where condition; "
                "only plain number, text, boolean, date and timestamp types are allowed",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.DataTypeParam):
        if not (isinstance(node.this, exp.Literal) and not node.this.is_string):
            raise QueryRefused("refused: unusual type parameter in the --where condition")
        return
    if isinstance(node, (*_WHERE_PREDICATES, *_WHERE_VALUES)):
        return
    if isinstance(node, exp.Func):
        raise QueryRefused(
            f"refused: function {function_label(node)} in the --where condition; "
            "only columns, literals, comparisons and arithmetic are allowed",
            line=line,
            column=column,
        )
    if isinstance(node, (exp.Subquery, exp.Query)):
        raise QueryRefused(
            "refused: subquery in the --where condition; only columns and literals are allowed",
            line=line,
            column=column,
        )
    if isinstance(node, exp.Placeholder):
        raise QueryRefused(
            f"refused: parameter ${node.name} in the --where condition; write the value itself",
            line=line,
            column=column,
        )
    raise QueryRefused(
        f"refused: {describe_node(node)} in the --where condition",
        line=line,
        column=column,
        hint="allowed: columns, literals, = <> < <= > >=, IS [NOT] NULL, IS [NOT] DISTINCT "
        "FROM, AND, OR, NOT, IN (...), BETWEEN, LIKE, ILIKE, + - * / %, CAST",
    )


def _check_where_in(node: exp.In) -> None:
    """IN is fine only with a non-empty list of literal values."""
    for key in ("query", "unnest", "field"):
        if node.args.get(key) is not None:
            raise QueryRefused(
                "refused: IN with a subquery or expression list in the --where condition; "
                "list literal values instead"
            )
    values = node.expressions
    if not values:
        raise QueryRefused("refused: IN () with no values in the --where condition")
    for value in values:
        if not _is_literal_value(value):
            raise QueryRefused(
                f"refused: {value.sql(dialect=DIALECT)} inside IN (...) in the --where "
                "condition; only literal values may be listed"
            )


def _is_literal_value(node: exp.Expr) -> bool:
    """A literal, NULL, boolean, negated number or a literal cast to a plain type."""
    if isinstance(node, (exp.Literal, exp.Boolean, exp.Null)):
        return True
    if isinstance(node, (exp.Neg, exp.Paren)):
        return _is_literal_value(node.this)
    if isinstance(node, exp.Cast):
        return _is_literal_value(node.this)
    return False


def _resolve_column(column: exp.Column, known: list[str]) -> str:
    """The spelling from ``known`` that ``column`` names, matching case like DuckDB does."""
    name = column.name
    if name in known:
        return name
    folded = [candidate for candidate in known if candidate.casefold() == name.casefold()]
    if len(folded) == 1:
        return folded[0]
    close = difflib.get_close_matches(name, known, n=1, cutoff=0.5)
    if not close:
        by_fold = {candidate.casefold(): candidate for candidate in known}
        folded_close = difflib.get_close_matches(name.casefold(), list(by_fold), n=1, cutoff=0.5)
        close = [by_fold[match] for match in folded_close]
    if close:
        hint = f"did you mean {close[0]}?"
    else:
        hint = "known columns: " + ", ".join(known) if known else "the view has no columns"
    line, position = node_position(column)
    raise QueryRefused(
        f"refused: unknown column {name!r} in the --where condition",
        line=line,
        column=position,
        hint=hint,
    )
