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

from . import templates
from .spec import Fit, Spec
from .templates import Text

#: View kinds per fit, in install order (later ones may read earlier ones).
#: Each is ``sql/views/<file>.sql``; a kind whose file is absent is not installed.
KINDS: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    # (kind, view name suffix, candidate template files under sql/views/): the first
    # candidate that exists and whose placeholders the fit can all fill is used.
    ("moments", "_moments", ("moments",)),
    ("fit", "", ("fit",)),
    ("windows", "_windows", ("windows", "windows_x")),
    ("points", "_points", ("points",)),
    ("change", "_change", ("change",)),
    ("crossing", "_crossing", ("crossing",)),
    ("alerts", "_alerts", ("alerts",)),
)


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


def fit_values(spec: Spec, fit: Fit) -> dict[str, Any]:
    """Placeholder values a fit offers to its templates; None means 'not configured'.

    Names of views of the same fit are offered too (``__fit_view__``,
    ``__moments_view__`` ...), so a template can read its siblings.
    """
    dates = [n for n, t in spec.all_columns.items() if t.startswith(("DATE", "TIMESTAMP"))]
    values: dict[str, Any] = {
        "source": "measurements",
        "group": list(fit.group),
        "x": fit.x,
        "y": fit.y,
        "level": fit.level,
        "limit": fit.limit,
        "horizon": fit.horizon,
        "window": Text(fit.window) if fit.window else None,
        "window_field": dates[0] if dates else None,
        "window_x": fit.window_x,
        "min_r2": fit.min_r2,
        "alpha": fit.alpha,
    }
    for kind, suffix, _ in KINDS:
        values[f"{kind}_view"] = fit.view + suffix
    return values


def template_for(fit: Fit, file: str) -> str:
    """``sql/views/<file>.sql``, or its ``<file>_origin.sql`` twin for a through-origin fit."""
    if fit.through_origin and (templates.sql_dir() / f"views/{file}_origin.sql").is_file():
        return f"views/{file}_origin.sql"
    return f"views/{file}.sql"


def _pick(fit: Fit, files: tuple[str, ...], values: dict[str, Any]) -> templates.Template | None:
    for file in files:
        relative = template_for(fit, file)
        if not (templates.sql_dir() / relative).is_file():
            continue
        tpl = templates.load(relative)
        if all(values.get(p) is not None for p in tpl.placeholders if p != "view"):
            return tpl
    return None


def plan(spec: Spec) -> list[Planned]:
    """Every macro and view the spec asks for, rendered but not yet run."""
    out: list[Planned] = []
    for macro in templates.load_dir("macros"):
        out.append(Planned(macro.name, "macro", None, macro.description,
                           tuple(macro.render({}))))
    for fit in spec.fits:
        values = fit_values(spec, fit)
        for kind, suffix, files in KINDS:
            tpl = _pick(fit, files, values)
            if tpl is None:
                continue
            name = fit.view + suffix
            stmts = tuple(tpl.render({**values, "view": name}))
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
    for item in wanted:
        if have.get(item.name) == item.digest:
            continue
        for stmt in item.statements:
            con.execute(stmt)
        if item.kind != "macro":
            comment = exp.Literal.string(item.description).sql("duckdb")
            ident = exp.to_identifier(item.name, quoted=True).sql("duckdb")
            con.execute(f"COMMENT ON VIEW {ident} IS {comment}")
        con.execute("DELETE FROM tl_views WHERE name = ?", [item.name])
        con.execute(
            "INSERT INTO tl_views VALUES (?, ?, ?, ?, ?)",
            [item.name, item.kind, item.fit, item.description, item.digest],
        )
        changed += 1
    names = {item.name for item in wanted}
    for name, kind in con.execute("SELECT name, kind FROM tl_views").fetchall():
        if name not in names:
            ident = exp.to_identifier(name, quoted=True).sql("duckdb")
            con.execute(f"DROP {'MACRO' if kind == 'macro' else 'VIEW'} IF EXISTS {ident}")
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
