"""Map figures of the report: favourability, components, uncertainty, with occurrences and targets.

Each function takes arrays already read (decimated) by the report job and
returns the PNG's bytes, drawn with matplotlib's Agg backend in Favour's
ramp (:data:`favour_plugin.raster.style.RAMP`); grey marks nodata.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..raster.style import RAMP
from .charts import _pyplot, png_bytes


@dataclass
class MapLayer:
    """A decimated raster: its values (NaN for nodata), extent [xmin, xmax, ymin, ymax] and title."""

    values: np.ndarray
    extent: list[float]
    title: str
    low: float = 0.0
    high: float = 1.0
    label: str = "μ"


@dataclass
class Overlay:
    """What is drawn over a map: occurrence points with names, target outlines with their ranks."""

    points: np.ndarray | None = None
    names: list[str] = field(default_factory=list)
    outlines: list[tuple[int, list[np.ndarray], tuple[float, float]]] = field(default_factory=list)


def ramp_colormap():
    """Return Favour's ramp as a matplotlib colour map, nodata in light grey."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("favour", [(value, colour) for value, colour in RAMP])
    cmap.set_bad("#d9d9d9")
    return cmap


def _km_axes(ax) -> None:
    """Label both axes in kilometres of the grid's CRS (metres assumed; the label says map units)."""
    from matplotlib.ticker import FuncFormatter

    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v / 1000:.0f}"))
        axis.set_tick_params(labelsize=7)


def _draw_overlay(ax, overlay: Overlay | None, small: bool = False) -> None:
    """Draw target outlines (with their ranks) and occurrence points on a map axis."""
    if overlay is None:
        return
    import matplotlib.patheffects as effects
    from matplotlib.collections import LineCollection

    halo = [effects.withStroke(linewidth=2.4, foreground="white")]
    rings = [ring for _, parts, _ in overlay.outlines for ring in parts]
    if rings:
        ax.add_collection(LineCollection(rings, colors="#101010", linewidths=0.5 if small else 0.9, zorder=4))
    for rank, _, at in overlay.outlines:
        if not small and rank <= 20:
            ax.annotate(str(rank), at, fontsize=7, fontweight="bold", ha="center", va="center",
                        color="#101010", path_effects=halo, zorder=6)
    if overlay.points is not None and len(overlay.points):
        ax.scatter(overlay.points[:, 0], overlay.points[:, 1], s=8 if small else 26, marker="o",
                   facecolor="white", edgecolor="#101010", linewidth=0.7, zorder=5)
        if not small and len(overlay.names) <= 40:
            for (x, y), name in zip(overlay.points, overlay.names):
                ax.annotate(name, (x, y), xytext=(4, 3), textcoords="offset points", fontsize=6,
                            color="#101010", path_effects=halo, zorder=6)


def _placed(figure, left: float, bottom: float, width: float, height: float):
    """Add axes at a place given in inches (fixed layouts: tight_layout costs seconds per figure)."""
    fig_w, fig_h = figure.get_size_inches()
    return figure.add_axes([left / fig_w, bottom / fig_h, width / fig_w, height / fig_h])


def main_map(layer: MapLayer, overlay: Overlay | None = None, caption: str = "") -> bytes:
    """Draw one raster large, with occurrences and targets; return the PNG's bytes."""
    plt = _pyplot()
    height, width = layer.values.shape
    map_w = 7.4
    map_h = min(9.5, max(2.5, map_w * height / max(1, width)))
    figure = plt.figure(figsize=(map_w + 2.1, map_h + 1.25))
    ax = _placed(figure, 0.75, 0.75, map_w, map_h)
    image = ax.imshow(layer.values, extent=layer.extent, cmap=ramp_colormap(), vmin=layer.low,
                      vmax=layer.high, interpolation="nearest", aspect="auto")
    _draw_overlay(ax, overlay)
    ax.set_xlim(layer.extent[0], layer.extent[1])
    ax.set_ylim(layer.extent[2], layer.extent[3])
    _km_axes(ax)
    ax.set_xlabel("easting (map units / 1000)", fontsize=8)
    ax.set_ylabel("northing (map units / 1000)", fontsize=8)
    ax.set_title(layer.title, fontsize=11, loc="left")
    bar = figure.colorbar(image, cax=_placed(figure, 0.75 + map_w + 0.2, 0.75, 0.18, map_h))
    bar.set_label(layer.label, fontsize=8)
    bar.ax.tick_params(labelsize=7)
    if caption:
        figure.text(0.01, 0.01, caption, fontsize=7.5, color="#404040")
    return png_bytes(figure)


def panel_maps(layers: Sequence[MapLayer], overlay: Overlay | None = None, columns: int = 3,
               title: str = "") -> bytes:
    """Draw several rasters as small panels with their own colour bars; return the PNG's bytes."""
    plt = _pyplot()
    columns = max(1, min(columns, len(layers)))
    rows = -(-len(layers) // columns)
    height, width = layers[0].values.shape
    map_w = 2.75
    map_h = min(4.0, max(1.2, map_w * height / max(1, width)))
    cell_w, cell_h, top = map_w + 1.05, map_h + 0.45, 0.35 if title else 0.05
    figure = plt.figure(figsize=(cell_w * columns, cell_h * rows + top))
    cmap = ramp_colormap()
    for i, layer in enumerate(layers):
        left = (i % columns) * cell_w + 0.1
        bottom = (rows - 1 - i // columns) * cell_h + 0.1
        ax = _placed(figure, left, bottom, map_w, map_h)
        image = ax.imshow(layer.values, extent=layer.extent, cmap=cmap, vmin=layer.low, vmax=layer.high,
                          interpolation="nearest", aspect="auto")
        _draw_overlay(ax, overlay, small=True)
        ax.set_xlim(layer.extent[0], layer.extent[1])
        ax.set_ylim(layer.extent[2], layer.extent[3])
        ax.set_xticks([])
        ax.set_yticks([])
        ax.set_title(layer.title, fontsize=9, loc="left")
        bar = figure.colorbar(image, cax=_placed(figure, left + map_w + 0.08, bottom, 0.12, map_h))
        bar.ax.tick_params(labelsize=6.5)
        bar.set_label(layer.label, fontsize=7)
    if title:
        figure.suptitle(title, fontsize=10, x=0.01, ha="left")
    return png_bytes(figure)
