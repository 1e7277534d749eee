"""Weights-of-evidence jobs on rasters: an evidence layer's weights table, and the posterior map.

:func:`evidence_weights` counts one evidence raster against deposit points
(block by block), writes the weights table (CSV), the best cut or the
generalised classes as a raster with its own table, and a lineage record.
:func:`posterior` combines generalised evidence rasters into the posterior
probability per unit cell and its standard deviation, with the
conditional-independence checks in an HTML report.

Both follow the engine's rules: outputs are checked before any work,
written to temporary files and renamed only on success; progress and cancel
reach every block; every input is hashed into the lineage.
"""

from __future__ import annotations

import os
import platform
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal

from .. import about
from ..core import lineage as lin
from ..core import wofe
from ..core.errors import InputError, OutputError, ParameterError
from ..core.feedback import Feedback
from ..core.wofe_report import posterior_report_html
from .checks import sample_values
from .engine import input_files
from .evidence import (
    DenseCounts,
    DepositCells,
    cell_area_km2,
    count_evidence,
    dense_type,
    deposit_cells,
    study_area_source,
)
from .gdalenv import gdal_job
from .grid import Grid
from .outputs import OutputJob, OutputSet, check_apart, stage_lineage
from .sources import SourceSpec, open_raster, raster_source
from .streaming import map_windows
from .style import membership_style, style_path
from .writer import RasterWriter, check_raster_name, compression_options

#: Breaks placed at quantiles of a sample when continuous ordered evidence comes without breaks.
AUTO_BREAKS = 20


def _compression(compress: str | None, classes: bool = False) -> dict:
    """Return the lineage's account of a compression choice (refusing an unknown one)."""
    method, options = compression_options(compress, classes)
    return {"method": method, "options": options}


def _check_text_output(path: str, suffixes: tuple[str, ...], what: str) -> str:
    """Check a table or report output name; return the absolute path."""
    path = os.path.abspath(path)
    if not path.lower().endswith(suffixes):
        raise OutputError(f"the {what} {path} must end in {' or '.join(suffixes)}")
    if os.path.isdir(path):
        raise OutputError(f"the {what} {path} is a folder; give a file name")
    return path


def _read_files(entries: list[tuple[str, str, bool | None]]) -> list[tuple[str, str]]:
    """Return (label, file) for every file the inputs stand for (a shapefile's parts, say).

    ``vector`` is True for a vector source, False for a raster, None for a
    plain file GDAL does not open (a lineage record).
    """
    return [(label, f) for label, path, vector in entries
            for f in ([path] if vector is None else input_files(path, vector) or [path])]


def _describe_inputs(entries: list[tuple[str, str, bool]]) -> list[dict]:
    """Return lineage input entries: role, path and each file's size and SHA-256."""
    return [{"role": role, "path": path, "files": lin.describe_files(input_files(path, vector))}
            for role, path, vector in entries]


def _record(job: str, grid: Grid, inputs: list[dict], parameters: dict, feedback: Feedback,
            created: str, **extra) -> dict:
    """Return a lineage record for a weights-of-evidence job."""
    return {"format": lin.FORMAT, "version": lin.VERSION, "job": job, "created": created,
            "tool": {"name": about.NAME, "version": about.VERSION,
                     "python": platform.python_version(), "numpy": np.__version__,
                     "gdal": gdal.__version__},
            "host": platform.platform(), "grid": grid.to_dict(), "inputs": inputs,
            "parameters": parameters, "warnings": list(feedback.warnings), "seed": None,
            "caution": lin.CAUTION, **extra}


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
    output_table = _check_text_output(output_table, (".csv",), "weights table")
    _compression(compress)
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
        check_apart(planned, _read_files(read))
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
        inputs = _describe_inputs([(role.removeprefix("the "), path, vector) for role, path, vector in read])
        parameters = {"method": method, "band": band, "unit_area_km2": unit_area_km2,
                      "cell_area_km2": cell_km2, "breaks": codes, "level": level,
                      "small_count": small_count, "generalise": generalise_mode,
                      "compression": _compression(compress, classes=True)}
        record = _record("evidence-weights", grid, inputs, parameters, feedback, created,
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
    for window, block in map_windows(lambda window, reader: _masked(recode(window, reader), window,
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


def _masked(block: np.ndarray, window, reader, study: SourceSpec | None) -> np.ndarray:
    """Set cells outside the study area to NaN."""
    if study is not None:
        block = np.where(reader.read(study, window) < 0.5, np.nan, block)
    return block


def _cut_code(threshold: float, codes: list[float] | None) -> float:
    """Return the class code of a threshold (the code itself when no breaks were used)."""
    if codes is None:
        return threshold
    return float(codes.index(threshold) + 1)


# --------------------------------------------------------------------------- posterior


@dataclass
class PosteriorResult:
    """What :func:`posterior` wrote, and the checks it made."""

    probability_file: str
    std_file: str
    report_file: str | None
    lineage_file: str
    layers: list[wofe.LayerWeights]
    prior: wofe.Prior
    checks: dict


def read_weights_table(path: str) -> wofe.WeightsTable:
    """Read a weights table written by :func:`evidence_weights` through the lineage beside it."""
    record = lin.read_lineage(path)
    if "table" not in record:
        raise InputError(f"{path} was not written by the weights-of-evidence job (no table in its lineage)")
    return wofe.WeightsTable.from_dict(record["table"])


def _layer_from_table(table: wofe.WeightsTable, name: str) -> wofe.LayerWeights:
    """Per-class weights of a generalised layer's table (binary or categorical)."""
    if table.kind not in ("binary", "categorical"):
        raise InputError(f"{name}: its table is {table.kind}; the posterior takes generalised evidence "
                         "(binary at a cut, or categorical classes): write OUTPUT_GENERALISED first")
    return wofe.layer_weights(table)


def posterior(evidence: list[str], deposits: str, output_probability: str, output_std: str,
              output_report: str | None = None, tables: list[str] | None = None,
              deposits_layer: str | None = None, unit_area_km2: float = 1.0,
              study_area: str | None = None, study_layer: str | None = None,
              s_p_rule: str = "delta", feedback: Feedback | None = None,
              compress: str | None = None) -> PosteriorResult:
    """Posterior probability per unit cell from generalised evidence, with its standard deviation.

    Parameters
    ----------
    evidence : list of str
        Generalised evidence rasters (binary 0/1, or class codes), band 1.
        The first one's grid is the grid of the outputs; others are aligned
        to it (nearest neighbour, with a warning).
    deposits : str
        Deposit points in the study area (the prior and the checks).
    output_probability, output_std : str
        GeoTIFFs of P and s(P).
    output_report : str, optional
        HTML report: prior, weights per layer, n, T, n/T, the Agterberg–Cheng
        test, the pairwise chi-square matrix, deposit accounting.
    tables : list of str, optional
        One weights table (CSV written by :func:`evidence_weights`, with its
        lineage) per evidence raster, e.g. counted in an analogue district.
        Without them each layer's weights are counted here against
        ``deposits`` (binary when its codes are 0 and 1, else categorical).
    unit_area_km2 : float
        The unit cell, km².
    study_area, study_layer : str, optional
        Polygon layer limiting the study area.
    s_p_rule : {"delta", "relative"}
        How s(P) follows from s(logit) (core.wofe.s_probability).
    feedback : Feedback, optional
        Progress, notes, warnings and cancel.
    compress : str, optional
        Compression of the two rasters (:func:`~.writer.compression_options`).
    """
    feedback = feedback or Feedback()
    if not evidence:
        raise ParameterError("the posterior needs at least one evidence raster")
    if tables is not None and len(tables) != len(evidence):
        raise ParameterError(f"{len(tables)} weights tables for {len(evidence)} evidence rasters; give "
                             "one per raster, in the same order, or none")
    for path in (output_probability, output_std):
        check_raster_name(path)
    _compression(compress)
    output_probability, output_std = os.path.abspath(output_probability), os.path.abspath(output_std)
    finals = [output_probability, output_std]
    planned = [("the posterior probability", output_probability),
               ("its lineage", str(lin.lineage_path(output_probability))),
               ("its style", style_path(output_probability)),
               ("its standard deviation", output_std),
               ("that raster's lineage", str(lin.lineage_path(output_std))),
               ("that raster's style", style_path(output_std))]
    if output_report:
        output_report = _check_text_output(output_report, (".html", ".htm"), "report")
        finals.append(output_report)
        planned.append(("the report", output_report))
    read = [(f"the evidence {path}", path, False) for path in evidence] + \
        [("the deposits", deposits, True)] + \
        [(f"the weights table {t}", t, False) for t in tables or ()] + \
        [(f"the lineage of the weights table {t}", str(lin.lineage_path(t)), None)
         for t in tables or ()] + \
        ([("the study area", study_area, True)] if study_area else [])
    with gdal_job():
        check_apart(planned, _read_files(read))
    created = lin.utc_now()
    names = _unique_names(evidence)
    with OutputJob(finals) as run, gdal_job():
        grid = Grid.from_dataset(open_raster(evidence[0], names[0]), f"the evidence {evidence[0]}")
        cell_km2 = cell_area_km2(grid)
        specs = [raster_source(path, 1, grid, "nearest", name, feedback, run.workdir)
                 for path, name in zip(evidence, names)]
        points = deposit_cells(deposits, deposits_layer, grid, feedback)
        study = study_area_source(study_area, study_layer, grid, run.workdir)[0] if study_area else None
        conditions = _count_conditions(specs, names, grid, points, study, feedback, (0.0, 0.45))
        layers = []
        for j, name in enumerate(names):
            if tables is not None:
                table = read_weights_table(tables[j])
            else:
                counts = conditions.marginal(j)
                classes = counts.classes
                kind = "binary" if set(classes.tolist()) <= {0.0, 1.0} else "categorical"
                table = wofe.weights_table(counts, kind, unit_area_km2, cell_km2, None, name, feedback)
            layers.append(_layer_from_table(table, name))
        prior = wofe.study_prior(int(conditions.cells.sum()), int(conditions.deposit_cells.sum()),
                                 unit_area_km2, cell_km2)
        checks = wofe.conditional_independence(conditions, layers, unit_area_km2, cell_km2, prior,
                                               s_p_rule, feedback=feedback)
        writers = [RasterWriter(output_probability, grid, "posterior probability per unit cell",
                                outputs=run.outputs, compress=compress),
                   RasterWriter(output_std, grid, "standard deviation of the posterior",
                                outputs=run.outputs, compress=compress)]
        highest = _write_posterior(specs, layers, prior, grid, study, writers, s_p_rule, feedback,
                                   (0.45, 0.95))
        feedback.check_cancelled()
        entries = [("evidence", p, False) for p in evidence] + [("deposits", deposits, True)]
        entries += [("weights table", t, False) for t in tables or ()]
        entries += [("study area", study_area, True)] if study_area else []
        parameters = {"unit_area_km2": unit_area_km2, "cell_area_km2": cell_km2,
                      "s_p_rule": s_p_rule, "tables_given": tables is not None,
                      "compression": _compression(compress)}
        summary = {"prior": prior.__dict__, "layers": [_layer_summary(layer) for layer in layers],
                   "checks": checks, "deposits": points.record}
        record = _record("posterior", grid, _describe_inputs(entries), parameters, feedback,
                         created, summary=summary,
                         outputs={"probability": output_probability, "std": output_std,
                                  "report": output_report})
        for writer, role, top in zip(writers, ("posterior probability", "its standard deviation"),
                                     highest):
            writer.set_metadata(lin.summary_metadata(
                {**record, "lineage_file": os.path.basename(str(lin.lineage_path(writer.path)))}, role))
            writer.finish()
            stage_lineage(run.outputs, record, writer.path)
            run.outputs.add_text(style_path(writer.path), membership_style(0.0, max(top, 1e-12)))
        if output_report:
            run.outputs.add_text(output_report, posterior_report_html(record, names))
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return PosteriorResult(output_probability, output_std, output_report,
                               str(lin.lineage_path(output_probability)), layers, prior, checks)


def _unique_names(paths: list[str]) -> list[str]:
    """Return a distinct layer name per path (the file name, numbered when two agree)."""
    names, seen = [], {}
    for path in paths:
        base = os.path.splitext(os.path.basename(path))[0]
        seen[base] = seen.get(base, 0) + 1
        names.append(base if seen[base] == 1 else f"{base} ({seen[base]})")
    return names


def _layer_summary(layer: wofe.LayerWeights) -> dict:
    """Plain data of a layer's per-class weights for the lineage and the report."""
    return {"name": layer.name, "classes": layer.classes.tolist(), "weights": layer.weights.tolist(),
            "s_weights": np.sqrt(layer.variances).tolist(), "fractions": layer.fractions.tolist()}


def _count_conditions(specs, names, grid, points: DepositCells, study, feedback, span):
    """Count cells and deposit cells per unique condition of all layers, block by block."""
    def work(window, reader):
        block = wofe.ConditionCounts(names)
        block.add_block([reader.read(spec, window) for spec in specs], points.block(window),
                        reader.read(study, window) > 0.5 if study is not None else None)
        return block

    conditions = wofe.ConditionCounts(names)
    for _, block in map_windows(work, grid, feedback, span=span):
        conditions = conditions.merge(block)
    return conditions


def _write_posterior(specs, layers, prior, grid, study, writers, s_p_rule, feedback, span
                     ) -> tuple[float, float]:
    """Stream P and s(P) into the two writers (outside the study area nodata); return their maxima."""
    def work(window, reader):
        result = wofe.posterior_block([reader.read(spec, window) for spec in specs], layers, prior,
                                      s_p_rule)
        return (_masked(result.probability, window, reader, study),
                _masked(result.s_probability, window, reader, study))

    highest = [0.0, 0.0]
    for window, blocks in map_windows(work, grid, feedback, span=span):
        for k, (writer, values) in enumerate(zip(writers, blocks)):
            writer.write(window, values)
            if np.isfinite(values).any():
                highest[k] = max(highest[k], float(np.nanmax(values)))
    return highest[0], highest[1]
