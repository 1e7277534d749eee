"""Write float rasters block by block to a temporary file and rename it on success.

Output is a tiled (256 x 256) GeoTIFF, DEFLATE with the floating-point
predictor, BigTIFF when the size calls for it, nodata declared. Nothing
appears under the final name until :meth:`RasterWriter.commit`; an error or a
cancel leaves the user's existing file, if any, untouched.
"""

from __future__ import annotations

import os
import tempfile

import numpy as np
from osgeo import gdal

from ..core.errors import OutputError
from .blocks import Window
from .grid import Grid

NODATA = -9999.0
CREATION_OPTIONS = ("TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE",
                    "PREDICTOR=3", "BIGTIFF=IF_SAFER", "NUM_THREADS=ALL_CPUS")


def check_writable(path: str) -> None:
    """Make sure an output can be written at ``path``: a GeoTIFF name in a writable folder.

    Creates missing parent folders.

    Raises
    ------
    OutputError
        Not a ``.tif``/``.tiff`` name, a folder in the way, or a folder that
        cannot be created or written.
    """
    if not path.lower().endswith((".tif", ".tiff")):
        raise OutputError(f"output {path} must be a GeoTIFF file name ending in .tif")
    if os.path.isdir(path):
        raise OutputError(f"output {path} is a folder; give a file name ending in .tif")
    check_folder(os.path.dirname(os.path.abspath(path)))


def check_folder(folder: str) -> None:
    """Create ``folder`` if needed and check a file can be written in it."""
    try:
        os.makedirs(folder, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=folder, prefix=".favour-check-"):
            pass
    except OSError as exc:
        raise OutputError(f"cannot write to the folder {folder}: {exc.strerror or exc}") from None


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
    """

    def __init__(self, path: str, grid: Grid, description: str = "", classes: bool = False) -> None:
        check_writable(path)
        self.path = os.path.abspath(path)
        folder, name = os.path.split(self.path)
        handle, self.tmp_path = tempfile.mkstemp(prefix=f".{name}.", suffix=".partial.tif",
                                                 dir=folder)
        os.close(handle)
        try:
            self._ds = gdal.GetDriverByName("GTiff").Create(
                self.tmp_path, grid.width, grid.height, 1,
                gdal.GDT_Int16 if classes else gdal.GDT_Float32,
                [o if o != "PREDICTOR=3" or not classes else "PREDICTOR=2" for o in CREATION_OPTIONS])
        except RuntimeError as exc:
            os.unlink(self.tmp_path)
            raise OutputError(f"cannot create {self.path}: {exc}") from None
        self._ds.SetProjection(grid.crs_wkt)
        self._ds.SetGeoTransform(grid.transform)
        self._dtype = np.int16 if classes else np.float32
        self._band = self._ds.GetRasterBand(1)
        self._band.SetNoDataValue(NODATA)
        if description:
            self._band.SetDescription(description)

    def write(self, window: Window, values: np.ndarray) -> None:
        """Write one block of float values; NaN becomes the declared nodata."""
        missing = np.isnan(values)
        block = np.where(missing, NODATA, values).astype(self._dtype)
        self._band.WriteArray(block, window.col_off, window.row_off)

    def set_metadata(self, items: dict[str, str], statistics: dict | None = None) -> None:
        """Store metadata items on the dataset and band statistics on the band."""
        for key, value in items.items():
            self._ds.SetMetadataItem(key, value)
        if statistics and statistics.get("valid_cells"):
            self._band.SetStatistics(statistics["min"], statistics["max"], statistics["mean"],
                                     statistics["std"])

    def commit(self) -> str:
        """Close the file and move it to its final name; return that name."""
        self._close()
        try:
            # mkstemp made the file private; give it the permissions a new file normally gets.
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(self.tmp_path, 0o666 & ~umask)
            os.replace(self.tmp_path, self.path)
        except OSError as exc:
            self.abort()
            raise OutputError(f"cannot move the finished raster to {self.path}: "
                              f"{exc.strerror or exc}") from None
        stale = self.path + ".aux.xml"
        if os.path.exists(stale):
            os.unlink(stale)
        return self.path

    def abort(self) -> None:
        """Close and delete the temporary file; the final name is left as it was."""
        self._close()
        for path in (self.tmp_path, self.tmp_path + ".aux.xml"):
            if os.path.exists(path):
                os.unlink(path)

    def _close(self) -> None:
        if self._ds is not None:
            self._band = None
            self._ds.FlushCache()
            self._ds = None
