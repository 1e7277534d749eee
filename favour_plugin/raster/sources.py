"""Raster proxies: open a band, place it on the reference grid, read it block by block.

A proxy whose grid is not the reference grid is aligned lazily through a
GDAL warped VRT (bilinear for continuous proxies, nearest for class codes),
and the alignment is recorded for the lineage. Nothing is resampled to disk.
"""

from __future__ import annotations

import hashlib
import math
import os
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal, osr

from ..core.errors import AlignmentWarning, GridError, InputError, MissingInputError, NodataWarning
from ..core.feedback import Feedback
from .blocks import Window
from .grid import Grid, crs_label

RESAMPLING = {"nearest": "near", "bilinear": "bilinear", "cubic": "cubic",
              "average": "average", "mode": "mode"}


def cache_need(record: dict) -> int:
    """Return the GDAL block-cache bytes a source needs so no block is decompressed twice.

    Windows are 256 rows by 1024 columns and follow the 256 x 256 tiles Favour
    writes, so a tiled source needs next to nothing. A source stored in strips
    as wide as itself is read again for every window across a row of windows
    unless the strips of that row stay cached: 256 rows plus one strip, times
    its width, times its cell size.
    """
    block = record.get("block")
    grid = record.get("grid", {})
    width = grid.get("width", 0)
    if not block or block[0] < width:
        return 0
    cell_bytes = max(1, gdal.GetDataTypeSize(gdal.GetDataTypeByName(record["data_type"])) // 8)
    return (256 + block[1]) * width * cell_bytes


@dataclass(frozen=True)
class SourceSpec:
    """How to read one proxy on the reference grid.

    ``target`` is the file ``gdal.Open`` reads: the proxy itself, or a VRT in
    the job's work folder that aligns it. ``key`` identifies the read, so leaves that share a
    layer, band and alignment read it once per block. ``record`` is the
    lineage entry.
    """

    key: str
    target: str
    band: int
    nodata: float | None
    scale: float
    offset: float
    record: dict = field(compare=False)


def open_raster(path: str, name: str) -> gdal.Dataset:
    """Open a raster GDAL can read, with messages that name the proxy."""
    if not os.path.exists(path):
        raise MissingInputError(f"{name}: the layer file {path} does not exist")
    try:
        ds = gdal.Open(path, gdal.GA_ReadOnly)
    except RuntimeError as exc:
        raise InputError(f"{name}: GDAL cannot open {path} as a raster: {exc}") from None
    if ds is None or ds.RasterCount == 0:
        raise InputError(f"{name}: {path} holds no raster band")
    return ds


def read_window(band: gdal.Band, window: Window, nodata: float | None, scale: float = 1.0,
                offset: float = 0.0) -> np.ndarray:
    """Read one window of a band as float64 with nodata as NaN and scale/offset applied."""
    raw = band.ReadAsArray(window.col_off, window.row_off, window.width, window.height)
    values = raw.astype(np.float64, copy=True)
    if nodata is not None and not math.isnan(nodata):
        values[raw == nodata] = np.nan
    if scale != 1.0 or offset != 0.0:
        values = values * scale + offset
    return values


def _overlap_fraction(src_grid: Grid, grid: Grid) -> float:
    """Return the fraction of the reference grid's extent that the source covers."""
    sxmin, symin, sxmax, symax = src_grid.extent
    if not grid.same_crs(src_grid.crs_wkt):
        src_srs = osr.SpatialReference()
        src_srs.ImportFromWkt(src_grid.crs_wkt)
        src_srs.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
        transform = osr.CoordinateTransformation(src_srs, grid.srs)
        sxmin, symin, sxmax, symax = transform.TransformBounds(sxmin, symin, sxmax, symax, 21)
    gxmin, gymin, gxmax, gymax = grid.extent
    width = max(0.0, min(sxmax, gxmax) - max(sxmin, gxmin))
    height = max(0.0, min(symax, gymax) - max(symin, gymin))
    return width * height / ((gxmax - gxmin) * (gymax - gymin))


def raster_source(path: str, band: int, grid: Grid, resampling: str, name: str,
                  feedback: Feedback, workdir: str) -> SourceSpec:
    """Prepare a raster proxy for reading on ``grid``.

    Parameters
    ----------
    path : str
        Absolute path of the raster.
    band : int
        Band number from 1.
    grid : Grid
        The reference grid.
    resampling : str
        One of ``RESAMPLING``; used only if the proxy is not already on the grid.
    name : str
        The leaf's path, for messages.
    feedback : Feedback
        Receives a warning when the proxy is resampled or covers part of the grid.
    workdir : str
        Folder for the small VRT files that align the proxy (the job removes it).

    Raises
    ------
    MissingInputError, InputError, GridError
        File missing, unreadable, no such band, no CRS, or no overlap with the grid.
    """
    ds = open_raster(path, name)
    if not 1 <= band <= ds.RasterCount:
        raise InputError(f"{name}: {path} has {ds.RasterCount} band(s); band {band} does not exist")
    src_grid = Grid.from_dataset(ds, f"{name}: the layer {path}")
    rb = ds.GetRasterBand(band)
    nodata = rb.GetNoDataValue()
    scale = rb.GetScale() or 1.0
    offset = rb.GetOffset() or 0.0
    data_type = gdal.GetDataTypeName(rb.DataType)
    block = rb.GetBlockSize()
    rb = None  # a band must never outlive its dataset, whatever error unwinds below
    record = {"kind": "raster", "path": path, "band": band, "data_type": data_type, "nodata": nodata,
              "block": block,
              "grid": {"crs": crs_label(src_grid.srs), "cell_size": [src_grid.cell_x, src_grid.cell_y],
                       "extent": list(src_grid.extent), "width": src_grid.width,
                       "height": src_grid.height}}
    if scale != 1.0 or offset != 0.0:
        record["scale_offset"] = [scale, offset]
    if src_grid.same_as(grid):
        record["alignment"] = {"resampled": False}
        return SourceSpec(f"{path}|{band}", path, band, nodata, scale, offset, record)

    coverage = _overlap_fraction(src_grid, grid)
    if coverage <= 0:
        raise GridError(f"{name}: the layer {path} ({src_grid.describe()}) does not overlap "
                        f"the grid ({grid.describe()})")
    same_crs = grid.same_crs(src_grid.crs_wkt)
    lattice = same_crs and _same_lattice(src_grid, grid)
    method = "nearest" if lattice else resampling
    reasons = []
    if not same_crs:
        reasons.append(f"CRS {crs_label(src_grid.srs)} differs from the grid's {crs_label(grid.srs)}")
    if abs(src_grid.cell_x - grid.cell_x) > 1e-9 * grid.cell_x or \
            abs(src_grid.cell_y - grid.cell_y) > 1e-9 * grid.cell_y:
        reasons.append(f"cell size {src_grid.cell_x:g} x {src_grid.cell_y:g} differs from "
                       f"the grid's {grid.cell_x:g} x {grid.cell_y:g}")
    if not reasons:
        reasons.append("extent or cell alignment differs from the grid's")
    base = os.path.join(workdir, "align-" + hashlib.sha1(f"{path}|{band}|{method}".encode()).hexdigest()[:12])
    gdal.Translate(base + "-band.vrt", ds, format="VRT", bandList=[band])
    gdal.Warp(
        base + ".vrt", base + "-band.vrt", format="VRT", dstSRS=grid.crs_wkt,
        outputBounds=grid.extent, width=grid.width, height=grid.height,
        resampleAlg=RESAMPLING[method], srcNodata=nodata, dstNodata=float("nan"),
        outputType=gdal.GDT_Float64, warpOptions=["UNIFIED_SRC_NODATA=YES"])
    record["alignment"] = {
        "resampled": not lattice, "method": method if not lattice else "window (no resampling)",
        "reasons": reasons, "coverage": round(coverage, 6),
        "tool": f"GDAL {gdal.__version__} warped VRT"}
    if lattice:
        feedback.info(f"{name}: {os.path.basename(path)} shares the grid's cells but not its "
                      "extent; read through a window, no resampling")
    else:
        feedback.warning(f"{name}: {os.path.basename(path)} aligned to the grid with {method} "
                         f"resampling because its {'; its '.join(reasons)}", AlignmentWarning)
    if coverage < 0.999:
        feedback.warning(f"{name}: {os.path.basename(path)} covers {100 * coverage:.1f}% of the "
                         "grid; cells outside it are nodata", NodataWarning)
    # Scale and offset travel through the warp as values, so apply them on read.
    return SourceSpec(f"{path}|{band}|{method}", base + ".vrt", 1, float("nan"), scale, offset,
                      record)


def _same_lattice(src: Grid, grid: Grid) -> bool:
    """Return True if ``src`` has the grid's cell size and its cell edges fall on the grid's."""
    if abs(src.cell_x - grid.cell_x) > 1e-9 * grid.cell_x or \
            abs(src.cell_y - grid.cell_y) > 1e-9 * grid.cell_y:
        return False
    dx = (src.xmin - grid.xmin) / grid.cell_x
    dy = (src.ymax - grid.ymax) / grid.cell_y
    return abs(dx - round(dx)) < 1e-6 and abs(dy - round(dy)) < 1e-6


def _read_error(spec: SourceSpec, window: Window, exc: RuntimeError) -> InputError:
    """Return the error for a block GDAL could not read, naming the file and the rows."""
    path = spec.record.get("path", spec.target) if spec.record else spec.target
    return InputError(f"cannot read {path} at rows {window.row_off}–{window.row_off + window.height - 1}, "
                      f"columns {window.col_off}–{window.col_off + window.width - 1}: {exc}; "
                      "the file may be damaged or truncated")


class BlockReader:
    """Reads proxies block by block; one per thread, since GDAL handles are not shared.

    Opens each source on first use and keeps it open until :meth:`close`.
    """

    def __init__(self) -> None:
        self._handles: dict[str, tuple] = {}

    def _band(self, spec: SourceSpec) -> gdal.Band:
        handle = self._handles.get(spec.key)
        if handle is None:
            ds = gdal.Open(spec.target, gdal.GA_ReadOnly)
            handle = (ds, ds.GetRasterBand(spec.band))
            self._handles[spec.key] = handle
        return handle[1]

    def read(self, spec: SourceSpec, window: Window) -> np.ndarray:
        """Return the proxy's values on ``window`` as float64 with NaN for nodata.

        Raises
        ------
        InputError
            GDAL could not read the block (a damaged or truncated file, a
            failing disk); the message names the file and the rows.
        """
        try:
            return read_window(self._band(spec), window, spec.nodata, spec.scale, spec.offset)
        except RuntimeError as exc:
            raise _read_error(spec, window, exc) from None

    def read_raw(self, spec: SourceSpec, window: Window) -> np.ndarray:
        """Return the band's stored values on ``window`` (native type, nodata not masked)."""
        try:
            return self._band(spec).ReadAsArray(window.col_off, window.row_off, window.width,
                                                window.height)
        except RuntimeError as exc:
            raise _read_error(spec, window, exc) from None

    def close(self) -> None:
        """Close every dataset this reader opened (each band before its dataset)."""
        while self._handles:
            _, (ds, band) = self._handles.popitem()
            del band
            del ds
