"""Check a tree's inputs before anything runs: files, bands, CRSs, features, the grid.

:func:`input_problems` opens each proxy just far enough to say what is wrong
with it, without reading cells, so an editor can mark the node at fault while
the user works. Problems with level ``"warning"`` do not stop a run (a proxy
on another CRS is aligned); ``"error"`` ones do.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping

import numpy as np
from osgeo import gdal

from ..core.errors import FavourError
from ..core.tree import Problem, Tree
from .gdalenv import gdal_job
from .grid import Grid, crs_label
from .sources import open_raster
from .tree_inputs import reference_grid
from .vector import filter_problem, margin_problem, read_layer_facts


def _grid_of(tree: Tree) -> tuple[Grid | None, list[Problem]]:
    """Return the tree's grid (or None) and the problems met in finding it."""
    root = tree.root.name
    has_raster = any(node.is_leaf and node.proxy is not None and not node.proxy.is_vector
                     for _, node in tree.walk())
    if not tree.grid and not has_raster:
        return None, [Problem(root, "the tree has no raster proxy to take a grid from; give the tree "
                                    "a grid", "error")]
    try:
        return reference_grid(tree)[0], []
    except FavourError as exc:
        if tree.grid:
            return None, [Problem(root, f"grid: {exc}", "error")]
        return None, []  # the first raster proxy's own problem is reported at its leaf


def input_problems(tree: Tree) -> list[Problem]:
    """List what is wrong with the tree's inputs, node by node, without reading any cells.

    Returns the model's own problems (:meth:`Tree.problems`) too, so one call
    gives everything an editor shows.
    """
    problems = list(tree.problems())
    with gdal_job():
        grid, grid_problems = _grid_of(tree)
        problems.extend(grid_problems)
        for path, node in tree.walk():
            if node.is_leaf and node.proxy is not None:
                problems.extend(_proxy_problems(tree, path, node, grid))
    return problems


def _proxy_problems(tree: Tree, path: str, node, grid: Grid | None) -> list[Problem]:
    """Return the problems of one leaf's proxy layer."""
    proxy = node.proxy
    file = str(proxy.resolve(tree.base_dir))
    if not os.path.exists(file):
        return [Problem(path, f"the layer file {file} does not exist", "error")]
    try:
        if proxy.is_vector:
            facts = read_layer_facts(file, proxy.layer, path)
            if facts.count == 0:
                return [Problem(path, f"the vector layer {facts.name} has no features", "error")]
            if facts.srs_wkt is None:
                return [Problem(path, f"the vector layer {facts.name} has no CRS", "error")]
            found = _vector_option_problems(path, proxy, facts, grid)
            if found:
                return found
            if grid is not None and not grid.same_crs(facts.srs_wkt):
                return [Problem(path, f"features are in another CRS than the grid's "
                                      f"{crs_label(grid.srs)}; they will be reprojected", "warning")]
            return []
        ds = open_raster(file, path)
        band = proxy.band or 1
        if not 1 <= band <= ds.RasterCount:
            return [Problem(path, f"the layer has {ds.RasterCount} band(s); band {band} does not exist",
                            "error")]
        own = Grid.from_dataset(ds, f"{path}: the layer")
    except FavourError as exc:
        return [Problem(path, str(exc).removeprefix(f"{path}: "), "error")]
    if grid is None or own.same_as(grid):
        return []
    if not grid.same_crs(own.crs_wkt):
        return [Problem(path, f"the layer is in {crs_label(own.srs)}, the grid in "
                              f"{crs_label(grid.srs)}; it will be reprojected", "warning")]
    return [Problem(path, f"the layer's cells ({own.cell_x:g} x {own.cell_y:g}, {own.width} x "
                          f"{own.height}) differ from the grid's; it will be resampled", "warning")]


def _vector_option_problems(path: str, proxy, facts, grid: Grid | None) -> list[Problem]:
    """Return the problems of a vector proxy's filter (against the layer's fields) and margin.

    A filter or margin the tree itself refuses (:meth:`Tree.problems`) is
    already listed there; this checks them against the layer and the grid.
    """
    found = []
    where = proxy.where
    if isinstance(where, Mapping) and isinstance(where.get("field"), str) and \
            isinstance(where.get("values"), list) and where["values"]:
        problem = filter_problem(facts, where)
        if problem:
            found.append(Problem(path, problem, "error"))
    margin = proxy.margin
    if grid is not None and isinstance(margin, (int, float)) and not isinstance(margin, bool) \
            and math.isfinite(margin) and margin > 0:
        problem = margin_problem(grid, float(margin))
        if problem:
            found.append(Problem(path, problem, "error"))
    return found


def sample_values(path: str, band: int = 1, max_cells: int = 250_000) -> np.ndarray:
    """Return a decimated sample of a raster band's valid values (float64, NaN dropped).

    GDAL reads the band at a reduced size (nearest neighbour, overviews when
    present), so the cost is bounded whatever the raster's size. For a
    membership editor's histogram, not for statistics that must be exact.
    """
    with gdal_job():
        ds = open_raster(path, "layer")
        rb = ds.GetRasterBand(band)
        factor = max(1.0, np.sqrt(ds.RasterXSize * ds.RasterYSize / max_cells))
        width = max(1, int(ds.RasterXSize / factor))
        height = max(1, int(ds.RasterYSize / factor))
        raw = rb.ReadAsArray(buf_xsize=width, buf_ysize=height,
                             resample_alg=gdal.GRIORA_NearestNeighbour)
        nodata = rb.GetNoDataValue()
        scale, offset = rb.GetScale() or 1.0, rb.GetOffset() or 0.0
        rb = None
        ds = None
    values = raw.astype(np.float64).ravel()
    if nodata is not None and not np.isnan(nodata):
        values = values[raw.ravel() != nodata]
    values = values[np.isfinite(values)]
    return values * scale + offset if (scale != 1.0 or offset != 0.0) else values
