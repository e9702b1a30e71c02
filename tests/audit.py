"""What the hardening tests check after every attack: the store is whole and exact.

``audit`` opens a store read-only and compares the three places that must agree:
the rows in ``measurements``, the per-file counts in ``ingest_files`` and the
per-batch totals in ``ingest_batches``. ``tally`` counts what the attacks did,
so a run can report how many kills, races and generated files the store survived.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

from trendledger import Ledger

#: The installed command, run as a user would run it.
TRENDLEDGER = str(Path(sys.executable).with_name("trendledger"))


@dataclass
class Audit:
    """The store's state as far as the hardening tests care."""

    rows: int = 0
    loaded: dict[str, int] = field(default_factory=dict)  # path -> rows, loaded files only
    batches: int = 0
    problems: list[str] = field(default_factory=list)

    def batch_is_whole(self, paths: list[str], rows_each: int) -> bool | None:
        """True if every path is loaded, False if none is; None for a partial batch."""
        present = [p for p in paths if p in self.loaded]
        if not present:
            return False
        if len(present) == len(paths) and all(self.loaded[p] == rows_each for p in paths):
            return True
        return None


def audit(store: Path) -> Audit:
    """Read the store and list every way its three accounts disagree (none, if healthy)."""
    out = Audit()
    with Ledger.open(store, read_only=True, wait=30) as led:
        con = led.con
        report = led.check()
        if not report.ok:
            out.problems.append(f"check: {report.to_dict()}")
        out.rows = con.execute("SELECT count(*) FROM measurements").fetchall()[0][0]
        out.batches = con.execute("SELECT count(*) FROM ingest_batches").fetchall()[0][0]
        # rows per loaded file equal the lineage's count
        for path, file_id, recorded, stored in con.execute(
            """
            SELECT f.path, f.file_id, f.rows, count(m.file_id)
            FROM ingest_files AS f LEFT JOIN measurements AS m USING (file_id)
            WHERE f.status = 'loaded' GROUP BY ALL ORDER BY f.file_id
            """
        ).fetchall():
            if recorded != stored:
                out.problems.append(f"file {file_id} {path}: lineage {recorded}, store {stored}")
            if path in out.loaded:
                out.problems.append(f"{path} is loaded twice")
            out.loaded[path] = stored
        # no row without a loaded file
        (orphans,) = con.execute(
            "SELECT count(*) FROM measurements WHERE file_id NOT IN "
            "(SELECT file_id FROM ingest_files WHERE status = 'loaded')"
        ).fetchall()[0]
        if orphans:
            out.problems.append(f"{orphans} rows belong to no loaded file")
        # every file belongs to a recorded batch, and each batch's totals add up
        (lost,) = con.execute(
            "SELECT count(*) FROM ingest_files WHERE batch_id NOT IN "
            "(SELECT batch_id FROM ingest_batches)"
        ).fetchall()[0]
        if lost:
            out.problems.append(f"{lost} lineage rows name a batch that does not exist")
        for batch_id, files, rows, counted_files, counted_rows in con.execute(
            """
            SELECT b.batch_id, b.files, b.rows, count(f.file_id), coalesce(sum(f.rows), 0)
            FROM ingest_batches AS b
            LEFT JOIN ingest_files AS f ON f.batch_id = b.batch_id AND f.status = 'loaded'
            WHERE b.status <> 'retracted' GROUP BY ALL
            """
        ).fetchall():
            if (files, rows) != (counted_files, counted_rows):
                out.problems.append(
                    f"batch {batch_id} says {files} files / {rows} rows, lineage has "
                    f"{counted_files} / {counted_rows}"
                )
        out.problems += _stored_fits_follow_the_rows(led)
    return out


def _stored_fits_follow_the_rows(led: Ledger) -> list[str]:
    """Each fit's view (kept up to date batch by batch) against the same fit recomputed from
    every row (its ``_full`` twin): the same groups with the same point counts."""
    views = {v for (v,) in led.con.execute(
        "SELECT view_name FROM duckdb_views() WHERE NOT internal").fetchall()}
    problems = []
    for fit in led.spec.fits:
        if fit.view not in views or fit.view + "_full" not in views:
            continue
        keys = ", ".join(f'"{g}"' for g in fit.group)
        stored, full = (
            set(led.con.execute(f"SELECT {keys}, n FROM {view}").fetchall())
            for view in (fit.view, fit.view + "_full")
        )
        if stored != full:
            problems.append(f"fit {fit.name}: stored counts differ from the rows for "
                            f"{sorted(stored ^ full, key=repr)[:5]}")
    return problems


def cli(*args: str, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess:
    """Run the installed ``trendledger`` command and capture what a user would see."""
    return subprocess.run([TRENDLEDGER, *args], capture_output=True, text=True, cwd=cwd,
                          timeout=timeout)


def one_clean_line(stderr: str) -> bool:
    """The CLI's error contract: a single 'trendledger: error:' line and no traceback."""
    lines = stderr.strip().splitlines()
    return (len(lines) == 1 and lines[0].startswith("trendledger: error: ")
            and "Traceback" not in stderr)


def fuzz_scale() -> int:
    """How much longer than usual to attack: TRENDLEDGER_FUZZ=long (x25) or a number."""
    value = os.environ.get("TRENDLEDGER_FUZZ", "").strip().lower()
    if not value:
        return 1
    if value == "long":
        return 25
    return max(1, int(value))


def attack_rounds(normal: int) -> int:
    """Rounds of a slow attack loop (kills, races): a fifth of the fuzz scale, at least one."""
    return normal * max(1, fuzz_scale() // 5)


def tally(what: str, n: int = 1) -> None:
    """Add to a running count in $TRENDLEDGER_TALLY (a JSON-lines file), if it is set."""
    target = os.environ.get("TRENDLEDGER_TALLY")
    if target and n:
        with open(target, "a", encoding="utf-8") as fh:
            fh.write(json.dumps({"what": what, "n": n}) + "\n")
