"""Ranked targets: the threshold, the zones, their numbers, their order, the file, the three paths.

Outside references: numpy's sort of the valid cells (the top-x % threshold),
OGR's own geometry areas (``Geometry.GetArea`` on the written GeoPackage),
GDAL's rasterisation of each written polygon and numpy on the cells it
covers (the zonal statistics), scipy.ndimage.label with 4-connectivity (the
zones), QGIS's own style loader (the style), coreutils-equivalent SHA-256
(hashlib) for the lineage, and properties that must hold (ranking order,
minimum area, merge distance, one footprint whatever the merge).
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal, ogr
from scipy import ndimage

from favour_plugin.core import targets as tg
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.lineage import read_lineage
from favour_plugin.raster.style import RAMP
from favour_plugin.raster.target_jobs import find_targets
from tests.helpers import ORIGIN, read_raster, run_cli, write_raster, write_vector

CELL = 100.0
CELL_M2 = CELL * CELL
SHAPE = (120, 160)
NODATA = -9999.0


def centre(row: float, col: float) -> str:
    """Return a WKT point at the centre of a cell of the test grid."""
    return f"POINT ({ORIGIN[0] + (col + 0.5) * CELL} {ORIGIN[1] - (row + 0.5) * CELL})"


def blocks_raster() -> np.ndarray:
    """Background below 0.15 and planted zones of known values (see each comment)."""
    rng = np.random.default_rng(3)
    values = rng.uniform(0.0, 0.15, SHAPE)
    values[10:20, 10:30] = 0.9                           # A: 200 cells, mean 0.9, peak 0.9
    values[40:50, 10:15], values[40:50, 15:20] = 0.75, 1.0  # B: mean 0.875, peak 1.0
    values[70:80, 10:20] = 0.5                           # C: mean 0.5, peak 0.5
    values[70:80, 40:45], values[70:80, 45:50] = 0.25, 0.75  # D: mean 0.5, peak 0.75: ranks above C
    values[100:102, 100:102] = 0.6                       # E: 4 cells, 0.04 km²
    values[30:35, 100:105] = 0.7                         # F1: 5 x 5
    values[30:35, 108:113] = 0.7                         # F2: 5 x 5, three cells (300 m) east of F1
    values[0:6, 150:160] = NODATA                        # a corner of nodata
    return values.astype(np.float32)


@pytest.fixture(scope="module")
def scene(tmp_path_factory) -> dict:
    """The planted raster, two component rasters, a robustness raster and named occurrences."""
    folder = tmp_path_factory.mktemp("targets")
    fav = write_raster(folder / "fav.tif", blocks_raster(), nodata=NODATA)
    rng = np.random.default_rng(9)
    components = folder / "components"
    components.mkdir()
    paths = []
    for name in ("source", "trap"):
        mu = rng.uniform(0, 1, SHAPE).astype(np.float32)
        mu[60:75, 5:25] = NODATA  # part of C without this component
        path = write_raster(components / f"{name}.tif", mu, nodata=NODATA)
        ds = gdal.Open(path, gdal.GA_Update)
        band = ds.GetRasterBand(1)
        band.SetDescription(f"Favourability > {name.title()}")
        band = None
        ds = None
        paths.append(path)
    robustness = write_raster(folder / "robustness.tif", rng.uniform(0, 1, SHAPE).astype(np.float32))
    points = [centre(12, 12), centre(15, 25), centre(75, 47), centre(60, 60), centre(-5, 3)]
    deposits = str(folder / "occurrences.gpkg")
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(deposits)
    from tests.helpers import srs

    layer = ds.CreateLayer("occurrences", srs(), ogr.wkbPoint)
    layer.CreateField(ogr.FieldDefn("name", ogr.OFTString))
    for wkt, name in zip(points, ["Alder Knoll", "Brack Seam", "Cobbet Rise", "Dunmere", "Offgrid"]):
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetField("name", name)
        feature.SetGeometry(ogr.CreateGeometryFromWkt(wkt))
        layer.CreateFeature(feature)
        feature = None
    layer = None
    ds = None
    return {"folder": folder, "fav": fav, "components": str(components), "component_paths": paths,
            "robustness": robustness, "deposits": deposits}


def features(path: str) -> list[dict]:
    """Return every feature of the targets layer: its attributes and geometry (WKB)."""
    ds = ogr.Open(path)
    layer = ds.GetLayerByName("targets")
    out = []
    for feature in layer:
        geometry = feature.GetGeometryRef()
        out.append({**feature.items(), "_area": geometry.GetArea(), "_wkb": bytes(geometry.ExportToWkb()),
                    "_parts": geometry.GetGeometryCount()})
    layer = None
    ds = None
    return sorted(out, key=lambda f: f["rank"])


def rasterised(path: str, rank: int, like: str) -> np.ndarray:
    """Burn one written zone onto the raster's grid with GDAL (cell centres) and return the mask."""
    ref = gdal.Open(like)
    mem = gdal.GetDriverByName("MEM").Create("", ref.RasterXSize, ref.RasterYSize, 1, gdal.GDT_Byte)
    mem.SetGeoTransform(ref.GetGeoTransform())
    mem.SetProjection(ref.GetProjection())
    gdal.Rasterize(mem, path, layers=["targets"], burnValues=[1], where=f"rank = {rank}")
    mask = mem.GetRasterBand(1).ReadAsArray().astype(bool)
    mem = None
    ref = None
    return mask


def test_top_percent_threshold_is_the_kth_largest_of_numpys_sort(tmp_path):
    """The top-x % threshold is numpy's k-th largest valid value, k = ⌈n·x/100⌉; cells ≥ it are in."""
    rng = np.random.default_rng(1)
    smooth = ndimage.gaussian_filter(rng.random((300, 260)), 4).astype(np.float32)
    smooth[:20, :20] = NODATA
    path = write_raster(tmp_path / "smooth.tif", smooth, nodata=NODATA)
    valid = smooth[smooth != NODATA].astype(np.float64)
    for top in (1.0, 7.5, 10.0, 33.0):
        result = find_targets(path, str(tmp_path / f"t{top}.gpkg"), top_percent=top)
        k = math.ceil(valid.size * top / 100)
        assert result.threshold["value"] == np.sort(valid)[::-1][k - 1]
        assert result.record["zones"]["cells_above"] == int((valid >= result.threshold["value"]).sum())


@pytest.mark.parametrize("rounding", [None, 2])
def test_the_selection_narrows_exactly_when_the_bin_is_too_big_to_collect(rounding):
    """With a tiny collect limit the histogram passes narrow, and still find numpy's k-th largest.

    Rounded values make large ties (every candidate equal in the last bin).
    """
    rng = np.random.default_rng(4)
    values = rng.normal(0.5, 0.2, (50, 400))
    if rounding is not None:
        values = np.round(values, rounding)
    values[::7, ::3] = np.nan
    valid = values[~np.isnan(values)]
    blocks = np.array_split(values, 5)
    for k in (1, 17, 500, valid.size // 2, valid.size):
        selection = tg.TopSelection(np.nanmin(values), np.nanmax(values), k, bins=16, collect_cells=40)
        done = False
        while not done:
            parts = [selection.block_counts(b) for b in blocks]
            done = selection.narrow(sum(p[0] for p in parts), min(p[1] for p in parts),
                                    max(p[2] for p in parts))
        found = selection.value if selection.value is not None else \
            selection.finish(np.concatenate([selection.candidates(b) for b in blocks]))
        assert found == np.sort(valid)[::-1][k - 1]
        if k == valid.size // 2:  # the middle bin of 16 holds thousands: it had to be narrowed
            assert selection.passes >= 2


@pytest.fixture(scope="module")
def plain(scene) -> dict:
    """Targets at favourability ≥ 0.2, no minimum area, no merge, with every optional input."""
    out = str(scene["folder"] / "plain.gpkg")
    result = find_targets(scene["fav"], out, threshold=0.2, components=scene["components"],
                          deposits=scene["deposits"], robustness=scene["robustness"])
    return {"result": result, "features": features(out), "path": out}


def test_zones_are_scipys_4_connected_groups_of_cells(scene, plain):
    """Without merge or minimum area the zones are scipy.ndimage.label's 4-connected groups."""
    values = read_raster(scene["fav"])
    labels, count = ndimage.label(np.nan_to_num(values, nan=0) >= 0.2)
    sizes = sorted(np.bincount(labels.ravel())[1:].tolist())
    assert count == len(plain["features"]) == 7  # A, B, C, D, E, F1, F2
    assert sorted(f["cells"] for f in plain["features"]) == sizes


def test_polygon_areas_match_ogr_and_the_cell_count(plain):
    """Each zone's area (km²) equals OGR's GetArea of its polygon and its cell count × cell area."""
    for feature in plain["features"]:
        assert feature["_area"] == pytest.approx(feature["area_km2"] * 1e6, rel=1e-12)
        assert feature["_area"] == pytest.approx(feature["cells"] * CELL_M2, rel=1e-12)


def test_zonal_means_match_numpy_on_the_cells_gdal_burns_for_each_polygon(scene, plain):
    """Mean, peak, component means (nodata left out) and robustness equal numpy on each zone's cells."""
    fav = read_raster(scene["fav"])
    source, trap = (read_raster(p) for p in scene["component_paths"])
    robustness = read_raster(scene["robustness"])
    for feature in plain["features"]:
        cells = rasterised(plain["path"], feature["rank"], scene["fav"])
        assert cells.sum() == feature["cells"]
        assert np.all(fav[cells] >= 0.2)
        assert feature["fav_mean"] == pytest.approx(fav[cells].mean(), rel=1e-12)
        assert feature["fav_peak"] == fav[cells].max()
        for field, mu in (("mu_source", source), ("mu_trap", trap)):
            expected = np.nanmean(mu[cells]) if np.isfinite(mu[cells]).any() else None
            assert feature[field] == (pytest.approx(expected, rel=1e-12) if expected is not None else None)
        assert feature["robustness"] == pytest.approx(robustness[cells].mean(), rel=1e-12)


def test_ranked_by_mean_then_by_peak(plain):
    """Ranks follow mean favourability, ties broken by peak: D (mean 0.5, peak 0.75) before C."""
    rows = plain["features"]
    keys = [(-f["fav_mean"], -f["fav_peak"]) for f in rows]
    assert keys == sorted(keys)
    assert [f["rank"] for f in rows] == list(range(1, len(rows) + 1))
    by_size = {f["cells"]: f for f in rows}
    assert by_size[100]["fav_mean"] == 0.5  # C, exactly
    d = next(f for f in rows if f["fav_mean"] == 0.5 and f["fav_peak"] == 0.75)
    c = next(f for f in rows if f["fav_mean"] == 0.5 and f["fav_peak"] == 0.5)
    assert d["rank"] == c["rank"] - 1


def test_why_orders_the_components_strongest_first(plain):
    """The 'why' text lists each component's mean, from the highest to the lowest."""
    for feature in plain["features"]:
        parts = [p.rsplit(" ", 1) for p in feature["why"].split(" > ")]
        values = [float(v) for _, v in parts]
        assert values == sorted(values, reverse=True)
        assert {name for name, _ in parts} <= {"Source", "Trap"}


def test_occurrences_are_counted_and_named_in_their_zone(plain):
    """Each occurrence counts in the zone whose cells hold it; names come from the 'name' field."""
    rows = {f["rank"]: f for f in plain["features"]}
    a = next(f for f in rows.values() if f["fav_mean"] == pytest.approx(0.9))
    assert a["occurrences"] == 2 and a["occurrence_names"] == "Alder Knoll; Brack Seam"
    d = next(f for f in rows.values() if f["fav_peak"] == 0.75)
    assert d["occurrences"] == 1 and d["occurrence_names"] == "Cobbet Rise"
    assert sum(f["occurrences"] for f in rows.values()) == 3  # Dunmere lies on background
    record = plain["result"].record
    assert record["deposits"]["outside_grid"] == 1
    assert any("outside the grid" in w["message"] for w in record["warnings"])


def test_occurrences_in_another_crs_are_reprojected(scene, plain, tmp_path):
    """The same occurrences stored in geographic coordinates fall in the same zones."""
    copy = str(tmp_path / "geographic.gpkg")
    gdal.VectorTranslate(copy, scene["deposits"], dstSRS="EPSG:4326", reproject=True)
    result = find_targets(scene["fav"], str(tmp_path / "t.gpkg"), threshold=0.2, deposits=copy)
    assert [r["occurrences"] for r in result.rows] == [f["occurrences"] for f in plain["features"]]
    assert result.record["deposits"]["reprojected"]


def test_minimum_area_drops_exactly_the_zones_below_it(scene, plain, tmp_path):
    """Zones under the minimum area go (E, 0.04 km²), every kept zone reaches it, the rest are kept."""
    result = find_targets(scene["fav"], str(tmp_path / "m.gpkg"), threshold=0.2, min_area_km2=0.05)
    kept = features(str(tmp_path / "m.gpkg"))
    assert all(f["area_km2"] >= 0.05 for f in kept)
    expected = sorted(f["cells"] for f in plain["features"] if f["area_km2"] >= 0.05)
    assert sorted(f["cells"] for f in kept) == expected
    assert result.record["zones"]["dropped_below_minimum_area"] == 1


def test_merge_distance_joins_zones_closer_than_it_and_keeps_their_footprint(scene, plain, tmp_path):
    """F1 and F2 lie 300 m apart: 250 m keeps them apart, 350 m merges them; the cells stay the same."""
    apart = find_targets(scene["fav"], str(tmp_path / "a.gpkg"), threshold=0.2, merge_distance=250)
    merged = find_targets(scene["fav"], str(tmp_path / "b.gpkg"), threshold=0.2, merge_distance=350)
    assert len(apart.rows) == len(plain["features"])
    assert len(merged.rows) == len(plain["features"]) - 1
    joined = next(f for f in features(str(tmp_path / "b.gpkg")) if f["cells"] == 50)
    assert joined["_parts"] == 2 and joined["_area"] == pytest.approx(50 * CELL_M2)
    for result in (apart, merged):
        assert result.record["zones"]["cells_in_targets"] == sum(f["cells"] for f in plain["features"])


def test_threshold_at_the_validation_crossing(scene, tmp_path):
    """With a validation result the cut is the value its prediction–area crossing names."""
    import json

    from favour_plugin.raster.validation_jobs import validate

    points = [centre(r, c) for r, c in [(12, 12), (15, 25), (45, 12), (75, 47), (33, 102), (33, 110),
                                        (60, 60), (90, 130)]]
    deposits = write_vector(tmp_path / "v.gpkg", points, layer="v")
    job = validate(scene["fav"], deposits, str(tmp_path / "v.json"), resamples=50)
    value = json.loads(Path(job.json_file).read_text())["pa_threshold"]["value"]
    result = find_targets(scene["fav"], str(tmp_path / "t.gpkg"), validation=job.json_file)
    assert result.threshold["value"] == value
    assert result.threshold["mode"] == "validation crossing"


def test_style_is_ours_in_the_qml_and_in_the_geopackage(plain, qgis_app):
    """QGIS loads the GeoPackage with our style: five classes in RAMP's colours, labelled by rank."""
    from qgis.core import QgsVectorLayer

    ds = ogr.Open(plain["path"])
    styles = ds.GetLayerByName("layer_styles")
    rows = [f.items() for f in styles]
    styles = None
    ds = None
    assert len(rows) == 1 and rows[0]["f_table_name"] == "targets" and rows[0]["useAsDefault"]
    assert rows[0]["styleQML"] == Path(plain["result"].style_file).read_text(encoding="utf-8")
    layer = QgsVectorLayer(f"{plain['path']}|layername=targets", "targets", "ogr")
    assert layer.isValid()
    renderer = layer.renderer()
    assert renderer.type() == "graduatedSymbol" and renderer.classAttribute() == "fav_mean"
    assert [r.symbol().color().name() for r in renderer.ranges()] == [c for _, c in RAMP]
    assert layer.labelsEnabled() and layer.labeling().settings().fieldName == "rank"


def test_lineage_beside_the_geopackage_names_every_input_with_its_checksum(scene, plain):
    """The lineage reads back, and every input file's SHA-256 is hashlib's."""
    record = read_lineage(plain["path"])
    assert record["job"] == "targets" and record["threshold"]["value"] == 0.2
    files = [f for entry in record["inputs"] for f in entry["files"]]
    assert {Path(f["path"]).name for f in files} >= {"fav.tif", "source.tif", "trap.tif", "robustness.tif",
                                                     "occurrences.gpkg"}
    for f in files:
        assert f["sha256"] == hashlib.sha256(Path(f["path"]).read_bytes()).hexdigest()
    assert [r["rank"] for r in record["targets"]] == [f["rank"] for f in plain["features"]]


def _same_features(first: list[dict], second: list[dict]) -> None:
    assert len(first) == len(second)
    for a, b in zip(first, second):
        assert a == b


def test_command_line_gives_the_features_of_the_core_call(scene, tmp_path):
    """``python -m favour_plugin targets`` writes the same features as find_targets."""
    core = str(tmp_path / "core.gpkg")
    find_targets(scene["fav"], core, top_percent=12, min_area_km2=0.05, merge_distance=150,
                 components=scene["components"], deposits=scene["deposits"], robustness=scene["robustness"],
                 feedback=Feedback())
    cli = str(tmp_path / "cli.gpkg")
    result = run_cli("targets", scene["fav"], "-o", cli, "--top", "12", "--min-area", "0.05", "--merge",
                     "150", "--components", scene["components"], "--deposits", scene["deposits"],
                     "--robustness", scene["robustness"], "-q")
    assert result.returncode == 0, result.stderr
    assert "zones at favourability" in result.stdout
    _same_features(features(core), features(cli))


def test_processing_gives_the_features_of_the_core_call(scene, tmp_path, favour_provider):
    """``favour:targets`` writes the same features as find_targets, and returns its numbers."""
    import processing
    from qgis.core import QgsProcessingFeedback

    core = str(tmp_path / "core.gpkg")
    direct = find_targets(scene["fav"], core, top_percent=12, min_area_km2=0.05, merge_distance=150,
                          components=scene["components"], deposits=scene["deposits"],
                          robustness=scene["robustness"])
    out = str(tmp_path / "processing.gpkg")
    result = processing.run("favour:targets", {
        "INPUT": scene["fav"], "TOP_PERCENT": 12, "MIN_AREA": 0.05, "MERGE_DISTANCE": 150,
        "COMPONENTS": scene["components"], "DEPOSITS": scene["deposits"], "ROBUSTNESS": scene["robustness"],
        "OUTPUT": out}, feedback=QgsProcessingFeedback())
    assert result["OUTPUT"] == out and result["ZONES"] == len(direct.rows)
    assert result["THRESHOLD_USED"] == direct.threshold["value"]
    _same_features(features(core), features(out))


class CancelAfter(Feedback):
    """Feedback that asks to stop once progress passes ``fraction``."""

    def __init__(self, fraction: float) -> None:
        super().__init__()
        self.fraction = fraction
        self.seen = 0.0

    def set_progress(self, fraction: float) -> None:
        """Remember how far the job got."""
        self.seen = max(self.seen, fraction)

    def is_cancelled(self) -> bool:
        """Stop once past the fraction."""
        return self.seen > self.fraction


@pytest.mark.parametrize("at", [0.05, 0.2, 0.3, 0.4, 0.6, 0.75, 0.85, 0.95])
def test_a_cancel_at_any_step_leaves_the_earlier_file_and_nothing_else(scene, tmp_path, at):
    """A cancel anywhere (each pass, polygonising, the merge) ends in CancelledError; nothing changed."""
    from favour_plugin.core.errors import CancelledError

    out = tmp_path / "out"
    out.mkdir()
    (out / "t.gpkg").write_bytes(b"the user's earlier targets")
    with pytest.raises(CancelledError):
        find_targets(scene["fav"], str(out / "t.gpkg"), top_percent=10, merge_distance=150,
                     components=scene["components"], deposits=scene["deposits"], feedback=CancelAfter(at))
    assert sorted(p.name for p in out.iterdir()) == ["t.gpkg"]
    assert (out / "t.gpkg").read_bytes() == b"the user's earlier targets"
