"""Blocks: the windows every streamed pass reads, computes and writes one at a time."""

from __future__ import annotations

from collections.abc import Iterator
from typing import NamedTuple

# 256 rows match the writer's 256 x 256 tiles, so every written block fills
# whole tiles; 1024 columns keep a float64 block at 2 MiB whatever the grid's
# width, so memory does not grow with the grid.
BLOCK_ROWS = 256
BLOCK_COLS = 1024


class Window(NamedTuple):
    """A rectangle of cells: column and row offsets, width and height in cells."""

    col_off: int
    row_off: int
    width: int
    height: int

    @property
    def shape(self) -> tuple[int, int]:
        """Return (rows, columns), the shape of the block's arrays."""
        return (self.height, self.width)


def iter_windows(width: int, height: int, block_rows: int = BLOCK_ROWS,
                 block_cols: int = BLOCK_COLS) -> Iterator[Window]:
    """Yield the windows covering a ``width`` x ``height`` grid, row of blocks by row.

    Windows at the right and bottom edges are trimmed to the grid.
    """
    if width <= 0 or height <= 0:
        raise ValueError(f"a grid needs positive width and height, got {width} x {height}")
    for row in range(0, height, block_rows):
        rows = min(block_rows, height - row)
        for col in range(0, width, block_cols):
            yield Window(col, row, min(block_cols, width - col), rows)


def count_windows(width: int, height: int, block_rows: int = BLOCK_ROWS,
                  block_cols: int = BLOCK_COLS) -> int:
    """Return how many windows :func:`iter_windows` yields for this grid."""
    return (-(-height // block_rows)) * (-(-width // block_cols))
