"""The class codes of a whole raster band and the cells of each: what a class → score table lists.

:func:`count_classes` counts every cell of an integer band, not a sample, so a
class held by a handful of cells is listed too. It takes the counts from the
band's raster attribute table when GDAL has one with a value column and a
pixel-count column; otherwise it streams the band block by block
(:func:`~favour_plugin.raster.blocks.iter_windows`) and counts each block
with numpy — a histogram of every possible code for bands of 8 and 16 bits,
``numpy.unique`` for wider ones — merging the blocks' counts, so memory stays
that of one block whatever the raster's size. Nodata cells are not counted.

A band of floating-point values, or one with more distinct values than a
table can list, is continuous data: it is refused with a message that says
so, and the editor keeps its sampled histogram.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from osgeo import gdal

from ..core.errors import InputError
from ..core.feedback import Feedback
from .blocks import iter_windows
from .gdalenv import gdal_job
from .sources import open_raster

#: Most class codes a class table lists; more is continuous data (common practice, no source).
MAX_CLASSES = 1000

#: GDAL data types whose values are whole numbers.
INTEGER_TYPES = {gdal.GDT_Byte, gdal.GDT_UInt16, gdal.GDT_Int16, gdal.GDT_UInt32, gdal.GDT_Int32}
for _name in ("GDT_Int8", "GDT_UInt64", "GDT_Int64"):  # GDAL 3.5 and 3.7 added these
    if hasattr(gdal, _name):
        INTEGER_TYPES.add(getattr(gdal, _name))


@dataclass(frozen=True)
class ClassCounts:
    """Every class code of a band with its number of cells.

    ``codes`` are in increasing order (band values after any scale and
    offset), ``counts`` the cells of each, ``total`` their sum, and ``source``
    says where the counts come from: ``"attribute table"`` or ``"every block"``.
    """

    codes: tuple[float, ...]
    counts: tuple[int, ...]
    total: int
    source: str

    def as_dict(self) -> dict[float, int]:
        """Return ``{code: cells}``."""
        return dict(zip(self.codes, self.counts))


def count_classes(path: str, band: int = 1, max_classes: int = MAX_CLASSES,
                  feedback: Feedback | None = None) -> ClassCounts:
    """Count the cells of every class code of an integer raster band.

    Parameters
    ----------
    path : str
        A raster GDAL can read.
    band : int
        Band number from 1.
    max_classes : int
        Refuse a band with more distinct values than this.
    feedback : Feedback, optional
        Checked for a cancel after each block.

    Raises
    ------
    MissingInputError, InputError
        The file cannot be read or has no such band; the band holds
        floating-point values; it holds more than ``max_classes`` distinct
        values (continuous data).
    """
    with gdal_job():
        ds = open_raster(path, "layer")
        rb = None
        try:  # the band and the dataset go before any error leaves, the band first
            if not 1 <= band <= ds.RasterCount:
                raise InputError(f"{path} has {ds.RasterCount} band(s); band {band} does not exist")
            rb = ds.GetRasterBand(band)
            data_type = rb.DataType
            if data_type not in INTEGER_TYPES:
                raise InputError(
                    f"band {band} of {path} holds {gdal.GetDataTypeName(data_type)} values, which are "
                    "continuous data; a class table lists the codes of an integer band (Byte, Int16, "
                    "UInt16, Int32, UInt32)")
            nodata = rb.GetNoDataValue()
            scale, offset = rb.GetScale() or 1.0, rb.GetOffset() or 0.0
            found = _from_attribute_table(rb, nodata)
            source = "attribute table"
            if found is None:
                found = _from_blocks(rb, ds.RasterXSize, ds.RasterYSize, nodata, max_classes, feedback,
                                     path, band)
                source = "every block"
        finally:
            rb = None
            ds = None
    codes, counts = found
    if codes.size > max_classes:
        raise InputError(_too_many(path, band, max_classes))
    values = codes.astype(np.float64)
    if scale != 1.0 or offset != 0.0:
        values = values * scale + offset
    return ClassCounts(tuple(float(v) for v in values), tuple(int(n) for n in counts),
                       int(counts.sum()), source)


def _too_many(path: str, band: int, max_classes: int) -> str:
    return (f"band {band} of {path} holds more than {max_classes} distinct values; that is continuous "
            "data, which a class table cannot list: score it with a ramp (linear, logistic, …) or "
            "class it first")


def _from_attribute_table(rb: gdal.Band, nodata) -> tuple[np.ndarray, np.ndarray] | None:
    """Return (codes, counts) from the band's attribute table, or None if it has no usable one.

    Usable means a column of class values (usage ``GFU_MinMax``) and one of
    pixel counts (``GFU_PixelCount``); rows of the nodata value and rows with
    no cell are left out.
    """
    rat = rb.GetDefaultRAT()
    if rat is None or rat.GetRowCount() == 0:
        return None
    usage = {rat.GetUsageOfCol(i): i for i in range(rat.GetColumnCount())}
    if gdal.GFU_MinMax not in usage or gdal.GFU_PixelCount not in usage:
        return None
    codes = np.asarray(rat.ReadAsArray(usage[gdal.GFU_MinMax]), dtype=np.float64)
    counts = np.asarray(rat.ReadAsArray(usage[gdal.GFU_PixelCount]), dtype=np.float64)
    keep = (counts > 0) & np.isfinite(codes)
    if nodata is not None:
        keep &= codes != nodata
    codes, counts = codes[keep], counts[keep].astype(np.int64)
    order = np.argsort(codes, kind="stable")
    codes, counts = codes[order], counts[order]
    if codes.size and np.any(np.diff(codes) == 0):
        return None  # a table that lists one code twice is not a count of cells
    return codes, counts


def _from_blocks(rb: gdal.Band, width: int, height: int, nodata, max_classes: int,
                 feedback: Feedback | None, path: str, band: int) -> tuple[np.ndarray, np.ndarray]:
    """Return (codes, counts) over every block of the band, each block counted with numpy."""
    codes = np.empty(0, dtype=np.int64)
    counts = np.empty(0, dtype=np.int64)
    dense = None
    for window in iter_windows(width, height):
        block = rb.ReadAsArray(window.col_off, window.row_off, window.width, window.height)
        if block.dtype.itemsize <= 2:
            # A histogram of every code the type can hold: one pass, no sort.
            low = int(np.iinfo(block.dtype).min)
            size = int(np.iinfo(block.dtype).max) - low + 1
            shifted = block.astype(np.int64).ravel() - low
            part = np.bincount(shifted, minlength=size)
            dense = part if dense is None else dense + part
        else:
            values = block.ravel()
            if nodata is not None:
                values = values[values != nodata]
            block_codes, block_counts = np.unique(values, return_counts=True)
            codes, counts = _merge(codes, counts, block_codes.astype(np.int64), block_counts)
            if codes.size > max_classes:
                raise InputError(_too_many(path, band, max_classes))
        if feedback is not None:
            feedback.check_cancelled()
    if dense is not None:
        low = int(np.iinfo(block.dtype).min)
        if nodata is not None and float(nodata).is_integer() and 0 <= nodata - low < dense.size:
            dense[int(nodata) - low] = 0
        (present,) = np.nonzero(dense)
        return present.astype(np.int64) + low, dense[present]
    return codes, counts


def _merge(codes: np.ndarray, counts: np.ndarray, more_codes: np.ndarray, more_counts: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray]:
    """Return the union of two sorted (codes, counts) with the counts of shared codes added."""
    merged, inverse = np.unique(np.concatenate([codes, more_codes]), return_inverse=True)
    total = np.zeros(merged.size, dtype=np.int64)
    np.add.at(total, inverse.ravel(), np.concatenate([counts, more_counts]).astype(np.int64))
    return merged, total
