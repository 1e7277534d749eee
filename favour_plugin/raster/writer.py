"""Write float rasters block by block to a temporary file, put in place only on success.

Output is a tiled (256 x 256) GeoTIFF, compressed as the user chose (by
default ZSTD level 1, or DEFLATE level 1 where GDAL has no ZSTD, with the
floating-point predictor; :func:`compression_options`) on every core,
BigTIFF when the size calls for it, nodata declared. The cells go
to a hidden temporary file beside the final name, reserved from an
:class:`~favour_plugin.raster.outputs.OutputSet`; nothing appears under the
final name until the set is committed, and an error or a cancel leaves the
user's existing file, if any, untouched.

GDAL reports a full disk or a failing device late: a block may sit in the
cache and fail only when flushed, and the file's directory is rewritten
when it closes. :meth:`RasterWriter.finish` flushes and closes with both
checked, so a truncated file never reaches its final name.
"""

from __future__ import annotations

import os
import shutil
import sys
import threading

import numpy as np
from osgeo import gdal

from ..core.errors import OutputError, ParameterError
from .blocks import Window
from .grid import Grid
from .outputs import OutputSet

NODATA = -9999.0
#: Options every output takes: 256 x 256 tiles, BigTIFF when needed, compression on every core.
BASE_OPTIONS = ("TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "BIGTIFF=IF_SAFER", "NUM_THREADS=ALL_CPUS")
#: The compressions a user may choose; ``None`` (the default) is the fastest good one GDAL has.
COMPRESSIONS = ("none", "zstd", "deflate", "lzw")


def zstd_available() -> bool:
    """Return True when the GDAL in use writes ZSTD-compressed GeoTIFFs."""
    options = gdal.GetDriverByName("GTiff").GetMetadataItem("DMD_CREATIONOPTIONLIST") or ""
    return "ZSTD" in options


def compression_options(compress: str | None, classes: bool = False) -> tuple[str, list[str]]:
    """Return the compression's name and its GeoTIFF creation options.

    Parameters
    ----------
    compress : {None, "none", "zstd", "deflate", "lzw"}
        None is the default: ZSTD at level 1 where the GDAL in use has ZSTD,
        else DEFLATE at level 1 — fast to write, a few per cent larger than
        the slow levels. An explicit ``zstd`` is level 1 too; ``deflate`` is
        GDAL's level 6 (smaller, slower); every compression uses the
        floating-point predictor (the horizontal one for class codes).
    classes : bool
        Whole-number class codes (Int16) rather than float32 values.

    Raises
    ------
    ParameterError
        An unknown compression, or ZSTD where this GDAL lacks it.
    """
    predictor = "PREDICTOR=2" if classes else "PREDICTOR=3"
    if compress is None:
        name, options = ("zstd", ["COMPRESS=ZSTD", "ZSTD_LEVEL=1", predictor]) if zstd_available() else \
            ("deflate", ["COMPRESS=DEFLATE", "ZLEVEL=1", predictor])
        return name, [*BASE_OPTIONS, *options]
    if compress not in COMPRESSIONS:
        raise ParameterError(f"compression must be one of {', '.join(COMPRESSIONS)}, got {compress!r}")
    if compress == "zstd" and not zstd_available():
        raise ParameterError(f"this GDAL ({gdal.__version__}) cannot write ZSTD; choose deflate, lzw or none")
    options = {"none": ["COMPRESS=NONE"], "zstd": ["COMPRESS=ZSTD", "ZSTD_LEVEL=1", predictor],
               "deflate": ["COMPRESS=DEFLATE", predictor], "lzw": ["COMPRESS=LZW", predictor]}[compress]
    return compress, [*BASE_OPTIONS, *options]

_close_lock = threading.Lock()


def check_raster_name(path: str) -> None:
    """Refuse an output name that is not a GeoTIFF file name, or that is a folder."""
    if not path.lower().endswith((".tif", ".tiff")):
        raise OutputError(f"output {path} must be a GeoTIFF file name ending in .tif")
    if os.path.isdir(path):
        raise OutputError(f"output {path} is a folder; give a file name ending in .tif")


def _close_dataset(holder: list) -> str:
    """Close the GDAL dataset held (only) in ``holder``; return the error GDAL raised ('' if none).

    GDAL's Python bindings (before 3.8 there is no ``Close()``) raise a close
    error from the dataset's destructor, where Python can only print it; the
    unraisable hook catches it for the duration of the close instead. The
    caller must hold no other reference, or the close happens later, unseen.
    """
    caught: list[str] = []
    with _close_lock:
        previous = sys.unraisablehook

        def hook(unraisable):
            if isinstance(unraisable.exc_value, RuntimeError):
                caught.append(str(unraisable.exc_value))
            else:
                previous(unraisable)

        sys.unraisablehook = hook
        try:
            holder.clear()
        finally:
            sys.unraisablehook = previous
    return "; ".join(caught)


def _space(path: str) -> str:
    """Say how much room is left beside ``path``, the usual reason a write fails."""
    folder = os.path.dirname(path)
    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return "is the disk full?"
    return f"the disk holding {folder} has {free / 2**20:.1f} MiB free"


def _annotate(ds, band, items: dict[str, str], statistics: dict | None) -> None:
    """Store metadata items on a dataset and, when there are valid cells, statistics on its band."""
    for key, value in items.items():
        ds.SetMetadataItem(key, value)
    if statistics and statistics.get("valid_cells"):
        band.SetStatistics(statistics["min"], statistics["max"], statistics["mean"], statistics["std"])


def annotate_file(path: str, description: str, items: dict[str, str], statistics: dict | None) -> None:
    """Give a finished (temporary) raster file its band description, metadata and statistics.

    For rasters assembled outside :class:`RasterWriter` (tiles from a
    cluster); the file is closed with its errors checked.

    Raises
    ------
    OutputError
        The file cannot be opened for update or closed cleanly.
    """
    try:
        holder = [gdal.Open(path, gdal.GA_Update)]
        band = holder[0].GetRasterBand(1)
        if description:
            band.SetDescription(description)
        _annotate(holder[0], band, items, statistics)
        band = None
        holder[0].FlushCache()
    except RuntimeError as exc:
        raise OutputError(f"cannot finish {path}: {exc}") from None
    error = _close_dataset(holder)
    if error:
        raise OutputError(f"cannot finish {path}: {error}; {_space(path)}")


def compression_record(writer: RasterWriter) -> dict:
    """Return what the lineage says of a writer's compression: the method and the creation options."""
    return {"method": writer.compression, "options": list(writer.options)}


class RasterWriter:
    """A one-band float32 GeoTIFF on ``grid``, written block by block to a temporary file.

    Parameters
    ----------
    path : str
        Final file name (``.tif``).
    grid : Grid
        The grid of the output.
    description : str
        Band description (the node's path).
    classes : bool
        Write whole-number class codes as Int16 (generalised evidence)
        instead of float32 values; nodata is still ``NODATA``.
    outputs : OutputSet, optional
        The job's outputs, committed together. Without one the writer keeps
        a set of its own and :meth:`commit` puts the file in place.
    compress : str, optional
        See :func:`compression_options` (None: the fast default).
    """

    def __init__(self, path: str, grid: Grid, description: str = "", classes: bool = False,
                 outputs: OutputSet | None = None, compress: str | None = None) -> None:
        check_raster_name(path)
        self.path = os.path.abspath(path)
        self._own = outputs is None
        self.outputs = outputs if outputs is not None else OutputSet()
        self.outputs.folder(os.path.dirname(self.path))
        self.compression, options = compression_options(compress, classes)
        self.options = tuple(options)
        self.tmp_path = self.outputs.reserve(self.path, ".tif")
        self.outputs.remove_on_commit(self.path + ".aux.xml")  # statistics of an earlier file
        self._ds = None
        try:
            self._ds = gdal.GetDriverByName("GTiff").Create(
                self.tmp_path, grid.width, grid.height, 1,
                gdal.GDT_Int16 if classes else gdal.GDT_Float32, options)
            self._ds.SetProjection(grid.crs_wkt)
            self._ds.SetGeoTransform(grid.transform)
            self._band = self._ds.GetRasterBand(1)
            self._band.SetNoDataValue(NODATA)
            if description:
                self._band.SetDescription(description)
        except RuntimeError as exc:
            self.abort()
            raise OutputError(f"cannot create {self.path}: {exc}") from None
        self._dtype = np.int16 if classes else np.float32

    def write(self, window: Window, values: np.ndarray) -> None:
        """Write one block of float values; NaN becomes the declared nodata.

        Raises
        ------
        OutputError
            GDAL could not write the block (a full disk, a failing device).
        """
        missing = np.isnan(values)
        block = np.where(missing, NODATA, values).astype(self._dtype)
        try:
            self._band.WriteArray(block, window.col_off, window.row_off)
        except RuntimeError as exc:
            raise OutputError(f"cannot write {self.path} (rows {window.row_off}–"
                              f"{window.row_off + window.height - 1}): {exc}; {_space(self.path)}") from None

    def set_metadata(self, items: dict[str, str], statistics: dict | None = None) -> None:
        """Store metadata items on the dataset and band statistics on the band."""
        _annotate(self._ds, self._band, items, statistics)

    def finish(self) -> str:
        """Flush and close the temporary file, checking that every byte reached the disk.

        Returns
        -------
        str
            The temporary file, complete, ready for the output set's commit.

        Raises
        ------
        OutputError
            The flush or the close failed (a full disk, say).
        """
        if self._ds is None:
            return self.tmp_path
        self._band = None
        holder, self._ds = [self._ds], None
        error = ""
        try:
            holder[0].FlushCache()
        except RuntimeError as exc:
            error = str(exc)
        error = "; ".join(dict.fromkeys(e for e in (error, _close_dataset(holder)) if e))
        if error:
            raise OutputError(f"cannot finish {self.path}: {error}; {_space(self.path)}. "
                              "Nothing was written under that name")
        return self.tmp_path

    def commit(self) -> str:
        """Finish the file and, with an output set of its own, put it in place; return the final name."""
        try:
            self.finish()
            if self._own:
                self.outputs.commit()
        except BaseException:
            self.abort()
            raise
        return self.path

    def abort(self) -> None:
        """Close and delete the temporary file; the final name is left as it was."""
        if self._ds is not None:
            self._band = None
            holder, self._ds = [self._ds], None
            _close_dataset(holder)  # a failing close changes nothing: the file is removed
        if self._own:
            self.outputs.abort()
        else:
            for path in (self.tmp_path, self.tmp_path + ".aux.xml"):
                if os.path.exists(path):
                    os.unlink(path)
