"""Small builders for test inputs: rasters, vector layers and tree documents."""

from __future__ import annotations

import copy
import csv
import io
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


def small_workshop(folder, agree: bool = False):
    """A three-leaf tree on 90 x 110 rasters in ``folder``, three experts' scores and their sheets.

    Returns (tree, scores, sheet paths); with ``agree`` the three experts give
    the tree's own values, so every realisation is the tree itself.
    """
    from favour_plugin.core.scoring import Score, Scores
    from favour_plugin.core.sheets import write_sheet
    from favour_plugin.core.tree import Tree

    folder = Path(folder)
    shape = (90, 110)
    mag, grav = "Favourability > Source > Mag", "Favourability > Source > Grav"
    rng = np.random.default_rng(12)
    write_raster(folder / "mag.tif", rng.normal(50, 20, shape).astype(np.float32))
    write_raster(folder / "grav.tif", rng.normal(0, 3, shape).astype(np.float32))
    host = rng.integers(1, 5, shape).astype(np.uint8)
    host[:5, :5] = 0
    write_raster(folder / "host.tif", host, nodata=0)
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "weighted_mean"}, "children": [
            leaf("Mag", "mag.tif", {"type": "linear", "lower": 20, "upper": 90}),
            leaf("Grav", "grav.tif", {"type": "gaussian", "centre": 1.0, "spread": 2.0})]},
        {"name": "Trap", "component": "trap", "operator": {"type": "or"}, "children": [
            leaf("Host", "host.tif", {"type": "categories", "scores": {"1": 0.2, "2": 0.9, "3": 0.5},
                                      "default": 0.1})]},
    ], {"type": "gamma", "gamma": 0.6})
    tree = Tree.load(write_tree(folder / "tree.json", doc))
    if agree:
        table = {e: {mag: {"importance": 5, "membership.lower": 20, "membership.upper": 90},
                     grav: {"importance": 5}} for e in ("E1", "E2", "E3")}
    else:
        table = {
            "E1": {mag: {"importance": 9, "membership.lower": (20, 10, 30), "membership.upper": 90},
                   grav: {"importance": 3, "membership.spread": (2.0, 1.0, 3.0)}},
            "E2": {mag: {"importance": 5, "membership.lower": 35, "membership.upper": (80, 70, 95)},
                   grav: {"importance": 6}},
            "E3": {mag: {"importance": 7, "membership.lower": 25, "membership.upper": 100},
                   grav: {"importance": 7, "membership.spread": 1.5}},
        }
    scores = Scores(table={e: {n: {i: Score(*v) if isinstance(v, tuple) else Score(float(v))
                                   for i, v in items.items()} for n, items in nodes.items()}
                           for e, nodes in table.items()}, experts=tuple(table))
    sheets = [str(write_sheet(folder / f"{e}.csv", tree, e, previous=scores)) for e in scores.experts]
    return tree, scores, sheets


# -- trees shared by several test modules ----------------------------------------------


def example_tree_doc() -> dict:
    """The minimum-contract example of the tree file, with one of every membership type."""
    return {
        "format": "favour-tree", "version": 1, "name": "Example",
        "grid": {"reference": "layers/magnetics.tif"},
        "root": {"name": "Favourability", "operator": {"type": "gamma", "gamma": 0.9},
                 "children": [
            {"name": "Source", "component": "source", "operator": {"type": "or"}, "rationale": "r",
             "children": [
                 {"name": "Mafic volcanic host", "proxy": {"path": "layers/litho.tif", "band": 1},
                  "membership": {"type": "categories", "scores": {"3": 0.9, "5": 0.6}, "default": 0.05},
                  "weight": 1.0, "rationale": "r"},
                 {"name": "Magnetic high", "proxy": {"path": "layers/magnetics.tif"},
                  "membership": {"type": "linear", "lower": 10, "upper": 80}}]},
            {"name": "Pathway", "component": "pathway",
             "operator": {"type": "weighted_mean", "nodata": "ignore"}, "children": [
                 {"name": "Near faults",
                  "proxy": {"path": "layers/faults.gpkg", "layer": "faults", "measure": "distance"},
                  "membership": {"type": "logistic", "midpoint": 500, "slope": -0.01}, "weight": 2},
                 {"name": "Gravity ridge", "proxy": {"path": "layers/gravity.tif"},
                  "membership": {"type": "gaussian", "centre": 2, "spread": 1.5}},
                 {"name": "Arsenic", "proxy": {"path": "layers/arsenic.tif"},
                  "membership": {"type": "piecewise", "points": [[5, 0], [20, 0.7], [60, 1]]}},
                 {"name": "Depth", "proxy": {"path": "layers/cover.tif"},
                  "membership": {"type": "trapezoid", "points": [0, 0, 50, 200]}}]}]}}


def varied_tree_doc() -> dict:
    """A tree with every membership type, vector proxies, a grid and nested groups."""
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "weighted_mean"}, "children": [
            leaf("Mafic host", "litho.tif", {"type": "categories", "scores": {"3": 0.9, "5": 0.6},
                                             "default": 0.05}),
            {**leaf("Gravity", "gravity.tif", {"type": "gaussian", "centre": 2, "spread": 1.5}),
             "weight": 2},
            leaf("Weights", "classes.tif", {"type": "weights", "weights": {"0": -0.4, "1": 1.2},
                                            "default": None})]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "gamma", "gamma": 0.8},
         "children": [
             leaf("Near faults", "faults.gpkg", {"type": "linear", "lower": 2000, "upper": 0},
                  layer="faults", measure="distance"),
             leaf("Grade", "samples.gpkg", {"type": "trapezoid", "points": [0, 1, 5, 9]},
                  measure="attribute", field="grade"),
             {"name": "Deeper", "operator": {"type": "sum", "nodata": "ignore"}, "children": [
                 leaf("Arsenic", "arsenic.tif", {"type": "piecewise", "points": [[5, 0], [60, 1]]}),
                 leaf("Already mu", "mu.tif", {"type": "identity"}),
                 leaf("Slope", "slope.tif", {"type": "logistic", "midpoint": 5, "slope": -0.5},
                      band=2)]}]}],
        operator={"type": "product"}, grid={"crs": "EPSG:32750", "extent": [0, 0, 1000, 1000],
                                             "cell_size": 25})
    doc["notes"] = {"kept": [1, 2]}
    return doc


def node_chain(levels: int) -> dict:
    """Return a chain of ``levels`` combining nodes ending in a leaf, built without recursion."""
    node = {"name": "Deepest", "proxy": {"path": "a.tif"}, "membership": {"type": "identity"}}
    for i in range(levels - 1):
        node = {"name": f"Level {levels - 1 - i}", "operator": {"type": "and"}, "children": [node]}
    return node


def deep_tree_text(levels: int) -> str:
    """A tree file whose root holds a chain of ``levels`` nodes, as text built without recursion."""
    head = '{"name": "L", "operator": {"type": "and"}, "children": ['
    leaf_text = '{"name": "Leaf", "proxy": {"path": "a.tif"}, "membership": {"type": "identity"}}'
    return ('{"format": "favour-tree", "version": 1, "root": ' + head * levels + leaf_text
            + "]}" * levels + "}")


_DISTANCE = {"measure": "distance", "layer": "lines"}

#: The tree the workshop tests score: four weighted or OR-ed groups, every kind of scored item.
SCORED_TREE_DOC = tree_doc([
    {"name": "Source", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Keel", "gravity.tif", {"type": "logistic", "midpoint": 2.0, "slope": 0.6}), "weight": 2},
        leaf("Pile", "litho.tif", {"type": "categories", "scores": {"1": 0.5, "2": 0.9}, "default": None}),
    ]},
    {"name": "Pathway", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Splays", "faults.gpkg", {"type": "linear", "lower": 800, "upper": 100}, **_DISTANCE),
         "weight": 3},
        {**leaf("Mesh", "faults.gpkg", {"type": "trapezoid", "points": [0, 300, 3000, 7000]}, **_DISTANCE),
         "weight": 0.5},
    ]},
    {"name": "Trap", "operator": {"type": "or"}, "children": [
        leaf("Hinges", "hinges.gpkg", {"type": "gaussian", "centre": 0, "spread": 700}, **_DISTANCE),
        leaf("Arsenic", "as.tif", {"type": "piecewise", "points": [[6, 0.0], [15, 0.75], [40, 0.95]]}),
    ]},
    {"name": "Preservation", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Cover", "cover.tif", {"type": "linear", "lower": 300, "upper": 0}), "weight": 10},
        leaf("Granite", "granite.gpkg", {"type": "linear", "lower": 0, "upper": 1500}, **_DISTANCE),
    ]},
])


def scored_tree():
    """The workshop tests' tree (``SCORED_TREE_DOC``), a fresh copy each call."""
    from favour_plugin.core.tree import Tree

    return Tree.from_dict(copy.deepcopy(SCORED_TREE_DOC))


def sheet_edit(node_path: str, item_name: str, /, **cells):
    """Return a function that sets ``cells`` on the row of (node, item) in a score sheet's text."""
    def change(text: str) -> str:
        lines = text.split("\n")
        header = next(csv.reader([next(line for line in lines if line and not line.startswith("#"))]))
        for k, line in enumerate(lines):
            if not line or line.startswith("#"):
                continue
            row = next(csv.reader([line]))
            if row[1] == node_path and row[2] == item_name:
                for column, value in cells.items():
                    row[header.index(column)] = value
                out = io.StringIO()
                csv.writer(out, lineterminator="").writerow(row)
                lines[k] = out.getvalue()
                return "\n".join(lines)
        raise AssertionError(f"no row for {node_path} / {item_name}")
    return change
