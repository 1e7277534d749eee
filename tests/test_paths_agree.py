"""One tree, three ways in: favour:evaluatetree from qgis_process, the command line and the core function.

There is one evaluation path, so the three must give identical cells; and
favour:reproduce, run from qgis_process, must find them identical and name an
input that changed afterwards.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest
from osgeo import gdal

from favour_plugin.raster.engine import evaluate_tree_file
from tests.conftest import ROOT
from tests.helpers import ORIGIN, leaf, read_raster, tree_doc, write_raster, write_tree, write_vector

ROWS, COLS, CELL = 36, 48, 100.0


def results_of(completed: subprocess.CompletedProcess) -> dict[str, str]:
    """Return the ``KEY: value`` lines under qgis_process's "Results" heading."""
    assert completed.returncode == 0, completed.stdout + completed.stderr
    lines = completed.stdout.splitlines()
    start = max(i for i, line in enumerate(lines) if line.strip() == "Results")
    out = {}
    for line in lines[start + 1:]:
        if ":\t" in line:
            key, value = line.split(":\t", 1)
            out[key.strip()] = value.strip()
    return out


@pytest.fixture(scope="module")
def model(tmp_path_factory, qgis_process):
    """Write a synthetic model of the invented Tarrowin district and evaluate it three ways."""
    folder = tmp_path_factory.mktemp("paths-agree")
    rng = np.random.default_rng(7)
    rows, cols = np.mgrid[0:ROWS, 0:COLS]
    grade = (40.0 + 30.0 * np.sin(rows / 5.0) * np.cos(cols / 7.0)
             + rng.normal(0.0, 4.0, (ROWS, COLS))).astype(np.float32)
    grade[30:34, 2:9] = -9999.0
    write_raster(folder / "grade.tif", grade, nodata=-9999.0)
    host = (1 + (rows // 9 + cols // 12) % 4).astype(np.int16)
    write_raster(folder / "host.tif", host, nodata=0)
    # Magnetics at half the cell size: aligned to the 100 m grid by bilinear resampling.
    fine_rows, fine_cols = np.mgrid[0:2 * ROWS, 0:2 * COLS]
    magnetics = (200.0 * np.exp(-((fine_rows - 30.0) ** 2 + (fine_cols - 60.0) ** 2) / 900.0)
                 + rng.normal(0.0, 5.0, (2 * ROWS, 2 * COLS))).astype(np.float32)
    write_raster(folder / "magnetics.tif", magnetics, cell=CELL / 2)
    x0, y0 = ORIGIN
    write_vector(folder / "faults.gpkg", [
        f"LINESTRING ({x0 + 350} {y0 - 120}, {x0 + 2900} {y0 - 3300})",
        f"LINESTRING ({x0 + 4600} {y0 - 200}, {x0 + 3100} {y0 - 3500})",
    ])
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "and"}, "children": [
            leaf("Grade", "grade.tif", {"type": "linear", "lower": 20.0, "upper": 70.0}),
            leaf("Host rock", "host.tif",
                 {"type": "categories", "scores": {"1": 0.3, "2": 0.9, "3": 0.6}, "default": 0.1}),
        ]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "or"}, "children": [
            leaf("Near faults", "faults.gpkg", {"type": "linear", "lower": 1200.0, "upper": 0.0},
                 measure="distance"),
        ]},
        {"name": "Trap", "component": "trap", "operator": {"type": "and"}, "children": [
            leaf("Magnetic high", "magnetics.tif", {"type": "gaussian", "centre": 150.0,
                                                     "spread": 60.0}),
        ]},
    ], operator={"type": "gamma", "gamma": 0.75}, name="Tarrowin district, synthetic")
    tree = write_tree(folder / "tarrowin.json", doc)

    by_qgis = str(folder / "by_qgis_process.tif")
    results_of(qgis_process("favour:evaluatetree", TREE=tree, OUTPUT=by_qgis))
    by_cli = str(folder / "by_command_line.tif")
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    completed = subprocess.run([sys.executable, "-m", "favour_plugin", "evaluate", tree, "-o", by_cli],
                               cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    assert completed.returncode == 0, completed.stderr
    by_core = evaluate_tree_file(tree, str(folder / "by_core.tif")).output
    return {"folder": folder, "tree": tree, "outputs": (by_qgis, by_cli, by_core)}


def test_three_paths_give_identical_cells(model):
    """favour:evaluatetree via qgis_process, the command line and evaluate_tree_file agree in every cell."""
    by_qgis, by_cli, by_core = (read_raster(path) for path in model["outputs"])
    valid = ~np.isnan(by_core)
    assert 0.5 * by_core.size < valid.sum() < by_core.size  # a real map, with some nodata
    assert np.unique(np.round(by_core[valid], 3)).size > 50
    assert np.array_equal(by_qgis, by_core, equal_nan=True)
    assert np.array_equal(by_cli, by_core, equal_nan=True)


def test_reproduce_from_qgis_process_then_names_a_changed_input(model, qgis_process):
    """favour:reproduce finds the qgis_process output identical, then names the input edited in one cell."""
    output = model["outputs"][0]
    first = results_of(qgis_process("favour:reproduce", INPUT=output))
    assert first["IDENTICAL"] == "true"
    assert first["DIFFERING_CELLS"] == "0"
    assert first.get("CHANGED_INPUTS", "") == ""

    grade = str(model["folder"] / "grade.tif")
    original = open(grade, "rb").read()
    favourability = read_raster(output)
    row, col = np.argwhere(favourability > 0.1)[0]
    try:
        ds = gdal.Open(grade, gdal.GA_Update)
        ds.GetRasterBand(1).WriteArray(np.array([[0.0]], dtype=np.float32), int(col), int(row))
        ds = None
        second = results_of(qgis_process("favour:reproduce", INPUT=output))
    finally:
        with open(grade, "wb") as handle:
            handle.write(original)
    assert second["IDENTICAL"] == "false"
    assert second["DIFFERING_CELLS"] == "1"
    assert f"{os.path.abspath(grade)} (Favourability > Source > Grade: content)" == \
        second["CHANGED_INPUTS"]
