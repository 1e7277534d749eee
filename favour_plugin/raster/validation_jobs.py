"""Validation of a favourability or posterior raster against known deposits, streamed in blocks.

:func:`validate` places the deposit points on the raster's own grid (as
weights of evidence does: points off the grid, on nodata or sharing a cell
are counted and reported), reads the tiles holding deposits first, then
the rest of the raster, each tile once (:mod:`favour_plugin.raster.rank_pass`):
every block is binned by value and its cells in the deposit values' bins
compared with them (:func:`favour_plugin.core.validation_counts.count_block`), so the ranks,
the AUC, the rate curves, the capture efficiency and the P–A crossing are
exact; the bootstrap works on the deposits' rank scores without reading
again. It writes a JSON result and, on request, a CSV of the curves, each
with a lineage beside it, following the rules of every job that writes
(:mod:`favour_plugin.raster.outputs`).

The helpers here (outputs checked, deposits placed and read, inputs hashed
while the blocks stream, the lineage record) serve the hold-out and
redundancy jobs too.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import dataclass

import numpy as np

from ..core import lineage as lin
from ..core import validation as val
from ..core.errors import InputError, NodataWarning, OutputError, ParameterError
from ..core.feedback import Feedback
from ..core.validation_counts import RankCounts, prediction_area_table, threshold_at_area
from .blocks import BLOCK_COLS, BLOCK_ROWS
from .evidence import DepositCells, deposit_cells
from .gdalenv import gdal_job, set_stream_cache
from .grid import Grid
from .outputs import OutputJob, OutputSet, check_apart, lineage_header, stage_lineage
from .rank_pass import rank_deposits
from .sources import SourceSpec, cache_need, open_raster, raster_source
from .tree_inputs import FileHasher, input_files

RESULT_FORMAT = "favour-validation"
CSV_COLUMNS = ("set", "curve", "threshold", "area_percent", "deposits_percent")


# -- outputs, inputs and the lineage: shared by the validation jobs -------------------------------


def check_output(path: str | None, suffix: str, what: str) -> str | None:
    """Return an output name made absolute, or refuse one with the wrong suffix or that is a folder."""
    if path is None:
        return None
    path = os.path.abspath(path)
    if not path.lower().endswith(suffix):
        raise OutputError(f"the {what} {path} must end in {suffix}")
    if os.path.isdir(path):
        raise OutputError(f"the {what} {path} is a folder; give a file name ending in {suffix}")
    return path


def planned_outputs(named: list[tuple[str, str | None]]) -> list[tuple[str, str]]:
    """Return (label, path) of each output given and its lineage, for ``check_apart``."""
    planned = []
    for label, path in named:
        if path:
            planned += [(label, path), (f"the lineage of {label}", str(lin.lineage_path(path)))]
    return planned


def read_files(entries: list[tuple[str, str | None, bool]]) -> list[tuple[str, str]]:
    """Return (label, file) for every file GDAL reads for each input given (vector or raster)."""
    return [(label, f) for label, path, vector in entries if path
            for f in input_files(path, vector) or [path]]


class Hasher:
    """Describes the inputs of a job (their files' size and SHA-256) in the background, by role."""

    def __init__(self, entries: list[tuple[str, str | None, bool | None]]) -> None:
        self.entries = [(role, path, vector) for role, path, vector in entries if path]
        self.files = {path: (input_files(path, vector) if vector is not None else [path]) or [path]
                      for _, path, vector in self.entries}
        self._hasher = FileHasher([f for files in self.files.values() for f in files])

    def inputs(self) -> list[dict]:
        """Wait for the checksums; return the lineage's input entries."""
        found = self._hasher.wait()
        return [{"role": role, "path": path, "files": [found[f] for f in self.files[path]]}
                for role, path, _ in self.entries]


def lineage_record(job: str, created: str, grid: Grid, inputs: list[dict], parameters: dict,
                   feedback: Feedback, seed: int | None, **extra) -> dict:
    """Return the lineage record of a validation job."""
    return {**lineage_header(job, created), "grid": grid.to_dict(), "inputs": inputs,
            "parameters": parameters, "seed": seed, "warnings": list(feedback.warnings), **extra}


def json_text(document: dict, target: str) -> str:
    """Return a result as indented JSON (no NaN or infinity: those are not JSON)."""
    try:
        return json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    except ValueError as exc:
        raise OutputError(f"cannot write {target}: {exc}") from None


def csv_text(rows: list[dict], columns) -> str:
    """Return rows as CSV text, numbers with up to 10 significant figures."""
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, list(columns), lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: "" if row.get(k) is None else
                         (f"{row[k]:.10g}" if isinstance(row[k], float) else row[k]) for k in columns})
    return buffer.getvalue()


def stage_outputs(outputs: OutputSet, record: dict, texts: list[tuple[str | None, str]]) -> None:
    """Stage each output's text and the lineage beside it."""
    for path, text in texts:
        if path:
            outputs.add_text(path, text)
            stage_lineage(outputs, record, path)


# -- deposits --------------------------------------------------------------------------------------


def place_deposits(path: str, layer: str | None, grid: Grid, feedback: Feedback, name: str,
                   purpose: str) -> DepositCells:
    """Place deposit points on ``grid`` as weights of evidence does, with messages for this job.

    Raises
    ------
    InputError, GridError, MissingInputError
        No such file or layer, no features, not points, no CRS, a CRS that
        cannot be turned into the grid's, or no point on the grid.
    """
    return deposit_cells(path, layer, grid, feedback, name, purpose)


def native_values(spec: SourceSpec):
    """Return ``read(reader, window)`` giving the band's values with nodata as NaN, exact for comparing.

    A float band is kept in its own type (float32 stays float32, so values
    compare exactly with the deposit values read the same way); integer
    bands become float64; a scaled band goes through the usual read.
    """
    plain = spec.scale == 1.0 and spec.offset == 0.0
    nodata = spec.nodata

    def read(reader, window):
        if not plain:
            return [reader.read(spec, window)]
        raw = reader.read_raw(spec, window)
        values = raw if raw.dtype.kind == "f" else raw.astype(np.float64)
        if nodata is not None and not math.isnan(nodata):
            values[raw == nodata] = np.nan
        return [values]
    return read


def deposit_record(points: DepositCells, values: np.ndarray) -> tuple[dict, np.ndarray]:
    """Return the accounting of a deposit set and the mask of its cells on valid values."""
    valid = ~np.isnan(values)
    return ({**points.record, "sharing_a_cell": int(points.on_grid - points.rows.size),
             "on_nodata": int((~valid).sum()), "used": int(valid.sum())}, valid)


# -- the job ---------------------------------------------------------------------------------------


@dataclass
class ValidationResult:
    """What :func:`validate` wrote and found."""

    json_file: str
    csv_file: str | None
    lineage_file: str
    result: dict


def validate(raster: str, deposits: str, output_json: str, output_csv: str | None = None, band: int = 1,
             deposits_layer: str | None = None, held_out: str | None = None,
             held_out_layer: str | None = None, capture=val.DEFAULT_CAPTURE,
             resamples: int = val.DEFAULT_RESAMPLES, seed: int = val.DEFAULT_SEED,
             level: float = val.DEFAULT_LEVEL, curve: str = "success", feedback: Feedback | None = None,
             threads: int | None = None) -> ValidationResult:
    """Validate a favourability or posterior raster against deposit points.

    Parameters
    ----------
    raster : str
        The map (any single-band raster; higher values rank first). Its own
        grid is the grid of the counts.
    deposits : str
        Deposit points (any OGR source; another CRS is reprojected, with a note).
    output_json : str
        The result (``.json``): ``auc``, ``auc_ci``, ``n_deposits``,
        ``pa_crossing`` [P %, A %], ``nd``, ``capture`` and the rest; a
        lineage goes beside it.
    output_csv : str, optional
        The curves (``.csv``): the rate curves' vertices and the P–A plot's
        rows (``set, curve, threshold, area_percent, deposits_percent``).
    band : int
        Band of the raster.
    deposits_layer, held_out_layer : str, optional
        Layer names within multi-layer sources.
    held_out : str, optional
        Deposits held out of building the map: their prediction-rate curve
        is reported beside the main set's.
    capture : sequence of float
        Top shares of the area, in %, for the capture efficiency.
    resamples, seed, level
        The bootstrap of the AUC over deposits (the seed goes in the lineage).
    curve : {"success", "prediction"}
        ``success`` when ``deposits`` built or calibrated the map,
        ``prediction`` when the map was made without them.
    feedback : Feedback, optional
        Progress, notes, warnings and cancel.
    threads : int, optional
        Worker threads (default up to 2).

    Raises
    ------
    FavourError
        No deposits, deposits off the grid or all on nodata, a raster with
        no valid cell or with infinite values, bad parameters, an output
        that is an input; nothing is left under the output names.
    """
    feedback = feedback or Feedback()
    capture = val.check_capture(capture)
    val.check_bootstrap(resamples, seed, level)
    if curve not in val.CURVES:
        raise ParameterError(f"the curve must be 'success' or 'prediction', got {curve!r}")
    output_json = check_output(output_json, ".json", "validation result")
    output_csv = check_output(output_csv, ".csv", "table of curves")
    read = [("the raster", raster, False), ("the deposits", deposits, True),
            ("the held-out deposits", held_out, True)]
    with gdal_job():
        check_apart(planned_outputs([("the validation result", output_json),
                                     ("the table of curves", output_csv)]), read_files(read))
    created = lin.utc_now()
    name = os.path.basename(raster)
    finals = [p for p in (output_json, output_csv) if p]
    with OutputJob(finals) as run, gdal_job():
        ds = open_raster(raster, name)
        grid = Grid.from_dataset(ds, f"the raster {raster}")
        ds = None
        spec = raster_source(raster, band, grid, "nearest", name, feedback, run.workdir)
        set_stream_cache(cache_need(spec.record))
        hasher = Hasher([(role.removeprefix("the "), path, vector) for role, path, vector in read])
        sets = [("deposits", place_deposits(deposits, deposits_layer, grid, feedback, "deposits",
                                            "validation"), curve)]
        if held_out:
            sets.append(("held-out deposits", place_deposits(held_out, held_out_layer, grid, feedback,
                                                             "held-out deposits", "validation"),
                         "prediction"))
        # deposit_cells leaves at least one cell on the grid
        values, counts = rank_deposits(native_values(spec), spec, grid,
                                       [(points.rows, points.cols) for _, points, _ in sets], feedback,
                                       threads, (0.0, 0.95))
        if counts.valid == 0:
            raise InputError(f"{name}: the raster has no valid cell: all {grid.cells} cells are nodata")
        if counts.infinite:
            raise InputError(f"{name}: {counts.infinite} cells hold an infinite value; a favourability "
                             "or probability must be finite (mark such cells as nodata)")
        sections, rows = [], []
        for (label, points, kind), v in zip(sets, values):
            section, table = _summarise_set(label, points, v, counts, kind, capture, resamples, seed, level,
                                            feedback)
            sections.append(section)
            rows += table
        feedback.check_cancelled()
        result = {"format": RESULT_FORMAT, "version": 1, "raster": os.path.abspath(raster), "band": band,
                  **{k: sections[0][k] for k in ("curve", "auc", "auc_ci", "auc_se", "n_deposits",
                                                 "pa_crossing", "nd", "pa_threshold", "capture")},
                  "bootstrap": {"resamples": resamples, "seed": seed, "level": level,
                                "method": "percentile interval; deposit cells resampled with replacement, "
                                          "the map's cells held fixed"},
                  "cells": {"valid": counts.valid, "nodata": grid.cells - counts.valid,
                            "minimum": counts.minimum, "maximum": counts.maximum},
                  "sets": sections, "warnings": list(feedback.warnings), "caution": lin.CAUTION,
                  "lineage_file": os.path.basename(str(lin.lineage_path(output_json)))}
        parameters = {"band": band, "capture_percent": list(capture), "resamples": resamples,
                      "level": level, "curve": curve, "block": [BLOCK_ROWS, BLOCK_COLS]}
        record = lineage_record("validation", created, grid, hasher.inputs(), parameters, feedback, seed,
                                raster=spec.record,
                                summary={k: v for k, v in result.items() if k not in ("sets", "warnings")},
                                deposits={s["set"]: s["deposits"] for s in sections},
                                outputs={"json": output_json, "csv": output_csv})
        result["warnings"] = list(feedback.warnings)
        stage_outputs(run.outputs, record, [(output_json, json_text(result, output_json)),
                                            (output_csv, csv_text(rows, CSV_COLUMNS))])
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return ValidationResult(output_json, output_csv, str(lin.lineage_path(output_json)), result)


def _summarise_set(label: str, points: DepositCells, values: np.ndarray, counts: RankCounts, kind: str,
                   capture, resamples: int, seed: int, level: float, feedback: Feedback
                   ) -> tuple[dict, list[dict]]:
    """Return the figures of one deposit set, and its rows of the CSV."""
    accounting, valid = deposit_record(points, values)
    if accounting["sharing_a_cell"]:
        feedback.info(f"{label}: {accounting['sharing_a_cell']} points share a cell with another and "
                      "were merged (each cell counts once)")
    if not valid.any():
        raise InputError(f"{label}: none of the {points.rows.size} deposit cells lies on a valid cell of "
                         "the raster (all are nodata); there is nothing to validate against")
    if accounting["on_nodata"]:
        feedback.warning(f"{label}: {accounting['on_nodata']} of {points.rows.size} deposit cells lie on "
                         "nodata and are left out of the validation", NodataWarning)
    placed = values[valid]
    above, tied = counts.positions(placed)
    section = val.summarise(above, tied, counts.valid, kind, capture, resamples, seed, level, label, feedback)
    section["pa_threshold"] = threshold_at_area(counts, placed, section["pa_crossing"][1] / 100.0)
    for item in section["capture"]:
        item["threshold"] = threshold_at_area(counts, placed, item["top_area_percent"] / 100.0)
    plot = prediction_area_table(counts, placed)
    section.update({"set": label, "deposits": accounting, "pa_plot": plot})
    del section["scores"]
    rows = [{"set": label, "curve": section["curve"], "threshold": None, "area_percent": a,
             "deposits_percent": d}
            for a, d in zip(section["points"]["area_percent"], section["points"]["deposits_percent"])]
    rows += [{"set": label, "curve": "prediction-area", "threshold": t, "area_percent": a,
              "deposits_percent": p}
             for t, a, p in zip(plot["threshold"], plot["area_percent"], plot["prediction_percent"])]
    return section, rows
