"""The values a fit reads for x and y: a column, or a form of it (sql/parts/forms.sql), and
only on the rows its filter keeps.

A plain fit reads its columns by name, so its views render as they always have. A fit with a
form reads an expression instead: the form of the column as DOUBLE, NULL outside the form's
domain. The templates take it wherever they read ``__x__`` or ``__y__`` (a table qualifier
in the template, ``r.__x__``, qualifies the expression's column), so every view of the fit
(moments, points, windows, bend, change, break) fits the same composed input.
"""

from __future__ import annotations

import math

from sqlglot import exp

from trendledger.errors import SpecError
from trendledger.spec import Fit, Spec, computed_tree, filter_condition
from trendledger.views import templates

#: The part holding the forms' expressions, and the name of the value each reads.
PART = "forms"
VALUE = "tl_value"


def _apply(form: str, value: exp.Expr) -> exp.Expr:
    """The form's expression (forms.sql) with ``value`` in place of tl_value."""
    tree = templates.part_expressions(PART)[form].copy()
    for col in list(tree.find_all(exp.Column)):
        if col.name == VALUE:
            col.replace(value.copy())
    return tree


def _double(column: str) -> exp.Expr:
    return exp.cast(exp.column(column, quoted=True), "DOUBLE")


def source_value(spec: Spec, column: str) -> exp.Expr:
    """A column's value as DOUBLE: a declared column cast, a computed one built from its
    expression ([source.computed])."""
    text = spec.source.computed.get(column)
    if text is None:
        return _double(column)
    return exp.paren(_computed(computed_tree(text)))


def _computed(node: exp.Expr) -> exp.Expr:
    """A checked computed-column expression as safe SQL: columns quoted and cast to DOUBLE, a
    division by 0 NULL (x / NULLIF(d, 0)), ln, log10 and sqrt NULL outside their domains
    (forms.sql), exp NULL where it would overflow; never an error, NaN or infinity from them."""
    if isinstance(node, exp.Column):
        return _double(node.name)
    if isinstance(node, exp.Literal):
        return exp.cast(node.copy(), "DOUBLE")
    if isinstance(node, exp.Paren | exp.Neg | exp.Abs):
        return type(node)(this=_computed(node.this))
    if isinstance(node, exp.Div):
        return exp.Div(this=_computed(node.this),
                       expression=exp.func("nullif", _computed(node.expression),
                                           exp.Literal.number("0")))
    if isinstance(node, exp.Add | exp.Sub | exp.Mul):
        return type(node)(this=_computed(node.this), expression=_computed(node.expression))
    if isinstance(node, exp.Log):
        return _apply("log10", _computed(node.expression))
    if isinstance(node, exp.Ln | exp.Sqrt):
        return _apply("ln" if isinstance(node, exp.Ln) else "sqrt", _computed(node.this))
    if isinstance(node, exp.Exp):
        inner = _computed(node.this)
        return exp.Case(ifs=[exp.If(this=exp.LT(this=inner, expression=exp.Literal.number("709")),
                                    true=exp.Exp(this=inner.copy()))])
    raise SpecError(f"computed column: {node.sql()!r} is not allowed")  # the spec refused it


def kept(spec: Spec, fit: Fit) -> exp.Expr | None:
    """The fit's row filter (``where``) as a condition on quoted columns, or None."""
    if fit.where is None:
        return None
    known = {**spec.source.columns, **spec.source.fields, **spec.source.derived(),
             **{c: "DOUBLE" for c in spec.source.computed}}
    tree = filter_condition(fit.where, known)
    for col in list(tree.find_all(exp.Column)):
        if col.name in spec.source.computed:
            value = source_value(spec, col.name)
            if col is tree:
                return value
            col.replace(value)
    return tree


def value(spec: Spec, column: str, form: str | None,
          keep: exp.Expr | None = None) -> str | exp.Expr:
    """What a template reads for x or y: the column's name, or the form's expression (or the
    computed column's); with a row filter, NULL for the rows it does not keep (so they count
    nowhere, like NULL)."""
    computed = column in spec.source.computed
    if form is None and keep is None and not computed:
        return column
    out: exp.Expr
    if form:
        out = _apply(form, source_value(spec, column))
    else:
        out = source_value(spec, column) if computed else exp.column(column, quoted=True)
    if keep is not None:
        out = exp.Case(ifs=[exp.If(this=exp.paren(keep.copy()), true=out)])
    return out


def outside(spec: Spec, fit: Fit, keep: exp.Expr | None = None) -> exp.Expr:
    """True for a row (kept by the filter) whose x and y are both present and finite but a
    form leaves out."""
    if fit.x_form is None and fit.y_form is None:
        return exp.false()
    xv, yv = source_value(spec, fit.x), source_value(spec, fit.y)
    raw = exp.and_(exp.func("isfinite", xv), exp.func("isfinite", yv))
    if keep is not None:
        raw = exp.and_(exp.paren(keep.copy()), raw)
    fitted: exp.Expr = exp.and_(*(
        exp.func("isfinite", _apply(form, v) if form else v.copy())
        for v, form in ((xv, fit.x_form), (yv, fit.y_form))))
    fitted = exp.func("coalesce", fitted, exp.false())  # isfinite(NULL) is NULL
    out: exp.Expr = exp.func("coalesce", exp.and_(raw, exp.not_(fitted)), exp.false())
    return out


def limit(fit: Fit) -> float | exp.Expr | None:
    """The limit on the fit's scale: given in y's own units, taken through y's form."""
    if fit.limit is None or fit.y_form is None:
        return fit.limit
    return _apply(fit.y_form, exp.cast(exp.Literal.number(repr(fit.limit)), "DOUBLE"))


def forward(form: str | None, v: float | None) -> float | None:
    """A value taken through a form in Python, for the report's plots (the views do it in SQL,
    sql/parts/forms.sql); None outside the form's domain."""
    if v is None or form is None:
        return v
    if form in ("ln", "log10"):
        return (math.log(v) if form == "ln" else math.log10(v)) if v > 0 else None
    if form == "sqrt":
        return math.sqrt(v) if v >= 0 else None
    return 1.0 / v if v != 0 else None
