"""A lineage's run replayed: its tree evaluated again and every cell compared with the file."""
from __future__ import annotations

import os
import shutil
import tempfile
from dataclasses import dataclass

import numpy as np

from ..core import lineage as lin
from ..core.errors import (
    GridMismatchError,
    LineageError,
)
from ..core.feedback import Feedback, ScaledFeedback
from ..core.tree import Tree
from .blocks import count_windows, iter_windows
from .gdalenv import gdal_job
from .grid import Grid
from .sources import BlockReader, SourceSpec, open_raster

#: Jobs whose output is one tree evaluated on a grid, which :func:`reproduce` can run again.
TREE_JOBS = ("evaluate-tree", "membership", "distance-membership", "combine")


@dataclass
class Reproduction:
    """The outcome of evaluating a lineage's tree again and comparing every cell."""

    output: str
    identical: bool
    cells: int
    differing_cells: int
    nodata_mismatches: int
    max_abs_difference: float
    changed_inputs: list[dict]
    rebuilt: bool = False

    def summary(self) -> str:
        """Return a few lines saying whether the cells are identical and what changed."""
        lines = []
        if self.rebuilt:
            lines.append(f"{self.output} was missing; rebuilt it from its lineage")
        elif self.identical:
            lines.append(f"identical: all {self.cells} cells of {self.output} are reproduced exactly")
        else:
            lines.append(
                f"different: {self.differing_cells} of {self.cells} cells differ "
                f"(largest difference {self.max_abs_difference:.6g}, "
                f"{self.nodata_mismatches} differ in nodata)")
        for change in self.changed_inputs:
            what = "is missing" if change["change"] == "missing" else "has changed since the run"
            lines.append(f"input {change['path']} ({change['node'] or 'tree file'}) {what}")
        if not self.changed_inputs:
            lines.append("every input file has the size and SHA-256 recorded in the lineage")
        return "\n".join(lines)


def reproduce(output: str, feedback: Feedback | None = None, threads: int | None = None
              ) -> Reproduction:
    """Evaluate the tree recorded in ``output``'s lineage again and compare every cell.

    Inputs whose size or SHA-256 differ from the lineage are named. If the
    output itself is missing it is rebuilt from the lineage.

    Raises
    ------
    LineageError
        No lineage, or one that cannot be read.
    FavourError
        The evaluation itself failed (a missing input, say).
    """
    from .engine import evaluate_tree  # here, not above: the engine re-exports this module's names

    feedback = feedback or Feedback()
    output = os.path.abspath(output)
    record = lin.read_lineage(output)
    if record["job"] not in TREE_JOBS:
        raise LineageError(f"{output} comes from a {record['job']!r} job; reproduce evaluates the tree of "
                           f"a tree evaluation again ({', '.join(TREE_JOBS)}), so run that job again instead")
    changes = lin.changed_inputs(record)
    tree_doc = record.get("tree")
    if not isinstance(tree_doc, dict) or not isinstance(record.get("grid"), dict):
        raise LineageError(f"the lineage of {output} holds no tree or no grid")
    tree = Tree.from_dict(tree_doc, base_dir=record.get("base_dir"))
    grid = Grid.from_dict(record["grid"])
    if record.get("tree_file"):
        tree_path = record["tree_file"]["path"]
        if not os.path.isfile(tree_path) or lin.file_digest(tree_path) != record["tree_file"]["sha256"]:
            feedback.info(f"the tree file {tree_path} has changed since the run; "
                          "the lineage's own copy of the tree is used")
    if not os.path.exists(output):
        evaluate_tree(tree, output, None, feedback, grid=grid, threads=threads, job=record["job"])
        return Reproduction(output, False, grid.cells, 0, 0, 0.0, changes, rebuilt=True)
    folder = tempfile.mkdtemp(prefix=".favour-reproduce-", dir=os.path.dirname(output))
    try:
        again = os.path.join(folder, "again.tif")
        evaluate_tree(tree, again, None, ScaledFeedback(feedback, 0.0, 0.9), grid=grid,
                      threads=threads, job=record["job"])
        with gdal_job():
            comparison = compare_rasters(output, again, feedback)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    feedback.set_progress(1.0)
    return Reproduction(output, comparison["differing_cells"] == 0, comparison["cells"],
                        comparison["differing_cells"], comparison["nodata_mismatches"],
                        comparison["max_abs_difference"], changes)


def compare_rasters(first: str, second: str, feedback: Feedback | None = None) -> dict:
    """Compare two single-band rasters on the same grid cell by cell, block by block.

    Returns
    -------
    dict
        ``cells``, ``differing_cells`` (value or nodata differs),
        ``nodata_mismatches`` and ``max_abs_difference`` over cells valid in both.
    """
    feedback = feedback or Feedback()
    a_ds, b_ds = open_raster(first, "first raster"), open_raster(second, "second raster")
    a_grid = Grid.from_dataset(a_ds, first)
    if not a_grid.same_as(Grid.from_dataset(b_ds, second)):
        raise GridMismatchError(f"{first} and {second} are on different grids")
    a_spec = SourceSpec("a", first, 1, a_ds.GetRasterBand(1).GetNoDataValue(), 1.0, 0.0, {})
    b_spec = SourceSpec("b", second, 1, b_ds.GetRasterBand(1).GetNoDataValue(), 1.0, 0.0, {})
    a_ds = b_ds = None
    reader = BlockReader()
    differing = mismatched = 0
    largest = 0.0
    total = count_windows(a_grid.width, a_grid.height)
    for i, window in enumerate(iter_windows(a_grid.width, a_grid.height)):
        feedback.check_cancelled()
        a = reader.read(a_spec, window)
        b = reader.read(b_spec, window)
        a_nan, b_nan = np.isnan(a), np.isnan(b)
        both = ~a_nan & ~b_nan
        mismatched += int(np.count_nonzero(a_nan != b_nan))
        diff = np.abs(a[both] - b[both])
        differing += int(np.count_nonzero(diff)) + int(np.count_nonzero(a_nan != b_nan))
        if diff.size:
            largest = max(largest, float(diff.max()))
        feedback.set_progress(0.9 + 0.1 * (i + 1) / total)
    return {"cells": a_grid.cells, "differing_cells": differing, "nodata_mismatches": mismatched,
            "max_abs_difference": largest}
