"""The evaluation engine on small rasters: numbers, alignment, lineage, reproduction, cancel."""

import json
import os
import shutil
import subprocess

import numpy as np
import pytest
from osgeo import gdal

from favour_plugin.core.errors import (
    AlignmentWarning,
    NodataWarning,
)
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.tree import Tree
from favour_plugin.raster.blocks import iter_windows
from favour_plugin.raster.engine import evaluate_tree, evaluate_tree_file, node_file_name, reproduce
from tests.helpers import ORIGIN, leaf, read_raster, tree_doc, write_raster, write_tree, write_vector

RNG = np.random.default_rng(11)


class Recorder(Feedback):
    """Feedback that records progress and can cancel after a number of progress reports."""

    def __init__(self, cancel_after=None):
        super().__init__()
        self.progress = []
        self.cancel_after = cancel_after

    def set_progress(self, fraction):
        """Record the fraction."""
        self.progress.append(fraction)

    def is_cancelled(self):
        """Cancel once enough progress was reported."""
        return self.cancel_after is not None and len(self.progress) >= self.cancel_after


@pytest.fixture()
def layers(tmp_path):
    """Three aligned rasters and a vector layer on a 300 x 260 grid of 100 m cells."""
    shape = (260, 300)
    mag = RNG.normal(100, 30, shape).astype(np.float32)
    mag[:4, :4] = -9999
    litho = RNG.integers(1, 6, shape).astype(np.uint8)
    grav = RNG.uniform(-5, 5, shape).astype(np.float32)
    paths = {
        "mag": write_raster(tmp_path / "mag.tif", mag, nodata=-9999),
        "litho": write_raster(tmp_path / "litho.tif", litho, nodata=0),
        "grav": write_raster(tmp_path / "grav.tif", grav),
        "faults": write_vector(tmp_path / "faults.gpkg", [
            f"LINESTRING ({ORIGIN[0] + 5000} {ORIGIN[1]}, {ORIGIN[0] + 9000} {ORIGIN[1] - 26000})"],
            layer="faults"),
    }
    return tmp_path, paths, {"mag": mag, "litho": litho, "grav": grav}


def three_leaf_tree(paths, operator=None):
    """A root over a linear magnetic leaf, a categories lithology leaf and a gaussian gravity leaf."""
    return tree_doc([
        leaf("Mag", paths["mag"], {"type": "linear", "lower": 60, "upper": 160}),
        leaf("Host", paths["litho"], {"type": "categories", "scores": {"3": 0.9, "5": 0.6}, "default": 0.1}),
        leaf("Grav", paths["grav"], {"type": "gaussian", "centre": 1.0, "spread": 2.0}),
    ], operator or {"type": "gamma", "gamma": 0.75})


def expected_three_leaf(arrays, gamma=0.75):
    """The three-leaf tree computed directly with numpy from the same arrays."""
    mag = arrays["mag"].astype(np.float64)
    mag[mag == -9999] = np.nan
    mu1 = np.clip((mag - 60) / 100, 0, 1)
    litho = arrays["litho"].astype(np.float64)
    mu2 = np.where(litho == 3, 0.9, np.where(litho == 5, 0.6, 0.1))
    mu3 = np.exp(-((arrays["grav"].astype(np.float64) - 1.0) ** 2) / 8.0)
    product = mu1 * mu2 * mu3
    total = 1 - (1 - mu1) * (1 - mu2) * (1 - mu3)
    return (total ** gamma * product ** (1 - gamma)).astype(np.float32)


def test_evaluation_matches_direct_formula_and_writes_lineage(layers):
    """Cells equal the membership and gamma formulas applied directly; lineage and style exist."""
    folder, paths, arrays = layers
    tree = Tree.from_dict(three_leaf_tree(paths))
    out = folder / "out" / "fav.tif"
    result = evaluate_tree(tree, str(out))
    got = read_raster(out)
    np.testing.assert_allclose(got, expected_three_leaf(arrays), rtol=2e-7, atol=1e-7, equal_nan=True)
    assert np.isnan(got[:4, :4]).all() and np.isfinite(got[4:, 4:]).all()
    assert (folder / "out" / "fav.qml").exists()
    record = json.loads((folder / "out" / "fav.tif.lineage.json").read_text())
    assert record == result.lineage
    stats = record["statistics"]["Favourability"]
    assert stats["valid_cells"] == np.isfinite(got).sum()
    assert stats["mean"] == pytest.approx(np.nanmean(got), rel=1e-6)
    assert stats["max"] == pytest.approx(np.nanmax(got), rel=1e-6)


def test_lineage_checksums_match_sha256sum(layers):
    """Each input's SHA-256 in the lineage equals what coreutils' sha256sum prints."""
    folder, paths, _ = layers
    result = evaluate_tree(Tree.from_dict(three_leaf_tree(paths)), str(folder / "fav.tif"))
    for entry in result.lineage["inputs"]:
        (f,) = entry["files"]
        printed = subprocess.run(["sha256sum", f["path"]], capture_output=True, text=True, check=True)
        assert f["sha256"] == printed.stdout.split()[0]
        assert f["size"] == os.path.getsize(f["path"])


def test_geotiff_carries_lineage_summary_and_writer_options(layers):
    """The output is tiled 256 x 256, ZSTD level 1 with the float predictor by default, nodata declared."""
    folder, paths, _ = layers
    result = evaluate_tree(Tree.from_dict(three_leaf_tree(paths)), str(folder / "fav.tif"))
    ds = gdal.Open(str(folder / "fav.tif"))
    band = ds.GetRasterBand(1)
    assert band.GetBlockSize() == [256, 256]
    assert band.GetNoDataValue() == -9999.0
    assert ds.GetMetadata("IMAGE_STRUCTURE")["COMPRESSION"] == "ZSTD"
    assert ds.GetMetadata("IMAGE_STRUCTURE")["PREDICTOR"] == "3"
    assert ds.GetMetadataItem("FAVOUR_LINEAGE") == "fav.tif.lineage.json"
    assert "not a resource estimate" in ds.GetMetadataItem("FAVOUR_CAUTION")
    assert band.GetDescription() == "Favourability"
    assert result.lineage["compression"]["method"] == "zstd"
    assert "ZSTD_LEVEL=1" in result.lineage["compression"]["options"]


@pytest.mark.parametrize("compress, tag", [("none", None), ("zstd", "ZSTD"), ("deflate", "DEFLATE"),
                                           ("lzw", "LZW")])
def test_every_compression_round_trips_the_cells_exactly(layers, compress, tag):
    """Each compression gives back exactly the cells of an uncompressed run (GDAL reads them back)."""
    folder, paths, _ = layers
    tree = Tree.from_dict(three_leaf_tree(paths))
    plain = evaluate_tree(tree, str(folder / "plain.tif"), compress="none")
    packed = evaluate_tree(tree, str(folder / f"{compress}.tif"), compress=compress)
    np.testing.assert_array_equal(read_raster(packed.output), read_raster(plain.output))
    structure = gdal.Open(packed.output).GetMetadata("IMAGE_STRUCTURE")
    assert structure.get("COMPRESSION") == tag
    assert packed.lineage["compression"]["method"] == compress


def test_node_rasters_are_written_for_components(layers):
    """With a node folder, each component and each save_output node gets its own raster."""
    folder, paths, arrays = layers
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "or"},
         "children": [leaf("Mag", paths["mag"], {"type": "linear", "lower": 60, "upper": 160})]},
        {"name": "Trap", "component": "trap", "operator": {"type": "and"},
         "children": [dict(leaf("Host", paths["litho"],
                               {"type": "categories", "scores": {"3": 0.9}, "default": 0.2}),
                           save_output=True)]},
    ])
    result = evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"), str(folder / "nodes"))
    assert sorted(os.path.basename(p) for p in result.node_outputs.values()) == \
        ["source.tif", "trap-host.tif", "trap.tif"]
    trap = read_raster(folder / "nodes" / "trap.tif")
    np.testing.assert_allclose(trap, np.where(arrays["litho"] == 3, 0.9, 0.2), rtol=1e-7)
    assert node_file_name("Favourability > Source > Near the Big  fault!") == "source-near_the_big_fault.tif"


def test_results_do_not_depend_on_thread_count(layers):
    """One thread and two threads write identical cells (blocks are written in order)."""
    folder, paths, _ = layers
    tree = Tree.from_dict(three_leaf_tree(paths))
    evaluate_tree(tree, str(folder / "one.tif"), threads=1)
    evaluate_tree(tree, str(folder / "two.tif"), threads=2)
    np.testing.assert_array_equal(read_raster(folder / "one.tif"), read_raster(folder / "two.tif"))


def test_coarser_proxy_is_aligned_bilinearly_with_warning_and_lineage(layers):
    """A proxy at 200 m on a 100 m grid is resampled bilinearly, as gdalwarp -r bilinear does."""
    folder, paths, arrays = layers
    coarse = RNG.uniform(0, 100, (130, 150)).astype(np.float32)
    coarse_path = write_raster(folder / "coarse.tif", coarse, cell=200.0)
    doc = tree_doc([leaf("Mag", paths["mag"], {"type": "linear", "lower": 60, "upper": 160}),
                    leaf("Coarse", coarse_path, {"type": "linear", "lower": 0, "upper": 100})],
                   {"type": "or"}, grid={"reference": paths["mag"]})
    feedback = Feedback()
    doc["root"]["children"][0]["save_output"] = True
    doc["root"]["children"][1]["save_output"] = True
    result = evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"), str(folder / "nodes"), feedback)
    assert any(w["category"] == "AlignmentWarning" and "bilinear" in w["message"]
               for w in feedback.warnings)
    entry = next(e for e in result.lineage["inputs"] if e["node"].endswith("Coarse"))
    assert entry["alignment"]["resampled"] and entry["alignment"]["method"] == "bilinear"
    # Reference: GDAL's own gdalwarp command on the same file and grid.
    warped = folder / "warped.tif"
    subprocess.run(["gdalwarp", "-q", "-r", "bilinear", "-te", str(ORIGIN[0]), str(ORIGIN[1] - 26000),
                    str(ORIGIN[0] + 30000), str(ORIGIN[1]), "-ts", "300", "260", "-ot", "Float64",
                    coarse_path, str(warped)], check=True)
    expected = np.clip(read_raster(warped) / 100.0, 0, 1)
    np.testing.assert_allclose(read_raster(folder / "nodes" / "coarse.tif"), expected, atol=1e-6)
    assert AlignmentWarning.__name__ == "AlignmentWarning"


def test_proxy_in_another_crs_is_reprojected_and_recorded(layers):
    """A proxy in geographic coordinates is reprojected onto the grid, warned and recorded."""
    folder, paths, arrays = layers
    geographic = folder / "geo.tif"
    subprocess.run(["gdalwarp", "-q", "-t_srs", "EPSG:4326", "-r", "near", paths["grav"], str(geographic)],
                   check=True)
    doc = tree_doc([leaf("Grav", str(geographic), {"type": "linear", "lower": -5, "upper": 5})],
                   {"type": "and"}, grid={"reference": paths["grav"]})
    feedback = Feedback()
    result = evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"), feedback=feedback)
    (entry,) = result.lineage["inputs"]
    assert entry["alignment"]["resampled"]
    assert any("CRS" in r for r in entry["alignment"]["reasons"])
    assert any(w["category"] == "AlignmentWarning" for w in result.lineage["warnings"])
    got = read_raster(folder / "fav.tif")
    inner = got[20:-20, 20:-20]
    expected = np.clip((arrays["grav"][20:-20, 20:-20] + 5) / 10, 0, 1)
    # A round trip through another CRS smooths the field but keeps it strongly related.
    assert np.corrcoef(inner[np.isfinite(inner)], expected[np.isfinite(inner)])[0, 1] > 0.5


def test_partial_coverage_warns_and_leaves_outside_as_nodata(layers):
    """A proxy covering the west half leaves the east half nodata, with a NodataWarning."""
    folder, paths, _ = layers
    west = write_raster(folder / "west.tif", np.full((260, 150), 50, np.float32))
    doc = tree_doc([leaf("West", west, {"type": "linear", "lower": 0, "upper": 100})],
                   grid={"reference": paths["mag"]})
    feedback = Feedback()
    evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"), feedback=feedback)
    got = read_raster(folder / "fav.tif")
    assert np.allclose(got[:, :150], 0.5) and np.isnan(got[:, 150:]).all()
    assert any(w["category"] == NodataWarning.__name__ and "50.0%" in w["message"]
               for w in feedback.warnings)


def _segment_distance(px, py, ax, ay, bx, by):
    """Exact distance from points to a segment (the standard projection formula)."""
    abx, aby = bx - ax, by - ay
    t = np.clip(((px - ax) * abx + (py - ay) * aby) / (abx * abx + aby * aby), 0, 1)
    return np.hypot(px - (ax + t * abx), py - (ay + t * aby))


def test_distance_proxy_is_within_a_cell_of_exact_distance(layers):
    """Distance to a fault agrees with the exact point-to-segment distance to within one cell."""
    folder, paths, _ = layers
    doc = tree_doc([dict(leaf("Fault", paths["faults"], {"type": "linear", "lower": 0, "upper": 1e6},
                              layer="faults", measure="distance"))],
                   grid={"reference": paths["mag"]})
    evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"))
    distance = read_raster(folder / "fav.tif") * 1e6
    cols, rows = np.meshgrid(np.arange(300), np.arange(260))
    px, py = ORIGIN[0] + (cols + 0.5) * 100, ORIGIN[1] - (rows + 0.5) * 100
    exact = _segment_distance(px, py, ORIGIN[0] + 5000, ORIGIN[1], ORIGIN[0] + 9000, ORIGIN[1] - 26000)
    assert np.max(np.abs(distance - exact)) <= 100.0 + 1e-3


def test_vector_in_another_crs_is_reprojected(layers):
    """Features stored in EPSG:4326 are measured in the grid's CRS, with a warning."""
    folder, paths, _ = layers
    geographic = folder / "faults4326.gpkg"
    subprocess.run(["ogr2ogr", "-t_srs", "EPSG:4326", str(geographic), paths["faults"]], check=True)
    doc = tree_doc([leaf("Fault", str(geographic), {"type": "linear", "lower": 0, "upper": 1e6},
                         measure="distance")], grid={"reference": paths["mag"]})
    feedback = Feedback()
    evaluate_tree(Tree.from_dict(doc), str(folder / "fav.tif"), feedback=feedback)
    assert any("reprojected" in w["message"] for w in feedback.warnings)
    assert np.nanmin(read_raster(folder / "fav.tif")) == 0.0


def test_progress_rises_to_one(layers):
    """Progress is reported, never decreases, and ends at 1."""
    folder, paths, _ = layers
    feedback = Recorder()
    evaluate_tree(Tree.from_dict(three_leaf_tree(paths)), str(folder / "fav.tif"), feedback=feedback)
    assert feedback.progress[-1] == 1.0
    assert all(b >= a for a, b in zip(feedback.progress, feedback.progress[1:]))


def test_reproduce_says_identical_then_names_the_changed_input(layers):
    """reproduce: identical on a fresh output; after one cell of one input changes, it names it."""
    folder, paths, arrays = layers
    tree_file = write_tree(folder / "tree.json", three_leaf_tree(paths))
    out = str(folder / "fav.tif")
    evaluate_tree_file(tree_file, out)
    outcome = reproduce(out)
    assert outcome.identical and outcome.changed_inputs == []
    changed = arrays["grav"].copy()
    changed[100, 100] += 3.0
    write_raster(paths["grav"], changed)
    outcome = reproduce(out)
    assert not outcome.identical and outcome.differing_cells == 1
    assert [c["path"] for c in outcome.changed_inputs] == [paths["grav"]]
    assert outcome.changed_inputs[0]["node"] == "Favourability > Grav"
    assert "grav.tif" in outcome.summary()


def test_reproduce_rebuilds_a_missing_output_from_lineage_alone(layers):
    """With the output deleted and the tree file gone, the lineage alone rebuilds the same cells."""
    folder, paths, _ = layers
    tree_file = write_tree(folder / "tree.json", three_leaf_tree(paths))
    out = folder / "fav.tif"
    evaluate_tree_file(tree_file, str(out))
    first = read_raster(out)
    shutil.copy(str(out) + ".lineage.json", folder / "kept.json")
    os.unlink(out)
    os.unlink(tree_file)
    outcome = reproduce(str(out))
    assert outcome.rebuilt
    np.testing.assert_array_equal(read_raster(out), first)


def test_windows_cover_the_grid_exactly_once():
    """The block iterator tiles any grid without gaps or overlaps."""
    for width, height in [(1, 1), (255, 257), (1024, 256), (3001, 700)]:
        seen = np.zeros((height, width), np.int32)
        for w in iter_windows(width, height):
            seen[w.row_off:w.row_off + w.height, w.col_off:w.col_off + w.width] += 1
        assert (seen == 1).all()


def test_quick_look_coarsens_the_grid_and_records_it(layers):
    """max_cells enlarges cells by a whole factor; the lineage says from what and by how much."""
    folder, paths, _ = layers
    result = evaluate_tree(Tree.from_dict(three_leaf_tree(paths)), str(folder / "quick.tif"),
                           max_cells=20_000)
    grid = result.lineage["grid"]
    assert grid["width"] * grid["height"] <= 20_000
    # 300 x 260 = 78 000 cells need a factor of 2 (150 x 130 = 19 500 cells).
    assert grid["from"]["coarsened"]["factor"] == 2 and grid["cell_size"] == [200.0, 200.0]
    assert np.isfinite(read_raster(folder / "quick.tif")).any()


def test_input_problems_point_at_the_nodes_before_anything_runs(layers):
    """input_problems names a missing file, a missing band, a feature-less layer, a CRS to convert."""
    from favour_plugin.raster.checks import input_problems, sample_values

    folder, paths, arrays = layers
    empty = write_vector(folder / "empty.gpkg", [], layer="none")
    subprocess.run(["gdalwarp", "-q", "-t_srs", "EPSG:4326", paths["grav"], str(folder / "geo.tif")],
                   check=True)
    doc = tree_doc([leaf("Mag", paths["mag"], {"type": "linear", "lower": 60, "upper": 160}),
                    leaf("Gone", folder / "gone.tif", {"type": "linear", "lower": 0, "upper": 1}),
                    leaf("Band", paths["mag"], {"type": "linear", "lower": 0, "upper": 1}, band=4),
                    leaf("Empty", empty, {"type": "linear", "lower": 0, "upper": 1}, measure="distance"),
                    leaf("Geo", folder / "geo.tif", {"type": "linear", "lower": 0, "upper": 1})])
    found = {(p.node.split(" > ")[-1], p.level): p.message for p in input_problems(Tree.from_dict(doc))}
    assert "does not exist" in found[("Gone", "error")]
    assert "band 4 does not exist" in found[("Band", "error")]
    assert "has no features" in found[("Empty", "error")]
    assert "reprojected" in found[("Geo", "warning")]
    assert ("Mag", "error") not in found and ("Mag", "warning") not in found
    sample = sample_values(paths["mag"], max_cells=5000)
    assert 2000 < sample.size <= 5000 and not np.isin(-9999, sample)
    assert abs(np.median(sample) - np.median(arrays["mag"][arrays["mag"] != -9999])) < 5
