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

Two options narrow or widen what counts:

``where``
    ``{"field": name, "values": [...]}``: only the features whose field holds
    one of the values are measured (faults of order 1 or 2, say). It is plain
    data in the tree file; :func:`filter_sql` turns it into GDAL's attribute
    filter in SQLite's SQL, every name and value quoted (:func:`sql_identifier`,
    :func:`sql_literal`), so no name or value can change the statement. Layers
    whose filters are not SQLite's (a shapefile, GeoJSON…) are first copied
    whole into a GeoPackage in the work folder and filtered there, so one
    quoting rule holds for every format.
``margin``
    map units outside the grid within which features still count for
    ``distance``: the features are rasterised and measured on the grid
    enlarged by the margin (rounded up to whole cells) and the inner window is
    read, so a fault just beyond the edge shortens the distances inside it.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass

from osgeo import gdal, ogr, osr

from ..core.errors import AlignmentWarning, CancelledError, GridError, InputError, MissingInputError
from ..core.feedback import Feedback
from .grid import Grid, crs_label
from .sources import SourceSpec

_WORK_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "BIGTIFF=IF_SAFER"]

#: Drivers whose attribute filters are SQLite's SQL (the quoting :func:`filter_sql` writes).
SQLITE_DRIVERS = ("GPKG", "SQLite")

#: OGR field types a filter compares: numbers and text.
NUMERIC_FIELDS = (ogr.OFTInteger, ogr.OFTInteger64, ogr.OFTReal)
TEXT_FIELDS = (ogr.OFTString,)


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
    driver: str = ""


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
                for i in range(definition.GetFieldCount())},
        driver=ds.GetDriver().ShortName)
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
                  progress_span: tuple[float, float] = (0.0, 1.0), *,
                  where: Mapping | None = None, margin: float | None = None) -> SourceSpec:
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
    where : mapping, optional
        ``{"field": name, "values": [...]}``: measure only the features whose
        field holds one of the values (the proxy's ``where``).
    margin : float, optional
        For ``distance``: map units of the grid CRS outside the grid within
        which features still count (the proxy's ``margin``; None or 0: none).

    Raises
    ------
    MissingInputError, InputError, GridError, CancelledError
        Missing file, unreadable layer, no features, no CRS, no feature on the
        grid (or within its margin), a non-numeric field, a filter on a field
        the layer lacks or with values of the wrong kind, a filter that keeps
        no feature, a margin wider than the grid, or a cancel.
    """
    facts, layer_label, srs = usable_layer(path, layer_name, name)
    margin = float(margin or 0.0)
    if not (math.isfinite(margin) and margin >= 0):
        raise InputError(f"{name}: the margin must be a distance of 0 or more in map units, got {margin:g}")
    if margin and measure != "distance":
        raise InputError(f"{name}: a margin applies only to measure 'distance', not {measure!r}")
    work_grid, pad = _with_margin(grid, margin, name)
    record = {"kind": "vector", "path": path, "layer": facts.name, "measure": measure,
              "features": facts.count, "crs": crs_label(srs), "geometry": facts.geometry,
              "reprojected": not bool(srs.IsSame(grid.srs))}
    settings = repr((path, record["layer"], measure, field_name,
                     json.dumps(where, sort_keys=True), margin))
    base = os.path.join(workdir, f"proxy-{hashlib.sha1(settings.encode()).hexdigest()[:12]}")
    source, source_layer, sql = path, facts.name, None
    extent = facts.extent
    if where is not None:
        problem = filter_problem(facts, where)
        if problem:
            raise InputError(f"{name}: {problem}")
        source, source_layer = _filterable_copy(path, facts, base, feedback)
        sql = filter_sql(where)
        kept, extent = _filtered_count(source, source_layer, sql, name)
        if kept == 0:
            raise InputError(f"{name}: no feature of {layer_label} has {where['field']!r} equal to "
                             f"{_values_text(where['values'])}; the filter keeps nothing to measure")
        record["where"] = {"field": where["field"], "values": list(where["values"])}
        record["features_in_layer"], record["features"] = facts.count, kept
        record["filter"] = f"GDAL attribute filter (SQLite SQL) {sql}"
    _check_features_on_grid(extent, srs, work_grid, name, layer_label,
                            f" or within its margin of {margin:g}" if pad != (0, 0) else "")
    if record["reprojected"]:
        feedback.warning(f"{name}: {layer_label} is in {crs_label(srs)}; its features are "
                         f"reprojected to the grid's {crs_label(grid.srs)}", AlignmentWarning)
    start, end = progress_span
    mid = start + 0.3 * (end - start)
    if measure == "distance":
        target = _distance_grid(source, source_layer, sql, work_grid, base, feedback, (start, mid, end))
        record["method"] = ("GDAL ComputeProximity (DISTUNITS=GEO) on an ALL_TOUCHED "
                            "rasterisation; map units of the grid CRS")
        if pad != (0, 0):
            target = _inner_window(target, pad, grid, base)
            record["margin"] = margin
            record["margin_cells"] = list(pad)
            record["method"] += (f"; measured on the grid enlarged by {pad[0]} columns and {pad[1]} "
                                 f"rows on each side (a margin of {margin:g}), the inner window read")
    elif measure == "attribute":
        target = _attribute_grid(source, facts, source_layer, sql, field_name, grid, base, feedback,
                                 (start, end), name)
        record["field"] = field_name
        record["method"] = "GDAL Rasterize of the field; cells not covered are nodata"
    else:
        raise InputError(f"{name}: unknown vector measure {measure!r}")
    key = f"{path}|{record['layer']}|{measure}|{field_name}|{json.dumps(where, sort_keys=True)}|{margin!r}"
    return SourceSpec(key, target, 1, float("nan"), 1.0, 0.0, record)


# -- a filter of features: plain data in, quoted SQL out ---------------------------------------


def sql_identifier(name: str) -> str:
    """Return a field or layer name quoted for SQLite's SQL: in double quotes, each one doubled.

    Inside double quotes SQLite reads every character as part of the name
    except a doubled quote, which stands for one; nothing a name holds can
    end the identifier early.
    """
    if "\x00" in name:
        raise InputError(f"a name holding a NUL character cannot be filtered on: {name!r}")
    return '"' + name.replace('"', '""') + '"'


def sql_literal(value) -> str:
    """Return a filter value as a SQLite literal: text in single quotes (each doubled), numbers as numbers.

    Raises
    ------
    InputError
        A value that is neither text nor a finite number, or text holding a NUL.
    """
    if isinstance(value, str):
        if "\x00" in value:
            raise InputError(f"a filter value holding a NUL character cannot be compared: {value!r}")
        return "'" + value.replace("'", "''") + "'"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"a filter value must be a finite number or text, got {value!r}")
    return str(value) if isinstance(value, int) else repr(float(value))


def filter_sql(where: Mapping) -> str:
    """Return GDAL's attribute filter (SQLite SQL) for ``{"field": f, "values": [v, ...]}``."""
    values = ", ".join(sql_literal(value) for value in where["values"])
    return f"{sql_identifier(where['field'])} IN ({values})"


def field_kind(field_type: int) -> str | None:
    """Return "number" or "text" for an OGR field type a filter can compare, else None."""
    if field_type in NUMERIC_FIELDS:
        return "number"
    if field_type in TEXT_FIELDS:
        return "text"
    return None


def filter_problem(facts: LayerFacts, where) -> str | None:
    """Return what is wrong with filtering this layer by ``where``, or None.

    The field must be one of the layer's, and every value of the kind the
    field holds: numbers for a numeric field, text for a text field. The
    message names the layer and its fields.
    """
    if not isinstance(where, Mapping) or not isinstance(where.get("field"), str) \
            or not isinstance(where.get("values"), list) or not where["values"]:
        return "the filter must be {'field': name, 'values': [...]} with at least one value"
    field = where["field"]
    if field not in facts.fields:
        return (f"the filter's field {field!r} is not a field of layer {facts.name}; it has "
                f"{', '.join(facts.fields) or 'no fields'}")
    kind = field_kind(facts.fields[field])
    if kind is None:
        return (f"field {field!r} of layer {facts.name} holds "
                f"{ogr.GetFieldTypeName(facts.fields[field]).lower()} values; a filter compares "
                "numbers or text only")
    for value in where["values"]:
        is_text = isinstance(value, str)
        is_number = not is_text and not isinstance(value, bool) and isinstance(value, (int, float)) \
            and math.isfinite(value)
        if kind == "number" and not is_number:
            return (f"field {field!r} of layer {facts.name} holds numbers; the filter's value "
                    f"{value!r} is not a number")
        if kind == "text" and not is_text:
            return (f"field {field!r} of layer {facts.name} holds text; the filter's value {value!r} "
                    f"is not text (write it in quotes: {json.dumps(str(value))})")
        if is_text and "\x00" in value:
            return f"the filter's value {value!r} holds a NUL character, which no field holds"
    return None


def _values_text(values) -> str:
    """Return a filter's values for a message: ``1 or 2``, ``'major'``."""
    shown = [repr(v) for v in values[:8]] + ([f"… ({len(values) - 8} more)"] if len(values) > 8 else [])
    return shown[0] if len(shown) == 1 else ", ".join(shown[:-1]) + " or " + shown[-1]


def _filterable_copy(path: str, facts: LayerFacts, base: str, feedback: Feedback) -> tuple[str, str]:
    """Return (source, layer) whose attribute filter is SQLite's: the layer itself, or a GeoPackage copy."""
    if facts.driver in SQLITE_DRIVERS:
        return path, facts.name
    copy = base + "-source.gpkg"
    _run(lambda: gdal.VectorTranslate(copy, path, format="GPKG", layers=[facts.name],
                                      layerName="features",
                                      layerCreationOptions=["SPATIAL_INDEX=NO"]),
         feedback, f"copying {path} to filter its features")
    return copy, "features"


def _filtered_count(source: str, layer_name: str, sql: str, name: str
                    ) -> tuple[int, tuple[float, float, float, float]]:
    """Return how many features the filter keeps and their envelope (OGR order)."""
    try:
        ds = gdal.OpenEx(source, gdal.OF_VECTOR | gdal.OF_READONLY)
        layer = ds.GetLayerByName(layer_name)
        layer.SetAttributeFilter(sql)
        count = layer.GetFeatureCount()
        extent = layer.GetExtent() if count else (0.0, 0.0, 0.0, 0.0)
    except RuntimeError as exc:
        raise InputError(f"{name}: the filter {sql} cannot be applied to {source}: {exc}") from None
    finally:
        layer = ds = None
    return count, extent


def distinct_values(path: str, layer_name: str | None, field: str, max_values: int = 500,
                    max_features: int = 200_000) -> tuple[list, bool]:
    """Return the distinct values of a field (sorted) and whether every feature was read.

    A streamed read of the one field (geometry and other fields are not
    read), stopped after ``max_features`` features or once more than
    ``max_values`` values are found, so the cost is bounded whatever the
    layer's size. For an editor's list of values to tick; NULLs are left out.

    Raises
    ------
    MissingInputError, InputError
        The file or layer cannot be read, or has no field ``field``.
    """
    facts = read_layer_facts(path, layer_name, "layer")
    if field not in facts.fields:
        raise InputError(f"layer {facts.name} has no field {field!r}; it has "
                         f"{', '.join(facts.fields) or 'no fields'}")
    found: set = set()
    complete = True
    try:
        ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
        layer = ds.GetLayerByName(facts.name)
        layer.SetIgnoredFields([name for name in facts.fields if name != field] + ["OGR_GEOMETRY",
                                                                                   "OGR_STYLE"])
        index = layer.GetLayerDefn().GetFieldIndex(field)
        for count, feature in enumerate(layer, 1):
            if feature.IsFieldSetAndNotNull(index):
                found.add(feature.GetField(index))
            if count >= max_features or len(found) > max_values:
                complete = False
                break
    except RuntimeError as exc:
        raise InputError(f"the values of {field!r} in {path} cannot be read: {exc}") from None
    finally:
        feature = layer = ds = None
    values = sorted(found, key=lambda v: (isinstance(v, str), v))[:max_values]
    return values, complete and len(found) <= max_values


def filterable_fields(facts: LayerFacts) -> dict[str, str]:
    """Return the layer's fields a filter can compare, with their kind ("number" or "text")."""
    return {name: kind for name, kind in ((n, field_kind(t)) for n, t in facts.fields.items())
            if kind is not None}


# -- a margin around the grid ------------------------------------------------------------------


def margin_cells(grid: Grid, margin: float) -> tuple[int, int]:
    """Return the columns and rows a margin (map units) adds on each side, rounded up to whole cells."""
    if not margin:
        return (0, 0)
    return (math.ceil(margin / grid.cell_x - 1e-9), math.ceil(margin / grid.cell_y - 1e-9))


def margin_problem(grid: Grid, margin: float) -> str | None:
    """Return why ``margin`` cannot be used around ``grid`` (wider than the grid itself), or None."""
    span = max(grid.width * grid.cell_x, grid.height * grid.cell_y)
    if margin > span:
        return (f"a margin of {margin:g} map units is wider than the grid itself ({span:g} across); "
                "features are counted at most one grid-width outside it")
    return None


def _with_margin(grid: Grid, margin: float, name: str) -> tuple[Grid, tuple[int, int]]:
    """Return the grid enlarged by the margin on every side, and the columns and rows added."""
    problem = margin_problem(grid, margin)
    if problem:
        raise InputError(f"{name}: {problem}")
    pad_x, pad_y = margin_cells(grid, margin)
    if (pad_x, pad_y) == (0, 0):
        return grid, (0, 0)
    return Grid(grid.crs_wkt, grid.xmin - pad_x * grid.cell_x, grid.ymax + pad_y * grid.cell_y,
                grid.cell_x, grid.cell_y, grid.width + 2 * pad_x, grid.height + 2 * pad_y), (pad_x, pad_y)


def _inner_window(path: str, pad: tuple[int, int], grid: Grid, base: str) -> str:
    """Return a VRT of the grid's own window of a raster measured on the enlarged grid."""
    target = base + "-distance-inner.vrt"
    ds = gdal.Translate(target, path, format="VRT", srcWin=[pad[0], pad[1], grid.width, grid.height])
    ds.SetGeoTransform(grid.transform)  # the same origin, free of the enlarged grid's rounding
    ds = None
    return target


def _check_features_on_grid(extent, srs: osr.SpatialReference, grid: Grid,
                            name: str, label: str, within: str = "") -> None:
    """Raise if the features' envelope (OGR order: xmin, xmax, ymin, ymax) misses the grid.

    ``grid`` is the grid enlarged by any margin; ``within`` says so in the message.
    """
    xmin, xmax, ymin, ymax = extent
    if not srs.IsSame(grid.srs):
        transform = osr.CoordinateTransformation(srs, grid.srs)
        xmin, ymin, xmax, ymax = transform.TransformBounds(xmin, ymin, xmax, ymax, 21)
    gxmin, gymin, gxmax, gymax = grid.extent
    if xmax < gxmin or xmin > gxmax or ymax < gymin or ymin > gymax:
        raise GridError(f"{name}: no feature of {label} lies on the grid{within} "
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


def _distance_grid(path: str, layer_name: str, where_sql: str | None, grid: Grid, base: str,
                   feedback: Feedback, span: tuple[float, float, float]) -> str:
    """Rasterise the layer's (filtered) features and compute distance to them; return the grid's path."""
    start, mid, end = span
    target = base + "-distance.tif"
    burnt = distance = features = distances = None
    try:
        burnt = _empty_grid(base + "-features.tif", grid, gdal.GDT_Byte, None)
        _run(lambda: gdal.Rasterize(burnt, path, layers=[layer_name], where=where_sql, burnValues=[1],
                                    allTouched=True, callback=_progress_callback(feedback, start, mid)),
             feedback, f"rasterising {path}")
        distance = _empty_grid(target, grid, gdal.GDT_Float32, None)
        features, distances = burnt.GetRasterBand(1), distance.GetRasterBand(1)
        _run(lambda: gdal.ComputeProximity(features, distances, ["VALUES=1", "DISTUNITS=GEO"],
                                           callback=_progress_callback(feedback, mid, end)),
             feedback, f"computing distance to {path}")
    finally:
        # Bands before their datasets, also when an error's traceback keeps this frame alive:
        # a band outliving its dataset is a use after free in GDAL's bindings.
        features = distances = None
        burnt = distance = None
    return target


def _attribute_grid(path: str, facts: LayerFacts, layer_name: str, where_sql: str | None,
                    field_name: str, grid: Grid, base: str, feedback: Feedback,
                    span: tuple[float, float], name: str) -> str:
    """Burn a numeric field of the (filtered) features into the grid; return the grid's path."""
    if field_name not in facts.fields:
        raise InputError(f"{name}: layer {facts.name} has no field {field_name!r}; "
                         f"it has {', '.join(facts.fields) or 'no fields'}")
    if facts.fields[field_name] not in NUMERIC_FIELDS:
        raise InputError(f"{name}: field {field_name!r} of layer {facts.name} is not numeric")
    target = base + "-attribute.tif"
    ds = _empty_grid(target, grid, gdal.GDT_Float64, float("nan"))
    ds.GetRasterBand(1).Fill(float("nan"))
    _run(lambda: gdal.Rasterize(ds, path, layers=[layer_name], where=where_sql, attribute=field_name,
                                allTouched=not facts.polygons, callback=_progress_callback(feedback, *span)),
         feedback, f"rasterising {path}")
    ds = None
    return target
