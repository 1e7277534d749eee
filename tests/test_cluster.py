"""The same tree on a Dask cluster: a LocalCluster of two worker processes gives the same cells.

Outside reference: the single-machine run of the same tree (the engine's own
threads), cell for cell, and Dask's distributed scheduler running the blocks.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from favour_plugin.raster.engine import evaluate_tree
from tests.helpers import read_raster, run_cli, small_workshop

pytest.importorskip("distributed", reason="needs Debian's python3-distributed")
pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cluster():
    """A LocalCluster of two worker processes for the module."""
    from favour_plugin.raster.cluster import connect

    connection = connect("local", workers=2)
    yield connection
    connection.close()


def test_local_cluster_gives_the_cells_of_the_single_machine_run(tmp_path, cluster):
    """Favourability and component rasters on a LocalCluster equal the threaded run, cell for cell."""
    tree, _, _ = small_workshop(tmp_path)
    alone = evaluate_tree(tree, str(tmp_path / "alone.tif"), str(tmp_path / "alone"))
    spread = evaluate_tree(tree, str(tmp_path / "spread.tif"), str(tmp_path / "spread"), cluster=cluster)
    np.testing.assert_array_equal(read_raster(spread.output), read_raster(alone.output))
    for node, path in alone.node_outputs.items():
        np.testing.assert_array_equal(read_raster(spread.node_outputs[node]), read_raster(path))
    assert spread.lineage["ran_on"]["kind"] == "Dask LocalCluster on this machine"
    assert spread.lineage["ran_on"]["workers"] == 2
    ours, theirs = (r.lineage["statistics"][alone.lineage["root"]] for r in (spread, alone))
    assert ours["valid_cells"] == theirs["valid_cells"] and ours["mean"] == pytest.approx(theirs["mean"])


def test_cancel_on_a_cluster_leaves_nothing(tmp_path, cluster):
    """A cancel while the bands run raises, and no file is left beside the outputs."""
    from favour_plugin.core.errors import CancelledError
    from favour_plugin.core.feedback import Feedback

    class Stop(Feedback):
        def is_cancelled(self):
            return True

    tree, _, _ = small_workshop(tmp_path)
    (tmp_path / "out").mkdir()
    with pytest.raises(CancelledError):
        evaluate_tree(tree, str(tmp_path / "out" / "fav.tif"), feedback=Stop(), cluster=cluster)
    assert list((tmp_path / "out").iterdir()) == []


def test_cluster_from_the_command_line(tmp_path):
    """`evaluate --cluster local` writes the same cells as a run without it; the lineage says where."""
    small_workshop(tmp_path)
    plain = run_cli("evaluate", tmp_path / "tree.json", "-o", tmp_path / "plain.tif", "-q")
    spread = run_cli("evaluate", tmp_path / "tree.json", "-o", tmp_path / "spread.tif", "-q", "--cluster",
                     "local")
    assert plain.returncode == 0 and spread.returncode == 0, spread.stderr
    np.testing.assert_array_equal(read_raster(tmp_path / "spread.tif"), read_raster(tmp_path / "plain.tif"))
    record = json.loads((tmp_path / "spread.tif.lineage.json").read_text())
    assert record["ran_on"]["address"] == "local"


def test_monte_carlo_on_a_cluster_gives_the_cells_of_the_threaded_run(tmp_path, cluster):
    """Every Monte Carlo raster (pilot included) on a LocalCluster equals the threaded run's."""
    from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo

    tree, _, sheets = small_workshop(tmp_path)
    here = monte_carlo(tree, sheets, {n: str(tmp_path / f"here-{n}.tif") for n in MC_OUTPUTS}, n=6, seed=3,
                       pilot_cells=2000)
    there = monte_carlo(tree, sheets, {n: str(tmp_path / f"there-{n}.tif") for n in MC_OUTPUTS}, n=6, seed=3,
                        pilot_cells=2000, cluster=cluster)
    for name in MC_OUTPUTS:
        np.testing.assert_array_equal(read_raster(there.files[name]), read_raster(here.files[name]))
    assert there.record["top_area"] == here.record["top_area"]
    assert there.record["ran_on"]["workers"] == 2
