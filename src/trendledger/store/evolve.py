"""Change the spec of a store that already holds data.

Safe changes: new columns (old rows read NULL for them), new, changed or
removed fits (their views are rebuilt). Anything that would change the
meaning of stored rows or of the lineage's paths is refused with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import duckdb
from sqlglot import exp

from trendledger.errors import SpecError
from trendledger.spec import Spec
from trendledger.store import db as store
from trendledger.views import install as views


@dataclass
class SpecChange:
    """What an update did (or would do)."""

    added_columns: dict[str, str] = field(default_factory=dict)
    added_fits: list[str] = field(default_factory=list)
    changed_fits: list[str] = field(default_factory=list)
    removed_fits: list[str] = field(default_factory=list)
    views_rebuilt: int = 0

    @property
    def empty(self) -> bool:
        return not (self.added_columns or self.added_fits or self.changed_fits
                    or self.removed_fits)


def compare(old: Spec, new: Spec, where: str | None = None) -> SpecChange:
    """Plan the change from ``old`` to ``new``; refuse what cannot be done in place."""
    o, n = old.source, new.source
    if (o.files, o.format, o.delimiter) != (n.files, n.format, n.delimiter):
        raise SpecError(
            "[source] files, format and delimiter cannot change: the lineage identifies files "
            "by their path under this template", file=where,
            hint="create a new store for the new layout",
        )
    if o.fields != n.fields:
        raise SpecError("[source.fields] cannot change: stored rows carry the old fields",
                        file=where, hint="create a new store for the new layout")
    for name, typ in o.columns.items():
        if name not in n.columns:
            raise SpecError(
                f"[source.columns] {name} was removed; stored rows hold it, so it stays",
                file=where, hint="keep the column (files may leave it empty) or start a new store",
            )
        if n.columns[name] != typ:
            raise SpecError(
                f"[source.columns] {name}: type {typ} cannot become {n.columns[name]} in place",
                file=where, hint="add a new column with the new type instead",
            )
    change = SpecChange(added_columns={k: v for k, v in {**n.columns, **n.derived()}.items()
                                       if k not in {**o.columns, **o.derived()}})
    for name in o.censored:
        if name not in n.censored:
            raise SpecError(f"[source.columns] {name}: censored cannot be dropped; stored rows "
                            "carry its flag", file=where)
    old_fits = {f.name: f for f in old.fits}
    new_fits = {f.name: f for f in new.fits}
    change.added_fits = [name for name in new_fits if name not in old_fits]
    change.removed_fits = [name for name in old_fits if name not in new_fits]
    change.changed_fits = [name for name in new_fits
                           if name in old_fits and new_fits[name] != old_fits[name]]
    return change


def apply(con: duckdb.DuckDBPyConnection, old: Spec, new: Spec, note: str | None = None
          ) -> SpecChange:
    """Apply ``new`` in one transaction: add columns, record the spec, rebuild views."""
    change = compare(old, new, where=new.path)
    if change.empty and old.text == new.text:
        return change
    con.execute("BEGIN TRANSACTION")
    try:
        for name, typ in change.added_columns.items():
            column = exp.ColumnDef(this=exp.to_identifier(name, quoted=True),
                                   kind=exp.DataType.build(typ, dialect="duckdb"))
            # the history keeps the same columns, so that rows move both ways by name
            for table in ("measurements", "measurements_history"):
                alter = exp.Alter(this=exp.to_table(table), kind="TABLE",
                                  actions=[column.copy()])
                con.execute(alter.sql(dialect="duckdb"))
        store.set_meta(con, "spec", new.text)
        store.set_meta(con, "spec_hash", new.digest)
        con.execute(
            "INSERT INTO tl_spec_history SELECT coalesce(max(version), 0) + 1, ?, ?, ?, ? "
            "FROM tl_spec_history",
            [store.utcnow(), new.digest, new.text, note],
        )
        change.views_rebuilt = views.install(con, new)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return change
