"""Load the SQL files under ``sql/`` and fill their placeholders safely.

Templates are plain DuckDB SQL in which placeholders are identifiers spelled
``__name__`` (for example ``__x__``, ``__source__``, ``__group__``). We parse the
template with sqlglot and replace those identifier nodes in the syntax tree:

* a string value becomes a *quoted identifier* (column or table name),
* a list of strings expands in place wherever the placeholder stands in a list
  (SELECT list, GROUP BY, PARTITION BY, USING, ...),
* a number becomes a numeric literal,
* a :class:`Text` becomes a string literal (for example a date_trunc unit),
* an sqlglot expression stands in for a column (the form of x or y, views/forms.py),
* a placeholder ``__name_if_any__`` with no value leaves out the UNION branch it stands in,
* a :class:`Part` names a file under ``sql/parts/`` holding named expressions: a column
  ``__slot__.name`` becomes that file's expression ``name``, itself filled with the same values
  (so a view states what it is made of, and a variant picks another part for the same slot).

User text is therefore never pasted into SQL: a column called
``x"; DROP TABLE t; --`` is just a strange quoted name.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cache
from importlib import resources
from pathlib import Path

import sqlglot
from sqlglot import exp

from trendledger.errors import TemplateError

PLACEHOLDER = re.compile(r"^__([a-z][a-z0-9_]*)__$")

class Text(str):
    """A value to substitute as a string literal (plain ``str`` means an identifier)."""


class Part(str):
    """A value naming ``sql/parts/<name>.sql``: ``__slot__.expr`` in a template becomes the
    part's expression ``expr`` (see :func:`part_expressions`)."""


@dataclass(frozen=True)
class Fragment:
    """A query under ``sql/`` included where a template reads the placeholder as a table.

    ``FROM __name__ AS prev`` becomes ``FROM (<the fragment's query>) AS prev``, the
    fragment rendered with the template's values and ``__previous__`` naming ``prev``: one
    piece of SQL applied to several inputs (the rounds of the bend search).
    """

    relative: str


Value = (str | float | int | Sequence[str] | Sequence[exp.Expression] | exp.Expression
         | Fragment | None)


def sql_dir() -> Path:
    """The folder holding the SQL files: inside the wheel, or ``sql/`` in a checkout."""
    packaged = resources.files("trendledger") / "sql"
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parents[3] / "sql"


@dataclass(frozen=True)
class Template:
    """One parsed SQL file: its path, the description from its leading comment, its statements."""

    name: str
    path: Path
    description: str
    statements: tuple[exp.Expression, ...]
    placeholders: frozenset[str]

    def render(self, values: Mapping[str, Value]) -> list[str]:
        """Return the statements as DuckDB SQL with every placeholder substituted."""
        wanted = set(self.placeholders)
        for key in self.placeholders:
            if isinstance(values.get(key), Part):
                wanted |= part_placeholders(str(values[key]))
        missing = wanted - set(values)
        if missing:
            raise TemplateError(
                f"no value for placeholder(s) {', '.join(sorted(missing))}", file=str(self.path)
            )
        return [_fill(stmt.copy(), values).sql(dialect="duckdb") for stmt in self.statements]


def _description(text: str) -> str:
    lines = []
    for line in text.splitlines():
        stripped = line.strip()
        if stripped.startswith("--"):
            lines.append(stripped[2:].strip())
        elif stripped:
            break
        elif lines:
            break
    return " ".join(lines)


def _placeholder_name(node: exp.Expression) -> str | None:
    if isinstance(node, exp.Identifier):
        match = PLACEHOLDER.match(node.this)
        return match.group(1) if match else None
    return None


def parse(path: Path, name: str | None = None) -> Template:
    """Parse one SQL file; a syntax error names the file and line."""
    text = path.read_text(encoding="utf-8")
    try:
        statements = [s for s in sqlglot.parse(text, read="duckdb") if s is not None]
    except sqlglot.errors.ParseError as err:
        info = err.errors[0] if err.errors else {}
        raise TemplateError(
            info.get("description", str(err)),
            file=str(path),
            line=info.get("line"),
            column=info.get("col"),
        ) from err
    if not statements:
        raise TemplateError("holds no SQL statement", file=str(path))
    found = set()
    for stmt in statements:
        for node in stmt.find_all(exp.Identifier):
            ph = _placeholder_name(node)
            if ph:
                found.add(ph)
    return Template(
        name=name or path.stem,
        path=path,
        description=_description(text),
        statements=tuple(statements),  # type: ignore[arg-type]
        placeholders=frozenset(found),
    )


@cache
def load(relative: str) -> Template:
    """Load ``sql/<relative>`` once per process."""
    path = sql_dir() / relative
    if not path.is_file():
        raise TemplateError("SQL file not found", file=str(path))
    return parse(path, name=Path(relative).stem)


def load_dir(relative: str) -> list[Template]:
    """Every ``.sql`` file of a folder under ``sql/``, in name order."""
    folder = sql_dir() / relative
    return [load(f"{relative}/{p.name}") for p in sorted(folder.glob("*.sql"))]


@cache
def part_expressions(name: str) -> dict[str, exp.Expression]:
    """The named expressions of ``sql/parts/<name>.sql``: one ``SELECT expr AS name, ...``."""
    tpl = load(f"parts/{name}.sql")
    stmt = tpl.statements[0]
    if len(tpl.statements) != 1 or not isinstance(stmt, exp.Select):
        raise TemplateError("a part holds one SELECT of named expressions", file=str(tpl.path))
    out: dict[str, exp.Expression] = {}
    for item in stmt.expressions:
        if not isinstance(item, exp.Alias):
            raise TemplateError(f"part expression {item.sql()} has no name (AS ...)",
                                file=str(tpl.path))
        out[item.alias] = item.this
    return out


#: Nodes a part's expression can replace without parentheses whatever stands around them.
_ATOMS = (exp.Column, exp.Literal, exp.Func, exp.Cast, exp.Case, exp.Paren, exp.Null,
          exp.Boolean, exp.Identifier)


def _splice_parts(tree: exp.Expression, values: Mapping[str, Value]) -> exp.Expression:
    """Replace every column ``__slot__.name`` whose slot holds a :class:`Part` by the part's
    expression ``name`` (parts may use parts: repeated until none is left)."""
    for _ in range(8):
        targets = []
        for col in tree.find_all(exp.Column):
            table = col.args.get("table")
            key = _placeholder_name(table) if isinstance(table, exp.Identifier) else None
            if key is not None and isinstance(values.get(key), Part):
                targets.append((col, str(values[key])))
        if not targets:
            return tree
        for col, part in targets:
            exprs = part_expressions(part)
            if col.name not in exprs:
                raise TemplateError(f"part {part} has no expression {col.name}",
                                    file=str(sql_dir() / "parts" / f"{part}.sql"))
            new = exprs[col.name].copy()
            # a comparison needs no parentheses as an operand of AND / OR
            if not isinstance(new, _ATOMS) and isinstance(
                    col.parent, exp.Binary | exp.Unary | exp.Between | exp.Is) and not (
                    isinstance(new, exp.Predicate) and isinstance(col.parent, exp.Connector)):
                new = exp.Paren(this=new)
            if col is tree:
                return new
            col.replace(new)
    raise TemplateError("parts nest too deep (a part uses itself?)")


def part_placeholders(name: str) -> frozenset[str]:
    """The placeholders a part's expressions use."""
    return load(f"parts/{name}.sql").placeholders


def _drop_branches(tree: exp.Expression, values: Mapping[str, Value]) -> exp.Expression:
    """Leave out each UNION branch that reads ``__name_if_any__`` when ``name`` has no value
    (for example the alert rows of a sibling view the fit does not have)."""
    for ident in [n for n in tree.find_all(exp.Identifier) if _placeholder_name(n)]:
        key = _placeholder_name(ident)
        if ident.parent is None or not (key or "").endswith("_if_any") or values.get(key or ""):
            continue
        branch = ident.find_ancestor(exp.Select)
        union = branch.parent if branch is not None else None
        if not isinstance(union, exp.Union) or branch is None:
            raise TemplateError(f"__{key}__ must stand in a branch of a UNION")
        other = union.expression if branch is union.this else union.this
        union.replace(other)
    return tree


def _fill(tree: exp.Expression, values: Mapping[str, Value]) -> exp.Expression:
    tree = _splice_parts(_drop_branches(tree, values), values)
    # Collect first, then replace: replacing while walking would skip nodes.
    targets = [n for n in tree.find_all(exp.Identifier) if _placeholder_name(n)]
    for ident in targets:
        key = _placeholder_name(ident)
        assert key is not None
        value = values[key]
        # The node that stands for the placeholder: a Column wraps the identifier.
        holder: exp.Expression = ident
        if isinstance(ident.parent, exp.Column) and ident.arg_key == "this":
            holder = ident.parent
        if value is None and key.endswith("_if_any"):
            continue  # its branch was left out; seen here only if it stood elsewhere
        if isinstance(value, Part):
            raise TemplateError(f"part slot __{key}__ used other than as __{key}__.name")
        if isinstance(value, Fragment):
            _include(ident, key, value, values)
        elif value is None:
            # an optional value the fit leaves unset (written __name_or_null__, see views.plan)
            holder.replace(exp.Null())
        elif isinstance(value, Text):
            holder.replace(exp.Literal.string(str(value)))
        elif isinstance(value, str):
            ident.replace(exp.to_identifier(value, quoted=True))
        elif isinstance(value, bool):
            raise TemplateError(f"placeholder __{key}__ cannot take a boolean")
        elif isinstance(value, int | float):
            holder.replace(exp.Literal.number(repr(value)))
        elif isinstance(value, exp.Expression):
            # an expression in place of a column (views/forms.py: the form of x or y); a
            # table qualifier on the placeholder (r.__x__) qualifies its columns
            item = value.copy()
            table = holder.args.get("table") if isinstance(holder, exp.Column) else None
            for col in item.find_all(exp.Column):
                if table is not None and not col.args.get("table"):
                    col.set("table", table.copy())
            holder.replace(item if isinstance(item, _ATOMS) else exp.Paren(this=item))
        else:
            _expand(holder, ident, key, list(value))  # type: ignore[arg-type]
    return tree


def _include(ident: exp.Identifier, key: str, fragment: Fragment,
             values: Mapping[str, Value]) -> None:
    table = ident.parent
    if not (isinstance(table, exp.Table) and table.alias):
        raise TemplateError(f"fragment placeholder __{key}__ must be read as a table with an "
                            "alias naming its input, e.g. FROM __name__ AS step_0")
    part = load(fragment.relative)
    if len(part.statements) != 1 or not isinstance(part.statements[0], exp.Query):
        raise TemplateError("a fragment holds one query", file=str(part.path))
    query = _fill(part.statements[0].copy(), {**values, "previous": table.alias})
    table.replace(exp.Subquery(this=query, alias=exp.TableAlias(
        this=exp.to_identifier(table.alias))))


def _expand(holder: exp.Expression, ident: exp.Identifier, key: str,
            names: list[str] | list[exp.Expression]) -> None:
    """Splice several quoted identifiers where one placeholder stands in a list."""
    parent = holder.parent
    arg_key = str(holder.arg_key)
    siblings = parent.args.get(arg_key) if parent is not None else None
    if not isinstance(siblings, list):
        raise TemplateError(
            f"list placeholder __{key}__ must stand in a list (select, group by, ...)"
        )
    table = holder.args.get("table") if isinstance(holder, exp.Column) else None
    new: list[exp.Expression] = []
    for name in names:
        if isinstance(name, exp.Expression):
            # an expression per name (see views.fit_values: group_text); its columns take
            # the placeholder's table, so t.__group_text__ reads t's columns
            item = name.copy()
            for col in item.find_all(exp.Column):
                if table is not None and not col.args.get("table"):
                    col.set("table", table.copy())
            new.append(item)
        elif isinstance(holder, exp.Column):
            new.append(exp.column(name, table=table.copy() if table else None, quoted=True))
        else:
            new.append(exp.to_identifier(name, quoted=True))
    index = siblings.index(holder)
    assert parent is not None
    parent.set(arg_key, siblings[:index] + new + siblings[index + 1 :])
