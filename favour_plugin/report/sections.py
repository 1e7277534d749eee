"""The sections of the report, each built from plain data (lineage records, rows, figures' bytes).

Every number shown comes from a file the report job read — a lineage, the
targets GeoPackage, a validation result, a sensitivity table — and the
lineage section names each of those files with its SHA-256, so a reader can
tell exactly what the report rests on.
"""

from __future__ import annotations

import os
from collections.abc import Sequence

from ..core.tree import PATH_SEPARATOR, Tree
from .html import Figure, Section, figure_html, number, paragraph, table_html
from .tree_figures import membership_text, numbered_nodes, operator_text
from .validation_result import ValidationView

#: Fewer deposits than this and the validation's numbers are called weak evidence
#: (common practice, no source).
FEW_DEPOSITS = 10


def summary_section(rows: Sequence[tuple[str, object]], notes: Sequence[str] = ()) -> Section:
    """Return the summary: what was evaluated, on which grid, and the headline numbers."""
    section = Section("summary", "Summary").add(table_html(["", "value"], rows, text_columns=(0, 1)))
    for note in notes:
        section.add(paragraph(note, "note"))
    return section


def summary_rows(path: str, grid: str, record: dict | None, tree: Tree | None, view: ValidationView | None,
                 targets: Sequence[dict]) -> list:
    """Return the summary table: the map, its grid and statistics, and the headline numbers given."""
    rows = [["favourability raster", path], ["grid", grid]]
    if tree is not None:
        rows.append(["model", tree.name or record.get("root")])
    stats = ((record or {}).get("statistics") or {}).get((record or {}).get("root"), {})
    if stats:
        rows += [["valid cells", stats.get("valid_cells")], ["nodata cells", stats.get("nodata_cells")],
                 ["favourability min / mean / max",
                  f"{stats['min']:.3f} / {stats['mean']:.3f} / {stats['max']:.3f}" if stats.get("mean")
                  is not None else "–"]]
    if view is not None and view.auc is not None:
        ci = f" ({view.auc_ci[0]:.3f}–{view.auc_ci[1]:.3f})" if view.auc_ci else ""
        rows.append(["AUC of the success-rate curve", f"{view.auc:.3f}{ci} over {view.n_deposits} deposits"])
    if targets:
        area = sum(r["area_km2"] for r in targets)
        rows.append(["targets", f"{len(targets)} zones, {area:.2f} km² in all"])
    return rows


def maps_section(figures: Sequence[Figure]) -> Section:
    """Return the maps: the favourability and the component panels."""
    section = Section("maps", "Maps")
    section.add(paragraph("Favourability is drawn on Favour's ramp, from slate (nothing in favour) through "
                          "teal, sage and straw to rust (most favourable); grey is nodata. White circles "
                          "are known occurrences; black outlines, numbered by rank, are the targets."))
    for figure in figures:
        section.add(figure_html(figure))
    return section


def model_section(tree: Tree, diagram: Figure, curves: Figure | None) -> Section:
    """Return the model: the tree diagram, every node's operator, weight and rationale, the curves."""
    section = Section("model", "The model: criteria tree")
    if tree.description:
        section.add(paragraph(tree.description))
    section.add(paragraph("Each box is a node: its number, its name, and how it combines its children "
                          "(its operator) or, for a proxy, how its layer's values become μ (its membership "
                          "function). Weights count where the parent takes a weighted mean. The table gives "
                          "every node's rationale: in a knowledge-driven model the reasons are part of the "
                          "result."), figure_html(diagram))
    rows = []
    parents = {path: node for _, path, node, _ in numbered_nodes(tree)}
    for number_, path, node, depth in numbered_nodes(tree):
        parent = parents.get(path.rsplit(PATH_SEPARATOR, 1)[0]) if depth else None
        weighted = parent is not None and (parent.operator or {}).get("type") == "weighted_mean"
        how = operator_text(node.operator) if node.operator else membership_text(node.membership)
        proxy = ""
        if node.proxy is not None:
            proxy = node.proxy.path + (f" : {node.proxy.layer}" if node.proxy.layer else "") + \
                (f" ({node.proxy.measure})" if node.proxy.measure else "")
        rows.append([number_, path, node.component or "", how, node.weight if weighted else None, proxy,
                     node.rationale or "(no rationale given)"])
    section.add("<h3>Nodes and their rationale</h3>",
                table_html(["no.", "node", "component", "operator or membership", "weight", "layer",
                            "rationale"], rows, text_columns=(1, 2, 3, 5), wide_columns=(6,)))
    if curves is not None:
        section.add("<h3>Membership functions</h3>",
                    paragraph("μ(x) of every proxy over the range its parameters span, drawn with the "
                              "very function the evaluation applies; classes are shown as bars."),
                    figure_html(curves))
    return section


def wofe_section(record: dict) -> Section:
    """Weights of evidence from a posterior job's lineage: the prior, the weights, the checks."""
    summary = record.get("summary") or {}
    section = Section("weights-of-evidence", "Weights of evidence")
    prior = summary.get("prior") or {}
    deposits = summary.get("deposits") or {}
    section.add(table_html(["", "value"], [
        ["unit cell (km²)", (record.get("parameters") or {}).get("unit_area_km2")],
        ["study area (unit cells)", prior.get("area_units")], ["deposit cells", prior.get("deposits")],
        ["prior probability per unit cell", prior.get("probability")],
        ["deposit points read", deposits.get("points")],
        ["points outside the grid (not counted)", deposits.get("outside_grid")]]))
    rows = []
    for layer in summary.get("layers") or ():
        for k, cls in enumerate(layer.get("classes") or ()):
            rows.append([layer.get("name"), cls, layer["weights"][k], layer["s_weights"][k],
                         layer["fractions"][k]])
    section.add("<h3>Weights per layer and class</h3>",
                table_html(["layer", "class", "weight", "s(weight)", "share of known area"], rows))
    overall = (summary.get("checks") or {}).get("overall") or {}
    if overall:
        section.add("<h3>Conditional independence</h3>", table_html(["", "value"], [
            ["observed deposits n", overall.get("observed")],
            ["predicted deposits T = Σ N·P", overall.get("predicted")],
            ["n / T (below about 0.85 is a warning sign)", overall.get("ratio")],
            ["one-tailed p (Agterberg–Cheng)", overall.get("p_value")]]))
        if overall.get("note"):
            section.add(paragraph(str(overall["note"]), "note"))
    return section


def validation_section(view: ValidationView, figures: Sequence[Figure]) -> Section:
    """Return the validation against known deposits: AUC and its interval, curves, P–A plot, capture."""
    section = Section("validation", "Validation against known deposits")
    rows = [["deposits used", view.n_deposits], ["AUC of the success-rate curve", view.auc]]
    if view.auc_ci is not None:
        rows.append(["AUC bootstrap interval", f"{view.auc_ci[0]:.3f} – {view.auc_ci[1]:.3f}"])
    if view.crossing is not None:
        c = view.crossing
        rows.append(["prediction–area crossing", f"{c.prediction_percent:.1f} % of the deposits in "
                                                 f"{c.area_percent:.1f} % of the area"])
        if c.nd is not None:
            rows.append(["Nd = P / (100 − P)", c.nd])
        if c.threshold is not None:
            rows.append(["favourability at the crossing", c.threshold])
    section.add(table_html(["", "value"], rows, text_columns=(0, 1)))
    if view.n_deposits is not None and view.n_deposits < FEW_DEPOSITS:
        section.add(paragraph(f"Only {view.n_deposits} deposits: every number here rests on very little "
                              "evidence, and the interval shows how little.", "caution"))
    if view.capture:
        section.add("<h3>Capture efficiency</h3>", table_html(
            ["top of the area", "deposits captured (%)"],
            [[f"{k} %" if not str(k).endswith("%") else k, v] for k, v in view.capture.items()]))
    for figure in figures:
        section.add(figure_html(figure))
    if not figures:
        section.add(paragraph("The validation result holds no curve to draw.", "note"))
    for note in view.notes:
        section.add(paragraph(note, "note"))
    section.add(paragraph(f"From {view.path}."))
    return section


def targets_section(record: dict, rows: Sequence[dict], fields: Sequence[str]) -> Section:
    """Return the ranked targets: how they were cut, and one row per zone with why it ranks."""
    section = Section("targets", "Ranked targets")
    cut = record.get("threshold") or {}
    params = record.get("parameters") or {}
    zones = record.get("zones") or {}
    how = f"cells with favourability ≥ {number(cut.get('value'))} ({cut.get('source', '')})"
    if params.get("top_percent") is not None:
        how = f"the top {params['top_percent']:g} % of the area: " + how
    section.add(paragraph(
        f"Zones are {how}, joined where cells share a side; zones closer than "
        f"{number(params.get('merge_distance'))} map units merge (each keeps its cells' footprint) and zones "
        f"under {number(params.get('min_area_km2'))} km² are dropped "
        f"({zones.get('dropped_below_minimum_area', 0)} dropped). They are ranked by mean favourability, "
        "then by peak."),
        paragraph("Why a zone ranks: the columns μ give each component's mean over the zone; the last "
                  "column orders them from strongest to weakest. A zone carried by one process and weak in "
                  "another is a different field proposition from one fair in all four.", "note"))
    labels = {"rank": "rank", "area_km2": "area (km²)", "fav_mean": "mean μ", "fav_peak": "peak μ",
              "occurrences": "known occurrences", "robustness": "robustness"}
    shown = [f for f in fields if f not in ("cells", "why", "occurrence_names")]
    header = [labels.get(f, "μ " + f[3:].replace("_", " ") if f.startswith("mu_") else f) for f in shown]
    section.add(table_html(header, [[row.get(f) for f in shown] for row in rows[:60]]))
    if "why" in fields or "occurrence_names" in fields:
        texts = [f for f in ("why", "occurrence_names") if f in fields]
        section.add("<h3>Why each zone ranks</h3>", table_html(
            ["rank"] + ["components, strongest first" if f == "why" else "known occurrences inside"
                        for f in texts],
            [[row["rank"]] + [row.get(f) or "" for f in texts] for row in rows[:60]],
            text_columns=(1, 2), wide_columns=(1, 2)))
    if len(rows) > 60:
        section.add(paragraph(f"The first 60 of {len(rows)} zones; every zone is in the GeoPackage."))
    if "robustness" in fields:
        section.add(paragraph("Robustness is the mean, over the zone, of the share of Monte Carlo "
                              "realisations in which a cell is in the top area: near 1, the zone stays a "
                              "target whichever expert's view is drawn."))
    return section


def uncertainty_section(figures: Sequence[Figure], mc_record: dict | None, sensitivity: Sequence[dict],
                        tornado: Figure | None) -> Section:
    """Return the uncertainty: Monte Carlo maps, the sensitivity of the top area to each change."""
    section = Section("uncertainty", "Uncertainty")
    if mc_record:
        sampling = mc_record.get("sampling") or {}
        top = (mc_record.get("top_area") or {}).get("top_percent")
        section.add(paragraph(
            f"Monte Carlo: {sampling.get('n', '?')} realisations drawn from the experts' scores "
            f"(mode {sampling.get('mode', '?')}, seed {mc_record.get('seed')}); robustness is the share "
            f"of realisations in which a cell is in the top {number(top)} % of the area."))
    for figure in figures:
        section.add(figure_html(figure))
    if sensitivity:
        section.add("<h3>Sensitivity of the top area</h3>")
        ranked = sorted((r for r in sensitivity if as_float(r.get("top_area_change_percent")) is not None),
                        key=lambda r: -as_float(r["top_area_change_percent"]))
        table = [[r.get("label"), as_float(r.get("top_area_change_percent")), as_float(r.get("auc")),
                  as_float(r.get("auc_change"))] for r in ranked[:25]]
        section.add(table_html(["change", "share of the top area that changes (%)", "AUC", "change of AUC"],
                               table))
    if tornado is not None:
        section.add(figure_html(tornado))
    return section


def as_float(value) -> float | None:
    """Return a table cell as a float (CSV cells are text), None when empty."""
    if value is None or value == "":
        return None
    try:
        return float(value)
    except (TypeError, ValueError):
        return None


def lineage_section(record: dict | None, sources: Sequence[dict], versions: dict) -> Section:
    """Return the lineage: the favourability's inputs with checksums, every file read, versions."""
    section = Section("lineage", "Lineage")
    if record:
        tool = record.get("tool") or {}
        section.add(paragraph(
            f"The favourability was written by the {record.get('job')} job of {tool.get('name', 'Favour')} "
            f"{tool.get('version', '')} on {record.get('created')} (Python {tool.get('python', '?')}, "
            f"numpy {tool.get('numpy', '?')}, GDAL {tool.get('gdal', '?')}); seed "
            f"{record.get('seed') if record.get('seed') is not None else 'none (no randomness)'}."))
        rows = [[entry.get("node") or "", os.path.basename(f["path"]), f["size"], f["sha256"]]
                for entry in record.get("inputs") or () for f in entry.get("files") or ()]
        if (record.get("tree_file") or {}).get("path"):
            t = record["tree_file"]
            rows.insert(0, ["tree file", os.path.basename(t["path"]), t["size"], t["sha256"]])
        section.add("<h3>Inputs of the favourability</h3>",
                    table_html(["node", "file", "bytes", "SHA-256"], rows, text_columns=(0, 1, 3)))
    else:
        section.add(paragraph("The favourability has no lineage beside it: its tree and inputs are unknown.",
                              "caution"))
    section.add("<h3>Files this report read</h3>",
                table_html(["role", "file", "bytes", "SHA-256"],
                           [[s["role"], s["path"], s["size"], s["sha256"]] for s in sources],
                           text_columns=(0, 1, 3)))
    section.add(paragraph("This report: " + ", ".join(f"{k} {v}" for k, v in versions.items()) + ". "
                          "Its own lineage lies beside it (<report>.lineage.json)."))
    return section
