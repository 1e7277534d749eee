"""The command line: outputs, exit status, and clear refusals that leave no partial output."""

import json
import os

import numpy as np
import pytest

from tests.helpers import ORIGIN, leaf, read_raster, run_cli, tree_doc, write_raster, write_tree

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@pytest.fixture()
def base(tmp_path):
    """A folder with one good raster and a good tree document over it."""
    rng = np.random.default_rng(5)
    path = write_raster(tmp_path / "mag.tif", rng.normal(50, 20, (120, 150)).astype(np.float32))
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "or"},
         "children": [leaf("Mag", "mag.tif", {"type": "linear", "lower": 20, "upper": 90})]},
        {"name": "Trap", "component": "trap", "operator": {"type": "gamma", "gamma": 0.5},
         "children": [leaf("Mag2", "mag.tif", {"type": "trapezoid", "points": [0, 30, 60, 100]})]},
    ], {"type": "gamma", "gamma": 0.9})
    return tmp_path, path, doc


def test_evaluate_writes_outputs_and_says_where(base):
    """evaluate writes favourability, component rasters and lineage, and prints their paths."""
    folder, _, doc = base
    tree = write_tree(folder / "tree.json", doc)
    result = run_cli("evaluate", tree, "-o", folder / "out" / "fav.tif", "--nodes", folder / "out" / "c")
    assert result.returncode == 0, result.stderr
    for name in ("fav.tif", "fav.tif.lineage.json", "fav.qml", "c/source.tif", "c/trap.tif"):
        assert (folder / "out" / name).exists(), name
    for name in ("fav.tif", "fav.tif.lineage.json", "c/source.tif", "c/trap.tif"):
        assert str(folder / "out" / name) in result.stdout, name
    assert "not a resource estimate" in result.stderr
    assert np.nanmax(read_raster(folder / "out" / "fav.tif")) <= 1.0


def test_reproduce_exit_status_follows_the_finding(base):
    """reproduce exits 0 when identical and 1 when an input changed, naming it."""
    folder, path, doc = base
    tree = write_tree(folder / "tree.json", doc)
    assert run_cli("evaluate", tree, "-o", folder / "fav.tif", "-q").returncode == 0
    same = run_cli("reproduce", folder / "fav.tif", "-q")
    assert same.returncode == 0 and "identical" in same.stdout
    write_raster(path, np.full((120, 150), 55.0, np.float32))
    changed = run_cli("reproduce", folder / "fav.tif", "-q")
    assert changed.returncode == 1
    assert "mag.tif" in changed.stdout and "has changed" in changed.stdout


def test_misaligned_proxy_is_warned_on_the_console(base):
    """A proxy at another cell size is aligned; the console says so and the lineage records it."""
    folder, _, doc = base
    write_raster(folder / "coarse.tif", np.ones((60, 75), np.float32) * 50, cell=200.0, origin=ORIGIN)
    doc["root"]["children"][1]["children"][0]["proxy"]["path"] = "coarse.tif"
    doc["grid"] = {"reference": "mag.tif"}
    tree = write_tree(folder / "tree.json", doc)
    result = run_cli("evaluate", tree, "-o", folder / "fav.tif", "-q")
    assert result.returncode == 0
    assert "warning:" in result.stderr and "bilinear" in result.stderr
    record = json.loads((folder / "fav.tif.lineage.json").read_text())
    assert record["inputs"][1]["alignment"]["resampled"] is True
