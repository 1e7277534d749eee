"""The command line: outputs, exit status, and clear refusals that leave no partial output."""

import json
import os
import re
import subprocess
import sys

import numpy as np
import pytest

from tests.helpers import ORIGIN, leaf, read_raster, tree_doc, write_raster, write_tree, write_vector

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def run_cli(*args):
    """Run ``python -m favour_plugin`` in a fresh interpreter, as a user would."""
    return subprocess.run([sys.executable, "-m", "favour_plugin", *map(str, args)], cwd=ROOT,
                          capture_output=True, text=True, timeout=300)


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


def _set(doc, path, value):
    """Set ``doc[path...] = value`` (deleting when value is ...)."""
    target = doc
    for key in path[:-1]:
        target = target[key]
    if value is ...:
        del target[path[-1]]
    else:
        target[path[-1]] = value


MAG = ("root", "children", 0, "children", 0)
TRAP = ("root", "children", 1)

BAD_TREES = {
    "unknown membership": ((*MAG, "membership", "type"), "fuzzy",
                           r"Favourability > Source > Mag: membership.type: must be one of"),
    "unknown operator": ((*TRAP, "operator", "type"), "xor",
                         r"Favourability > Trap: operator.type: must be one of"),
    "missing parameter": ((*MAG, "membership", "upper"), ...,
                          r"Favourability > Source > Mag: membership: 'upper' is required"),
    "non-numeric parameter": ((*MAG, "membership", "lower"), "low",
                              r"Favourability > Source > Mag: membership.lower: must be of type number"),
    "gamma outside": ((*TRAP, "operator", "gamma"), 1.5,
                      r"Favourability > Trap: operator.gamma: must be at most 1, got 1.5"),
    "lower equals upper": ((*MAG, "membership", "upper"), 20,
                           r"Favourability > Source > Mag: membership 'linear': "
                           r"'lower' and 'upper' are both 20"),
    "unordered trapezoid": ((*TRAP, "children", 0, "membership", "points"), [0, 60, 30, 100],
                            r"Favourability > Trap > Mag2: membership 'trapezoid': points must be ordered"),
    "missing proxy file": ((*MAG, "proxy", "path"), "gone.tif",
                           r"Favourability > Source > Mag: the layer file .*gone.tif does not exist"),
    "future version": (("version",), 3, r"tree file version 3 is newer than this Favour reads"),
}


@pytest.mark.parametrize("case", sorted(BAD_TREES))
def test_bad_tree_exits_non_zero_names_the_node_and_writes_nothing(base, case):
    """Each bad tree: exit status 2, a message naming the node and problem, no output at all."""
    folder, _, doc = base
    path, value, message = BAD_TREES[case]
    _set(doc, path, value)
    tree = write_tree(folder / "tree.json", doc)
    out = folder / "out"
    result = run_cli("evaluate", tree, "-o", out / "fav.tif", "--nodes", out / "nodes")
    assert result.returncode == 2
    assert re.search(message, result.stderr), result.stderr
    assert "Traceback" not in result.stderr
    assert not (out / "fav.tif").exists()
    leftovers = [p for p in (os.listdir(out) if out.exists() else []) if p not in ("nodes",)]
    assert leftovers == []


def test_invalid_json_exits_non_zero(base):
    """Broken JSON: exit 2, the line and column named, nothing written."""
    folder, _, _ = base
    tree = folder / "tree.json"
    tree.write_text('{"format": "favour-tree", "version": 1,, "root": {}}')
    result = run_cli("evaluate", tree, "-o", folder / "fav.tif")
    assert result.returncode == 2 and "not valid JSON" in result.stderr and "line 1" in result.stderr
    assert not (folder / "fav.tif").exists()


def test_vector_without_features_and_raster_without_crs_are_refused(base):
    """A vector proxy with no features and a raster with no CRS each exit 2, named."""
    folder, _, doc = base
    write_vector(folder / "none.gpkg", [], layer="faults")
    write_raster(folder / "nocrs.tif", np.ones((10, 10), np.float32), crs=None)
    for proxy, message in [({"path": "none.gpkg", "measure": "distance"}, "has no features"),
                           ({"path": "nocrs.tif"}, "has no CRS")]:
        doc["root"]["children"][0]["children"][0]["proxy"] = proxy
        tree = write_tree(folder / "tree.json", doc)
        result = run_cli("evaluate", tree, "-o", folder / "fav.tif")
        assert result.returncode == 2 and message in result.stderr and "Source > Mag" in result.stderr
        assert not (folder / "fav.tif").exists()


def test_unwritable_output_folder_exits_non_zero(base):
    """An output under a path where a file blocks the folder: exit 2 and the folder named."""
    folder, _, doc = base
    tree = write_tree(folder / "tree.json", doc)
    (folder / "blocked").write_text("not a folder")
    result = run_cli("evaluate", tree, "-o", folder / "blocked" / "fav.tif")
    assert result.returncode == 2 and "cannot write to the folder" in result.stderr


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
