"""Validation against known deposits, hold-outs for weights of evidence, and proxy redundancy.

Outside references: scikit-learn's ``roc_auc_score`` (the AUC), numpy counts
and ``numpy.corrcoef`` on the same cells, figures computed by hand on small
grids (the curves, the P–A crossing, Nd, the capture efficiency), the
posterior job run again with deposits removed from the points file (the
hold-outs), and properties that must hold (the bootstrap interval).
"""

from __future__ import annotations

import json
import os
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import roc_auc_score

from favour_plugin.core import validation as val
from favour_plugin.core.errors import InputError, SmallSampleWarning
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.lineage import read_lineage
from favour_plugin.core.tree import Tree
from favour_plugin.core.validation_counts import (
    BINS_PER_OCTAVE,
    KEY_BITS,
    RankCounts,
    bin_edges,
    count_block,
    float_keys,
    key_values,
)
from favour_plugin.raster.holdout_jobs import holdouts
from favour_plugin.raster.redundancy_jobs import redundancy
from favour_plugin.raster.validation_jobs import validate
from favour_plugin.raster.wofe_jobs import posterior
from tests.helpers import (
    ORIGIN,
    leaf,
    read_raster,
    run_cli,
    srs,
    tree_doc,
    write_raster,
    write_tree,
    write_vector,
)

CELL = 100.0
NODATA = -9999.0


class Notes(Feedback):
    """Feedback that keeps the notes as well as the warnings."""

    def __init__(self) -> None:
        super().__init__()
        self.notes: list[str] = []

    def info(self, text: str) -> None:
        """Keep a note."""
        self.notes.append(text)


def centres(rows, cols, crs_to=None) -> list[str]:
    """WKT points at the centres of (row, column) cells of the 100 m test grid (optionally reprojected)."""
    xs = [ORIGIN[0] + (c + 0.5) * CELL for c in cols]
    ys = [ORIGIN[1] - (r + 0.5) * CELL for r in rows]
    if crs_to is not None:
        from osgeo import osr

        target = osr.SpatialReference()
        target.SetFromUserInput(crs_to)
        target.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
        moved = osr.CoordinateTransformation(srs(), target).TransformPoints(list(zip(xs, ys)))
        xs, ys = [p[0] for p in moved], [p[1] for p in moved]
    return [f"POINT ({x!r} {y!r})" for x, y in zip(xs, ys)]


def sklearn_auc(values: np.ndarray, rows, cols) -> float:
    """scikit-learn's ROC AUC: positives the deposit cells' values, negatives every valid cell's."""
    cells = sorted(set(zip(rows, cols)))
    positives = np.array([values[r, c] for r, c in cells])
    positives = positives[~np.isnan(positives)]
    negatives = values[~np.isnan(values)]
    return roc_auc_score(np.r_[np.ones(positives.size), np.zeros(negatives.size)],
                         np.r_[positives, negatives])


def run_validate(folder, values, rows, cols, name="fav", nodata=NODATA, options=(), **kwargs):
    """Write ``values`` (NaN as nodata, GeoTIFF ``options``) and the deposits at (rows, cols); validate."""
    stored = np.where(np.isnan(values), nodata, values).astype(values.dtype) if values.dtype.kind == "f" \
        else values
    raster = write_raster(folder / f"{name}.tif", stored, nodata=nodata, options=options)
    deposits = write_vector(folder / f"{name}-deposits.gpkg", centres(rows, cols))
    return validate(raster, deposits, str(folder / f"{name}.json"), **kwargs)


# -- the AUC against scikit-learn -------------------------------------------------------------------


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("dtype", ["float32", "float64", "int16"])
@pytest.mark.parametrize("layout", [(), ("TILED=YES", "BLOCKXSIZE=128", "BLOCKYSIZE=128")],
                         ids=["strips", "tiles"])
def test_auc_equals_sklearn_with_ties_through_the_streamed_job(tmp_path, seed, dtype, layout):
    """AUC equals sklearn.metrics.roc_auc_score (deposit cells against all valid cells, ties half).

    Random rasters with many ties (values rounded to 0.05, or small whole
    numbers), nodata, and a grid of four windows with trimmed edges, read
    block by block, striped or tiled (the deposits' tiles then kept and not
    read again); deposits include two points in one cell and one on nodata.
    """
    rng = np.random.default_rng(seed)
    shape = (300, 1100)
    if dtype == "int16":
        values = rng.integers(0, 12, shape).astype(np.int16)
        values[rng.random(shape) < 0.05] = -1
        truth = np.where(values == -1, np.nan, values.astype(np.float64))
        nodata = -1
    else:
        values = (np.round(rng.random(shape) * 20) / 20).astype(dtype)
        values[rng.random(shape) < 0.05] = np.nan
        truth = values.astype(np.float64)
        nodata = NODATA
    cells = rng.choice(values.size, 60, replace=False)
    rows, cols = (list(a) for a in np.divmod(cells, shape[1]))
    rows, cols = [*rows, rows[0]], [*cols, cols[0]]  # a second point in one cell
    job = run_validate(tmp_path, values, rows, cols, nodata=nodata, options=layout)
    assert job.result["auc"] == pytest.approx(sklearn_auc(truth, rows, cols), abs=1e-12)
    deposits = job.result["sets"][0]["deposits"]
    assert deposits["sharing_a_cell"] == 1
    assert deposits["used"] + deposits["on_nodata"] == 60 == deposits["cells"]
    assert job.result["n_deposits"] == deposits["used"]


# -- curves, P–A crossing and capture efficiency, by hand ---------------------------------------------


def tie_grid() -> np.ndarray:
    """2 x 5 cells: a block of two at 0.9, four at 0.5, two at 0.2, one at 0.1, one nodata."""
    return np.array([[0.9, 0.9, 0.5, 0.5, 0.5], [0.5, 0.2, 0.2, 0.1, np.nan]], dtype=np.float32)


def test_success_rate_curve_against_a_hand_computed_grid(tmp_path):
    """The success-rate curve and AUC of the tie grid, worked by hand.

    Deposits at 0.9, 0.5 and 0.2; 9 valid cells. Each tie block is crossed
    diagonally: (0, 0) → (2/9, 1/3) → (6/9, 2/3) → (8/9, 1) → (1, 1). AUC by
    the rank formula: (8/9 + 5/9 + 2/9) / 3 = 5/9, which is also the area
    under those segments (2 + 12 + 10 + 6)/54.
    """
    job = run_validate(tmp_path, tie_grid(), [0, 0, 1], [0, 3, 1])
    points = job.result["sets"][0]["points"]
    assert points["area_percent"] == pytest.approx([0, 200 / 9, 600 / 9, 800 / 9, 100])
    assert points["deposits_percent"] == pytest.approx([0, 100 / 3, 200 / 3, 100, 100])
    assert job.result["auc"] == pytest.approx(5 / 9, abs=1e-12)
    assert job.result["curve"] == "success-rate"
    assert job.result["sets"][0]["ties"]["deposits_in_tie_blocks"] == 3


def test_pa_crossing_and_nd_on_a_small_grid_by_hand(tmp_path):
    """P–A crossing and Nd worked by hand on two small grids.

    1 x 10 cells valued 9 … 0, deposits at 9, 7, 6, 2: on the segment from
    3 to 4 cells, y = 0.5 + 0.25 (u − 3) meets u/10 + y = 1 at u = 25/7, so
    A = 250/7 %, P = 450/7 % and Nd = 9/5. The tie grid: on its middle
    segment x + 1/3 + (3/4)(x − 2/9) = 1 gives x = 10/21, so A = 1000/21 %
    and Nd = 11/10.
    """
    line = np.arange(9, -1, -1, dtype=np.float32).reshape(1, 10)
    first = run_validate(tmp_path, line, [0, 0, 0, 0], [0, 2, 3, 7], name="line").result
    assert first["pa_crossing"] == pytest.approx([450 / 7, 250 / 7])
    assert first["nd"] == pytest.approx(float(Fraction(9, 5)))
    assert first["auc"] == pytest.approx(0.65)
    second = run_validate(tmp_path, tie_grid(), [0, 0, 1], [0, 3, 1], name="ties").result
    assert second["pa_crossing"] == pytest.approx([100 - 1000 / 21, 1000 / 21])
    assert second["nd"] == pytest.approx(1.1)


def test_capture_efficiency_by_hand(tmp_path):
    """% of deposits in the top 5, 10, 20 and 50 % of the area, worked by hand.

    1 x 10 line (deposits at 9, 7, 6, 2): half of the top cell holds half of
    the first deposit, 12.5 %; the top cell 25 %; two cells 25 %; five cells
    75 %. The tie grid: the 0.9 block rises 1/3 over 2/9 of the area, so the
    top 10 % hold 15 %; the top 50 % reach 1/3 + (1/2 − 2/9)(3/4) = 13/24.
    """
    line = np.arange(9, -1, -1, dtype=np.float32).reshape(1, 10)
    result = run_validate(tmp_path, line, [0, 0, 0, 0], [0, 2, 3, 7], name="line",
                          capture=[20, 5, 10, 50]).result
    assert [c["top_area_percent"] for c in result["capture"]] == [5, 10, 20, 50]
    assert [c["deposits_percent"] for c in result["capture"]] == pytest.approx([12.5, 25, 25, 75])
    ties = run_validate(tmp_path, tie_grid(), [0, 0, 1], [0, 3, 1], name="ties", capture=[10, 50]).result
    assert [c["deposits_percent"] for c in ties["capture"]] == pytest.approx([15, 100 * 13 / 24])


def test_prediction_area_rows_and_thresholds_are_exact_counts(tmp_path):
    """Every P–A row and the crossing's threshold agree with numpy counts of cells and deposits ≥ t."""
    rng = np.random.default_rng(4)
    values = rng.beta(2, 5, (200, 300)).astype(np.float32)
    values[:10, :10] = np.nan
    cells = rng.choice(values.size, 80, replace=False)
    rows, cols = np.divmod(cells, 300)
    result = run_validate(tmp_path, values, rows, cols).result
    valid = values[~np.isnan(values)].astype(np.float64)
    at_deposits = values[rows, cols].astype(np.float64)
    at_deposits = at_deposits[~np.isnan(at_deposits)]
    plot = result["sets"][0]["pa_plot"]
    assert len(plot["threshold"]) > 100
    for t, area, hits in zip(plot["threshold"], plot["area_percent"], plot["prediction_percent"]):
        assert area == pytest.approx(100 * np.count_nonzero(valid >= t) / valid.size, abs=1e-9)
        assert hits == pytest.approx(100 * np.count_nonzero(at_deposits >= t) / at_deposits.size, abs=1e-9)
    for found in [result["pa_threshold"]] + [c["threshold"] for c in result["capture"]]:
        assert found["area_percent"] == pytest.approx(100 * np.count_nonzero(valid >= found["value"]) /
                                                      valid.size, abs=1e-9)
    # the crossing's threshold takes in at most one histogram bin (1/BINS_PER_OCTAVE of its value) beyond
    # the crossing
    wanted = result["pa_crossing"][1]
    edge = result["pa_threshold"]["value"]
    assert result["pa_threshold"]["area_percent"] >= wanted - 1e-9
    assert 100 * np.count_nonzero(valid >= edge * (1 + 1 / BINS_PER_OCTAVE)) / valid.size <= wanted + 1e-9


@pytest.mark.parametrize("spread", ["narrow", "both signs, every scale"])
def test_histogram_counts_every_cell_at_or_above_each_bin_edge(spread):
    """For every histogram bin, the cells counted at or above it equal numpy's count of values ≥ its edge.

    Two paths: values within a few octaves (edges looked up in the sorted
    block) and values of both signs from 1e-30 to 1e6 (keys of every value).
    """
    rng = np.random.default_rng(12)
    if spread == "narrow":
        values = rng.beta(2, 3, (200, 300)).astype(np.float32)
    else:
        signs = rng.choice([-1, 1], (60, 100))
        values = (signs * 10.0 ** rng.uniform(-30, 6, (60, 100))).astype(np.float32)
        values[:5, :5] = 0.0
    counts = RankCounts.of_array(values, np.array([], dtype=np.float32))
    bins = np.flatnonzero(counts.histogram)
    edges = bin_edges(bins)
    expected = np.array([np.count_nonzero(values >= e) for e in edges])
    assert np.array_equal(counts.cells_at_or_above_bin(bins), expected)
    assert counts.histogram.sum() == values.size


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(allow_nan=False, width=32), min_size=2, max_size=50))
def test_value_keys_keep_numpy_order(values):
    """Histogram keys sort float32 numbers as numpy does (and come back unchanged, −0 read as 0)."""
    x = np.array(values, dtype=np.float32)
    keys = float_keys(x)
    order = np.argsort(x, kind="stable")
    assert np.all(np.diff(keys[order].astype(np.int64)) >= 0)
    assert np.all((x[:, None] < x[None, :]) == (keys[:, None] < keys[None, :]))
    assert np.array_equal(key_values(keys), x + np.float32(0.0))


@settings(max_examples=300, deadline=None)
@given(st.integers(0, 2**32 - 1), st.sampled_from(["float32", "float64", "int16", "uint8"]),
       st.sampled_from([1e-3, 1.0, 1e6, 1e300]), st.booleans(), st.booleans(), st.booleans())
def test_block_counts_equal_numpys_own_comparisons(seed, dtype, scale, infinite, masked, signed):
    """Cells below and equal to each target, the histogram, min, max: as numpy counts them cell by cell.

    Outside reference: numpy's comparison operators and ``np.unique`` on the
    bin keys, over blocks with NaN (quiet and signalling, either sign), ±inf,
    −0, ties, float64 values beyond float32's range, values of both signs or
    none below zero, with and without a nodata mask (every way of counting),
    targets in and out of the values' range.
    """
    rng = np.random.default_rng(seed)
    n = int(rng.integers(0, 4000))
    if dtype.startswith("float"):
        values = (rng.normal(0, scale if dtype == "float64" else min(scale, 1e6), n)).astype(dtype)
        values = values if signed else np.abs(values)
        nans = np.array([np.nan, -np.nan], dtype=dtype)
        if dtype == "float32":  # NaNs with small payloads, whose keys lie next to ±inf's
            signalling = np.array([0x7F800001, 0xFF800001], dtype=np.uint32).view(np.float32)
            nans = np.concatenate([nans, signalling])
        missing = rng.random(n) < 0.1
        values[missing] = rng.choice(nans, int(missing.sum()))
        specials = ((0.02, np.inf), (0.02, -np.inf), (0.05, -0.0)) if infinite else ((0.05, -0.0),)
        for share, value in specials:
            values[rng.random(n) < share] = value
        if n:
            values[rng.random(n) < 0.1] = values[0]
    else:
        values = rng.integers(-100 if signed and dtype != "uint8" else 0, 200, n).astype(dtype)
    invalid = rng.random(n) < 0.05 if masked else None
    pool = np.concatenate([values[~np.isnan(values)], np.array([0, 1, 250], dtype=dtype)])
    targets = np.unique(rng.choice(pool, int(rng.integers(0, 30))))
    got = count_block(values, targets, invalid)
    kept = values[~np.isnan(values) & (True if invalid is None else ~invalid)]
    assert np.array_equal(got["below"], [np.count_nonzero(kept < t) for t in targets])
    assert np.array_equal(got["equal"], [np.count_nonzero(kept == t) for t in targets])
    assert got["valid"] == kept.size
    bins, counts = np.unique((float_keys(kept) >> np.uint32(32 - KEY_BITS)).astype(np.int64),
                             return_counts=True)
    found = np.flatnonzero(got["bin_counts"])
    assert np.array_equal(found + got["first_bin"], bins) and np.array_equal(got["bin_counts"][found], counts)
    if kept.size:
        assert (got["minimum"], got["maximum"]) == (float(kept.min()), float(kept.max()))
        assert got["infinite"] == (np.count_nonzero(np.isinf(kept)) if kept.dtype.kind == "f" else 0)


# -- the bootstrap ------------------------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**32 - 1), st.floats(0.5, 5.0), st.floats(0.5, 5.0))
def test_bootstrap_interval_contains_the_auc_and_narrows_as_deposits_grow(seed, a, b):
    """The percentile interval holds the AUC, and 16 times the deposits make it narrower.

    Property: the interval of a mean shrinks about as 1/sqrt(n), so with 16
    times the deposits (from the same distribution of scores) it is about a
    quarter as wide; the assertion asks only that it be narrower.
    """
    rng = np.random.default_rng(seed)
    few, many = rng.beta(a, b, 20), rng.beta(a, b, 320)
    widths = []
    for scores in (few, many):
        low, high, se = val.bootstrap_interval(scores, 500, seed=seed % 1000)
        assert low - 1e-12 <= val.auc(scores) <= high + 1e-12
        assert se > 0
        widths.append(high - low)
    assert widths[1] < widths[0]


def test_bootstrap_is_seeded_and_the_seed_is_in_the_lineage(tmp_path):
    """The same seed gives the same interval; another seed another; the seed is in the lineage."""
    rng = np.random.default_rng(8)
    values = rng.random((60, 80)).astype(np.float32)
    rows, cols = np.divmod(rng.choice(values.size, 25, replace=False), 80)
    one = run_validate(tmp_path, values, rows, cols, name="a", seed=7).result
    two = run_validate(tmp_path, values, rows, cols, name="b", seed=7).result
    three = run_validate(tmp_path, values, rows, cols, name="c", seed=8).result
    assert one["auc_ci"] == two["auc_ci"] != three["auc_ci"]
    assert read_lineage(tmp_path / "a.json")["seed"] == 7


# -- deposits: weak evidence, off the grid, on nodata, another CRS, held out ------------------------


def test_weak_evidence_is_said_in_the_result_the_lineage_and_the_messages(tmp_path):
    """With five deposits the warning appears in the result, the lineage and the feedback."""
    rng = np.random.default_rng(1)
    values = rng.random((30, 40)).astype(np.float32)
    feedback = Feedback()
    job = run_validate(tmp_path, values, [1, 5, 9, 20, 25], [3, 7, 30, 2, 38], feedback=feedback)
    said = "only 5 deposit cells: the AUC, its interval, the curve and the P–A crossing rest on very " \
           "little evidence"
    assert any(said in w["message"] for w in job.result["warnings"])
    assert any(said in w for w in job.result["sets"][0]["warnings"])
    assert any(said in w["message"] and w["category"] == SmallSampleWarning.__name__
               for w in read_lineage(job.json_file)["warnings"])
    assert any(said in w["message"] for w in feedback.warnings)


def test_deposits_off_the_grid_on_nodata_and_sharing_a_cell_are_counted(tmp_path):
    """Each left-out point is counted and named: 1 off the grid, 2 sharing a cell, 1 on nodata."""
    values = np.random.default_rng(2).random((20, 30)).astype(np.float32)
    values[5, 5] = np.nan
    raster = write_raster(tmp_path / "fav.tif", np.where(np.isnan(values), NODATA, values), nodata=NODATA)
    wkt = [*centres([1, 1, 1, 5, 9, 12], [1, 1, 1, 5, 9, 20]), f"POINT ({ORIGIN[0] - 500} {ORIGIN[1]})"]
    feedback = Notes()
    job = validate(raster, write_vector(tmp_path / "d.gpkg", wkt), str(tmp_path / "v.json"),
                   feedback=feedback)
    deposits = job.result["sets"][0]["deposits"]
    assert (deposits["points"], deposits["outside_grid"], deposits["sharing_a_cell"], deposits["on_nodata"],
            deposits["used"]) == (7, 1, 2, 1, 3)
    warned = " ".join(w["message"] for w in feedback.warnings)
    assert "1 of 7 points" in warned and "1 of 4 deposit cells lie on nodata" in warned
    assert any("2 points share a cell" in n for n in feedback.notes)


def test_deposits_in_another_crs_are_reprojected_with_a_note(tmp_path):
    """Points stored in geographic coordinates give the same cells, AUC and interval, with a note."""
    rng = np.random.default_rng(3)
    values = rng.random((40, 50)).astype(np.float32)
    rows, cols = np.divmod(rng.choice(values.size, 15, replace=False), 50)
    raster = write_raster(tmp_path / "fav.tif", values)
    same = validate(raster, write_vector(tmp_path / "d.gpkg", centres(rows, cols)), str(tmp_path / "a.json"))
    moved = write_vector(tmp_path / "d4326.gpkg", centres(rows, cols, "EPSG:4326"), crs="EPSG:4326")
    feedback = Notes()
    other = validate(raster, moved, str(tmp_path / "b.json"), feedback=feedback)
    assert other.result["auc"] == same.result["auc"] and other.result["auc_ci"] == same.result["auc_ci"]
    assert any("were reprojected to the grid's" in n for n in feedback.notes)
    assert other.result["sets"][0]["deposits"]["reprojected"] is True


def test_held_out_deposits_get_their_own_prediction_rate_curve(tmp_path):
    """A held-out set reports the figures a run on that set alone reports, as a prediction-rate curve."""
    rng = np.random.default_rng(5)
    values = rng.random((50, 60)).astype(np.float32)
    raster = write_raster(tmp_path / "fav.tif", values)
    cells = rng.choice(values.size, 40, replace=False)
    rows, cols = np.divmod(cells, 60)
    built = write_vector(tmp_path / "built.gpkg", centres(rows[:25], cols[:25]))
    kept = write_vector(tmp_path / "kept.gpkg", centres(rows[25:], cols[25:]))
    both = validate(raster, built, str(tmp_path / "both.json"), held_out=kept).result
    alone = validate(raster, kept, str(tmp_path / "alone.json"), curve="prediction").result
    held = both["sets"][1]
    assert held["curve"] == alone["curve"] == "prediction-rate"
    for key in ("auc", "auc_ci", "pa_crossing", "nd", "capture", "n_deposits"):
        assert held[key] == alone[key]
    assert both["curve"] == "success-rate" and both["n_deposits"] == 25
    assert held["auc"] == pytest.approx(sklearn_auc(values.astype(np.float64), rows[25:], cols[25:]))


def test_outputs_carry_a_lineage_that_reads_back(tmp_path):
    """The JSON and the CSV each have a lineage that Favour's own reader accepts, naming the inputs."""
    values = np.random.default_rng(6).random((30, 30)).astype(np.float32)
    raster = write_raster(tmp_path / "fav.tif", values)
    deposits = write_vector(tmp_path / "d.gpkg", centres(range(12), range(0, 24, 2)))
    job = validate(raster, deposits, str(tmp_path / "v.json"), str(tmp_path / "v.csv"))
    for path in (job.json_file, job.csv_file):
        record = read_lineage(path)
        assert record["job"] == "validation"
        assert {entry["role"] for entry in record["inputs"]} == {"raster", "deposits"}
    header = (tmp_path / "v.csv").read_text().splitlines()[0]
    assert header == "set,curve,threshold,area_percent,deposits_percent"


# -- hold-outs for weights of evidence --------------------------------------------------------------


@pytest.fixture(scope="module")
def wofe_scene(tmp_path_factory):
    """Two generalised evidence layers (binary; three classes with nodata) and 24 deposits."""
    folder = tmp_path_factory.mktemp("holdouts")
    rng = np.random.default_rng(11)
    shape = (40, 60)
    a = (rng.random(shape) < 0.3).astype(np.uint8)
    b = rng.integers(1, 4, shape).astype(np.uint8)
    b[:3, :4] = 0
    evidence = [write_raster(folder / "a.tif", a), write_raster(folder / "b.tif", b, nodata=0)]
    weight = np.where(a.ravel() == 1, 3.0, 1.0)
    cells = rng.choice(a.size, 24, replace=False, p=weight / weight.sum())
    rows, cols = np.divmod(cells, shape[1])
    deposits = write_vector(folder / "d.gpkg", centres(rows, cols))
    return {"folder": folder, "evidence": evidence, "deposits": deposits, "rows": rows, "cols": cols}


def brute_force_scores(scene, left_out: set, name: str) -> dict:
    """Posterior job run on the deposits without ``left_out``; rank score of each left-out cell in it."""
    folder = scene["folder"]
    keep = [(r, c) for r, c in zip(scene["rows"], scene["cols"]) if (r, c) not in left_out]
    points = write_vector(folder / f"{name}.gpkg", centres([k[0] for k in keep], [k[1] for k in keep]))
    posterior(scene["evidence"], points, str(folder / f"{name}-p.tif"), str(folder / f"{name}-s.tif"),
              unit_area_km2=0.01)
    p = read_raster(folder / f"{name}-p.tif")
    valid = p[~np.isnan(p)]
    return {(r, c): ((valid < p[r, c]).sum() + 0.5 * (valid == p[r, c]).sum()) / valid.size
            for r, c in left_out}


def test_leave_one_out_matches_the_posterior_job_run_without_each_deposit(wofe_scene):
    """Each leave-one-out score equals the rank of that deposit in the posterior job's map without it."""
    scene = wofe_scene
    job = holdouts(scene["evidence"], scene["deposits"], str(scene["folder"] / "loo.json"),
                   unit_area_km2=0.01)
    listed = job.result["deposit_cells"]
    assert len(listed) == 24 and job.result["leave_one_out"]["n_deposits"] == 24
    for k, entry in enumerate(listed):
        cell = (entry["row"], entry["column"])
        brute = brute_force_scores(scene, {cell}, f"loo{k}")
        assert entry["leave_one_out_score"] == pytest.approx(brute[cell], abs=1e-12)
    mean = np.mean([e["leave_one_out_score"] for e in listed])
    assert job.result["leave_one_out"]["auc"] == pytest.approx(mean)


def test_blocked_holdouts_match_the_posterior_job_run_without_each_block(wofe_scene):
    """Each block's deposits score as in the posterior job's map made without that block's deposits."""
    scene = wofe_scene
    job = holdouts(scene["evidence"], scene["deposits"], str(scene["folder"] / "blocks.json"),
                   str(scene["folder"] / "blocks.csv"), unit_area_km2=0.01, block_size=2000.0)
    blocks = job.result["blocks"]
    listed = job.result["deposit_cells"]
    assert blocks["blocks_with_deposits"] == len({e["block"] for e in listed}) > 2
    for number in sorted({e["block"] for e in listed}):
        members = {(e["row"], e["column"]): e for e in listed if e["block"] == number}
        brute = brute_force_scores(scene, set(members), f"block{number}")
        for cell, entry in members.items():
            assert entry["block_score"] == pytest.approx(brute[cell], abs=1e-12)
        squares = {((r + 0.5) * CELL // 2000, (c + 0.5) * CELL // 2000) for r, c in members}
        assert len(squares) == 1  # a block is one 2000 m square of the grid


def test_a_hold_out_that_leaves_a_class_without_deposits_is_reported_not_scored(tmp_path):
    """The lone deposit of class 3 cannot be held out: the posterior job refuses that map too.

    Reference: the posterior job run on the points file without that deposit
    raises the same undefined-weight message that the hold-out reports.
    """
    codes = np.tile(np.array([1, 2], np.uint8), (20, 15))
    codes[15:, 20:] = 3
    evidence = write_raster(tmp_path / "c.tif", codes)
    cells = [(0, 0), (2, 2), (4, 6), (6, 1), (8, 3), (10, 5), (1, 7), (17, 25)]
    rows, cols = zip(*cells)
    deposits = write_vector(tmp_path / "d.gpkg", centres(rows, cols))
    job = holdouts([evidence], deposits, str(tmp_path / "h.json"), unit_area_km2=0.01).result
    skipped = job["leave_one_out"]["skipped"]
    assert [s["deposits"] for s in skipped] == [1]
    lone = [e for e in job["deposit_cells"] if (e["row"], e["column"]) == (17, 25)]
    assert lone[0]["leave_one_out_score"] is None and lone[0]["success_score"] is not None
    assert job["leave_one_out"]["n_deposits"] == len(cells) - 1
    without = write_vector(tmp_path / "d7.gpkg", centres(rows[:-1], cols[:-1]))
    with pytest.raises(InputError) as refused:
        posterior([evidence], without, str(tmp_path / "p.tif"), str(tmp_path / "s.tif"), unit_area_km2=0.01)
    assert str(refused.value) in skipped[0]["reason"]
    assert read_lineage(tmp_path / "h.json")["job"] == "hold-outs"


def test_all_deposits_score_as_the_validation_of_the_posterior(wofe_scene):
    """The hold-out job's success-rate figures equal favour's validation of the posterior raster."""
    scene, folder = wofe_scene, wofe_scene["folder"]
    job = holdouts(scene["evidence"], scene["deposits"], str(folder / "all.json"), unit_area_km2=0.01)
    posterior(scene["evidence"], scene["deposits"], str(folder / "full-p.tif"), str(folder / "full-s.tif"),
              unit_area_km2=0.01)
    checked = validate(str(folder / "full-p.tif"), scene["deposits"], str(folder / "full.json")).result
    for key in ("auc", "auc_ci", "pa_crossing", "nd", "n_deposits"):
        assert job.result["success"][key] == checked[key]
    assert job.result["success"]["capture"] == [{k: c[k] for k in ("top_area_percent", "deposits_percent")}
                                                for c in checked["capture"]]
    assert checked["auc"] == pytest.approx(sklearn_auc(read_raster(folder / "full-p.tif"), scene["rows"],
                                                       scene["cols"]))


# -- redundancy -------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def redundancy_scene(tmp_path_factory):
    """Three leaves: two alike (A, B), one unrelated with nodata (C); their raw rasters."""
    folder = tmp_path_factory.mktemp("redundancy")
    rng = np.random.default_rng(2)
    base = rng.random((200, 300))
    raw = {"a": base * 100, "b": base * 80 + rng.random((200, 300)) * 25, "c": rng.random((200, 300))}
    raw["c"][:20, :30] = np.nan
    for name, values in raw.items():
        write_raster(folder / f"{name}.tif", np.where(np.isnan(values), -1.0, values).astype(np.float32),
                     nodata=-1.0)
    tree = write_tree(folder / "t.json", tree_doc([
        leaf("A", "a.tif", {"type": "linear", "lower": 10, "upper": 90}),
        leaf("B", "b.tif", {"type": "linear", "lower": 0, "upper": 80}),
        leaf("C", "c.tif", {"type": "gaussian", "centre": 0.5, "spread": 0.2})]))
    return {"folder": folder, "tree": tree,
            "raw": {k: v.astype(np.float32).astype(np.float64) for k, v in raw.items()}}


def test_redundancy_r_equals_numpy_corrcoef_on_the_sampled_cells(redundancy_scene):
    """r of each pair equals numpy.corrcoef of μ computed by hand on the lattice's cells (pairwise)."""
    scene = redundancy_scene
    job = redundancy(Tree.load(scene["tree"]), str(scene["folder"] / "r.json"), sample_cells=1000,
                     tree_file=scene["tree"])
    sample = job.result["sample"]
    assert sample["cells"] <= 1000 and sample["kind"] == "regular lattice of cells"
    rows = np.arange(sample["first_row"], 200, sample["step"])
    cols = np.arange(sample["first_column"], 300, sample["step"])
    assert rows.size * cols.size == sample["cells"]
    grid = np.ix_(rows, cols)
    raw = scene["raw"]
    mu = [np.clip((raw["a"][grid] - 10) / 80, 0, 1), np.clip(raw["b"][grid] / 80, 0, 1),
          np.exp(-((raw["c"][grid] - 0.5) ** 2) / (2 * 0.2 ** 2))]
    mu = [m.ravel() for m in mu]
    for i in range(3):
        for j in range(3):
            both = ~np.isnan(mu[i]) & ~np.isnan(mu[j])
            expected = np.corrcoef(mu[i][both], mu[j][both])[0, 1]
            assert job.result["matrix"][i][j] == pytest.approx(expected, abs=1e-9)
            assert job.result["cells"][i][j] == both.sum()
    flagged = [(p["leaf_a"], p["leaf_b"]) for p in job.result["flagged"]]
    assert flagged == [("Favourability > A", "Favourability > B")]
    assert sample["valid"]["Favourability > C"] == np.count_nonzero(~np.isnan(mu[2]))


def test_redundancy_adds_the_posterior_conditional_independence_table(redundancy_scene, wofe_scene):
    """With a posterior given, its lineage's pairwise table is reported as it stands there."""
    folder = wofe_scene["folder"]
    posterior(wofe_scene["evidence"], wofe_scene["deposits"], str(folder / "ci-p.tif"),
              str(folder / "ci-s.tif"), unit_area_km2=0.01)
    job = redundancy(Tree.load(redundancy_scene["tree"]), str(redundancy_scene["folder"] / "ci.json"),
                     sample_cells=500, posterior=str(folder / "ci-p.tif"))
    assert job.result["conditional_independence"] == \
        read_lineage(folder / "ci-p.tif")["summary"]["checks"]["pairwise"]


# -- processing and the command line give the core's numbers ---------------------------------------


@pytest.fixture(scope="module")
def small_map(tmp_path_factory):
    """A 60 x 80 map with ties and 30 deposits, and the core's result on it."""
    folder = tmp_path_factory.mktemp("paths")
    rng = np.random.default_rng(9)
    values = (np.round(rng.random((60, 80)) * 50) / 50).astype(np.float32)
    raster = write_raster(folder / "fav.tif", values)
    rows, cols = np.divmod(rng.choice(values.size, 30, replace=False), 80)
    deposits = write_vector(folder / "d.gpkg", centres(rows, cols))
    core = validate(raster, deposits, str(folder / "core.json"), capture=[5, 10, 20]).result
    return {"folder": folder, "raster": raster, "deposits": deposits, "core": core}


def test_the_command_line_writes_the_keys_the_steering_check_reads(small_map):
    """``validate FAV DEPOSITS --json OUT`` writes auc, auc_ci (two numbers), n_deposits, pa_crossing."""
    out = small_map["folder"] / "cli.json"
    done = run_cli("validate", small_map["raster"], small_map["deposits"], "--json", out, "-q")
    assert done.returncode == 0, done.stderr
    doc = json.loads(out.read_text(encoding="utf-8"))
    assert isinstance(doc["auc"], float) and isinstance(doc["n_deposits"], int)
    assert len(doc["auc_ci"]) == 2 and all(isinstance(x, float) for x in doc["auc_ci"])
    assert len(doc["pa_crossing"]) == 2 and all(isinstance(x, float) for x in doc["pa_crossing"])
    for key in ("auc", "auc_ci", "n_deposits", "pa_crossing", "nd", "capture"):
        assert doc[key] == small_map["core"][key]
    assert os.path.exists(str(out) + ".lineage.json")


def test_processing_gives_the_core_numbers(small_map, favour_provider):
    """favour:validate returns and writes the figures the core call gives on the same inputs."""
    import processing
    from qgis.core import QgsProcessingFeedback

    out = small_map["folder"] / "processing.json"
    result = processing.run("favour:validate", {
        "INPUT": small_map["raster"], "DEPOSITS": small_map["deposits"], "OUTPUT_JSON": str(out),
        "OUTPUT_CSV": str(small_map["folder"] / "processing.csv")}, feedback=QgsProcessingFeedback())
    core = small_map["core"]
    assert result["AUC"] == core["auc"]
    assert [result["AUC_LOW"], result["AUC_HIGH"]] == core["auc_ci"]
    assert [result["PA_PREDICTION"], result["PA_AREA"]] == core["pa_crossing"]
    assert result["N_DEPOSITS"] == core["n_deposits"] and result["ND"] == core["nd"]
    assert json.loads(out.read_text(encoding="utf-8"))["capture"] == core["capture"]


def test_holdouts_and_redundancy_from_processing_and_the_command_line(wofe_scene, redundancy_scene,
                                                                     favour_provider):
    """favour:holdouts, favour:redundancy and their subcommands give the core calls' numbers."""
    import processing
    from qgis.core import QgsProcessingFeedback

    folder = wofe_scene["folder"]
    core = holdouts(wofe_scene["evidence"], wofe_scene["deposits"], str(folder / "h-core.json"),
                    unit_area_km2=0.01, block_size=2000.0).result
    done = processing.run("favour:holdouts", {
        "EVIDENCE": wofe_scene["evidence"], "DEPOSITS": wofe_scene["deposits"], "UNIT_AREA": 0.01,
        "BLOCK_SIZE": 2000.0, "OUTPUT_JSON": str(folder / "h-proc.json")}, feedback=QgsProcessingFeedback())
    assert (done["AUC_SUCCESS"], done["AUC_LEAVE_ONE_OUT"], done["AUC_BLOCKS"]) == \
        (core["success"]["auc"], core["leave_one_out"]["auc"], core["blocks"]["auc"])
    cli = run_cli("holdouts", *wofe_scene["evidence"], "--deposits", wofe_scene["deposits"], "--unit-area",
                  "0.01", "--block-size", "2000", "--json", folder / "h-cli.json", "-q")
    assert cli.returncode == 0, cli.stderr
    written = json.loads((folder / "h-cli.json").read_text(encoding="utf-8"))
    assert [written[k]["auc_ci"] for k in ("success", "leave_one_out", "blocks")] == \
        [core[k]["auc_ci"] for k in ("success", "leave_one_out", "blocks")]

    scene = redundancy_scene
    tree = Tree.load(scene["tree"])
    reference = redundancy(tree, str(scene["folder"] / "r-core.json"), sample_cells=1000).result
    done = processing.run("favour:redundancy", {
        "TREE": scene["tree"], "SAMPLE_CELLS": 1000, "OUTPUT_JSON": str(scene["folder"] / "r-proc.json")},
        feedback=QgsProcessingFeedback())
    assert done["FLAGGED"] == 1
    assert json.loads((scene["folder"] / "r-proc.json").read_text())["matrix"] == reference["matrix"]
    cli = run_cli("redundancy", scene["tree"], "--sample", "1000", "--json", scene["folder"] / "r-cli.json",
                  "-q")
    assert cli.returncode == 0, cli.stderr
    assert json.loads((scene["folder"] / "r-cli.json").read_text())["matrix"] == reference["matrix"]


# -- a cancel at any point changes nothing ------------------------------------------------------


@pytest.mark.parametrize("job", ["validate", "holdouts", "redundancy"])
def test_a_cancel_at_every_checkpoint_changes_nothing(job, tmp_path):
    """Cancelled at each checkpoint in turn, the job leaves every file as it was (tests/refusal_cases.py)."""
    from favour_plugin.core.errors import CancelledError
    from tests.refusal_cases import CancelAt, leftovers, snapshot

    rng = np.random.default_rng(13)
    if job == "redundancy":
        for name in ("a", "b"):
            write_raster(tmp_path / f"{name}.tif", rng.random((300, 200)).astype(np.float32))
        tree = Tree.load(write_tree(tmp_path / "t.json", tree_doc([
            leaf("A", "a.tif", {"type": "linear", "lower": 0, "upper": 1}),
            leaf("B", "b.tif", {"type": "linear", "lower": 0, "upper": 1})])))
        output = tmp_path / "out" / "r.json"

        def run(feedback):
            return redundancy(tree, str(output), sample_cells=2000, feedback=feedback)
    else:
        codes = (rng.random((300, 200)) < 0.4).astype(np.uint8)
        evidence = write_raster(tmp_path / "e.tif", codes)
        rows, cols = np.divmod(rng.choice(codes.size, 20, replace=False), 200)
        deposits = write_vector(tmp_path / "d.gpkg", centres(rows, cols))
        output = tmp_path / "out" / "v.json"

        def run(feedback):
            if job == "validate":
                return validate(evidence, deposits, str(output), str(output)[:-5] + ".csv", feedback=feedback)
            return holdouts([evidence], deposits, str(output), unit_area_km2=0.01, block_size=5000.0,
                            feedback=feedback)
    output.parent.mkdir()
    output.write_text("the user's earlier result")
    before = snapshot(tmp_path)
    counter = CancelAt()
    run(counter)
    assert counter.asked >= 3 and snapshot(tmp_path) != before
    output.write_text("the user's earlier result")
    for stale in output.parent.glob("*.lineage.json"):
        stale.unlink()
    for stale in output.parent.glob("*.csv"):
        stale.unlink()
    before = snapshot(tmp_path)
    for at in range(1, counter.asked + 1):
        with pytest.raises(CancelledError):
            run(CancelAt(at))
        assert snapshot(tmp_path) == before, f"cancelled at checkpoint {at} of {counter.asked}"
        assert leftovers(tmp_path) == [], f"cancelled at checkpoint {at} of {counter.asked}"
