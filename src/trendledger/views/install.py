"""Install the SQL macros and the per-fit views into the store.

Everything is plain DuckDB SQL persisted in the file, so any DuckDB client
sees the same views. Installing is idempotent: a view whose SQL has not
changed is left untouched (tracked by a hash in ``tl_views``).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any

import duckdb
from sqlglot import exp

from trendledger.spec import Fit, Spec
from trendledger.views import moments, templates
from trendledger.views.templates import Part
from trendledger.views.values import KINDS, fit_values, template_for

__all__ = ["KINDS", "fit_values", "template_for", "plan", "install", "listing", "Planned"]

#: moments.py: placeholder values a kind takes from another (the full fit renders fit.sql over
#: the full moments view instead of the stored moments).
#: The windows and break views sum rows per group and window, or per group and side of the
#: break, through the same fragment as the moments (__sums__ keyed by __key__).
KIND_VALUES: dict[str, dict[str, str]] = {"full": {"moments_view": "full_moments_view"},
                                          "windows": {"key": "window_key_group"},
                                          "break": {"key": "side_group"}}

#: Outside the store (an export read by another engine) there are no stored sums. There the
#: full moments view comes first, the moments view reads it instead of the stored table, the
#: fit view is fit.sql over those moments, and the full fit gives the same rows (alias.sql):
#: every name and column stays the same, every number is computed from the rows.
RECOMPUTED_FIT = ("fit",)

#: Kinds whose template creates a table macro (called with arguments) instead of a view.
TABLE_MACROS = frozenset({"break"})

#: Kinds whose statistics still assume a line with an intercept: not installed for a fit
#: through the origin. Every other kind takes the fit's line from the slots ``__line__`` and
#: ``__cross__`` (sql/parts/) and its sums from the fragment ``__sums__``; there are no twin
#: files for the line through the origin.
INTERCEPT_ONLY = frozenset({"bend_rounds", "bend", "break", "alerts", "fleet",
                            "fleet_units"})


@dataclass(frozen=True)
class Planned:
    name: str
    kind: str
    fit: str | None
    description: str
    statements: tuple[str, ...]

    @property
    def digest(self) -> str:
        return hashlib.sha256("\n;\n".join(self.statements).encode()).hexdigest()


def _pick(fit: Fit, files: tuple[str, ...], values: dict[str, Any]) -> templates.Template | None:
    for file in files:
        relative = template_for(fit, file)
        if not (templates.sql_dir() / relative).is_file():
            continue
        tpl = templates.load(relative)
        needed = set(tpl.placeholders)
        for key in tpl.placeholders:  # a part's own placeholders must be filled as well
            if isinstance(values.get(key), Part):
                needed |= templates.part_placeholders(str(values[key]))
        if all(values.get(p) is not None for p in needed
               if p != "view" and not p.endswith(("_or_null", "_if_any"))):
            return tpl
    return None


def _alias(fit: Fit, name: str, same_as: str) -> Planned:
    stmts = templates.load("views/alias.sql").render({"view": name, "same_as": same_as})
    return Planned(name, "full", fit.name, f"the same rows as {same_as}", tuple(stmts))


def plan(spec: Spec, *, recompute: bool = False,
         without: frozenset[str] = frozenset()) -> list[Planned]:
    """Every macro and view the spec asks for, rendered but not yet run.

    ``recompute`` plans the views for an engine that has the rows but not the store's
    stored sums (see :data:`RECOMPUTED_FIT`); the view names and columns stay the same.
    ``without`` names view kinds an engine cannot run: they are left out, and the views that
    would read them read what stands in (without a bend view, the whole-history line).
    """
    out: list[Planned] = []
    for macro in templates.load_dir("macros"):
        out.append(Planned(macro.name, "macro", None, macro.description,
                           tuple(macro.render({}))))
    for fit in spec.fits:
        values = fit_values(spec, fit)
        # __name_or_null__ in a template reads SQL NULL where the fit leaves name unset
        # (instead of skipping the template)
        values.update({f"{k}_or_null": v for k, v in list(values.items())
                       if not k.endswith("_view") and not isinstance(v, list)})
        installed: set[str] = set()
        for kind, suffix, files in KINDS:
            if kind in without:
                continue
            if recompute and kind in ("full_moments", "full"):
                if kind == "full":  # full_moments was planned before the moments view
                    out.append(_alias(fit, fit.view + suffix, values["fit_view"]))
                continue
            # a template can read only the sibling views already installed for this fit
            offered = {k: None if k.endswith("_view") and k not in installed else v
                       for k, v in values.items()}
            # moments.py: a kind may take a placeholder's value from another one
            offered.update({k: offered[v] for k, v in KIND_VALUES.get(kind, {}).items()})
            if offered.get("bend_view") is None:
                # no bend view (a fit through the origin, an engine without one): crossing and
                # alerts project from the whole-history line
                offered["line_now"] = templates.Fragment("fragments/line_whole.sql")
            # __name_view_if_any__: a UNION branch reading a sibling the fit lacks is left out
            offered.update({f"{k}_if_any": v for k, v in list(offered.items())
                            if k.endswith("_view")})
            if recompute and kind == "moments":
                full = _pick(fit, ("moments_full",), offered)
                if full is None:
                    continue
                name = values["full_moments_view"]
                out.append(Planned(name, "full_moments", fit.name, full.description,
                                   tuple(full.render({**offered, "view": name}))))
                offered["moments_table"] = name
            elif recompute and kind == "fit":
                files = RECOMPUTED_FIT
            tpl = _pick(fit, files, offered)
            if tpl is None:
                continue
            if fit.through_origin and kind in INTERCEPT_ONLY:
                continue
            installed.add(f"{kind}_view")
            name = fit.view + suffix
            stmts = tuple(tpl.render({**offered, "view": name}))
            out.append(Planned(name, kind, fit.name, tpl.description, stmts))
    return out


def install(con: duckdb.DuckDBPyConnection, spec: Spec) -> int:
    """Create or refresh macros and views inside the caller's transaction; returns how many."""
    have = {
        name: digest for name, digest in con.execute("SELECT name, sql_hash FROM tl_views")
        .fetchall()
    }
    wanted = plan(spec)
    changed = 0
    synced = False
    for item in wanted:
        if item.kind != "macro" and not synced:  # moments.py: after the t macros, before views
            moments.sync(con, spec)
            synced = True
        if have.get(item.name) == item.digest:
            continue
        for stmt in item.statements:
            con.execute(stmt)
        if item.kind != "macro":
            comment = exp.Literal.string(item.description).sql("duckdb")
            ident = exp.to_identifier(item.name, quoted=True).sql("duckdb")
            what = "MACRO TABLE" if item.kind in TABLE_MACROS else "VIEW"
            con.execute(f"COMMENT ON {what} {ident} IS {comment}")
        con.execute("DELETE FROM tl_views WHERE name = ?", [item.name])
        con.execute(
            "INSERT INTO tl_views VALUES (?, ?, ?, ?, ?)",
            [item.name, item.kind, item.fit, item.description, item.digest],
        )
        changed += 1
    if not synced:  # moments.py: no fit left, drop the tables of removed fits
        moments.sync(con, spec)
    names = {item.name for item in wanted}
    for name, kind in con.execute("SELECT name, kind FROM tl_views").fetchall():
        if name not in names:
            ident = exp.to_identifier(name, quoted=True).sql("duckdb")
            what = ("MACRO" if kind == "macro" else "MACRO TABLE" if kind in TABLE_MACROS
                    else "VIEW")
            con.execute(f"DROP {what} IF EXISTS {ident}")
            con.execute("DELETE FROM tl_views WHERE name = ?", [name])
            changed += 1
    return changed


def listing(con: duckdb.DuckDBPyConnection) -> list[tuple[str, str, str | None, str]]:
    """(name, kind, fit, description) of every installed view and macro file."""
    return [
        (r[0], r[1], r[2], r[3])
        for r in con.execute(
            "SELECT name, kind, fit, description FROM tl_views ORDER BY kind = 'macro', name"
        ).fetchall()
    ]
