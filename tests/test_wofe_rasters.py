"""Weights of evidence on rasters: the jobs, the processing algorithms, the demo district, bad input."""

import csv
import importlib.util
import subprocess
from pathlib import Path

import numpy as np
import pytest
from statsmodels.stats.contingency_tables import Table2x2

from favour_plugin.core import wofe
from favour_plugin.core.errors import ParameterError
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.membership import parse_membership
from favour_plugin.core.tree import Tree
from favour_plugin.raster.engine import evaluate_tree
from favour_plugin.raster.wofe_jobs import evidence_weights, posterior, read_weights_table
from tests.helpers import ORIGIN, leaf, read_raster, tree_doc, write_raster, write_vector

ROOT = Path(__file__).resolve().parent.parent
CELL = 100.0  # m, so one cell is 0.01 km²
CELL_KM2 = CELL * CELL / 1e6


def centre(row, col):
    """Return the map coordinates of a cell centre of the test grid."""
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


def points_wkt(cells):
    """WKT points at the centres of (row, col) cells."""
    return [f"POINT ({x} {y})" for x, y in (centre(r, c) for r, c in cells)]


def table_rasters(folder, a, b, c, d, rng, width=100):
    """Binary evidence and deposit points realising the 2x2 table [[a, b], [c, d]] in cells.

    The first a + b cells (row by row) are the pattern; a deposits sit on
    distinct pattern cells and c on distinct cells off it.
    """
    total = a + b + c + d
    height = -(-total // width)
    flat = np.full(height * width, np.nan)
    flat[:a + b] = 1
    flat[a + b:total] = 0
    on = rng.choice(a + b, a, replace=False)
    off = a + b + rng.choice(c + d, c, replace=False)
    cells = [divmod(int(i), width) for i in np.concatenate([on, off])]
    evidence = write_raster(folder / "evidence.tif", flat.reshape(height, width).astype(np.float32),
                            cell=CELL, nodata=-9999)
    deposits = write_vector(folder / "deposits.gpkg", points_wkt(cells), layer="deposits")
    return evidence, deposits


@pytest.mark.parametrize("seed", range(6))
def test_contrast_and_its_error_match_statsmodels_on_rasters(tmp_path, seed):
    """Contrast = log odds ratio and s(C) = its Woolf standard error (statsmodels Table2x2, Woolf 1955)."""
    rng = np.random.default_rng(seed)
    a, c = int(rng.integers(1, 25)), int(rng.integers(1, 25))
    b, d = int(rng.integers(20, 900)), int(rng.integers(200, 4000))
    evidence, deposits = table_rasters(tmp_path, a, b, c, d, rng)
    result = evidence_weights(evidence, deposits, "binary", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2)
    (row,) = result.table.rows
    reference = Table2x2(np.array([[a, b], [c, d]], dtype=float), shift_zeros=False)
    assert row["class"] == 1.0 and row["deposits"] == a
    assert row["contrast"] == pytest.approx(reference.log_oddsratio, rel=1e-10)
    assert row["s_contrast"] == pytest.approx(reference.log_oddsratio_se, rel=1e-10)


def test_csv_has_the_named_columns_and_no_infinities(tmp_path):
    """The CSV carries the exact column names; undefined weights are empty, never inf or nan."""
    rng = np.random.default_rng(3)
    classes = rng.integers(1, 5, (40, 50)).astype(np.uint8)
    evidence = write_raster(tmp_path / "classes.tif", classes, cell=CELL, nodata=0)
    cells = [(r, c) for r, c in zip(*np.nonzero(classes == 2))][:6] + [(0, 0)]
    deposits = write_vector(tmp_path / "d.gpkg", points_wkt(cells), layer="deposits")
    evidence_weights(evidence, deposits, "categorical", str(tmp_path / "w.csv"), unit_area_km2=CELL_KM2)
    with open(tmp_path / "w.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    header = list(rows[0])
    for name in ("class", "area_units", "deposits", "w_plus", "s_w_plus", "w_minus", "s_w_minus",
                 "contrast", "s_contrast", "studentized_contrast", "p_value", "significant", "flag"):
        assert name in header
    text = (tmp_path / "w.csv").read_text().lower()
    assert "inf" not in text and "nan" not in text
    undefined = [r for r in rows if r["flag"] == "undefined"]
    assert undefined and all(r["contrast"] == "" and r["note"] for r in undefined)


def test_one_layer_posterior_is_the_deposit_density_on_and_off_the_pattern(tmp_path):
    """With one binary layer, P on the pattern = a/(a+b) and off it c/(c+d) (unit cells = cells)."""
    rng = np.random.default_rng(8)
    a, b, c, d = 9, 391, 6, 3594
    evidence, deposits = table_rasters(tmp_path, a, b, c, d, rng)
    evidence_weights(evidence, deposits, "binary", str(tmp_path / "w.csv"), unit_area_km2=CELL_KM2,
                     output_generalised=str(tmp_path / "g.tif"))
    result = posterior([str(tmp_path / "g.tif")], deposits, str(tmp_path / "p.tif"),
                       str(tmp_path / "s.tif"), str(tmp_path / "r.html"), unit_area_km2=CELL_KM2)
    p = read_raster(tmp_path / "p.tif").ravel()
    pattern = read_raster(evidence).ravel()
    assert p[pattern == 1] == pytest.approx(a / (a + b), rel=1e-6)
    assert p[pattern == 0] == pytest.approx(c / (c + d), rel=1e-6)
    # One layer: the predicted deposits equal the observed exactly (T = n).
    assert result.checks["overall"]["predicted"] == pytest.approx(a + c, rel=1e-9)
    assert "n / T" in (tmp_path / "r.html").read_text()


def test_deposit_accounting_outside_on_nodata_and_shared_cells(tmp_path):
    """Points off the grid, on nodata and sharing a cell are counted and reported, never dropped."""
    values = np.ones((30, 30), np.float32)
    values[:, 15:] = 0
    values[0, 0] = -9999
    evidence = write_raster(tmp_path / "e.tif", values, cell=CELL, nodata=-9999)
    wkts = [*points_wkt([(5, 5), (5, 5), (6, 20), (0, 0)]), "POINT (0 0)"]
    deposits = write_vector(tmp_path / "d.gpkg", wkts, layer="deposits")
    feedback = Feedback()
    result = evidence_weights(evidence, deposits, "binary", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2, feedback=feedback)
    assert result.deposits["outside_grid"] == 1 and result.deposits["points"] == 5
    assert result.table.merged_deposits == 1
    assert result.table.nodata_deposits == 1
    assert result.table.deposits == 2
    messages = " ".join(w["message"] for w in feedback.warnings)
    assert "fall outside the grid" in messages and "on nodata" in messages


def test_deposits_in_another_crs_are_reprojected_with_a_note(tmp_path):
    """Deposits stored in EPSG:4326 give the same table as in the grid's CRS, with a note."""
    rng = np.random.default_rng(12)
    evidence, deposits = table_rasters(tmp_path, 7, 300, 5, 2000, rng)
    geographic = tmp_path / "d4326.gpkg"
    subprocess.run(["ogr2ogr", "-t_srs", "EPSG:4326", str(geographic), deposits], check=True)
    notes = []

    class Notes(Feedback):
        def info(self, text):
            notes.append(text)

    same = evidence_weights(evidence, deposits, "binary", str(tmp_path / "a.csv"), unit_area_km2=CELL_KM2)
    moved = evidence_weights(evidence, str(geographic), "binary", str(tmp_path / "b.csv"),
                             unit_area_km2=CELL_KM2, feedback=Notes())
    assert moved.table.rows == same.table.rows
    assert any("reprojected" in n for n in notes)


def test_ordered_evidence_best_cut_and_generalised_raster(tmp_path):
    """Distance-like evidence: the best cut is the planted corridor; the generalised raster is 1 inside it."""
    cols = np.arange(200)
    distance = np.tile(np.abs(cols - 100) * CELL, (100, 1)).astype(np.float32)
    evidence = write_raster(tmp_path / "dist.tif", distance, cell=CELL)
    rng = np.random.default_rng(4)
    near = [(int(r), int(c)) for r, c in zip(rng.integers(0, 100, 20), rng.integers(97, 104, 20))]
    far = [(int(r), int(c)) for r, c in zip(rng.integers(0, 100, 4), rng.integers(0, 60, 4))]
    deposits = write_vector(tmp_path / "d.gpkg", points_wkt(near + far), layer="deposits")
    breaks = [100, 200, 300, 500, 1000, 2000, 5000]
    result = evidence_weights(evidence, deposits, "ascending", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2, breaks=breaks,
                              output_generalised=str(tmp_path / "cut.tif"))
    assert result.best.found and result.best.threshold == 300
    assert [row["class"] for row in result.table.rows] == breaks
    areas = [row["area_units"] for row in result.table.rows]
    assert all(b >= a for a, b in zip(areas, areas[1:]))
    cut = read_raster(tmp_path / "cut.tif")
    np.testing.assert_array_equal(cut, (distance <= 300).astype(float))
    assert read_weights_table(str(tmp_path / "cut.tif") + ".weights.csv").kind == "binary"


def test_categorical_generalisation_pools_classes_by_their_weights(tmp_path):
    """Categorical evidence pooled in ternary groups: positive, neutral and negative classes."""
    classes = np.repeat(np.arange(1, 5, dtype=np.uint8), 2500).reshape(100, 100)
    rng = np.random.default_rng(6)
    rows_of = {k: np.argwhere(classes == k) for k in range(1, 5)}
    picks = [rows_of[2][i] for i in rng.choice(2500, 30, replace=False)]
    picks += [rows_of[k][i] for k in (1, 3) for i in rng.choice(2500, 6, replace=False)]
    picks += [rows_of[4][0]]  # one deposit: a defined, strongly negative weight
    deposits = write_vector(tmp_path / "d.gpkg", points_wkt([tuple(map(int, p)) for p in picks]),
                            layer="deposits")
    evidence = write_raster(tmp_path / "c.tif", classes, cell=CELL)
    result = evidence_weights(evidence, deposits, "categorical", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2, output_generalised=str(tmp_path / "g.tif"))
    pooled = read_raster(tmp_path / "g.tif")
    assert np.all(pooled[classes == 2] == 1)
    assert np.all(pooled[classes == 4] == -1)
    assert set(np.unique(pooled[classes == 1])) <= {0.0, -1.0}
    assert result.generalised_table.kind == "categorical"
    assert result.generalised_table.area_units == pytest.approx(10000 * CELL_KM2 / CELL_KM2)


def test_weights_leaf_scores_classes_by_the_logistic_of_their_weight(tmp_path):
    """A 'weights' leaf gives μ = 1/(1+e^−W); for a pattern that is P(B|D)/(P(B|D)+P(B|not D))."""
    rng = np.random.default_rng(9)
    a, b, c, d = 8, 192, 4, 1796
    evidence, deposits = table_rasters(tmp_path, a, b, c, d, rng)
    result = evidence_weights(evidence, deposits, "binary", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2)
    spec = wofe.weights_membership(wofe.layer_weights(result.table), source="w.csv")
    doc = tree_doc([leaf("Pattern", evidence, spec)], grid={"reference": evidence})
    evaluate_tree(Tree.from_dict(doc), str(tmp_path / "mu.tif"))
    mu = read_raster(tmp_path / "mu.tif").ravel()
    pattern = read_raster(evidence).ravel()
    n, n_free = a + c, b + d
    on = (a / n) / (a / n + b / n_free)          # from the counts alone
    off = (c / n) / (c / n + d / n_free)
    assert mu[pattern == 1] == pytest.approx(on, rel=1e-6)
    assert mu[pattern == 0] == pytest.approx(off, rel=1e-6)
    with pytest.raises(ParameterError, match="weight of class 1 must be a finite number"):
        parse_membership({"type": "weights", "weights": {"1": None}})


def test_demo_planted_control_is_significant_and_planted_noise_is_not(tmp_path):
    """Demo: the planted control is clearly significant near 500 m, the planted noise is not.

    The generator places occurrences within 500 m of second-order faults (less 100 m to spare);
    the late joints come from a random stream of their own.
    """
    spec = importlib.util.spec_from_file_location("demo_generate",
                                                  ROOT / "resources" / "demo" / "generate.py")
    generator = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(generator)
    layers = tmp_path / "layers"
    generator.generate(layers)
    from favour_plugin.raster.gdalenv import gdal_job
    from favour_plugin.raster.grid import Grid
    from favour_plugin.raster.sources import open_raster
    from favour_plugin.raster.vector import vector_source
    with gdal_job():
        grid = Grid.from_dataset(open_raster(str(layers / "magnetics.tif"), "grid"), "grid")
        faults = vector_source(str(layers / "faults.gpkg"), "second_order", "distance", None, grid,
                               str(tmp_path), "faults", Feedback()).target
        joints = vector_source(str(layers / "late_joints.gpkg"), None, "distance", None, grid,
                               str(tmp_path), "joints", Feedback()).target
    breaks = list(range(100, 2001, 100))
    occurrences = str(layers / "occurrences.gpkg")
    control = evidence_weights(faults, occurrences, "ascending", str(tmp_path / "f.csv"), breaks=breaks)
    noise = evidence_weights(joints, occurrences, "ascending", str(tmp_path / "j.csv"), breaks=breaks)
    assert control.best.found and 300 <= control.best.threshold <= 600
    assert control.best.studentized_contrast > 3 and control.best.contrast > 1.5
    assert not noise.best.found
    row = control.table.row(500.0)
    assert row["contrast"] > 0 and row["studentized_contrast"] > 1.96


def test_study_area_limits_the_counts(tmp_path):
    """Cells and deposits outside the study polygon are left out (and the deposits reported)."""
    values = np.tile(np.array([0, 1], np.uint8), (50, 25))
    evidence = write_raster(tmp_path / "e.tif", values, cell=CELL)
    deposits = write_vector(tmp_path / "d.gpkg", points_wkt([(2, 1), (4, 2), (40, 41), (45, 43)]),
                            layer="d")
    x0, y0 = ORIGIN
    half = f"POLYGON (({x0} {y0}, {x0 + 2500} {y0}, {x0 + 2500} {y0 - 5000}, {x0} {y0 - 5000}, {x0} {y0}))"
    study = write_vector(tmp_path / "s.gpkg", [half], layer="study")
    result = evidence_weights(evidence, deposits, "binary", str(tmp_path / "w.csv"),
                              unit_area_km2=CELL_KM2, study_area=study)
    assert result.table.area_units == pytest.approx(50 * 25 * CELL_KM2 / CELL_KM2)
    assert result.table.deposits == 2 and result.table.outside_deposits == 2


def test_processing_algorithms_match_the_jobs_and_statsmodels(favour_provider, tmp_path):
    """favour:evidenceweights and favour:posterior run from processing; contrast = statsmodels log OR."""
    import processing

    rng = np.random.default_rng(21)
    a, b, c, d = 11, 389, 7, 3593
    evidence, deposits = table_rasters(tmp_path, a, b, c, d, rng)
    out = processing.run("favour:evidenceweights", {
        "EVIDENCE": evidence, "DEPOSITS": deposits, "METHOD": "binary", "UNIT_AREA": CELL_KM2,
        "OUTPUT_TABLE": str(tmp_path / "w.csv"), "OUTPUT_GENERALISED": str(tmp_path / "g.tif")})
    with open(out["OUTPUT_TABLE"], newline="") as handle:
        (row,) = list(csv.DictReader(handle))
    reference = Table2x2(np.array([[a, b], [c, d]], dtype=float), shift_zeros=False)
    assert float(row["contrast"]) == pytest.approx(reference.log_oddsratio, rel=1e-10)
    assert float(row["s_contrast"]) == pytest.approx(reference.log_oddsratio_se, rel=1e-10)
    post = processing.run("favour:posterior", {
        "EVIDENCE": [out["OUTPUT_GENERALISED"]], "DEPOSITS": deposits, "UNIT_AREA": CELL_KM2,
        "OUTPUT_PROBABILITY": str(tmp_path / "p.tif"), "OUTPUT_STD": str(tmp_path / "s.tif"),
        "OUTPUT_REPORT": str(tmp_path / "r.html")})
    assert post["OBSERVED"] == a + c and post["RATIO"] == pytest.approx(1.0)
    assert Path(post["OUTPUT_REPORT"]).read_text().count("Agterberg") >= 1


def test_byte_histogram_equals_numpy_bincount():
    """The paired-byte histogram equals numpy.bincount for odd, even, empty and extreme arrays."""
    from favour_plugin.raster.evidence import byte_histogram

    rng = np.random.default_rng(2)
    for shape in [(0, 0), (1, 1), (3, 5), (256, 1024), (7, 333)]:
        raw = rng.integers(0, 256, shape).astype(np.uint8)
        np.testing.assert_array_equal(byte_histogram(raw), np.bincount(raw.ravel(), minlength=256))
    raw = np.full((5, 4), 255, np.uint8)[:, ::2]  # a strided view, values at the top bin
    np.testing.assert_array_equal(byte_histogram(raw), np.bincount(raw.ravel(), minlength=256))
