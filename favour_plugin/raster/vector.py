"""Vector proxies: lines, polygons or points turned into grids on the reference grid.

Two measures:

``distance``
    distance in map units of the grid CRS from each cell centre to the centre
    of the nearest cell the features touch (GDAL's proximity algorithm on an
    all-touched rasterisation), so distances are exact to within about one
    cell. Cells the features touch have distance 0; polygons count as their
    whole area.
``attribute``
    a numeric field burnt into the cells whose centres fall inside (polygons)
    or that the features touch (lines, points); other cells are nodata.

The derived grid is written to the job's work folder and read like any other
proxy. Features are reprojected to the grid's CRS on the fly.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass

from osgeo import gdal, ogr, osr

from ..core.errors import AlignmentWarning, CancelledError, GridError, InputError, MissingInputError
from ..core.feedback import Feedback
from .grid import Grid, crs_label
from .sources import SourceSpec

_WORK_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "BIGTIFF=IF_SAFER"]


@dataclass(frozen=True)
class LayerFacts:
    """What a vector proxy needs to know about its layer, read once with the file then closed.

    Holding no GDAL object means no layer can outlive its data source (which
    crashes GDAL's Python bindings) however an error unwinds.
    """

    name: str
    count: int
    srs_wkt: str | None
    geometry: str
    polygons: bool
    extent: tuple[float, float, float, float]
    fields: dict[str, int]


def _undefined(srs: osr.SpatialReference | None) -> bool:
    """Return True for no CRS or the placeholder some formats store ("Undefined ... SRS")."""
    if srs is None:
        return True
    name = (srs.GetName() or "").lower()
    return srs.GetAuthorityName(None) is None and name.startswith("undefined")


def read_layer_facts(path: str, layer_name: str | None, name: str) -> LayerFacts:
    """Open a vector data source, pick the layer and read its facts, naming any problem."""
    if not os.path.exists(path):
        raise MissingInputError(f"{name}: the layer file {path} does not exist")
    try:
        ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
    except RuntimeError as exc:
        raise InputError(f"{name}: GDAL cannot open {path} as a vector layer: {exc}") from None
    if ds is None or ds.GetLayerCount() == 0:
        raise InputError(f"{name}: {path} holds no vector layer")
    names = [ds.GetLayerByIndex(i).GetName() for i in range(ds.GetLayerCount())]
    if layer_name is None:
        if len(names) > 1:
            raise InputError(f"{name}: {path} holds {len(names)} layers ({', '.join(names)}); "
                             "name one with 'layer'")
        layer_name = names[0]
    if layer_name not in names:
        raise InputError(f"{name}: {path} has no layer {layer_name!r}; it has {', '.join(names)}")
    layer = ds.GetLayerByName(layer_name)
    srs = layer.GetSpatialRef()
    definition = layer.GetLayerDefn()
    count = layer.GetFeatureCount()
    facts = LayerFacts(
        name=layer_name, count=count,
        srs_wkt=None if _undefined(srs) else srs.ExportToWkt(),
        geometry=ogr.GeometryTypeToName(layer.GetGeomType()),
        polygons=ogr.GT_Flatten(layer.GetGeomType()) in (ogr.wkbPolygon, ogr.wkbMultiPolygon),
        extent=layer.GetExtent() if count else (0.0, 0.0, 0.0, 0.0),
        fields={definition.GetFieldDefn(i).GetName(): definition.GetFieldDefn(i).GetType()
                for i in range(definition.GetFieldCount())})
    srs = definition = layer = None  # children of the data source go first
    ds = None
    return facts


def usable_layer(path: str, layer_name: str | None, name: str, empty_hint: str = ""
                 ) -> tuple[LayerFacts, str, osr.SpatialReference]:
    """Read a vector layer's facts and refuse one with no features or no CRS.

    Returns the facts, a label for messages (``file:layer``) and the layer's
    spatial reference (x, y axis order). ``empty_hint`` ends the message for
    a layer without features.
    """
    facts = read_layer_facts(path, layer_name, name)
    label = f"{os.path.basename(path)}:{facts.name}"
    if facts.count == 0:
        raise InputError(f"{name}: the vector layer {label} has no features{empty_hint}")
    if facts.srs_wkt is None:
        raise GridError(f"{name}: the vector layer {label} has no CRS; assign one first")
    srs = osr.SpatialReference()
    srs.ImportFromWkt(facts.srs_wkt)
    srs.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return facts, label, srs


def _progress_callback(feedback: Feedback, start: float, end: float):
    """Return a GDAL progress callback that reports into ``feedback`` and stops on cancel."""
    def callback(fraction, message, data):
        feedback.set_progress(start + (end - start) * fraction)
        return 0 if feedback.is_cancelled() else 1
    return callback


def _run(step, feedback: Feedback, what: str) -> None:
    """Run a GDAL call that takes a progress callback; turn an abort or failure into our errors."""
    try:
        step()
    except RuntimeError as exc:
        if feedback.is_cancelled():
            raise CancelledError("cancelled by the user; no output was written") from None
        raise InputError(f"{what} failed: {exc}") from None
    feedback.check_cancelled()


def vector_source(path: str, layer_name: str | None, measure: str, field_name: str | None,
                  grid: Grid, workdir: str, name: str, feedback: Feedback,
                  progress_span: tuple[float, float] = (0.0, 1.0)) -> SourceSpec:
    """Measure a vector layer onto ``grid`` and return how to read the result.

    Parameters
    ----------
    path : str
        Absolute path of any OGR data source.
    layer_name : str or None
        Layer within the source; may be None when it holds only one.
    measure : {"distance", "attribute"}
        What to compute (see the module docstring).
    field_name : str or None
        Numeric field for ``attribute``.
    grid : Grid
        The reference grid.
    workdir : str
        Folder for the derived grid (the job removes it).
    name : str
        The leaf's path, for messages.
    feedback : Feedback
        Progress (within ``progress_span``) and cancel.

    Raises
    ------
    MissingInputError, InputError, GridError, CancelledError
        Missing file, unreadable layer, no features, no CRS, no feature on the
        grid, a non-numeric field, or a cancel.
    """
    facts, layer_label, srs = usable_layer(path, layer_name, name)
    _check_features_on_grid(facts.extent, srs, grid, name, layer_label)
    record = {"kind": "vector", "path": path, "layer": facts.name, "measure": measure,
              "features": facts.count, "crs": crs_label(srs), "geometry": facts.geometry,
              "reprojected": not bool(srs.IsSame(grid.srs))}
    if record["reprojected"]:
        feedback.warning(f"{name}: {layer_label} is in {crs_label(srs)}; its features are "
                         f"reprojected to the grid's {crs_label(grid.srs)}", AlignmentWarning)
    digest = hashlib.sha1(repr((path, record["layer"], measure, field_name)).encode()).hexdigest()
    base = os.path.join(workdir, f"proxy-{digest[:12]}")
    start, end = progress_span
    mid = start + 0.3 * (end - start)
    if measure == "distance":
        target = _distance_grid(path, facts.name, grid, base, feedback, (start, mid, end))
        record["method"] = ("GDAL ComputeProximity (DISTUNITS=GEO) on an ALL_TOUCHED "
                            "rasterisation; map units of the grid CRS")
    elif measure == "attribute":
        target = _attribute_grid(path, facts, field_name, grid, base, feedback, (start, end), name)
        record["field"] = field_name
        record["method"] = "GDAL Rasterize of the field; cells not covered are nodata"
    else:
        raise InputError(f"{name}: unknown vector measure {measure!r}")
    key = f"{path}|{record['layer']}|{measure}|{field_name}"
    return SourceSpec(key, target, 1, float("nan"), 1.0, 0.0, record)


def _check_features_on_grid(extent, srs: osr.SpatialReference, grid: Grid,
                            name: str, label: str) -> None:
    """Raise if the layer's envelope (OGR order: xmin, xmax, ymin, ymax) misses the grid."""
    xmin, xmax, ymin, ymax = extent
    if not srs.IsSame(grid.srs):
        transform = osr.CoordinateTransformation(srs, grid.srs)
        xmin, ymin, xmax, ymax = transform.TransformBounds(xmin, ymin, xmax, ymax, 21)
    gxmin, gymin, gxmax, gymax = grid.extent
    if xmax < gxmin or xmin > gxmax or ymax < gymin or ymin > gymax:
        raise GridError(f"{name}: no feature of {label} lies on the grid "
                        f"(features span {xmin:.1f}, {ymin:.1f} to {xmax:.1f}, {ymax:.1f}; "
                        f"grid spans {gxmin:.1f}, {gymin:.1f} to {gxmax:.1f}, {gymax:.1f})")


def _empty_grid(path: str, grid: Grid, data_type: int, nodata: float | None) -> gdal.Dataset:
    """Create a one-band GeoTIFF on ``grid`` for a derived proxy."""
    ds = gdal.GetDriverByName("GTiff").Create(path, grid.width, grid.height, 1, data_type,
                                              _WORK_OPTIONS)
    ds.SetProjection(grid.crs_wkt)
    ds.SetGeoTransform(grid.transform)
    if nodata is not None:
        ds.GetRasterBand(1).SetNoDataValue(nodata)
    return ds


def _distance_grid(path: str, layer_name: str, grid: Grid, base: str, feedback: Feedback,
                   span: tuple[float, float, float]) -> str:
    """Rasterise the layer's features and compute distance to them; return the grid's path."""
    start, mid, end = span
    burnt = _empty_grid(base + "-features.tif", grid, gdal.GDT_Byte, None)
    _run(lambda: gdal.Rasterize(burnt, path, layers=[layer_name], burnValues=[1], allTouched=True,
                                callback=_progress_callback(feedback, start, mid)),
         feedback, f"rasterising {path}")
    target = base + "-distance.tif"
    distance = _empty_grid(target, grid, gdal.GDT_Float32, None)
    _run(lambda: gdal.ComputeProximity(burnt.GetRasterBand(1), distance.GetRasterBand(1),
                                       ["VALUES=1", "DISTUNITS=GEO"],
                                       callback=_progress_callback(feedback, mid, end)),
         feedback, f"computing distance to {path}")
    burnt = None
    distance = None
    return target


def _attribute_grid(path: str, facts: LayerFacts, field_name: str, grid: Grid, base: str,
                    feedback: Feedback, span: tuple[float, float], name: str) -> str:
    """Burn a numeric field into the grid; return the grid's path."""
    if field_name not in facts.fields:
        raise InputError(f"{name}: layer {facts.name} has no field {field_name!r}; "
                         f"it has {', '.join(facts.fields) or 'no fields'}")
    if facts.fields[field_name] not in (ogr.OFTInteger, ogr.OFTInteger64, ogr.OFTReal):
        raise InputError(f"{name}: field {field_name!r} of layer {facts.name} is not numeric")
    target = base + "-attribute.tif"
    ds = _empty_grid(target, grid, gdal.GDT_Float64, float("nan"))
    ds.GetRasterBand(1).Fill(float("nan"))
    _run(lambda: gdal.Rasterize(ds, path, layers=[facts.name], attribute=field_name,
                                allTouched=not facts.polygons, callback=_progress_callback(feedback, *span)),
         feedback, f"rasterising {path}")
    ds = None
    return target
