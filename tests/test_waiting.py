"""A refused file never blocks the next append: it waits until it changes or is retried."""

from __future__ import annotations

import numpy as np
import pytest

from trendledger.errors import InputError, StoreError

from .conftest import Lab
from .test_cli import tl

BAD = "cycle,capacity_ah\n1,3.0\n2,lots\n"


def test_a_file_refused_on_day_one_does_not_stop_day_two(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
    lab.write("incoming/2026-03-02/c02.csv", BAD)
    tl("init", "--spec", str(lab.spec))
    before = lab.counts()
    code, _, err = tl("append", "--store", str(lab.store))
    assert code == 3 and "c02.csv:3: column capacity_ah" in err
    assert lab.counts() == before  # the batch did not happen: rows and lineage as before

    lab.day("2026-03-03", {"c01": [(3, 2.8)]})
    code, out, err = tl("append", "--store", str(lab.store))
    assert code == 0
    assert "batch 1: 2 file(s), 3 row(s) loaded" in out
    assert "1 file(s) refused earlier" in err
    assert "waiting incoming/2026-03-02/c02.csv: line 3: column capacity_ah" in err
    code, out, _ = tl("waiting", "--store", str(lab.store), "--format", "csv")
    assert code == 0 and out.splitlines()[1].startswith("incoming/2026-03-02/c02.csv,")
    code, out, _ = tl("watch", "--store", str(lab.store))
    assert "1 file(s) refused by an append are waiting" in out and "c02.csv" in out
    with lab.open(read_only=True) as led:
        fit = led.fits("fade").set_index("cell").loc["c01"]
        # numpy.polyfit on the three rows that loaded (cycles 1..3)
        slope, _ = np.polyfit([1, 2, 3], [3.0, 2.9, 2.8], 1)
        assert fit["slope"] == pytest.approx(slope, rel=1e-12)


def test_a_waiting_file_is_tried_again_when_it_changes(lab: Lab) -> None:
    lab.write("incoming/2026-03-02/c02.csv", BAD)
    with lab.init() as led:
        with pytest.raises(InputError):
            led.append()
        again = led.append()
        assert (again.batch_id, again.waiting) == (None, 1)
        # the same bytes written again (a new modification time) still wait
        lab.write("incoming/2026-03-02/c02.csv", BAD)
        assert led.append(rehash=True).waiting == 1
        lab.write("incoming/2026-03-02/c02.csv", "cycle,capacity_ah\n1,3.0\n2,2.95\n")
        fixed = led.append()
        assert (fixed.files, fixed.rows, fixed.waiting) == (1, 2, 0)
        assert led.waiting().empty
        closed = led.waiting(every=True)
        assert len(closed) == 1 and closed["closed_by_file"].iloc[0] == fixed.outcomes[0].file_id


def test_retry_rejected_tries_the_same_bytes_again(lab: Lab) -> None:
    lab.write("incoming/2026-03-02/c02.csv", BAD)
    with lab.init() as led:
        with pytest.raises(InputError):
            led.append()
        with pytest.raises(InputError, match="lots"):
            led.append(retry_rejected=True)
        assert int(led.waiting()["refusals"].iloc[0]) == 2
        summary = led.append(skip_bad=True, retry_rejected=True)
        assert summary.rejected == 1
        assert led.lineage(files=True)["status"].tolist() == ["rejected"]


def test_a_file_set_aside_is_passed_over_for_good(lab: Lab) -> None:
    lab.write("incoming/2026-03-02/c02.csv", BAD)
    with lab.init() as led:
        with pytest.raises(InputError):
            led.append()
        with pytest.raises(StoreError, match="say why"):
            led.set_aside("incoming/2026-03-02/c02.csv", why=" ")
        with pytest.raises(StoreError, match="is not waiting"):
            led.set_aside("incoming/2026-03-02/c09.csv", why="probe fault")
    code, out, _ = tl("set-aside", "incoming/2026-03-02/c02.csv", "--why", "probe fault",
                      "--store", str(lab.store))
    assert code == 0 and "set aside" in out
    lab.write("incoming/2026-03-02/c02.csv", BAD + "3,2.8\n")  # even a changed file stays aside
    with lab.open() as led:
        summary = led.append()
        assert (summary.batch_id, summary.set_aside, summary.waiting) == (None, 1, 0)
        assert led.waiting().empty
        row = led.waiting(every=True).iloc[0]
        assert row["set_aside_reason"] == "probe fault" and row["set_aside_by"]


def test_a_changed_file_refused_without_replace_waits_and_replace_loads_it(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
        with pytest.raises(InputError, match="changed since it was loaded"):
            led.append()
        assert led.append().waiting == 1
        replaced = led.append(replace=True)
        assert (replaced.replaced, replaced.rows) == (1, 2)
        assert led.waiting().empty


def test_each_batch_records_the_operating_system_user(lab: Lab) -> None:
    import getpass

    lab.day("2026-03-02", {"c01": [(1, 3.0)]})
    with lab.init() as led:
        led.append()
        # the same lookup the standard library documents for the login name
        assert led.lineage()["os_user"].tolist() == [getpass.getuser()]
