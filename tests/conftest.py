"""Shared fixtures: a small lab folder with a spec and a way to drop files into it."""

from __future__ import annotations

import datetime
import os
from pathlib import Path

import pytest

from trendledger import Ledger

SPEC = """\
[source]
files = "incoming/{day}/{cell}.csv"
format = "csv"

[source.columns]
cycle = "INTEGER"
capacity_ah = "DOUBLE"

[source.fields]
day = "DATE"
cell = "VARCHAR"

[[fit]]
name = "fade"
group = ["cell"]
x = "cycle"
y = "capacity_ah"
"""


class Lab:
    """A folder like a user's: spec.toml, incoming/<day>/<cell>.csv, trendledger.duckdb."""

    def __init__(self, root: Path, spec: str = SPEC) -> None:
        self.root = root
        root.mkdir(parents=True, exist_ok=True)
        self.spec = root / "spec.toml"
        self.spec.write_text(spec, encoding="utf-8")
        self.store = root / "trendledger.duckdb"

    def write(self, relative: str, content: str | bytes) -> Path:
        path = self.root / relative
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, str):
            content = content.encode("utf-8")
        path.write_bytes(content)
        return path

    def day(self, day: str, cells: dict[str, list[tuple[int, float]]]) -> list[Path]:
        out = []
        for cell, rows in cells.items():
            text = "cycle,capacity_ah\n" + "".join(f"{c},{v}\n" for c, v in rows)
            out.append(self.write(f"incoming/{day}/{cell}.csv", text))
        return out

    def series(self, series: dict[str, list[tuple[int, float | None]]],
               per_day: int = 4) -> None:
        """Long series per cell, cut into one file per cell and day (``per_day`` rows each,
        days from 2026-03-02); a None capacity is an empty cell."""
        first = datetime.date(2026, 3, 2)
        for cell, rows in series.items():
            for start in range(0, len(rows), per_day):
                day = first + datetime.timedelta(days=start // per_day)
                text = "cycle,capacity_ah\n" + "".join(
                    f"{c},{'' if v is None else repr(v)}\n" for c, v in rows[start:start + per_day])
                self.write(f"incoming/{day.isoformat()}/{cell}.csv", text)

    def init(self) -> Ledger:
        return Ledger.init(self.spec, self.store)

    def open(self, read_only: bool = False) -> Ledger:
        return Ledger.open(self.store, read_only=read_only)

    def counts(self) -> tuple[int, int, int, list[tuple]]:
        """Rows, batches, lineage rows and the full lineage: the store's observable state."""
        with self.open(read_only=True) as led:
            con = led.con
            rows = con.execute("SELECT count(*) FROM measurements").fetchone()[0]
            batches = con.execute("SELECT count(*) FROM ingest_batches").fetchone()[0]
            files = con.execute("SELECT count(*) FROM ingest_files").fetchone()[0]
            lineage = con.execute(
                "SELECT file_id, batch_id, path, sha256, rows, status FROM ingest_files "
                "ORDER BY file_id"
            ).fetchall()
        return rows, batches, files, lineage


@pytest.fixture
def lab(tmp_path: Path) -> Lab:
    return Lab(tmp_path / "lab")


@pytest.fixture(autouse=True)
def _no_store_env(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("TRENDLEDGER_STORE", raising=False)


def nist_dir() -> Path | None:
    """Where the NIST StRD reference files are, if anywhere (they are never copied here)."""
    env = os.environ.get("TRENDLEDGER_NIST_DIR")
    candidates = [Path(env)] if env else []
    candidates.append(Path(__file__).resolve().parents[2] / "shared" / "reference" / "nist-strd")
    for c in candidates:
        if (c / "Norris.dat").is_file():
            return c
    return None
