"""The report job: one self-contained HTML page a team lead can read offline, with its lineage.

:func:`write_report` reads the favourability raster and its lineage (the
tree, the inputs) and whatever else is given — component rasters, a
validation result, the targets, Monte Carlo rasters, a sensitivity table and
chart, a posterior's lineage, occurrences — draws the figures
(:mod:`favour_plugin.report`), and writes the page and its lineage, put in
place together. Rasters are read decimated (GDAL's averaging read, at most
``MAIN_CELLS`` or ``PANEL_CELLS`` a side), never whole.
"""

from __future__ import annotations

import csv
import io
import os
import platform
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal, ogr

from .. import about
from ..core import lineage as lin
from ..core.errors import FavourError, InputError, LineageError, OutputError
from ..core.feedback import Feedback
from ..core.jsonio import MIB, read_user_bytes
from ..core.tree import Tree
from ..report import sections as sec
from ..report.charts import prediction_area_png, rate_curves_png, tornado_chart
from ..report.figures import MapLayer, Overlay, main_map, panel_maps
from ..report.html import Figure, page
from ..report.tree_figures import membership_curves, tree_diagram
from ..report.validation_result import read_validation
from .gdalenv import gdal_job
from .outputs import OutputJob, check_apart, lineage_header, stage_lineage
from .sources import open_raster
from .target_inputs import component_inputs, open_on_grid, read_points
from .tree_inputs import input_files

#: Longest side, in cells, of the decimated read of the main map and of each panel.
MAIN_CELLS, PANEL_CELLS = 900, 320
#: What each Monte Carlo raster's colour bar says.
MC_LABELS = {"std": "standard deviation of μ (own scale)", "robustness": "share of realisations"}
#: Monte Carlo rasters drawn, in this order, when given.
MC_SHOWN = ("mean", "std", "robustness", "p10", "p50", "p90")


@dataclass
class ReportResult:
    """What the report job wrote: the page, its lineage, and the figures it holds."""

    output: str
    lineage_file: str
    figures: list[str]
    record: dict = field(repr=False, default_factory=dict)


def read_decimated(path: str, longest: int, title: str, label: str = "μ", stretch: bool = False) -> MapLayer:
    """Read band 1 through GDAL's averaging read, at most ``longest`` cells a side, NaN for nodata.

    The colours span [0, 1] for values in [0, 1] (μ, shares), else the
    values' own range; ``stretch`` spans [0, largest value] (a spread).
    """
    ds = open_raster(path, title)
    band = ds.GetRasterBand(1)
    factor = max(1, -(-max(ds.RasterXSize, ds.RasterYSize) // longest))
    width, height = -(-ds.RasterXSize // factor), -(-ds.RasterYSize // factor)
    try:
        raw = band.ReadAsArray(buf_xsize=width, buf_ysize=height, resample_alg=gdal.GRIORA_Average)
    except RuntimeError as exc:
        band = None
        ds = None
        raise InputError(f"{title}: cannot read {path}: {exc}") from None
    nodata = band.GetNoDataValue()
    x0, dx, _, y0, _, dy = ds.GetGeoTransform()
    extent = [x0, x0 + dx * ds.RasterXSize, y0 + dy * ds.RasterYSize, y0]
    band = None
    ds = None
    values = raw.astype(np.float64)
    if nodata is not None:
        values[raw == nodata] = np.nan
    finite = values[np.isfinite(values)]
    low, high = (0.0, 1.0) if not finite.size or (finite.min() >= 0 and finite.max() <= 1) else \
        (float(finite.min()), float(finite.max()))
    if stretch and finite.size:
        low, high = 0.0, max(float(finite.max()), 1e-12)
    return MapLayer(values, extent, title, low, high, label)


def _check_output(output: str) -> str:
    """Refuse a report name that is not an HTML file name."""
    output = os.path.abspath(output)
    if not output.lower().endswith((".html", ".htm")):
        raise OutputError(f"the report {output} must be an HTML file name ending in .html")
    if os.path.isdir(output):
        raise OutputError(f"the report {output} is a folder; give a file name ending in .html")
    return output


def _lineage_or_none(path: str) -> dict | None:
    try:
        return lin.read_lineage(path)
    except LineageError:
        return None


def _targets(path: str) -> tuple[dict, list[dict], list[str], list]:
    """Read the targets GeoPackage: its lineage, each zone's attributes, its field names, the outlines."""
    record = lin.read_lineage(path)
    try:
        ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
    except RuntimeError as exc:
        raise InputError(f"GDAL cannot open the targets {path}: {exc}") from None
    layer = ds.GetLayerByName("targets") if ds is not None else None
    if layer is None:
        ds = None
        raise InputError(f"the targets {path} hold no layer 'targets'")
    definition = layer.GetLayerDefn()
    fields = [definition.GetFieldDefn(i).GetName() for i in range(definition.GetFieldCount())]
    if not {"rank", "area_km2", "fav_mean", "fav_peak"} <= set(fields):
        definition = layer = None
        ds = None
        raise InputError(f"the layer 'targets' of {path} lacks the fields rank, area_km2, fav_mean and "
                         "fav_peak the targets job writes")
    rows, outlines = [], []
    for feature in layer:
        rows.append({name: feature.GetField(name) for name in fields})
        geometry = feature.GetGeometryRef()
        parts = [geometry.GetGeometryRef(i) for i in range(geometry.GetGeometryCount())] \
            if ogr.GT_Flatten(geometry.GetGeometryType()) == ogr.wkbMultiPolygon else [geometry]
        rings = [np.array(part.GetGeometryRef(j).GetPoints())[:, :2]
                 for part in parts for j in range(part.GetGeometryCount())]
        largest = max(parts, key=lambda p: p.GetArea())
        at = largest.PointOnSurface()
        outlines.append((int(feature.GetField("rank")), rings, (at.GetX(), at.GetY())))
        geometry = largest = at = None
        parts = []
    feature = definition = layer = None
    ds = None
    rows.sort(key=lambda r: r["rank"])
    return record, rows, fields, outlines


def _monte_carlo(paths, grid_of) -> tuple[dict | None, dict[str, str]]:
    """Name each Monte Carlo raster by its lineage's outputs (else by its file name's last word)."""
    named: dict[str, str] = {}
    record = None
    for path in paths or ():
        path = os.path.abspath(path)
        own = _lineage_or_none(path)
        name = None
        if own is not None:
            record = record or own
            name = next((k for k, v in (own.get("outputs") or {}).items()
                         if isinstance(v, str) and os.path.abspath(v) == path), None)
        name = name or os.path.splitext(os.path.basename(path))[0].rsplit("-", 1)[-1]
        open_on_grid(path, f"the Monte Carlo raster {name}", grid_of)
        named[name] = path
    return record, named


def _sensitivity_rows(path: str) -> list[dict]:
    """Read the sensitivity table (CSV, as the sensitivity job writes it)."""
    data = read_user_bytes(path, max_bytes=16 * MIB, error=InputError, what="sensitivity table")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"the sensitivity table {path} is not UTF-8 text") from None
    try:
        rows = list(csv.DictReader(io.StringIO(text)))
    except csv.Error as exc:
        raise InputError(f"the sensitivity table {path} is not a CSV table: {exc}") from None
    if not rows or "label" not in rows[0] or "top_area_change_percent" not in rows[0]:
        raise InputError(f"the sensitivity table {path} lacks the columns 'label' and "
                         "'top_area_change_percent' the sensitivity job writes")
    return rows


def _png_file(path: str) -> bytes:
    """Read a PNG image, refusing anything else."""
    data = read_user_bytes(path, max_bytes=32 * MIB, error=InputError, what="chart")
    if not data.startswith(b"\x89PNG\r\n\x1a\n"):
        raise InputError(f"the chart {path} is not a PNG image")
    return data


def write_report(favourability: str, output: str, components=None, validation: str | None = None,
                 targets: str | None = None, monte_carlo=None, sensitivity_table: str | None = None,
                 sensitivity_chart: str | None = None, posterior: str | None = None,
                 deposits: str | None = None, deposits_layer: str | None = None,
                 title: str | None = None, feedback: Feedback | None = None) -> ReportResult:
    """Write the report of a favourability map as one self-contained HTML file, with its lineage.

    Parameters
    ----------
    favourability : str
        The favourability raster; its lineage gives the tree and the inputs.
    output : str
        The HTML file to write; its lineage goes to ``<output>.lineage.json``.
    components : str or sequence of str, optional
        A folder of component rasters (``evaluate --nodes``) or a list of them.
    validation : str, optional
        The validation result (JSON) of the validation job.
    targets : str, optional
        The targets GeoPackage of :func:`~.target_jobs.find_targets`.
    monte_carlo : sequence of str, optional
        Monte Carlo rasters (mean, std, p10, p50, p90, robustness).
    sensitivity_table, sensitivity_chart : str, optional
        The sensitivity job's CSV table and PNG tornado chart.
    posterior : str, optional
        A posterior probability raster (or its lineage): its weights of
        evidence are tabled.
    deposits, deposits_layer : str, optional
        Known occurrences to draw (default: those the targets counted).
    title : str, optional
        The report's title (default: the tree's name).
    feedback : Feedback, optional
        Progress and cancel.

    Returns
    -------
    ReportResult

    Raises
    ------
    FavourError
        A missing or unusable input, an output that is an input; nothing is
        left under the output's name.
    """
    feedback = feedback or Feedback()
    output = _check_output(output)
    favourability = os.path.abspath(favourability)
    given = [("favourability", favourability), ("validation result", validation), ("targets", targets),
             ("sensitivity table", sensitivity_table), ("sensitivity chart", sensitivity_chart),
             ("posterior", posterior), ("occurrences", deposits)]
    given = [(role, os.path.abspath(p)) for role, p in given if p]
    with gdal_job():
        fav = open_on_grid(favourability, "the favourability")
        record = _lineage_or_none(favourability)
        layers = component_inputs(components, record, fav.grid)
        mc_record, mc = _monte_carlo(monte_carlo, fav.grid)
        reads = [(role, f) for role, p in given
                 for f in (input_files(p, role in ("targets", "occurrences")) if role in
                           ("favourability", "targets", "occurrences") else [p])]
        reads += [(f"component {c.label}", c.path) for c in layers]
        reads += [(f"Monte Carlo {name}", p) for name, p in mc.items()]
        for role, p in list(reads):
            if role in ("favourability", "targets", "posterior") or role.startswith("Monte Carlo"):
                if os.path.exists(lin.lineage_path(p)):
                    reads.append((f"lineage of the {role}", str(lin.lineage_path(p))))
        check_apart([("the report", output), ("its lineage", str(lin.lineage_path(output)))], reads)
        feedback.set_progress(0.05)
        content = _gather(fav, record, layers, validation, targets, mc_record, mc, sensitivity_table,
                          sensitivity_chart, posterior, deposits, deposits_layer, title, feedback)
    sources = [{"role": role, **entry} for role, p in reads for entry in lin.describe_files([p])]
    versions = {"Favour": about.VERSION, "Python": platform.python_version(), "numpy": np.__version__,
                "GDAL": gdal.__version__, "matplotlib": _matplotlib_version()}
    sections = content["sections"] + [sec.lineage_section(record, sources, versions)]
    created = lin.utc_now()
    html = page(content["title"], [f"Written {created} by Favour {about.VERSION} from {favourability}."]
                + content["meta"], sections)
    feedback.check_cancelled()
    report_record = {
        **lineage_header("report", created),
        "tool": {"name": about.NAME, "version": about.VERSION, **{k: v for k, v in versions.items()
                                                                  if k != "Favour"}},
        "inputs": [{"node": s["role"], "files": [{k: s[k] for k in ("path", "size", "sha256")}]}
                   for s in sources],
        "parameters": {"main_cells": MAIN_CELLS, "panel_cells": PANEL_CELLS, "title": content["title"]},
        "figures": content["figures"], "sections": [s.title for s in sections],
        "outputs": {"report": output}, "warnings": list(feedback.warnings), "seed": None,
    }
    with OutputJob([output]) as run:
        run.outputs.add_text(output, html)
        lineage_file = stage_lineage(run.outputs, report_record, output)
        feedback.check_cancelled()
        run.outputs.commit()
    feedback.set_progress(1.0)
    return ReportResult(output, lineage_file, content["figures"], report_record)


def _matplotlib_version() -> str:
    import matplotlib

    return matplotlib.__version__


def _gather(fav, record, layers, validation, targets, mc_record, mc, sensitivity_table, sensitivity_chart,
            posterior, deposits, deposits_layer, title, feedback: Feedback) -> dict:
    """Read every input and draw every figure; return the sections, title, meta lines and figure titles."""
    figures: list[str] = []

    def figure(png: bytes, name: str, caption: str = "") -> Figure:
        figures.append(name)
        return Figure(png, name, caption)

    tree = None
    if record and isinstance(record.get("tree"), dict):
        tree = Tree.from_dict(record["tree"], base_dir=record.get("base_dir"))
    view = read_validation(validation) if validation else None
    t_record, t_rows, t_fields, outlines = (_targets(os.path.abspath(targets)) if targets else
                                            (None, [], [], []))
    posterior_record = None
    if posterior:
        posterior_record = lin.read_lineage(posterior)
        if posterior_record.get("job") != "posterior":
            raise InputError(f"{posterior} comes from a {posterior_record.get('job')!r} job, not a posterior")
    points_from = (deposits, deposits_layer) if deposits else \
        ((t_record.get("deposits") or {}).get("path"), (t_record.get("deposits") or {}).get("layer")) \
        if t_record else (None, None)
    overlay = Overlay(outlines=outlines)
    if points_from[0]:
        try:
            points = read_points(points_from[0], points_from[1], None, fav.grid, Feedback())
            overlay.points, overlay.names = points.xy, (points.names or [])
        except FavourError as exc:
            if deposits:
                raise
            feedback.warning(f"the occurrences the targets counted cannot be drawn: {exc}")
    feedback.set_progress(0.15)
    name = title or (tree.name if tree is not None and tree.name else os.path.basename(fav.path))
    main = read_decimated(fav.path, MAIN_CELLS, "Favourability" if record else os.path.basename(fav.path),
                          "favourability, μ (a relative ranking, not a probability)")
    maps = [figure(main_map(main, overlay, f"{fav.grid.describe()}; drawn from a decimated read."),
                   "Favourability map", "Favourability with the known occurrences and the targets.")]
    if layers:
        panels = [read_decimated(c.path, PANEL_CELLS, c.name) for c in layers]
        maps.append(figure(panel_maps(panels, overlay), "Component maps",
                           "Each component's μ: the process the model argues for, mapped."))
    summary = sec.summary_rows(fav.path, fav.grid.describe(), record, tree, view, t_rows)
    sections = [sec.summary_section(summary, _summary_notes(record))]
    sections.append(sec.maps_section(maps))
    feedback.set_progress(0.4)
    if tree is not None:
        curves = membership_curves(tree)
        sections.append(sec.model_section(
            tree, figure(tree_diagram(tree), "Criteria tree"),
            figure(curves, "Membership curves") if curves is not None else None))
    feedback.set_progress(0.55)
    if posterior_record is not None:
        sections.append(sec.wofe_section(posterior_record))
    if view is not None:
        drawn = []
        if view.curves:
            drawn.append(figure(rate_curves_png(view.curves, view.auc, view.auc_ci), "Success-rate curve",
                                "Cumulative share of the deposits against the share of the area, cells "
                                "ranked from the most favourable down."))
        if view.pa_curve is not None:
            drawn.append(figure(prediction_area_png(view.pa_curve, view.crossing), "Prediction–area plot"))
        sections.append(sec.validation_section(view, drawn))
    feedback.set_progress(0.65)
    if t_record is not None:
        sections.append(sec.targets_section(t_record, t_rows, t_fields))
    feedback.check_cancelled()
    sections += _uncertainty(fav, mc_record, mc, sensitivity_table, sensitivity_chart, overlay, figure)
    feedback.set_progress(0.9)
    meta = [f"Model: {tree.name}." if tree is not None and tree.name else "No tree: the raster has no "
            "Favour lineage."]
    return {"sections": sections, "title": f"Favourability report: {name}", "meta": meta, "figures": figures}


def _uncertainty(fav, mc_record, mc, sensitivity_table, sensitivity_chart, overlay, figure) -> list:
    """Return the uncertainty section, when Monte Carlo rasters or a sensitivity table or chart are given."""
    if not (mc or sensitivity_table or sensitivity_chart):
        return []
    drawn = []
    if mc:
        shown = [n for n in MC_SHOWN if n in mc] + [n for n in mc if n not in MC_SHOWN]
        panels = [read_decimated(mc[n], PANEL_CELLS, f"Monte Carlo {n}", MC_LABELS.get(n, "μ"),
                                 stretch=n == "std") for n in shown]
        drawn.append(figure(panel_maps(panels, overlay), "Monte Carlo maps",
                            "Mean, spread and percentiles of favourability over the realisations, and "
                            "robustness of the top area."))
    rows = _sensitivity_rows(os.path.abspath(sensitivity_table)) if sensitivity_table else []
    tornado = None
    if sensitivity_chart:
        tornado = figure(_png_file(os.path.abspath(sensitivity_chart)), "Tornado chart",
                         "The sensitivity job's chart, as it wrote it.")
    elif rows:
        numeric = [{k: sec.as_float(v) if k not in ("label", "node", "change", "note") else v
                    for k, v in r.items()} for r in rows]
        buffer = io.BytesIO()
        top = (mc_record or {}).get("top_area", {}).get("top_percent", 10.0)
        tornado_chart(numeric, buffer, top)
        tornado = figure(buffer.getvalue(), "Tornado chart", "Drawn from the sensitivity table.")
    return [sec.uncertainty_section(drawn, mc_record, rows, tornado)]


def _summary_notes(record) -> list[str]:
    """Return the favourability's own warnings, from its lineage."""
    return [w.get("message", "") for w in (record or {}).get("warnings") or () if isinstance(w, dict)][:10]
