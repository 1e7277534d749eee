"""The workshop from the command line and processing: sheets, aggregate, pairwise, Monte Carlo, sensitivity.

The numbers are checked against the core functions (tested elsewhere against
numpy, scipy.stats and numpy.linalg.eig): each path must give the same
numbers, cell for cell where rasters are written. A second export over filled
sheets is refused: that row is in the table of tests/test_refusals.py.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from favour_plugin.core.pairwise import pairwise_weights
from favour_plugin.core.sheet_import import read_sheets
from favour_plugin.core.tree import Tree
from favour_plugin.core.workshop import aggregate
from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo
from favour_plugin.raster.workshop_jobs import write_score_sheets
from tests.helpers import read_raster, run_cli, small_workshop

#: A consistent 3 x 3 judgement matrix from the weights 0.6, 0.3, 0.1 (a_ij = w_i / w_j).
MATRIX = """,Mag,Grav,Host
Mag,1,2,6
Grav,1/2,1,3
Host,1/6,1/3,1
"""


def test_second_round_sheets_carry_the_group_spread(tmp_path):
    """Round-2 sheets are named per expert and hold the group's median beside each item."""
    tree, _, sheets = small_workshop(tmp_path)
    second = write_score_sheets(tree, str(tmp_path / "round2"), previous_sheets=sheets)
    assert sorted(p.rsplit("/", 1)[1] for p in second) == ["E1-round2.csv", "E2-round2.csv", "E3-round2.csv"]
    assert "group_median" in open(second[0], encoding="utf-8").read()


def test_aggregate_from_the_command_line_matches_the_core(tmp_path):
    """`aggregate` writes the table of core.workshop.aggregate, flags included, and the aggregate tree."""
    tree, _, sheets = small_workshop(tmp_path)
    result = run_cli("aggregate", tmp_path / "tree.json", *sheets, "--table", tmp_path / "agg.csv",
                     "--tree-out", tmp_path / "agg.json", "--flag", "0.1")
    assert result.returncode == 0, result.stderr
    expected = aggregate(read_sheets(sheets, tree), threshold=0.1)
    with open(tmp_path / "agg.csv", newline="", encoding="utf-8") as handle:
        rows = {(r["node"], r["item"]): r for r in csv.DictReader(handle)}
    for (node, item), summary in expected.summaries.items():
        row = rows[(node, item)]
        assert float(row["pool"]) == pytest.approx(summary.pool, rel=1e-5)
        assert float(row["iqr"]) == pytest.approx(summary.iqr, rel=1e-5, abs=1e-9)
        assert (row["flagged"] == "yes") == summary.flagged
    flagged_lines = [line for line in result.stdout.splitlines() if line.startswith("flagged")]
    assert len(flagged_lines) == len(expected.flagged)
    aggregated = Tree.load(tmp_path / "agg.json")
    assert aggregated.find("Favourability > Source > Mag").membership["lower"] == pytest.approx(
        expected.get("Favourability > Source > Mag", "membership.lower").pool)
    assert json.loads((tmp_path / "agg.csv.lineage.json").read_text())["job"] == "aggregate-scores"


def test_pairwise_from_the_command_line_puts_the_weights_into_the_tree(tmp_path):
    """`pairwise` gives pairwise_weights' numbers and writes them into the node's children."""
    tree, _, _ = small_workshop(tmp_path)
    doc = tree.to_dict()
    doc["root"]["children"][0]["children"].append(
        {"name": "Host", "proxy": {"path": "host.tif"}, "membership": {"type": "identity"}})
    matrix = tmp_path / "matrix.csv"
    matrix.write_text(MATRIX, encoding="utf-8")
    (tmp_path / "tree3.json").write_text(json.dumps(doc), encoding="utf-8")
    result = run_cli("pairwise", matrix, "--tree", tmp_path / "tree3.json", "--node",
                     "Favourability > Source", "--tree-out", tmp_path / "weighted.json")
    assert result.returncode == 0, result.stderr
    reference = pairwise_weights([[1, 2, 6], [0.5, 1, 3], [1 / 6, 1 / 3, 1]])
    assert "CR = 0.0000" in result.stdout and f"Mag: weight {reference.weights[0]:.4f}" in result.stdout
    weighted = Tree.load(tmp_path / "weighted.json")
    got = [c.weight for c in weighted.find("Favourability > Source").children]
    np.testing.assert_allclose(got, [0.6, 0.3, 0.1], atol=1e-9)


def test_montecarlo_and_sensitivity_from_the_command_line(tmp_path):
    """`montecarlo` writes the six rasters equal to the core call's; `sensitivity` its table and chart."""
    tree, _, sheets = small_workshop(tmp_path)
    result = run_cli("montecarlo", tmp_path / "tree.json", *sheets, "-o", tmp_path / "mc", "-n", "8",
                     "--seed", "5", "-q")
    assert result.returncode == 0, result.stderr
    core = monte_carlo(tree, sheets, {n: str(tmp_path / f"core-{n}.tif") for n in MC_OUTPUTS}, 8, 5,
                       tree_file=str(tmp_path / "tree.json"))
    for name in MC_OUTPUTS:
        np.testing.assert_array_equal(read_raster(tmp_path / "mc" / f"favourability-{name}.tif"),
                                      read_raster(core.files[name]))
    sens = run_cli("sensitivity", tmp_path / "tree.json", "--table", tmp_path / "s.csv", "--chart",
                   tmp_path / "s.png", "-q")
    assert sens.returncode == 0, sens.stderr
    assert (tmp_path / "s.png").stat().st_size > 1000 and "of the top area changes" in sens.stdout


def test_processing_montecarlo_gives_the_core_cells(tmp_path, favour_provider):
    """favour:montecarlo from processing writes the same cells as the core call (one evaluation path)."""
    import processing

    tree, _, sheets = small_workshop(tmp_path)
    keys = {"mean": "OUTPUT_MEAN", "std": "OUTPUT_STD", "p10": "OUTPUT_P10", "p50": "OUTPUT_P50",
            "p90": "OUTPUT_P90", "robustness": "OUTPUT_ROBUSTNESS"}
    out = processing.run("favour:montecarlo", {
        "TREE": str(tmp_path / "tree.json"), "SHEETS": sheets, "REALISATIONS": 6, "SEED": 9,
        **{key: str(tmp_path / f"p-{name}.tif") for name, key in keys.items()}})
    core = monte_carlo(tree, sheets, {n: str(tmp_path / f"c-{n}.tif") for n in MC_OUTPUTS}, 6, 9)
    for name, key in keys.items():
        np.testing.assert_array_equal(read_raster(out[key]), read_raster(core.files[name]))
    assert json.loads(open(out["LINEAGE"], encoding="utf-8").read())["seed"] == 9


def test_processing_workshop_steps_run_in_order(tmp_path, favour_provider):
    """Sheets, aggregate, pairwise and sensitivity run from processing and report their numbers."""
    import processing

    small_workshop(tmp_path)
    tree_file = str(tmp_path / "tree.json")
    written = processing.run("favour:scoresheets", {"TREE": tree_file, "EXPERTS": "E7, E8",
                                                    "OUTPUT_FOLDER": str(tmp_path / "blank")})
    assert written["FILES"].count(".csv") == 2
    sheets = [str(tmp_path / f"E{i}.csv") for i in (1, 2, 3)]
    agg = processing.run("favour:aggregatescores", {"TREE": tree_file, "SHEETS": sheets, "THRESHOLD": 0.1,
                                                    "OUTPUT_TABLE": str(tmp_path / "a.csv")})
    assert agg["FLAGGED"] == len(aggregate(read_sheets(sheets, Tree.load(tree_file)), threshold=0.1).flagged)
    (tmp_path / "m.csv").write_text(MATRIX, encoding="utf-8")
    pair = processing.run("favour:pairwiseweights", {"MATRIX": str(tmp_path / "m.csv")})
    assert pair["CR"] == pytest.approx(0.0, abs=1e-12) and pair["WEIGHTS"].startswith("Mag=0.6")
    sens = processing.run("favour:sensitivity", {"TREE": tree_file, "OUTPUT_TABLE": str(tmp_path / "s.csv")})
    assert open(sens["OUTPUT_TABLE"], encoding="utf-8").read().startswith("label,node,change")


def test_a_third_round_follows_the_second(tmp_path):
    """Sheets written from round-2 sheets are round 3: named -round3 and declaring round 3."""
    from favour_plugin.core.sheet_import import declared_round

    tree, _, sheets = small_workshop(tmp_path)
    second = write_score_sheets(tree, str(tmp_path / "round2"), previous_sheets=sheets)
    third = write_score_sheets(tree, str(tmp_path / "round3"), previous_sheets=second)
    assert [declared_round(p) for p in (sheets[0], second[0], third[0])] == [1, 2, 3]
    assert third[0].endswith("E1-round3.csv")
