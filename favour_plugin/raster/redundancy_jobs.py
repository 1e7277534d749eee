"""Proxy redundancy on rasters: the leaves' memberships on a lattice of cells, correlated.

:func:`redundancy` prepares the tree's proxies as an evaluation does
(:func:`favour_plugin.raster.engine.prepare_inputs`), reads them on the
rows of a regular lattice of cells (:func:`favour_plugin.core.redundancy.lattice`)
with :func:`~favour_plugin.raster.engine.read_leaves`, and turns them into μ
through the one evaluation path,
:meth:`~favour_plugin.core.tree.EvaluationPlan.evaluate_block` with every
leaf kept, so the memberships correlated are those the map is made of.
With the lineage of a weights-of-evidence posterior it also reports that
posterior's pairwise conditional-independence table.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from ..core import lineage as lin
from ..core import redundancy as red
from ..core.errors import InputError, ParameterError
from ..core.feedback import Feedback
from ..core.tree import Tree
from .blocks import Window
from .gdalenv import gdal_job
from .outputs import OutputJob, check_apart
from .streaming import DEFAULT_THREADS, map_windows
from .tree_inputs import base_record, job_inputs, prepare_inputs, read_leaves
from .validation_jobs import check_output, csv_text, json_text, planned_outputs, stage_outputs

RESULT_FORMAT = "favour-redundancy"
#: The widest piece of a lattice row read at once.
ROW_PIECE = 4096
PAIR_COLUMNS = ("leaf_a", "leaf_b", "r", "cells", "flagged", "note")


@dataclass
class RedundancyResult:
    """What :func:`redundancy` wrote and found."""

    json_file: str
    csv_file: str | None
    lineage_file: str
    result: dict


def posterior_checks(path: str) -> tuple[list[dict], str]:
    """Return the pairwise conditional-independence table from a posterior's lineage, and its file.

    ``path`` is the posterior raster or its lineage file.

    Raises
    ------
    LineageError, InputError
        No readable lineage, or one not written by the posterior job.
    """
    record = lin.read_lineage(path)
    target = str(path) if str(path).endswith(lin.SUFFIX) else str(lin.lineage_path(path))
    checks = (record.get("summary") or {}).get("checks") if isinstance(record.get("summary"), dict) else None
    if record.get("job") != "posterior" or not isinstance(checks, dict) \
            or not isinstance(checks.get("pairwise"), list):
        raise InputError(f"{target} comes from a {record.get('job')!r} job; the conditional-independence "
                         "table comes from the lineage of a weights-of-evidence posterior (favour:posterior)")
    return checks["pairwise"], target


def redundancy(tree: Tree, output_json: str, output_csv: str | None = None,
               sample_cells: int = red.DEFAULT_SAMPLE, threshold: float = red.DEFAULT_THRESHOLD,
               posterior: str | None = None, tree_file: str | None = None, feedback: Feedback | None = None,
               threads: int | None = None) -> RedundancyResult:
    """Correlate every pair of the tree's leaf memberships on a lattice of cells; flag the alike.

    Parameters
    ----------
    tree : Tree
        The model; at least two leaves.
    output_json : str
        The result (``.json``): the leaves, the matrix of r, every pair with
        its cells and flag, the sample; a lineage beside it.
    output_csv : str, optional
        The pairs as a table (``.csv``).
    sample_cells : int
        The lattice holds at most this many cells.
    threshold : float
        Pairs with |r| above it are flagged (0.8: common practice, no source).
    posterior : str, optional
        A posterior raster (or its lineage) from weights of evidence: its
        pairwise conditional-independence table is added.
    tree_file : str, optional
        The tree file the tree came from, hashed into the lineage.
    feedback, threads
        As for :func:`favour_plugin.raster.engine.evaluate_tree`.

    Raises
    ------
    FavourError
        A tree problem, fewer than two leaves, a bad sample size or
        threshold, a lineage that is not a posterior's, an unusable proxy.
    """
    feedback = feedback or Feedback()
    threads = threads or DEFAULT_THREADS
    threshold = red.check_threshold(threshold)
    red.lattice(1, 1, sample_cells)  # checks the sample size before any work
    plan = tree.compile()
    names = [leaf.path for leaf in plan.leaves]
    if len(names) < 2:
        raise ParameterError(f"the tree has {len(names)} leaf; redundancy compares pairs of leaves, so it "
                             "needs at least two")
    output_json = check_output(output_json, ".json", "redundancy result")
    output_csv = check_output(output_csv, ".csv", "table of pairs")
    checks, checks_file = posterior_checks(posterior) if posterior else (None, None)
    read = job_inputs(tree, plan, tree_file) + ([("the posterior's lineage", checks_file)] if checks_file
                                                else [])
    with gdal_job():
        check_apart(planned_outputs([("the redundancy result", output_json),
                                     ("the table of pairs", output_csv)]), read)
    created = lin.utc_now()
    with OutputJob([p for p in (output_json, output_csv) if p]) as run, gdal_job():
        prepared = prepare_inputs(tree, plan, None, run.workdir, feedback, tree_file, span=(0.0, 0.3))
        grid = prepared.grid
        sample = red.lattice(grid.height, grid.width, sample_cells)
        pieces = [c for c in range(0, grid.width, ROW_PIECE)
                  if np.any((sample.columns >= c) & (sample.columns < c + ROW_PIECE))]
        items = [Window(c, int(r), min(ROW_PIECE, grid.width - c), 1) for r in sample.rows for c in pieces]

        def work(window, reader):
            values = read_leaves(plan, prepared.sources, reader, window)
            columns = sample.columns[(sample.columns >= window.col_off)
                                     & (sample.columns < window.col_off + window.width)] - window.col_off
            mus = plan.evaluate_block({k: v[:, columns] for k, v in values.items()}, keep=names)
            return np.stack([mus[name][0] for name in names], axis=1)

        samples = np.concatenate([mu for _, mu in map_windows(work, grid, feedback, threads, (0.3, 0.95),
                                                              items=items)], axis=0)
        r, n = red.correlations(samples)
        pairs = red.redundant_pairs(names, r, n, threshold)
        flagged = [p for p in pairs if p["flagged"]]
        for pair in flagged:
            feedback.warning(f"{pair['leaf_a']} and {pair['leaf_b']}: r = {pair['r']:.3f} on {pair['cells']} "
                             f"cells; |r| > {threshold:g}: the two proxies may say the same thing twice")
        valid = {name: int(np.count_nonzero(~np.isnan(samples[:, i]))) for i, name in enumerate(names)}
        if not any(valid.values()):
            raise InputError("no leaf has a valid membership on the sampled cells; check the proxies' "
                             "extents and nodata")
        feedback.check_cancelled()
        result = {"format": RESULT_FORMAT, "version": 1, "leaves": names,
                  "matrix": [[None if np.isnan(x) else float(x) for x in row] for row in r],
                  "cells": n.tolist(), "pairs": pairs, "flagged": flagged, "threshold": threshold,
                  "threshold_source": "common practice, no source",
                  "sample": {**sample.describe(), "valid": valid},
                  "conditional_independence": checks,
                  "conditional_independence_source": checks_file, "caution": lin.CAUTION,
                  "lineage_file": os.path.basename(str(lin.lineage_path(output_json)))}
        record = {**base_record("redundancy", created, tree, plan, prepared, tree_file, threads),
                  "redundancy": {"threshold": threshold, "sample": result["sample"], "pairs": pairs,
                                 "posterior_lineage": lin.describe_files([checks_file]) if checks_file
                                 else None},
                  "outputs": {"json": output_json, "csv": output_csv},
                  "warnings": list(feedback.warnings)}
        result["warnings"] = list(feedback.warnings)
        stage_outputs(run.outputs, record, [(output_json, json_text(result, output_json)),
                                            (output_csv, csv_text(pairs, PAIR_COLUMNS))])
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return RedundancyResult(output_json, output_csv, str(lin.lineage_path(output_json)), result)
