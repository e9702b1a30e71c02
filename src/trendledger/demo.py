"""``trendledger demo``: play the bundled battery-lab scenario day by day.

It shows the daily routine on invented data: append each day's files, see a
truncated file refused and later re-sent, a mis-scaled file replaced by its
correction, and the per-cell fits with the cells that stopped fading linearly.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path

from trendledger import demo_data
from trendledger.ledger import Ledger
from trendledger.query.output import render
from trendledger.report.build import ReportError

Echo = Callable[[str], None]


def run(folder: Path, *, days: int | None = None, echo: Echo = print) -> Path:
    """Generate the lab under ``folder``, build its store, print what a user would see."""
    plan = demo_data.DEFAULT_PLAN
    n_days = min(days or plan.n_days, plan.n_days)
    folder = Path(folder)
    for old in ("incoming", "report"):
        shutil.rmtree(folder / old, ignore_errors=True)
    folder.mkdir(parents=True, exist_ok=True)
    spec_path = demo_data.write_spec(folder)
    store_path = folder / "trendledger.duckdb"
    echo(f"Bench 7 battery lab: {len(plan.cells)} cells, {n_days} days, files under {folder}")
    resent_day, resent_cell = plan.resent
    cut_day, cut_cell = plan.truncated
    with Ledger.init(spec_path, store_path, force=True) as led:
        for day in range(n_days):
            demo_data.write_day(folder, day, plan)
            events = []
            if day == cut_day + 1:
                demo_data.write_retransmit(folder, plan)
                events.append(f"lab re-sent the cut file of {cut_cell}")
            if day == resent_day + 2:
                demo_data.write_day(folder, resent_day, plan, corrected=True)
                events.append(f"lab sent a corrected file for {resent_cell}")
            summary = led.append(skip_bad=True, replace=True,
                                 command=f"trendledger demo (day {day + 1})")
            notes = [f"{o.path}: {o.message}" for o in summary.outcomes
                     if o.status == "rejected"]
            notes += [f"{o.path} replaces file {o.replaces}" for o in summary.outcomes
                      if o.replaces is not None]
            if notes or events or day in (0, n_days - 1):
                echo(f"day {day + 1:>2} {plan.date_of(day)}: batch {summary.batch_id}, "
                     f"{summary.files} files, {summary.rows} rows"
                     + "".join(f"\n        {e}" for e in events)
                     + "".join(f"\n        {n}" for n in notes))
        batches = led.lineage()
        files = led.lineage(files=True)
        echo(
            f"\nstore {store_path}: {len(batches)} batches, "
            f"{int((files['status'] == 'loaded').sum())} files loaded, "
            f"{int((files['status'] == 'rejected').sum())} rejected, "
            f"{int((files['status'] == 'replaced').sum())} replaced, "
            f"{int(batches['rows'].sum())} rows"
        )
        fit = led.spec.fits[0]
        table = led.fits(fit.name, sort="r2", limit=10)
        cols = [*fit.group, "n", "slope", "slope_lo", "slope_hi", "r2", "resid_sd", "status"]
        echo(f"\nfit {fit.name!r}: {fit.y} against {fit.x} per {', '.join(fit.group)}, "
             "worst r2 first (10 of " + str(len(led.fits(fit.name))) + ")")
        echo(render(table[[c for c in cols if c in table.columns]]).rstrip())
        if fit.min_r2 is not None:
            bent = led.fits(fit.name, where=f"r2 < {fit.min_r2}", sort="r2")
            names = ", ".join(str(v) for v in bent[fit.group[0]]) or "none"
            echo(f"\nnot linear (r2 below {fit.min_r2}): {names}")
        try:
            page = led.report(fit.name, out=folder / "report")
        except ReportError as err:  # matplotlib is an optional extra
            echo(f"\nno report: {err}")
        else:
            echo(f"\nreport: {page}")
    return store_path
