"""The HTML report: what it embeds, what its tables say, how a browser shows it, and what
its plots draw (checked on the drawn data, not on pixels)."""

from __future__ import annotations

import base64
import math
import shutil
import struct
import subprocess
from datetime import date, timedelta
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from trendledger import Ledger, __version__
from trendledger.cli import app
from trendledger.demo import run
from trendledger.report.build import CAUTION, LABEL, SCRIPT, label_sql, plain_reason, table

from .conftest import Lab

plots = pytest.importorskip("trendledger.report.plots", reason="the report needs matplotlib")

DEMO_DAYS = 72  # the knees fall on days 57-64; by day 72 every knee cell alerts
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


# -- helpers -------------------------------------------------------------------------------


class Page(HTMLParser):
    """Collects what the tests look at: images, links, scripts and every table's cells."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.images: list[dict[str, str]] = []
        self.links: list[str] = []
        self.scripts: list[dict[str, str]] = []
        self.stylesheets = 0
        self.meta: dict[str, str] = {}
        self.tables: dict[str, dict[str, list[Any]]] = {}
        self.text: list[str] = []
        self._table: str | None = None
        self._part = "body"
        self._row: list[str] | None = None
        self._row_attrs: dict[str, str] = {}
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "img":
            self.images.append(a)
        elif tag == "a" and "href" in a:
            self.links.append(a["href"])
        elif tag == "script":
            self.scripts.append(a)
        elif tag == "meta" and "http-equiv" in a:
            self.meta[a["http-equiv"]] = a.get("content", "")
        elif tag == "link" and a.get("rel") == "stylesheet":
            self.stylesheets += 1
        elif tag == "table":
            self._table = a.get("id", f"table{len(self.tables)}")
            self.tables[self._table] = {"head": [], "body": [], "foot": [], "attrs": []}
        elif tag in ("thead", "tbody", "tfoot"):
            self._part = {"thead": "head", "tbody": "body", "tfoot": "foot"}[tag]
        elif tag == "tr":
            self._row, self._row_attrs = [], a
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None and self._table is not None:
            self.tables[self._table][self._part].append(self._row)
            if self._part == "body":
                self.tables[self._table]["attrs"].append(self._row_attrs)
            self._row = None
        elif tag == "table":
            self._table = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)
        self.text.append(data)

    def rows(self, table_id: str) -> list[dict[str, str]]:
        t = self.tables[table_id]
        head = t["head"][0]
        return [dict(zip(head, row, strict=True)) for row in t["body"]]


def parse(path: Path) -> Page:
    page = Page()
    page.feed(path.read_text(encoding="utf-8"))
    page.close()
    return page


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk (PNG spec, section 11.2.2)."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    width, height = struct.unpack(">II", data[16:24])
    return width, height


def overlap(a: Any, b: Any) -> bool:
    return bool(a[0] < b[2] and a[2] > b[0] and a[1] < b[3] and a[3] > b[1])


def by_gid(ax: Any, gid: str) -> list[Any]:
    return [a for a in ax.get_children() if a.get_gid() == gid]


# -- the demo's report ---------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """The demo run once for the module: its store, its printed lines, its report."""
    folder = tmp_path_factory.mktemp("demo")
    lines: list[str] = []
    store = run(folder, days=DEMO_DAYS, echo=lines.append)
    return {"folder": folder, "store": store, "lines": lines,
            "index": folder / "report" / "index.html"}


def test_demo_ends_by_writing_the_report(demo: dict[str, Any]) -> None:
    last = demo["lines"][-1].strip()
    assert last == f"report: {demo['index']}"
    assert demo["index"].is_file()


def test_page_parses_and_every_image_is_an_embedded_png(demo: dict[str, Any]) -> None:
    page = parse(demo["index"])
    assert len(page.images) >= 2  # overview and the alerting groups at least
    for img in page.images:
        src = img["src"]
        assert src.startswith("data:image/png;base64,"), src[:60]
        data = base64.b64decode(src.split(",", 1)[1], validate=True)
        width, height = png_size(data)
        assert 400 <= width <= 4000 and 300 <= height <= 6000, (width, height)
        assert img.get("alt")
    # The same images sit beside the page as files, byte for byte.
    beside = {p.name: p.read_bytes() for p in demo["index"].parent.glob("*.png")}
    embedded = sorted(base64.b64decode(i["src"].split(",", 1)[1]) for i in page.images)
    assert sorted(beside.values()) == embedded
    assert "overview.png" in beside and "groups.png" in beside


def test_page_needs_nothing_from_outside(demo: dict[str, Any]) -> None:
    text = demo["index"].read_text(encoding="utf-8")
    page = parse(demo["index"])
    assert page.stylesheets == 0
    assert all("src" not in s for s in page.scripts)
    # Links are the page's own anchors and the PNG files beside it.
    for href in page.links:
        assert href.startswith("#") or (href.endswith(".png") and "/" not in href), href
    assert "http://" not in text and "https://" not in text
    policy = page.meta["Content-Security-Policy"]
    assert "default-src 'none'" in policy and "img-src data:" in policy


def test_alert_table_lists_the_alerting_groups(demo: dict[str, Any]) -> None:
    page = parse(demo["index"])
    shown = {a["data-group"] for a in page.tables["alerts"]["attrs"]}
    with Ledger.open(demo["store"], read_only=True) as led:
        fit = led.spec.fit(None)
        names = {r[0] for r in led.con.execute("SELECT view_name FROM duckdb_views()").fetchall()}
        if f"{fit.view}_alerts" in names:
            expected = {r[0] for r in led.con.execute(
                f'SELECT DISTINCT {label_sql(fit.group)} FROM "{fit.view}_alerts"').fetchall()}
        else:
            # Without the view the report stands in with r2 below min_r2 and says so.
            expected = set(led.fits(where=f"r2 < {fit.min_r2}")["cell"])
            assert "has no alerts view" in demo["index"].read_text(encoding="utf-8")
    assert shown == expected
    # The knee cells and the glitch cell are what the scenario plants (demo_data.py).
    assert {"c07", "c15", "c23", "c41"} <= shown
    # Every reason reads as words, not a bare code.
    for row in page.rows("alerts"):
        assert " " in row["reason"], row


def test_fits_table_has_every_group_and_marks_the_alerting_ones(demo: dict[str, Any]) -> None:
    page = parse(demo["index"])
    alerting = {a["data-group"] for a in page.tables["alerts"]["attrs"]}
    rows = page.rows("fits")
    assert [r["cell"] for r in rows] == [f"c{i:02d}" for i in range(1, 50)]
    assert {r["cell"] for r in rows if r["alert"] == "alert"} == alerting
    marked = {a["data-group"] for a in page.tables["fits"]["attrs"] if a.get("class") == "alert"}
    assert marked == alerting


def test_lineage_counts_equal_ingest_files(demo: dict[str, Any]) -> None:
    page = parse(demo["index"])
    rows = page.rows("lineage-batches")
    with Ledger.open(demo["store"], read_only=True) as led:
        truth = led.query(
            "SELECT batch_id, count(*) AS files, "
            "count(*) FILTER (WHERE status = 'loaded') AS loaded, "
            "count(*) FILTER (WHERE status = 'replaced') AS replaced, "
            "count(*) FILTER (WHERE status = 'rejected') AS rejected, "
            "count(*) FILTER (WHERE status = 'retracted') AS retracted, "
            "sum(rows) AS rows FROM ingest_files GROUP BY batch_id ORDER BY batch_id")
        total = led.con.execute("SELECT count(*), sum(rows) FROM ingest_files").fetchone()
        bad = led.con.execute(
            "SELECT path, message FROM ingest_files WHERE status = 'rejected' ORDER BY file_id"
        ).fetchall()
    assert len(rows) == len(truth) == DEMO_DAYS
    for shown, want in zip(rows, truth.itertuples(index=False), strict=True):
        assert int(shown["batch_id"]) == want.batch_id
        for col in ("files", "loaded", "replaced", "rejected", "retracted", "rows"):
            assert int(shown[col]) == int(getattr(want, col)), (shown, col)
    foot = dict(zip(page.tables["lineage-batches"]["head"][0],
                    page.tables["lineage-batches"]["foot"][0], strict=True))
    assert total is not None
    assert int(foot["files"]) == total[0] and int(foot["rows"]) == total[1]
    assert [(r["path"], r["why"]) for r in page.rows("lineage-rejected")] == bad
    assert len(bad) == 1  # the truncated file of the scenario
    changed = page.rows("lineage-changed")
    assert [r["status"] for r in changed] == ["replaced"]
    assert changed[0]["what"].startswith("replaced by file")


def test_footer_traces_the_report_and_projections_carry_a_caution(
        demo: dict[str, Any]) -> None:
    text = " ".join("".join(parse(demo["index"]).text).split())
    with Ledger.open(demo["store"], read_only=True) as led:
        spec_hash = led.info["spec_hash"]
    assert str(Path(demo["store"]).resolve()) in text
    assert spec_hash in text
    assert f"trendledger {__version__}" in text
    assert CAUTION in text  # the demo's fit has a limit


def test_cli_since_groups_and_pair(demo: dict[str, Any], tmp_path: Path) -> None:
    runner = CliRunner()
    store = str(demo["store"])
    out = tmp_path / "r1"
    tomorrow = (date.today() + timedelta(days=2)).isoformat()
    result = runner.invoke(app, ["report", "--store", store, "--out", str(out), "--since",
                                 tomorrow, "--groups", "c01,c02", "--groups", "c03",
                                 "--pair", "slope_t,resid_sd"])
    assert result.exit_code == 0, result.output
    assert result.stdout.strip() == f"wrote {out / 'index.html'}"
    page = parse(out / "index.html")
    # No batch started after tomorrow: the lineage is empty and its totals are zero.
    assert page.rows("lineage-batches") == []
    foot = dict(zip(page.tables["lineage-batches"]["head"][0],
                    page.tables["lineage-batches"]["foot"][0], strict=True))
    assert foot["files"] == "0"
    alts = " ".join(i["alt"] for i in page.images)
    assert "c01" in alts and "c02" in alts and "c03" in alts
    assert "slope_t against resid_sd" in alts


@pytest.mark.parametrize(("args", "message"), [
    (["--groups", "c99"], "has no group 'c99'"),
    (["--pair", "slop,r2"], "did you mean 'slope'"),
    (["--pair", "slope"], "two fit columns"),
    (["--pair", "status,r2"], "not a numeric column"),
    (["--since", "last week"], "not a date"),
])
def test_cli_refuses_bad_options_in_one_line(
        demo: dict[str, Any], tmp_path: Path, args: list[str], message: str) -> None:
    result = CliRunner().invoke(app, ["report", "--store", str(demo["store"]), "--out",
                                      str(tmp_path / "r"), *args])
    assert result.exit_code == 2
    assert result.stderr.startswith("trendledger: error: ") and message in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


# -- a real browser ------------------------------------------------------------------------


def chromium() -> str:
    found = shutil.which("chromium")
    if found is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install -y chromium)")
    return found


def browse(page: Path, profile: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    """Chromium, headless, with nothing that reaches out; console messages go to stderr."""
    return subprocess.run(
        [chromium(), "--headless", "--no-sandbox", "--disable-gpu",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--no-first-run", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
         *extra, page.resolve().as_uri()],
        capture_output=True, text=True, timeout=120, check=False,
    )


def console_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines()
            if ":CONSOLE" in line or "Uncaught" in line or "Refused to" in line]


def distinct_pixels(png: Path) -> int:
    from matplotlib.image import imread

    pixels = imread(str(png))
    flat = (pixels[..., :3] * 255).round().astype(np.uint8).reshape(-1, 3)
    return len(np.unique(flat, axis=0))


@pytest.mark.slow
def test_browser_shows_the_page_without_console_errors(demo: dict[str, Any],
                                                       tmp_path: Path) -> None:
    shot = tmp_path / "shot.png"
    done = browse(demo["index"], tmp_path / "profile", f"--screenshot={shot}",
                  "--window-size=1200,2000")
    assert done.returncode == 0, done.stderr[-2000:]
    assert shot.is_file()
    assert png_size(shot.read_bytes()) == (1200, 2000)
    assert distinct_pixels(shot) > 200  # text, plots and colours: far from a blank page
    assert console_lines(done.stderr) == []
    dom = browse(demo["index"], tmp_path / "profile2", "--dump-dom")
    assert dom.returncode == 0
    assert 'data-report-script="ready"' in dom.stdout  # the sorting script ran
    assert console_lines(dom.stderr) == []


@pytest.mark.slow
def test_browser_sorts_a_table_by_a_clicked_heading(tmp_path: Path) -> None:
    """The report's script on a small table; a probe script clicks and writes the order."""
    frame = pd.DataFrame({"name": ["b", "a", "c", "d"], "value": [2.5, 10.0, None, -1.0]})
    probe = """
    var heads = document.querySelectorAll("#t th button");
    heads[1].click();
    var first = Array.prototype.map.call(document.querySelectorAll("#t tbody tr"),
        function (r) { return r.cells[0].textContent; }).join("");
    heads[1].click();
    var second = Array.prototype.map.call(document.querySelectorAll("#t tbody tr"),
        function (r) { return r.cells[0].textContent; }).join("");
    document.body.setAttribute("data-order", first + "|" + second);
    """
    page = tmp_path / "sort.html"
    page.write_text("<!DOCTYPE html><html><body>" + table(frame, ["name", "value"], table_id="t")
                    + f"<script>{SCRIPT}</script><script>{probe}</script></body></html>",
                    encoding="utf-8")
    dom = browse(page, tmp_path / "profile", "--dump-dom")
    assert dom.returncode == 0
    assert console_lines(dom.stderr) == []
    # Ascending: -1, 2.5, 10, then the empty cell; descending keeps the empty cell last.
    assert 'data-order="dbac|abdc"' in dom.stdout


# -- plots, checked on what they draw ------------------------------------------------------


def test_labels_neither_overlap_each_other_nor_the_markers() -> None:
    rng = np.random.default_rng(3)
    n = 100
    x = np.concatenate([rng.uniform(0, 1, 70), rng.normal(0.5, 0.03, 30)])
    y = np.concatenate([rng.uniform(0, 1, 70), rng.normal(0.5, 0.03, 30)])
    names = [f"unit{i:03d}" for i in range(n)]
    drawn = plots.overview(x, y, names, alerting=names[:40], label=names)
    fig = drawn.figure
    renderer = fig.canvas.get_renderer()
    fig.canvas.draw()
    ax = fig.axes[0]
    labels = by_gid(ax, "label")
    assert len(labels) == len(drawn.labels) > 60
    assert len(drawn.labels) + len(drawn.unplaced) == n
    # Boxes measured again after a full draw, text only (the leader is not part of it).
    from matplotlib.text import Text

    boxes = [Text.get_window_extent(t, renderer).extents for t in labels]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not overlap(a, b)
        for m in drawn.info["marker_boxes"]:
            assert not overlap(a, m)
        frame = ax.get_window_extent(renderer).extents
        assert frame[0] <= a[0] and a[2] <= frame[2] and frame[1] <= a[1] and a[3] <= frame[3]
    # A label away from its point has a leader line; one beside it has none.
    for text, placed in zip(labels, drawn.labels, strict=True):
        assert text.get_text() == placed.text
        assert (text.arrow_patch is not None) == placed.leader
    assert any(p.leader for p in drawn.labels)
    # Names that found no room are reported, never drawn on top of something.
    assert not set(drawn.unplaced) & {t.get_text() for t in labels}


def test_overview_marks_alerting_groups_by_shape_and_names_them() -> None:
    x = [0.99, 0.98, 0.5, 0.97, 0.2]
    y = [-1.0, -1.1, -3.0, -1.05, -0.9]
    names = ["a", "b", "c", "d", "e"]
    drawn = plots.overview(x, y, names, alerting=["c", "e"], chosen=["a"],
                           x_line=(0.9, "min_r2 0.9"))
    ax = drawn.figure.axes[0]
    assert len(by_gid(ax, "groups-alert")[0].get_offsets()) == 2
    assert len(by_gid(ax, "groups-chosen")[0].get_offsets()) == 1
    assert len(by_gid(ax, "groups-other")[0].get_offsets()) == 2
    assert {lab.text for lab in drawn.labels} == {"c", "e", "a"}
    assert drawn.unplaced == []
    markers = {g: by_gid(ax, g)[0].get_paths()[0] for g in ("groups-alert", "groups-other")}
    assert len(markers["groups-alert"].vertices) != len(markers["groups-other"].vertices)
    assert len(by_gid(ax, "reference")) == 1


def test_overview_keeps_a_far_reference_line_in_the_frame() -> None:
    # r2 of through-origin fits clusters within 1e-6 of 1: the min_r2 line far to the left
    # used to be captioned millions of pixels off the figure, and rendering failed.
    x = [1 - 1e-7, 1 - 2e-7, 1 - 3e-7]
    drawn = plots.overview(x, [-0.01, -0.02, -0.011], ["c0", "c1", "c2"], alerting=["c1"],
                           x_line=(0.9, "min_r2 0.9"))
    ax = drawn.figure.axes[0]
    lo, hi = ax.get_xlim()
    assert lo < 0.9 < hi and lo < min(x) and max(x) < hi
    assert drawn.png()[:8] == b"\x89PNG\r\n\x1a\n"


def test_palette_parts_in_greyscale() -> None:
    def lightness(colour: str) -> float:
        # CIE L* from sRGB (IEC 61966-2-1 transfer function, D65 white), from memory.
        r, g, b = (int(colour[i:i + 2], 16) / 255 for i in (1, 3, 5))

        def lin(c: float) -> float:
            return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

        y = 0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b)
        return 116 * y ** (1 / 3) - 16 if y > 0.008856 else 903.3 * y

    # Colours drawn next to each other differ in lightness, not only in hue.
    for a, b in [(plots.NAVY, plots.RUST), (plots.INK, plots.SKY), (plots.MIST, plots.RUST),
                 (plots.INK, plots.RUST), (plots.SKY, plots.NAVY)]:
        assert abs(lightness(a) - lightness(b)) >= 15, (a, b)


def _panel(limit: float | None = None, crossing: Any = None, outliers: int = 0,
           name: str = "u1") -> Any:
    rng = np.random.default_rng(11)
    x = np.arange(1.0, 61.0)
    y = 3.0 - 0.01 * x + rng.normal(0, 0.01, x.size)
    flag = np.zeros(x.size, dtype=bool)
    flag[:outliers] = True
    y[flag] -= 0.2
    X = np.column_stack([np.ones_like(x), x])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    sd = math.sqrt(float(resid @ resid) / (x.size - 2))
    return plots.Panel(name, x, y, flag, float(coef[1]), float(coef[0]), sd, x.size,
                       float(x.mean()), float(((x - x.mean()) ** 2).sum()), 2.0017,
                       limit=limit, crossing=crossing)


def test_panel_draws_both_limits_and_marks_readings_beyond_them_and_out_of_trend() -> None:
    from dataclasses import replace

    base = _panel(limit=2.2, crossing=plots.Crossing(x=80.0, lo=75.0, hi=86.0, bound=76.0))
    beyond = base.y > 2.98  # the first readings, above a ceiling of 2.98
    off = np.zeros(base.x.size, dtype=bool)
    off[-2:] = True
    drawn = plots.panels([replace(base, other_limit=2.98, beyond=beyond, off_trend=off)],
                         x_title="cycle", y_title="capacity", level=0.95)
    ax = drawn.figure.axes[0]
    assert by_gid(ax, "limit-other")[0].get_ydata()[0] == 2.98
    ringed = by_gid(ax, "beyond-limit")[0].get_offsets()
    assert len(ringed) == int(beyond.sum()) > 0
    assert np.allclose(np.asarray(ringed)[:, 0], base.x[beyond])
    assert np.allclose(np.asarray(by_gid(ax, "off-trend")[0].get_offsets())[:, 0], base.x[-2:])
    labels = {t.get_text() for t in drawn.figure.legends[0].get_texts()}
    assert {"reading beyond a limit", "reading out of trend"} <= labels


def test_group_panel_draws_points_line_band_limit_and_crossing() -> None:
    crossing = plots.Crossing(x=80.0, lo=75.0, hi=86.0, bound=76.0)
    drawn = plots.panels([_panel(limit=2.2, crossing=crossing, outliers=3), _panel(name="u2")],
                         x_title="cycle", y_title="capacity", level=0.95)
    ax1, ax2 = drawn.figure.axes[:2]
    assert len(by_gid(ax1, "points")[0].get_offsets()) == 57
    assert len(by_gid(ax1, "outliers")[0].get_offsets()) == 3
    for gid in ("fit-line", "band", "limit", "crossing", "crossing-band", "projection"):
        assert len(by_gid(ax1, gid)) == 1, gid
    assert by_gid(ax1, "limit")[0].get_ydata()[0] == 2.2
    assert by_gid(ax1, "crossing")[0].get_xdata()[0] == 80.0
    assert ax1.get_xlim()[1] >= 86.0 and ax1.get_ylim()[0] <= 2.2
    info = drawn.info["panels"]["u1"]
    assert info["outliers"] == 3 and info["points"] == 57
    # The plain panel: no limit, no crossing, no outlier marks.
    assert {a.get_gid() for a in ax2.get_children()} >= {"points", "fit-line", "band"}
    assert not by_gid(ax2, "limit") and not by_gid(ax2, "outliers")
    labels = [t.get_text() for t in drawn.figure.legends[0].get_texts()]
    assert "limit" in labels and "projected crossing, interval" in labels


def test_far_crossing_is_named_not_drawn() -> None:
    far = plots.Crossing(x=5000.0, lo=4000.0, hi=7000.0)
    drawn = plots.panels([_panel(limit=0.5, crossing=far)], x_title="x", y_title="y",
                         level=0.95)
    ax = drawn.figure.axes[0]
    assert not by_gid(ax, "crossing") and not by_gid(ax, "projection")
    note = by_gid(ax, "limit-note")[0].get_text()
    assert "limit 0.5 is below" in note and "projected crossing near 5000" in note
    assert ax.get_xlim()[1] < 100


def test_mean_band_matches_statsmodels() -> None:
    import statsmodels.api as sm
    from scipy import stats

    p = _panel()
    t = float(stats.t.ppf(0.975, p.n - 2))
    p.t = t
    grid = np.linspace(-10, 120, 27)
    fitted, lo, hi = plots.mean_band(p, grid)
    # Reference: statsmodels OLS, get_prediction(...).summary_frame, mean_ci_lower/upper.
    model = sm.OLS(p.y, sm.add_constant(p.x)).fit()
    ref = model.get_prediction(sm.add_constant(grid)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(fitted, ref["mean"], rtol=1e-9)
    np.testing.assert_allclose(lo, ref["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(hi, ref["mean_ci_upper"], rtol=1e-9)
    # Through the origin: statsmodels OLS without a constant column.
    slope = float(p.x @ p.y / (p.x @ p.x))
    resid = p.y - slope * p.x
    p0 = plots.Panel("o", p.x, p.y, p.outlier, slope, None,
                     math.sqrt(float(resid @ resid) / (p.n - 1)), p.n, p.x_mean, p.sxx,
                     float(stats.t.ppf(0.975, p.n - 1)), through_origin=True)
    fitted, lo, hi = plots.mean_band(p0, grid)
    ref = sm.OLS(p.y, p.x).fit().get_prediction(grid).summary_frame(alpha=0.05)
    np.testing.assert_allclose(lo, ref["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(hi, ref["mean_ci_upper"], rtol=1e-9)


def test_history_marks_windows_whose_interval_misses_the_whole_slope() -> None:
    starts = pd.date_range("2026-03-02", periods=6, freq="7D")
    windows = pd.DataFrame({
        "window_start": starts, "window_end": starts + pd.Timedelta(days=6),
        "slope": [-1.0, -1.1, -0.9, -3.0, -3.2, None],
        "slope_lo": [-1.3, -1.4, -1.2, -3.3, -3.5, None],
        "slope_hi": [-0.7, -0.8, -0.6, -2.7, -2.9, None],
    })
    drawn = plots.history([plots.History("u1", windows, -1.5, -1.6, -1.4),
                           plots.History("u2", windows.iloc[:0])],
                          x_title="date", y_title="slope")
    info = drawn.info["panels"]
    assert info["u1"] == {"windows": 5, "differ": 5}
    ax = drawn.figure.axes[0]
    assert len(by_gid(ax, "overall")) == 1 and len(by_gid(ax, "overall-band")) == 1
    assert info["u2"]["windows"] == 0
    narrow = windows.assign(slope_lo=windows["slope"] - 1, slope_hi=windows["slope"] + 1)
    drawn = plots.history([plots.History("u1", narrow, -1.5, -1.6, -1.4)],
                          x_title="date", y_title="slope")
    assert drawn.info["panels"]["u1"]["differ"] == 2  # only the two steep windows


# -- stores other than the demo ------------------------------------------------------------


def test_report_of_an_empty_store_says_so(lab: Lab, tmp_path: Path) -> None:
    with lab.init() as led:
        page_path = led.report(out=tmp_path / "r")
    page = parse(page_path)
    text = " ".join(page.text)
    assert "No group has values to plot yet." in text
    assert page.rows("lineage-batches") == [] and page.images == []


def test_report_with_two_group_columns_and_without_companion_views(lab: Lab,
                                                                   tmp_path: Path) -> None:
    spec = lab.spec.read_text().replace('group = ["cell"]', 'group = ["cell", "day"]')
    lab.spec.write_text(spec)
    rows = [(c, 3.0 - 0.01 * c + (0.02 if c % 2 else -0.02)) for c in range(1, 9)]
    lab.day("2026-03-02", {"c01": rows, "c02": [(c, 3.0 - 0.02 * c) for c in range(1, 9)]})
    with lab.init() as led:
        led.append()
        page_path = led.report(out=tmp_path / "r", groups=["c01 / 2026-03-02"])
        views = set(led.views()["name"])
    page = parse(page_path)
    assert [r["cell"] for r in page.rows("fits")] == ["c01", "c02"]
    assert any("c01 / 2026-03-02" in i["alt"] for i in page.images)
    text = " ".join(page.text)
    # Each companion view the store lacks leaves a note instead of its part.
    if "fit_fade_windows" not in views:
        assert "has no windows view" in text


def test_plain_reasons() -> None:
    assert "r2" in plain_reason("low_r2")
    assert "limit" in plain_reason("crossing_within_horizon")
    assert plain_reason("something_new") == "something new"
    # the label column takes the reserved prefix, which the spec refuses for user columns
    assert LABEL.startswith("tl_")


def test_panel_note_never_covers_a_marker() -> None:
    # falling data leave the upper right free, so the note went there; outliers put there
    # (readings far above the line at the latest x) must push it elsewhere
    # a crossing too far to draw is written in the note
    p = _panel(limit=0.5, crossing=plots.Crossing(x=5000.0, lo=4000.0, hi=7000.0))
    p.y[-6:] = 3.05
    p.outlier[-6:] = True
    drawn = plots.panels([p], x_title="cycle", y_title="capacity", level=0.95)
    fig = drawn.figure
    renderer = fig.canvas.get_renderer()
    fig.canvas.draw()
    ax = fig.axes[0]
    from matplotlib.text import Text

    note = by_gid(ax, "limit-note")[0]
    box = Text.get_window_extent(note, renderer).extents
    info = drawn.info["panels"]["u1"]
    assert info["note_on_markers"] == 0 and len(info["marker_boxes"]) == p.x.size
    for m in info["marker_boxes"]:
        assert not overlap(box, m)
    assert note.get_position() != (0.99, 0.97)  # moved from where it stood before
