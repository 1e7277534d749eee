"""Honest hold-outs for weights of evidence on rasters: leave-one-out and spatial blocks.

:func:`holdouts` counts the conditions of the generalised evidence once
(the posterior job's own pass, ``raster.wofe_jobs``), places each deposit
cell in its condition, and then makes every map without the held-out
deposits from the conditions table alone (:mod:`favour_plugin.core.holdouts`):
the weights, the prior, the posterior of every condition and each held-out
deposit's rank among all cells. It reports the success-rate curve of all
deposits (the map scored on the deposits that built it), the
prediction-rate curve of leave-one-out and, with a block size, that of
spatially blocked hold-outs, each with its AUC, bootstrap interval,
capture efficiency and P–A crossing; a JSON result, a CSV of the curves
and a lineage beside each.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from ..core import holdouts as ho
from ..core import lineage as lin
from ..core import validation as val
from ..core.errors import InputError, ParameterError
from ..core.feedback import Feedback, ScaledFeedback
from .evidence import cell_area_km2, study_area_source
from .gdalenv import gdal_job
from .grid import Grid
from .outputs import OutputJob, check_apart
from .rank_pass import read_at_cells
from .sources import open_raster, raster_source
from .validation_jobs import (
    CSV_COLUMNS,
    Hasher,
    check_output,
    csv_text,
    json_text,
    lineage_record,
    place_deposits,
    planned_outputs,
    read_files,
    stage_outputs,
)
from .wofe_jobs import count_conditions, unique_names

RESULT_FORMAT = "favour-holdouts"
SCHEMES = {"success": "all deposits (resubstitution)", "leave_one_out": "leave-one-out",
           "blocks": "spatial blocks"}


@dataclass
class HoldoutResult:
    """What :func:`holdouts` wrote and found."""

    json_file: str
    csv_file: str | None
    lineage_file: str
    result: dict


def holdouts(evidence: list[str], deposits: str, output_json: str, output_csv: str | None = None,
             deposits_layer: str | None = None, unit_area_km2: float = 1.0, study_area: str | None = None,
             study_layer: str | None = None, block_size: float | None = None,
             capture=val.DEFAULT_CAPTURE, resamples: int = val.DEFAULT_RESAMPLES,
             seed: int = val.DEFAULT_SEED, level: float = val.DEFAULT_LEVEL,
             feedback: Feedback | None = None) -> HoldoutResult:
    """Leave-one-out and spatially blocked hold-outs of a weights-of-evidence posterior.

    Parameters
    ----------
    evidence : list of str
        Generalised evidence rasters (binary 0/1 or class codes), as for
        the posterior job; the first one's grid is the grid.
    deposits : str
        Deposit points (another CRS is reprojected, with a note).
    output_json : str
        The result (``.json``) with a lineage beside it.
    output_csv : str, optional
        The curves (``.csv``).
    deposits_layer, study_layer : str, optional
        Layer names within multi-layer sources.
    unit_area_km2 : float
        The unit cell, km².
    study_area : str, optional
        Polygon layer limiting the study area.
    block_size : float, optional
        Side of the square hold-out blocks, in map units of the grid's CRS;
        without it only leave-one-out is made.
    capture, resamples, seed, level
        As for :func:`favour_plugin.raster.validation_jobs.validate`.
    feedback : Feedback, optional
        Progress, notes, warnings and cancel.

    Raises
    ------
    FavourError
        As the posterior job, and: a block size that is not positive, or
        one block holding every deposit.
    """
    feedback = feedback or Feedback()
    if not evidence:
        raise ParameterError("the hold-outs need at least one evidence raster")
    capture = val.check_capture(capture)
    val.check_bootstrap(resamples, seed, level)
    if block_size is not None:
        block_size = ho.check_block_size(block_size)
    output_json = check_output(output_json, ".json", "hold-out result")
    output_csv = check_output(output_csv, ".csv", "table of curves")
    read = [(f"the evidence {path}", path, False) for path in evidence] + \
        [("the deposits", deposits, True), ("the study area", study_area, True)]
    with gdal_job():
        check_apart(planned_outputs([("the hold-out result", output_json),
                                     ("the table of curves", output_csv)]), read_files(read))
    created = lin.utc_now()
    names = unique_names(evidence)
    with OutputJob([p for p in (output_json, output_csv) if p]) as run, gdal_job():
        grid = Grid.from_dataset(open_raster(evidence[0], names[0]), f"the evidence {evidence[0]}")
        cell_km2 = cell_area_km2(grid)
        specs = [raster_source(path, 1, grid, "nearest", name, feedback, run.workdir)
                 for path, name in zip(evidence, names)]
        hasher = Hasher([("evidence", p, False) for p in evidence] + [("deposits", deposits, True),
                                                                     ("study area", study_area, True)])
        points = place_deposits(deposits, deposits_layer, grid, feedback, "deposits", "the hold-outs")
        study = study_area_source(study_area, study_layer, grid, run.workdir)[0] if study_area else None
        conditions = count_conditions(specs, names, grid, points, study, feedback, (0.0, 0.6))
        codes, cells, counted = conditions.classes, conditions.cells, conditions.deposit_cells
        where, inside = _deposit_conditions(specs, study, points, grid, codes, counted, feedback)
        kinds = ho.layer_kinds(codes)
        args = (codes, cells, counted, where, kinds, names, unit_area_km2, cell_km2)
        full = ho.condition_probability(codes, cells, counted, kinds, names, unit_area_km2, cell_km2)
        above, tied = ho.place(full.astype(np.float32), cells, where)
        common = (int(cells.sum()), capture, resamples, seed, level)
        sections = {"success": _section(above, tied, "success", common, SCHEMES["success"], feedback)}
        loo = ho.leave_one_out(*args, feedback=ScaledFeedback(feedback, 0.6, 0.8))
        sections["leave_one_out"] = _held_section(loo, common, SCHEMES["leave_one_out"], feedback)
        xs = grid.xmin + (points.cols[inside] + 0.5) * grid.cell_x
        ys = grid.ymax - (points.rows[inside] + 0.5) * grid.cell_y
        blocks = None
        if block_size is not None:
            numbers = ho.spatial_blocks(xs, ys, block_size, (grid.xmin, grid.ymax))
            blocks = ho.held_out_blocks(*args[:4], numbers, *args[4:],
                                        feedback=ScaledFeedback(feedback, 0.8, 0.95))
            sections["blocks"] = {**_held_section(blocks, common, SCHEMES["blocks"], feedback),
                                  "block_size": block_size,
                                  "blocks_with_deposits": int(np.unique(numbers).size)}
        feedback.check_cancelled()
        per_deposit = _per_deposit(points, inside, xs, ys, codes[where], names, above, tied, loo, blocks,
                                   int(cells.sum()))
        result = {"format": RESULT_FORMAT, "version": 1, "evidence": [os.path.abspath(p) for p in evidence],
                  "layers": names, "kinds": kinds, "unit_area_km2": unit_area_km2,
                  "cell_area_km2": cell_km2, "conditions": int(cells.size), "cells": int(cells.sum()),
                  "deposits": {**points.record, "outside_study_area": int((~inside).sum()),
                               "used": int(inside.sum())},
                  "rule": "held-out deposit cells stay in the study area as cells without a deposit; the "
                          "map without them is ranked as the posterior job writes it (float32)",
                  **sections, "deposit_cells": per_deposit, "caution": lin.CAUTION,
                  "lineage_file": os.path.basename(str(lin.lineage_path(output_json)))}
        rows = [{"set": SCHEMES[key], "curve": s["curve"], "threshold": None, "area_percent": a,
                 "deposits_percent": d}
                for key, s in sections.items() if s.get("points")
                for a, d in zip(s["points"]["area_percent"], s["points"]["deposits_percent"])]
        parameters = {"unit_area_km2": unit_area_km2, "cell_area_km2": cell_km2, "block_size": block_size,
                      "capture_percent": list(capture), "resamples": resamples, "level": level}
        summary = {key: {k: s.get(k) for k in ("curve", "n_deposits", "auc", "auc_ci", "pa_crossing", "nd")}
                   for key, s in sections.items()}
        record = lineage_record("hold-outs", created, grid, hasher.inputs(), parameters, feedback, seed,
                                layers=names, kinds=kinds, summary=summary, deposits=result["deposits"],
                                outputs={"json": output_json, "csv": output_csv})
        result["warnings"] = list(feedback.warnings)
        stage_outputs(run.outputs, record, [(output_json, json_text(result, output_json)),
                                            (output_csv, csv_text(rows, CSV_COLUMNS))])
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return HoldoutResult(output_json, output_csv, str(lin.lineage_path(output_json)), result)


def _deposit_conditions(specs, study, points, grid: Grid, codes, counted, feedback
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Read the evidence (and study mask) at each deposit cell; return its condition and inside mask."""
    def read(reader, window):
        found = [reader.read(spec, window) for spec in specs]
        return found + ([reader.read(study, window)] if study is not None else [])

    values = read_at_cells(read, points.rows, points.cols, grid, feedback)
    inside = values[-1] > 0.5 if study is not None else np.ones(points.rows.size, dtype=bool)
    deposit_codes = np.stack(values[:len(specs)], axis=1)[inside]
    where = ho.deposit_conditions(codes, deposit_codes)
    if np.any(where < 0) or not np.array_equal(np.bincount(where, minlength=codes.shape[0]), counted):
        raise InputError("the evidence read at the deposit cells does not match the evidence counted; "
                         "was a file changed during the run?")
    if not inside.any():
        raise InputError(f"none of the {points.rows.size} deposit cells lies in the study area; there is "
                         "nothing to hold out")
    if not inside.all():
        feedback.info(f"{int((~inside).sum())} deposit cells lie outside the study area and are not used")
    return where, inside


def _section(above, tied, curve: str, common: tuple, label: str, feedback: Feedback) -> dict:
    """Return the figures of one scheme (without the per-deposit scores, listed apart)."""
    cells, capture, resamples, seed, level = common
    section = val.summarise(above, tied, cells, curve, capture, resamples, seed, level, label, feedback)
    del section["scores"]
    return section


def _held_section(held: ho.HeldOut, common: tuple, label: str, feedback: Feedback) -> dict:
    """Return the figures of a hold-out scheme, with the maps made and the folds that made none."""
    placed = held.placed
    extra = {"maps": held.folds - len(held.skipped), "skipped": held.skipped,
             "deposits_not_scored": int((~placed).sum())}
    for skip in held.skipped:
        feedback.warning(f"{label}: {skip['deposits']} deposit cell(s) not scored: without them "
                         f"{skip['reason']}")
    if not placed.any():
        feedback.warning(f"{label}: no hold-out could make a map; there is no prediction-rate curve")
        return {"curve": val.CURVES["prediction"], "n_deposits": 0, "auc": None, "auc_ci": None,
                "pa_crossing": None, "nd": None, **extra}
    return {**_section(held.above[placed], held.tied[placed], "prediction", common, label, feedback),
            **extra}


def _per_deposit(points, inside, xs, ys, classes, names, above, tied, loo: ho.HeldOut,
                 blocks: ho.HeldOut | None, cells: int) -> list[dict]:
    """Return one entry per deposit cell used: where it is, its classes and its rank score in each map."""
    def scores(a, t):
        return [None if tt < 1 else float(s) for s, tt in zip(val.rank_scores(a, np.maximum(t, 1), cells), t)]

    success = scores(above, tied)
    left_out = scores(loo.above, loo.tied)
    blocked = scores(blocks.above, blocks.tied) if blocks is not None else [None] * len(success)
    rows, cols = points.rows[inside], points.cols[inside]
    return [{"row": int(r), "column": int(c), "x": float(x), "y": float(y),
             "classes": {name: None if np.isnan(v) else float(v) for name, v in zip(names, k)},
             "success_score": s, "leave_one_out_score": lo,
             "block": None if blocks is None else int(blocks.fold[i]), "block_score": b}
            for i, (r, c, x, y, k, s, lo, b) in enumerate(zip(rows, cols, xs, ys, classes, success, left_out,
                                                               blocked))]
