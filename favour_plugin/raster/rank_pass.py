"""The values at deposit cells and the ranks of those values among all cells, with each tile read once.

Exact ranks need the deposit values before the cells are counted
(:class:`~favour_plugin.core.validation_counts.RankCounts`), so the tiles
holding deposits are read first. :func:`rank_deposits` keeps those tiles
in memory (up to :data:`KEEP_TILE_BYTES`); once the deposit values are
known it counts the raster window by window, taking the kept tiles from
memory and reading only the runs of tiles between them, so no tile is
decompressed twice unless the budget ran out. This holds when the file's own blocks fit inside our
256 x 256 tiles (Favour writes 256 x 256 tiles); for any other layout
(strips, larger tiles, a VRT) the deposit cells are read in small windows
first and then the whole raster once (:func:`read_at_cells`), as a tile
read would decompress more than it keeps.

The counts are sums over cells, so every order of reading gives the same
result; the tests compare the two paths and a budget that keeps nothing.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from osgeo import gdal

from ..core.feedback import Feedback
from ..core.validation_counts import RankCounts
from .blocks import BLOCK_COLS, BLOCK_ROWS, Window
from .grid import Grid
from .sources import SourceSpec
from .streaming import map_windows

#: Side of the tiles deposits are grouped by, in cells (the writer's tiles).
TILE = 256
#: Tiles holding deposits kept, decompressed, between reading the deposit values and counting them.
#: 48 MiB is 192 float32 tiles; past it a tile is read again in the pass.
KEEP_TILE_BYTES = 48 * 2**20

assert BLOCK_ROWS % TILE == 0 and BLOCK_COLS % TILE == 0, "windows must be made of whole tiles"

Read = Callable  # read(reader, window) -> list of arrays, one per source


def _tile_groups(rows: np.ndarray, cols: np.ndarray, grid: Grid) -> list[tuple[int, np.ndarray]]:
    """Return (tile number, indices of the cells in it), tiles in row-major order."""
    tile = (rows // TILE) * (-(-grid.width // TILE)) + cols // TILE
    order = np.argsort(tile, kind="stable")
    cuts = np.flatnonzero(np.diff(tile[order])) + 1
    return [(int(tile[members[0]]), members) for members in np.split(order, cuts)]


def read_at_cells(read: Read, rows: np.ndarray, cols: np.ndarray, grid: Grid, feedback: Feedback,
                  threads: int | None = None, span: tuple[float, float] = (0.0, 1.0)) -> list[np.ndarray]:
    """Return the values of each source at the given cells, read a small window at a time.

    ``read(reader, window)`` returns a list of arrays, one per source, of
    the window. Cells are grouped by 256 x 256 tile and each group's
    bounding box is read once, so a tile is decompressed once however many
    cells it holds.
    """
    rows, cols = np.asarray(rows, dtype=np.int64), np.asarray(cols, dtype=np.int64)
    if rows.size == 0:
        return []
    items = []
    for _, members in _tile_groups(rows, cols, grid):
        r0, c0 = int(rows[members].min()), int(cols[members].min())
        items.append((Window(c0, r0, int(cols[members].max()) - c0 + 1, int(rows[members].max()) - r0 + 1),
                      members))

    def work(item, reader):
        window, members = item
        return [block[rows[members] - window.row_off, cols[members] - window.col_off]
                for block in read(reader, window)]

    found = None
    for (_, members), values in map_windows(work, grid, feedback, threads, span, items=items):
        if found is None:
            found = [np.empty(rows.size, dtype=v.dtype) for v in values]
        for out, v in zip(found, values):
            out[members] = v
    return found


def blocks_nest_in_tiles(spec: SourceSpec) -> bool:
    """Return True when the band's own blocks fit inside our tiles (a tiled GeoTIFF of 256 or less)."""
    ds = gdal.Open(spec.target, gdal.GA_ReadOnly)
    if ds is None or ds.GetDriver().ShortName == "VRT":
        return False
    width, height = ds.GetRasterBand(spec.band).GetBlockSize()
    return width < ds.RasterXSize and TILE % width == 0 and TILE % height == 0


def rank_deposits(read: Read, spec: SourceSpec, grid: Grid, cells: list[tuple[np.ndarray, np.ndarray]],
                  feedback: Feedback, threads: int | None = None, span: tuple[float, float] = (0.0, 1.0),
                  keep_bytes: int | None = None) -> tuple[list[np.ndarray], RankCounts]:
    """Return the values at each set of deposit cells, and every cell's counts against those values.

    Parameters
    ----------
    read : callable
        ``read(reader, window)`` giving ``[values]`` with nodata as NaN
        (:func:`favour_plugin.raster.validation_jobs.native_values`).
    spec : SourceSpec
        The band read (its block layout picks the path; module notes).
    grid : Grid
        The raster's grid.
    cells : list of (rows, cols)
        Each deposit set's cells (at least one cell in all).
    keep_bytes : int, optional
        Tiles kept in memory at most (default :data:`KEEP_TILE_BYTES`; 0
        reads every deposit tile twice).

    Returns
    -------
    values : list of ndarray
        Per set, the value at each cell (NaN on nodata).
    counts : RankCounts
        Below and equal counts of the distinct valid deposit values, and the
        histogram of every valid cell.
    """
    rows = np.concatenate([np.asarray(r, dtype=np.int64) for r, _ in cells])
    cols = np.concatenate([np.asarray(c, dtype=np.int64) for _, c in cells])
    ends = np.cumsum([len(r) for r, _ in cells])[:-1]
    lo, hi = span
    if not blocks_nest_in_tiles(spec):
        found = read_at_cells(read, rows, cols, grid, feedback, threads, (lo, lo + 0.05 * (hi - lo)))[0]
        counts = _counts_of(found)
        for _, block in map_windows(lambda window, reader: counts.count(read(reader, window)[0]), grid,
                                    feedback, threads, (lo + 0.05 * (hi - lo), hi)):
            counts.add(block)
        return np.split(found, ends), counts
    tiles_across = -(-grid.width // TILE)
    groups = _tile_groups(rows, cols, grid)
    tile_cells = sum(int(np.prod(_tile_window(t, tiles_across, grid).shape)) for t, _ in groups)
    split = lo + (hi - lo) * tile_cells / (grid.cells + tile_cells)  # progress in proportion to cells read
    found = None
    kept: dict[int, np.ndarray] = {}
    room = KEEP_TILE_BYTES if keep_bytes is None else keep_bytes

    def read_tile(item, reader):
        number, members = item
        window = _tile_window(number, tiles_across, grid)
        block = read(reader, window)[0]
        return block, block[rows[members] - window.row_off, cols[members] - window.col_off]

    for (number, members), (block, values) in map_windows(read_tile, grid, feedback, threads, (lo, split),
                                                           items=groups):
        if found is None:
            found = np.full(rows.size, np.nan, dtype=values.dtype)
        found[members] = values
        if block.nbytes <= room:
            kept[number] = block
            room -= block.nbytes
    counts = _counts_of(found)

    def count(window, reader):
        pieces = _pieces(window, kept, tiles_across)
        if len(pieces) == 1 and pieces[0][1] is None:
            return counts.count(read(reader, window)[0])
        # a window holding kept tiles: those come from memory (and are let go), the rest is read in runs
        block = np.empty(window.shape, dtype=found.dtype)
        for piece, number in pieces:
            rows_at = slice(piece.row_off - window.row_off, piece.row_off - window.row_off + piece.height)
            cols_at = slice(piece.col_off - window.col_off, piece.col_off - window.col_off + piece.width)
            block[rows_at, cols_at] = read(reader, piece)[0] if number is None else kept.pop(number)
        return counts.count(block)

    for _, block in map_windows(count, grid, feedback, threads, (split, hi)):
        counts.add(block)
    return np.split(found, ends), counts


def _counts_of(values: np.ndarray) -> RankCounts:
    """Return empty counts against the distinct valid values found at deposit cells."""
    return RankCounts(np.unique(values[~np.isnan(values)]))


def _tile_window(number: int, tiles_across: int, grid: Grid) -> Window:
    """Return the window of tile ``number`` (row-major), trimmed to the grid."""
    row, col = divmod(number, tiles_across)
    r0, c0 = row * TILE, col * TILE
    return Window(c0, r0, min(TILE, grid.width - c0), min(TILE, grid.height - r0))


def _pieces(window: Window, kept: dict, tiles_across: int) -> list[tuple[Window, int | None]]:
    """Split a window into the kept tiles it holds and runs of whole tiles between them.

    Returns (piece, tile number) for a kept tile and (piece, None) for a
    run to read; a window holding no kept tile is one run, itself.
    """
    pieces: list[tuple[Window, int | None]] = []
    end = window.col_off + window.width
    for r0 in range(window.row_off, window.row_off + window.height, TILE):
        height = min(TILE, window.row_off + window.height - r0)
        start = None
        for c0 in range(window.col_off, end, TILE):
            number = (r0 // TILE) * tiles_across + c0 // TILE
            if number in kept:
                if start is not None:
                    pieces.append((Window(start, r0, c0 - start, height), None))
                pieces.append((Window(c0, r0, min(TILE, end - c0), height), number))
                start = None
            elif start is None:
                start = c0
        if start is not None:
            pieces.append((Window(start, r0, end - start, height), None))
    if all(number is None for _, number in pieces):
        return [(window, None)]
    return pieces
