"""Spec validation: every mistake gets a clear message naming the key."""

from __future__ import annotations

import pytest

from trendledger import SpecError
from trendledger.spec import parse

from .conftest import SPEC


def test_valid_spec_parses_with_defaults() -> None:
    spec = parse(SPEC)
    assert spec.source.format == "csv"
    assert spec.source.fields == {"day": "DATE", "cell": "VARCHAR"}
    fit = spec.fit("fade")
    assert (fit.x, fit.y, fit.group, fit.level, fit.min_r2, fit.alpha) == (
        "cycle", "capacity_ah", ("cell",), 0.95, None, 0.01)
    assert (fit.alpha_change, fit.alpha_outliers, fit.alpha_trend, fit.error_control) == (
        0.01, 0.01, 0.01, "fdr")
    assert spec.fit(None) is fit
    assert (fit.bend, fit.bend_min) == ("joined", 0.15)
    assert len(spec.digest) == 64


@pytest.mark.parametrize(
    ("change", "words"),
    [
        (('y = "capacity_ah"', 'y = "capacity"'), "did you mean 'capacity_ah'"),
        (('x = "cycle"', 'x = "cell"'), "must be numeric"),
        (('capacity_ah = "DOUBLE"', 'capacity_ah = "DUBBLE"'), "unknown type 'DUBBLE'"),
        (('files = "incoming/{day}/{cell}.csv"', 'files = "incoming/all.csv"'), "has no {field}"),
        (('files = "incoming/{day}/{cell}.csv"', 'files = "incoming/*/{cell}.csv"'), "glob"),
        (('files = "incoming/{day}/{cell}.csv"', 'files = "../{day}/{cell}.csv"'), "inside it"),
        (('files = "incoming/{day}/{cell}.csv"', 'files = "in/{day}{cell}.csv"'), "side by side"),
        (('files = "incoming/{day}/{cell}.csv"', 'files = "in/{cell}/{cell}.csv"'), "twice"),
        (('format = "csv"', 'format = "xlsx"'), "not one of"),
        (('group = ["cell"]', 'group = []'), "at least one"),
        (('group = ["cell"]', 'group = ["cel"]'), "did you mean 'cell'"),
        (('name = "fade"', 'name = "fade"\nlevle = 0.9'), "unknown key 'levle'"),
        (('name = "fade"', 'name = "fade"\nlevel = 95'), "level must be between"),
        (('cell = "VARCHAR"', 'cell = "VARCHAR"\nunit = "VARCHAR"'), "not a field of the template"),
        (('cycle = "INTEGER"', 'cycle = "INTEGER"\nfile_id = "INTEGER"'), "used by the store"),
        (('cycle = "INTEGER"', 'cycle = "INTEGER"\nCell = "VARCHAR"'), "declared twice"),
        (('name = "fade"', 'name = "fade"\nwindow = "fortnight"'), "window must be one of"),
        (('[source]', '[source]\nfiles2 = 1'), "unknown key 'files2'"),
        (('cycle = "INTEGER"', 'cycle = 5'), "must be a string"),
        (('name = "fade"', 'name = "fade"\nbend = "jointed"'), "did you mean 'joined'"),
        (('name = "fade"', 'name = "fade"\nbend_min = 0.5'), "bend_min is the least share"),
        (('name = "fade"', 'name = "fade"\nbend_min = "a lot"'), "bend_min must be a number"),
    ],
)
def test_mistakes_are_named(change: tuple[str, str], words: str) -> None:
    old, new = change
    assert old in SPEC
    with pytest.raises(SpecError) as info:
        parse(SPEC.replace(old, new, 1), path="spec.toml")
    assert words in str(info.value)
    assert str(info.value).startswith("spec.toml")


def test_duplicate_fit_names_are_refused() -> None:
    twice = SPEC + '\n[[fit]]\nname = "fade"\ngroup = ["cell"]\nx = "cycle"\ny = "capacity_ah"\n'
    with pytest.raises(SpecError, match="two fits share"):
        parse(twice)


def test_toml_syntax_error_has_line_and_column() -> None:
    with pytest.raises(SpecError) as info:
        parse(SPEC.replace('format = "csv"', "format = csv"), path="spec.toml")
    assert info.value.line == 3
    assert "not valid TOML" in str(info.value)


def test_several_fits_need_a_name() -> None:
    two = SPEC + '\n[[fit]]\nname = "other"\ngroup = ["cell"]\nx = "cycle"\ny = "capacity_ah"\n'
    spec = parse(two)
    with pytest.raises(SpecError, match="several fits"):
        spec.fit(None)
    with pytest.raises(SpecError, match="did you mean 'other'"):
        spec.fit("othr")
