"""The demo district: a seeded generator, its planted model, and the demo tree evaluated.

The generator is deterministic, the layers hold the planted model the manifest
states, and the demo tree evaluates, ranks the known occurrences high and
reproduces cell for cell.

The layers are generated into a temporary folder through ``generate(folder, seed)``, so the
checkout's ``resources/demo/layers`` is never touched.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal, ogr

from favour_plugin.core.feedback import Feedback
from favour_plugin.core.lineage import lineage_path
from favour_plugin.core.tree import COMPONENTS, Tree
from favour_plugin.raster.engine import evaluate_tree_file, reproduce
from tests.helpers import read_raster, srs

gdal.UseExceptions()
ogr.UseExceptions()

DEMO = Path(__file__).resolve().parent.parent / "resources" / "demo"
TREE_FILE = DEMO / "district.favour.json"


def _load(name: str):
    """Import a script of resources/demo/ (not a package) as a module."""
    spec = importlib.util.spec_from_file_location(f"favour_demo_{name}", DEMO / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


generate = _load("generate")
SEED = generate.DEFAULT_SEED


def _rasters(folder: Path) -> dict[str, np.ndarray]:
    """Return every GeoTIFF's band 1 in ``folder`` in its stored data type."""
    out = {}
    for path in sorted(folder.glob("*.tif")):
        ds = gdal.Open(str(path))
        out[path.name] = ds.GetRasterBand(1).ReadAsArray()
    return out


def _features(folder: Path) -> dict[str, list]:
    """Return (WKT, attributes) of every feature of every layer of every GeoPackage in ``folder``."""
    out = {}
    for path in sorted(folder.glob("*.gpkg")):
        ds = ogr.Open(str(path))
        for i in range(ds.GetLayerCount()):
            layer = ds.GetLayerByIndex(i)
            out[f"{path.name}:{layer.GetName()}"] = [
                (feature.GetGeometryRef().ExportToWkt(), feature.items()) for feature in layer]
    return out


def _union(path: Path, layer_name: str) -> ogr.Geometry:
    """Return the features of a line layer as one multi-line (for exact GEOS distances)."""
    ds = ogr.Open(str(path))
    layer = ds.GetLayerByName(layer_name)
    lines = ogr.Geometry(ogr.wkbMultiLineString)
    for feature in layer:
        lines.AddGeometry(feature.GetGeometryRef())
    return lines


def _occurrences(folder: Path) -> list[dict]:
    """Return each occurrence's name and map coordinates."""
    ds = ogr.Open(str(folder / "occurrences.gpkg"))
    layer = ds.GetLayerByName("occurrences")
    return [{"name": f.GetField("name"), "x": f.GetGeometryRef().GetX(), "y": f.GetGeometryRef().GetY()}
            for f in layer]


def _point(x: float, y: float) -> ogr.Geometry:
    """Return an OGR point."""
    point = ogr.Geometry(ogr.wkbPoint)
    point.AddPoint_2D(float(x), float(y))
    return point


def _cell(ds: gdal.Dataset, x: float, y: float) -> tuple[int, int]:
    """Return the (row, column) of the cell of ``ds`` holding map point (x, y)."""
    x0, dx, _, y0, _, dy = ds.GetGeoTransform()
    return int((y - y0) // dy), int((x - x0) // dx)


def _random_points(count: int = 2000) -> np.ndarray:
    """Return points drawn uniformly over the district (a fixed seed of the test's own)."""
    grid = generate.XMIN, generate.YMIN, generate.XMIN + generate.WIDTH * generate.CELL, generate.YMAX
    rng = np.random.default_rng(7)
    return np.column_stack([rng.uniform(grid[0], grid[2], count), rng.uniform(grid[1], grid[3], count)])


@pytest.fixture(scope="module")
def district(tmp_path_factory) -> Path:
    """A demo folder: the tree file beside a freshly generated layers/ folder."""
    folder = tmp_path_factory.mktemp("demo")
    generate.generate(folder / "layers", SEED)
    shutil.copy(TREE_FILE, folder / TREE_FILE.name)
    return folder


@pytest.fixture(scope="module")
def manifest(district) -> dict:
    """The generated manifest."""
    return json.loads((district / "layers" / "manifest.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def demo_run(district) -> dict:
    """The demo script's run: evaluation outputs and the quicklook, written under the demo folder."""
    run_demo = _load("run_demo")
    return run_demo.run(district / TREE_FILE.name, district / "build", feedback=Feedback(), realisations=12)


def test_same_seed_gives_same_cells_and_features(district, tmp_path):
    """Generating twice from one seed gives identical cells, features and manifest."""
    again = tmp_path / "again"
    generate.generate(again, SEED)
    first, second = _rasters(district / "layers"), _rasters(again)
    assert first.keys() == second.keys() and len(first) >= 6
    for name in first:
        assert first[name].dtype == second[name].dtype
        assert np.array_equal(first[name], second[name]), name
    assert _features(district / "layers") == _features(again)
    assert (district / "layers" / "manifest.json").read_text() == (again / "manifest.json").read_text()


def test_other_seed_gives_other_district(district, tmp_path):
    """Another seed moves the cells and the occurrences."""
    other = tmp_path / "other"
    generate.generate(other, SEED + 1)
    first, second = _rasters(district / "layers"), _rasters(other)
    for name in ("magnetics.tif", "arsenic.tif", "litho.tif"):
        assert not np.array_equal(first[name], second[name]), name
    here = {(round(o["x"]), round(o["y"])) for o in _occurrences(district / "layers")}
    there = {(round(o["x"]), round(o["y"])) for o in _occurrences(other)}
    assert here != there


def test_manifest_describes_every_layer(district, manifest):
    """The manifest's seed, grid, layers, checksums and planted model match the files."""
    layers = district / "layers"
    assert manifest["seed"] == SEED
    assert generate.is_up_to_date(layers, SEED) and not generate.is_up_to_date(layers, SEED + 1)
    grid = manifest["grid"]
    assert grid["width"] * grid["height"] <= 1_100_000
    kinds = {layer["file"]: layer for layer in manifest["layers"]}
    assert {"magnetics.tif", "gravity.tif", "litho.tif", "radiometric_k_th.tif", "cover_depth.tif",
            "arsenic.tif", "faults.gpkg", "fold_hinges.gpkg", "intrusions.gpkg", "late_joints.gpkg",
            "occurrences.gpkg"} <= kinds.keys()
    for name, entry in kinds.items():
        path = layers / name
        assert path.is_file(), name
        assert entry["role"] and entry["description"]
        if entry["kind"] == "raster":
            ds = gdal.Open(str(path))
            band = ds.GetRasterBand(1)
            values = band.ReadAsArray()
            assert list(values.shape) == entry["shape"], name
            assert ds.GetGeoTransform()[1] == entry["cell_size"], name
            assert band.GetNoDataValue() == entry["nodata"], name
            assert gdal.GetDataTypeName(band.DataType) == entry["data_type"], name
            assert srs().IsSame(ds.GetSpatialRef()), name
            assert ds.GetMetadata("IMAGE_STRUCTURE").get("COMPRESSION") == "DEFLATE", name
            digest = hashlib.sha256(f"{values.dtype.str}{values.shape}".encode())
            digest.update(values.tobytes())
            assert digest.hexdigest() == entry["cells_sha256"], name
            if entry["units"] != "class code":
                assert band.GetUnitType() == entry["units"], name
        else:
            ds = ogr.Open(str(path))
            for layer_name, count in entry["layers"].items():
                layer = ds.GetLayerByName(layer_name)
                assert layer is not None and layer.GetFeatureCount() == count, f"{name}:{layer_name}"
                assert srs().IsSame(layer.GetSpatialRef()), name
    controls = {c["name"]: c for c in manifest["planted"]["controls"]}
    assert controls["second-order faults"]["distance_m"] == 500
    assert controls["host rocks"]["codes"] == [3, 4]
    assert [n["layer"] for n in manifest["planted"]["noise"]] == ["late_joints.gpkg:late_joints"]
    occurrences = manifest["planted"]["occurrences"]
    names = sorted(o["name"] for o in _occurrences(layers))
    assert occurrences["count"] == len(names) == 15
    assert sorted(occurrences["on_pattern"] + occurrences["off_pattern"]) == names
    assert len(occurrences["off_pattern"]) >= 2


def test_occurrences_sit_on_the_planted_controls(district, manifest):
    """On-pattern occurrences meet every planted control, measured exactly with GEOS, not the grid.

    Occurrences' median distance to second-order faults is far below the map's
    (a tenth here; a quarter is asserted), while to the planted-noise joints it
    is about the map's.
    """
    layers = district / "layers"
    controls = {c["name"]: c for c in manifest["planted"]["controls"]}
    on = set(manifest["planted"]["occurrences"]["on_pattern"])
    occurrences = _occurrences(layers)
    splays = _union(layers / "faults.gpkg", "second_order")
    hinges = _union(layers / "fold_hinges.gpkg", "fold_hinges")
    litho_ds, cover_ds = gdal.Open(str(layers / "litho.tif")), gdal.Open(str(layers / "cover_depth.tif"))
    litho, cover = litho_ds.GetRasterBand(1).ReadAsArray(), cover_ds.GetRasterBand(1).ReadAsArray()
    for occ in occurrences:
        if occ["name"] not in on:
            continue
        point = _point(occ["x"], occ["y"])
        row, col = _cell(litho_ds, occ["x"], occ["y"])
        assert splays.Distance(point) <= controls["second-order faults"]["distance_m"], occ["name"]
        assert hinges.Distance(point) <= controls["fold hinges"]["distance_m"], occ["name"]
        assert litho[row, col] in controls["host rocks"]["codes"], occ["name"]
        assert cover[row, col] <= controls["thin cover"]["threshold_m"], occ["name"]
    background = _random_points()
    joints = _union(layers / "late_joints.gpkg", "late_joints")
    for lines, low, high in ((splays, 0.0, 0.25), (joints, 0.5, 2.0)):
        at_occurrences = np.median([lines.Distance(_point(o["x"], o["y"])) for o in occurrences])
        on_map = np.median([lines.Distance(_point(x, y)) for x, y in background])
        assert low <= at_occurrences / on_map <= high


def test_demo_tree_is_a_full_mineral_system_model():
    """The demo tree loads, has the four components, varied memberships and a rationale everywhere."""
    tree = Tree.load(TREE_FILE)
    nodes = dict(tree.walk())
    assert sorted(n.component for n in nodes.values() if n.component) == sorted(COMPONENTS)
    assert all(node.rationale.strip() for node in nodes.values())
    leaves = [node for node in nodes.values() if node.is_leaf]
    assert len(leaves) >= 8
    assert {leaf.membership["type"] for leaf in leaves} >= {"linear", "logistic", "gaussian",
                                                            "trapezoid", "piecewise", "categories"}
    operators = [node.operator for node in nodes.values() if node.operator]
    assert tree.root.operator["type"] == "gamma"
    assert any(op["type"] == "weighted_mean" for op in operators)
    assert any(op.get("nodata") == "ignore" for op in operators)
    assert any(leaf.proxy.measure == "distance" and leaf.proxy.layer == "faults"
               and leaf.proxy.path == "layers/faults.gpkg" for leaf in leaves)
    assert all(not Path(leaf.proxy.path).is_absolute() for leaf in leaves)
    assert "late_joints" not in json.dumps(tree.to_dict())  # planted noise stays out of the model


def test_demo_evaluates_to_favourability_in_unit_interval(district, demo_run):
    """The demo writes favourability in [0, 1] on every cell, four component rasters and a PNG."""
    values = read_raster(demo_run["favourability"])
    assert values.shape == (generate.HEIGHT, generate.WIDTH)
    assert np.isfinite(values).all()  # every proxy covers the grid or is under an 'ignore' node
    assert values.min() >= 0.0 and values.max() <= 1.0
    assert values.std() > 0.05
    components = [p for p in demo_run["nodes"] if Tree.load(TREE_FILE).find(p).component]
    assert len(components) == 4
    for path in demo_run["nodes"].values():
        mu = read_raster(path)
        assert np.nanmin(mu) >= 0.0 and np.nanmax(mu) <= 1.0, path
    assert Path(demo_run["lineage"]) == lineage_path(demo_run["favourability"])
    png = Path(demo_run["png"])
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    ds = gdal.Open(str(png))
    assert ds.RasterXSize > 1000 and ds.RasterYSize > 600


def test_occurrences_rank_above_the_background(district, demo_run):
    """The model ranks known occurrences above the map's median (common practice, no source)."""
    ds = gdal.Open(demo_run["favourability"])
    values = read_raster(demo_run["favourability"])
    at = np.array([values[_cell(ds, o["x"], o["y"])] for o in _occurrences(district / "layers")])
    median = np.median(values)
    assert np.median(at) > median
    assert np.mean(at > median) >= 2 / 3
    # Mean percentile rank of the occurrences among all cells: 0.5 would be no skill.
    ranks = np.searchsorted(np.sort(values.ravel()), at) / values.size
    assert ranks.mean() > 0.75


def test_reproduce_says_identical_then_names_the_changed_input(district, tmp_path):
    """reproduce finds every cell identical, then names the one proxy whose cell was rewritten."""
    folder = tmp_path / "copy"
    shutil.copytree(district / "layers", folder / "layers")
    shutil.copy(district / TREE_FILE.name, folder / TREE_FILE.name)
    output = str(folder / "out" / "favourability.tif")
    evaluate_tree_file(str(folder / TREE_FILE.name), output)

    first = reproduce(output)
    assert first.identical and not first.changed_inputs
    assert first.summary().startswith("identical")

    # Rewrite one magnetics cell at an occurrence so its μ of magnetite destruction
    # (1 at -80 nT, 0 at +20 nT) moves by at least a half.
    magnetics = folder / "layers" / "magnetics.tif"
    occ = _occurrences(folder / "layers")[0]
    ds = gdal.Open(str(magnetics), gdal.GA_Update)
    row, col = _cell(ds, occ["x"], occ["y"])
    band = ds.GetRasterBand(1)
    old = float(band.ReadAsArray(col, row, 1, 1)[0, 0])
    band.WriteArray(np.array([[100.0 if old < -30.0 else -200.0]], dtype=np.float32), col, row)
    band = None
    ds = None

    second = reproduce(output)
    assert not second.identical and second.differing_cells == 1
    assert [c["path"] for c in second.changed_inputs] == [str(magnetics)]
    assert second.changed_inputs[0]["node"].endswith("Magnetite destruction")
    assert "magnetics.tif" in second.summary() and "has changed" in second.summary()


def test_demo_workshop_flags_the_planted_dispute_and_writes_the_uncertainty(demo_run):
    """The demo workshop flags its planted dispute and writes the Monte Carlo rasters and the chart.

    Mean and percentiles lie in [0, 1] with P10 ≤ P50 ≤ P90 (properties that must hold).
    """
    shop = demo_run["workshop"]
    assert [f.split(" (")[0] for f in shop["flagged"]] == ["Favourability > Pathway > Fault mesh"]
    rasters = {name: read_raster(path) for name, path in shop["uncertainty"].items()}
    valid = ~np.isnan(rasters["mean"])
    assert valid.mean() > 0.5
    for name in ("mean", "p10", "p50", "p90", "robustness"):
        assert 0.0 <= np.nanmin(rasters[name]) and np.nanmax(rasters[name]) <= 1.0
    assert np.all(rasters["p10"][valid] <= rasters["p50"][valid] + 1e-7)
    assert np.all(rasters["p50"][valid] <= rasters["p90"][valid] + 1e-7)
    assert np.nanmin(rasters["std"]) >= 0 and np.nanmax(rasters["std"]) > 0
    assert Path(shop["sensitivity"]["chart"]).read_bytes()[:4] == b"\x89PNG"
    assert any(row["auc"] is not None for row in shop["rows"])


def test_demo_validates_its_map_and_hands_over_targets_and_a_report(demo_run):
    """The demo validates its map, writes ranked targets and a report with every figure.

    Properties that must hold: the AUC in (0.5, 1] and inside its interval,
    ranks 1, 2, … in order, occurrences inside the targets, figures embedded.
    """
    validated = json.loads(Path(demo_run["validation"]).read_text(encoding="utf-8"))
    low, high = validated["auc_ci"]
    assert 0.5 < validated["auc"] <= 1 and low <= validated["auc"] <= high
    assert validated["n_deposits"] >= 10
    done = demo_run["targets_report"]
    assert done["rows"] and [row["rank"] for row in done["rows"]] == list(range(1, len(done["rows"]) + 1))
    assert sum(row.get("occurrences", 0) or 0 for row in done["rows"]) >= 1
    html = Path(done["report"]).read_text(encoding="utf-8")
    assert html.count('src="data:image/png;base64,') >= 8 and "not a resource estimate" in html
