"""The stored per-group sums (src/trendledger/views/moments.py, sql/moments/*.sql).

Every append merges the sums of its own rows into ``tl_moments_<fit>``; the fit views read
those sums. The reference in every test is the full two-pass recompute from every row, the
views ``fit_<fit>_full_moments`` and ``fit_<fit>_full`` of the same store, or NIST's certified
values. Accuracy is shown as LRE (correct significant digits, see tests/test_fit_view.py).
"""

from __future__ import annotations

import math
import random
from fractions import Fraction

import numpy as np
import pytest

from trendledger import Ledger

from . import strd
from .conftest import Lab, nist_dir
from .test_fit_view import COLUMNS, exact_line, lre

SUMS = ["n", "n_rows", "x_mean", "y_mean", "sxx", "sxy", "syy", "rss", "x_min", "x_max",
        "y_min", "y_max"]
RTOL = 1e-12

XY_SPEC = """\
[source]
files = "incoming/{day}/{part}.csv"
format = "csv"

[source.columns]
unit = "VARCHAR"
x = "DOUBLE"
y = "DOUBLE"

[source.fields]
day = "DATE"
part = "VARCHAR"

[[fit]]
name = "line"
group = ["unit"]
x = "x"
y = "y"
through_origin = __ORIGIN__
"""


def xy_spec(through_origin: bool = False) -> str:
    return XY_SPEC.replace("__ORIGIN__", "true" if through_origin else "false")


def day_name(i: int) -> str:
    return f"2026-{1 + i // 28:02d}-{1 + i % 28:02d}"


def write_xy(lab: Lab, day: int, rows: list[tuple[str | None, str, str]], part: str = "a"):
    """One file of (unit, x, y) rows as text; None or '' leaves a cell empty (NULL)."""
    body = "".join(f"{u or ''},{x},{y}\n" for u, x, y in rows)
    return lab.write(f"incoming/{day_name(day)}/{part}.csv", "unit,x,y\n" + body)


def rows_by_group(led: Ledger, view: str, columns: list[str]) -> dict[object, dict]:
    """The view's rows keyed by the fit's group (a tuple when it has several columns)."""
    fit = led.spec.fit(view.removeprefix("fit_").split("_")[0])
    group = list(fit.group)
    cols = ", ".join(f'"{c}"' for c in group + columns)
    cur = led.con.execute(f'SELECT {cols} FROM "{view}"')
    out = {}
    for row in cur.fetchall():
        key = row[0] if len(group) == 1 else tuple(row[: len(group)])
        out[key] = dict(zip(columns, row[len(group):], strict=True))
    return out


def assert_same(ours: dict, ref: dict, columns: list[str], rtol: float = RTOL,
                where: str = "") -> None:
    assert set(ours) == set(ref), where
    for key, row in ours.items():
        for col in columns:
            a, b = row[col], ref[key][col]
            if isinstance(b, float) and isinstance(a, float):
                assert math.isclose(a, b, rel_tol=rtol, abs_tol=0.0), (where, key, col, a, b)
            else:
                assert a == b, (where, key, col, a, b)


def assert_matches_full(led: Ledger, fit: str = "fade", where: str = "") -> None:
    """Stored sums and the fit on them against the full two-pass recompute, same store."""
    assert_same(rows_by_group(led, f"fit_{fit}_moments", SUMS),
                rows_by_group(led, f"fit_{fit}_full_moments", SUMS), SUMS, where=where)
    stats = [c for c in COLUMNS if c not in ("slope_p",)]
    ours = rows_by_group(led, f"fit_{fit}", stats + ["slope_p"])
    ref = rows_by_group(led, f"fit_{fit}_full", stats + ["slope_p"])
    assert_same(ours, ref, stats, where=where)
    # p-values come through the t macros, which magnify a relative error in t
    assert_same(ours, ref, ["slope_p"], rtol=1e-9, where=where)


# --- the algebra of the merge ---------------------------------------------------------------


def exact_sums(xs: list[Fraction], ys: list[Fraction]) -> tuple:
    n = len(xs)
    mx, my = sum(xs) / n, sum(ys) / n
    sxx = sum((x - mx) ** 2 for x in xs)
    sxy = sum((x - mx) * (y - my) for x, y in zip(xs, ys, strict=True))
    syy = sum((y - my) ** 2 for y in ys)
    rss = syy - (sxy * sxy / sxx if sxx else 0)
    return n, mx, my, sxx, sxy, syy, rss


def test_rss_merge_identity_in_exact_arithmetic() -> None:
    # The identities of sql/moments/merge.sql (with an intercept and through the origin),
    # checked in exact rational arithmetic (fractions.Fraction) on random small sets, constant
    # x and single points included: merging the sums of A and B gives the sums of A and B
    # together.
    rng = random.Random(11)

    def points(k: int) -> tuple[list[Fraction], list[Fraction]]:
        ys = [Fraction(rng.randint(-9, 9)) for _ in range(k)]
        if rng.random() < 0.25:
            return [Fraction(rng.randint(-3, 3))] * k, ys
        return [Fraction(rng.randint(-9, 9), rng.randint(1, 4)) for _ in range(k)], ys

    for _ in range(2000):
        xa, ya = points(rng.randint(1, 6))
        xb, yb = points(rng.randint(1, 6))
        na, mxa, mya, sa, pa, qa, ra = exact_sums(xa, ya)
        nb, mxb, myb, sb, pb, qb, rb = exact_sums(xb, yb)
        n, mx, my, sxx, sxy, syy, rss = exact_sums(xa + xb, ya + yb)
        w, dx, dy = Fraction(na * nb, n), mxb - mxa, myb - mya
        assert (mx, my) == (mxa + dx * nb / n, mya + dy * nb / n)
        assert (sxx, sxy, syy) == (sa + sb + w * dx * dx, pa + pb + w * dx * dy,
                                   qa + qb + w * dy * dy)
        ba = pa / sa if sa else 0
        bb = pb / sb if sb else 0
        if sxx:
            correction = (sa * sb * (ba - bb) ** 2 + w * sa * (dy - ba * dx) ** 2
                          + w * sb * (dy - bb * dx) ** 2) / sxx
        else:
            correction = w * dy * dy
        assert rss == ra + rb + correction
        # through the origin: uncentred sums
        sa, pa, qa = (sum(x * x for x in xa), sum(x * y for x, y in zip(xa, ya, strict=True)),
                      sum(y * y for y in ya))
        sb, pb, qb = (sum(x * x for x in xb), sum(x * y for x, y in zip(xb, yb, strict=True)),
                      sum(y * y for y in yb))
        ra = qa - (pa * pa / sa if sa else 0)
        rb = qb - (pb * pb / sb if sb else 0)
        sxx, sxy, syy = sa + sb, pa + pb, qa + qb
        rss = syy - (sxy * sxy / sxx if sxx else 0)
        correction = sa * sb * (pa / sa - pb / sb) ** 2 / sxx if sa and sb else 0
        assert rss == ra + rb + correction


# --- a store appended day by day ------------------------------------------------------------


def fade_rows(rng: np.random.Generator, day: int, cell: int, k: int) -> list[tuple[int, float]]:
    cycles = np.arange(day * k, (day + 1) * k) + 1
    cap = 3.0 - (2e-4 + 1e-5 * cell) * cycles + rng.normal(0.0, 2e-3, size=k)
    return [(int(c), float(f"{v:.9f}")) for c, v in zip(cycles, cap, strict=True)]


def test_thirty_appends_a_retract_and_a_replace_match_the_full_recompute(lab: Lab) -> None:
    # Well-conditioned data (tests/conftest.py Lab: 30 day folders, one append per day); the
    # reference is the full two-pass recompute of the same store (fit_fade_full_moments and
    # fit_fade_full), which must agree to 1e-12 relative.
    rng = np.random.default_rng(30)
    with lab.init() as led:
        for day in range(30):
            cells = {f"c{c}": fade_rows(rng, day, c, 8 + c) for c in range(5)}
            if day == 12:
                cells["solo"] = [(1, 2.5), (2, 2.4), (3, 2.45)]  # a group in one file only
            lab.day(day_name(day), cells)
            summary = led.append()
            assert summary.files == len(cells)
        assert led.con.execute("SELECT count(*) FROM tl_moments_fade").fetchone()[0] == 6
        assert_matches_full(led, where="after 30 appends")
        statuses = set(led.fits("fade")["status"])
        assert statuses == {"ok"}

        # retract a whole batch (every cell and the solo group lose rows or vanish)
        led.retract(why="bad calibration", batch=13)
        assert "solo" not in set(led.fits("fade")["cell"])
        assert_matches_full(led, where="after retracting batch 13")
        # retract one file
        led.retract(why="sensor swap", file=f"incoming/{day_name(4)}/c2.csv")
        assert_matches_full(led, where="after retracting one file")

        # replace a file with other content: its old rows go, the new ones are merged
        lab.day(day_name(7), {"c1": fade_rows(np.random.default_rng(5), 7, 1, 20)})
        summary = led.append(replace=True)
        assert summary.replaced == 1
        assert_matches_full(led, where="after a replace")
        # and appending goes on from there
        lab.day(day_name(30), {f"c{c}": fade_rows(rng, 30, c, 8) for c in range(5)})
        led.append()
        assert_matches_full(led, where="after one more append")


def test_degenerate_groups_across_batches(lab: Lab) -> None:
    # Groups that are degenerate in some or all batches: the stored sums must give the same
    # status and statistics as the full recompute (fit_line_full).
    lab = Lab(lab.root, xy_spec())
    with lab.init() as led:
        for day in range(4):
            rows: list[tuple[str | None, str, str]] = []
            rows += [("constant_x", "3", str(day + k)) for k in range(3)]
            rows += [("constant_y", str(day * 3 + k), "0.1") for k in range(3)]
            rows += [("line", str(day * 2 + k), str(3 * (day * 2 + k) - 2)) for k in range(2)]
            rows += [("one_per_day", str(day), str(day * day % 3))]
            rows += [("no_pairs", str(day), "")]
            rows += [(None, str(day + 0.5), str(day % 2))]  # NULL group key
            rows += [("x_late", "7", str(day))] if day < 3 else [("x_late", "8", "1")]
            write_xy(lab, day, rows)
            led.append()
        assert_matches_full(led, "line", where="degenerate groups")
        fits = led.fits("line").set_index("unit", drop=False)
        status = {u if u == u else None: s for u, s in zip(fits["unit"], fits["status"],
                                                           strict=True)}
        assert status == {
            "constant_x": "constant_x", "constant_y": "constant_y", "line": "perfect_fit",
            "one_per_day": "ok", "no_pairs": "too_few_points", None: "ok", "x_late": "ok",
        }
        sums = rows_by_group(led, "fit_line_moments", SUMS)
        assert sums["no_pairs"]["n"] == 0 and sums["no_pairs"]["n_rows"] == 4
        assert sums["constant_x"]["sxx"] == 0.0 and sums["constant_y"]["syy"] == 0.0
        assert sums["line"]["rss"] == 0.0


def test_spec_update_builds_the_new_fits_table_from_the_stored_rows(lab: Lab) -> None:
    # A fit added to a filled store gets its table from every stored row; a removed fit's
    # table is dropped; the reference is the full recompute.
    rng = np.random.default_rng(2)
    with lab.init() as led:
        for day in range(3):
            lab.day(day_name(day), {f"c{c}": fade_rows(rng, day, c, 6) for c in range(3)})
            led.append()
        bigger = lab.spec.read_text() + (
            '\n[[fit]]\nname = "origin"\ngroup = ["cell", "day"]\nx = "cycle"\n'
            'y = "capacity_ah"\nthrough_origin = true\n'
        )
        lab.spec.write_text(bigger)
        change = led.update_spec(lab.spec)
        assert change.added_fits == ["origin"]
        assert led.con.execute("SELECT count(*) FROM tl_moments_origin").fetchone()[0] == 9
        assert_matches_full(led, "origin", where="built by the spec update")
        lab.day(day_name(3), {f"c{c}": fade_rows(rng, 3, c, 6) for c in range(3)})
        led.append()
        assert_matches_full(led, "origin", where="appended after the update")
        assert_matches_full(led, "fade", where="appended after the update")
        # a new level refits from the stored sums; the sums table is kept as it is
        sums_before = rows_by_group(led, "fit_origin_moments", SUMS)
        lab.spec.write_text(bigger.replace("through_origin = true",
                                           "through_origin = true\nlevel = 0.9"))
        assert led.update_spec(lab.spec).changed_fits == ["origin"]
        assert rows_by_group(led, "fit_origin_moments", SUMS) == sums_before
        assert_matches_full(led, "origin", where="after a new level")
        lab.spec.write_text(bigger.split("[[fit]]")[0] + "[[fit]]" + bigger.split("[[fit]]")[2])
        led.update_spec(lab.spec)
        tables = {r[0] for r in led.con.execute(
            "SELECT table_name FROM duckdb_tables() WHERE table_name LIKE 'tl_moments%' "
            "OR table_name LIKE 'tl_fit%'").fetchall()}
        assert tables == {"tl_moments", "tl_moments_origin", "tl_fit_origin"}


# --- NIST StRD, appended in batches -----------------------------------------------------------


def nist(name: str) -> strd.Dataset:
    folder = nist_dir()
    if folder is None:
        pytest.skip("NIST StRD files not found: set TRENDLEDGER_NIST_DIR or provide "
                    "../shared/reference/nist-strd/ beside the repository")
    return strd.read(folder / f"{name}.dat")


def append_in_batches(lab: Lab, data: strd.Dataset, days: int, copies: int = 1) -> Ledger:
    """The dataset's rows, as printed, spread over ``days`` daily files.

    Each copy is a group of its own (s0, s1, ...) whose rows are shuffled with its own seed,
    so every copy is split over the days differently.
    """
    ix, iy = data.columns.index("x"), data.columns.index("y")
    per_day: list[list[tuple[str, str, str]]] = [[] for _ in range(days)]
    for copy in range(copies):
        rows = [(f"s{copy}", r[ix], r[iy]) for r in data.rows_text]
        random.Random(copy).shuffle(rows)
        for day in range(days):
            per_day[day] += rows[day::days]
    led = lab.init()
    for day in range(days):
        write_xy(lab, day, per_day[day])  # type: ignore[arg-type]
        led.append()
    return led


def rss_digits(led: Ledger, exact_rss: Fraction) -> dict[str, tuple[float, float]]:
    """Per group: LRE of the stored rss, and of syy - sxy^2 / sxx from the same stored sums."""
    return {
        unit: (lre(rss, exact_rss), lre(syy - sxy * sxy / sxx, exact_rss))
        for unit, rss, sxx, sxy, syy in led.con.execute(
            "SELECT unit, rss, sxx, sxy, syy FROM fit_line_moments").fetchall()
    }


@pytest.mark.parametrize("days", [3, 4, 5])
def test_norris_appended_in_batches_meets_certified_values(tmp_path, days) -> None:
    # NIST StRD Norris.dat, its 36 rows spread over 3 to 5 daily files (8 copies, each split
    # differently): every certified value of the straight-line fit with LRE >= 12 from the
    # merged sums. The carried rss against the naive syy - sxy^2 / sxx of the same merged sums
    # shows what the carried correction buys: Norris has 1 - r2 = 6e-6, so the naive form
    # loses about five digits and falls below the bar.
    data = nist("Norris")
    lab = Lab(tmp_path / "lab", xy_spec())
    with append_in_batches(lab, data, days, copies=8) as led:
        fits = led.fits("line")
        assert set(fits["status"]) == {"ok"} and set(fits["n"]) == {len(data.rows_text)}
        b0, b1 = data.parameters["B0"], data.parameters["B1"]
        checks = {
            "intercept": b0[0], "intercept_se": b0[1], "slope": b1[0], "slope_se": b1[1],
            "resid_sd": data.resid_sd, "r2": data.r2,
        }
        worst = min(lre(float(value), cert.exact)
                    for col, cert in checks.items() for value in fits[col])
        assert worst >= 12, worst
        digits = rss_digits(led, data.anova["Residual"][1].exact)
        carried = sorted(d[0] for d in digits.values())
        naive = sorted(d[1] for d in digits.values())
        print(f"\nNorris in {days} batches, 8 splits: statistics LRE >= {worst:.1f}; rss LRE "
              f"carried min {carried[0]:.1f} median {np.median(carried):.1f}, naive min "
              f"{naive[0]:.1f} median {np.median(naive):.1f}")
        assert carried[0] >= 12, digits
        # the naive form would fail the bar: the test can tell the two apart
        assert naive[0] < 12 and np.median(carried) - np.median(naive) >= 2, digits


@pytest.mark.parametrize("name", ["NoInt1", "NoInt2"])
def test_through_origin_appended_in_batches_meets_certified_values(tmp_path, name) -> None:
    # NIST StRD NoInt1.dat and NoInt2.dat (y = B1 x, R-squared uncentred), rows spread over
    # several daily files: certified values with LRE >= 12 from the merged sums.
    data = nist(name)
    lab = Lab(tmp_path / "lab", xy_spec(through_origin=True))
    days = min(4, len(data.rows_text) - 1)
    with append_in_batches(lab, data, days) as led:
        row = led.fits("line").iloc[0]
        assert row["status"] == "ok" and row["n"] == len(data.rows_text)
        b1 = data.parameters["B1"]
        checks = {"slope": b1[0], "slope_se": b1[1], "resid_sd": data.resid_sd, "r2": data.r2}
        digits = {col: lre(float(row[col]), cert.exact) for col, cert in checks.items()}
        digits["rss"] = rss_digits(led, data.anova["Residual"][1].exact)["s0"][0]
        print(f"\n{name} in {days} batches: {digits}")
        assert all(d >= 12 for d in digits.values()), digits


@pytest.mark.parametrize("days", [12, 36])
def test_norris_far_from_zero_in_batches_against_exact_arithmetic(tmp_path, days) -> None:
    # NIST StRD Norris.dat with x and y moved by +1e9, rows over 12 or 36 daily files; the
    # reference is the exact least squares answer (fractions.Fraction) for the shifted float64
    # inputs (tests/test_fit_view.py exact_line). The means travel from merge to merge in two
    # parts, so they keep the digits a float64 mean of size 1e9 would drop.
    data = nist("Norris")
    xs = [v + 1e9 for v in data.column("x")]
    ys = [v + 1e9 for v in data.column("y")]
    rows = [("s", repr(x), repr(y)) for x, y in zip(xs, ys, strict=True)]
    random.Random(days).shuffle(rows)
    lab = Lab(tmp_path / "lab", xy_spec())
    with lab.init() as led:
        for day in range(days):
            write_xy(lab, day, rows[day::days])  # type: ignore[arg-type]
            led.append()
        row = led.fits("line").iloc[0]
        exact = exact_line(xs, ys)
        digits = {col: lre(float(row[col]), exact[col]) for col in exact}
        print(f"\nNorris + 1e9 in {days} batches: {digits}")
        assert all(d >= 12 for c, d in digits.items() if c != "intercept"), digits
        assert digits["intercept"] >= 10, digits


def test_perfect_line_far_from_zero_in_batches(lab: Lab) -> None:
    # y = 3 x - 2 on integers near 1e9 (exact in float64), one batch a day: the merged sums
    # find no residual, as the full recompute does (fit_line_full).
    lab = Lab(lab.root, xy_spec())
    with lab.init() as led:
        for day in range(6):
            xs = [10**9 + 7 * day + k for k in range(3)]
            write_xy(lab, day, [("a", str(x), str(3 * x - 2)) for x in xs])
            led.append()
        got = led.fits("line").iloc[0]
        full = led.fits("line", view="full").iloc[0]
        assert got["status"] == full["status"] == "perfect_fit"
        assert got["slope"] == 3.0 and got["intercept"] == -2.0
