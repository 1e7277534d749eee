"""The reference grid every proxy is aligned to: CRS, origin, cell size, size in cells."""

from __future__ import annotations

import math
from dataclasses import dataclass

from osgeo import gdal, osr

from ..core.errors import GridError

# Two grids are the same when origins and cell sizes agree to this fraction of a cell.
SAME_GRID_TOLERANCE = 1e-6


def srs_from_text(text: str) -> osr.SpatialReference:
    """Return a spatial reference from WKT, PROJ, an authority code ("EPSG:32750") or a URN."""
    srs = osr.SpatialReference()
    try:
        srs.SetFromUserInput(text)
    except RuntimeError:
        raise GridError(f"the CRS {text!r} is not one GDAL recognises") from None
    srs.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return srs


def crs_label(srs: osr.SpatialReference | None) -> str:
    """Return a short name for a CRS for messages: ``EPSG:32750 (WGS 84 / UTM zone 50S)``."""
    if srs is None:
        return "no CRS"
    name = srs.GetName() or "unnamed CRS"
    auth, code = srs.GetAuthorityName(None), srs.GetAuthorityCode(None)
    return f"{auth}:{code} ({name})" if auth and code else name


@dataclass(frozen=True)
class Grid:
    """A north-up grid: CRS (WKT), upper-left corner, cell size and size in cells.

    ``xmin`` and ``ymax`` are the outer corner (CRS units); ``cell_x`` and
    ``cell_y`` are positive cell sizes (CRS units); rows run south.
    """

    crs_wkt: str
    xmin: float
    ymax: float
    cell_x: float
    cell_y: float
    width: int
    height: int

    @property
    def srs(self) -> osr.SpatialReference:
        """Return the grid's spatial reference (a new object each time)."""
        return srs_from_text(self.crs_wkt)

    @property
    def transform(self) -> tuple[float, float, float, float, float, float]:
        """Return the GDAL geotransform."""
        return (self.xmin, self.cell_x, 0.0, self.ymax, 0.0, -self.cell_y)

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """Return (xmin, ymin, xmax, ymax) in CRS units."""
        return (self.xmin, self.ymax - self.height * self.cell_y,
                self.xmin + self.width * self.cell_x, self.ymax)

    @property
    def cells(self) -> int:
        """Return the number of cells."""
        return self.width * self.height

    @property
    def cell_area(self) -> float:
        """Return the area of one cell in squared CRS units."""
        return self.cell_x * self.cell_y

    @classmethod
    def from_dataset(cls, ds: gdal.Dataset, name: str) -> Grid:
        """Return the grid of an open raster, refusing one with no CRS or a rotated transform."""
        wkt = ds.GetProjection()
        if not wkt:
            raise GridError(f"{name} has no CRS; assign one (for example in QGIS, "
                            "'Assign projection') before using it")
        x0, dx, rx, y0, ry, dy = ds.GetGeoTransform(can_return_null=True) or (None,) * 6
        if x0 is None:
            raise GridError(f"{name} has no georeferencing (no geotransform)")
        if rx != 0 or ry != 0:
            raise GridError(f"{name} is rotated (geotransform {ds.GetGeoTransform()}); "
                            "Favour works on north-up grids")
        if dy > 0:
            raise GridError(f"{name} runs south-up; Favour works on north-up grids")
        return cls(wkt, x0, y0, dx, -dy, ds.RasterXSize, ds.RasterYSize)

    @classmethod
    def from_spec(cls, crs: str, extent, cell_size: float) -> Grid:
        """Return the grid covering ``extent`` [xmin, ymin, xmax, ymax] with square cells.

        The extent is widened to a whole number of cells to the east and south.
        """
        xmin, ymin, xmax, ymax = (float(v) for v in extent)
        if not (xmax > xmin and ymax > ymin):
            raise GridError(f"grid extent {list(extent)} is empty; give [xmin, ymin, xmax, ymax]")
        if not (cell_size > 0 and math.isfinite(cell_size)):
            raise GridError(f"grid cell_size must be positive, got {cell_size!r}")
        width = max(1, math.ceil((xmax - xmin) / cell_size - SAME_GRID_TOLERANCE))
        height = max(1, math.ceil((ymax - ymin) / cell_size - SAME_GRID_TOLERANCE))
        srs = srs_from_text(crs)
        return cls(srs.ExportToWkt(), xmin, ymax, float(cell_size), float(cell_size), width, height)

    def same_crs(self, other_wkt: str) -> bool:
        """Return True if ``other_wkt`` names the same CRS as this grid."""
        other = osr.SpatialReference()
        other.ImportFromWkt(other_wkt)
        return bool(self.srs.IsSame(other))

    def same_as(self, other: Grid) -> bool:
        """Return True if ``other`` has this grid's CRS, origin, cell size and size."""
        tol_x, tol_y = SAME_GRID_TOLERANCE * self.cell_x, SAME_GRID_TOLERANCE * self.cell_y
        return (self.width == other.width and self.height == other.height
                and abs(self.xmin - other.xmin) <= tol_x and abs(self.ymax - other.ymax) <= tol_y
                and abs(self.cell_x - other.cell_x) <= tol_x
                and abs(self.cell_y - other.cell_y) <= tol_y
                and self.same_crs(other.crs_wkt))

    def coarsened(self, max_cells: int) -> Grid:
        """Return a grid over the same extent with cells enlarged by a whole factor to fit ``max_cells``."""
        factor = max(1, math.ceil(math.sqrt(self.cells / max_cells)))
        if factor == 1:
            return self
        width, height = -(-self.width // factor), -(-self.height // factor)
        return Grid(self.crs_wkt, self.xmin, self.ymax, self.cell_x * factor,
                    self.cell_y * factor, width, height)

    def to_dict(self) -> dict:
        """Return the grid as plain data for a lineage record."""
        return {"crs_wkt": self.crs_wkt, "crs": crs_label(self.srs),
                "transform": list(self.transform), "width": self.width, "height": self.height,
                "cell_size": [self.cell_x, self.cell_y], "extent": list(self.extent)}

    @classmethod
    def from_dict(cls, doc: dict) -> Grid:
        """Rebuild a grid from :meth:`to_dict`'s output."""
        x0, dx, _, y0, _, dy = doc["transform"]
        return cls(doc["crs_wkt"], x0, y0, dx, -dy, int(doc["width"]), int(doc["height"]))

    def describe(self) -> str:
        """Return a one-line description for messages."""
        return (f"{self.width} x {self.height} cells of {self.cell_x:g} x {self.cell_y:g} "
                f"in {crs_label(self.srs)}")
