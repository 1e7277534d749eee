"""The GDAL and OGR steps of the targets job: work rasters, polygons, merged zones, the GeoPackage.

Zones are built from cells, and every zone keeps its cells' footprint:

1. the cells above the threshold are written as a mask (1 in, 0 out) to a
   work raster, block by block;
2. ``gdal.Polygonize`` turns the mask into polygons, one per group of cells
   joined by a side (4-connected: cells that touch only at a corner are two
   polygons);
3. with a merge distance d, every polygon is buffered by d / 2 (8 segments a
   quarter circle) and the buffers are dissolved: polygons less than about d
   apart (edge to edge) share one dissolved part, which becomes one zone;
   without one, each polygon is a zone;
4. the zones are burnt onto the grid by their id (``gdal.Rasterize``, cell
   centres); a zone id counts only on cells above the threshold, so a
   buffer never adds cells to a zone;
5. after the zone statistics, the ranked zones are written as a raster of
   ranks and polygonised again, and each zone's polygons become one
   (multi)polygon: exactly the footprint of its cells.
"""

from __future__ import annotations

import datetime as _dt
import os
from collections.abc import Sequence
from xml.sax.saxutils import quoteattr

from osgeo import gdal, ogr, osr

from ..core.errors import CancelledError, InputError, OutputError
from ..core.feedback import Feedback
from .grid import Grid
from .style import RAMP

#: Creation options of the job's work rasters (removed with the work folder).
WORK_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", "ZLEVEL=1",
                "BIGTIFF=IF_SAFER"]
#: Segments per quarter circle of the merge buffers.
BUFFER_SEGMENTS = 8
#: Name of the layer of targets in the GeoPackage.
LAYER = "targets"


def _callback(feedback: Feedback, span: tuple[float, float]):
    """Return a GDAL progress callback over ``span`` that stops on cancel."""
    def callback(fraction, message, data):
        feedback.set_progress(span[0] + (span[1] - span[0]) * fraction)
        return 0 if feedback.is_cancelled() else 1
    return callback


def _gdal_step(step, feedback: Feedback, what: str):
    """Run a GDAL call; a cancel becomes CancelledError and a failure InputError naming ``what``."""
    try:
        result = step()
    except RuntimeError as exc:
        if feedback.is_cancelled():
            raise CancelledError("cancelled by the user; no output was written") from None
        raise InputError(f"{what} failed: {exc}") from None
    feedback.check_cancelled()
    return result


class WorkRaster:
    """A one-band integer raster on ``grid`` in the work folder, written block by block."""

    def __init__(self, path: str, grid: Grid, data_type: int = gdal.GDT_Byte) -> None:
        self.path = path
        self._ds = gdal.GetDriverByName("GTiff").Create(path, grid.width, grid.height, 1, data_type,
                                                        WORK_OPTIONS)
        self._ds.SetProjection(grid.crs_wkt)
        self._ds.SetGeoTransform(grid.transform)
        self._band = self._ds.GetRasterBand(1)

    @property
    def dataset(self) -> gdal.Dataset:
        """The open dataset (for GDAL calls that write into it in place)."""
        return self._ds

    def write(self, window, values) -> None:
        """Write one block."""
        try:
            self._band.WriteArray(values, window.col_off, window.row_off)
        except RuntimeError as exc:
            raise OutputError(f"cannot write the work raster {self.path}: {exc}") from None

    def close(self) -> str:
        """Flush and close the raster (band first); return its path."""
        if self._ds is not None:
            self._ds.FlushCache()
            self._band = None
            self._ds = None
        return self.path


def polygonize(raster: str, gpkg: str, layer_name: str, grid: Grid, feedback: Feedback,
               span: tuple[float, float]) -> int:
    """Polygonise the non-zero cells of ``raster`` into a new layer of ``gpkg``; return the polygons.

    Each polygon holds the cell value in its field ``dn`` (4-connected groups).
    """
    ds = gdal.Open(raster)
    band = ds.GetRasterBand(1)
    driver = ogr.GetDriverByName("GPKG")
    vds = driver.Open(gpkg, 1) if os.path.exists(gpkg) else driver.CreateDataSource(gpkg)
    layer = vds.CreateLayer(layer_name, grid.srs, ogr.wkbPolygon)
    layer.CreateField(ogr.FieldDefn("dn", ogr.OFTInteger))
    vds.StartTransaction()
    try:
        _gdal_step(lambda: gdal.Polygonize(band, band, layer, 0, [], callback=_callback(feedback, span)),
                   feedback, f"polygonising {os.path.basename(raster)}")
        vds.CommitTransaction()
        count = layer.GetFeatureCount()
    finally:
        layer = None
        vds = None
        band = None
        ds = None
    return count


def merge_zones(gpkg: str, source: str, target: str, distance: float, grid: Grid) -> int:
    """Buffer every polygon of ``source`` by ``distance`` / 2, dissolve, write the parts to ``target``.

    Returns the number of parts (merged zones). Part ids (the layer's fid)
    run from 1.
    """
    vds = ogr.Open(gpkg, 1)
    layer = vds.GetLayerByName(source)
    buffers = ogr.Geometry(ogr.wkbMultiPolygon)
    for feature in layer:  # each polygon buffered alone, then one cascaded union: far less memory
        grown = feature.GetGeometryRef().Buffer(distance / 2.0, BUFFER_SEGMENTS)
        for part in ([grown] if ogr.GT_Flatten(grown.GetGeometryType()) == ogr.wkbPolygon else
                     [grown.GetGeometryRef(i) for i in range(grown.GetGeometryCount())]):
            buffers.AddGeometry(part)
        grown = part = None
    feature = layer = None
    merged = buffers.UnionCascaded()
    out = vds.CreateLayer(target, grid.srs, ogr.wkbPolygon)
    definition = out.GetLayerDefn()
    parts = [merged] if ogr.GT_Flatten(merged.GetGeometryType()) == ogr.wkbPolygon else \
        [merged.GetGeometryRef(i) for i in range(merged.GetGeometryCount())]
    vds.StartTransaction()
    for part in parts:
        feature = ogr.Feature(definition)
        feature.SetGeometry(part)
        out.CreateFeature(feature)
        feature = None
    vds.CommitTransaction()
    count = len(parts)
    parts = part = merged = buffers = definition = out = None
    vds = None
    return count


def rasterise_zones(gpkg: str, layer_name: str, grid: Grid, target: str, feedback: Feedback,
                    span: tuple[float, float]) -> str:
    """Burn each feature's fid onto a new Int32 raster of ``grid`` (cell centres); return its path."""
    raster = WorkRaster(target, grid, gdal.GDT_Int32)
    ds = raster.dataset
    _gdal_step(lambda: gdal.Rasterize(
        ds, gpkg, SQLStatement=f'SELECT fid + 0 AS zone, geom FROM "{layer_name}"', attribute="zone",
        allTouched=False, callback=_callback(feedback, span)), feedback, "burning the zones onto the grid")
    ds = None
    return raster.close()


def zone_geometries(gpkg: str, layer_name: str) -> dict[int, ogr.Geometry]:
    """Return each rank's polygons (field ``dn``) joined into one multipolygon."""
    vds = ogr.Open(gpkg)
    layer = vds.GetLayerByName(layer_name)
    found: dict[int, ogr.Geometry] = {}
    for feature in layer:
        rank = feature.GetField("dn")
        multi = found.setdefault(rank, ogr.Geometry(ogr.wkbMultiPolygon))
        multi.AddGeometry(feature.GetGeometryRef())
    feature = layer = None
    vds = None
    return found


def write_targets(path: str, srs: osr.SpatialReference, fields: Sequence[tuple[str, int]],
                  rows: Sequence[dict], geometries: dict[int, ogr.Geometry], style: str,
                  description: str) -> None:
    """Write the ranked targets to a new GeoPackage at ``path``, with the style as its default.

    The style goes into the ``layer_styles`` table the way QGIS keeps styles
    in a GeoPackage (QGIS applies it when the layer is opened), as well as
    into the ``.qml`` the job writes beside the file.

    Raises
    ------
    OutputError
        GDAL could not write the file.
    """
    if os.path.exists(path):
        os.unlink(path)  # an empty name reserved for us: the GeoPackage driver makes its own file
    try:
        ds = ogr.GetDriverByName("GPKG").CreateDataSource(path)
        layer = ds.CreateLayer(LAYER, srs, ogr.wkbMultiPolygon, ["FID=fid", f"DESCRIPTION={description}"])
        for name, kind in fields:
            layer.CreateField(ogr.FieldDefn(name, kind))
        definition = layer.GetLayerDefn()
        ds.StartTransaction()
        for row in rows:
            feature = ogr.Feature(definition)
            feature.SetFID(row["rank"])
            for name, _ in fields:
                value = row.get(name)
                if value is not None:
                    feature.SetField(name, value)
            feature.SetGeometry(geometries[row["rank"]])
            layer.CreateFeature(feature)
            feature = None
        ds.CommitTransaction()
        _store_style(ds, style)
        definition = layer = None
        ds.FlushCache()
        ds = None
    except RuntimeError as exc:
        definition = layer = feature = None
        ds = None
        raise OutputError(f"cannot write {path}: {exc}") from None


def _store_style(ds, style: str) -> None:
    """Add the style to the GeoPackage's ``layer_styles`` table as the layer's default."""
    styles = ds.CreateLayer("layer_styles", None, ogr.wkbNone, ["FID=id"])
    for name, kind, width in (("f_table_catalog", ogr.OFTString, 256), ("f_table_schema", ogr.OFTString, 256),
                              ("f_table_name", ogr.OFTString, 256),
                              ("f_geometry_column", ogr.OFTString, 256), ("styleName", ogr.OFTString, 0),
                              ("styleQML", ogr.OFTString, 0), ("styleSLD", ogr.OFTString, 0),
                              ("useAsDefault", ogr.OFTInteger, 0), ("description", ogr.OFTString, 0),
                              ("owner", ogr.OFTString, 64), ("ui", ogr.OFTString, 0),
                              ("update_time", ogr.OFTDateTime, 0)):
        definition = ogr.FieldDefn(name, kind)
        if width:
            definition.SetWidth(width)
        if name == "useAsDefault":
            definition.SetSubType(ogr.OFSTBoolean)
        styles.CreateField(definition)
    feature = ogr.Feature(styles.GetLayerDefn())
    now = _dt.datetime.now(_dt.timezone.utc)
    for name, value in (("f_table_catalog", ""), ("f_table_schema", ""), ("f_table_name", LAYER),
                        ("f_geometry_column", "geom"), ("styleName", "Favour targets"),
                        ("styleQML", style), ("styleSLD", ""), ("useAsDefault", 1),
                        ("description", "Favour's style for ranked targets"), ("owner", ""), ("ui", "")):
        feature.SetField(name, value)
    feature.SetField("update_time", now.year, now.month, now.day, now.hour, now.minute, now.second, 100)
    styles.CreateFeature(feature)
    feature = styles = None


_STYLE = """<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>
<qgis version="3.22.0" styleCategories="Symbology|Labeling" labelsEnabled="1">
  <renderer-v2 type="graduatedSymbol" attr="fav_mean" graduatedMethod="GraduatedColor" symbollevels="0"
               enableorderby="0" forceraster="0">
    <ranges>
{ranges}
    </ranges>
    <symbols>
{symbols}
    </symbols>
  </renderer-v2>
  <labeling type="simple">
    <settings calloutType="simple">
      <text-style fieldName="rank" isExpression="0" fontSize="10" fontWeight="75" textColor="16,16,16,255"
                  fontSizeUnit="Point" textOpacity="1">
        <text-buffer bufferDraw="1" bufferSize="1" bufferSizeUnits="MM" bufferColor="255,255,255,255"
                     bufferOpacity="1" bufferNoFill="1"/>
      </text-style>
      <placement placement="1" centroidWhole="1" centroidInside="1" fitInPolygonOnly="0" dist="0"/>
      <rendering drawLabels="1" obstacle="1" labelPerPart="0" displayAll="1"/>
    </settings>
  </labeling>
  <blendMode>0</blendMode>
  <featureBlendMode>0</featureBlendMode>
</qgis>
"""

_SYMBOL = """      <symbol type="fill" name="{index}" alpha="0.85" clip_to_extent="1" force_rhr="0">
        <layer class="SimpleFill" enabled="1" locked="0" pass="0">
          <prop k="color" v="{fill}"/>
          <prop k="outline_color" v="16,16,16,255"/>
          <prop k="outline_style" v="solid"/>
          <prop k="outline_width" v="0.35"/>
          <prop k="outline_width_unit" v="MM"/>
          <prop k="style" v="solid"/>
        </layer>
      </symbol>"""


def _rgb(colour: str) -> str:
    """Return ``#rrggbb`` as QGIS's ``r,g,b,255``."""
    return ",".join(str(int(colour[i:i + 2], 16)) for i in (1, 3, 5)) + ",255"


def targets_style(low: float, high: float) -> str:
    """Return the QML of the targets layer: mean favourability on Favour's ramp, labelled by rank.

    One class per colour of :data:`~favour_plugin.raster.style.RAMP`, equal
    steps of mean favourability from ``low`` to ``high`` (the lowest and the
    highest zone's mean), so the ranked zones spread over the whole ramp.
    """
    if not high > low:
        low, high = low - 0.005, high + 0.005
    steps = len(RAMP)
    ranges, symbols = [], []
    for i, (_, colour) in enumerate(RAMP):
        lower = low + (high - low) * i / steps
        upper = high if i == steps - 1 else low + (high - low) * (i + 1) / steps
        label = quoteattr(f"mean favourability {lower:.3f} – {upper:.3f}")
        ranges.append(f'      <range lower="{lower!r}" upper="{upper!r}" symbol="{i}" label={label} '
                      'render="true"/>')
        symbols.append(_SYMBOL.format(index=i, fill=_rgb(colour)))
    return _STYLE.format(ranges="\n".join(ranges), symbols="\n".join(symbols))
