"""F, chi-square and normal tail macros of sql/macros/f_chi2_normal.sql against scipy.stats.

scipy.stats (boost's incomplete beta and gamma functions) gives every expected value; the
arguments are drawn at random on a log scale of tail probabilities down to 1e-100.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pytest
from scipy import stats

from trendledger.views import templates

SQL_FILE = Path(__file__).resolve().parents[1] / "sql" / "macros" / "f_chi2_normal.sql"


@pytest.fixture(scope="module")
def con() -> duckdb.DuckDBPyConnection:
    con = duckdb.connect()
    for stmt in templates.parse(SQL_FILE).render({}):
        con.execute(stmt)
    return con


def worst(con: duckdb.DuckDBPyConnection, sql: str, rows: list[tuple]) -> float:
    """Largest relative error of ``sql`` (over the temporary table args(a, b, c, ref))."""
    con.execute("CREATE OR REPLACE TEMP TABLE args (a DOUBLE, b DOUBLE, c DOUBLE, ref DOUBLE)")
    con.executemany("INSERT INTO args VALUES (?, ?, ?, ?)", rows)
    got = con.execute(f"SELECT max(abs(({sql}) - ref) / ref) FROM args WHERE ref > 0").fetchone()
    assert got is not None
    return float(got[0])


def test_f_upper_against_scipy(con: duckdb.DuckDBPyConnection) -> None:
    rng = np.random.default_rng(5)
    rows = []
    while len(rows) < 400:
        d1, d2 = int(rng.integers(1, 600)), int(rng.integers(1, 60_000))
        f = stats.f.isf(10 ** rng.uniform(-100, 0), d1, d2)
        if np.isfinite(f) and f > 0:
            rows.append((float(f), d1, d2, float(stats.f.sf(f, d1, d2))))  # scipy.stats.f.sf
    assert worst(con, "tl_f_upper(a, b, c)", rows) < 1e-9


def test_chi2_upper_against_scipy(con: duckdb.DuckDBPyConnection) -> None:
    rng = np.random.default_rng(6)
    rows = []
    for _ in range(400):
        df = int(rng.integers(1, 5000))
        q = stats.chi2.isf(10 ** rng.uniform(-100, 0), df)
        rows.append((float(q), df, 0.0, float(stats.chi2.sf(q, df))))  # scipy.stats.chi2.sf
    assert worst(con, "tl_chi2_upper(a, b)", rows) < 1e-10


def test_norm_two_sided_against_scipy(con: duckdb.DuckDBPyConnection) -> None:
    zs = np.concatenate([np.linspace(-38, 38, 3001), 10 ** np.linspace(-8, 1.5, 300)])
    rows = [(float(z), 0.0, 0.0, float(2 * stats.norm.sf(abs(z)))) for z in zs]  # scipy
    assert worst(con, "tl_norm_two_sided(a)", rows) < 1e-11


def test_edges_are_null_or_exact(con: duckdb.DuckDBPyConnection) -> None:
    row = con.execute(
        "SELECT tl_f_upper(0, 2, 3), tl_f_upper(NULL, 2, 3), tl_f_upper(1, 0, 3), "
        "tl_f_upper('inf'::DOUBLE, 2, 3), tl_chi2_upper(0, 4), tl_chi2_upper(2, 0), "
        "tl_norm_two_sided(0), tl_norm_two_sided(NULL), tl_norm_two_sided(-1e6)"
    ).fetchone()
    assert row == (1.0, None, None, 0.0, 1.0, None, 1.0, None, 0.0)
    # closed forms (from memory): P(chi2(2) > q) = exp(-q / 2); P(F(2, 2) > f) = 1 / (1 + f)
    two = con.execute("SELECT tl_chi2_upper(7.0, 2), tl_f_upper(3.0, 2, 2)").fetchone()
    assert two is not None
    assert two[0] == pytest.approx(np.exp(-3.5), rel=1e-13)
    assert two[1] == pytest.approx(0.25, rel=1e-13)
