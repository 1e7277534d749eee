"""Why here: the probe's values at single cells against the evaluation's own rasters.

Outside references: the rasters :func:`favour_plugin.raster.engine.evaluate_tree`
writes with a node folder (the one evaluation path; the probe must give the
same μ for the root, every component and a saved leaf at every cell asked
about, nodata included), the arrays the test wrote (a leaf's raw value on the
grid), the exact point-to-segment distance (a distance leaf's raw value, to
within a cell) and the linear membership's documented formula in
``core/membership.py`` (μ = clip((x − lower) / (upper − lower), 0, 1),
Bonham-Carter 1994) computed here by hand from the raw value.
"""

from __future__ import annotations

import copy
import math
import os
from pathlib import Path

import numpy as np
import pytest
from osgeo import osr

from favour_plugin.core.errors import CancelledError, FavourError, GridError
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.tree import Tree
from favour_plugin.raster.engine import evaluate_tree
from favour_plugin.raster.probe import WORK_PREFIX, Probe, locate
from tests.helpers import ORIGIN, TEST_CRS, leaf, read_raster, srs, tree_doc, write_raster, write_vector

SHAPE = (50, 60)  # rows, columns of 100 m cells
CELL = 100.0
ROOT = "Favourability"
SOURCE, PATHWAY, TRAP = (f"{ROOT} > {name}" for name in ("Source", "Pathway", "Trap"))
MAG, FAULTS = f"{SOURCE} > Mag", f"{PATHWAY} > Near faults"
FAULT = (ORIGIN[0] + 1500, ORIGIN[1], ORIGIN[0] + 2500, ORIGIN[1] - 5000)  # x0, y0, x1, y1


def _segment_distance(px, py, x0, y0, x1, y1):
    """Exact distance from points to a segment (plane geometry)."""
    dx, dy = x1 - x0, y1 - y0
    t = np.clip(((px - x0) * dx + (py - y0) * dy) / (dx * dx + dy * dy), 0, 1)
    return np.hypot(px - (x0 + t * dx), py - (y0 + t * dy))


@pytest.fixture(scope="module")
def model(tmp_path_factory):
    """A four-leaf tree on a 60 x 50 grid: nodata, a coarser raster (bilinear) and a distance leaf."""
    folder = tmp_path_factory.mktemp("probe")
    rng = np.random.default_rng(31)
    mag = rng.normal(100, 30, SHAPE).astype(np.float32)
    mag[:3, :3] = -9999
    host = rng.integers(1, 5, SHAPE).astype(np.uint8)
    coarse = rng.uniform(0, 10, (SHAPE[0] // 2, SHAPE[1] // 2)).astype(np.float32)
    paths = {"mag": write_raster(folder / "mag.tif", mag, nodata=-9999),
             "host": write_raster(folder / "host.tif", host, nodata=0),
             "coarse": write_raster(folder / "coarse.tif", coarse, cell=2 * CELL),
             "faults": write_vector(folder / "faults.gpkg",
                                    [f"LINESTRING ({FAULT[0]} {FAULT[1]}, {FAULT[2]} {FAULT[3]})"],
                                    layer="faults")}
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "weighted_mean"}, "children": [
            {**leaf("Mag", paths["mag"], {"type": "linear", "lower": 60, "upper": 160}), "weight": 2},
            leaf("Coarse", paths["coarse"], {"type": "gaussian", "centre": 5, "spread": 2})]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "or"}, "children": [
            {**leaf("Near faults", paths["faults"], {"type": "linear", "lower": 2000, "upper": 0},
                    layer="faults", measure="distance"), "save_output": True}]},
        {"name": "Trap", "component": "trap", "operator": {"type": "and"}, "children": [
            leaf("Host", paths["host"], {"type": "categories", "scores": {"1": 0.2, "2": 0.9, "3": 0.5},
                                         "default": 0.1})]},
    ], {"type": "gamma", "gamma": 0.7}, grid={"reference": paths["mag"]})
    tree = Tree.from_dict(doc)
    result = evaluate_tree(copy.deepcopy(tree), str(folder / "fav.tif"), str(folder / "nodes"))
    rasters = {ROOT: read_raster(result.output),
               **{path: read_raster(file) for path, file in result.node_outputs.items()}}
    return {"folder": folder, "tree": tree, "rasters": rasters, "mag": mag}


def centre(row: int, col: int) -> tuple[float, float]:
    """Return the centre of a cell of the test grid in the test CRS."""
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


CELLS = [(0, 0), (2, 2), (3, 3), (10, 17), (25, 30), (49, 59), (41, 5), (7, 52)]


def test_probe_agrees_with_the_evaluations_rasters_at_every_cell_asked(model, tmp_path):
    """Root, components and a saved leaf equal the cells evaluate_tree wrote, nodata included."""
    assert set(model["rasters"]) == {ROOT, SOURCE, PATHWAY, TRAP, FAULTS}
    with Probe(str(tmp_path)) as probe:
        for row, col in CELLS:
            answer = probe.value_at(model["tree"], *centre(row, col), srs().ExportToWkt())
            assert (answer.row, answer.col) == (row, col)
            for path, raster in model["rasters"].items():
                expected = raster[row, col]
                got = answer.node(path).mu
                if np.isnan(expected):
                    assert got is None, (path, row, col)
                else:
                    # The rasters hold float32; the probe gives the float64 they were rounded from.
                    assert np.float32(got) == expected, (path, row, col, got, expected)
        assert probe.preparations == 1
    # A cell on the mag's nodata: Mag and the nodes that propagate it say "no value".
    with Probe(str(tmp_path)) as probe:
        answer = probe.value_at(model["tree"], *centre(1, 1), "")
        assert answer.node(MAG).value is None and answer.node(MAG).mu is None
        assert answer.node(SOURCE).mu is None and answer.root.mu is None
        assert answer.node(TRAP).mu is not None


def test_leaf_values_are_the_proxies_on_the_grid_and_membership_by_hand(model, tmp_path):
    """Mag's raw value is the array written; its μ and the distance leaf's follow the linear formula."""
    with Probe(str(tmp_path)) as probe:
        for row, col in [(10, 17), (25, 30), (49, 59)]:
            answer = probe.value_at(model["tree"], *centre(row, col))
            mag = answer.node(MAG)
            assert mag.value == float(model["mag"][row, col])
            assert mag.mu == pytest.approx(min(1.0, max(0.0, (mag.value - 60) / (160 - 60))), abs=1e-12)
            faults = answer.node(FAULTS)
            exact = _segment_distance(*centre(row, col), *FAULT)
            assert abs(faults.value - exact) <= CELL + 1e-3
            assert faults.units == "m" and faults.measure == "distance"
            assert faults.mu == pytest.approx(min(1.0, max(0.0, (faults.value - 2000) / (0 - 2000))),
                                              abs=1e-12)
            assert answer.node(SOURCE).operator == {"type": "weighted_mean"} and mag.weight == 2.0


def test_the_answer_lists_every_node_in_tree_order_with_kinds(model, tmp_path):
    """Nodes come root first, each before the nodes under it, with their kind and depth."""
    with Probe(str(tmp_path)) as probe:
        answer = probe.value_at(model["tree"], *centre(20, 20))
    assert [n.path for n in answer.nodes] == [path for path, _ in model["tree"].walk()]
    kinds = {n.path: (n.kind, n.depth) for n in answer.nodes}
    assert kinds[ROOT] == ("root", 0) and kinds[SOURCE] == ("component", 1) and kinds[MAG] == ("leaf", 2)
    assert (answer.x, answer.y) == centre(20, 20)


def test_prepared_inputs_are_reused_until_what_preparing_reads_changes(model, tmp_path):
    """A weight change reuses the prepared inputs and follows the new plan; a new proxy prepares again."""
    tree = copy.deepcopy(model["tree"])
    with Probe(str(tmp_path)) as probe:
        first = probe.value_at(tree, *centre(12, 40))
        work = probe.workdir
        assert first.prepared and Path(work).parent == tmp_path and Path(work).name.startswith(WORK_PREFIX)
        assert not probe.value_at(tree, *centre(30, 10)).prepared
        tree.find(MAG).weight = 5.0
        again = probe.value_at(tree, *centre(12, 40))
        assert not again.prepared and probe.preparations == 1
        mag, coarse = again.node(MAG).mu, again.node(f"{SOURCE} > Coarse").mu
        assert again.node(SOURCE).mu == pytest.approx((5 * mag + coarse) / 6, abs=1e-12)
        tree.find(FAULTS).proxy.margin = 500.0
        assert probe.value_at(tree, *centre(12, 40)).prepared and probe.preparations == 2
        assert not os.path.exists(work) and os.path.isdir(probe.workdir)
        work = probe.workdir
    assert not os.path.exists(work)


def test_a_point_in_another_crs_finds_the_same_cell(model, tmp_path):
    """A point given in geographic coordinates lands on the cell whose centre it is."""
    geographic = osr.SpatialReference()
    geographic.ImportFromEPSG(4326)
    geographic.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    lon, lat, _ = osr.CoordinateTransformation(srs(TEST_CRS), geographic).TransformPoint(*centre(33, 44))
    with Probe(str(tmp_path)) as probe:
        answer = probe.value_at(model["tree"], lon, lat, geographic.ExportToWkt())
    assert (answer.row, answer.col) == (33, 44)
    assert np.float32(answer.root.mu) == model["rasters"][ROOT][33, 44]


def test_a_point_outside_the_grid_is_named_and_prepares_nothing(model, tmp_path):
    """Outside the grid: a GridError giving the point and the grid's extent; no work folder made."""
    probe = Probe(str(tmp_path))
    x, y = ORIGIN[0] - 50.0, ORIGIN[1] - 50.0
    with pytest.raises(GridError, match=r"lies outside the model's grid, which covers x 500000 to 506000"):
        probe.value_at(model["tree"], x, y)
    assert probe.workdir is None and not list(tmp_path.iterdir())
    with pytest.raises(FavourError, match="not a pair of finite numbers"):
        probe.value_at(model["tree"], math.nan, y)
    grid = probe_grid(model)
    assert locate(grid, *centre(0, 59), "")[:2] == (0, 59)


def probe_grid(model):
    """The model's grid, as the probe builds it."""
    from favour_plugin.raster.engine import reference_grid

    return reference_grid(model["tree"])[0]


def test_a_cancel_while_preparing_leaves_no_work_folder(model, tmp_path):
    """Cancelled during preparation: CancelledError, the work folder removed, nothing kept."""

    class Cancelling(Feedback):
        def is_cancelled(self):
            return True

    probe = Probe(str(tmp_path))
    with pytest.raises(CancelledError):
        probe.value_at(model["tree"], *centre(5, 5), feedback=Cancelling())
    assert probe.workdir is None and not list(tmp_path.iterdir())
    assert probe.value_at(model["tree"], *centre(5, 5)).prepared
    probe.close()
    assert not list(tmp_path.iterdir())
