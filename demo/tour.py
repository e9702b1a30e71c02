"""Regenerate the README's tour: run each command on the demo store, paste its real output.

    python demo/tour.py            # rewrites the block between the tour markers in README.md

The demo store is built first (``trendledger demo demo/run``) if it is missing.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RUN = ROOT / "demo" / "run"
BIN = Path(sys.executable).parent

# (what the step shows, the command as a user types it in demo/run)
STEPS: list[tuple[str, str]] = [
    ("Which cells stopped fading in a straight line?",
     "trendledger fits --where 'r2 < 0.9' --sort r2 --limit 5"),
    ("The steepest fades, as CSV for a spreadsheet:",
     "trendledger fits --sort slope --limit 3 --format csv"),
    ("Where did a cell's rows come from? (the file first sent in mAh, then replaced)",
     "trendledger lineage --path 'incoming/2026-03-22/c30.csv' --format markdown"),
    ("The day a file arrived cut short, and its re-sent copy:",
     "trendledger lineage --files --path 'incoming/2026-04-11/c33.csv' --format csv"),
    ("Which cell is unlike its siblings? (each cell against the random-effects mean of the "
     "others)",
     "trendledger fits --view fleet_units --sort slope_z_p --limit 5"),
    ("The fleet as a whole: spread of the slopes, and may the cells be pooled (ICH Q1E)?",
     "trendledger fits --fleet --format json"),
    ("Today's alerts, the most severe unit first. bent: the line bent, and the line since "
     "the bend holds now; slope_changed: its latest week's slope differs from its earlier "
     "trend; not_straight: the readings curve; unlike_fleet: its slope differs from the other "
     "cells' (the knee cells fade fast too, but they bend, so only c49 is compared); "
     "outliers: readings far from its line. Each test is judged across the 49 cells "
     "(Benjamini-Hochberg); the flat, noisy cells raise nothing:",
     "trendledger watch"),
    ("Ask anything in SQL (read-only; parameters are bound, never pasted):",
     "trendledger query \"SELECT f.cell, f.slope, count(DISTINCT m.file_id) AS files "
     "FROM fit_fade AS f JOIN measurements AS m USING (cell) WHERE f.cell = \\$cell "
     "GROUP BY ALL\" --param cell=c07"),
    ("A write is refused before it runs:",
     "trendledger query 'DELETE FROM measurements'"),
    ("Do the files on disk still match what was loaded?",
     "trendledger check"),
    ("What views does the store hold?",
     "trendledger views"),
    ("Hand the rows and the views to Spark, PostgreSQL or Trino (see Scaling out):",
     "trendledger export export"),
]

START, END = "<!-- tour:start -->", "<!-- tour:end -->"


def run(command: str) -> str:
    env = {**os.environ, "PATH": f"{BIN}{os.pathsep}{os.environ.get('PATH', '')}",
           "COLUMNS": "100"}
    done = subprocess.run(command, shell=True, cwd=RUN, env=env, capture_output=True, text=True)
    text = (done.stdout + done.stderr).rstrip()
    if done.returncode:
        text += f"\n(exit code {done.returncode})"
    return text


def main() -> None:
    if not (RUN / "trendledger.duckdb").exists():
        subprocess.run([str(BIN / "trendledger"), "demo", str(RUN)], check=True,
                       stdout=subprocess.DEVNULL)
    shutil.rmtree(RUN / "export", ignore_errors=True)  # the export step starts afresh
    blocks = []
    for words, command in STEPS:
        shown = command.replace("\\$", "$")
        blocks.append(f"{words}\n\n```\n$ {shown}\n{run(command)}\n```\n")
    readme = ROOT / "README.md"
    text = readme.read_text(encoding="utf-8")
    body = START + "\n" + "\n".join(blocks) + END
    text = re.sub(re.escape(START) + ".*?" + re.escape(END), lambda _: body, text, flags=re.S)
    readme.write_text(text, encoding="utf-8")
    verbs = ", ".join(shlex.split(c)[1] for _, c in STEPS)
    print(f"README.md tour: {len(STEPS)} commands ({verbs})")


if __name__ == "__main__":
    main()
