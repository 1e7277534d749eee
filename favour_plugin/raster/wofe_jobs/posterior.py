"""The posterior probability map and its standard deviation from generalised evidence rasters."""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from ...core import lineage as lin
from ...core import wofe
from ...core.errors import InputError, ParameterError
from ...core.feedback import Feedback
from ...core.wofe_report import posterior_report_html
from ..evidence import (
    DepositCells,
    cell_area_km2,
    deposit_cells,
    study_area_source,
)
from ..gdalenv import gdal_job
from ..grid import Grid
from ..outputs import OutputJob, check_apart, stage_lineage
from ..sources import open_raster, raster_source
from ..streaming import map_windows
from ..style import membership_style, style_path
from ..writer import RasterWriter, check_raster_name
from .common import check_text_output, describe_inputs, job_compression, job_record, masked_block, read_files


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
    job_compression(compress)
    output_probability, output_std = os.path.abspath(output_probability), os.path.abspath(output_std)
    finals = [output_probability, output_std]
    planned = [("the posterior probability", output_probability),
               ("its lineage", str(lin.lineage_path(output_probability))),
               ("its style", style_path(output_probability)),
               ("its standard deviation", output_std),
               ("that raster's lineage", str(lin.lineage_path(output_std))),
               ("that raster's style", style_path(output_std))]
    if output_report:
        output_report = check_text_output(output_report, (".html", ".htm"), "report")
        finals.append(output_report)
        planned.append(("the report", output_report))
    read = [(f"the evidence {path}", path, False) for path in evidence] + \
        [("the deposits", deposits, True)] + \
        [(f"the weights table {t}", t, False) for t in tables or ()] + \
        [(f"the lineage of the weights table {t}", str(lin.lineage_path(t)), None)
         for t in tables or ()] + \
        ([("the study area", study_area, True)] if study_area else [])
    with gdal_job():
        check_apart(planned, read_files(read))
    created = lin.utc_now()
    names = unique_names(evidence)
    with OutputJob(finals) as run, gdal_job():
        grid = Grid.from_dataset(open_raster(evidence[0], names[0]), f"the evidence {evidence[0]}")
        cell_km2 = cell_area_km2(grid)
        specs = [raster_source(path, 1, grid, "nearest", name, feedback, run.workdir)
                 for path, name in zip(evidence, names)]
        points = deposit_cells(deposits, deposits_layer, grid, feedback)
        study = study_area_source(study_area, study_layer, grid, run.workdir)[0] if study_area else None
        conditions = count_conditions(specs, names, grid, points, study, feedback, (0.0, 0.45))
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
                      "compression": job_compression(compress)}
        summary = {"prior": prior.__dict__, "layers": [_layer_summary(layer) for layer in layers],
                   "checks": checks, "deposits": points.record}
        record = job_record("posterior", grid, describe_inputs(entries), parameters, feedback,
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


def unique_names(paths: list[str]) -> list[str]:
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


def count_conditions(specs, names, grid, points: DepositCells, study, feedback, span):
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
        return (masked_block(result.probability, window, reader, study),
                masked_block(result.s_probability, window, reader, study))

    highest = [0.0, 0.0]
    for window, blocks in map_windows(work, grid, feedback, span=span):
        for k, (writer, values) in enumerate(zip(writers, blocks)):
            writer.write(window, values)
            if np.isfinite(values).any():
                highest[k] = max(highest[k], float(np.nanmax(values)))
    return highest[0], highest[1]
