"""The Monte Carlo small multiples, drawn without an Axes per panel, show what an Axes would show.

Reference: matplotlib's own x-axis (MaxNLocator(4) and its default ScalarFormatter) on an Axes
with the same view interval; the panel's view must hold every histogram bin and interval end.
"""

from __future__ import annotations

import matplotlib
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from validate.report import figures


def _axes_ticks(lo: float, hi: float) -> tuple[list[float], list[str], str]:
    """What a real matplotlib Axes shows on its x-axis for the view lo to hi."""
    fig = Figure(dpi=figures.DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(4))
    ax.set_xlim(lo, hi)
    fig.canvas.draw()
    ticks = [t for t in ax.xaxis.get_majorticklocs() if lo <= t <= hi]
    shown = {float(t.get_position()[0]): t.get_text() for t in ax.get_xticklabels()}
    return [float(t) for t in ticks], [shown[float(t)] for t in ticks], ax.xaxis.get_offset_text().get_text()


@pytest.mark.parametrize("lo, hi", [(0.1235, 0.1321), (-3.8, -2.2), (1.19e-7, 1.205e-7),
                                    (12345.6740, 12345.6826), (0.0, 250.0)])
def test_ticks_and_labels_are_those_of_a_matplotlib_axis(lo, hi):
    ticks, labels, offset = figures._x_ticks(lo, hi)
    want_ticks, want_labels, want_offset = _axes_ticks(lo, hi)
    assert ticks == pytest.approx(want_ticks, rel=0, abs=1e-12 * (hi - lo))
    assert labels == want_labels
    assert offset == want_offset


def _block(centre: float, s: float) -> dict:
    x = np.random.default_rng(3).normal(centre, s, 5000)
    counts, edges = np.histogram(x, 40)
    return {"histogram": {"edges": edges.tolist(), "counts": counts.tolist()},
            "interval": [centre - 3 * s, centre + 1.96 * s], "shortest_interval": [centre - 1.9 * s, centre + 2 * s],
            "gum_interval": [centre - 2 * s, centre + 5 * s]}  # an end beyond the histogram


def test_panel_view_holds_every_bin_and_interval_end_from_zero():
    mc = _block(5.0, 0.1)
    edges = np.asarray(mc["histogram"]["edges"])
    counts = np.asarray(mc["histogram"]["counts"], dtype=float)
    density = counts / (counts.sum() * np.diff(edges))
    grid, curve = figures._mc_curve(edges, 5.0, 0.1, None)
    lo, hi, top = figures._panel_view(edges, density, curve, mc)
    ends = [e for key in ("interval", "shortest_interval", "gum_interval") for e in mc[key]]
    assert lo < min(edges[0], *ends) and hi > max(edges[-1], *ends)
    assert top > max(density.max(), curve.max())
    assert grid[0] == edges[0] and grid[-1] == edges[-1]


def test_grid_figure_draws_one_panel_per_result_at_print_resolution():
    panels = [(f"sample_{i}", _block(1.0 + i, 0.01), 1.0 + i, 0.01, 30.0 if i % 2 else None) for i in range(7)]
    raster = figures.monte_carlo_grid_figure(panels, "mg/L")
    width, height = raster.size
    assert width == round(figures.WIDTH_IN * figures.DPI)
    assert height == round((0.55 + 0.95 * 2) * figures.DPI)  # 7 panels: two rows of four
    pixels = np.asarray(raster.pixels)
    band = np.array(matplotlib.colors.to_rgb(figures.BAND)) * 255
    assert np.isclose(pixels, band, atol=2).all(axis=2).sum() > 7 * 1000  # every histogram is filled
