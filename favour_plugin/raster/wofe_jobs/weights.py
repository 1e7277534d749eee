"""The weights table of one evidence raster, its best cut or generalised classes as a raster."""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from ...core import lineage as lin
from ...core import wofe
from ...core.errors import InputError, ParameterError
from ...core.feedback import Feedback
from ..checks import sample_values
from ..evidence import (
    DenseCounts,
    cell_area_km2,
    count_evidence,
    dense_type,
    deposit_cells,
    study_area_source,
)
from ..gdalenv import gdal_job
from ..grid import Grid
from ..outputs import OutputJob, OutputSet, check_apart, stage_lineage
from ..sources import SourceSpec, open_raster, raster_source
from ..streaming import map_windows
from ..writer import RasterWriter, check_raster_name
from .common import check_text_output, describe_inputs, job_compression, job_record, masked_block, read_files

#: Breaks placed at quantiles of a sample when continuous ordered evidence comes without breaks.
AUTO_BREAKS = 20


@dataclass
class EvidenceResult:
    """What :func:`evidence_weights` computed and wrote."""

    table: wofe.WeightsTable
    table_file: str
    lineage_file: str
    best: wofe.BestCut | None = None
    generalised_file: str | None = None
    generalised_table: wofe.WeightsTable | None = None
    deposits: dict = field(default_factory=dict)


def _auto_breaks(path: str, band: int, feedback: Feedback) -> list[float]:
    """Return up to ``AUTO_BREAKS`` distinct thresholds at quantiles of a sample of the band."""
    sample = sample_values(path, band)
    if sample.size == 0:
        raise InputError(f"the evidence {path} has no valid value")
    levels = np.quantile(sample, np.linspace(0, 1, AUTO_BREAKS + 1)[1:-1])
    breaks = sorted({float(v) for v in levels})
    feedback.info(f"no breaks given: {len(breaks)} thresholds at quantiles of a sample of "
                  f"{sample.size} cells")
    return breaks


def _integer_codes(spec: SourceSpec) -> bool:
    """Return True when the evidence band stores whole-number codes (an integer type, unscaled)."""
    return spec.record["data_type"].startswith(("Byte", "Int", "UInt")) \
        and "scale_offset" not in spec.record


def evidence_weights(evidence: str, deposits: str, method: str, output_table: str, band: int = 1,
                     deposits_layer: str | None = None, unit_area_km2: float = 1.0,
                     study_area: str | None = None, study_layer: str | None = None,
                     breaks: list[float] | None = None, level: float = wofe.DEFAULT_LEVEL,
                     small_count: str | None = None, generalise_mode: str = "ternary",
                     output_generalised: str | None = None,
                     feedback: Feedback | None = None, compress: str | None = None) -> EvidenceResult:
    """Weights of evidence of one evidence raster against deposit points.

    Parameters
    ----------
    evidence : str
        The evidence raster; its grid is the grid of the counts.
    deposits : str
        Deposit points (any OGR source; another CRS is reprojected, with a note).
    method : {"binary", "categorical", "ascending", "descending"}
        How classes make patterns (see core.wofe.WeightsTable).
    output_table : str
        The weights table to write (``.csv``); its lineage goes beside it.
    band : int
        Evidence band.
    deposits_layer, study_layer : str, optional
        Layer names within multi-layer sources.
    unit_area_km2 : float
        The unit cell, km².
    study_area : str, optional
        Polygon layer limiting the counts.
    breaks : list of float, optional
        Thresholds for ``ascending``/``descending`` evidence stored as
        continuous values. Without them, integer bands use their own codes
        and continuous bands get thresholds at quantiles of a sample.
    level : float
        Studentised-contrast level for the best cut and the generalisation.
    small_count : {None, "haldane"}
        The small-count rule, applied only when asked.
    generalise_mode : {"ternary", "binary"}
        For categorical evidence written to ``output_generalised``.
    output_generalised : str, optional
        Raster of the best cut (ordered and binary evidence: 1 on the
        pattern, 0 off it) or of the generalised classes (categorical: 1
        positive, 0 neutral, −1 negative; binary mode 1/0), with its own
        table beside it (``<raster>.weights.csv``).
    feedback : Feedback, optional
        Progress, notes, warnings and cancel.
    compress : str, optional
        Compression of the generalised raster (:func:`~.writer.compression_options`).

    Raises
    ------
    FavourError
        Bad parameters or inputs (no deposits, evidence all nodata, all
        deposits in one class, non-integer categorical codes, a geographic
        CRS); nothing is left under the output names.
    """
    feedback = feedback or Feedback()
    if method not in wofe.KINDS:
        raise ParameterError(f"method must be one of {', '.join(wofe.KINDS)}, got {method!r}")
    if generalise_mode not in ("ternary", "binary"):
        raise ParameterError(f"generalisation must be 'ternary' or 'binary', got {generalise_mode!r}")
    output_table = check_text_output(output_table, (".csv",), "weights table")
    job_compression(compress)
    finals = [output_table]
    planned = [("the weights table", output_table),
               ("its lineage", str(lin.lineage_path(output_table)))]
    if output_generalised:
        check_raster_name(output_generalised)
        output_generalised = os.path.abspath(output_generalised)
        finals.append(output_generalised)
        planned += [("the generalised evidence", output_generalised),
                    ("its lineage", str(lin.lineage_path(output_generalised))),
                    ("its weights table", output_generalised + ".weights.csv"),
                    ("that table's lineage", str(lin.lineage_path(output_generalised + ".weights.csv")))]
    read = [("the evidence", evidence, False), ("the deposits", deposits, True)] + \
        ([("the study area", study_area, True)] if study_area else [])
    with gdal_job():
        check_apart(planned, read_files(read))
    created = lin.utc_now()
    name = os.path.basename(evidence)
    with OutputJob(finals) as run, gdal_job():
        grid = Grid.from_dataset(open_raster(evidence, name), f"the evidence {evidence}")
        cell_km2 = cell_area_km2(grid)
        spec = raster_source(evidence, band, grid, "nearest", name, feedback, run.workdir)
        points = deposit_cells(deposits, deposits_layer, grid, feedback)
        study = study_area_source(study_area, study_layer, grid, run.workdir)[0] if study_area else None
        codes = None
        ordered = method in ("ascending", "descending")
        if breaks is not None and not ordered:
            raise ParameterError(f"breaks apply to ascending or descending evidence, not {method}")
        if ordered and breaks is None and not _integer_codes(spec):
            breaks = _auto_breaks(evidence, band, feedback)
        if breaks is not None:
            codes = [float(b) for b in breaks]
            wofe.code_by_breaks(np.zeros(1), codes, method)  # checks the breaks before counting
        counts = count_evidence(spec, grid, points, feedback, study, codes, method, (0.05, 0.85))
        # Caveats are reported once the rows carry their thresholds (and the whole-area row
        # of break codes, which is no threshold, is gone).
        table = _label_thresholds(wofe.weights_table(counts, method, unit_area_km2, cell_km2,
                                                     small_count, name, Feedback()), codes)
        wofe.report_table(table, feedback)
        best = wofe.best_cut(table, level) if ordered else None
        if best is not None:
            feedback.info(_describe_cut(best, name))
        result = EvidenceResult(table, output_table, "", best, deposits=points.record)
        writer = None
        if output_generalised:
            writer = _generalised(result, counts, spec, grid, study, codes, method, level,
                                  generalise_mode, output_generalised, feedback, run.outputs, compress)
        feedback.check_cancelled()
        inputs = describe_inputs([(role.removeprefix("the "), path, vector) for role, path, vector in read])
        parameters = {"method": method, "band": band, "unit_area_km2": unit_area_km2,
                      "cell_area_km2": cell_km2, "breaks": codes, "level": level,
                      "small_count": small_count, "generalise": generalise_mode,
                      "compression": job_compression(compress, classes=True)}
        record = job_record("evidence-weights", grid, inputs, parameters, feedback, created,
                         deposits=points.record, counts=counts.as_dict(), table=table.as_dict(),
                         best_cut=None if best is None else best.__dict__,
                         outputs={"table": output_table,
                                  "generalised": output_generalised if writer is not None else None})
        if writer is not None:
            generalised = {**record, "table": result.generalised_table.as_dict(),
                           "source_table": table.as_dict(),
                           "lineage_file": os.path.basename(str(lin.lineage_path(output_generalised)))}
            writer.set_metadata(lin.summary_metadata(generalised, f"{name} generalised"))
            writer.finish()
            generalised_table = output_generalised + ".weights.csv"
            run.outputs.add_text(generalised_table, result.generalised_table.to_csv(level))
            stage_lineage(run.outputs, generalised, generalised_table)
            stage_lineage(run.outputs, generalised, output_generalised)
            result.generalised_file = output_generalised
        run.outputs.add_text(output_table, table.to_csv(level))
        result.lineage_file = stage_lineage(run.outputs, record, output_table)
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return result


def _label_thresholds(table: wofe.WeightsTable, codes: list[float] | None) -> wofe.WeightsTable:
    """Give the rows of a table counted on break codes the thresholds they stand for.

    Code k of an ascending layer is the pattern "value ≤ t_k", of a
    descending one "value ≥ t_k" (core.wofe.code_by_breaks), so row k takes
    t_k. The code beyond every break (above the last for ascending, below the
    first for descending) is the whole known area, not a threshold, and its
    row is left out.
    """
    if codes is None:
        return table
    rows = []
    for row in table.rows:
        index = int(row["class"]) - 1
        if 0 <= index < len(codes):
            rows.append({**row, "class": codes[index]})
    return wofe.WeightsTable(**{**table.__dict__, "rows": rows})


def _describe_cut(best: wofe.BestCut, name: str) -> str:
    """Return a one-line account of the best cut."""
    if not best.found:
        return f"{name}: no significant cut: {best.reason}"
    sign = "≤" if best.kind == "ascending" else "≥"
    return (f"{name}: best cut at value {sign} {best.threshold:g}: contrast {best.contrast:.3f}, "
            f"studentised contrast {best.studentized_contrast:.2f} (level {best.level:g})")


def _generalised(result: EvidenceResult, counts: wofe.ClassCounts, spec: SourceSpec, grid: Grid,
                 study: SourceSpec | None, codes, method: str, level: float, mode: str,
                 output: str, feedback: Feedback, outputs: OutputSet,
                 compress: str | None = None) -> RasterWriter | None:
    """Stream the generalised evidence into a writer (not yet finished); return the writer."""
    table = result.table
    if method in ("ascending", "descending"):
        best = result.best
        if not best.found:
            feedback.warning(f"{table.name}: {best.reason}; no generalised raster was written")
            return None
        cut_code = _cut_code(best.threshold, codes)
        classes = counts.classes
        on = classes <= cut_code if method == "ascending" else classes >= cut_code
        mapping = {float(k): (1.0 if o else 0.0) for k, o in zip(classes, on)}
        result.generalised_table = wofe.weights_table(counts.recode(mapping), "binary",
                                                      table.unit_cell_km2, table.cell_area_km2,
                                                      table.small_count, f"{table.name} (cut)", feedback)
    elif method == "categorical":
        generalisation = wofe.generalise(counts, table, mode, level, feedback)
        mapping = generalisation.mapping
        result.generalised_table = generalisation.table
        feedback.info(f"{table.name}: generalised into {len(generalisation.groups)} groups: "
                      + "; ".join(f"{int(g):d}: classes {', '.join(f'{c:g}' for c in cls)}"
                                  for g, cls in generalisation.groups.items()))
    else:
        mapping = {0.0: 0.0, 1.0: 1.0}
        result.generalised_table = table
    writer = RasterWriter(output, grid, f"{table.name} generalised", classes=True, outputs=outputs,
                          compress=compress)
    recode = _recoder(mapping, spec, codes, method)
    for window, block in map_windows(lambda window, reader: masked_block(recode(window, reader), window,
                                                                   reader, study),
                                     grid, feedback, span=(0.85, 0.95)):
        writer.write(window, block)
    return writer


def _recoder(mapping: dict, spec: SourceSpec, codes, method: str):
    """Return ``f(window, reader)`` giving a block's group codes (NaN where no group).

    Integer bands are recoded through a lookup table indexed by the stored
    codes; other evidence through a sorted search of the class values.
    """
    data_type = dense_type(spec) if codes is None else None
    if data_type is not None:
        counts = DenseCounts(data_type, spec.nodata)
        lut = np.full(counts.size, np.nan)
        for key, group in mapping.items():
            lut[int(key) - counts.offset] = group
        offset = counts.offset
        return lambda window, reader: lut[reader.read_raw(spec, window).astype(np.int64) - offset
                                          if offset else reader.read_raw(spec, window)]
    keys = np.array(sorted(mapping))
    groups = np.array([mapping[k] for k in keys])

    def recode(window, reader):
        block = reader.read(spec, window)
        if codes is not None:
            block = wofe.code_by_breaks(block, codes, method)
        index = np.clip(np.searchsorted(keys, block), 0, keys.size - 1)
        return np.where(keys[index] == block, groups[index], np.nan)
    return recode


def _cut_code(threshold: float, codes: list[float] | None) -> float:
    """Return the class code of a threshold (the code itself when no breaks were used)."""
    if codes is None:
        return threshold
    return float(codes.index(threshold) + 1)
