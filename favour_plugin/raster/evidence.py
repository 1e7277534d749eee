"""Evidence rasters and deposit points on a grid, counted block by block for weights of evidence.

Deposits are points from any OGR source, reprojected to the grid's CRS when
needed. Each point is placed in the cell that contains it; points outside
the grid are counted and reported, never dropped silently. Several points in
one cell make one deposit cell (core.wofe's rule) and the extra points are
reported as merged. An optional study-area polygon layer limits the counts.

Integer evidence (Byte, Int16, UInt16 bands) is counted with one dense
histogram per block, which keeps a pass close to the cost of reading the
raster; other evidence goes through :class:`~favour_plugin.core.wofe.ClassCounts`.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
from osgeo import gdal, osr

from ..core import wofe
from ..core.errors import GridError, InputError
from ..core.feedback import Feedback
from .blocks import Window
from .grid import Grid, crs_label
from .sources import SourceSpec
from .streaming import map_windows
from .vector import usable_layer

# Band types counted by a dense histogram: their codes span at most 65 536 values.
_DENSE_TYPES = {gdal.GDT_Byte: (0, 256), gdal.GDT_UInt16: (0, 65536), gdal.GDT_Int16: (-32768, 65536)}


def cell_area_km2(grid: Grid) -> float:
    """Return the area of one grid cell in km², refusing a CRS without linear units.

    Raises
    ------
    GridError
        A geographic CRS (degrees): a unit cell is an area, so weights of
        evidence needs a projected grid.
    """
    srs = grid.srs
    if not srs.IsProjected():
        raise GridError(f"the grid is in {crs_label(srs)}, which is not projected; weights of evidence "
                        "measures areas in km², so reproject the evidence to a projected CRS")
    metres = srs.GetLinearUnits()
    return grid.cell_x * grid.cell_y * metres * metres / 1e6


@dataclass
class DepositCells:
    """Deposit points placed on a grid: the cells they fall in, with counts, and what was left out.

    ``rows`` and ``cols`` are sorted by row then column and unique; ``counts``
    is the number of points in each; ``outside_grid`` counts points that fall
    off the grid; ``total`` all points read.
    """

    rows: np.ndarray
    cols: np.ndarray
    counts: np.ndarray
    total: int
    outside_grid: int
    record: dict

    def in_window(self, window: Window) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (rows, columns within the window, point counts) of the deposit cells in it."""
        start, stop = np.searchsorted(self.rows, [window.row_off, window.row_off + window.height])
        rows, cols = self.rows[start:stop], self.cols[start:stop]
        inside = (cols >= window.col_off) & (cols < window.col_off + window.width)
        return (rows[inside] - window.row_off, cols[inside] - window.col_off,
                self.counts[start:stop][inside])

    def block(self, window: Window) -> np.ndarray:
        """Return the number of points in each cell of ``window`` (int64 array)."""
        out = np.zeros(window.shape, dtype=np.int64)
        rows, cols, counts = self.in_window(window)
        out[rows, cols] = counts
        return out

    @property
    def on_grid(self) -> int:
        """Points that fall on the grid."""
        return int(self.counts.sum())


def deposit_cells(path: str, layer_name: str | None, grid: Grid, feedback: Feedback,
                  name: str = "deposits", purpose: str = "weights of evidence") -> DepositCells:
    """Read deposit points and place them on ``grid``.

    ``purpose`` names what needs the deposits, for the message when there
    are none ("weights of evidence needs known deposits").

    Raises
    ------
    MissingInputError, InputError, GridError
        Missing file, no features, no CRS, a CRS that cannot be transformed
        to the grid's, geometries that are not points, or no point on the grid.
    """
    facts, label, source_srs = usable_layer(path, layer_name, name, f"; {purpose} needs known deposits")
    if "point" not in facts.geometry.lower():
        raise InputError(f"{name}: the layer {label} holds {facts.geometry} geometries; deposits must "
                         "be points")
    xs, ys = _read_points(path, facts.name)
    reprojected = not bool(source_srs.IsSame(grid.srs))
    if reprojected and xs.size:
        try:
            transform = osr.CoordinateTransformation(source_srs, grid.srs)
            points = np.asarray(transform.TransformPoints(np.column_stack([xs, ys]).tolist()))
        except RuntimeError as exc:
            raise GridError(f"{name}: the points of {label} cannot be reprojected to the grid's CRS "
                            f"{crs_label(grid.srs)} from their {crs_label(source_srs)} ({exc}); store "
                            "them in the grid's CRS") from None
        xs, ys = points[:, 0], points[:, 1]
        feedback.info(f"{name}: {label} is in {crs_label(source_srs)}; its points were reprojected to "
                      f"the grid's {crs_label(grid.srs)}")
    cols = np.floor((xs - grid.xmin) / grid.cell_x).astype(np.int64)
    rows = np.floor((grid.ymax - ys) / grid.cell_y).astype(np.int64)
    on = (cols >= 0) & (cols < grid.width) & (rows >= 0) & (rows < grid.height) & np.isfinite(xs)
    outside = int((~on).sum())
    if not on.any():
        raise InputError(f"{name}: none of the {xs.size} points of {label} falls on the grid "
                         f"({grid.describe()})")
    if outside:
        feedback.warning(f"{name}: {outside} of {xs.size} points of {label} fall outside the grid and "
                         "are not counted")
    keys, counts = np.unique(rows[on] * grid.width + cols[on], return_counts=True)
    record = {"kind": "deposits", "path": path, "layer": facts.name, "points": int(xs.size),
              "on_grid": int(on.sum()), "outside_grid": outside, "crs": crs_label(source_srs),
              "reprojected": reprojected, "cells": int(keys.size)}
    return DepositCells(keys // grid.width, keys % grid.width, counts.astype(np.int64), int(xs.size),
                        outside, record)


def _read_points(path: str, layer_name: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the x and y of every point (multipoints exploded) of a layer."""
    ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
    layer = ds.GetLayerByName(layer_name)
    xs, ys = [], []
    for feature in layer:
        geometry = feature.GetGeometryRef()
        if geometry is None or geometry.IsEmpty():
            continue
        parts = [geometry.GetGeometryRef(i) for i in range(geometry.GetGeometryCount())] \
            if geometry.GetGeometryCount() else [geometry]
        for part in parts:
            xs.append(part.GetX())
            ys.append(part.GetY())
        geometry = None
    feature = layer = None
    ds = None
    return np.array(xs, dtype=np.float64), np.array(ys, dtype=np.float64)


def study_area_source(path: str, layer_name: str | None, grid: Grid, workdir: str,
                      name: str = "study area") -> tuple[SourceSpec, dict]:
    """Rasterise a polygon layer onto ``grid`` (1 inside, 0 outside) and return how to read it.

    Cells whose centre lies inside a polygon are inside the study area.
    """
    facts, label, srs = usable_layer(path, layer_name, name)
    if not facts.polygons:
        raise InputError(f"{name}: the layer {label} holds {facts.geometry} geometries; a study area "
                         "is a polygon layer")
    target = os.path.join(workdir, "study-area.tif")
    ds = gdal.GetDriverByName("GTiff").Create(target, grid.width, grid.height, 1, gdal.GDT_Byte,
                                              ["TILED=YES", "COMPRESS=DEFLATE"])
    ds.SetProjection(grid.crs_wkt)
    ds.SetGeoTransform(grid.transform)
    gdal.Rasterize(ds, path, layers=[facts.name], burnValues=[1], allTouched=False)
    ds = None
    record = {"kind": "study area", "path": path, "layer": facts.name, "features": facts.count,
              "crs": crs_label(srs)}
    return SourceSpec(f"{path}|{facts.name}|study", target, 1, None, 1.0, 0.0, record), record


class DenseCounts:
    """Cells and deposit cells per code of an integer band, as dense histograms over its code range.

    :meth:`of_block` counts one window; blocks add up with ``+=``; :meth:`counts`
    turns the totals into :class:`~favour_plugin.core.wofe.ClassCounts` with the
    band's nodata code moved to the nodata counts. The counting rules are
    core.wofe's: a deposit cell counts once whatever its points, the extra
    points are merged, points outside the study area are reported.
    """

    def __init__(self, data_type: int, nodata: float | None) -> None:
        self.offset, self.size = _DENSE_TYPES[data_type]
        self.nodata = None if nodata is None or math.isnan(nodata) else int(nodata)
        self.cells = np.zeros(self.size, dtype=np.int64)
        self.deposits = np.zeros(self.size, dtype=np.int64)
        self.merged = 0
        self.outside = 0

    def of_block(self, raw: np.ndarray, deposits: tuple, inside: np.ndarray | None) -> DenseCounts:
        """Return the counts of one window: its raw codes, its deposit cells, its study mask."""
        block = DenseCounts.__new__(DenseCounts)
        block.offset, block.size, block.nodata = self.offset, self.size, self.nodata
        codes = raw.astype(np.int64) - self.offset if self.offset else raw
        if inside is None and raw.dtype == np.uint8:
            block.cells = byte_histogram(raw)
        else:
            flat = codes.ravel() if inside is None else codes[inside]
            block.cells = np.bincount(flat, minlength=self.size)
        rows, cols, counts = deposits
        if inside is not None and rows.size:
            keep = inside[rows, cols]
            block.outside = int(counts[~keep].sum())
            rows, cols, counts = rows[keep], cols[keep], counts[keep]
        else:
            block.outside = 0
        block.merged = int(np.maximum(counts - 1, 0).sum())
        block.deposits = np.bincount(np.asarray(codes[rows, cols], dtype=np.int64), minlength=self.size)
        return block

    def __iadd__(self, other: DenseCounts) -> DenseCounts:
        self.cells += other.cells
        self.deposits += other.deposits
        self.merged += other.merged
        self.outside += other.outside
        return self

    def counts(self) -> wofe.ClassCounts:
        """Return the totals as ClassCounts (codes present only, nodata code apart)."""
        cells, deposits = self.cells.copy(), self.deposits.copy()
        nodata_cells = nodata_deposits = 0
        if self.nodata is not None and 0 <= self.nodata - self.offset < self.size:
            index = self.nodata - self.offset
            nodata_cells, nodata_deposits = int(cells[index]), int(deposits[index])
            cells[index] = deposits[index] = 0
        present = np.flatnonzero(cells)
        out = wofe.ClassCounts.from_table(present + self.offset, cells[present], deposits[present],
                                          nodata_cells, nodata_deposits)
        out.merged_deposits, out.outside_deposits = self.merged, self.outside
        return out


def byte_histogram(raw: np.ndarray) -> np.ndarray:
    """Return the 256-bin histogram of a uint8 array, counting two cells per pass element.

    ``bincount`` widens every input element to a machine integer, so its cost
    is per element: reading the bytes in pairs (a uint16 view) halves the
    elements, and the 65 536-bin histogram of pairs folds back to bytes, each
    pair adding one count to its low byte and one to its high byte.
    """
    flat = np.ascontiguousarray(raw).reshape(-1)
    counts = np.zeros(256, dtype=np.int64)
    if flat.size % 2:
        counts[flat[-1]] += 1
        flat = flat[:-1]
    if flat.size:
        pairs = np.bincount(flat.view(np.uint16), minlength=65536).reshape(256, 256)
        # pairs[high, low] on a little-endian machine; the fold is symmetric, so byte order
        # does not matter.
        counts += pairs.sum(axis=0) + pairs.sum(axis=1)
    return counts


def dense_type(spec: SourceSpec) -> int | None:
    """Return the band's GDAL type if its codes can be counted densely (integer, unscaled), else None."""
    if spec.scale != 1.0 or spec.offset != 0.0 or not os.path.exists(spec.target):
        return None
    ds = gdal.Open(spec.target)
    rb = ds.GetRasterBand(spec.band)
    data_type = rb.DataType
    rb = None
    ds = None
    return data_type if data_type in _DENSE_TYPES else None


def count_evidence(spec: SourceSpec, grid: Grid, deposits: DepositCells, feedback: Feedback,
                   study: SourceSpec | None = None, breaks=None, kind: str = "categorical",
                   progress_span: tuple[float, float] = (0.0, 1.0),
                   threads: int | None = None) -> wofe.ClassCounts:
    """Count cells and deposit cells per class of an evidence raster on ``grid``, block by block.

    Parameters
    ----------
    spec : SourceSpec
        The evidence band, already on ``grid``.
    grid : Grid
        The evidence grid.
    deposits : DepositCells
        Deposit points on ``grid``.
    feedback : Feedback
        Progress within ``progress_span`` and cancel (checked every block).
    study : SourceSpec, optional
        The study-area mask (1 inside) on ``grid``.
    breaks : sequence of float, optional
        Thresholds that turn continuous values into ordered classes
        (:func:`favour_plugin.core.wofe.code_by_breaks`).
    kind : str
        Used with ``breaks``: ``ascending`` or ``descending``.
    threads : int, optional
        Worker threads (default up to 2).

    Returns
    -------
    ClassCounts
    """
    data_type = dense_type(spec) if breaks is None else None

    def inside_of(window, reader):
        return reader.read(study, window) > 0.5 if study is not None else None

    if data_type is not None:
        total = DenseCounts(data_type, spec.nodata)

        def dense(window, reader):
            return total.of_block(reader.read_raw(spec, window), deposits.in_window(window),
                                  inside_of(window, reader))

        for _, block in map_windows(dense, grid, feedback, threads, progress_span):
            total += block
        return total.counts()

    def general(window, reader):
        values = reader.read(spec, window)
        if breaks is not None:
            values = wofe.code_by_breaks(values, breaks, kind)
        return wofe.ClassCounts.from_arrays(values, deposits.block(window), inside_of(window, reader))

    counts = wofe.ClassCounts()
    for _, block in map_windows(general, grid, feedback, threads, progress_span):
        counts = counts.merge(block)
    return counts
