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

from trendledger.spec import Fit, Spec, filter_condition
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


def kept(spec: Spec, fit: Fit) -> exp.Expr | None:
    """The fit's row filter (``where``) as a condition on quoted columns, or None."""
    if fit.where is None:
        return None
    known = {**spec.source.columns, **spec.source.fields, **spec.source.derived()}
    return filter_condition(fit.where, known)


def value(column: str, form: str | None, keep: exp.Expr | None = None) -> str | exp.Expr:
    """What a template reads for x or y: the column's name, or the form's expression; with a
    row filter, NULL for the rows it does not keep (so they count nowhere, like NULL)."""
    if form is None and keep is None:
        return column
    out: exp.Expr = _apply(form, _double(column)) if form else exp.column(column, quoted=True)
    if keep is not None:
        out = exp.Case(ifs=[exp.If(this=exp.paren(keep.copy()), true=out)])
    return out


def outside(fit: Fit, keep: exp.Expr | None = None) -> exp.Expr:
    """True for a row (kept by the filter) whose x and y are both present and finite but a
    form leaves out."""
    if fit.x_form is None and fit.y_form is None:
        return exp.false()
    raw = exp.and_(exp.func("isfinite", _double(fit.x)), exp.func("isfinite", _double(fit.y)))
    if keep is not None:
        raw = exp.and_(exp.paren(keep.copy()), raw)
    fitted: exp.Expr = exp.and_(*(
        exp.func("isfinite", _apply(form, _double(col)) if form else _double(col))
        for col, form in ((fit.x, fit.x_form), (fit.y, fit.y_form))))
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
