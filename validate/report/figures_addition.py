"""The standard-addition figure: each flask's readings against the concentration added, the
line extended to zero response, and the extrapolated intercept with its interval."""

from __future__ import annotations

import numpy as np

from validate.report.figures import BAND, LINE, POINT, WARM, Raster, _figure, _raster, _tidy


def addition_figure(block: dict, interval: tuple[float, float] | None) -> Raster:
    """`interval`: the reported interval of the sample's concentration, on the added-concentration
    axis (calibration unit, the flask's scale); drawn about the extrapolated intercept."""
    fig = _figure(2.4)
    ax = fig.add_axes((0.1, 0.2, 0.87, 0.7))
    unit = block["concentration_unit"]
    for level in block["levels"]:
        ax.plot([level["added"]] * len(level["readings"]), level["readings"], linestyle="none", marker="o",
                markersize=3, color=POINT)
    x_e = block["extrapolated"]
    top = max(level["added"] for level in block["levels"])
    grid = np.linspace(-x_e * 1.15 if x_e > 0 else -0.1 * top, top * 1.05, 100)
    ax.plot(grid, block["intercept"] + block["slope"] * grid, color=LINE, linewidth=1.2,
            label=f"line of the additions, slope {block['slope']:.4g} per {unit}")
    ax.axhline(0.0, color="#9aa5ae", linewidth=0.8)
    if interval is not None:
        ax.axvspan(-interval[1], -interval[0], color=BAND, alpha=0.8, label="reported interval (p = 0.95)")
    ax.plot([-x_e], [0.0], marker="D", markersize=6, color=WARM, linestyle="none",
            label=f"extrapolated: {x_e:.4g} {unit} in the flask")
    ax.set_xlabel(f"concentration added to the flask ({unit})", fontsize=9)
    ax.set_ylabel("absorbance", fontsize=9)
    ax.legend(fontsize=7, frameon=False, loc="upper left")
    _tidy(ax)
    return _raster(fig)
