"""Deposit values and rank counts read with each tile once: every path gives the same counts.

Outside reference: numpy's own comparisons over the whole array, and
sklearn.metrics.roc_auc_score for the AUC the job reports from them.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from favour_plugin.core.feedback import Feedback
from favour_plugin.raster import rank_pass
from favour_plugin.raster.blocks import BLOCK_COLS, BLOCK_ROWS, Window, iter_windows
from favour_plugin.raster.gdalenv import gdal_job
from favour_plugin.raster.grid import Grid
from favour_plugin.raster.sources import open_raster, raster_source
from favour_plugin.raster.validation_jobs import native_values
from tests.helpers import write_raster

NODATA = -9999.0
TILED = ("TILED=YES", "BLOCKXSIZE=64", "BLOCKYSIZE=128")


def field(shape, seed) -> np.ndarray:
    """A float32 field with ties (values rounded to 1/400), nodata patches and scattered nodata."""
    rng = np.random.default_rng(seed)
    values = (np.round(rng.beta(2, 3, shape) * 400) / 400).astype(np.float32)
    values[:40, :70] = np.nan
    values[rng.random(shape) < 0.01] = np.nan
    return values


def rank(tmp_path, values, cells, options=(), keep_bytes=None, name="map"):
    """Write ``values`` with ``options``; return rank_pass.rank_deposits' values and counts."""
    stored = np.where(np.isnan(values), NODATA, values).astype(np.float32)
    path = write_raster(tmp_path / f"{name}.tif", stored, nodata=NODATA, options=options)
    feedback = Feedback()
    with gdal_job():
        grid = Grid.from_dataset(open_raster(path, name), name)
        spec = raster_source(path, 1, grid, "nearest", name, feedback, str(tmp_path))
        nested = rank_pass.blocks_nest_in_tiles(spec)
        found, counts = rank_pass.rank_deposits(native_values(spec), spec, grid, cells, feedback,
                                                keep_bytes=keep_bytes)
    return nested, found, counts


def expected_counts(values, targets):
    """Cells below and equal to each target, by numpy's comparisons over the whole array."""
    valid = values[~np.isnan(values)]
    return ([np.count_nonzero(valid < t) for t in targets], [np.count_nonzero(valid == t) for t in targets],
            valid.size)


@pytest.mark.parametrize("keep_bytes", [None, 0, 3 * rank_pass.TILE**2 * 4])
def test_tiles_kept_or_read_again_give_numpys_counts_and_the_strip_paths(tmp_path, keep_bytes):
    """Tiled and striped copies, with every deposit tile kept, none, or three: the same values and counts.

    The grid (700 x 2300 cells) has trimmed tiles and windows at its right and
    bottom edges; two deposit sets share cells and tiles.
    """
    values = field((700, 2300), 3)
    rng = np.random.default_rng(8)
    rows, cols = rng.integers(0, 700, 90), rng.integers(0, 2300, 90)
    cells = [(rows[:60], cols[:60]), (np.r_[rows[50:], 699], np.r_[cols[50:], 2299])]
    nested, found, counts = rank(tmp_path, values, cells, TILED, keep_bytes, "tiled")
    flat, found_flat, counts_flat = rank(tmp_path, values, cells, name="strips")
    assert nested and not flat
    for got, (r, c) in zip(found, cells):
        assert np.array_equal(got, values[r, c], equal_nan=True)
    for got, want in zip(found_flat, found):
        assert got.dtype == np.float32 and np.array_equal(got, want, equal_nan=True)
    below, equal, valid = expected_counts(values, counts.targets)
    for c in (counts, counts_flat):
        assert np.array_equal(c.below, below) and np.array_equal(c.equal, equal) and c.valid == valid
    assert np.array_equal(counts.histogram, counts_flat.histogram)
    assert (counts.minimum, counts.maximum) == (np.nanmin(values), np.nanmax(values))


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 4), st.integers(1, 3000), st.integers(0, 2**32 - 1))
def test_pieces_cover_each_cell_of_a_window_once(rows_of_windows, width, seed):
    """A window's runs and kept tiles cover it exactly, each kept tile in its own place, in order."""
    height = rows_of_windows * BLOCK_ROWS - 17
    tiles_across = -(-width // rank_pass.TILE)
    rng = np.random.default_rng(seed)
    tiles = tiles_across * -(-height // rank_pass.TILE)
    kept = {int(t): None for t in rng.choice(tiles, int(rng.integers(0, tiles + 1)), replace=False)}
    for window in iter_windows(width, height):
        cover = np.zeros(window.shape, dtype=int)
        for piece, number in rank_pass._pieces(window, kept, tiles_across):
            assert isinstance(piece, Window) and piece.width > 0 and piece.height > 0
            if number is not None:  # a kept tile, in its own place
                assert number in kept
                tile = rank_pass.TILE
                assert piece.row_off % tile == 0 and piece.col_off % tile == 0
                assert piece.row_off // tile * tiles_across + piece.col_off // tile == number
                assert piece.width <= tile and piece.height <= tile
            cover[piece.row_off - window.row_off:piece.row_off - window.row_off + piece.height,
                  piece.col_off - window.col_off:piece.col_off - window.col_off + piece.width] += 1
        assert (cover == 1).all()
    assert BLOCK_ROWS % rank_pass.TILE == 0 and BLOCK_COLS % rank_pass.TILE == 0
