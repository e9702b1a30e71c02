"""The ``trendledger`` command: parse arguments, call the library, print. No logic here."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer

from trendledger.errors import StoreError, TrendledgerError, printable
from trendledger.ledger import DEFAULT_WAIT, Ledger, default_store
from trendledger.query import limits, output
from trendledger.query.params import collect_params
from trendledger.trace import Writer
from trendledger.version import __version__

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Keep daily instrument batches in one DuckDB store and fit per-unit linear trends.",
    pretty_exceptions_enable=False,
)

StoreOpt = Annotated[
    str | None,
    typer.Option("--store", help="Store file (default: $TRENDLEDGER_STORE or ./trendledger.duckdb)"),
]
WaitOpt = Annotated[
    float, typer.Option("--wait", help="Seconds to wait while another process writes the store")
]
FormatOpt = Annotated[
    str, typer.Option("--format", help="table, csv, json or markdown")
]
TimeoutOpt = Annotated[
    float, typer.Option("--timeout", help="Stop the read after this many seconds (0: no limit)")
]


def _fail(err: TrendledgerError) -> None:
    typer.echo(f"trendledger: error: {printable(str(err))}", err=True)
    raise typer.Exit(err.exit_code)


def _shown(value: object) -> str:
    """A name or value for the terminal, with control characters escaped."""
    return printable(str(value))


#: Options given before the command, set afresh by main_options on every invocation.
_GLOBAL = {"trace": False}


def _trace() -> Writer | None:
    """Where --trace sends the statements: stderr, so stdout stays the command's output."""
    if not _GLOBAL["trace"]:
        return None
    return lambda text: typer.echo(text, err=True)


def _open(store: str | None, *, read_only: bool, wait: float) -> Ledger:
    return Ledger.open(default_store(store), read_only=read_only, wait=wait, trace=_trace())


def _print(df: object, fmt: str) -> None:
    if fmt not in output.FORMATS:
        raise typer.BadParameter(f"choose one of {', '.join(output.FORMATS)}", param_hint="--format")
    typer.echo(output.render(df, fmt), nl=False)  # type: ignore[arg-type]


class _Bar:
    """A one-line progress bar on a terminal; silent otherwise."""

    def __init__(self) -> None:
        self.on = sys.stderr.isatty()

    def __call__(self, stage: str, done: int, total: int) -> None:
        if not self.on or total < 50:
            return
        width = 30
        filled = width * done // max(total, 1)
        sys.stderr.write(f"\r{stage:>5} [{'#' * filled}{'.' * (width - filled)}] {done}/{total}")
        if done >= total:
            sys.stderr.write("\n")
        sys.stderr.flush()


@app.command()
def init(
    spec: Annotated[Path, typer.Option("--spec", help="The spec file (TOML)")],
    store: StoreOpt = None,
    force: Annotated[bool, typer.Option("--force", help="Replace an existing store")] = False,
) -> None:
    """Create a store for a spec; later commands need only the store."""
    try:
        target = store or None
        if target is None:
            import os

            target = os.environ.get("TRENDLEDGER_STORE")
        with Ledger.init(spec, target, force=force, trace=_trace()) as led:
            typer.echo(f"created {led.path} for {spec} ({len(led.spec.fits)} fit(s))")
    except TrendledgerError as err:
        _fail(err)


@app.command()
def append(
    patterns: Annotated[list[str] | None, typer.Argument(help="Files or globs (default: the spec's template)")] = None,
    store: StoreOpt = None,
    replace: Annotated[bool, typer.Option("--replace", help="Load changed files over their old rows")] = False,
    skip_bad: Annotated[bool, typer.Option("--skip-bad", help="Load the good files, record bad ones as rejected (exit 3)")] = False,
    rehash: Annotated[bool, typer.Option("--rehash", help="Hash every file even if size and time are unchanged")] = False,
    retry_rejected: Annotated[bool, typer.Option("--retry-rejected", help="Try again the files refused earlier whose content has not changed")] = False,
    allow_shrink: Annotated[bool, typer.Option("--allow-shrink", help="Accept a replacement that holds fewer rows than the version it replaces")] = False,
    why: Annotated[str | None, typer.Option("--why", help="Why rows are replaced; kept with the old rows in the history")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the batch summary as JSON")] = False,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Append new files as one batch, with their lineage, in one transaction."""
    try:
        with _open(store, read_only=False, wait=wait) as led:
            summary = led.append(patterns or None, replace=replace, skip_bad=skip_bad,
                                 rehash=rehash, retry_rejected=retry_rejected,
                                 allow_shrink=allow_shrink, why=why, progress=_Bar())
    except TrendledgerError as err:
        _fail(err)
        return
    if as_json:
        typer.echo(json.dumps(summary.to_dict(), indent=1))
    else:
        if summary.batch_id is None:
            typer.echo(f"nothing new: {summary.unchanged} file(s) already in the store")
        else:
            typer.echo(
                f"batch {summary.batch_id}: {summary.files} file(s), {summary.rows} row(s) loaded; "
                f"{summary.skipped} identical, {summary.unchanged} unchanged, "
                f"{summary.replaced} replaced, {summary.rejected} rejected"
                + (f"; {summary.replaced_rows} earlier row(s) replaced by key"
                   if summary.replaced_rows else "")
            )
        for o in summary.outcomes:
            if o.status == "loaded" and o.replaces is not None:
                typer.echo(f"  {_shown(o.path)}: {_shown(o.message)}")
        for o in summary.outcomes:
            if o.status == "rejected":
                typer.echo(f"  rejected {_shown(o.path)}: {_shown(o.message)}", err=True)
        if summary.waiting:
            typer.echo(f"{summary.waiting} file(s) refused earlier and unchanged since are "
                       "waiting (see 'trendledger waiting'; --retry-rejected tries them):",
                       err=True)
            for o in summary.outcomes:
                if o.status == "waiting":
                    typer.echo(f"  waiting {_shown(o.path)}: {_shown(o.message)}", err=True)
    if summary.rejected:
        raise typer.Exit(3)


@app.command("lineage")
def lineage_cmd(
    files: Annotated[bool, typer.Option("--files", help="List files instead of batches")] = False,
    batch: Annotated[int | None, typer.Option("--batch", help="Only this batch")] = None,
    path: Annotated[str | None, typer.Option("--path", help="Only files whose path matches this glob")] = None,
    fmt: FormatOpt = "table",
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """List ingest batches, or files with --files."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            df = led.lineage(files=files or path is not None, batch=batch, path=path)
    except TrendledgerError as err:
        _fail(err)
        return
    _print(df, fmt)


@app.command()
def retract(
    why: Annotated[str, typer.Option("--why", help="The reason, kept in the lineage")],
    batch: Annotated[int | None, typer.Option("--batch", help="Retract a whole batch")] = None,
    file: Annotated[str | None, typer.Option("--file", help="Retract one file (path as in the lineage)")] = None,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Take the rows of a batch or a file out of the fits; they move to the history table."""
    try:
        with _open(store, read_only=False, wait=wait) as led:
            done = led.retract(why=why, batch=batch, file=file)
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(f"retracted {done['files']} file(s), {done['rows']} row(s)")


@app.command()
def restore(
    why: Annotated[str, typer.Option("--why", help="The reason, kept in the lineage")],
    batch: Annotated[int | None, typer.Option("--batch", help="Undo the retraction of a batch")] = None,
    file: Annotated[str | None, typer.Option("--file", help="Undo the retraction of one file")] = None,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Undo a retraction: the rows come back from the history, the lineage reads as before."""
    try:
        with _open(store, read_only=False, wait=wait) as led:
            done = led.restore(why=why, batch=batch, file=file)
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(f"restored {done['files']} file(s), {done['rows']} row(s)")


@app.command("waiting")
def waiting_cmd(
    every: Annotated[bool, typer.Option("--all", help="Also files set aside, and refusals closed by a later load")] = False,
    fmt: FormatOpt = "table",
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """List the files an append refused that wait for a change (or for --retry-rejected)."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            df = led.waiting(every)
    except TrendledgerError as err:
        _fail(err)
        return
    _print(df, fmt)


@app.command("set-aside")
def set_aside(
    file: Annotated[str, typer.Argument(help="A waiting file (path as 'waiting' lists it)")],
    why: Annotated[str, typer.Option("--why", help="The reason, kept with the file")],
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Set a waiting file aside for good: appends pass over it even if it changes."""
    try:
        with _open(store, read_only=False, wait=wait) as led:
            led.set_aside(file, why=why)
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(f"set aside {file}")


@app.command()
def check(
    store: StoreOpt = None,
    root: Annotated[Path | None, typer.Option("--root", help="Folder the lineage paths are relative to (default: the spec's)")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the report as JSON")] = False,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Re-hash source files against the lineage and recount rows (exit 1 on disagreement)."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            report = led.check(root)
    except TrendledgerError as err:
        _fail(err)
        return
    if as_json:
        typer.echo(json.dumps(report.to_dict(), indent=1))
    else:
        typer.echo(f"fine: {report.fine}  missing: {len(report.missing)}  "
                   f"changed: {len(report.changed)}  row counts off: {len(report.count_mismatch)}")
        for p in report.changed:
            typer.echo(f"  changed since loaded: {_shown(p)}")
        for p in report.missing:
            typer.echo(f"  missing on disk: {_shown(p)}")
        for p in report.count_mismatch:
            typer.echo(f"  row count: {_shown(p)}")
        for p in report.unreadable:
            typer.echo(f"  cannot check: {_shown(p)}")
        for group in report.same_content:
            typer.echo(f"  identical content: {_shown(', '.join(group))}")
        for p in report.duplicate_rows:
            typer.echo(f"  repeated rows: {_shown(p)}")
        for p in report.repeated_x:
            typer.echo(f"  repeated x: {_shown(p)}")
        if report.copies_differ:
            typer.echo("published copy and writer's copy differ:")
            for p in report.copies_differ:
                typer.echo(f"  {p}")
        elif report.copies_compared:
            typer.echo(f"published copy and writer's copy agree: {report.copies_note}")
        else:
            typer.echo(f"published copy and writer's copy: {report.copies_note}")
    if not report.ok:
        raise typer.Exit(1)


@app.command()
def fits(
    name: Annotated[str | None, typer.Argument(help="Fit name (optional with one fit)")] = None,
    where: Annotated[str | None, typer.Option("--where", help="Filter, e.g. \"r2 < 0.9 AND n > 10\"")] = None,
    sort: Annotated[str | None, typer.Option("--sort", help="Column to sort by")] = None,
    desc: Annotated[bool, typer.Option("--desc", help="Sort descending")] = False,
    limit: Annotated[int | None, typer.Option("--limit", help="At most this many rows")] = None,
    view: Annotated[str | None, typer.Option("--view", help="A companion view, e.g. windows, points, change, crossing, alerts")] = None,
    break_at: Annotated[float | None, typer.Option("--break-at", help="Chow test for a break in each group's line at this x")] = None,
    fleet: Annotated[bool, typer.Option("--fleet", help="One row per fleet: pooled and random-effects slopes, spread, poolability (--view fleet_units: each unit against its fleet)")] = False,
    now: Annotated[bool, typer.Option("--now", help="The line that holds now: since each group's last significant bend (the bend view)")] = False,
    fmt: FormatOpt = "table",
    timeout: TimeoutOpt = limits.DEFAULT_TIMEOUT,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Per-group linear fits from the store's views."""
    from trendledger.views.watch import CAUTION, POOL_CAUTION

    if fleet and (view or break_at is not None):
        raise typer.BadParameter("give --fleet alone, not with --view or --break-at",
                                 param_hint="--fleet")
    try:
        with _open(store, read_only=True, wait=wait) as led:
            if now:
                if view or break_at is not None or fleet:
                    raise StoreError("--now shows the bend view; leave out --view, --break-at "
                                     "and --fleet")
                df = led.bend(name, where, sort=sort, desc=desc, limit=limit)
            elif fleet:
                df = led.fleet(name, where, sort=sort, desc=desc, limit=limit)
            else:
                df = led.fits(name, where, sort=sort, desc=desc, limit=limit, view=view,
                              break_at=break_at, timeout=timeout)
    except TrendledgerError as err:
        _fail(err)
        return
    _print(df, fmt)
    # projections and pooling: the caution goes under a table, to stderr beside machine formats
    if now or view in ("crossing", "bend"):
        typer.echo(CAUTION, err=fmt not in ("table", "markdown"))
    if fleet or view == "fleet":
        typer.echo(POOL_CAUTION, err=fmt not in ("table", "markdown"))


@app.command()
def watch(
    name: Annotated[str | None, typer.Argument(help="Fit name (default: every fit)")] = None,
    fail_on: Annotated[str | None, typer.Option("--fail-on", help="Exit 1 on an alert at or above this reason: too_few_points < x_went_back < low_r2 < not_straight < outliers < unlike_fleet < slope_changed < bent < out_of_trend < silent < crossing_soon < out_of_limits (default: any alert)")] = None,
    fmt: FormatOpt = "table",
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Today's alerts grouped by unit, newest first; exit 1 when one is at or above --fail-on."""
    from trendledger.views import watch as watch_mod

    if fail_on is not None and fail_on not in watch_mod.SEVERITY:
        raise typer.BadParameter(f"choose one of {', '.join(watch_mod.SEVERITY)}", param_hint="--fail-on")
    try:
        with _open(store, read_only=True, wait=wait) as led:
            df = led.watch(name)
            held = led.waiting()
    except TrendledgerError as err:
        _fail(err)
        return
    if fmt == "table":
        typer.echo("\n".join(_shown(line) for line in watch_mod.render(df).split("\n")),
                   nl=False)
    else:
        _print(df, fmt)
        if df["reason"].isin(watch_mod.PROJECTIONS).any():
            typer.echo(watch_mod.CAUTION, err=fmt != "markdown")
    if len(held):
        # beside a machine format the note goes to stderr, so stdout stays parseable
        typer.echo(f"\n{len(held)} file(s) refused by an append are waiting "
                   "(see 'trendledger waiting'):", err=fmt != "table")
        for row in held.itertuples(index=False):
            typer.echo(f"  {row.path}: {row.message}", err=fmt != "table")
    if watch_mod.failing(df, fail_on):
        raise typer.Exit(1)


@app.command("views")
def views_cmd(store: StoreOpt = None, fmt: FormatOpt = "table", wait: WaitOpt = DEFAULT_WAIT) -> None:
    """List the views and macros installed in the store, with what each holds."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            df = led.views()
    except TrendledgerError as err:
        _fail(err)
        return
    _print(df, fmt)


def _param(text: str) -> tuple[str, object]:
    name, sep, raw = text.partition("=")
    if not sep or not name.strip():
        raise typer.BadParameter(f"{text!r}: write NAME=VALUE", param_hint="--param")
    return name.strip(), output.parse_value(raw)


@app.command()
def query(
    sql: Annotated[str, typer.Argument(help="One read-only SQL statement; $name for parameters (after -- if it starts with -)")],
    param: Annotated[list[str] | None, typer.Option("--param", help="NAME=VALUE, bound to $NAME (numbers become numbers; quote to keep text)")] = None,
    fmt: Annotated[str, typer.Option("--format", help="table, csv, json, markdown or parquet")] = "table",
    out: Annotated[Path | None, typer.Option("--out", help="Write to this file instead of the terminal")] = None,
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing --out file")] = False,
    timeout: TimeoutOpt = limits.DEFAULT_TIMEOUT,
    max_rows: Annotated[int, typer.Option("--max-rows", help="Rows shown on the terminal (0: all); --out writes every row")] = limits.DEFAULT_MAX_ROWS,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Run one read-only SQL statement against the store."""
    if fmt not in (*output.FORMATS, "parquet"):
        raise typer.BadParameter("choose table, csv, json, markdown or parquet", param_hint="--format")
    if fmt == "parquet" and out is None:
        raise typer.BadParameter("parquet output needs --out FILE", param_hint="--format")
    try:
        params = collect_params(_param(p) for p in param or [])
        target = default_store(store)
        if out is not None:
            output.check_target(out, target, force=force)
        with _open(store, read_only=True, wait=wait) as led:
            df = led.query(sql, params, timeout=timeout,
                           max_rows=None if out is not None else max_rows)
    except TrendledgerError as err:
        _fail(err)
        return
    if out is None:
        _print(df, fmt)
        if df.attrs.get("truncated"):
            typer.echo(f"trendledger: showing the first {len(df)} rows; pass --max-rows 0 "
                       "for all, or --out FILE", err=True)
        return
    try:
        output.write_file(df, out, fmt, store=target, force=force)
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(f"wrote {len(df)} row(s) to {_shown(out)}")


spec_app = typer.Typer(help="Show or change the spec stored in the store.", no_args_is_help=True)
app.add_typer(spec_app, name="spec")


@spec_app.command("show")
def spec_show(store: StoreOpt = None, wait: WaitOpt = DEFAULT_WAIT) -> None:
    """Print the spec the store uses now."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            typer.echo(led.spec.text, nl=False)
    except TrendledgerError as err:
        _fail(err)


@spec_app.command("update")
def spec_update(
    file: Annotated[Path, typer.Argument(help="The changed spec file")],
    note: Annotated[str | None, typer.Option("--note", help="Why, kept in the spec history")] = None,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Add columns or fits to a store that holds data; refuse changes that would lose any."""
    try:
        with _open(store, read_only=False, wait=wait) as led:
            change = led.update_spec(file, note=note)
    except TrendledgerError as err:
        _fail(err)
        return
    if change.empty:
        typer.echo("the spec is unchanged" if not change.views_rebuilt else "spec text updated")
        return
    for name, typ in change.added_columns.items():
        typer.echo(f"added column {name} {typ} (earlier rows read NULL)")
    for name in change.added_fits:
        typer.echo(f"added fit {name}")
    for name in change.changed_fits:
        typer.echo(f"changed fit {name}")
    for name in change.removed_fits:
        typer.echo(f"removed fit {name} (its views are dropped)")


@app.command()
def report(
    out: Annotated[Path, typer.Option("--out", help="Folder for index.html and its PNG images")],
    name: Annotated[str | None, typer.Argument(help="Fit name (optional with one fit)")] = None,
    since: Annotated[str | None, typer.Option("--since", help="Lineage of batches started on or after this date (YYYY-MM-DD); slope history from then on")] = None,
    groups: Annotated[list[str] | None, typer.Option("--groups", help="Also show these groups (repeat, or comma-separated)")] = None,
    pair: Annotated[str, typer.Option("--pair", help="Two fit columns for the overview, vertical axis first")] = "slope,r2",
    force: Annotated[bool, typer.Option("--force", help="Replace files in the folder that an earlier report did not write")] = False,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Write a self-contained HTML report (images embedded) of one fit to a folder."""
    try:
        with _open(store, read_only=True, wait=wait) as led:
            page = led.report(name, out=out, since=since, groups=groups, pair=pair, force=force)
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(f"wrote {_shown(page)}")


@app.command("export")
def export_cmd(
    folder: Annotated[Path, typer.Argument(help="Export folder (new, empty, or an earlier export)")],
    partition_by: Annotated[str | None, typer.Option("--partition-by", help="Template field to partition by (default: the first DATE field)")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the summary as JSON")] = False,
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Export data (Hive-partitioned Parquet), lineage and the views' SQL for other engines."""
    from trendledger.export.write import export

    try:
        done = export(default_store(store), folder, partition_by, wait=wait, trace=_trace())
    except TrendledgerError as err:
        _fail(err)
        return
    if as_json:
        typer.echo(json.dumps(done, indent=1))
        return
    typer.echo(f"{done['rows']} row(s) in {done['partitions']} partition(s) by {done['partition_by']}: "
               f"{len(done['written'])} written, {len(done['removed'])} removed, {done['unchanged']} unchanged")
    for dialect in done["views"]:
        missing = sorted(done["unavailable"].get(dialect, {}))
        typer.echo(f"  {folder / 'views' / f'{dialect}.sql'}"
                   + (f" (not available: {', '.join(missing)})" if missing else ""))


@app.command("sql")
def sql_cmd(
    dialect: Annotated[str, typer.Option("--dialect", help="spark, postgres, trino or duckdb")] = "duckdb",
    location: Annotated[str, typer.Option("--location", help="Where the engine finds the export folder (path or URI)")] = ".",
    store: StoreOpt = None,
    wait: WaitOpt = DEFAULT_WAIT,
) -> None:
    """Print the views (and the sources over an export) in another engine's SQL."""
    from trendledger.export.write import sql

    try:
        with _open(store, read_only=True, wait=wait) as led:
            text = sql(led, dialect, location).text
    except TrendledgerError as err:
        _fail(err)
        return
    typer.echo(text, nl=False)


@app.command()
def demo(
    folder: Annotated[Path, typer.Argument(help="Where to write the demo lab")] = Path("demo-lab"),
    days: Annotated[int | None, typer.Option("--days", help="Only the first N days")] = None,
) -> None:
    """Generate the bundled battery-lab scenario, build a store day by day, print the fits."""
    from trendledger.demo import run

    try:
        run(folder, days=days, echo=typer.echo)
    except TrendledgerError as err:
        _fail(err)


def version_callback(value: bool) -> None:
    if value:
        typer.echo(f"trendledger {__version__}")
        raise typer.Exit()


@app.callback()
def main_options(
    version: Annotated[bool, typer.Option("--version", callback=version_callback, is_eager=True, help="Print the version")] = False,
    trace: Annotated[bool, typer.Option("--trace", help="Print every SQL statement and its parameters to stderr")] = False,
) -> None:
    """Keep daily instrument batches in one DuckDB store and fit per-unit linear trends."""
    _GLOBAL["trace"] = trace


def main() -> None:
    app()
