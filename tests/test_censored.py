"""Values written beyond a reporting limit ('<0.05', '>200'): flagged, kept with their limit,
and left out of the fits or set to half the limit as the spec says."""

from __future__ import annotations

import numpy as np
import pytest

from trendledger.errors import InputError, SpecError
from trendledger.spec import parse

from .conftest import Lab

SPEC = """\
[source]
files = "incoming/{day}/{lot}.csv"

[source.columns]
month = "INTEGER"
impurity_pct = { type = "DOUBLE", censored = "TREAT" }

[source.fields]
day = "DATE"
lot = "VARCHAR"

[[fit]]
name = "impurity"
group = ["lot"]
x = "month"
y = "impurity_pct"
"""
# An invented stability series: the time-zero result is below the quantitation limit 0.05.
BODY = "month,impurity_pct\n0,<0.05\n3,0.07\n6,0.09\n9,0.12\n12,0.15\n18,>0.5\n"


def _lab(tmp_path, treat: str, body: str = BODY, extra: str = "") -> Lab:  # type: ignore[no-untyped-def]
    lab = Lab(tmp_path / treat, SPEC.replace("TREAT", treat).replace("[source]\n",
                                                                      "[source]\n" + extra))
    lab.write("incoming/2026-03-02/L1.csv", body)
    return lab


def test_a_value_below_the_limit_is_flagged_and_left_out(tmp_path) -> None:  # type: ignore[no-untyped-def]
    with _lab(tmp_path, "omit").init() as led:
        assert led.append().rows == 6
        rows = led.con.execute(
            "SELECT month, impurity_pct, impurity_pct_censored, impurity_pct_limit "
            "FROM measurements ORDER BY month").fetchall()
        assert rows[0] == (0, None, "below", 0.05)
        assert rows[-1] == (18, None, "above", 0.5)
        assert rows[1] == (3, 0.07, None, None)
        fit = led.fits("impurity").iloc[0]
        # numpy.polyfit on the four uncensored results (months 3..12)
        slope, intercept = np.polyfit([3, 6, 9, 12], [0.07, 0.09, 0.12, 0.15], 1)
        assert fit["n"] == 4
        assert fit["slope"] == pytest.approx(slope, rel=1e-12)
        assert fit["intercept"] == pytest.approx(intercept, rel=1e-12)


def test_half_the_limit_stands_in_for_a_value_below_it(tmp_path) -> None:  # type: ignore[no-untyped-def]
    # half the limit: a common-practice substitution (no source)
    with _lab(tmp_path, "half").init() as led:
        led.append()
        rows = led.con.execute("SELECT month, impurity_pct, impurity_pct_censored "
                               "FROM measurements ORDER BY month").fetchall()
        assert rows[0] == (0, 0.025, "below") and rows[-1] == (18, None, "above")
        fit = led.fits("impurity").iloc[0]
        slope, _ = np.polyfit([0, 3, 6, 9, 12], [0.025, 0.07, 0.09, 0.12, 0.15], 1)  # numpy
        assert (fit["n"], fit["slope"]) == (5, pytest.approx(slope, rel=1e-12))


def test_censored_values_with_a_decimal_comma(tmp_path) -> None:  # type: ignore[no-untyped-def]
    body = BODY.replace(",", ";").replace(".", ",")
    lab = _lab(tmp_path, "omit", body, 'delimiter = ";"\ndecimal = ","\n')
    with lab.init() as led:
        led.append()
        rows = led.con.execute("SELECT impurity_pct, impurity_pct_limit FROM measurements "
                               "ORDER BY month").fetchall()
        assert rows[:2] == [(None, 0.05), (0.07, None)]


@pytest.mark.parametrize("cell", ["abc", "<", "<x"])
def test_anything_else_refuses_the_file_naming_the_column(tmp_path, cell: str) -> None:  # type: ignore[no-untyped-def]
    lab = _lab(tmp_path, "omit", f"month,impurity_pct\n0,{cell}\n3,0.07\n")
    lab.init().close()
    before = lab.counts()
    with lab.open() as led, pytest.raises(InputError) as info:
        led.append()
    assert info.value.file == "incoming/2026-03-02/L1.csv"
    assert "column impurity_pct:" in info.value.message
    assert "neither a number nor a censored value" in info.value.message
    assert lab.counts() == before


@pytest.mark.parametrize(("change", "words"), [
    ('impurity_pct = { type = "DOUBLE", censored = "TREAT" }',
     'impurity_pct = { type = "INTEGER", censored = "omit" }'),
    ('censored = "TREAT"', 'censored = "drop"'),
])
def test_censored_spec_mistakes(change: str, words: str) -> None:
    with pytest.raises(SpecError, match="censored"):
        parse(SPEC.replace(change, words))
