"""Vector proxies narrowed by a filter of features, and widened by a margin around the grid.

Outside references: the distance to a layer holding only the matching
features, written separately (cell for cell); ``scipy.ndimage.distance_transform_edt``
on the rasterised features of the enlarged grid; the exact point-to-segment
distance; and SQLite itself (Python's ``sqlite3``), which must read our
quoted names and values back as the very strings we quoted.
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pytest
from osgeo import gdal, ogr
from scipy import ndimage

from favour_plugin.core.errors import GridError, InputError
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.tree import Tree
from favour_plugin.raster.checks import input_problems
from favour_plugin.raster.grid import Grid
from favour_plugin.raster.vector import (
    distinct_values,
    filter_sql,
    sql_identifier,
    sql_literal,
    vector_source,
)
from tests.helpers import ORIGIN, leaf, read_raster, srs, tree_doc, write_raster

X0, Y0 = ORIGIN
CELL = 100.0
ROWS, COLS = 60, 80

#: Faults as (order, kind, WKT): four inside the grid, one just beyond its west edge. The ends
#: are off the cell corners, so no line passes exactly through a corner, where "touched" is a tie.
FAULTS = [
    (1, "major", f"LINESTRING ({X0 + 1013} {Y0 - 507}, {X0 + 3021} {Y0 - 4011})"),
    (2, "minor", f"LINESTRING ({X0 + 6017} {Y0 - 1009}, {X0 + 7007} {Y0 - 5513})"),
    (3, "minor", f"LINESTRING ({X0 + 4011} {Y0 - 203}, {X0 + 4519} {Y0 - 5807})"),
    (1, "major", f"LINESTRING ({X0 + 509} {Y0 - 5003}, {X0 + 2513} {Y0 - 5521})"),
    (2, "minor", f"LINESTRING ({X0 - 300} {Y0 - 2000}, {X0 - 250} {Y0 - 5000})"),
]


def write_features(path, rows, layer="faults", driver="GPKG", fields=None) -> str:
    """Write features with typed fields: ``fields`` maps a name to (OGR type, values per row)."""
    ogr_driver = ogr.GetDriverByName(driver)
    if ogr_driver.Open(str(path)) is not None:
        ogr_driver.DeleteDataSource(str(path))
    ds = ogr_driver.CreateDataSource(str(path))
    out = ds.CreateLayer(layer, srs(), ogr.wkbLineString)
    for name, (kind, _) in (fields or {}).items():
        out.CreateField(ogr.FieldDefn(name, kind))
    for i, wkt in enumerate(rows):
        feature = ogr.Feature(out.GetLayerDefn())
        feature.SetGeometry(ogr.CreateGeometryFromWkt(wkt))
        for name, (_, values) in (fields or {}).items():
            feature.SetField(name, values[i])
        out.CreateFeature(feature)
    ds = None
    return str(path)


def faults_layer(path, keep=lambda order, kind: True, driver="GPKG", layer="faults") -> str:
    """Write the faults that ``keep(order, kind)`` accepts, with their 'order' and 'kind' fields."""
    kept = [(o, k, w) for o, k, w in FAULTS if keep(o, k)]
    return write_features(path, [w for _, _, w in kept], layer, driver,
                          {"order": (ogr.OFTInteger, [o for o, _, _ in kept]),
                           "kind": (ogr.OFTString, [k for _, k, _ in kept])})


@pytest.fixture()
def grid(tmp_path) -> Grid:
    """The 80 x 60 grid of 100 m cells every test measures on."""
    ref = write_raster(tmp_path / "ref.tif", np.zeros((ROWS, COLS), np.float32), cell=CELL)
    ds = gdal.Open(ref)
    found = Grid.from_dataset(ds, "ref")
    ds = None
    return found


def measure(path, grid, workdir, layer="faults", **options) -> tuple[np.ndarray, dict]:
    """Return the distance grid of a vector layer and its lineage record."""
    work = workdir / f"work-{len(list(workdir.glob('work-*')))}"
    work.mkdir()
    spec = vector_source(str(path), layer, "distance", None, grid, str(work), "Favourability > Faults",
                         Feedback(), **options)
    return read_raster(spec.target), spec.record


def centres():
    """Map coordinates of the grid's cell centres."""
    cols, rows = np.meshgrid(np.arange(COLS), np.arange(ROWS))
    return X0 + (cols + 0.5) * CELL, Y0 - (rows + 0.5) * CELL


def segment_distance(px, py, wkt):
    """Exact distance from points to a two-point line (the standard projection formula)."""
    (ax, ay), (bx, by) = ogr.CreateGeometryFromWkt(wkt).GetPoints()
    abx, aby = bx - ax, by - ay
    t = np.clip(((px - ax) * abx + (py - ay) * aby) / (abx * abx + aby * aby), 0, 1)
    return np.hypot(px - (ax + t * abx), py - (ay + t * aby))


# -- the filter ---------------------------------------------------------------------------------


@pytest.mark.parametrize("driver, suffix", [("GPKG", "gpkg"), ("ESRI Shapefile", "shp"),
                                            ("FlatGeobuf", "fgb")])
def test_filtered_distance_equals_distance_to_the_matching_features_alone(tmp_path, grid, driver, suffix):
    """Order 1 or 2 of all faults measures the same cells as a layer of only those faults."""
    layer = "faults" if driver == "GPKG" else None
    everything = faults_layer(tmp_path / f"all.{suffix}", driver=driver)
    alone = faults_layer(tmp_path / "alone.gpkg", lambda order, kind: order in (1, 2))
    filtered, record = measure(everything, grid, tmp_path, layer, where={"field": "order", "values": [1, 2]})
    expected, _ = measure(alone, grid, tmp_path)
    assert np.array_equal(filtered, expected)
    unfiltered, _ = measure(everything, grid, tmp_path, layer)
    assert not np.array_equal(filtered, unfiltered)  # the order-3 fault is really left out
    assert record["where"] == {"field": "order", "values": [1, 2]}
    assert (record["features_in_layer"], record["features"]) == (5, 4)
    assert '"order" IN (1, 2)' in record["filter"]


def test_filtered_distance_agrees_with_scipy_and_with_the_exact_distance(tmp_path, grid):
    """The filtered distance matches scipy's exact transform of its features, and the segments to a cell."""
    everything = faults_layer(tmp_path / "all.gpkg")
    work = tmp_path / "w"
    work.mkdir()
    spec = vector_source(everything, "faults", "distance", None, grid, str(work), "F", Feedback(),
                         where={"field": "kind", "values": ["major"]})
    distance = read_raster(spec.target)
    burnt = read_raster(spec.target.replace("-distance.tif", "-features.tif"))
    reference = ndimage.distance_transform_edt(burnt == 0) * CELL
    assert np.max(np.abs(distance - reference)) <= 0.05 * CELL
    px, py = centres()
    exact = np.minimum.reduce([segment_distance(px, py, w) for _, k, w in FAULTS if k == "major"])
    assert np.max(np.abs(distance - exact)) <= CELL + 1e-3


@pytest.mark.parametrize("driver, suffix", [("GPKG", "gpkg"), ("ESRI Shapefile", "shp")])
def test_quotes_in_a_field_name_and_in_values_select_exactly_those_features(tmp_path, grid, driver, suffix):
    """Names and values holding quotes, backslashes and SQL are matched literally, never run."""
    field = 'o"rd\'er\\'
    values = ["a'b", 'say "hi"', "x\\", "' OR 1=1 --", "plain"]
    rows = [w for _, _, w in FAULTS]
    path = write_features(tmp_path / f"odd.{suffix}", rows, driver=driver,
                          fields={field: (ogr.OFTString, values)})
    layer = "faults" if driver == "GPKG" else None
    for kept in (["a'b"], ['say "hi"', "x\\"], ["' OR 1=1 --"]):
        got, record = measure(path, grid, tmp_path, layer, where={"field": field, "values": kept})
        alone = write_features(tmp_path / "alone.gpkg", [rows[i] for i, v in enumerate(values) if v in kept])
        expected, _ = measure(alone, grid, tmp_path)
        assert np.array_equal(got, expected), kept
        assert record["features"] == len(kept)
    # A value built to widen the statement matches only itself: here, nothing.
    with pytest.raises(InputError, match="the filter keeps nothing"):
        measure(path, grid, tmp_path, layer, where={"field": field, "values": ["x' OR '1'='1"]})


def test_a_filtered_attribute_burns_only_the_matching_features(tmp_path, grid):
    """The 'order' of the major faults alone, burnt with a filter, equals a layer of only those faults."""
    everything = faults_layer(tmp_path / "all.gpkg")
    alone = faults_layer(tmp_path / "alone.gpkg", lambda order, kind: kind == "major")
    grids = []
    for path, where in ((everything, {"field": "kind", "values": ["major"]}), (alone, None)):
        work = tmp_path / f"a{len(grids)}"
        work.mkdir()
        spec = vector_source(path, "faults", "attribute", "order", grid, str(work), "F", Feedback(),
                             where=where)
        grids.append(read_raster(spec.target))
    assert np.array_equal(grids[0], grids[1], equal_nan=True) and np.isfinite(grids[0]).any()


@pytest.mark.parametrize("text", ["a'b", 'q"q', "x\\", "\\'", "' OR 1=1 --", "", "é ü ∞", "a''b"])
def test_sqlite_reads_our_quoted_names_and_values_back_unchanged(text):
    """SQLite parses sql_literal and sql_identifier back to exactly the strings quoted."""
    db = sqlite3.connect(":memory:")
    assert db.execute(f"SELECT {sql_literal(text)}").fetchone()[0] == text
    if text:
        db.execute(f"CREATE TABLE t ({sql_identifier(text)} TEXT)")
        assert [row[1] for row in db.execute("PRAGMA table_info(t)")] == [text]
    assert db.execute(f"SELECT {sql_literal(7)}, {sql_literal(2.5)}, {sql_literal(-1e20)}").fetchone() == \
        (7, 2.5, -1e20)
    assert filter_sql({"field": "order", "values": [1, 2]}) == '"order" IN (1, 2)'


@pytest.mark.parametrize("bad", [True, None, float("nan"), [1], {"a": 1}])
def test_sql_literal_refuses_what_is_neither_text_nor_a_finite_number(bad):
    """A value that is not text or a finite number never reaches a statement."""
    with pytest.raises(InputError, match="finite number or text"):
        sql_literal(bad)


def test_an_unknown_filter_field_is_named_at_the_node_with_the_layers_fields(tmp_path, grid):
    """input_problems and the measure both name the node, the field and the fields the layer has."""
    path = faults_layer(tmp_path / "faults.gpkg")
    with pytest.raises(InputError, match=r"Favourability > Faults: the filter's field 'rank' is not a "
                                         r"field of layer faults; it has order, kind"):
        measure(path, grid, tmp_path, where={"field": "rank", "values": [1]})
    doc = tree_doc([leaf("Mag", tmp_path / "ref.tif", {"type": "linear", "lower": 0, "upper": 1}),
                    leaf("Faults", path, {"type": "linear", "lower": 2000, "upper": 0}, layer="faults",
                         measure="distance", where={"field": "rank", "values": [1]}),
                    leaf("Kind", path, {"type": "linear", "lower": 2000, "upper": 0}, layer="faults",
                         measure="distance", where={"field": "kind", "values": [1]})])
    found = {p.node: p.message for p in input_problems(Tree.from_dict(doc)) if p.level == "error"}
    assert found["Favourability > Faults"] == ("the filter's field 'rank' is not a field of layer "
                                               "faults; it has order, kind")
    assert "holds text; the filter's value 1 is not text" in found["Favourability > Kind"]


def test_distinct_values_are_every_value_the_field_holds(tmp_path):
    """The values offered to tick are numpy.unique of the values written."""
    path = faults_layer(tmp_path / "faults.gpkg")
    values, complete = distinct_values(path, "faults", "order")
    assert values == np.unique([o for o, _, _ in FAULTS]).tolist() and complete
    assert distinct_values(path, "faults", "kind") == (["major", "minor"], True)
    assert distinct_values(path, "faults", "order", max_values=2) == ([1, 2], False)
    with pytest.raises(InputError, match="has no field 'rank'"):
        distinct_values(path, "faults", "rank")


# -- the margin ---------------------------------------------------------------------------------


def test_a_feature_just_outside_the_grid_counts_within_the_margin(tmp_path, grid):
    """With a margin the west fault shortens the distances inside, as scipy finds on the enlarged grid."""
    path = faults_layer(tmp_path / "faults.gpkg")
    plain, _ = measure(path, grid, tmp_path)
    widened, record = measure(path, grid, tmp_path, margin=450)
    assert record["margin"] == 450 and record["margin_cells"] == [5, 5]
    # Near the west edge the fault 250–300 m outside is now the nearest feature.
    assert widened[30, 0] == pytest.approx(300.0) and plain[30, 0] > 1000
    assert np.all(widened <= plain + 1e-3)
    # Outside reference: scipy's exact transform of the features on the enlarged grid, inner window.
    big = tmp_path / "big.tif"
    enlarged = gdal.GetDriverByName("GTiff").Create(str(big), COLS + 10, ROWS + 10, 1, gdal.GDT_Byte)
    enlarged.SetGeoTransform((X0 - 5 * CELL, CELL, 0, Y0 + 5 * CELL, 0, -CELL))
    enlarged.SetProjection(grid.crs_wkt)
    gdal.Rasterize(enlarged, path, layers=["faults"], burnValues=[1], allTouched=True)
    burnt = enlarged.GetRasterBand(1).ReadAsArray()
    enlarged = None
    reference = ndimage.distance_transform_edt(burnt == 0)[5:-5, 5:-5] * CELL
    assert np.max(np.abs(widened - reference)) <= 0.05 * CELL
    # And the exact distance to every segment, within a cell.
    px, py = centres()
    exact = np.minimum.reduce([segment_distance(px, py, w) for _, _, w in FAULTS])
    assert np.max(np.abs(widened - exact)) <= CELL + 1e-3


def test_a_feature_only_outside_the_grid_needs_a_margin_to_be_seen(tmp_path, grid):
    """A layer whose only fault lies beyond the edge is off the grid without a margin, measured with one."""
    path = write_features(tmp_path / "west.gpkg", [FAULTS[4][2]])
    with pytest.raises(GridError, match="no feature of west.gpkg:faults lies on the grid"):
        measure(path, grid, tmp_path)
    with pytest.raises(GridError, match="lies on the grid or within its margin of 100"):
        measure(path, grid, tmp_path, margin=100)
    distance, _ = measure(path, grid, tmp_path, margin=500)
    px, py = centres()
    assert np.max(np.abs(distance - segment_distance(px, py, FAULTS[4][2]))) <= CELL


def test_a_margin_wider_than_the_grid_or_on_an_attribute_is_refused(tmp_path, grid):
    """A margin beyond the grid's own width, a negative one or one on an attribute is named, not measured."""
    path = faults_layer(tmp_path / "faults.gpkg")
    with pytest.raises(InputError, match=r"a margin of 9000 map units is wider than the grid itself "
                                         r"\(8000 across\)"):
        measure(path, grid, tmp_path, margin=9000)
    with pytest.raises(InputError, match="0 or more"):
        measure(path, grid, tmp_path, margin=-1)
    with pytest.raises(InputError, match="applies only to measure 'distance'"):
        vector_source(path, "faults", "attribute", "order", grid, str(tmp_path), "F", Feedback(), margin=5)


# -- through the one evaluation path -------------------------------------------------------------


def test_a_tree_file_with_a_filter_and_a_margin_evaluates_them_and_records_them(tmp_path, grid):
    """evaluate_tree measures the filtered, widened distance and keeps both in the input's lineage."""
    from favour_plugin.raster.engine import evaluate_tree

    path = faults_layer(tmp_path / "faults.gpkg")
    alone = faults_layer(tmp_path / "alone.gpkg", lambda order, kind: order in (1, 2))
    doc = tree_doc([leaf("Faults", path, {"type": "linear", "lower": 0, "upper": 1e6}, layer="faults",
                         measure="distance", where={"field": "order", "values": [1, 2]}, margin=500)],
                   grid={"reference": str(tmp_path / "ref.tif")})
    result = evaluate_tree(Tree.from_dict(doc), str(tmp_path / "fav.tif"))
    expected, _ = measure(alone, grid, tmp_path, margin=500)
    assert np.allclose(read_raster(tmp_path / "fav.tif") * 1e6, expected, atol=0.1)
    (entry,) = result.lineage["inputs"]
    assert entry["where"] == {"field": "order", "values": [1, 2]} and entry["margin"] == 500
    assert entry["features"] == 4 and entry["features_in_layer"] == 5
