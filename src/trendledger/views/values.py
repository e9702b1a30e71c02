"""What a fit offers its templates: the view kinds and the placeholder values.

Both the view installation (views.install) and the stored sums (views.moments) render
templates with these values; keeping them here lets both import this module and neither the
other's.
"""

from __future__ import annotations

from typing import Any

from sqlglot import exp

from trendledger.spec import Fit, Spec
from trendledger.views import forms, templates
from trendledger.views.templates import Part, Text

#: View kinds per fit, in install order (later ones may read earlier ones).
#: Each is ``sql/views/<file>.sql``; a kind whose file is absent is not installed.
KINDS: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    # (kind, view name suffix, candidate template files under sql/views/): the first
    # candidate that exists and whose placeholders the fit can all fill is used.
    ("moments", "_moments", ("moments",)),
    ("fit", "", ("fit_stored",)),  # moments.py: fit.sql's rows, stored and kept up to date
    ("windows", "_windows", ("windows",)),
    ("points", "_points", ("points",)),
    ("bend_rounds", "_bend_rounds", ("bend_rounds",)),
    ("bend", "_bend", ("bend",)),
    ("change", "_change", ("change",)),
    ("break", "_break", ("break",)),
    ("crossing", "_crossing", ("crossing",)),
    # whether the readings follow a straight line (a quadratic term's t test)
    ("straight", "_straight", ("straight",)),
    # the latest batch's readings against the line through the earlier ones (out-of-trend)
    ("trend", "_trend", ("trend",)),
    ("fleet", "_fleet", ("fleet",)),  # each fleet of units taken together
    ("fleet_units", "_fleet_units", ("fleet_units",)),  # each unit against its fleet
    ("alerts", "_alerts", ("alerts",)),
    # moments.py: the same fit recomputed from every row in two passes (reference, benchmarks)
    ("full_moments", "_full_moments", ("moments_full",)),
    ("full", "_full", ("fit",)),
)

def fit_values(spec: Spec, fit: Fit) -> dict[str, Any]:
    """Placeholder values a fit offers to its templates; None means 'not configured'.

    Names of views of the same fit are offered too (``__fit_view__``,
    ``__moments_view__`` ...), so a template can read its siblings.
    """
    dates = [n for n, t in spec.all_columns.items() if t.startswith(("DATE", "TIMESTAMP"))]
    keep = forms.kept(spec, fit)
    values: dict[str, Any] = {
        "source": "measurements",
        "group": list(fit.group),
        # each group column as text, NULL written NULL: the parts of the unit's label
        "group_text": [exp.func("coalesce", exp.cast(exp.column(g, quoted=True), "VARCHAR"),
                                exp.Literal.string("NULL")) for g in fit.group],
        "fit_name": Text(fit.name),
        # the rows summed by the fragment __sums__ are keyed by __key__: the group, or (a
        # view's KIND_VALUES) the group and its window or side
        "key": list(fit.group),
        "window_key_group": [*fit.group, "tl_window"],
        "side_group": [*fit.group, "tl_above"],
        "sums": templates.Fragment("fragments/sums_origin.sql" if fit.through_origin
                                   else "fragments/sums_intercept.sql"),
        # the column, or its form (views/forms.py): what every view fits
        "x": forms.value(spec, fit.x, fit.x_form, keep),
        "y": forms.value(spec, fit.y, fit.y_form, keep),
        # the rows the fit's filter keeps (the points view leaves the others out)
        "kept": keep if keep is not None else exp.true(),
        # the columns' own values (the points view shows both)
        "x_column": forms.value(spec, fit.x, None),
        "y_column": forms.value(spec, fit.y, None),
        # true for a row a form leaves out (counted per group: n_outside)
        "outside": forms.outside(spec, fit, keep),
        # sql/parts/back_*.sql: the fit's scale back to the columns' own units
        "x_back": Part(f"back_{fit.x_form or 'plain'}"),
        "y_back": Part(f"back_{fit.y_form or 'plain'}"),
        "level": fit.level,
        # the limit is given in y's own units; the views compare it on the fit's scale
        "limit": forms.limit(fit),
        "horizon": fit.horizon,
        "window": Text(fit.window) if fit.window else None,
        "window_field": dates[0] if dates else None,
        "window_x": fit.window_x,
        # the window key part (sql/parts/): calendar windows of the date field, or spans of x
        "window_key": (Part("window_calendar") if fit.window
                       else Part("window_span") if fit.window_x else None),
        # the line part (sql/parts/): with an intercept, or through the origin
        "line": Part("line_origin" if fit.through_origin else "line_intercept"),
        # the statistics of a line from its sums (fit.sql per group, windows.sql per window)
        "line_stats": templates.Fragment("fragments/line_stats.sql"),
        # where the line reaches the limit (sql/parts/): Fieller's ends for either line
        "cross": (Part("cross_origin" if fit.through_origin else "cross_intercept")
                  if has_limit(fit) else None),
        # crossing.sql: the sides of the tolerance, each absolute or a fraction of the start
        "lower_value": fit.lower.value if fit.lower else None,
        "lower_fraction": fit.lower.fraction if fit.lower else None,
        "upper_value": fit.upper.value if fit.upper else None,
        "upper_fraction": fit.upper.fraction if fit.upper else None,
        "extrapolation_cap": fit.extrapolation_cap,
        "min_r2": fit.min_r2,
        # fit.sql, trend.sql: the recorded step of y (Sheppard's floor on the residual sd)
        "y_resolution": spec.source.resolution.get(fit.y),
        # fleet_units.sql: a unit is compared with its fleet when it follows a line, r2 at
        # least min_r2 (0.9 when the fit leaves min_r2 unset)
        "fleet_min_r2": fit.min_r2 if fit.min_r2 is not None else 0.9,
        "alpha": fit.alpha,
        "alpha_change": fit.alpha_change,
        "alpha_outliers": fit.alpha_outliers,
        "alpha_trend": fit.alpha_trend,
        "silent_after": fit.silent_after,
        # alerts.sql: 'fdr' (Benjamini-Hochberg across the fit's units) or 'unit'
        "error_control": Text(fit.error_control),
        # the fleet columns (possibly none: every unit is one fleet) and the poolability level
        "fleet": list(fit.fleet),
        "pool_alpha": fit.pool_alpha,
        # bend_rounds.sql: the kind of bend searched for ('none': no search, the bend view
        # holds the whole-history line that the crossing view projects from)
        "bend_kind": Text(fit.bend),
        "bend_min": fit.bend_min,
        "bend_round": templates.Fragment("fragments/bend_round.sql"),
        # crossing.sql, alerts.sql: the line they project from, the bend view's line that
        # holds now (views.plan puts the whole-history line where there is no bend view)
        "line_now": templates.Fragment("fragments/line_since_bend.sql"),
        # the same numbers as text for notes, formatted here so every engine prints them alike
        "alpha_text": Text(f"{fit.alpha:g}"),
        "level_text": Text(f"{fit.level:g}"),
    }
    for kind, suffix, _ in KINDS:
        values[f"{kind}_view"] = fit.view + suffix
    # fit.sql reads y's resolution as SQL NULL when it has none, for the stored statistics
    # too (moments.py renders it with these values; views.install adds the other _or_null)
    values["y_resolution_or_null"] = values["y_resolution"]
    values["moments_table"] = f"tl_moments_{fit.name}"  # moments.py: the stored sums
    values["fit_table"] = f"tl_fit_{fit.name}"  # moments.py: the stored statistics
    return values


def has_limit(fit: Fit) -> bool:
    """Whether the fit has a limit on either side (and so a crossing view)."""
    return fit.limit is not None or fit.lower is not None or fit.upper is not None


def template_for(fit: Fit, file: str) -> str:
    """``sql/views/<file>.sql``: one template serves every fit; what differs between the
    line with an intercept and the line through the origin is in the slots (sql/parts/) and
    fragments (sql/fragments/) that ``fit_values`` names."""
    del fit  # the same file for every fit
    return f"views/{file}.sql"


