"""Fits end to end: files on disk, the real append, the Ledger API and the fits command."""

from __future__ import annotations

import json

import pytest

from trendledger import QueryRefused

from . import strd
from .conftest import Lab, nist_dir
from .test_cli import tl
from .test_fit_view import lre

NIST_SPEC = """\
[source]
files = "runs/{dataset}/part{part}.csv"
[source.columns]
x = "DOUBLE"
y = "DOUBLE"
[source.fields]
dataset = "VARCHAR"
part = "INTEGER"
[[fit]]
name = "line"
group = ["dataset"]
x = "x"
y = "y"
[[fit]]
name = "origin"
group = ["dataset"]
x = "x"
y = "y"
through_origin = true
"""


def _nist(name: str) -> strd.Dataset:
    folder = nist_dir()
    if folder is None:
        pytest.skip("NIST StRD files not found: set TRENDLEDGER_NIST_DIR or provide "
                    "../shared/reference/nist-strd/ beside the repository")
    return strd.read(folder / f"{name}.dat")


def _write_in_parts(lab: Lab, data: strd.Dataset, parts: int) -> None:
    """The certified data as printed, split over several files appended on different days."""
    rows = data.rows_text
    cols = data.columns
    ix, iy = cols.index("x"), cols.index("y")
    size = -(-len(rows) // parts)
    for p in range(parts):
        chunk = rows[p * size:(p + 1) * size]
        body = "".join(f"{r[ix]},{r[iy]}\n" for r in chunk)
        lab.write(f"runs/{data.name}/part{p + 1}.csv", "x,y\n" + body)


@pytest.mark.parametrize("parts", [1, 3])
def test_nist_norris_through_files_and_append(tmp_path, parts: int) -> None:
    # NIST StRD Norris.dat certified values, loaded through real CSV files and appends
    data = _nist("Norris")
    lab = Lab(tmp_path, NIST_SPEC)
    with lab.init() as led:
        for p in range(parts):
            _write_in_parts(lab, data, parts)
            led.append([str(lab.root / f"runs/Norris/part{p + 1}.csv")])
        row = led.fits("line", where="dataset = 'Norris'").iloc[0]
    b0, b1 = data.parameters["B0"], data.parameters["B1"]
    checks = {"intercept": b0[0], "intercept_se": b0[1], "slope": b1[0], "slope_se": b1[1],
              "resid_sd": data.resid_sd, "r2": data.r2}
    digits = {col: lre(float(row[col]), cert.exact) for col, cert in checks.items()}
    assert all(d >= 12 for d in digits.values()), digits
    assert int(row["n"]) == len(data.rows_text)


@pytest.mark.parametrize("name", ["NoInt1", "NoInt2"])
def test_nist_through_origin_through_append(tmp_path, name: str) -> None:
    # NIST StRD NoInt1.dat / NoInt2.dat certified values for y = B1 x
    data = _nist(name)
    lab = Lab(tmp_path, NIST_SPEC)
    _write_in_parts(lab, data, 2)
    with lab.init() as led:
        led.append()
        row = led.fits("origin").iloc[0]
    b1 = data.parameters["B1"]
    checks = {"slope": b1[0], "slope_se": b1[1], "resid_sd": data.resid_sd, "r2": data.r2}
    digits = {col: lre(float(row[col]), cert.exact) for col, cert in checks.items()}
    assert all(d >= 12 for d in digits.values()), digits


def _cells(lab: Lab) -> None:
    # invented demo-style data: c03 bends, c04 has two points only
    lab.day("2026-03-02", {
        "c01": [(1, 3.0), (2, 2.99), (3, 2.981), (4, 2.969)],
        "c02": [(1, 3.0), (2, 2.98), (3, 2.962), (4, 2.939)],
        "c03": [(1, 3.0), (2, 2.999), (3, 2.9), (4, 2.6)],
        "c04": [(1, 3.0), (2, 2.9)],
    })


def test_fits_options_match_the_api(lab: Lab) -> None:
    _cells(lab)
    with lab.init() as led:
        led.append()
        api = led.fits(where="r2 < 0.99 OR status <> 'ok'", sort="slope", desc=True)
    code, out, err = tl("fits", "fade", "--where", "r2 < 0.99 OR status <> 'ok'",
                        "--sort", "slope", "--desc", "--format", "json", "--store", str(lab.store))
    assert code == 0, err
    rows = json.loads(out)
    assert [r["cell"] for r in rows] == list(api["cell"]) == ["c04", "c03"]
    assert rows[0]["status"] == "too_few_points" and rows[0]["resid_sd"] is None
    assert rows[1]["slope"] == float(api["slope"].iloc[1])
    code, out, _ = tl("fits", "--sort", "r2", "--limit", "1", "--format", "csv",
                      "--store", str(lab.store))
    assert out.splitlines()[1].startswith("c03,")


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["--where", "r3 < 0.9"], "did you mean r2?"),
        (["--where", "r2 < 0.9; DROP TABLE measurements"], "refused"),
        (["--where", "read_csv('/etc/passwd') IS NULL"], "refused"),
        (["--sort", "slop"], "did you mean 'slope'"),
        (["nofit"], "no fit named 'nofit' (choose from fade)"),
        (["--view", "nonsense"], "no view named"),
    ],
)
def test_fits_mistakes_are_one_line(lab: Lab, args: list[str], words: str) -> None:
    _cells(lab)
    with lab.init() as led:
        led.append()
    code, _, err = tl("fits", *args, "--store", str(lab.store))
    assert code in (2, 5)
    assert words in err and err.count("\n") == 1 and "Traceback" not in err


def test_api_refuses_a_bad_where(lab: Lab) -> None:
    _cells(lab)
    with lab.init() as led:
        led.append()
        with pytest.raises(QueryRefused):
            led.fits(where="(SELECT 1) = 1")


def test_break_test_through_the_query_command(lab: Lab) -> None:
    # the store's own table macro passes the query guard; a look-alike name does not
    _cells(lab)
    with lab.init() as led:
        led.append()
    code, out, err = tl("query", "SELECT cell, df2 FROM fit_fade_break(2.5) ORDER BY cell",
                        "--format", "csv", "--store", str(lab.store))
    assert code == 0, err
    assert out.splitlines()[0] == "cell,df2"
    code, _, err = tl("query", "SELECT * FROM fit_fade_breaker(2.5)", "--store", str(lab.store))
    assert code == 5 and "refused: table function" in err
