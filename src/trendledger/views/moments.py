"""Stored per-group sums and statistics that keep the fits fast however long the history grows.

Every fit has two tables with one row per group:

* ``tl_moments_<fit>``, the sums: count, means (kept in two parts), the centred sums sxx, sxy,
  syy, the residual sum of squares of the least-squares line, the ranges and a rounding bound
  (for a fit through the origin the sums are taken about the origin); the view
  ``fit_<fit>_moments`` reads it;
* ``tl_fit_<fit>``, the statistics: the rows of fit.sql (either line) over those sums;
  the view ``fit_<fit>`` reads it, so reading a fit costs O(groups), not O(rows), and no
  Student t quantile or tail is evaluated at read time.

Both follow the rows inside the transaction that changes them:

* an append sums its own rows in two passes (the full moments view's query over the batch's
  rows only) and merges them into the sums with the parallel update of Chan, Golub and
  LeVeque, carrying the residual sum of squares with a correction made of non-negative terms
  (``sql/moments/merge.sql``);
* rows removed by a retract or by a replaced file make the groups they touched stale: those
  groups are summed again from their remaining rows (``sql/moments/stale.sql``);
* every group touched is then refitted from its stored sums (``sql/moments/apply_fit.sql``);
* the install step (views.install, run by init and by a spec update) builds the tables of a
  new or changed fit from every stored row (only the statistics when just the level or the
  t macros changed) and drops the tables of removed fits.

``fit_<fit>_full`` and ``fit_<fit>_full_moments`` recompute the same from every row and are
the reference the stored tables are tested against.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from functools import cache
from typing import Any

import duckdb
import sqlglot
from sqlglot import exp

from trendledger.spec import Fit, Spec
from trendledger.views import templates
from trendledger.views import values as views

#: The temporary table holding the two-pass sums of whatever rows are being summed.
BATCH = "tl_mbatch"
#: The temporary table holding fit.sql's rows for some stored sums.
FITTED = "tl_mfitted"
#: The temporary table holding the rows being summed (a batch, or the remaining rows of the
#: groups rows were removed from).
ROWS = "tl_mrows"
#: The temporary table holding the stored sums of the groups to refit.
SUMS = "tl_msums"


def table_names(spec: Spec, fit: Fit) -> tuple[str, str]:
    """The tables of a fit, its stored sums and its stored statistics (as views.fit_values
    offers them to the view templates)."""
    values = views.fit_values(spec, fit)
    return str(values["moments_table"]), str(values["fit_table"])


def _materialised(statements: list[str], table: str) -> list[str]:
    """A view template's statements with its CREATE VIEW turned into CREATE TEMPORARY TABLE
    ``table`` AS the same query: the rows are computed once, where they are needed."""
    out = []
    for sql in statements:
        stmt = sqlglot.parse_one(sql, read="duckdb")
        if isinstance(stmt, exp.Create) and str(stmt.args.get("kind")).upper() == "VIEW":
            stmt.set("kind", "TABLE")
            stmt.set("this", exp.to_table(table))
            stmt.set("replace", True)
            stmt.set("properties", exp.Properties(expressions=[exp.TemporaryProperty()]))
        out.append(stmt.sql(dialect="duckdb"))
    return out


def _render(relative: str, values: dict[str, Any]) -> list[str]:
    tpl = templates.load(relative)
    return tpl.render({k: values[k] for k in tpl.placeholders if k in values})


@cache
def _fixed(name: str) -> tuple[str, ...]:
    """A statement file of sql/moments/ without placeholders, rendered once."""
    return tuple(_render(f"moments/{name}.sql", {}))


@dataclass(frozen=True)
class Plan:
    """Every statement that keeps one fit's tables current, rendered once per spec.

    The spec is read here and nowhere else in this module: an append, a retract or a
    rebuild runs the plan's statements (in the order ``update`` and ``build`` give), so the
    templates are parsed and filled once per fit and spec, not on every call.
    """

    #: two-pass sums of every stored row, of the rows in tl_mrows (both into tl_mbatch)
    sum_all: tuple[str, ...]
    sum_rows: tuple[str, ...]
    #: build the sums table from tl_mbatch; merge tl_mbatch into it; write the merged rows
    build: tuple[str, ...]
    merge: tuple[str, ...]
    apply: tuple[str, ...]
    #: list the groups touched (tl_mkeys); collect rows of removed files' groups or of added
    #: files into tl_mrows; collect the touched groups' stored sums (tl_msums)
    keys: tuple[str, ...]
    stale: tuple[str, ...]
    rows: tuple[str, ...]
    refit: tuple[str, ...]
    #: fit.sql over the whole sums table or over tl_msums (into tl_mfitted), then written
    fit_all: tuple[str, ...]
    fit_sums: tuple[str, ...]
    build_fit: tuple[str, ...]
    apply_fit: tuple[str, ...]
    #: hashes of what builds and updates the sums and the statistics (a change rebuilds)
    sums_digest: str
    fit_digest: str


_PLANS: dict[tuple[str, Fit], Plan] = {}


def plan(spec: Spec, fit: Fit) -> Plan:
    """The fit's plan, rendered on first use for this spec (a spec change has another
    digest, hence another plan)."""
    key = (spec.digest, fit)
    if key not in _PLANS:
        values = views.fit_values(spec, fit)
        table = {**values, "table": values["moments_table"]}
        full = templates.load(views.template_for(fit, "moments_full"))
        fit_tpl = templates.load(views.template_for(fit, "fit"))

        def sums_of(source: str) -> tuple[str, ...]:
            return tuple(_materialised(full.render({**values, "source": source, "view": BATCH}),
                                       BATCH))

        def fit_of(sums: str) -> tuple[str, ...]:
            return tuple(_materialised(
                fit_tpl.render({**values, "moments_view": sums, "view": FITTED}), FITTED))

        def render(name: str) -> tuple[str, ...]:
            return tuple(_render(f"moments/{name}.sql", table))

        parts = dict(sum_all=sums_of("measurements"), sum_rows=sums_of(ROWS),
                     build=render("build"), merge=render("merge"), apply=render("apply"),
                     keys=render("keys"), stale=render("stale"), rows=render("rows"),
                     refit=render("refit"), fit_all=fit_of(str(values["moments_table"])),
                     fit_sums=fit_of(SUMS), build_fit=render("build_fit"),
                     apply_fit=render("apply_fit"))
        macros = [sql for tpl in templates.load_dir("macros") for sql in tpl.render({})]
        sums_digest = _hash([*parts["sum_all"], *parts["build"], *parts["merge"],
                             *parts["apply"], *parts["stale"]])
        fit_digest = _hash([*parts["fit_all"], *macros, *parts["build_fit"],
                            *parts["apply_fit"]])
        _PLANS[key] = Plan(**parts, sums_digest=sums_digest, fit_digest=fit_digest)
    return _PLANS[key]


def _run(con: duckdb.DuckDBPyConnection, statements: Iterable[str],
         params: dict[str, Any] | None = None) -> None:
    """Run statements, each with the named parameters it uses."""
    for sql in statements:
        used = {k: v for k, v in (params or {}).items() if f"${k}" in sql}
        con.execute(sql, used or None)


def _hash(parts: Iterable[str]) -> str:
    return hashlib.sha256("\n;\n".join(parts).encode()).hexdigest()


def digests(spec: Spec, fit: Fit) -> tuple[str, str]:
    """Hashes of the SQL that builds and updates a fit's sums and its statistics: a change
    rebuilds the table (the statistics hash covers the Student t macros as well)."""
    p = plan(spec, fit)
    return p.sums_digest, p.fit_digest


def _cleanup(con: duckdb.DuckDBPyConnection) -> None:
    _run(con, _fixed("cleanup"))


def build(con: duckdb.DuckDBPyConnection, spec: Spec, fit: Fit, *, sums: bool = True) -> None:
    """(Re)build a fit's stored sums from every stored row (unless ``sums`` is False) and its
    stored statistics from the sums, inside the caller's transaction."""
    p = plan(spec, fit)
    if sums:
        _run(con, p.sum_all)
        _run(con, p.build)
    _run(con, p.fit_all)
    _run(con, p.build_fit)
    _cleanup(con)


def sync(con: duckdb.DuckDBPyConnection, spec: Spec) -> int:
    """Build the tables of new or changed fits, drop those of removed fits; returns how many.

    Runs inside the caller's transaction (views.install), after the Student t macros and
    before the views that read the tables.
    """
    _run(con, _fixed("registry"))
    have = {(fit, kind): (table, digest) for fit, kind, table, digest in con.execute(
        "SELECT fit, kind, table_name, sql_hash FROM tl_moments").fetchall()}
    changed = 0
    wanted: dict[tuple[str, str], tuple[str, str]] = {}
    for fit in spec.fits:
        tables = table_names(spec, fit)
        hashes = digests(spec, fit)
        entries = {(fit.name, "sums"): (tables[0], hashes[0]),
                   (fit.name, "fit"): (tables[1], hashes[1])}
        wanted.update(entries)
        stale = [key for key, entry in entries.items() if have.get(key) != entry]
        if not stale:
            continue
        build(con, spec, fit, sums=(fit.name, "sums") in stale)
        for key in stale:
            con.execute("DELETE FROM tl_moments WHERE fit = ? AND kind = ?", list(key))
            con.execute("INSERT INTO tl_moments VALUES (?, ?, ?, ?)",
                        [*key, *entries[key]])
        changed += 1
    keep = {table for table, _ in wanted.values()}
    for key, (table, _) in have.items():
        if table not in keep:
            _run(con, _render("moments/drop.sql", {"table": table}))
        if key not in wanted:
            con.execute("DELETE FROM tl_moments WHERE fit = ? AND kind = ?", list(key))
            changed += 1
    return changed


def _kept(con: duckdb.DuckDBPyConnection, spec: Spec) -> list[Fit]:
    """The fits whose tables exist and are registered (a store from before the tables has
    none until its views are installed again, which builds them from every row)."""
    # asked of the catalog, not tried: a failed statement would abort the caller's transaction
    known = con.execute(
        "SELECT count(*) FROM duckdb_tables() WHERE database_name = current_database() "
        "AND schema_name = current_schema() AND table_name = 'tl_moments'").fetchall()
    if not known[0][0]:
        return []
    have = {(r[0], r[1]): r[2] for r in con.execute(
        "SELECT fit, kind, table_name FROM tl_moments").fetchall()}
    return [f for f in spec.fits
            if (have.get((f.name, "sums")), have.get((f.name, "fit"))) == table_names(spec, f)]


def _merge_rows(con: duckdb.DuckDBPyConnection, p: Plan) -> None:
    """Sum tl_mrows in two passes and merge the sums into the fit's table."""
    _run(con, p.sum_rows)
    _run(con, p.merge)
    _run(con, p.apply)


def update(
    con: duckdb.DuckDBPyConnection,
    spec: Spec,
    added: Sequence[int],
    removed: Sequence[int],
) -> None:
    """Bring every fit's tables up to date after an append, a replace or a retract.

    Call it inside the transaction that changed the rows, once the rows are final: ``added``
    are the file ids whose rows were just inserted, ``removed`` those whose rows were just
    deleted. Rows of removed files make their groups stale, and those groups are summed again
    from their remaining rows; the added rows are then merged like any batch; last, every
    group touched is refitted from its stored sums.
    """
    added = sorted({int(i) for i in added})
    removed = sorted({int(i) for i in removed})
    if not added and not removed:
        return
    for fit in _kept(con, spec):
        p = plan(spec, fit)
        _run(con, p.keys)
        if removed:
            _run(con, p.stale, {"added": added})
            _merge_rows(con, p)
        if added:
            _run(con, p.rows, {"lo": added[0], "hi": added[-1], "ids": added})
            _merge_rows(con, p)
        _run(con, p.refit)
        _run(con, p.fit_sums)
        _run(con, p.apply_fit)
    _cleanup(con)
