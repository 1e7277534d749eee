"""What the targets job reads besides the favourability: component rasters, robustness, occurrences.

Every raster must lie on the favourability's grid (the zone statistics read
them cell for cell); occurrences are points in any CRS that can be
reprojected to the grid's, each placed in the cell that holds it.
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass

import numpy as np
from osgeo import gdal, osr

from ..core.errors import GridError, GridMismatchError, InputError
from ..core.feedback import Feedback
from ..core.tree import COMPONENTS, PATH_SEPARATOR, Tree
from .blocks import Window
from .grid import Grid, crs_label
from .sources import SourceSpec, open_raster
from .vector import usable_layer


@dataclass(frozen=True)
class RasterInput:
    """A raster the job reads on the grid.

    ``label`` names it in messages, ``name`` in tables and figures (a
    component's node name); ``field`` is its attribute in the targets
    layer, ``short`` its word in "why it ranks" and ``component`` its
    mineral-system component, if it is one.
    """

    label: str
    field: str
    path: str
    spec: SourceSpec
    grid: Grid
    short: str = ""
    name: str = ""
    component: str | None = None


def open_on_grid(path: str, label: str, grid: Grid | None = None, field: str = "", short: str = "",
                 name: str = "", component: str | None = None) -> RasterInput:
    """Open band 1 of a raster and, given ``grid``, refuse it unless it lies on that grid.

    Raises
    ------
    MissingInputError, InputError, GridError
        Missing, unreadable, without a CRS, or (``GridMismatchError``) on
        another grid.
    """
    ds = open_raster(path, label)
    own = Grid.from_dataset(ds, f"{label} {path}")
    band = ds.GetRasterBand(1)
    nodata, scale, offset = band.GetNoDataValue(), band.GetScale() or 1.0, band.GetOffset() or 0.0
    band = None
    ds = None
    if grid is not None and not own.same_as(grid):
        raise GridMismatchError(f"{label} {path} is on another grid ({own.describe()}, origin "
                                f"{own.xmin:g}, {own.ymax:g}) than the favourability ({grid.describe()}, "
                                f"origin {grid.xmin:g}, {grid.ymax:g}); targets read every raster cell for "
                                "cell, so give rasters written on the favourability's grid")
    return RasterInput(label, field, path, SourceSpec(path, path, 1, nodata, scale, offset, {}), own, short,
                       name or os.path.splitext(os.path.basename(path))[0], component)


def _slug(text: str) -> str:
    """Return a field-name-safe lower-case slug of ``text``."""
    slug = "".join(ch if ch.isalnum() else "_" for ch in text.lower()).strip("_")
    while "__" in slug:
        slug = slug.replace("__", "_")
    return slug or "node"


def component_inputs(components, record: dict | None, grid: Grid) -> list[RasterInput]:
    """Return the component rasters (a folder of them, or a list), named from the favourability's lineage.

    A raster's node is found from the lineage's ``outputs.nodes`` (its path)
    or from its band description (the node path the evaluation writes
    there); its field is ``mu_<component>`` for one of the four components,
    else ``mu_<node name>``. Components come first, in their usual order.
    """
    if not components:
        return []
    if isinstance(components, (str, os.PathLike)):
        folder = os.path.abspath(components)
        if not os.path.isdir(folder):
            raise InputError(f"the component folder {folder} is not a folder")
        paths = sorted(glob.glob(os.path.join(folder, "*.tif")) + glob.glob(os.path.join(folder, "*.tiff")))
        if not paths:
            raise InputError(f"the component folder {folder} holds no GeoTIFF (.tif)")
    else:
        paths = [os.path.abspath(p) for p in components]
    nodes = {}
    tree = None
    if record:
        nodes = {os.path.abspath(f): n for n, f in ((record.get("outputs") or {}).get("nodes") or {}).items()}
        try:
            tree = Tree.from_dict(record["tree"]) if isinstance(record.get("tree"), dict) else None
        except Exception:  # a lineage is checked on read; a tree unusable here only loses names
            tree = None
    found, taken = [], set()
    for path in paths:
        node = nodes.get(path) or _description(path)
        kind = None
        if tree is not None and node:
            try:
                kind = tree.find(node).component
            except (KeyError, ValueError):
                kind = None
        name = node.split(PATH_SEPARATOR)[-1] if node else os.path.splitext(os.path.basename(path))[0]
        field = "mu_" + _slug(kind or name)
        while field in taken:
            field += "_2"
        taken.add(field)
        short = kind or name
        found.append((COMPONENTS.index(kind) if kind in COMPONENTS else len(COMPONENTS), name.lower(),
                      open_on_grid(path, f"the component raster {name}", grid, field, short, name, kind)))
    return [item for *_, item in sorted(found, key=lambda item: item[:2])]


def _description(path: str) -> str:
    """Return band 1's description (the node path an evaluation writes), or ''."""
    try:
        ds = gdal.Open(path)
        band = ds.GetRasterBand(1)
        text = band.GetDescription() or ""
        band = None
        ds = None
    except RuntimeError:
        return ""
    return text


@dataclass
class PointsOnGrid:
    """Occurrence points placed on a grid: the cell of each (sorted by row), their names, a record.

    ``order`` holds each on-grid point's index among all points read
    (``total``); ``xy`` every point's coordinates in the grid's CRS.
    """

    rows: np.ndarray
    cols: np.ndarray
    order: np.ndarray
    names: list[str] | None
    record: dict
    total: int = 0
    xy: np.ndarray | None = None

    def ranks_in(self, window: Window, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (point indices, value of ``block`` at each) for the points in ``window``."""
        start, stop = np.searchsorted(self.rows, [window.row_off, window.row_off + window.height])
        rows, cols, index = self.rows[start:stop], self.cols[start:stop], self.order[start:stop]
        inside = (cols >= window.col_off) & (cols < window.col_off + window.width)
        rows, cols, index = rows[inside], cols[inside], index[inside]
        return index, block[rows - window.row_off, cols - window.col_off]


def read_points(path: str, layer_name: str | None, name_field: str | None, grid: Grid,
                feedback: Feedback, name: str = "deposits") -> PointsOnGrid:
    """Read occurrence points with their names and place them on ``grid``.

    Points in another CRS are reprojected; points off the grid are counted
    and reported. ``name_field`` defaults to a field called ``name`` (any
    case), if the layer has one.

    Raises
    ------
    MissingInputError, InputError, GridError
        Missing file, no features, no CRS, geometries that are not points, a
        name field the layer lacks, or a CRS that cannot be reprojected to
        the grid's.
    """
    facts, label, source_srs = usable_layer(path, layer_name, name)
    if "point" not in facts.geometry.lower():
        raise InputError(f"{name}: the layer {label} holds {facts.geometry} geometries; occurrences must "
                         "be points")
    if name_field is None:
        name_field = next((f for f in facts.fields if f.lower() == "name"), None)
    elif name_field not in facts.fields:
        raise InputError(f"{name}: the layer {label} has no field {name_field!r}; it has "
                         f"{', '.join(facts.fields) or 'no fields'}")
    xs, ys, names = _points(path, facts.name, name_field)
    reprojected = not bool(source_srs.IsSame(grid.srs))
    if reprojected and xs.size:
        try:
            transform = osr.CoordinateTransformation(source_srs, grid.srs)
            moved = np.asarray(transform.TransformPoints(np.column_stack([xs, ys]).tolist()), dtype=float)
        except (RuntimeError, TypeError, ValueError) as exc:
            raise GridError(f"{name}: the layer {label} is in {crs_label(source_srs)}, which cannot be "
                            f"reprojected to the grid's {crs_label(grid.srs)} ({str(exc)[:160]}); "
                            "reproject the layer or assign it the right CRS") from None
        if not np.isfinite(moved[:, :2]).all():
            raise GridError(f"{name}: the layer {label} is in {crs_label(source_srs)}; some of its points "
                            f"have no place in the grid's {crs_label(grid.srs)}")
        xs, ys = moved[:, 0], moved[:, 1]
        feedback.info(f"{name}: {label} is in {crs_label(source_srs)}; its points were reprojected to the "
                      f"grid's {crs_label(grid.srs)}")
    cols = np.floor((xs - grid.xmin) / grid.cell_x).astype(np.int64)
    rows = np.floor((grid.ymax - ys) / grid.cell_y).astype(np.int64)
    on = (cols >= 0) & (cols < grid.width) & (rows >= 0) & (rows < grid.height)
    if (~on).any():
        feedback.warning(f"{name}: {int((~on).sum())} of {xs.size} points of {label} fall outside the grid "
                         "and are in no target")
    index = np.flatnonzero(on)
    order = index[np.argsort(rows[on], kind="stable")]
    record = {"kind": "occurrences", "path": path, "layer": facts.name, "points": int(xs.size),
              "on_grid": int(on.sum()), "outside_grid": int((~on).sum()), "crs": crs_label(source_srs),
              "reprojected": reprojected, "name_field": name_field}
    return PointsOnGrid(rows[order], cols[order], order, names, record, int(xs.size),
                        np.column_stack([xs, ys]))


def _points(path: str, layer_name: str, name_field: str | None):
    """Return x, y of every point (multipoints exploded) and, with ``name_field``, each point's name."""
    ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
    layer = ds.GetLayerByName(layer_name)
    xs, ys, names = [], [], []
    for feature in layer:
        geometry = feature.GetGeometryRef()
        if geometry is None or geometry.IsEmpty():
            continue
        label = "" if name_field is None or not feature.IsFieldSetAndNotNull(name_field) else \
            str(feature.GetField(name_field))
        parts = [geometry.GetGeometryRef(i) for i in range(geometry.GetGeometryCount())] \
            if geometry.GetGeometryCount() else [geometry]
        for part in parts:
            xs.append(part.GetX())
            ys.append(part.GetY())
            names.append(label or f"fid {feature.GetFID()}")
        geometry = part = None
    feature = layer = None
    ds = None
    return (np.array(xs, dtype=np.float64), np.array(ys, dtype=np.float64),
            names if name_field is not None else None)
