"""The targets job: the top of a favourability raster as ranked zones in a GeoPackage, with lineage.

:func:`find_targets` thresholds the raster (the top x % of the area, a
favourability value, or a validation result's prediction–area crossing),
turns the cells above it into zones (:mod:`.target_zones`: polygons, an
optional merge distance, a minimum area), streams every raster once more to
sum each zone's favourability, its components' μ and the Monte Carlo
robustness (:class:`~favour_plugin.core.targets.ZoneStatistics`), ranks the
zones by mean and then peak favourability, counts the known occurrences in
each, and writes the GeoPackage with its style (``.qml`` beside it and in
the file's ``layer_styles``) and its lineage, all put in place together.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal, ogr

from ..core import lineage as lin
from ..core import targets as tg
from ..core.errors import GridError, InputError, LineageError, OutputError, ParameterError
from ..core.feedback import Feedback
from .gdalenv import gdal_job
from .grid import Grid, crs_label
from .outputs import OutputJob, check_apart, lineage_header, stage_lineage
from .sources import SourceSpec
from .streaming import map_windows
from .style import style_path
from .target_inputs import PointsOnGrid, RasterInput, component_inputs, open_on_grid, read_points
from .target_zones import (
    LAYER,
    WorkRaster,
    merge_zones,
    polygonize,
    rasterise_zones,
    targets_style,
    write_targets,
    zone_geometries,
)
from .tree_inputs import input_files

#: Zones whose rows the lineage repeats (the GeoPackage holds every zone).
LINEAGE_ROWS = 1000


@dataclass
class TargetsResult:
    """What the targets job wrote and found."""

    output: str
    style_file: str
    lineage_file: str
    rows: list[dict]
    threshold: dict
    record: dict = field(repr=False, default_factory=dict)


def _check_output(output: str) -> str:
    """Refuse an output that is not a GeoPackage file name, or that is a folder."""
    output = os.path.abspath(output)
    if not output.lower().endswith(".gpkg"):
        raise OutputError(f"the targets {output} must be a GeoPackage file name ending in .gpkg")
    if os.path.isdir(output):
        raise OutputError(f"the targets {output} is a folder; give a file name ending in .gpkg")
    return output


def _cell_area_km2(grid: Grid) -> float:
    """Return the area of one cell in km², refusing a grid whose CRS is not projected."""
    srs = grid.srs
    if not srs.IsProjected():
        raise GridError(f"the favourability is in {crs_label(srs)}, which is not projected; targets "
                        "measure their areas in km², so reproject the raster to a projected CRS")
    metres = srs.GetLinearUnits()
    return grid.cell_x * grid.cell_y * metres * metres / 1e6


def _mode(top_percent, threshold, validation) -> dict:
    """Return how the threshold is chosen, checking the parameters."""
    if threshold is not None and validation is not None:
        raise ParameterError("give a favourability threshold or a validation result, not both")
    if threshold is not None:
        if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) \
                or not np.isfinite(threshold):
            raise ParameterError(f"the favourability threshold must be a number, got {threshold!r}")
        return {"mode": "value", "value": float(threshold)}
    if validation is not None:
        from ..report.validation_result import read_validation

        view = read_validation(validation)
        crossing = view.crossing
        if crossing is None:
            raise InputError(f"the validation result {view.path} holds no prediction–area crossing")
        if crossing.threshold is not None:
            return {"mode": "validation crossing", "value": crossing.threshold,
                    "crossing": crossing.__dict__}
        return {"mode": "validation crossing", "top_percent": tg.check_top_percent(crossing.area_percent),
                "crossing": crossing.__dict__}
    top = tg.check_top_percent(10.0 if top_percent is None else top_percent)
    return {"mode": "top area", "top_percent": top}


def find_targets(favourability: str, output: str, top_percent: float | None = 10.0,
                 threshold: float | None = None, validation: str | None = None,
                 min_area_km2: float = 0.0, merge_distance: float = 0.0, components=None,
                 deposits: str | None = None, deposits_layer: str | None = None,
                 name_field: str | None = None, robustness: str | None = None,
                 feedback: Feedback | None = None, threads: int | None = None) -> TargetsResult:
    """Turn the top of a favourability raster into ranked target zones in a GeoPackage.

    Parameters
    ----------
    favourability : str
        The favourability (or posterior) raster; its lineage, if any, names
        the components.
    output : str
        The GeoPackage to write (``.gpkg``); its style ``<name>.qml`` and
        lineage ``<output>.lineage.json`` go beside it.
    top_percent : float
        The top area, in % of the valid cells (default 10), used when no
        ``threshold`` or ``validation`` is given.
    threshold : float, optional
        A favourability value: cells with μ ≥ it are in.
    validation : str, optional
        A validation result (JSON): its prediction–area crossing threshold,
        or, without one, the top area at the crossing.
    min_area_km2 : float
        Zones smaller than this (km²) are dropped.
    merge_distance : float
        Zones closer than this (map units of the raster's CRS, edge to edge)
        merge into one zone; each keeps its cells' footprint.
    components : str or sequence of str, optional
        A folder of component rasters (as ``evaluate --nodes`` writes) or a
        list of them; each zone gets each one's mean μ.
    deposits, deposits_layer, name_field : str, optional
        Known occurrences (points); each zone gets their count and, from the
        field ``name_field`` (default: a field called ``name``), their names.
    robustness : str, optional
        A Monte Carlo robustness raster; each zone gets its mean.
    feedback, threads
        Progress and cancel; worker threads.

    Returns
    -------
    TargetsResult

    Raises
    ------
    FavourError
        Bad parameters, an output that is an input, a raster on another grid
        or with no valid cell, a threshold leaving no cell, a minimum area
        larger than the grid or than every zone, deposits that cannot be
        reprojected, a cancel. Nothing is left under the final names.
    """
    feedback = feedback or Feedback()
    output = _check_output(output)
    mode = _mode(top_percent, threshold, validation)
    min_area_km2 = tg.check_distance(min_area_km2, "the minimum area (km²)")
    merge_distance = tg.check_distance(merge_distance, "the merge distance (map units)")
    favourability = os.path.abspath(favourability)
    with gdal_job():
        fav = open_on_grid(favourability, "the favourability")
        grid = fav.grid
        cell_km2 = _cell_area_km2(grid)
        if min_area_km2 > grid.cells * cell_km2:
            raise ParameterError(f"the minimum area {min_area_km2:g} km² is larger than the whole grid "
                                 f"({grid.cells * cell_km2:.6g} km², {grid.describe()})")
        record = _source_lineage(favourability)
        layers = component_inputs(components, record, grid)
        rob = open_on_grid(os.path.abspath(robustness), "the robustness raster", grid) if robustness else None
        read = [("the favourability", f) for f in input_files(favourability, False)]
        read += [(f"the component raster {c.label}", c.path) for c in layers]
        read += [("the robustness raster", rob.path)] if rob else []
        if deposits:
            read += [("the deposits", f) for f in input_files(os.path.abspath(deposits), True)]
        read += [("the validation result", os.path.abspath(validation))] if validation else []
        style = style_path(output)
        if os.path.normcase(style) == os.path.normcase(style_path(favourability)):
            raise OutputError(f"the targets {output} would write their style {style}, the name QGIS takes "
                              "the favourability's own style from; give the targets another name")
        check_apart([("the targets", output), ("their style", style),
                     ("their lineage", str(lin.lineage_path(output)))], read)
        points = read_points(os.path.abspath(deposits), deposits_layer, name_field, grid, feedback) \
            if deposits else None
    with OutputJob([output]) as run, gdal_job():
        created = lin.utc_now()
        cut = _threshold(fav, mode, feedback, threads)
        zones, stats, note = _zones(run.workdir, fav, layers, rob, cut["value"], merge_distance, feedback,
                                    threads)
        cut["realised_percent"] = 100.0 * note["cells_above"] / cut["valid_cells"]
        rows, ranks = _ranked_rows(stats, layers, rob, cell_km2, min_area_km2, note)
        geometries = _rank_pass(run.workdir, fav, zones, ranks, cut["value"], points, rows, feedback, threads)
        fields = _fields(layers, rob, points)
        means = [row["fav_mean"] for row in rows]
        qml = targets_style(min(means), max(means))
        description = f"Favour targets from {os.path.basename(favourability)}; {lin.CAUTION}"
        write_targets(run.outputs.reserve(output, ".gpkg"), grid.srs, fields, rows, geometries, qml,
                      description)
        feedback.set_progress(0.97)
        run.outputs.add_text(style, qml)
        entries = [("favourability", [favourability])] + [(f"component {c.label}", [c.path]) for c in layers]
        entries += [("robustness", [rob.path])] if rob else []
        entries += [("deposits", input_files(os.path.abspath(deposits), True))] if deposits else []
        entries += [("validation result", [os.path.abspath(validation)])] if validation else []
        record = {
            **lineage_header("targets", created),
            "inputs": [{"node": label, "files": lin.describe_files(paths)} for label, paths in entries],
            "grid": grid.to_dict(),
            "source_lineage": _source_note(favourability, record),
            "parameters": {**mode, "min_area_km2": min_area_km2, "merge_distance": merge_distance,
                           "merge_units": f"map units of {crs_label(grid.srs)}",
                           "connectivity": "4 (cells sharing a side)",
                           "ranking": "mean, then peak favourability",
                           "occurrences": "counted by the cell each point falls in"},
            "threshold": cut, "zones": note, "deposits": points.record if points else None,
            "targets": rows[:LINEAGE_ROWS], "targets_in_lineage": f"the first {min(len(rows), LINEAGE_ROWS)} "
            f"of {len(rows)} zones; every zone is in the GeoPackage",
            "outputs": {"targets": output, "style": style, "layer": LAYER},
            "warnings": list(feedback.warnings), "seed": None,
        }
        lineage_file = stage_lineage(run.outputs, record, output)
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        return TargetsResult(output, style, lineage_file, rows, cut, record)


def _source_lineage(path: str) -> dict | None:
    """Return the favourability's lineage, or None when it has none (or an unreadable one)."""
    try:
        return lin.read_lineage(path)
    except LineageError:
        return None


def _source_note(path: str, record: dict | None) -> dict | None:
    """Say which lineage the favourability came with."""
    if record is None:
        return None
    tree = record.get("tree") if isinstance(record.get("tree"), dict) else {}
    return {"path": str(lin.lineage_path(path)), "job": record.get("job"), "created": record.get("created"),
            "tree": tree.get("name")}


def _threshold(fav: RasterInput, mode: dict, feedback: Feedback, threads) -> dict:
    """Find the threshold: a value as given, or the k-th largest valid value; refuse one leaving no cell."""
    def summary(window, reader):
        v = reader.read(fav.spec, window)
        valid = v[~np.isnan(v)]
        return (valid.size, float(valid.min()), float(valid.max())) if valid.size else (0, np.inf, -np.inf)

    count, low, high = 0, np.inf, -np.inf
    for _, (n, lo, hi) in map_windows(summary, fav.grid, feedback, threads, (0.0, 0.08)):
        count, low, high = count + n, min(low, lo), max(high, hi)
    if count == 0:
        raise InputError(f"the favourability {fav.path} has no valid cell: every one of its "
                         f"{fav.grid.cells} cells is nodata")
    cut = {"valid_cells": count, "min": low, "max": high, **mode}
    if "value" in mode:
        if mode["value"] > high:
            raise InputError(f"the threshold {mode['value']:g} leaves no cell: the highest favourability "
                             f"of {fav.path} is {high:.6g}")
        cut["source"] = "the value given" if mode["mode"] == "value" else "the prediction–area crossing"
    else:
        k = tg.top_count(count, mode["top_percent"])
        selection = tg.TopSelection(low, high, k)
        done = False
        while not done:
            counts, lo, hi = np.zeros(selection.bins, np.int64), np.inf, -np.inf
            for _, (c, a, b) in map_windows(lambda w, r: selection.block_counts(r.read(fav.spec, w)),
                                            fav.grid, feedback, threads, (0.08, 0.18)):
                counts, lo, hi = counts + c, min(lo, a), max(hi, b)
            done = selection.narrow(counts, lo, hi)
        if selection.value is not None:
            cut["value"] = selection.value
        else:
            parts = [c for _, c in map_windows(lambda w, r: selection.candidates(r.read(fav.spec, w)),
                                               fav.grid, feedback, threads, (0.18, 0.25))]
            cut["value"] = selection.finish(np.concatenate(parts))
        cut.update(k=k, passes=selection.passes + 2, source=f"the {k}-th largest of {count} valid cells "
                   "(top-down), found exactly")
    return cut


def _zones(workdir: str, fav: RasterInput, layers, rob, value: float, distance: float, feedback, threads):
    """Mask, polygons, merged zones and the zone-id raster; then each zone's sums in one pass."""
    grid = fav.grid
    mask = WorkRaster(os.path.join(workdir, "mask.tif"), grid)
    above = 0
    for window, block in map_windows(lambda w, r: (r.read(fav.spec, w) >= value).astype(np.uint8), grid,
                                     feedback, threads, (0.25, 0.35)):
        mask.write(window, block)
        above += int(block.sum())
    mask.close()
    gpkg = os.path.join(workdir, "zones.gpkg")
    polygons = polygonize(mask.path, gpkg, "cells", grid, feedback, (0.35, 0.45))
    layer, count = "cells", polygons
    if distance > 0:
        layer, count = "merged", merge_zones(gpkg, "cells", "merged", distance, grid)
    zone_raster = rasterise_zones(gpkg, layer, grid, os.path.join(workdir, "zones.tif"), feedback,
                                  (0.45, 0.5))
    zones = RasterInput("zones", "", zone_raster, SourceSpec("zones", zone_raster, 1, None, 1.0, 0.0, {}),
                        grid)
    stats = tg.ZoneStatistics(count, [c.field for c in layers], rob is not None)

    def work(window, reader):
        v = reader.read(fav.spec, window)
        ids = np.where(v >= value, reader.read_raw(zones.spec, window), 0)
        comps = {c.field: reader.read(c.spec, window) for c in layers}
        return tg.BlockSums(ids, v, comps, reader.read(rob.spec, window) if rob else None)

    for _, block in map_windows(work, grid, feedback, threads, (0.5, 0.7)):
        stats.add(block)
    if int(stats.cells.sum()) != above:
        raise InputError(f"{above - int(stats.cells.sum())} cells above the threshold fell in no zone; "
                         "the zones and the raster disagree")
    note = {"cells_above": above, "polygons": polygons, "zones_before_minimum_area": count,
            "merge": "buffered by half the merge distance and dissolved" if distance > 0 else "none"}
    return zones, stats, note


def _ranked_rows(stats: tg.ZoneStatistics, layers, rob, cell_km2: float, min_area_km2: float, note: dict):
    """Drop zones under the minimum area, rank the rest; return their rows and zone id → rank."""
    means = stats.means()
    ids = np.flatnonzero(stats.cells)
    ids = ids[ids > 0]
    areas = stats.cells * cell_km2
    kept = ids[areas[ids] >= min_area_km2]
    if kept.size == 0:
        raise InputError(f"no zone reaches the minimum area {min_area_km2:g} km²: the largest of the "
                         f"{ids.size} zones covers {float(areas[ids].max()):.6g} km²")
    order = tg.rank_order(means["favourability"], stats.peak, kept)
    ranks = np.zeros(stats.cells.size, np.int32)
    ranks[order] = np.arange(1, order.size + 1, dtype=np.int32)
    note.update(zones=int(order.size), dropped_below_minimum_area=int(ids.size - kept.size),
                cells_in_targets=int(stats.cells[kept].sum()))
    rows = []
    for rank, zone in enumerate(order, start=1):
        row = {"rank": rank, "area_km2": float(areas[zone]), "cells": int(stats.cells[zone]),
               "fav_mean": float(means["favourability"][zone]), "fav_peak": float(stats.peak[zone])}
        parts = {}
        only_components = any(c.component for c in layers)
        for c in layers:
            value = float(means[c.field][zone])
            row[c.field] = value if np.isfinite(value) else None
            if c.component or not only_components:
                parts[c.short] = row[c.field]
        row["why"] = tg.why_text(parts)
        if rob is not None:
            value = float(means["robustness"][zone])
            row["robustness"] = value if np.isfinite(value) else None
        rows.append(row)
    return rows, ranks


def _rank_pass(workdir, fav, zones, ranks, value, points: PointsOnGrid | None, rows, feedback, threads):
    """Write the ranks raster, count the occurrences in each zone, and polygonise the ranked zones."""
    grid = fav.grid
    raster = WorkRaster(os.path.join(workdir, "ranks.tif"), grid, gdal.GDT_Int32)
    found_rank = np.zeros(points.total if points else 0, np.int32)

    def work(window, reader):
        v = reader.read(fav.spec, window)
        block = np.where(v >= value, ranks[reader.read_raw(zones.spec, window)], 0).astype(np.int32)
        hits = points.ranks_in(window, block) if points else None
        return block, hits

    for window, (block, hits) in map_windows(work, grid, feedback, threads, (0.7, 0.82)):
        raster.write(window, block)
        if hits is not None:
            index, rank = hits
            found_rank[index] = rank
    raster.close()
    gpkg = os.path.join(workdir, "ranked.gpkg")
    polygonize(raster.path, gpkg, "ranked", grid, feedback, (0.82, 0.92))
    geometries = zone_geometries(gpkg, "ranked")
    if points is not None:
        inside: dict[int, list[int]] = {}
        for index in np.flatnonzero(found_rank):  # one entry per occurrence in a zone, in file order
            inside.setdefault(int(found_rank[index]), []).append(int(index))
        for row in rows:
            found = inside.get(row["rank"], [])
            row["occurrences"] = len(found)
            if points.names is not None:
                row["occurrence_names"] = "; ".join(points.names[i] for i in found)
    return geometries


def _fields(layers, rob, points) -> list[tuple[str, int]]:
    """Return the attribute fields of the targets layer, in order."""
    fields = [("rank", ogr.OFTInteger), ("area_km2", ogr.OFTReal), ("cells", ogr.OFTInteger64),
              ("fav_mean", ogr.OFTReal), ("fav_peak", ogr.OFTReal)]
    fields += [(c.field, ogr.OFTReal) for c in layers]
    fields += [("why", ogr.OFTString)] if layers else []
    if points is not None:
        fields.append(("occurrences", ogr.OFTInteger))
        if points.names is not None:
            fields.append(("occurrence_names", ogr.OFTString))
    if rob is not None:
        fields.append(("robustness", ogr.OFTReal))
    return fields
