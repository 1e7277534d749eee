"""Small builders for test inputs: rasters, vector layers and tree documents."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
from osgeo import gdal, ogr, osr

ROOT = Path(__file__).resolve().parent.parent

gdal.UseExceptions()
ogr.UseExceptions()
osr.UseExceptions()

# A local transverse Mercator over open ocean: a CRS that places test data nowhere real.
TEST_CRS = ("+proj=tmerc +lat_0=-48 +lon_0=-125 +k=1 +x_0=500000 +y_0=1000000 "
            "+datum=WGS84 +units=m +no_defs")
ORIGIN = (500000.0, 1020000.0)


def srs(crs: str = TEST_CRS) -> osr.SpatialReference:
    """Return a spatial reference for ``crs`` with x, y axis order."""
    ref = osr.SpatialReference()
    ref.SetFromUserInput(crs)
    ref.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return ref


def write_raster(path, array, cell: float = 100.0, origin=ORIGIN, crs: str | None = TEST_CRS,
                 nodata: float | None = None, dtype=None, options=()) -> str:
    """Write a one-band GeoTIFF of ``array`` (rows north to south) and return its path."""
    array = np.asarray(array)
    if dtype is None:
        dtype = {np.dtype("uint8"): gdal.GDT_Byte, np.dtype("int16"): gdal.GDT_Int16,
                 np.dtype("int32"): gdal.GDT_Int32, np.dtype("float64"): gdal.GDT_Float64
                 }.get(array.dtype, gdal.GDT_Float32)
    ds = gdal.GetDriverByName("GTiff").Create(str(path), array.shape[1], array.shape[0], 1, dtype,
                                              list(options))
    ds.SetGeoTransform((origin[0], cell, 0.0, origin[1], 0.0, -cell))
    if crs is not None:
        ds.SetProjection(srs(crs).ExportToWkt())
    band = ds.GetRasterBand(1)
    if nodata is not None:
        band.SetNoDataValue(nodata)
    band.WriteArray(array)
    ds = None
    return str(path)


def read_raster(path) -> np.ndarray:
    """Read band 1 as float64 with nodata as NaN."""
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    values = band.ReadAsArray().astype(np.float64)
    nodata = band.GetNoDataValue()
    if nodata is not None:
        values[values == nodata] = np.nan
    return values


def write_vector(path, wkts, layer: str = "features", crs: str | None = TEST_CRS,
                 fields: dict | None = None) -> str:
    """Write geometries (WKT) to a GeoPackage layer, with optional numeric fields per feature."""
    if os.path.exists(path):
        os.unlink(path)
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    first = ogr.CreateGeometryFromWkt(wkts[0]).GetGeometryType() if wkts else ogr.wkbLineString
    lyr = ds.CreateLayer(layer, srs(crs) if crs else None, first)
    for name in (fields or {}):
        lyr.CreateField(ogr.FieldDefn(name, ogr.OFTReal))
    for i, wkt in enumerate(wkts):
        feature = ogr.Feature(lyr.GetLayerDefn())
        feature.SetGeometry(ogr.CreateGeometryFromWkt(wkt))
        for name, values in (fields or {}).items():
            feature.SetField(name, float(values[i]))
        lyr.CreateFeature(feature)
    ds = None
    return str(path)


def leaf(name, path, membership, **proxy) -> dict:
    """Return a leaf node document."""
    return {"name": name, "proxy": {"path": str(path), **proxy}, "membership": membership}


def tree_doc(children, operator=None, name="Test tree", grid=None, root="Favourability") -> dict:
    """Return a tree document with ``children`` under the root."""
    doc = {"format": "favour-tree", "version": 1, "name": name,
           "root": {"name": root, "operator": operator or {"type": "and"}, "children": children}}
    if grid is not None:
        doc["grid"] = grid
    return doc


def write_tree(path, doc) -> str:
    """Write a tree document as JSON and return its path."""
    Path(path).write_text(json.dumps(doc, indent=2), encoding="utf-8")
    return str(path)


def run_cli(*args, preexec_fn=None, timeout: int = 300) -> subprocess.CompletedProcess:
    """Run ``python -m favour_plugin`` in a fresh interpreter, as a user would."""
    return subprocess.run([sys.executable, "-m", "favour_plugin", *map(str, args)], cwd=ROOT,
                          capture_output=True, text=True, timeout=timeout, preexec_fn=preexec_fn)
