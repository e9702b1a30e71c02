"""Figures for the report, drawn on matplotlib's Agg canvas.

Only :class:`matplotlib.figure.Figure` with an Agg canvas is used, never pyplot:
there is no global figure registry to leak into, and the backend of a caller who
uses pyplot (a notebook, say) is left alone. Each function returns a
:class:`Drawn`: the figure plus plain data on what was drawn, so tests can check
the content without looking at pixels. Artists that matter carry a ``gid``
(``points``, ``outliers``, ``fit-line``, ``band``, ``limit`` ...).

Colours: a blue and an orange family that colour-blind readers tell apart, at
clearly different lightness so they also part in greyscale; every role has its
own marker shape or line style as well, so no meaning rests on colour alone.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from io import BytesIO
from typing import Any, Literal

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backend_bases import RendererBase
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

#: Roles and colours, darkest first; lightness (CIE L*) in the comment.
INK = "#1c2430"  # 14: text, fitted lines
NAVY = "#24507d"  # 33: ordinary data points, window slopes
RUST = "#c8571b"  # 51: alerting groups, outliers, limits, windows that differ
GREY = "#7c8794"  # 56: other groups' edges, reference lines
SKY = "#9cc0e3"  # 76: confidence bands
SAND = "#f0c27a"  # 81: projected crossing interval
MIST = "#d5dde6"  # 88: other groups' fill

DPI = 110
FONT = 8.5


@dataclass(frozen=True)
class Label:
    """A label the placer put on the axes (box in display pixels: x0, y0, x1, y1)."""

    text: str
    x: float
    y: float
    offset: tuple[float, float]
    box: tuple[float, float, float, float]
    leader: bool


@dataclass
class Drawn:
    """A figure and what is on it."""

    figure: Figure
    labels: list[Label] = field(default_factory=list)
    unplaced: list[str] = field(default_factory=list)
    info: dict[str, Any] = field(default_factory=dict)

    def png(self) -> bytes:
        """The figure as PNG bytes, at the resolution it was laid out for."""
        buf = BytesIO()
        self.figure.savefig(buf, format="png", dpi="figure", metadata={"Software": None})
        return buf.getvalue()


def new_figure(width: float, height: float) -> tuple[Figure, RendererBase]:
    fig = Figure(figsize=(width, height), dpi=DPI, facecolor="white")
    canvas = FigureCanvasAgg(fig)
    return fig, canvas.get_renderer()


def _style(ax: Axes) -> None:
    ax.set_facecolor("white")
    ax.grid(True, color="#e6eaef", linewidth=0.7)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(GREY)
    ax.tick_params(labelsize=FONT - 0.5, colors=INK, length=3)


# -- label placement ------------------------------------------------------------------------

#: Distances (points) from a point to its label's nearest corner or edge; beyond the first
#: ring a thin leader line joins label and point.
RINGS = (4.0, 11.0, 19.0, 29.0, 41.0, 55.0)
#: Directions tried around each point, in order of preference (right first, as text reads).
DIRECTIONS = tuple(
    (math.cos(math.radians(a)), math.sin(math.radians(a)))
    for a in (0, 45, -45, 180, 135, -135, 90, -90, 22.5, -22.5, 157.5, -157.5, 67.5, -67.5,
              112.5, -112.5)
)


Across = Literal["left", "center", "right"]
Upright = Literal["bottom", "center", "top"]


def _align(ux: float, uy: float) -> tuple[Across, Upright]:
    """Text alignment that puts a label on the far side of its offset from the point."""
    ha: Across = "left" if ux > 0.3 else "right" if ux < -0.3 else "center"
    va: Upright = "bottom" if uy > 0.3 else "top" if uy < -0.3 else "center"
    return ha, va


def _overlaps(box: np.ndarray, boxes: np.ndarray) -> bool:
    if boxes.size == 0:
        return False
    return bool(np.any((box[0] < boxes[:, 2]) & (box[2] > boxes[:, 0])
                       & (box[1] < boxes[:, 3]) & (box[3] > boxes[:, 1])))


def _crosses(anchor: np.ndarray, box: np.ndarray, boxes: np.ndarray) -> bool:
    """Whether a leader from the point to the label's box would run through a placed label."""
    if boxes.size == 0:
        return False
    end = np.clip(anchor, box[:2], box[2:])
    steps = np.linspace(0.1, 1.0, 10)[:, None]
    samples = anchor + steps * (end - anchor)
    sx, sy = samples[:, None, 0], samples[:, None, 1]
    inside = ((sx > boxes[None, :, 0]) & (sx < boxes[None, :, 2])
              & (sy > boxes[None, :, 1]) & (sy < boxes[None, :, 3]))
    return bool(inside.any())


def marker_boxes(ax: Axes, xs: Sequence[float], ys: Sequence[float],
                 radius_px: float) -> np.ndarray:
    """Display-pixel boxes (x0, y0, x1, y1) around markers of the given radius."""
    if len(xs) == 0:
        return np.zeros((0, 4))
    centres = ax.transData.transform(np.column_stack([xs, ys]))
    return np.column_stack([centres - radius_px, centres + radius_px])


def place_labels(
    ax: Axes,
    renderer: RendererBase,
    targets: Sequence[tuple[str, float, float]],
    obstacles: np.ndarray,
    *,
    marker_pt: float = 4.0,
    fontsize: float = FONT,
    gap_px: float = 1.5,
) -> tuple[list[Label], list[str]]:
    """Greedy placement: for each (text, x, y), in order, try offsets ring by ring.

    A candidate is kept when its text box, measured by ``renderer``, stays inside the
    axes and overlaps no label placed before and no obstacle box (the markers, in
    display pixels). The axes limits and the figure layout must be final before this
    is called, since boxes are measured in display pixels. Returns the placed labels
    and the texts that found no room.
    """
    frame = ax.get_window_extent(renderer)
    placed: list[Label] = []
    taken = np.zeros((0, 4))
    missed: list[str] = []
    for text, x, y in targets:
        probe = ax.annotate(text, (x, y), xytext=(0, 0), textcoords="offset points",
                            fontsize=fontsize, color=INK)
        anchor = ax.transData.transform((x, y))
        chosen: tuple[tuple[float, float], Across, Upright, np.ndarray, int] | None = None
        for ring_index, ring in enumerate(RINGS):
            for ux, uy in DIRECTIONS:
                # Push diagonal labels out by the marker radius too, so corners clear it.
                reach = ring + marker_pt
                dx, dy = ux * reach, uy * reach
                ha, va = _align(ux, uy)
                probe.xyann = (dx, dy)
                probe.set_horizontalalignment(ha)
                probe.set_verticalalignment(va)
                ext = probe.get_window_extent(renderer)
                box = np.array([ext.x0 - gap_px, ext.y0 - gap_px, ext.x1 + gap_px,
                                ext.y1 + gap_px])
                if (box[0] < frame.x0 or box[2] > frame.x1 or box[1] < frame.y0
                        or box[3] > frame.y1):
                    continue
                if _overlaps(box, taken) or _overlaps(box, obstacles):
                    continue
                if ring_index > 0 and _crosses(anchor, box, taken):
                    continue
                chosen = ((dx, dy), ha, va, np.array([ext.x0, ext.y0, ext.x1, ext.y1]),
                          ring_index)
                break
            if chosen is not None:
                break
        probe.remove()
        if chosen is None:
            missed.append(text)
            continue
        (dx, dy), ha, va, box, ring_index = chosen
        leader = ring_index > 0
        arrow = (dict(arrowstyle="-", color=GREY, linewidth=0.6, shrinkA=1.0,
                      shrinkB=marker_pt * 0.9) if leader else None)
        ax.annotate(text, (x, y), xytext=(dx, dy), textcoords="offset points", ha=ha, va=va,
                    fontsize=fontsize, color=INK, arrowprops=arrow, gid="label", zorder=5)
        taken = np.vstack([taken, box + np.array([-gap_px, -gap_px, gap_px, gap_px])])
        placed.append(Label(text, float(x), float(y), (float(dx), float(dy)),
                            (float(box[0]), float(box[1]), float(box[2]), float(box[3])),
                            leader))
    return placed, missed


# -- overview -------------------------------------------------------------------------------


def _padded(values: np.ndarray, pad: float = 0.08) -> tuple[float, float]:
    lo, hi = float(np.min(values)), float(np.max(values))
    span = hi - lo if hi > lo else (abs(hi) or 1.0) * 0.1
    return lo - pad * span, hi + pad * span


def overview(
    x: Sequence[float],
    y: Sequence[float],
    names: Sequence[str],
    *,
    alerting: Sequence[str] = (),
    chosen: Sequence[str] = (),
    unlike: Sequence[str] = (),
    label: Sequence[str] | None = None,
    x_title: str = "r2",
    y_title: str = "slope",
    x_line: tuple[float, str] | None = None,
    title: str = "",
) -> Drawn:
    """Every group as one point at (x, y); alerting groups marked and labelled.

    ``label`` lists the names to label (default: alerting, then chosen groups);
    ``x_line`` draws a dotted vertical reference line with a caption (e.g. min_r2);
    ``unlike`` names the units whose slope is unlike their fleet's: each gets a ring.
    """
    xs = np.asarray(x, dtype=float)
    ys = np.asarray(y, dtype=float)
    fig, renderer = new_figure(8.4, 5.6)
    fig.subplots_adjust(left=0.1, right=0.97, bottom=0.1, top=0.87)
    ax = fig.add_subplot()
    _style(ax)
    ax.set_xlabel(x_title, fontsize=FONT + 0.5, color=INK)
    ax.set_ylabel(y_title, fontsize=FONT + 0.5, color=INK)
    if title:
        fig.suptitle(title, x=0.1, y=0.975, ha="left", fontsize=FONT + 2, color=INK)
    alert_set = set(alerting)
    chosen_set = set(chosen) - alert_set
    kinds = np.array(["alert" if n in alert_set else "chosen" if n in chosen_set else "other"
                      for n in names])
    styles = {
        "other": dict(marker="o", s=26, facecolor=MIST, edgecolor=GREY, linewidth=0.7,
                      zorder=2),
        "chosen": dict(marker="s", s=38, facecolor=NAVY, edgecolor=INK, linewidth=0.7,
                       zorder=3),
        "alert": dict(marker="D", s=40, facecolor=RUST, edgecolor=INK, linewidth=0.7,
                      zorder=4),
    }
    counts = {}
    for kind, style in styles.items():
        mask = kinds == kind
        counts[kind] = int(mask.sum())
        if mask.any():
            ax.scatter(xs[mask], ys[mask], gid=f"groups-{kind}", **style)  # type: ignore[arg-type]
    ring = np.array([n in set(unlike) for n in names], dtype=bool)
    counts["unlike"] = int(ring.sum())
    if ring.any():
        ax.scatter(xs[ring], ys[ring], marker="o", s=150, facecolor="none", edgecolor=RUST,
                   linewidth=1.4, zorder=5, gid="groups-unlike")
    if len(xs):
        # the reference line stays in the frame: a caption drawn far outside it would be
        # rendered at an absurd pixel position (and uncentred r2 values cluster near 1)
        ax.set_xlim(*_padded(xs if x_line is None else np.append(xs, x_line[0])))
        ax.set_ylim(*_padded(ys, 0.1))
    if x_line is not None:
        ax.axvline(x_line[0], color=GREY, linestyle=":", linewidth=1.1, gid="reference")
        ax.text(x_line[0], 1.01, x_line[1], transform=ax.get_xaxis_transform(), ha="center",
                va="bottom", fontsize=FONT - 0.5, color=GREY)
    handles = [
        Line2D([], [], linestyle="none", marker="D", markersize=6.5, markerfacecolor=RUST,
               markeredgecolor=INK, label=f"alerting ({counts['alert']})"),
        Line2D([], [], linestyle="none", marker="o", markersize=6, markerfacecolor=MIST,
               markeredgecolor=GREY, label=f"no alert ({counts['other']})"),
    ]
    if counts["chosen"]:
        handles.insert(1, Line2D([], [], linestyle="none", marker="s", markersize=6,
                                 markerfacecolor=NAVY, markeredgecolor=INK,
                                 label=f"asked for ({counts['chosen']})"))
    if counts["unlike"]:
        handles.insert(1, Line2D([], [], linestyle="none", marker="o", markersize=10,
                                 markerfacecolor="none", markeredgecolor=RUST,
                                 label=f"unlike its fleet ({counts['unlike']})"))
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.97, 0.985), ncol=4,
               frameon=False, fontsize=FONT)
    if label is None:
        label = [n for n in names if n in alert_set] + [n for n in names if n in chosen_set]
    where = {n: (float(a), float(b)) for n, a, b in zip(names, xs, ys, strict=True)}
    targets = [(n, *where[n]) for n in label if n in where]
    # Obstacles: every marker, at its drawn size plus a little air.
    radius = {"other": math.sqrt(26) / 2, "chosen": math.sqrt(38) / 2, "alert": math.sqrt(40) / 2}
    px_per_pt = fig.dpi / 72.0
    obstacles = np.vstack([
        marker_boxes(ax, xs[kinds == k], ys[kinds == k], (r + 1.0) * px_per_pt)
        for k, r in radius.items()
    ]) if len(xs) else np.zeros((0, 4))
    labels, missed = place_labels(ax, renderer, targets, obstacles, marker_pt=radius["alert"])
    return Drawn(fig, labels, missed,
                 {"points": len(xs), "alerting": counts["alert"], "chosen": counts["chosen"],
                  "unlike": counts["unlike"], "marker_boxes": obstacles})


# -- one panel per group: data, line, band, limit, crossing ---------------------------------


@dataclass
class Crossing:
    """Where the fitted line is projected to meet the limit, with its interval."""

    x: float | None
    lo: float | None
    hi: float | None
    bound: float | None = None  # the conservative one-sided bound, drawn on the limit line
    note: str | None = None


@dataclass(frozen=True)
class Bend:
    """The line since a group's last significant bend (the bend view), and its band.

    The standard error of the line at x is sqrt(centre_se^2 + slope_se^2 (x - centre_x)^2);
    ``t`` is its two-sided t quantile at the fit's level.
    """

    x: float
    slope: float
    intercept: float
    centre_x: float
    centre_se: float
    slope_se: float
    t: float | None

    def band(self, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        fitted = self.intercept + self.slope * grid
        if self.t is None:
            return fitted, fitted, fitted
        half = self.t * np.sqrt(self.centre_se ** 2 + self.slope_se ** 2
                                * (grid - self.centre_x) ** 2)
        return fitted, fitted - half, fitted + half


@dataclass
class Panel:
    """Everything one group's panel shows; ``t`` is the fit's two-sided t quantile."""

    name: str
    x: np.ndarray
    y: np.ndarray
    outlier: np.ndarray
    slope: float | None
    intercept: float | None
    resid_sd: float | None
    n: int
    x_mean: float | None
    sxx: float | None
    t: float | None
    through_origin: bool = False
    limit: float | None = None
    crossing: Crossing | None = None
    subtitle: str = ""
    bend: Bend | None = None
    #: where the whole-history line reaches the limit, quoted beside the current projection
    whole_cross: float | None = None
    #: the other side's limit (a two-sided tolerance), drawn without a projection
    other_limit: float | None = None
    #: readings beyond a limit, and readings of the latest batch outside the prediction
    #: interval of the earlier line (out of trend): masks aligned with x
    beyond: np.ndarray | None = None
    off_trend: np.ndarray | None = None


def mean_band(p: Panel, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Fitted values and the confidence band of the mean line over ``grid``.

    With an intercept: t * resid_sd * sqrt(1/n + (x - x_mean)^2 / sxx); through the
    origin: t * resid_sd * |x| / sqrt(sum x^2), with sum x^2 = sxx + n x_mean^2.
    """
    if p.slope is None:
        return None
    intercept = 0.0 if p.through_origin else p.intercept
    if intercept is None:
        return None
    fitted = intercept + p.slope * grid
    if p.resid_sd is None or p.t is None or p.sxx is None or p.x_mean is None or p.n < 2:
        return fitted, fitted, fitted
    if p.through_origin:
        sum_xx = p.sxx + p.n * p.x_mean * p.x_mean
        if not sum_xx > 0:
            return fitted, fitted, fitted
        half = p.t * p.resid_sd * np.abs(grid) / math.sqrt(sum_xx)
    else:
        if not p.sxx > 0:
            return fitted, fitted, fitted
        half = p.t * p.resid_sd * np.sqrt(1.0 / p.n + (grid - p.x_mean) ** 2 / p.sxx)
    return fitted, fitted - half, fitted + half


def _fmt(v: float) -> str:
    return f"{v:.0f}" if abs(v) < 1e6 and abs(v) >= 100 else f"{v:.4g}"


def _extent(p: Panel) -> tuple[float, float, float, bool]:
    """x range to draw and whether the crossing is in it.

    The view is stretched to the right to show the projected crossing and its interval
    when the crossing lies within one data span of the last point; a crossing further
    out is only named, so the data keep the room.
    """
    lo, hi = float(np.min(p.x)), float(np.max(p.x))
    span = hi - lo if hi > lo else 1.0
    c = p.crossing
    if c is None or c.x is None or p.limit is None:
        return lo, hi, hi, False
    if c.x > hi + span or c.x < lo - span:
        return lo, hi, hi, False
    if c.x <= hi:
        return lo, hi, hi, True
    far = max(v for v in (c.x, c.hi) if v is not None)
    return lo, hi, min(far + 0.05 * span, hi + span), True


def _panel(ax: Axes, p: Panel, x_title: str, y_title: str, level: float) -> dict[str, Any]:
    _style(ax)
    drawn: dict[str, Any] = {"points": 0, "outliers": 0, "lines": []}
    bent = f"  · bent at {_fmt(p.bend.x)}" if p.bend is not None else ""
    ax.set_title(p.name + (f"  {p.subtitle}" if p.subtitle else "") + bent,
                 fontsize=FONT + 0.5, color=INK, loc="left")
    if len(p.x) == 0:
        ax.text(0.5, 0.5, "no data", transform=ax.transAxes, ha="center", va="center",
                color=GREY)
        return drawn
    lo, hi, right, crossing_shown = _extent(p)
    grid = np.linspace(lo, hi, 120)
    band = mean_band(p, grid)
    ahead_band = None
    if band is not None:
        fitted, low, high = band
        ax.fill_between(grid, low, high, color=SKY, alpha=0.75, linewidth=0, zorder=1,
                        gid="band")
        ax.plot(grid, fitted, color=INK, linewidth=1.3, zorder=4, gid="fit-line")
        drawn["lines"].append("fit-line")
        if p.bend is not None:
            # the line since the bend, and its projection: what holds now
            now_line = p.bend
            ax.axvline(now_line.x, color=GREY, linestyle=(0, (1, 1.5)), linewidth=1.1, zorder=3,
                       gid="bend")
            drawn["lines"].append("bend")
            now = np.linspace(max(now_line.x, lo), hi, 60)
            line, b_lo, b_hi = now_line.band(now)
            ax.fill_between(now, b_lo, b_hi, color=SAND, alpha=0.6, linewidth=0, zorder=1,
                            gid="bend-band")
            ax.plot(now, line, color=RUST, linewidth=1.5, zorder=4, gid="bend-line")
            drawn["lines"].append("bend-line")
            if right > hi:
                ahead = np.linspace(hi, right, 60)
                ahead_band = now_line.band(ahead)
                ax.fill_between(ahead, ahead_band[1], ahead_band[2], color=SAND, alpha=0.3,
                                linewidth=0, zorder=1, gid="band-projected")
                ax.plot(ahead, ahead_band[0], color=RUST, linewidth=1.2,
                        linestyle=(0, (5, 2.5)), zorder=4, gid="projection")
                drawn["lines"].append("projection")
        elif right > hi:
            ahead = np.linspace(hi, right, 60)
            ahead_band = mean_band(p, ahead)
            if ahead_band is not None:
                ax.fill_between(ahead, ahead_band[1], ahead_band[2], color=SKY, alpha=0.35,
                                linewidth=0, zorder=1, gid="band-projected")
                ax.plot(ahead, ahead_band[0], color=INK, linewidth=1.1,
                        linestyle=(0, (5, 2.5)), zorder=4, gid="projection")
                drawn["lines"].append("projection")
    normal = ~p.outlier
    ax.scatter(p.x[normal], p.y[normal], s=7, marker="o", color=NAVY, alpha=0.7, linewidths=0,
               zorder=2, gid="points")
    drawn["points"] = int(normal.sum())
    # y range: the data (outliers too, unless far off), the band, and the limit when the
    # crossing is shown.
    ys = p.y[normal] if normal.any() else p.y
    y_lo, y_hi = float(np.min(ys)), float(np.max(ys))
    span_y = y_hi - y_lo or abs(y_hi) or 1.0
    if p.outlier.any():
        near = p.y[p.outlier]
        near = near[(near > y_lo - 3 * span_y) & (near < y_hi + 3 * span_y)]
        if near.size:
            y_lo, y_hi = min(y_lo, float(near.min())), max(y_hi, float(near.max()))
    for edges in (band, ahead_band):
        if edges is not None:
            y_lo = min(y_lo, float(np.min(edges[1])))
            y_hi = max(y_hi, float(np.max(edges[2])))
    if p.limit is not None and crossing_shown:
        y_lo, y_hi = min(y_lo, p.limit), max(y_hi, p.limit)
    pad = 0.06 * (y_hi - y_lo or abs(y_hi) or 1.0)
    ax.set_ylim(y_lo - pad, y_hi + pad)
    ax.set_xlim(lo - 0.03 * (right - lo or 1.0), right + 0.03 * (right - lo or 1.0))
    notes: list[str] = []
    if p.outlier.any():
        oy = p.y[p.outlier]
        ox = p.x[p.outlier]
        below, above = oy < y_lo - pad, oy > y_hi + pad
        inside = ~(below | above)
        ax.scatter(ox[inside], oy[inside], s=34, marker="X", facecolor=RUST, edgecolor=INK,
                   linewidth=0.5, zorder=5, gid="outliers")
        drawn["outliers"] = int(p.outlier.sum())
        # Far-off outliers would squash the data: they sit on the frame's edge as arrowheads.
        for mask, edge, marker in ((below, y_lo - pad * 0.55, "v"), (above, y_hi + pad * 0.55,
                                                                       "^")):
            if mask.any():
                ax.scatter(ox[mask], np.full(int(mask.sum()), edge), s=40, marker=marker,
                           facecolor=RUST, edgecolor=INK, linewidth=0.5, zorder=5,
                           clip_on=False, gid="outliers-off-scale")
        off = int(below.sum() + above.sum())
        if off:
            drawn["off_scale"] = off
            notes.append(f"{off} outlier(s) off scale, marked on the edge")
    if p.limit is not None:
        ax.axhline(p.limit, color=RUST, linestyle=(0, (6, 2, 1.5, 2)), linewidth=1.1, zorder=3,
                   gid="limit")
        drawn["lines"].append("limit")
        if not y_lo - pad <= p.limit <= y_hi + pad:
            notes.append(f"limit {_fmt(p.limit)} is {'below' if p.limit < y_lo else 'above'}")
    if p.other_limit is not None and y_lo - pad <= p.other_limit <= y_hi + pad:
        ax.axhline(p.other_limit, color=RUST, linestyle=(0, (6, 2, 1.5, 2)), linewidth=0.8,
                   alpha=0.6, zorder=3, gid="limit-other")
        drawn["lines"].append("limit-other")
    for mask, marker, gid in ((p.beyond, "o", "beyond-limit"), (p.off_trend, "s", "off-trend")):
        if mask is not None and mask.any():
            ax.scatter(p.x[mask], np.clip(p.y[mask], y_lo - pad, y_hi + pad), s=70,
                       marker=marker, facecolor="none", edgecolor=RUST, linewidth=1.2,
                       zorder=6, gid=gid)
            drawn[gid] = int(mask.sum())
    c = p.crossing
    if c is not None and c.x is not None:
        if crossing_shown:
            if c.lo is not None and c.hi is not None and c.lo < right:
                ax.axvspan(max(c.lo, lo), min(c.hi, right), facecolor=SAND, alpha=0.55,
                           edgecolor=RUST, hatch="///", linewidth=0, zorder=0,
                           gid="crossing-band")
            ax.axvline(c.x, color=RUST, linestyle=":", linewidth=1.2, zorder=3, gid="crossing")
            drawn["lines"].append("crossing")
            if c.bound is not None and p.limit is not None and lo <= c.bound <= right:
                ax.plot([c.bound], [p.limit], linestyle="none", marker="|", markersize=14,
                        markeredgewidth=2.0, color=INK, zorder=6, gid="crossing-bound")
                drawn["lines"].append("crossing-bound")
        else:
            interval = (f" ({_fmt(c.lo)} to {_fmt(c.hi)})"
                        if c.lo is not None and c.hi is not None else "")
            notes.append(f"projected crossing near {_fmt(c.x)}{interval}")
            drawn["lines"].append("crossing-note")
    elif c is not None and c.note:
        notes.append(f"no crossing: {c.note}")
    if p.bend is not None and p.whole_cross is not None:
        notes.append(f"whole history: near {_fmt(p.whole_cross)}")
    if notes:
        # Falling data leave the upper right free, rising data the lower right.
        up = p.slope is None or p.slope <= 0
        ax.text(0.99, 0.97 if up else 0.03, "\n".join(notes), transform=ax.transAxes,
                ha="right", va="top" if up else "bottom", fontsize=FONT - 1, color=RUST,
                gid="limit-note", bbox=dict(facecolor="white", edgecolor="none", alpha=0.85,
                                            pad=1.5))
    ax.set_xlabel(x_title, fontsize=FONT, color=INK)
    ax.set_ylabel(y_title, fontsize=FONT, color=INK)
    return drawn


def panels(
    items: Sequence[Panel], *, x_title: str, y_title: str, level: float, columns: int = 3
) -> Drawn:
    """Small multiples, one group per panel, with one shared legend on top."""
    count = max(len(items), 1)
    cols = min(columns, count)
    rows = math.ceil(count / cols)
    fig, _ = new_figure(3.6 * cols + 0.4, 2.9 * rows + 0.7)
    axes = fig.subplots(rows, cols, squeeze=False)
    info: dict[str, Any] = {"panels": {}}
    for i, ax in enumerate(axes.flat):
        if i >= len(items):
            ax.set_visible(False)
            continue
        info["panels"][items[i].name] = _panel(ax, items[i], x_title, y_title, level)
    pct = f"{level * 100:g} %"
    handles: list[Any] = [
        Line2D([], [], linestyle="none", marker="o", markersize=4, color=NAVY, label="data"),
        Line2D([], [], linestyle="none", marker="X", markersize=7, markerfacecolor=RUST,
               markeredgecolor=INK, label="flagged outlier"),
        Line2D([], [], color=INK, linewidth=1.3, label="fitted line"),
        Patch(facecolor=SKY, label=f"{pct} band of the mean line"),
    ]
    if any(d.get("off_scale") for d in info["panels"].values()):
        handles.append(Line2D([], [], linestyle="none", marker="v", markersize=6.5,
                              markerfacecolor=RUST, markeredgecolor=INK,
                              label="outlier beyond the frame"))
    if any("bend-line" in d["lines"] for d in info["panels"].values()):
        handles += [
            Line2D([], [], color=RUST, linewidth=1.5, label="line since the bend"),
            Line2D([], [], color=GREY, linestyle=(0, (1, 1.5)), label="bend"),
        ]
    if any(p.limit is not None for p in items):
        handles.append(Line2D([], [], color=RUST, linestyle=(0, (6, 2, 1.5, 2)), label="limit"))
    if any({"projection", "crossing"} & set(d["lines"]) for d in info["panels"].values()):
        handles += [
            Line2D([], [], color=INK, linestyle=(0, (5, 2.5)), label="projection"),
            Patch(facecolor=SAND, edgecolor=RUST, hatch="///", linewidth=0,
                  label="projected crossing, interval"),
        ]
    if any("crossing-bound" in d["lines"] for d in info["panels"].values()):
        handles.append(Line2D([], [], linestyle="none", marker="|", markersize=10,
                              markeredgewidth=2.0, color=INK, label="conservative crossing bound"))
    for gid, marker, label in (("beyond-limit", "o", "reading beyond a limit"),
                               ("off-trend", "s", "reading out of trend")):
        if any(d.get(gid) for d in info["panels"].values()):
            handles.append(Line2D([], [], linestyle="none", marker=marker, markersize=8,
                                  markerfacecolor="none", markeredgecolor=RUST, label=label))
    fig.legend(handles=handles, loc="upper center", ncol=min(len(handles), 4), frameon=False,
               fontsize=FONT, bbox_to_anchor=(0.5, 1.0))
    # Room for the legend's rows above the panels (inches), the rest for the panels.
    legend_in = 0.25 + 0.22 * math.ceil(len(handles) / 4)
    height = fig.get_figheight()
    fig.subplots_adjust(left=0.08, right=0.98, top=1.0 - (legend_in + 0.25) / height,
                        bottom=0.5 / height + 0.02, hspace=0.55, wspace=0.32)
    _place_notes(fig, [ax for ax in axes.flat if ax.get_visible()], items, info)
    return Drawn(fig, info=info)


#: Where a panel's note may stand (axes fraction x, y, ha, va): the corners, then the middles.
NOTE_SPOTS: tuple[tuple[float, float, Across, Upright], ...] = (
    (0.99, 0.97, "right", "top"), (0.99, 0.03, "right", "bottom"),
    (0.01, 0.97, "left", "top"), (0.01, 0.03, "left", "bottom"),
    (0.5, 0.97, "center", "top"), (0.5, 0.03, "center", "bottom"))


def _place_notes(fig: Figure, axes: Sequence[Axes], items: Sequence[Panel],
                 info: dict[str, Any]) -> None:
    """Move each panel's note (limit, crossing) to a spot where it covers no data marker, once
    the layout is final; a note that finds none stays at its first spot and is counted in
    ``info["panels"][name]["note_on_markers"]``."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
    for ax, p in zip(axes, items, strict=False):
        notes = [t for t in ax.texts if t.get_gid() == "limit-note"]
        if not notes or len(p.x) == 0:
            continue
        note = notes[0]
        # markers as drawn: data points (radius about 3 px) and outliers (about 5 px)
        boxes = marker_boxes(ax, list(p.x), list(p.y), 5.0)
        frame = ax.get_window_extent(renderer).extents
        inside = ((boxes[:, 2] >= frame[0]) & (boxes[:, 0] <= frame[2])
                  & (boxes[:, 3] >= frame[1]) & (boxes[:, 1] <= frame[3]))
        boxes = boxes[inside]
        best: tuple[int, tuple[float, float, Across, Upright]] | None = None
        for spot in NOTE_SPOTS:
            note.set_position(spot[:2])
            note.set_horizontalalignment(spot[2])
            note.set_verticalalignment(spot[3])
            box = note.get_window_extent(renderer).extents
            hits = int(np.sum((box[0] < boxes[:, 2]) & (box[2] > boxes[:, 0])
                              & (box[1] < boxes[:, 3]) & (box[3] > boxes[:, 1])))
            if best is None or hits < best[0]:
                best = (hits, spot)
            if hits == 0:
                break
        assert best is not None
        note.set_position(best[1][:2])
        note.set_horizontalalignment(best[1][2])
        note.set_verticalalignment(best[1][3])
        panel = info["panels"].setdefault(p.name, {})
        panel["note_on_markers"] = best[0]
        panel["marker_boxes"] = boxes


# -- slope history -------------------------------------------------------------------------


@dataclass
class History:
    """Window slopes of one group with the whole-history slope for reference."""

    name: str
    windows: pd.DataFrame  # window_start, window_end, slope, slope_lo, slope_hi
    slope: float | None = None
    slope_lo: float | None = None
    slope_hi: float | None = None
    subtitle: str = ""


def _middles(frame: pd.DataFrame) -> Any:
    start, end = frame["window_start"], frame["window_end"]
    if pd.api.types.is_numeric_dtype(start):
        return (start.astype(float) + end.astype(float)) / 2.0
    s = pd.to_datetime(start)
    return s + (pd.to_datetime(end) - s) / 2


def history(items: Sequence[History], *, x_title: str, y_title: str, columns: int = 3) -> Drawn:
    """Per group: each window's slope with its interval; windows whose interval misses the
    whole-history slope are drawn as orange squares, the rest as blue circles."""
    count = max(len(items), 1)
    cols = min(columns, count)
    rows = math.ceil(count / cols)
    fig, _ = new_figure(3.6 * cols + 0.4, 2.6 * rows + 0.7)
    axes = fig.subplots(rows, cols, squeeze=False)
    info: dict[str, Any] = {"panels": {}}
    for i, ax in enumerate(axes.flat):
        if i >= len(items):
            ax.set_visible(False)
            continue
        h = items[i]
        _style(ax)
        ax.set_title(h.name + (f"  {h.subtitle}" if h.subtitle else ""), fontsize=FONT + 0.5,
                     color=INK, loc="left")
        frame = h.windows.dropna(subset=["slope"])
        drawn = {"windows": int(len(frame)), "differ": 0}
        info["panels"][h.name] = drawn
        if frame.empty:
            ax.text(0.5, 0.5, "no window with a slope", transform=ax.transAxes, ha="center",
                    va="center", color=GREY)
            continue
        mid = _middles(frame)
        slope = frame["slope"].to_numpy(float)
        lo = frame["slope_lo"].to_numpy(float) if "slope_lo" in frame else slope
        hi = frame["slope_hi"].to_numpy(float) if "slope_hi" in frame else slope
        lo = np.where(np.isfinite(lo), lo, slope)
        hi = np.where(np.isfinite(hi), hi, slope)
        if h.slope is not None:
            if h.slope_lo is not None and h.slope_hi is not None:
                ax.axhspan(h.slope_lo, h.slope_hi, color=MIST, alpha=0.8, linewidth=0,
                           zorder=0, gid="overall-band")
            ax.axhline(h.slope, color=GREY, linestyle="--", linewidth=1.0, zorder=1,
                       gid="overall")
            differ = (hi < h.slope) | (lo > h.slope)
        else:
            differ = np.zeros(len(slope), dtype=bool)
        drawn["differ"] = int(differ.sum())
        ax.plot(mid, slope, color=NAVY, linewidth=0.8, alpha=0.6, zorder=2, gid="trace")
        for mask, colour, marker, gid in ((~differ, NAVY, "o", "windows"),
                                          (differ, RUST, "s", "windows-differ")):
            if mask.any():
                m = np.asarray(mask)
                ax.errorbar(np.asarray(mid)[m], slope[m],
                            yerr=[slope[m] - lo[m], hi[m] - slope[m]], fmt=marker,
                            color=colour, markersize=4.2, markeredgecolor=INK,
                            markeredgewidth=0.5, elinewidth=1.0, capsize=2, zorder=3,
                            gid=gid)
        # Keep the axis on the slopes: an interval reaching far beyond them (a sparse
        # window) is cut at the frame rather than squashing every other window.
        values = [*slope, *(v for v in (h.slope, h.slope_lo, h.slope_hi) if v is not None)]
        v_lo, v_hi = min(values), max(values)
        pad = 0.25 * (v_hi - v_lo or abs(v_hi) or 1.0)
        bottom = max(float(np.min(lo)), v_lo - 3 * pad)
        top = min(float(np.max(hi)), v_hi + 3 * pad)
        ax.set_ylim(min(bottom, v_lo) - 0.3 * pad, max(top, v_hi) + 0.3 * pad)
        ax.set_xlabel(x_title, fontsize=FONT, color=INK)
        ax.set_ylabel(y_title, fontsize=FONT, color=INK)
        ax.tick_params(axis="x", labelrotation=30)
        if not pd.api.types.is_numeric_dtype(frame["window_start"]):
            from matplotlib.dates import AutoDateLocator, ConciseDateFormatter

            locator = AutoDateLocator(maxticks=6)
            ax.xaxis.set_major_locator(locator)
            ax.xaxis.set_major_formatter(ConciseDateFormatter(
                locator, offset_formats=["", "%Y", "%Y", "%Y", "%Y", "%Y"]))
            ax.tick_params(axis="x", labelrotation=0)
    handles = [
        Line2D([], [], marker="o", color=NAVY, markeredgecolor=INK, markersize=5,
               label="window slope, interval"),
        Line2D([], [], linestyle="none", marker="s", markerfacecolor=RUST, markeredgecolor=INK,
               markersize=5, label="interval misses the whole-history slope"),
        Line2D([], [], color=GREY, linestyle="--", label="whole-history slope"),
        Patch(facecolor=MIST, label="its interval"),
    ]
    fig.legend(handles=handles, loc="upper center", ncol=4, frameon=False, fontsize=FONT,
               bbox_to_anchor=(0.5, 1.0))
    fig.subplots_adjust(left=0.09, right=0.98, top=1.0 - 0.45 / fig.get_figheight() - 0.02,
                        bottom=0.55 / fig.get_figheight() + 0.03, hspace=0.7, wspace=0.38)
    return Drawn(fig, info=info)


# -- one panel per fleet: each unit's slope against the fleet's spread -----------------------


@dataclass
class Fleet:
    """One fleet: its units' slopes with their intervals, and the fleet's random-effects mean
    slope and between-unit standard deviation (None when not defined)."""

    name: str
    units: pd.DataFrame  # columns: name, slope, slope_lo, slope_hi, unlike
    mean: float | None
    tau: float | None


def fleet(items: Sequence[Fleet], *, y_title: str, columns: int = 2) -> Drawn:
    """Per fleet: every unit's slope with its interval, sorted by slope, against the fleet band
    (the random-effects mean, dashed, and mean +/- 1.96 tau, shaded: where the slopes of 95 %
    of units like these would lie). Units unlike their fleet are orange squares, named."""
    count = max(len(items), 1)
    cols = min(columns, count)
    rows = math.ceil(count / cols)
    fig, _ = new_figure(max(5.2 * cols + 0.4, 8.4), 3.0 * rows + 0.7)
    axes = fig.subplots(rows, cols, squeeze=False)
    info: dict[str, Any] = {"panels": {}}
    for i, ax in enumerate(axes.flat):
        if i >= len(items):
            ax.set_visible(False)
            continue
        f = items[i]
        _style(ax)
        ax.set_title(f.name, fontsize=FONT + 0.5, color=INK, loc="left")
        frame = f.units.dropna(subset=["slope"]).sort_values("slope").reset_index(drop=True)
        flagged = frame["unlike"].fillna(False).astype(bool).to_numpy()
        info["panels"][f.name] = {"units": int(len(frame)), "unlike": int(flagged.sum())}
        if frame.empty:
            ax.text(0.5, 0.5, "no unit with a slope", transform=ax.transAxes, ha="center",
                    va="center", color=GREY)
            continue
        if f.mean is not None:
            if f.tau is not None and f.tau > 0:
                ax.axhspan(f.mean - 1.96 * f.tau, f.mean + 1.96 * f.tau, color=MIST, alpha=0.8,
                           linewidth=0, zorder=0, gid="fleet-band")
            ax.axhline(f.mean, color=GREY, linestyle="--", linewidth=1.0, zorder=1,
                       gid="fleet-mean")
        pos = np.arange(len(frame), dtype=float)
        slope = frame["slope"].to_numpy(float)
        lo = np.where(np.isfinite(frame["slope_lo"].to_numpy(float)),
                      frame["slope_lo"].to_numpy(float), slope)
        hi = np.where(np.isfinite(frame["slope_hi"].to_numpy(float)),
                      frame["slope_hi"].to_numpy(float), slope)
        for mask, colour, marker, gid in ((~flagged, NAVY, "o", "units"),
                                          (flagged, RUST, "s", "units-unlike")):
            if mask.any():
                ax.errorbar(pos[mask], slope[mask],
                            yerr=[slope[mask] - lo[mask], hi[mask] - slope[mask]], fmt=marker,
                            color=colour, markersize=4.0, markeredgecolor=INK,
                            markeredgewidth=0.5, elinewidth=1.0, capsize=1.5, zorder=3, gid=gid)
        for j in np.flatnonzero(flagged):
            ax.annotate(str(frame["name"].iloc[j]), (pos[j], slope[j]), xytext=(6, 0),
                        textcoords="offset points", fontsize=FONT, color=INK, va="center")
        ax.set_xticks([])
        ax.set_xlabel(f"units, by slope ({len(frame)})", fontsize=FONT, color=INK)
        ax.set_ylabel(y_title, fontsize=FONT, color=INK)
    handles = [
        Line2D([], [], linestyle="none", marker="o", color=NAVY, markeredgecolor=INK,
               markersize=5, label="unit slope, interval"),
        Line2D([], [], linestyle="none", marker="s", markerfacecolor=RUST, markeredgecolor=INK,
               markersize=5, label="unlike its fleet"),
        Line2D([], [], color=GREY, linestyle="--", label="fleet mean slope"),
        Patch(facecolor=MIST, label="mean \u00b1 1.96 tau"),
    ]
    fig.legend(handles=handles, loc="upper center", ncol=4, frameon=False, fontsize=FONT,
               bbox_to_anchor=(0.5, 1.0))
    fig.subplots_adjust(left=0.1, right=0.97, top=1.0 - 0.45 / fig.get_figheight() - 0.02,
                        bottom=0.4 / fig.get_figheight() + 0.03, hspace=0.6, wspace=0.3)
    return Drawn(fig, info=info)
