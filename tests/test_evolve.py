"""Spec changes on a store that holds data, and upgrades of stores written by older versions."""

from __future__ import annotations

import duckdb
import pytest

from trendledger import Ledger, SpecError
from trendledger.spec import load as load_spec
from trendledger.store import db as store
from trendledger.store import publish
from trendledger.views import templates

from .conftest import SPEC, Lab
from .test_cli import tl


def test_new_column_and_new_fit_on_a_filled_store(lab: Lab) -> None:
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99), (3, 2.98)]})
    with lab.init() as led:
        led.append()
    new = SPEC.replace('capacity_ah = "DOUBLE"', 'capacity_ah = "DOUBLE"\ntemp_c = "DOUBLE"')
    new += '\n[[fit]]\nname = "warming"\ngroup = ["cell"]\nx = "cycle"\ny = "temp_c"\n'
    lab.spec.write_text(new)
    code, out, err = tl("spec", "update", str(lab.spec), "--note", "cycler now logs temperature",
                        "--store", str(lab.store))
    assert code == 0, err
    assert "added column temp_c DOUBLE" in out and "added fit warming" in out
    lab.write("incoming/2026-03-03/c01.csv",
              "cycle,capacity_ah,temp_c\n4,2.97,25.0\n5,2.96,25.5\n6,2.95,26.1\n")
    with lab.open() as led:
        assert led.append().rows == 3
        temps = led.con.execute("SELECT cycle, temp_c FROM measurements ORDER BY cycle").fetchall()
        warming = led.fits("warming")
        history = led.con.execute("SELECT version, note FROM tl_spec_history ORDER BY 1").fetchall()
    assert temps[:3] == [(1, None), (2, None), (3, None)]
    assert [t for _, t in temps[3:]] == [25.0, 25.5, 26.1]
    assert int(warming["n"].iloc[0]) == 3  # rows without a temperature do not count
    assert history == [(1, "spec given to init"), (2, "cycler now logs temperature")]


WITH_TEMP = SPEC.replace('capacity_ah = "DOUBLE"', 'capacity_ah = "DOUBLE"\ntemp_c = "DOUBLE"')


@pytest.mark.parametrize(
    ("old", "new", "words"),
    [
        ('temp_c = "DOUBLE"\n', "", "temp_c was removed"),
        ('temp_c = "DOUBLE"', 'temp_c = "VARCHAR"', "cannot become VARCHAR"),
        ("{cell}.csv", "{cell}.txt", "cannot change"),
        ('cell = "VARCHAR"', 'cell = "INTEGER"', "[source.fields] cannot change"),
    ],
)
def test_changes_that_would_lose_data_are_refused(tmp_path, old: str, new: str,
                                                   words: str) -> None:
    lab = Lab(tmp_path, WITH_TEMP)
    lab.write("incoming/2026-03-02/c01.csv", "cycle,capacity_ah,temp_c\n1,3.0,25.0\n")
    with lab.init() as led:
        led.append()
    assert old in WITH_TEMP
    lab.spec.write_text(WITH_TEMP.replace(old, new))
    before = lab.counts()
    with lab.open() as led:
        with pytest.raises(SpecError) as info:
            led.update_spec(lab.spec)
    assert words in str(info.value)
    assert lab.counts() == before
    with lab.open(read_only=True) as led:
        assert led.spec.text == WITH_TEMP


def test_store_of_an_earlier_version_is_upgraded_in_place(lab: Lab) -> None:
    # Build a version-1 store by hand, exactly as the first release wrote it.
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.9)]})
    spec = load_spec(lab.spec)
    con = duckdb.connect(str(lab.store), config={"storage_compatibility_version": "v1.5.0"})
    for stmt in templates.load("schema/001_base.sql").render({}):
        con.execute(stmt)
    con.execute(store.measurements_ddl(spec))
    con.executemany("INSERT INTO tl_meta VALUES (?, ?)", [
        ("schema_version", "1"), ("spec", spec.text), ("spec_hash", spec.digest),
        ("root", str(lab.root.resolve())), ("created_at", "2026-01-05T10:00:00"),
    ])
    con.close()
    with Ledger.open(lab.store) as led:
        assert led.info["schema_version"] == str(store.SCHEMA_VERSION)
        steps = led.con.execute("SELECT version FROM tl_migrations").fetchall()
        first = led.con.execute("SELECT version, applied_at FROM tl_spec_history").fetchall()
        assert led.append().rows == 2
    assert steps == [(v,) for v, _ in store.schema_steps() if v >= 2]
    assert first[0][0] == 1 and str(first[0][1]).startswith("2026-01-05")


def test_newer_store_is_refused(lab: Lab) -> None:
    lab.init().close()
    # as a newer version would leave it: both the published copy and the writer's copy
    for copy in (lab.store, publish.Layout.of(lab.store).writer):
        con = duckdb.connect(str(copy))
        con.execute("UPDATE tl_meta SET value = '99' WHERE key = 'schema_version'")
        con.close()
    with pytest.raises(Exception, match="newer than this tool"):
        Ledger.open(lab.store)
    with pytest.raises(Exception, match="newer than this tool"):
        Ledger.open(lab.store, read_only=True)
