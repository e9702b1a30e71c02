"""Keep every value: retracted and replaced rows move to measurements_history, and a
retraction can be undone exactly."""

from __future__ import annotations

import getpass

import numpy as np
import pytest

from trendledger.errors import InputError, StoreError

from .conftest import Lab
from .test_cli import tl


def _state(led) -> tuple:  # type: ignore[no-untyped-def]
    """Everything a retract-then-restore must give back: rows, lineage, stored fits."""
    con = led.con
    return (
        con.execute("SELECT * FROM measurements ORDER BY ALL").fetchall(),
        con.execute("SELECT * FROM ingest_files ORDER BY file_id").fetchall(),
        con.execute("SELECT * FROM ingest_batches ORDER BY batch_id").fetchall(),
        led.fits("fade").to_dict("records"),
    )


def test_retract_then_restore_gives_back_rows_fits_and_lineage(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.95)], "c02": [(1, 3.1), (2, 3.0)]})
    lab.day("2026-03-03", {"c01": [(3, 2.91), (4, 2.86)], "c02": [(3, 2.97), (4, 2.9)]})
    with lab.init() as led:
        led.append()
        before = _state(led)
        assert led.retract(batch=1, why="wrong calibration") == {"files": 4, "rows": 8}
        assert led.con.execute("SELECT count(*) FROM measurements").fetchall() == [(0,)]
        kept = led.query("SELECT cell, cycle, capacity_ah, removed_how, removed_why, "
                         "removed_by FROM measurements_history ORDER BY cell, cycle")
        assert len(kept) == 8
        assert set(kept["removed_how"]) == {"retracted"}
        assert set(kept["removed_why"]) == {"wrong calibration"}
        assert set(kept["removed_by"]) == {getpass.getuser()}
        with pytest.raises(InputError, match="say why"):
            led.restore(batch=1, why="")
        assert led.restore(batch=1, why="calibration was right") == {"files": 4, "rows": 8}
        assert _state(led) == before
        assert led.query("SELECT count(*) AS n FROM measurements_history")["n"][0] == 0
        events = led.query("SELECT action, reason, os_user FROM tl_events ORDER BY event_id")
        assert events.values.tolist() == [
            ["retract", "wrong calibration", getpass.getuser()],
            ["restore", "calibration was right", getpass.getuser()]]
        with pytest.raises(StoreError, match="is not retracted"):
            led.restore(batch=1, why="again")


def test_restore_one_file_and_refuse_when_it_was_loaded_again(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9), (3, 2.8)], "c02": [(1, 3.1)]})
    with lab.init() as led:
        led.append()
        led.retract(file="incoming/2026-03-02/c01.csv", why="probe fell off")
        assert led.fits("fade")["cell"].tolist() == ["c02"]
        assert led.restore(file="incoming/2026-03-02/c01.csv", why="probe was fine")["rows"] == 3
        fit = led.fits("fade").set_index("cell").loc["c01"]
        slope, intercept = np.polyfit([1, 2, 3], [3.0, 2.9, 2.8], 1)  # numpy reference
        assert fit["slope"] == pytest.approx(slope, rel=1e-12)
        assert fit["intercept"] == pytest.approx(intercept, rel=1e-12)
        assert led.check().ok

        led.retract(file="incoming/2026-03-02/c02.csv", why="mislabelled")
        lab.day("2026-03-02", {"c02": [(1, 3.2)]})  # the fixed file loads as a new version
        assert led.append().rows == 1
        with pytest.raises(StoreError, match="was loaded again since, as file 3"):
            led.restore(file="incoming/2026-03-02/c02.csv", why="undo")


def test_replace_keeps_the_old_rows_with_the_reason(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
    with lab.init() as led:
        led.append()
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.93)]})
    code, out, _ = tl("append", "--store", str(lab.store), "--replace",
                      "--why", "typing error in cycle 2")
    assert code == 0 and "1 replaced" in out
    assert "incoming/2026-03-02/c01.csv: replaces file 1 (2 rows -> 2 rows)" in out
    with lab.open(read_only=True) as led:
        old = led.query("SELECT cycle, capacity_ah, file_id, removed_by_file, removed_how, "
                        "removed_why FROM measurements_history ORDER BY cycle")
        assert old.values.tolist() == [
            [1, 3.0, 1, 2, "replaced", "typing error in cycle 2"],
            [2, 2.9, 1, 2, "replaced", "typing error in cycle 2"]]
        msg = led.lineage(files=True).set_index("file_id").loc[1, "message"]
        assert msg == "replaced by file 2 in batch 2: typing error in cycle 2"
        assert led.con.execute("SELECT capacity_ah FROM measurements ORDER BY cycle"
                               ).fetchall() == [(3.0,), (2.93,)]


def test_a_shrinking_replacement_needs_allow_shrink(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(c, 3.0 - c / 100) for c in range(1, 49)]})
    with lab.init() as led:
        led.append()
    lab.day("2026-03-02", {"c01": [(c, 3.0 - c / 100) for c in range(1, 6)]})
    before = lab.counts()
    code, _, err = tl("append", "--store", str(lab.store), "--replace")
    assert code == 3
    assert "c01.csv: 48 rows -> 5 rows: the new version holds fewer rows than file 1" in err
    assert "--allow-shrink" in err
    assert lab.counts() == before
    code, out, _ = tl("append", "--store", str(lab.store), "--replace", "--retry-rejected",
                      "--allow-shrink", "--why", "cycler restarted the file")
    assert code == 0 and "replaces file 1 (48 rows -> 5 rows)" in out
    with lab.open(read_only=True) as led:
        assert led.query("SELECT count(*) AS n FROM measurements_history")["n"][0] == 48
        assert led.check().ok


def test_the_history_follows_a_spec_that_adds_a_column(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        lab.spec.write_text(lab.spec.read_text().replace(
            'capacity_ah = "DOUBLE"', 'capacity_ah = "DOUBLE"\ntemp_c = "DOUBLE"'))
        led.update_spec(lab.spec)
        lab.write("incoming/2026-03-03/c01.csv", "cycle,capacity_ah,temp_c\n2,2.9,25.5\n")
        led.append()
        led.retract(batch=2, why="thermocouple loose")
        kept = led.query("SELECT cycle, temp_c FROM measurements_history")
        assert kept.values.tolist() == [[2, 25.5]]
        led.restore(batch=2, why="it was fine")
        assert led.con.execute("SELECT cycle, temp_c FROM measurements ORDER BY cycle"
                               ).fetchall() == [(1, None), (2, 25.5)]
