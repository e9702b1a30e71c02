"""Natural keys: cumulative or overlapping files, where the later file's row wins."""

from __future__ import annotations

import numpy as np
import pytest

from trendledger.errors import SpecError
from trendledger.spec import parse

from .conftest import SPEC, Lab
from .test_cli import tl

KEYED = SPEC.replace('format = "csv"', 'format = "csv"\nkey = ["cell", "cycle"]')
DAYS = 6


def _capacity(cell: int, cycle: int) -> float:
    return round(3.0 - 0.011 * cycle + 0.003 * ((cycle * 7 + cell) % 5), 4)


def _cumulative(lab: Lab, days: range) -> None:
    """Day k's file of each cell holds every cycle 1..k so far (as many cyclers write)."""
    for k in days:
        lab.day(f"2026-03-{k + 1:02d}", {f"c0{c}": [(n, _capacity(c, n)) for n in range(1, k + 1)]
                                        for c in (1, 2)})


def test_cumulative_files_fit_like_one_file_per_day(tmp_path) -> None:  # type: ignore[no-untyped-def]
    keyed, daily = Lab(tmp_path / "keyed", KEYED), Lab(tmp_path / "daily")
    with keyed.init() as a, daily.init() as b:
        for k in range(1, DAYS + 1):
            _cumulative(keyed, range(k, k + 1))
            summary = a.append()
            assert summary.rows == 2 * k
            assert summary.replaced_rows == 2 * (k - 1)
            daily.day(f"2026-03-{k + 1:02d}", {f"c0{c}": [(k, _capacity(c, k))] for c in (1, 2)})
            b.append()
        fa = a.fits("fade").sort_values("cell").reset_index(drop=True)
        fb = b.fits("fade").sort_values("cell").reset_index(drop=True)
        assert fa["status"].tolist() == fb["status"].tolist()
        numbers = fa.select_dtypes("number").columns
        np.testing.assert_allclose(fa[numbers].to_numpy(float), fb[numbers].to_numpy(float),
                                   rtol=1e-12, equal_nan=True)
        for cell in (1, 2):
            x = np.arange(1, DAYS + 1)
            slope, intercept = np.polyfit(x, [_capacity(cell, n) for n in x], 1)  # numpy
            row = fa.set_index("cell").loc[f"c0{cell}"]
            assert (row["n"], row["slope"]) == (DAYS, pytest.approx(slope, rel=1e-12))
            assert row["intercept"] == pytest.approx(intercept, rel=1e-12)
        # each replaced row is kept, naming the file whose row replaced it
        lineage = a.query(
            "SELECT h.cell, h.cycle, f_old.path AS old, f_new.path AS new "
            "FROM measurements_history AS h "
            "JOIN ingest_files AS f_old ON f_old.file_id = h.file_id "
            "JOIN ingest_files AS f_new ON f_new.file_id = h.removed_by_file "
            "WHERE h.removed_how = 'replaced by key' AND h.cell = 'c01' AND h.cycle = 1 "
            "ORDER BY old")
        assert lineage["old"].tolist() == [f"incoming/2026-03-0{k + 1}/c01.csv"
                                           for k in range(1, DAYS)]
        assert set(lineage["new"].tolist()) == {f"incoming/2026-03-0{k + 2}/c01.csv"
                                                for k in range(1, DAYS)}
        assert a.check().ok


def test_cumulative_files_in_one_batch_keep_the_latest_row(tmp_path) -> None:  # type: ignore[no-untyped-def]
    lab = Lab(tmp_path / "lab", KEYED)
    _cumulative(lab, range(1, 4))
    with lab.init() as led:
        summary = led.append()
        assert (summary.rows, summary.replaced_rows) == (12, 6)
        rows = led.con.execute("SELECT cell, cycle, day FROM measurements ORDER BY ALL").fetchall()
        assert [(c, n) for c, n, _ in rows] == [(c, n) for c in ("c01", "c02") for n in (1, 2, 3)]
        assert {str(d) for _, _, d in rows} == {"2026-03-04"}
        assert led.check().ok


def test_a_missing_key_part_replaces_nothing(tmp_path) -> None:  # type: ignore[no-untyped-def]
    lab = Lab(tmp_path / "lab", KEYED)
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah\n,3.0\n1,2.9\n")
    lab.write("incoming/2026-03-03/c01.csv", "cycle,capacity_ah\n,3.1\n1,2.95\n")
    with lab.init() as led:
        assert led.append().replaced_rows == 1
        assert led.con.execute("SELECT cycle, capacity_ah FROM measurements ORDER BY ALL"
                               ).fetchall() == [(1, 2.95), (None, 3.0), (None, 3.1)]


def test_check_reports_x_values_repeated_across_files_without_a_key(lab: Lab) -> None:
    _cumulative(lab, range(1, 4))
    with lab.init() as led:
        led.append()
        report = led.check()
    assert report.ok  # store and disk agree: the repeats are reported, not an error
    # days 1..3: cycles 1 and 2 repeat, for each of two cells
    assert report.repeated_x[0].startswith("fit fade: 4 cycle value(s) of a group come from "
                                           "more than one file")
    assert "c01 cycle 1 in files 1, 3, 5" in report.repeated_x[0]
    code, out, _ = tl("check", "--store", str(lab.store))
    assert code == 0 and "repeated x: fit fade" in out and "declare [source] key" in out


@pytest.mark.parametrize(("key", "words"), [
    ('key = ["cell", "cyle"]', "did you mean 'cycle'"),
    ('key = []', "a list of columns"),
    ('key = ["cell", "cell"]', "twice"),
])
def test_key_mistakes_are_named(key: str, words: str) -> None:
    with pytest.raises(SpecError, match=words):
        parse(KEYED.replace('key = ["cell", "cycle"]', key))
