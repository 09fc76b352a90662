"""The report's figures, drawn with matplotlib's Agg canvas (no pyplot, no global state).

Each function takes plain values from the record and returns a `Raster`: the
figure's RGB pixels, drawn at 200 dpi for the size it is printed at (174 mm text
width of an A4 page, about 1370 pixels across: sharp on paper at normal reading
distance; common practice puts line art for print at 150 to 300 dpi). The pixels
go to the PDF as they are: no PNG is encoded here and decoded again by the PDF
writer, which compresses them once.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass

import matplotlib.collections
import matplotlib.lines
import matplotlib.patches
import matplotlib.ticker
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FormatStrFormatter, NullFormatter
from PIL import Image

from validate.metrology.probability import normal_density, t_density, t_quantile
from validate.model.line import level_sums
from validate.model.quadratic import rising_root
from validate.validation.window import error_curve

DPI = 200
WIDTH_IN = 6.85  # 174 mm
LINE = "#2f5d7c"
POINT = "#1f2a33"
BAND = "#c7d6e2"
WARM = "#c98a2b"
MUTED = "#7d8a95"
BAD = "#a02c2c"
# ticks and labels drawn without an Axis object (small multiples, bar labels): matplotlib's defaults
TICK_PT, PAD_PT, SPINE_WIDTH = 3.5, 3.5, 0.8  # tick length, label pad, line width (points)
TICK_SIZE, TITLE_SIZE, TITLE_PAD_PT = 6.5, 7.5, 6.0  # a panel's tick labels and title (points)


def _figure(height_in: float) -> Figure:
    fig = Figure(figsize=(WIDTH_IN, height_in), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


@dataclass(frozen=True)
class Raster:
    """A drawn figure: RGB pixels at DPI dots per inch of its printed size."""

    pixels: Image.Image

    @property
    def size(self) -> tuple[int, int]:
        return self.pixels.size

    def png(self) -> bytes:
        """The figure as a PNG file, for a reader that wants one."""
        buffer = io.BytesIO()
        self.pixels.save(buffer, format="PNG", dpi=(DPI, DPI))
        return buffer.getvalue()


def _raster(fig: Figure) -> Raster:
    """Draw the figure once on its Agg canvas and keep the pixels (white, opaque background)."""
    canvas = fig.canvas
    assert isinstance(canvas, FigureCanvasAgg)  # every figure here is made by _figure
    canvas.draw()
    width, height = canvas.get_width_height()
    rgba = Image.frombuffer("RGBA", (width, height), canvas.buffer_rgba(), "raw", "RGBA", 0, 1)
    return Raster(rgba.convert("RGB"))


def _tidy(ax) -> None:
    ax.spines["top"].set_visible(False)
    ax.spines["right"].set_visible(False)
    ax.tick_params(labelsize=8)
    ax.grid(True, color="#e3e7ea", linewidth=0.6)
    ax.set_axisbelow(True)


def prediction_band(x, y, grid, slope: float, intercept: float, p: float = 0.95):
    """Half-width of the OLS prediction interval for one new reading at each grid point.

    t_{(1+p)/2}(n-2) s sqrt(1 + 1/n + (x0 - xbar)^2 / Sxx), s the residual SD of
    the line (Draper and Smith, Applied Regression Analysis, 3rd ed. (1998),
    section 3.1; the same expression as ISO 8466-1).
    """
    x, y, grid = (np.asarray(v, dtype=float) for v in (x, y, grid))
    n = x.size
    residuals = y - (intercept + slope * x)
    s = math.sqrt(float(np.sum(residuals**2)) / (n - 2))
    sums = level_sums([1.0] * n, x.tolist(), y.tolist())  # xbar and Sxx of the package's one line
    t = t_quantile(0.5 + p / 2, n - 2)
    return t * s * np.sqrt(1.0 + 1.0 / n + (grid - sums.x_mean) ** 2 / sums.sxx), s


def _samples_on_line(calibration: dict, a: float, b: float, c: float = 0.0) -> list[tuple[str, float, float]]:
    """(id, concentration read off the line, or the second-order function's rising root, mean reading)
    of every sample with readings."""
    samples = []
    for s in calibration.get("samples") or []:
        readings = [r for r in s.get("readings", []) if r is not None]
        disc = b * b - 4 * c * (a - float(np.mean(readings))) if readings else -1.0
        if readings and b != 0 and disc >= 0:
            mean = float(np.mean(readings))
            samples.append((s["id"], float(rising_root(a, b, c, mean, b > 0)), mean))
    return samples


def _second_order_band(so: dict, grid, p: float = 0.95):
    """Half-width of the 95 % prediction interval of one new point about the second-order function:
    t(N-3) sqrt(s^2 + g' V g), g = (1, x, x^2), V the covariance of (a, b, c) (the line's expression
    with the third coefficient)."""
    v = np.asarray(so["covariance"], dtype=float)
    g = np.vstack([np.ones_like(grid), grid, grid**2])
    var_fit = np.einsum("in,ij,jn->n", g, v, g)
    s = float(so["residual_standard_deviation"])
    return t_quantile(0.5 + p / 2, so["dof"]) * np.sqrt(s * s + var_fit)


def _line_panel(ax, points: dict, samples: list, grid, line: tuple[float, float, float], half) -> None:
    """The line (or second-order function), its prediction band, the standards (blanks apart) and
    the samples."""
    a, b, c = line
    x, y, blank = points["x"], points["y"], points["blank"]
    fitted = a + b * grid + c * grid**2
    if half is not None:
        ax.fill_between(grid, fitted - half, fitted + half, color=BAND, linewidth=0,
                        label="95 % prediction band (one new reading)")
    label = (f"second-order function A = {a:.4g} + {b:.4g} c {'-' if c < 0 else '+'} {abs(c):.4g} c²" if c
             else f"fitted line A = {a:.4g} + {b:.4g} c")
    ax.plot(grid, fitted, color=LINE, linewidth=1.3, label=label)
    ax.plot(x[~blank], y[~blank], "o", color=POINT, markersize=3.6, label="standards")
    if blank.any():
        ax.plot(x[blank], y[blank], "s", color=MUTED, markersize=3.6, label="blanks")
    if samples:
        ax.plot([sx for _, sx, _ in samples], [sy for _, _, sy in samples], "D", color=WARM,
                markersize=4.5, markerfacecolor="white", markeredgewidth=1.2,
                label="samples (mean reading, read off the line)")
    ax.set_ylabel("absorbance", fontsize=9)
    ax.legend(fontsize=7.5, loc="upper left", frameon=False)
    ax.tick_params(labelbottom=False)
    _tidy(ax)


def _residual_panel(ax, points: dict, grid, line: tuple[float, float, float], half, unit: str) -> None:
    """Residuals of the readings, with the same band drawn about zero."""
    a, b, c = line
    x, blank = points["x"], points["blank"]
    resid = points["y"] - (a + b * x + c * x**2)
    if half is not None:  # the same band, relative to the line, where its width can be seen
        ax.fill_between(grid, -half, half, color=BAND, linewidth=0)
    ax.axhline(0.0, color=LINE, linewidth=1.0)
    ax.plot(x[~blank], resid[~blank], "o", color=POINT, markersize=3.4)
    if blank.any():
        ax.plot(x[blank], resid[blank], "s", color=MUTED, markersize=3.4)
    ax.set_ylabel("residual", fontsize=9)
    ax.set_xlabel(f"concentration / {unit}" if unit else "concentration", fontsize=9)
    _tidy(ax)


def calibration_figure(calibration: dict, compact: bool = False) -> Raster:
    """The line with its standards, a 95 % prediction band and the samples; residuals beneath
    (`compact`: a lower figure, for the annex)."""
    pts = calibration["points"]
    x = np.array([p["concentration"] for p in pts], dtype=float)
    y = np.array([p["absorbance"] for p in pts], dtype=float)
    blank = np.array([p.get("id", "").lower().startswith("blank") or p["concentration"] == 0
                      for p in pts])
    points = {"x": x, "y": y, "blank": blank}
    so = calibration.get("second_order")  # the second-order function the results are read off
    b, a = float(calibration["slope"]), float(calibration["intercept"])
    line = (float(so["coefficients"][0]), float(so["coefficients"][1]), float(so["coefficients"][2])) if so \
        else (a, b, 0.0)
    samples = _samples_on_line(calibration, *line)
    x_hi = max([float(x.max())] + [sx for _, sx, _ in samples])
    x_lo = min([0.0, float(x.min())] + [sx for _, sx, _ in samples])
    grid = np.linspace(x_lo, x_hi + 0.03 * (x_hi - x_lo), 200)
    if so:
        half = _second_order_band(so, grid)
    else:
        half = prediction_band(x, y, grid, b, a)[0] if x.size > 2 else None

    height = 2.6 if compact else 3.0
    fig = _figure(height)
    gs = fig.add_gridspec(2, 1, height_ratios=[3, 1.35], hspace=0.08,
                          left=0.11, right=0.98, top=1 - 0.1 / height, bottom=0.45 / height)
    top = fig.add_subplot(gs[0])
    low = fig.add_subplot(gs[1], sharex=top)
    _line_panel(top, points, samples, grid, line, half)
    _residual_panel(low, points, grid, line, half, calibration.get("concentration_unit", ""))
    return _raster(fig)


def _short(label: str, width: int = 46) -> str:
    """One line per bar: long source names are cut with an ellipsis (the table has them whole)."""
    label = str(label) or "(none)"
    return label if len(label) <= width else label[: width - 1] + "…"


def _share_text(value: float) -> str:
    return f"{value:.1f} %" if value >= 0.05 or value == 0 else "< 0.1 %"


def _bars(ax, labels, shares, title: str) -> None:
    positions = np.arange(len(labels))[::-1]
    values = 100.0 * np.asarray(shares, dtype=float)
    ax.barh(positions, values, color=LINE, height=0.62)
    ax.set_yticks(positions)
    ax.set_yticklabels([_short(lab) for lab in labels], fontsize=7.2)
    right = max(values.max() if values.size else 1.0, 1e-9)
    ax.set_xlim(0, right * 1.18)
    for pos, v in zip(positions, values, strict=True):
        ax.text(v + right * 0.01, pos, _share_text(v), va="center", fontsize=7)
    ax.set_xlabel("share of the combined variance / %", fontsize=8)
    ax.set_title(title, fontsize=9, loc="left")
    _tidy(ax)
    ax.grid(False, axis="y")


def share_chart(by_source: list[tuple[str, float]], by_step: list[tuple[str, float]],
                top: int = 12) -> Raster:
    """Ranked horizontal bars: the largest sources (rest summed as 'all others') and the steps."""
    ranked = sorted(by_source, key=lambda item: -item[1])
    shown = ranked[:top]
    rest = ranked[top:]
    if rest:
        shown = shown + [(f"all {len(rest)} other sources", sum(s for _, s in rest))]
    steps = sorted(by_step, key=lambda item: -item[1])
    rows = len(shown) + len(steps)
    height = min(1.5 + 0.2 * rows, 9.0)
    fig = _figure(height)
    gs = fig.add_gridspec(2, 1, height_ratios=[max(len(shown), 1), max(len(steps), 1)],
                          hspace=1.1 / height * 2.2, left=0.4, right=0.97,
                          top=1 - 0.3 / height, bottom=0.45 / height)
    _bars(fig.add_subplot(gs[0]), [label for label, _ in shown], [s for _, s in shown],
          f"by source (largest {min(top, len(ranked))})")
    _bars(fig.add_subplot(gs[1]), [label for label, _ in steps], [s for _, s in steps], "by step")
    return _raster(fig)


def monte_carlo_figure(mc: dict, value: float, u: float, nu_eff, unit: str) -> Raster:
    """Histogram of the Monte Carlo trials with the GUM distribution and both intervals."""
    hist = mc["histogram"]
    edges = np.asarray(hist["edges"], dtype=float)
    counts = np.asarray(hist["counts"], dtype=float)
    widths = np.diff(edges)
    density = counts / (counts.sum() * widths) if counts.sum() > 0 else counts
    fig = _figure(3.1)
    ax = fig.add_axes((0.1, 0.33, 0.87, 0.63))
    ax.stairs(density, edges, fill=True, color=BAND, label="Monte Carlo trials")  # one patch, not one per bin
    grid = np.linspace(edges[0], edges[-1], 400)
    if nu_eff is None or not math.isfinite(nu_eff) or nu_eff > 1e6:
        curve, label = normal_density(grid, value, u), "GUM: normal, y and u(y)"
    else:
        curve = t_density((grid - value) / u, nu_eff) / u
        label = f"GUM: t distribution, ν_eff = {nu_eff:.0f}, y and u(y)"
    ax.plot(grid, curve, color=LINE, linewidth=1.4, label=label)
    marks = [("interval", WARM, "-", "Monte Carlo, probabilistically symmetric"),
             ("shortest_interval", BAD, "--", "Monte Carlo, shortest"),
             ("gum_interval", LINE, ":", "GUM, y ± U")]
    for key, colour, style, text in marks:
        ends = mc.get(key)
        if ends and all(e is not None for e in ends):
            for i, end in enumerate(ends):
                ax.axvline(end, color=colour, linestyle=style, linewidth=1.2,
                           label=text if i == 0 else None)
    ax.set_xlabel(f"result / {unit}" if unit else "result", fontsize=9)
    ax.set_ylabel("probability density", fontsize=9)
    fig.legend(fontsize=7, frameon=False, loc="lower center", ncol=3)
    _tidy(ax)
    return _raster(fig)


def window_figure(standards: list[float], samples: list[float], low: float, high: float) -> Raster:
    """The photometric error curve with the recommended window and where the readings lie."""
    readings = [a for a in list(standards) + list(samples) if a is not None and a > 0]
    a_max = max([2.0] + [a * 1.1 for a in readings])
    curve = error_curve(0.02, a_max, 300)
    fig = _figure(1.9)
    ax = fig.add_axes((0.1, 0.2, 0.87, 0.62))
    ax.axvspan(low, high, color="#e9efe6", label=f"recommended window {low:g} to {high:g}")
    ax.plot(curve.absorbance, curve.relative_error_factor, color=LINE, linewidth=1.3,
            label="relative error per unit transmittance noise")
    ax.axvline(curve.optimum_absorbance, color=MUTED, linestyle=":", linewidth=1,
               label=f"minimum at A = {curve.optimum_absorbance:.3f}")
    ax.set_yscale("log")
    ax.set_ylim(2, 60)
    ax.yaxis.set_major_locator(FixedLocator([2, 5, 10, 20, 50]))
    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.yaxis.set_minor_formatter(NullFormatter())
    ymin = 2.0
    ax.plot(standards, [ymin * 1.15] * len(standards), "|", color=POINT, markersize=12,
            label="standards")
    if samples:
        ax.plot(samples, [ymin * 1.45] * len(samples), "|", color=WARM, markersize=12,
                markeredgewidth=1.6, label="samples")
    ax.set_xlim(0, a_max)
    ax.set_xlabel("absorbance", fontsize=9)
    ax.set_ylabel("error factor", fontsize=9)
    fig.legend(fontsize=7, frameon=False, loc="upper center", ncol=3)
    _tidy(ax)
    return _raster(fig)


STEP_COLOURS = ("#2f5d7c", "#c98a2b", "#7d8a95", "#5f9e6e", "#a02c2c", "#8c6bb1", "#c7d6e2", "#e3b873",
                "#3d3d3d", "#9ecae1")


def _bar_segments(ax, positions, left, values, colour: str, label: str, height: float = 0.66) -> None:
    """One step's segments of the stacked bars (what barh draws) as one collection, not one
    rectangle object per result: a chart of 25 results and 8 steps would hold 200."""
    half = height / 2
    boxes = [[(x0, y - half), (x0 + w, y - half), (x0 + w, y + half), (x0, y + half)]
             for y, x0, w in zip(positions, left, values, strict=True)]
    ax.add_collection(matplotlib.collections.PolyCollection(
        boxes, facecolors=colour, edgecolors="white", linewidths=0.4, label=label))


def _row_labels(ax, positions, labels: list[str], axes_width_in: float) -> None:
    """Labels of horizontal bars at the left of the axes, each with an outward tick, as y tick labels
    look (8 pt, after _tidy), drawn as one collection and plain texts: matplotlib's tick objects, one
    per bar, cost about 0.05 s for 50 results."""
    ax.set_yticks([])
    at = matplotlib.transforms.blended_transform_factory(ax.transAxes, ax.transData)
    tick = TICK_PT / 72 / axes_width_in
    ax.add_collection(matplotlib.collections.LineCollection(
        [[(0.0, p), (-tick, p)] for p in positions], colors="black", linewidths=SPINE_WIDTH, transform=at,
        clip_on=False), autolim=False)
    for p, label in zip(positions, labels, strict=True):
        ax.text(-(TICK_PT + PAD_PT) / 72 / axes_width_in, p, label, transform=at, ha="right", va="center",
                fontsize=8, clip_on=False)


def step_shares_chart(bars: list[tuple[str, list[tuple[str, float]]]]) -> Raster:
    """One stacked bar per result: its variance shared out by step, the steps in one legend."""
    steps: list[str] = []
    for _, groups in bars:
        for step, _share in sorted(groups, key=lambda g: -g[1]):
            if step not in steps:
                steps.append(step)
    legend_rows = math.ceil(len(steps) / 4)
    legend_in = 0.16 * legend_rows + 0.5  # the legend under the x-axis label
    height = 0.12 + 0.19 * len(bars) + legend_in
    fig = _figure(height)
    ax = fig.add_axes((0.2, legend_in / height, 0.77, 1 - (legend_in + 0.12) / height))
    positions = np.arange(len(bars))[::-1]
    left = np.zeros(len(bars))
    for i, step in enumerate(steps):
        values = np.array([100.0 * dict(groups).get(step, 0.0) for _, groups in bars])
        _bar_segments(ax, positions, left, values, STEP_COLOURS[i % len(STEP_COLOURS)], _short(step, 38))
        for pos, v, start in zip(positions, values, left, strict=True):
            if v >= 8:  # a label where the segment is wide enough to hold it
                ax.text(start + v / 2, pos, f"{v:.0f}", ha="center", va="center", fontsize=6.5,
                        color="white" if i % len(STEP_COLOURS) in (0, 3, 4, 5, 8) else POINT)
        left += values
    ax.set_xlim(0, 100)
    ax.set_xlabel("share of the combined variance / %", fontsize=8)
    _tidy(ax)
    _row_labels(ax, positions, [_short(label, 30) for label, _ in bars], 0.77 * WIDTH_IN)
    ax.grid(False, axis="y")
    fig.legend(fontsize=7, frameon=False, loc="lower center", ncol=4, bbox_to_anchor=(0.5, 0.0))
    return _raster(fig)


INTERVAL_MARKS = (("interval", WARM, "-"), ("shortest_interval", BAD, "--"), ("gum_interval", LINE, ":"))
# Small multiples are drawn straight onto the figure, each panel in its own box, with the look of an
# Axes (histogram, curve, interval lines, bottom spine, x ticks, a title) but not its machinery: an
# Axes per panel costs about 20 ms in matplotlib's tick and layout objects, 1 s for 50 results.


def _mc_curve(edges, value: float, u: float, nu_eff):
    """The GUM distribution of y over the histogram's range: normal, or scaled t with nu_eff."""
    grid = np.linspace(edges[0], edges[-1], 200)
    if nu_eff is None or not math.isfinite(nu_eff) or nu_eff > 1e6:
        return grid, normal_density(grid, value, u)
    return grid, t_density((grid - value) / u, nu_eff) / u


def _panel_view(edges, density, curve, mc: dict) -> tuple[float, float, float]:
    """(x low, x high, y high) of one panel: the data (histogram, curve, interval ends) with 5 %
    margins on x and at the top, y from zero (what an Axes' autoscaling gives these artists)."""
    xs = [float(edges[0]), float(edges[-1])]
    for key, _, _ in INTERVAL_MARKS:
        ends = mc.get(key)
        if ends and all(e is not None for e in ends):
            xs += [float(e) for e in ends]
    lo, hi = matplotlib.ticker.MaxNLocator(4).nonsingular(min(xs), max(xs))  # a range, not a point
    ys = np.concatenate([density[np.isfinite(density)], curve[np.isfinite(curve)], [0.0]])
    top = float(ys.max())
    top = top * 1.05 if top > 0 else 1.0
    return lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo), top


def _x_ticks(lo: float, hi: float) -> tuple[list[float], list[str], str]:
    """Tick positions, their labels and the axis offset text, as an x-axis of lo to hi shows them
    (MaxNLocator(4) and matplotlib's default number format)."""
    ticks = [float(t) for t in matplotlib.ticker.MaxNLocator(4).tick_values(lo, hi)]
    slack = 1e-9 * (hi - lo)
    ticks = [t for t in ticks if lo - slack <= t <= hi + slack]
    formatter = matplotlib.ticker.ScalarFormatter()
    formatter.create_dummy_axis()  # an axis that holds the view interval only, which the format reads
    formatter.axis.set_view_interval(lo, hi)  # type: ignore[union-attr]  # set just above
    return ticks, formatter.format_ticks(ticks), formatter.get_offset()


def _mc_panel(fig: Figure, box, height_in: float, panel: tuple[str, dict, float, float, object]) -> None:
    """One small histogram of the trials with the GUM curve and the three intervals, in `box`
    (figure fraction), with its x-axis and title."""
    title, mc, value, u, nu_eff = panel
    hist = mc["histogram"]
    edges = np.asarray(hist["edges"], dtype=float)
    counts = np.asarray(hist["counts"], dtype=float)
    density = counts / (counts.sum() * np.diff(edges)) if counts.sum() > 0 else counts
    grid, curve = _mc_curve(edges, value, u, nu_eff)
    lo, hi, top = _panel_view(edges, density, curve, mc)
    to_fig = matplotlib.transforms.BboxTransform(matplotlib.transforms.Bbox([[lo, 0.0], [hi, top]]), box)
    data = to_fig + fig.transFigure
    fig.add_artist(matplotlib.patches.StepPatch(density, edges, fill=True, color=BAND, transform=data))
    fig.add_artist(matplotlib.lines.Line2D(grid, curve, color=LINE, linewidth=1.1, transform=data))
    for key, colour, style in INTERVAL_MARKS:
        ends = mc.get(key)
        if ends and all(e is not None for e in ends):
            fig.add_artist(matplotlib.collections.LineCollection(
                [[(float(e), 0.0), (float(e), top)] for e in ends], colors=colour, linestyles=style,
                linewidths=1.0, capstyle="projecting" if style == "-" else "butt", zorder=2, transform=data))
    _x_axis(fig, box, height_in, lo, hi)
    fig.text(box.x0, box.y1 + TITLE_PAD_PT / 72 / height_in, _short(title, 34), fontsize=TITLE_SIZE,
             ha="left", va="baseline")


def _x_axis(fig: Figure, box, height_in: float, lo: float, hi: float) -> None:
    """The panel's bottom spine, its ticks pointing out and their labels (offset text at the right)."""
    ticks, labels, offset = _x_ticks(lo, hi)
    xs = [box.x0 + (t - lo) / (hi - lo) * box.width for t in ticks]
    tick = TICK_PT / 72 / height_in
    fig.add_artist(matplotlib.lines.Line2D([box.x0, box.x1], [box.y0, box.y0], color="black",
                                           linewidth=SPINE_WIDTH, solid_capstyle="projecting",
                                           transform=fig.transFigure))
    fig.add_artist(matplotlib.collections.LineCollection(
        [[(x, box.y0), (x, box.y0 - tick)] for x in xs], colors="black", linewidths=SPINE_WIDTH,
        transform=fig.transFigure))
    below = box.y0 - (TICK_PT + PAD_PT) / 72 / height_in
    for x, label in zip(xs, labels, strict=True):
        fig.text(x, below, label, fontsize=TICK_SIZE, ha="center", va="top")
    if offset:
        fig.text(box.x1, below - 1.3 * TICK_SIZE / 72 / height_in, offset, fontsize=TICK_SIZE,
                 ha="right", va="top")


def monte_carlo_grid_figure(panels: list[tuple[str, dict, float, float, object]], unit: str) -> Raster:
    """Small multiples: one panel per result (title, Monte Carlo block, y, u(y), nu_eff), drawn
    once as one figure, with one legend for all."""
    columns = 4 if len(panels) > 6 else 3 if len(panels) > 4 else 2
    rows = math.ceil(len(panels) / columns)
    height = 0.55 + 0.95 * rows
    fig = _figure(height)
    gs = fig.add_gridspec(rows, columns, hspace=0.75, wspace=0.12, left=0.03, right=0.98,
                          top=1 - 0.22 / height, bottom=0.6 / height)
    for i, panel in enumerate(panels):
        _mc_panel(fig, gs[i // columns, i % columns].get_position(fig), height, panel)
    handles = [matplotlib.patches.Patch(color=BAND, label="Monte Carlo trials"),
               matplotlib.lines.Line2D([], [], color=LINE, linewidth=1.1, label="GUM distribution of y"),
               matplotlib.lines.Line2D([], [], color=WARM, label="MC, probabilistically symmetric"),
               matplotlib.lines.Line2D([], [], color=BAD, linestyle="--", label="MC, shortest"),
               matplotlib.lines.Line2D([], [], color=LINE, linestyle=":", label="GUM, y ± U")]
    fig.legend(handles=handles, fontsize=7, frameon=False, loc="lower center", ncol=5)
    fig.text(0.5, 0.33 / height, f"result / {unit}" if unit else "result", ha="center", fontsize=7.5)
    return _raster(fig)


def routine_uncertainty_figure(by_concentration: list[dict], unit: str) -> Raster:
    """Top-down U against concentration (a curve) with each result's bottom-up U (points)."""
    fig = _figure(1.9)
    ax = fig.add_axes((0.1, 0.2, 0.87, 0.62))
    cs = [e["concentration"] for e in by_concentration]
    ax.plot(cs, [e["expanded_uncertainty"] for e in by_concentration], color=LINE, linewidth=1.3,
            marker="o", markersize=3, label="top-down U (validation data)")
    bottom = [(e["concentration"], e["bottom_up_expanded_uncertainty"]) for e in by_concentration
              if e.get("bottom_up_expanded_uncertainty") is not None]
    if bottom:
        ax.plot(*zip(*bottom, strict=True), linestyle="none", marker="s", markersize=5, color=WARM,
                label="bottom-up U of each result (within-run budget)")
    ax.set_xlabel(f"concentration ({unit})", fontsize=9)
    ax.set_ylabel(f"U ({unit})", fontsize=9)
    ax.set_xlim(left=0)
    ax.set_ylim(bottom=0)
    fig.legend(fontsize=7, frameon=False, loc="upper center", ncol=2)
    _tidy(ax)
    return _raster(fig)
