"""The figure of an equilibrium study: K of every point against the combined K.

Drawn with matplotlib's Agg canvas like the other figures (figures.py);
takes plain values from the record and returns the figure's pixels (`figures.Raster`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from validate.report.figures import BAND, LINE, POINT, WARM, Raster, _figure, _raster, _tidy


@dataclass(frozen=True)
class PointK:
    """One point's K with the ends of its error bar; `series` marks an addition-series reading."""

    id: str
    K: float
    low: float
    high: float
    series: bool


def k_per_point_figure(points: list[PointK], combined: float | None, expanded: float | None,
                       mc_interval: tuple[float, float] | None, unit: str, bar_label: str) -> Raster:
    """K of each point with its error bar; the combined K as a line, its GUM band and MC interval."""
    fig = _figure(3.6)
    ax = fig.add_axes((0.11, 0.3, 0.86, 0.66))
    x = np.arange(len(points))
    if combined is not None:
        if expanded is not None:
            ax.axhspan(combined - expanded, combined + expanded, color=BAND, alpha=0.7, linewidth=0,
                       label="combined K ± U (GUM)")
        ax.axhline(combined, color=LINE, linewidth=1.3, label="combined K")
        if mc_interval is not None:
            for i, end in enumerate(mc_interval):
                ax.axhline(end, color=LINE, linestyle="--", linewidth=0.9,
                           label="combined K, Monte Carlo 95 % interval" if i == 0 else None)
    for series, marker, colour, label in ((False, "o", POINT, "mixture"),
                                          (True, "s", WARM, "addition-series point")):
        idx = [i for i, p in enumerate(points) if p.series == series]
        if not idx:
            continue
        k = np.array([points[i].K for i in idx])
        below = k - np.array([points[i].low for i in idx])
        above = np.array([points[i].high for i in idx]) - k
        ax.errorbar(x[idx], k, yerr=[below, above], fmt=marker, color=colour, markersize=4.5,
                    elinewidth=1.1, capsize=3, label=f"{label}, K with its {bar_label}")
    ax.set_xticks(x)
    ax.set_xticklabels([p.id for p in points], fontsize=8)
    ax.set_xlim(-0.6, len(points) - 0.4)
    ax.set_xlabel("point (in the order of the record)", fontsize=9)
    ax.set_ylabel(f"K / {unit}" if unit else "K", fontsize=9)
    fig.legend(fontsize=7, frameon=False, loc="lower center", ncol=2)
    _tidy(ax)
    ax.grid(False, axis="x")
    return _raster(fig)
