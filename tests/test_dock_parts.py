"""Plain parts of the dock: starting memberships and the histogram summary (no QGIS needed).

Properties checked (common practice, no source): every starting function is
one the tree accepts (``parse_membership``, the same validation the engine
uses), rises or falls across the data's range as asked, and the histogram
counts every sampled value once, as ``numpy.histogram`` and ``numpy.unique``
count them.
"""

from __future__ import annotations

import numpy as np
import pytest

from favour_plugin.core.membership import MEMBERSHIP_TYPES, parse_membership
from favour_plugin.gui.defaults import code_key, starting_for_proxy, starting_membership
from favour_plugin.gui.sampling import MAX_CLASSES, summarise

RAMPS = ("linear", "logistic", "piecewise")


@pytest.mark.parametrize("kind", MEMBERSHIP_TYPES)
@pytest.mark.parametrize("low, high", [(0.0, 1.0), (-14.3, 10.2), (200.0, 7000.0), (1e-4, 3e-4)])
def test_every_starting_membership_is_valid(kind, low, high):
    """Each type's starting parameters pass the tree's own validation."""
    spec = starting_membership(kind, low, high, classes=[1.0, 3.0, 6.0])
    assert spec["type"] == kind
    parse_membership(spec)


@pytest.mark.parametrize("kind", RAMPS)
@pytest.mark.parametrize("falling", [False, True])
def test_ramps_rise_or_fall_across_the_range_as_asked(kind, falling):
    """μ at the high end exceeds μ at the low end for a rising start, and the reverse for falling."""
    low, high = 12.0, 480.0
    mu = parse_membership(starting_membership(kind, low, high, falling=falling))(np.array([low, high]))
    assert (mu[1] < mu[0]) if falling else (mu[1] > mu[0])


def test_a_new_distance_proxy_starts_near_one_at_the_features():
    """A vector proxy starts at μ 1 on its features, falling to 0 by 1 km."""
    mu = parse_membership(starting_for_proxy(True))(np.array([0.0, 500.0, 1000.0, 5000.0]))
    assert mu.tolist() == [1.0, 0.5, 0.0, 0.0]


def test_class_codes_are_written_as_the_tree_file_writes_them():
    """Whole codes lose their '.0'; others keep their decimals."""
    assert [code_key(3.0), code_key(-2.0), code_key(2.5)] == ["3", "-2", "2.5"]


def test_summary_counts_every_value_and_finds_classes():
    """Class counts equal numpy.unique's; histogram counts sum to the number of finite values."""
    rng = np.random.default_rng(5)
    codes = rng.choice([1, 2, 3, 6], size=5000, p=[0.1, 0.2, 0.3, 0.4]).astype(float)
    codes[:50] = np.nan
    sample = summarise(codes)
    values, counts = np.unique(codes[np.isfinite(codes)], return_counts=True)
    assert sample.classes == dict(zip(values.tolist(), counts.tolist()))
    assert sample.count == 4950 == int(sample.counts.sum())


def test_summary_of_continuous_values_has_no_classes_and_clips_the_tails():
    """Continuous values give no class table; the tails beyond the percentiles land in the end bins."""
    rng = np.random.default_rng(6)
    values = np.concatenate([rng.normal(0, 1, 20000), [1e6, -1e6]])
    sample = summarise(values)
    assert sample.classes is None
    assert sample.count == int(sample.counts.sum()) == values.size
    assert sample.low == pytest.approx(np.percentile(values, 0.5))
    assert sample.high < 10 and sample.fit[0] < 0 < sample.fit[1]
    many = summarise(np.arange(MAX_CLASSES + 1, dtype=float))
    assert many.classes is None


def test_summary_of_nothing_is_empty_not_an_error():
    """No valid value gives an empty histogram over [0, 1]."""
    sample = summarise(np.array([np.nan, np.inf]))
    assert sample.count == 0 and sample.classes is None and (sample.low, sample.high) == (0.0, 1.0)


# -- every class of the whole raster (raster/classes.py) -------------------------------------------


def _class_raster(tmp_path, dtype, nodata=None, name="classes.tif"):
    """A 700 x 1300 class raster (several blocks) whose class 42 holds three cells, far apart."""
    from tests.helpers import write_raster

    rng = np.random.default_rng(8)
    values = rng.choice([1, 3, 6, 9], size=(700, 1300), p=[0.4, 0.3, 0.2, 0.1]).astype(dtype)
    values[5, 7] = values[350, 1299] = values[699, 640] = 42
    if nodata is not None:
        values[100:140, 200:260] = nodata
    return write_raster(tmp_path / name, values, nodata=nodata), values


@pytest.mark.parametrize("dtype, nodata", [(np.uint8, 0), (np.int16, -99), (np.int32, -9999),
                                           (np.int32, None)])
def test_class_counts_are_numpys_unique_over_the_whole_raster(tmp_path, dtype, nodata):
    """count_classes equals numpy.unique of every valid cell, the rare class a sample misses included."""
    from favour_plugin.gui.sampling import summarise
    from favour_plugin.raster.checks import sample_values
    from favour_plugin.raster.classes import count_classes

    path, values = _class_raster(tmp_path, dtype, nodata)
    valid = values[values != nodata] if nodata is not None else values.ravel()
    codes, counts = np.unique(valid, return_counts=True)
    found = count_classes(path)
    assert found.as_dict() == dict(zip(codes.astype(float).tolist(), counts.tolist()))
    assert found.total == valid.size and found.source == "every block"
    assert 42.0 not in (summarise(sample_values(path, max_cells=20_000)).classes or {})


def test_class_counts_come_from_the_attribute_table_when_the_band_has_one(tmp_path):
    """A band whose attribute table gives values and pixel counts is read from the table, nodata row out."""
    from osgeo import gdal

    from favour_plugin.raster.classes import count_classes

    path, _ = _class_raster(tmp_path, np.uint8, 0)
    ds = gdal.Open(path, gdal.GA_Update)
    rat = gdal.RasterAttributeTable()
    rat.CreateColumn("value", gdal.GFT_Integer, gdal.GFU_MinMax)
    rat.CreateColumn("count", gdal.GFT_Integer, gdal.GFU_PixelCount)
    for row, (code, count) in enumerate([(0, 2400), (1, 10), (5, 20), (7, 0)]):
        rat.SetValueAsInt(row, 0, code)
        rat.SetValueAsInt(row, 1, count)
    ds.GetRasterBand(1).SetDefaultRAT(rat)
    ds = None
    found = count_classes(path)
    assert (found.as_dict(), found.source) == ({1.0: 10, 5.0: 20}, "attribute table")


def test_continuous_data_is_refused_with_a_message_not_counted(tmp_path):
    """A float band, and an integer band of more distinct values than the cap, are named continuous."""
    from favour_plugin.core.errors import InputError
    from favour_plugin.raster.classes import count_classes
    from tests.helpers import write_raster

    floats = write_raster(tmp_path / "f.tif", np.random.default_rng(1).random((50, 60)).astype(np.float32))
    with pytest.raises(InputError, match=r"holds Float32 values, which are continuous data; a class table "
                                         r"lists the codes of an integer band"):
        count_classes(floats)
    many = write_raster(tmp_path / "m.tif", np.arange(300 * 400, dtype=np.int32).reshape(300, 400))
    with pytest.raises(InputError, match="more than 1000 distinct values; that is continuous data"):
        count_classes(many)
    five, _ = _class_raster(tmp_path, np.int16, name="five.tif")  # 1, 3, 6, 9 and 42
    with pytest.raises(InputError, match="more than 4 distinct values"):
        count_classes(five, max_classes=4)
    assert len(count_classes(five, max_classes=5).codes) == 5
