"""Favour's processing algorithms run through processing.run: numbers, outside checks, errors, cancel.

Outside references used here: QGIS's own fuzzify and raster calculator
algorithms (the host's implementations), scikit-fuzzy's membership functions
and scipy's exact Euclidean distance transform.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingFeedback,
    QgsVectorLayer,
)

from favour_plugin.core.lineage import read_lineage
from tests.helpers import ORIGIN, TEST_CRS, read_raster, write_raster, write_vector

pytestmark = pytest.mark.usefixtures("favour_provider")

CELL = 100.0
NODATA = -9999.0
SHAPE = (30, 40)  # rows, columns


class RecordingFeedback(QgsProcessingFeedback):
    """Processing feedback that keeps every note, warning and error it is given."""

    def __init__(self) -> None:
        super().__init__()
        self.lines: list[str] = []

    def pushInfo(self, info):  # noqa: N802 (QGIS API name)
        """Keep a note."""
        self.lines.append(info)

    def pushWarning(self, warning):  # noqa: N802 (QGIS API name)
        """Keep a warning."""
        self.lines.append("warning: " + warning)

    def reportError(self, error, fatalError=False):  # noqa: N802, N803 (QGIS API names)
        """Keep an error."""
        self.lines.append("error: " + error)

    @property
    def text(self) -> str:
        """Return everything pushed so far, one item a line."""
        return "\n".join(self.lines)


def run(algorithm: str, parameters: dict, feedback: QgsProcessingFeedback | None = None) -> dict:
    """Run a processing algorithm by id and return its results."""
    import processing

    return processing.run(algorithm, parameters, feedback=feedback or QgsProcessingFeedback())


def cell_centre(row: int, col: int) -> tuple[float, float]:
    """Return the map coordinates of a cell centre of the test grid."""
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    """Write the module's rasters: a continuous proxy with nodata, class codes, three μ layers."""
    folder = tmp_path_factory.mktemp("processing-data")
    rng = np.random.default_rng(20240611)
    grade = rng.uniform(-20.0, 120.0, SHAPE).astype(np.float32)
    grade[0, :5] = [0.0, 10.0, 50.0, 100.0, 25.0]  # exact bounds and a value inside
    grade[rng.random(SHAPE) < 0.08] = NODATA
    codes = rng.integers(1, 6, SHAPE).astype(np.int16)
    codes[rng.random(SHAPE) < 0.05] = -1
    mus = []
    for i in range(3):
        mu = rng.random(SHAPE).astype(np.float32)
        mu[rng.random(SHAPE) < 0.06] = NODATA
        mu[0, i] = 0.0
        mu[1, i] = 1.0
        mus.append(write_raster(folder / f"mu_{'abc'[i]}.tif", mu, nodata=NODATA))
    return {
        "folder": folder,
        "grade": write_raster(folder / "grade.tif", grade, nodata=NODATA),
        "grade_values": np.where(grade == NODATA, np.nan, grade.astype(np.float64)),
        "codes": write_raster(folder / "codes.tif", codes, nodata=-1),
        "code_values": codes,
        "mu": mus,
    }


def assert_same_cells(ours: np.ndarray, reference: np.ndarray, tolerance: float = 1e-6) -> None:
    """Assert identical nodata and values within ``tolerance`` on valid cells."""
    assert ours.shape == reference.shape
    np.testing.assert_array_equal(np.isnan(ours), np.isnan(reference))
    valid = ~np.isnan(ours)
    assert valid.sum() > 0.5 * ours.size
    np.testing.assert_allclose(ours[valid], reference[valid], rtol=0, atol=tolerance)


# -- favour:membership ---------------------------------------------------------


@pytest.mark.parametrize("lower, upper", [(10.0, 100.0), (100.0, 10.0)], ids=["rising", "falling"])
def test_linear_agrees_with_qgis_native_fuzzify(data, tmp_path, lower, upper):
    """Linear membership equals QGIS's native:fuzzifyrasterlinearmembership, nodata included.

    Reference: QGIS native linear fuzzify, a reference implementation from the host.
    """
    ours = run("favour:membership", {"INPUT": data["grade"], "BAND": 1, "FUNCTION": "linear",
                                     "LOWER": lower, "UPPER": upper,
                                     "OUTPUT": str(tmp_path / "ours.tif")})["OUTPUT"]
    qgis = run("native:fuzzifyrasterlinearmembership", {
        "INPUT": data["grade"], "BAND": 1, "FUZZYLOWBOUND": lower, "FUZZYHIGHBOUND": upper,
        "OUTPUT": str(tmp_path / "qgis.tif")})["OUTPUT"]
    assert_same_cells(read_raster(ours), read_raster(qgis))


def test_gaussian_agrees_with_qgis_native_fuzzify(data, tmp_path):
    """Gaussian membership equals QGIS's native:fuzzifyrastergaussianmembership.

    Reference: QGIS native gaussian fuzzify, a reference implementation from the host.
    QGIS computes μ = exp(−s·(x − m)²) (checked by running it on known values,
    not from its documentation); ours is exp(−(x − c)² / (2σ²)), so c = m and
    σ = 1 / sqrt(2s).
    """
    midpoint, qgis_spread = 45.0, 0.002
    ours = run("favour:membership", {
        "INPUT": data["grade"], "BAND": 1, "FUNCTION": "gaussian", "CENTRE": midpoint,
        "SPREAD": 1.0 / np.sqrt(2.0 * qgis_spread), "OUTPUT": str(tmp_path / "ours.tif")})["OUTPUT"]
    qgis = run("native:fuzzifyrastergaussianmembership", {
        "INPUT": data["grade"], "BAND": 1, "FUZZYMIDPOINT": midpoint, "FUZZYSPREAD": qgis_spread,
        "OUTPUT": str(tmp_path / "qgis.tif")})["OUTPUT"]
    assert_same_cells(read_raster(ours), read_raster(qgis))


def test_logistic_agrees_with_scikit_fuzzy(data, tmp_path):
    """Logistic membership equals scikit-fuzzy's sigmf(x, b=midpoint, c=slope) on the valid cells.

    Reference: scikit-fuzzy 0.5.0 ``skfuzzy.sigmf``, a reference library.
    """
    skfuzzy = pytest.importorskip("skfuzzy")
    ours = run("favour:membership", {"INPUT": data["grade"], "FUNCTION": "logistic", "MIDPOINT": 40.0,
                                     "SLOPE": -0.08, "OUTPUT": str(tmp_path / "ours.tif")})["OUTPUT"]
    x = data["grade_values"]
    expected = np.full(x.shape, np.nan)
    valid = ~np.isnan(x)
    expected[valid] = skfuzzy.sigmf(x[valid], 40.0, -0.08)
    assert_same_cells(read_raster(ours), expected)


def test_trapezoid_agrees_with_scikit_fuzzy(data, tmp_path):
    """Trapezoid membership equals scikit-fuzzy's trapmf(x, [a, b, c, d]) on the valid cells.

    Reference: scikit-fuzzy 0.5.0 ``skfuzzy.trapmf``, a reference library.
    """
    skfuzzy = pytest.importorskip("skfuzzy")
    corners = [0.0, 25.0, 60.0, 110.0]
    ours = run("favour:membership", {"INPUT": data["grade"], "FUNCTION": "trapezoid",
                                     "POINTS": "0, 25, 60, 110",
                                     "OUTPUT": str(tmp_path / "ours.tif")})["OUTPUT"]
    x = data["grade_values"]
    expected = np.full(x.shape, np.nan)
    valid = ~np.isnan(x)
    expected[valid] = skfuzzy.trapmf(x[valid], corners)
    assert_same_cells(read_raster(ours), expected)


def test_piecewise_passes_through_its_points_and_is_straight_between(tmp_path):
    """Piecewise μ equals each point's μ at its break, the mean of two at their midpoint, clamps outside."""
    x = np.array([[-5.0, 0.0, 10.0, 30.0, 5.0, 20.0, 99.0]], dtype=np.float32)
    source = write_raster(tmp_path / "x.tif", x)
    out = run("favour:membership", {"INPUT": source, "FUNCTION": "piecewise",
                                    "POINTS": "0:0.1, 10:0.9, 30:0.5",
                                    "OUTPUT": str(tmp_path / "mu.tif")})["OUTPUT"]
    expected = [0.1, 0.1, 0.9, 0.5, 0.5, 0.7, 0.5]
    np.testing.assert_allclose(read_raster(out)[0], expected, atol=1e-7)


@pytest.mark.parametrize("default, unlisted", [("", np.nan), (0.25, 0.25)], ids=["nodata", "0.25"])
def test_categories_score_listed_codes_and_default_the_rest(data, tmp_path, default, unlisted):
    """Listed class codes get their score, other codes DEFAULT (nodata when empty), nodata stays."""
    out = run("favour:membership", {"INPUT": data["codes"], "FUNCTION": "categories",
                                    "SCORES": "1:0.2, 3:0.9; 5:1", "DEFAULT": default,
                                    "OUTPUT": str(tmp_path / "mu.tif")})["OUTPUT"]
    codes = data["code_values"]
    expected = np.full(codes.shape, unlisted, dtype=np.float64)
    for code, score in ((1, 0.2), (3, 0.9), (5, 1.0)):
        expected[codes == code] = score
    expected[codes == -1] = np.nan
    mu = read_raster(out)
    np.testing.assert_array_equal(np.isnan(mu), np.isnan(expected))
    np.testing.assert_allclose(mu[~np.isnan(mu)], expected[~np.isnan(expected)], atol=1e-7)


def test_membership_lineage_records_the_one_leaf_tree(data, tmp_path):
    """The output's lineage holds the one-leaf tree with the function's parameters and the input's hash."""
    out = run("favour:membership", {"INPUT": data["grade"], "FUNCTION": "linear", "LOWER": 1,
                                    "UPPER": 2, "OUTPUT": str(tmp_path / "mu.tif")})["OUTPUT"]
    record = read_lineage(out)
    leaf = record["tree"]["root"]["children"][0]
    assert leaf["membership"] == {"type": "linear", "lower": 1.0, "upper": 2.0}
    assert leaf["proxy"]["path"] == os.path.abspath(data["grade"])
    assert record["inputs"][0]["files"][0]["path"] == os.path.abspath(data["grade"])
    assert os.path.exists(os.path.splitext(out)[0] + ".qml")


# -- favour:distancemembership -------------------------------------------------

POINT_CELLS = ((3, 4), (20, 31), (27, 8))


def _distance_expected(far: float) -> np.ndarray:
    """Return μ = clip(1 − d / far) with d from scipy's exact Euclidean distance transform.

    Reference: scipy.ndimage.distance_transform_edt, a reference library; the
    points sit on cell centres, so the cells they touch are known exactly.
    """
    from scipy import ndimage

    features = np.zeros(SHAPE, dtype=bool)
    for row, col in POINT_CELLS:
        features[row, col] = True
    distance = ndimage.distance_transform_edt(~features) * CELL
    return np.clip(1.0 - distance / far, 0.0, 1.0)


def test_distance_membership_agrees_with_scipy_distance_transform(data, tmp_path):
    """Distance to points on cell centres, scored by a falling ramp, matches scipy's exact distances."""
    points = write_vector(tmp_path / "points.gpkg",
                          [f"POINT ({x} {y})" for x, y in (cell_centre(r, c) for r, c in POINT_CELLS)])
    out = run("favour:distancemembership", {
        "INPUT": points, "REFERENCE": data["grade"], "FUNCTION": "linear", "LOWER": 1500.0,
        "UPPER": 0.0, "OUTPUT": str(tmp_path / "mu.tif")})["OUTPUT"]
    mu = read_raster(out)
    np.testing.assert_allclose(mu, _distance_expected(1500.0), rtol=0, atol=1e-6)


def _memory_points(cells) -> QgsVectorLayer:
    """Return a memory layer of points on the given cell centres, in the test CRS."""
    layer = QgsVectorLayer("Point", "drill collars", "memory")
    layer.setCrs(QgsCoordinateReferenceSystem.fromProj(TEST_CRS))
    features = []
    for row, col in cells:
        feature = QgsFeature()
        feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(*cell_centre(row, col))))
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


def test_distance_membership_copies_a_memory_layer_and_reproduces(data, tmp_path):
    """A memory layer is copied beside the output, says so, gives the file's cells and reproduces."""
    feedback = RecordingFeedback()
    out = run("favour:distancemembership", {
        "INPUT": _memory_points(POINT_CELLS), "REFERENCE": data["grade"], "FUNCTION": "linear",
        "LOWER": 1500.0, "UPPER": 0.0, "OUTPUT": str(tmp_path / "mu.tif")}, feedback)["OUTPUT"]
    copy = str(tmp_path / "mu.features.gpkg")
    assert "copied to " + copy in feedback.text
    assert os.path.exists(copy)
    assert read_lineage(out)["tree"]["root"]["children"][0]["proxy"]["path"] == copy
    np.testing.assert_allclose(read_raster(out), _distance_expected(1500.0), rtol=0, atol=1e-6)
    again = run("favour:reproduce", {"INPUT": out})
    assert again["IDENTICAL"] is True and again["DIFFERING_CELLS"] == 0


def test_distance_membership_honours_a_subset_filter(data, tmp_path):
    """A filtered file layer is measured on its filtered features only (copied, not read whole)."""
    cells = (*POINT_CELLS, (0, 0))
    kinds = [1, 1, 1, 2]
    path = write_vector(tmp_path / "points.gpkg",
                        [f"POINT ({x} {y})" for x, y in (cell_centre(r, c) for r, c in cells)],
                        fields={"kind": kinds})
    layer = QgsVectorLayer(f"{path}|layername=features", "points", "ogr")
    assert layer.isValid()
    layer.setSubsetString('"kind" = 1')
    feedback = RecordingFeedback()
    out = run("favour:distancemembership", {
        "INPUT": layer, "REFERENCE": data["grade"], "FUNCTION": "linear", "LOWER": 1500.0,
        "UPPER": 0.0, "OUTPUT": str(tmp_path / "mu.tif")}, feedback)["OUTPUT"]
    assert "copied to" in feedback.text
    np.testing.assert_allclose(read_raster(out), _distance_expected(1500.0), rtol=0, atol=1e-6)


# -- favour:combine --------------------------------------------------------------


def _combine(data, tmp_path, name: str, **parameters) -> np.ndarray:
    """Run favour:combine on the three μ layers and return the cells."""
    out = run("favour:combine", {"INPUTS": data["mu"], "OUTPUT": str(tmp_path / f"{name}.tif"),
                                 **parameters})["OUTPUT"]
    return read_raster(out)


def test_combine_gamma_limits_are_product_and_sum(data, tmp_path):
    """γ = 0 gives exactly the product's cells and γ = 1 exactly the sum's (Zimmermann & Zysno 1980)."""
    gamma0 = _combine(data, tmp_path, "g0", OPERATOR="gamma", GAMMA=0.0)
    gamma1 = _combine(data, tmp_path, "g1", OPERATOR="gamma", GAMMA=1.0)
    product = _combine(data, tmp_path, "product", OPERATOR="product")
    total = _combine(data, tmp_path, "sum", OPERATOR="sum")
    assert np.array_equal(gamma0, product, equal_nan=True)
    assert np.array_equal(gamma1, total, equal_nan=True)
    assert not np.allclose(product[~np.isnan(product)], total[~np.isnan(total)])
    middle = _combine(data, tmp_path, "g5", OPERATOR="gamma", GAMMA=0.5)
    valid = ~np.isnan(middle)
    assert np.all(middle[valid] >= product[valid] - 1e-7)
    assert np.all(middle[valid] <= total[valid] + 1e-7)


@pytest.mark.parametrize("operator, weights, expression", [
    ("and", "", 'min(min("mu_a@1", "mu_b@1"), "mu_c@1")'),
    ("or", "", 'max(max("mu_a@1", "mu_b@1"), "mu_c@1")'),
    ("product", "", '"mu_a@1" * "mu_b@1" * "mu_c@1"'),
    ("sum", "", '1 - (1 - "mu_a@1") * (1 - "mu_b@1") * (1 - "mu_c@1")'),
    ("weighted_mean", "2, 1, 1", '(2 * "mu_a@1" + "mu_b@1" + "mu_c@1") / 4'),
])
def test_combine_agrees_with_qgis_raster_calculator(data, tmp_path, operator, weights, expression):
    """Each operator, nodata propagated, equals the same formula in QGIS's raster calculator.

    Reference: QGIS qgis:rastercalculator, a reference implementation from the host
    (formulas: Zadeh 1965 for and/or; Bonham-Carter 1994, ch. 9 for product, sum, weighted mean).
    """
    ours = _combine(data, tmp_path, "ours", OPERATOR=operator, WEIGHTS=weights)
    reference = run("qgis:rastercalculator", {
        "EXPRESSION": expression, "LAYERS": data["mu"], "CELLSIZE": 0,
        "OUTPUT": str(tmp_path / "qgis.tif")})["OUTPUT"]
    assert_same_cells(ours, read_raster(reference))


def test_combine_ignore_rule_uses_the_inputs_present(data, tmp_path):
    """Under NODATA_RULE ignore, "and" is the minimum of the inputs present; nodata only where all are."""
    ours = _combine(data, tmp_path, "ignore", OPERATOR="and", NODATA_RULE="ignore")
    stack = np.stack([read_raster(p) for p in data["mu"]])
    all_missing = np.all(np.isnan(stack), axis=0)
    expected = np.where(all_missing, np.nan, np.fmin.reduce(stack, axis=0))
    assert np.isnan(stack).any(axis=0).sum() > np.isnan(ours).sum()
    assert_same_cells(ours, expected, tolerance=0.0)


def test_combine_aligns_another_grid_and_warns(data, tmp_path):
    """An input at another cell size is resampled onto the first input's grid, with a warning."""
    fine = write_raster(tmp_path / "fine.tif", np.full((60, 80), 0.5, dtype=np.float32), cell=50.0)
    feedback = RecordingFeedback()
    out = run("favour:combine", {"INPUTS": [data["mu"][0], fine], "OPERATOR": "or",
                                 "OUTPUT": str(tmp_path / "out.tif")}, feedback)["OUTPUT"]
    ds = gdal.Open(out)
    assert (ds.RasterXSize, ds.RasterYSize, ds.GetGeoTransform()[1]) == (SHAPE[1], SHAPE[0], CELL)
    assert "warning:" in feedback.text and "resampling" in feedback.text


# -- favour:reproduce --------------------------------------------------------------


def test_reproduce_finds_identical_cells_then_names_a_changed_input(tmp_path):
    """Reproduce reports identical cells, and after one input cell changes, the cell and the input."""
    x = np.linspace(0.0, 100.0, 200, dtype=np.float32).reshape(10, 20)
    source = write_raster(tmp_path / "grade.tif", x)
    out = run("favour:membership", {"INPUT": source, "FUNCTION": "linear", "LOWER": 0.0,
                                    "UPPER": 100.0, "OUTPUT": str(tmp_path / "mu.tif")})["OUTPUT"]
    first = run("favour:reproduce", {"INPUT": out})
    assert first == {"IDENTICAL": True, "DIFFERING_CELLS": 0, "CHANGED_INPUTS": ""}
    ds = gdal.Open(source, gdal.GA_Update)
    ds.GetRasterBand(1).WriteArray(np.array([[12.5]], dtype=np.float32), 3, 4)
    ds = None
    feedback = RecordingFeedback()
    second = run("favour:reproduce", {"INPUT": out}, feedback)
    assert second["IDENTICAL"] is False
    assert second["DIFFERING_CELLS"] == 1
    assert os.path.abspath(source) in second["CHANGED_INPUTS"]
    assert "Membership > grade" in second["CHANGED_INPUTS"]
    assert "1 of 200 cells differ" in feedback.text


# -- bad parameters and cancel ----------------------------------------------------------


def test_parameter_keys_equal_their_constants():
    """Every algorithm's ids are lowercase and its parameter keys UPPER_CASE attributes of its class."""
    from qgis.core import QgsApplication

    provider = QgsApplication.processingRegistry().providerById("favour")
    ids = {algorithm.name() for algorithm in provider.algorithms()}
    assert {"membership", "distancemembership", "combine", "reproduce"} <= ids
    for algorithm in provider.algorithms():
        assert algorithm.name() == algorithm.name().lower()
        for definition in algorithm.parameterDefinitions():
            key = definition.name()
            assert key == key.upper() and getattr(algorithm, key) == key
        assert "not a resource estimate" in algorithm.shortHelpString()




def test_a_temporary_output_is_announced_before_the_work(data):
    """An output left to QGIS's temporary folder gets a warning that it vanishes when QGIS closes."""
    feedback = RecordingFeedback()
    result = run("favour:membership", {"INPUT": data["grade"], "FUNCTION": "linear", "LOWER": 0.0,
                                       "UPPER": 100.0, "OUTPUT": "TEMPORARY_OUTPUT"}, feedback)
    assert os.path.exists(result["OUTPUT"])
    assert "warning: " + result["OUTPUT"] + " is in a temporary folder, which is emptied when QGIS " \
           "closes" in feedback.text


def test_an_output_of_ones_own_gets_no_temporary_warning(data, tmp_path):
    """An output in a folder of the user's own carries no such warning (pytest's folder aside)."""
    from favour_plugin.processing.base import is_temporary

    assert is_temporary(str(tmp_path / "mu.tif"))  # pytest works under the system's /tmp
    assert not is_temporary(os.path.expanduser("~/Documents/Favour/mu.tif"))
