"""Benchmark: the weights-of-evidence table of a 20-class raster, against reading that raster once.

Run with ``make bench`` (after ``bench_evaluate.py``) or
``.venv/bin/python bench/bench_evidence.py``. The script builds, in a work
folder, a Byte evidence raster of 20 classes (GeoTIFF, 256 x 256 tiles,
DEFLATE with the horizontal predictor, nodata 0 on an unsurveyed corner and
on scattered cells; the classes are a smooth synthetic field from a seeded
generator cut at fixed levels, so they form coherent zones) and a GeoPackage
of a few hundred deposit points in the same CRS (some outside the grid, some
on nodata, two sharing a cell with another), then times in one run:

(a) the I/O floor: the raster read once, block by block, with the engine's
    windows (``raster.blocks.iter_windows``) and ``band.ReadAsArray``, and
    nothing computed;
(c) ``favour:evidenceweights`` with METHOD=categorical and METHOD=ascending,
    run through ``qgis_process.bin`` (isolated profile, plugin enabled from
    this checkout), and ``raster.wofe_jobs.evidence_weights`` called
    directly in a plain Python child (the core path).

Every stage runs in its own child process; its wall time and peak resident
memory are measured through the small launcher of ``bench/common.py``,
beside the same figures for idle children of the same kind. Each weights
table written is then checked against an independent count made here: the
whole raster read at once and counted with ``numpy.bincount``, the deposit
cells the generator placed, W+ and W− from the formula, and the contrast and
its standard error from statsmodels' ``Table2x2`` (log odds ratio, Woolf
standard error).

The figures are ratios from one run on this machine, not a timed test. A
missed target prints MISS and the exit status stays 0; the exit status is 1
only when a table disagrees with the independent count, since then the job
did not do the work that was timed. See ``bench/README.md``.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import os
import shutil
import sys
import time
from pathlib import Path

import common
import numpy as np
from common import (
    CELL,
    ORIGIN,
    QGIS_PROCESS,
    ROOT,
    Field,
    Measure,
    Qgis,
    bench_env,
    fresh,
    hash_once,
    housekeeping,
    mb,
    run_child,
    srs,
    verdict,
)
from osgeo import gdal, ogr, osr
from scipy import special

from favour_plugin.raster.blocks import count_windows, iter_windows

gdal.UseExceptions()
ogr.UseExceptions()
osr.UseExceptions()

# -- what is built -------------------------------------------------------------

GENERATOR = 1  # bump when the raster or the points change, so old inputs are rebuilt
SEED = 20240707
CLASSES = 20  # codes 1 to 20
NODATA = 0
CREATION = ("TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", "PREDICTOR=2",
            "BIGTIFF=IF_SAFER", "NUM_THREADS=ALL_CPUS")
STRIP = 256
FULL = 6000  # the grid; smaller grids show the same district, sampled more coarsely
SCATTERED_NODATA = 200  # single nodata cells, beside the unsurveyed corner
DEPOSITS = 300  # on the grid, on known evidence, at full size
OUTSIDE = 4  # points off the grid
ON_NODATA = 5  # points on nodata cells
SHARED = 2  # extra points in a cell that already holds one
METHODS = ("categorical", "ascending")

# Targets from the issue.
TARGET_OVER_FLOOR = 1.5  # (c) / (a) at most
TARGET_PEAK_MB = 300.0  # peak memory of (c) at most
TOLERANCE = 1e-9  # relative, table against the independent count


def deposit_count(size: int) -> int:
    """Return how many deposits sit on known evidence: 300, fewer on small grids (one per 2000 cells)."""
    return min(DEPOSITS, max(12, size * size // 2000))


def unit_area_km2(size: int) -> float:
    """Return the unit cell (km²): 1 km², smaller where the grid holds fewer than 20 per deposit."""
    area = size * size * CELL * CELL / 1e6
    return min(1.0, area / (20 * deposit_count(size)))


def levels() -> np.ndarray:
    """Return the 19 levels that cut the standardised field into classes 1 to 20 of equal expected area."""
    return special.ndtri(np.arange(1, CLASSES) / CLASSES)


def weight_of_class(classes: np.ndarray) -> np.ndarray:
    """Return the relative chance of a deposit per class: falling with the code, raised on 13 to 15.

    So the ascending table (pattern: code ≤ t) has a real best cut and the
    categorical one both positive and negative classes.
    """
    classes = np.asarray(classes, dtype=np.float64)
    weight = np.exp(-0.12 * (classes - 1.0)) * np.where((classes >= 13) & (classes <= 15), 4.0, 1.0)
    return np.where(classes == NODATA, 0.0, weight)


# -- synthetic inputs --------------------------------------------------------


def corner(size: int) -> tuple[slice, slice]:
    """Return the unsurveyed corner (rows, columns): nodata, top right, 1/8 high and 1/6 wide."""
    return slice(0, max(1, size // 8)), slice(size - max(1, size // 6), size)


def write_evidence(path: Path, size: int) -> int:
    """Write the ``size`` x ``size`` Byte evidence raster; return its number of nodata cells."""
    field = Field(SEED)
    # The same district at any size: a smaller grid samples the same field more coarsely.
    field.kx, field.ky = field.kx * FULL / size, field.ky * FULL / size
    cuts = levels()
    rng = np.random.default_rng([SEED, 1])
    holes = rng.integers(0, size, (SCATTERED_NODATA, 2))
    rows_nd, cols_nd = corner(size)
    tmp = path.with_suffix(".partial.tif")
    ds = gdal.GetDriverByName("GTiff").Create(str(tmp), size, size, 1, gdal.GDT_Byte, list(CREATION))
    ds.SetGeoTransform((ORIGIN[0], CELL, 0.0, ORIGIN[1], 0.0, -CELL))
    ds.SetProjection(srs().ExportToWkt())
    band = ds.GetRasterBand(1)
    band.SetNoDataValue(NODATA)
    band.SetDescription("host rock class")
    nodata = 0
    for row in range(0, size, STRIP):
        rows = min(STRIP, size - row)
        values = (np.digitize(field.strip(row, rows, size), cuts) + 1).astype(np.uint8)
        top, bottom = max(rows_nd.start, row), min(rows_nd.stop, row + rows)
        if top < bottom:
            values[top - row:bottom - row, cols_nd] = NODATA
        for r, c in holes:
            if row <= r < row + rows:
                values[r - row, c] = NODATA
        nodata += int(np.count_nonzero(values == NODATA))
        band.WriteArray(values, 0, row)
    band = None
    ds = None
    os.replace(tmp, path)
    return nodata


def read_whole(path: str) -> np.ndarray:
    """Read band 1 of a raster at once (the checking process only; the jobs stream blocks)."""
    ds = gdal.Open(path)
    band = ds.GetRasterBand(1)
    values = band.ReadAsArray()
    band = None
    ds = None
    return values


def place_deposits(classes: np.ndarray, size: int) -> dict:
    """Choose the deposit cells and points; return them as plain data.

    ``cells`` are the distinct (row, column) cells on the grid that hold a
    deposit (on known evidence or on nodata); ``points`` every point written,
    with the cell it lies in (None when off the grid).
    """
    rng = np.random.default_rng([SEED, 2])
    wanted = deposit_count(size)
    top = float(weight_of_class(np.arange(1, CLASSES + 1)).max())
    chosen: list[tuple[int, int]] = []
    taken: set[tuple[int, int]] = set()
    while len(chosen) < wanted:
        rc = rng.integers(0, size, (4 * wanted, 2))
        keep = rng.uniform(0.0, top, rc.shape[0]) < weight_of_class(classes[rc[:, 0], rc[:, 1]])
        for r, c in rc[keep]:
            cell = (int(r), int(c))
            if cell not in taken and len(chosen) < wanted:
                taken.add(cell)
                chosen.append(cell)
    rows_nd, cols_nd = corner(size)
    on_nodata = [(int(rows_nd.start + rng.integers(0, rows_nd.stop - rows_nd.start)),
                  int(cols_nd.start + rng.integers(0, cols_nd.stop - cols_nd.start)))
                 for _ in range(ON_NODATA)]
    on_nodata = list(dict.fromkeys(cell for cell in on_nodata if cell not in taken))
    cells = chosen + on_nodata
    points = [(cell, 0.1 + 0.8 * rng.uniform(size=2)) for cell in cells]
    # Extra points in cells that already hold one: merged into one deposit cell.
    points += [(chosen[int(i)], 0.1 + 0.8 * rng.uniform(size=2))
               for i in rng.choice(len(chosen), SHARED, replace=False)]
    doc = {"cells": [list(c) for c in cells], "points": []}
    for (r, c), (fy, fx) in points:
        doc["points"].append({"x": ORIGIN[0] + (c + fx) * CELL, "y": ORIGIN[1] - (r + fy) * CELL,
                              "cell": [r, c]})
    # Off the grid: beyond each edge in turn, by 1 to 50 cells.
    for k in range(OUTSIDE):
        along = float(rng.uniform(0, size * CELL))
        beyond = float(rng.uniform(1, 50)) * CELL
        x0, y0, side = ORIGIN[0], ORIGIN[1], size * CELL
        x, y = [(x0 - beyond, y0 - along), (x0 + side + beyond, y0 - along),
                (x0 + along, y0 + beyond), (x0 + along, y0 - side - beyond)][k % 4]
        doc["points"].append({"x": x, "y": y, "cell": None})
    return doc


def write_deposits(path: Path, doc: dict) -> None:
    """Write the deposit points as a one-layer GeoPackage (layer ``deposits``) in the grid's CRS."""
    tmp = path.with_suffix(".partial.gpkg")
    if tmp.exists():
        tmp.unlink()
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(tmp))
    layer = ds.CreateLayer("deposits", srs(), ogr.wkbPoint)
    layer.CreateField(ogr.FieldDefn("name", ogr.OFTString))
    for i, point in enumerate(doc["points"], start=1):
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetField("name", f"prospect {i:03d}")
        feature.SetGeometry(ogr.CreateGeometryFromWkt(f"POINT ({point['x']!r} {point['y']!r})"))
        layer.CreateFeature(feature)
        feature = None
    layer = None
    ds = None
    os.replace(tmp, path)


def manifest_for(size: int) -> dict:
    """Return what a set of inputs of ``size`` is built from (reused only if it matches)."""
    return {"generator": GENERATOR, "seed": SEED, "size": size, "cell": CELL, "classes": CLASSES,
            "nodata": NODATA, "deposits": deposit_count(size), "outside": OUTSIDE,
            "on_nodata": ON_NODATA, "shared": SHARED}


def build_inputs(folder: Path, size: int) -> dict:
    """Build (or reuse) the evidence raster and the deposits of ``size``; return the manifest."""
    folder.mkdir(parents=True, exist_ok=True)
    manifest_file = folder / "manifest.json"
    wanted = manifest_for(size)
    if manifest_file.exists():
        old = json.loads(manifest_file.read_text())
        if {k: old.get(k) for k in wanted} == wanted and all(
                (folder / f["file"]).is_file() and (folder / f["file"]).stat().st_size == f["bytes"]
                for f in old.get("files", [])) and len(old.get("files", [])) == 3:
            print(f"reusing the {size} x {size} evidence and deposits in {folder}")
            return old
    print(f"building a {size} x {size} Byte evidence raster of {CLASSES} classes and "
          f"{deposit_count(size) + ON_NODATA + SHARED + OUTSIDE} deposit points in {folder} ...",
          flush=True)
    start = time.perf_counter()
    evidence, deposits, cells = folder / "host_rock.tif", folder / "deposits.gpkg", folder / "deposits.json"
    nodata = write_evidence(evidence, size)
    doc = place_deposits(read_whole(str(evidence)), size)
    write_deposits(deposits, doc)
    cells.write_text(json.dumps(doc))
    files = [{"file": p.name, "bytes": p.stat().st_size} for p in (evidence, deposits, cells)]
    manifest = {**wanted, "files": files, "nodata_cells": nodata, "points": len(doc["points"]),
                "compression": size * size / files[0]["bytes"]}
    manifest_file.write_text(json.dumps(manifest, indent=1))
    print(f"  built in {time.perf_counter() - start:.1f} s; DEFLATE ratio {manifest['compression']:.1f}, "
          f"{nodata} nodata cells")
    return manifest


# -- children: each stage in a process of its own -----------------------------


def python_child(kind: str, *args: str) -> list[str]:
    """Return the command running this script's ``--child kind`` in a new interpreter."""
    return common.python_child(__file__, kind, *args)


def child_idle(result: str, what: str = "job") -> None:
    """Import what the core-path child (``job``) or the floor's child (``floor``) imports, and stop."""
    start = time.perf_counter()
    if what == "job":
        from favour_plugin.raster import wofe_jobs  # noqa: F401
    else:
        from favour_plugin.raster import gdalenv  # noqa: F401
    common.write_seconds(result, time.perf_counter() - start)


def child_floor(result: str, evidence: str) -> None:
    """Read the evidence once, block by block with the engine's windows; compute nothing (stage a)."""
    from favour_plugin.raster.gdalenv import gdal_job

    start = time.perf_counter()
    with gdal_job():
        ds = gdal.Open(evidence)  # kept in a variable: a band whose dataset is freed crashes GDAL
        band = ds.GetRasterBand(1)
        for window in iter_windows(ds.RasterXSize, ds.RasterYSize):
            band.ReadAsArray(window.col_off, window.row_off, window.width, window.height)
        band = None
        ds = None
    common.write_seconds(result, time.perf_counter() - start)


def child_core(result: str, evidence: str, deposits: str, method: str, table: str, unit: str,
               generalised: str = "") -> None:
    """Run ``raster.wofe_jobs.evidence_weights`` as the algorithm does (stage c, core path)."""
    from favour_plugin.raster.wofe_jobs import evidence_weights

    start = time.perf_counter()
    evidence_weights(evidence, deposits, method, table, unit_area_km2=float(unit),
                     output_generalised=generalised or None)
    common.write_seconds(result, time.perf_counter() - start)


def child_profile(result: str, evidence: str, deposits: str, method: str, table: str, unit: str,
                  report: str, tiny_evidence: str, tiny_deposits: str, tiny_unit: str) -> None:
    """Profile the core path with cProfile, then time the job's steps one by one from outside.

    The job runs in the calling thread, so one profiler sees it all. The
    steps repeat what ``evidence_weights`` does, with the package's own
    functions: open the grid, place the deposits, count, build the table,
    hash the inputs for the lineage, write the CSV. The same job on the
    64 x 64 inputs gives the cost that does not grow with the grid, and the
    counting pass is then taken apart and set beside other ways of doing
    it, all timed from outside the package.
    """
    import cProfile
    import io
    import pstats

    from favour_plugin.raster.wofe_jobs import evidence_weights

    profiler = cProfile.Profile()
    start = time.perf_counter()
    profiler.enable()
    evidence_weights(evidence, deposits, method, table, unit_area_km2=float(unit))
    profiler.disable()
    seconds = time.perf_counter() - start
    text = io.StringIO()
    pstats.Stats(profiler, stream=text).sort_stats("tottime").print_stats(18)
    body = text.getvalue().replace(str(ROOT) + os.sep, "")
    body = "\n".join(line for line in body.splitlines() if line.strip())
    steps = _time_steps(evidence, deposits, method, table + ".steps.csv", float(unit))
    fixed = []
    for _ in range(3):
        t0 = time.perf_counter()
        evidence_weights(tiny_evidence, tiny_deposits, method, table + ".tiny.csv",
                         unit_area_km2=float(tiny_unit))
        fixed.append(time.perf_counter() - t0)
    for stale in Path(table).parent.glob(Path(table).name + ".tiny.csv*"):
        stale.unlink()
    steps += (f"the same job on the 64 x 64 inputs (what does not grow with the grid), best of 3: "
              f"{min(fixed):.3f} s\n")
    Path(report).write_text(f"core path ({method}) under cProfile: {seconds:.2f} s\n{body}\n\n{steps}")
    common.write_seconds(result, seconds)


def _time_steps(evidence: str, deposits: str, method: str, table_file: str, unit: float) -> str:
    """Time the steps of ``evidence_weights`` with the package's functions, in its order."""
    import tempfile

    from favour_plugin.core import lineage as lin
    from favour_plugin.core import wofe
    from favour_plugin.core.feedback import Feedback
    from favour_plugin.raster.engine import input_files
    from favour_plugin.raster.evidence import cell_area_km2, count_evidence, deposit_cells
    from favour_plugin.raster.gdalenv import gdal_job
    from favour_plugin.raster.grid import Grid
    from favour_plugin.raster.sources import open_raster, raster_source

    feedback = Feedback()
    workdir = tempfile.mkdtemp(prefix=".bench-steps-", dir=os.path.dirname(table_file))
    marks = [("start", time.perf_counter())]

    def mark(name: str) -> None:
        marks.append((name, time.perf_counter()))

    try:
        with gdal_job():
            grid = Grid.from_dataset(open_raster(evidence, "evidence"), evidence)
            spec = raster_source(evidence, 1, grid, "nearest", "evidence", feedback, workdir)
            mark("open the grid, prepare the source")
            points = deposit_cells(deposits, None, grid, feedback)
            mark("read and place the deposits (deposit_cells)")
            counts = count_evidence(spec, grid, points, feedback)
            mark("count_evidence (read + dense histogram per block)")
            table = wofe.weights_table(counts, method, unit, cell_area_km2(grid), None, "evidence",
                                       feedback)
            if method in ("ascending", "descending"):
                wofe.best_cut(table)
            mark("weights_table (and the best cut)")
            files = input_files(evidence, False) + input_files(deposits, True)
            lin.describe_files(files)
            mark("hash the inputs for the lineage (SHA-256)")
            Path(table_file).write_text(table.to_csv(), encoding="utf-8")
            mark("write the CSV")
            parts = _count_parts(evidence, points)
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    steps = [(name, t - marks[i][1]) for i, (name, t) in enumerate(marks[1:])]
    total = sum(t for _, t in steps)
    lines = [f"steps of evidence_weights ({method}), timed from outside ({total:.2f} s in all; "
             f"{count_windows(grid.width, grid.height)} windows; inputs "
             f"{sum(os.path.getsize(f) for f in files) / 2**20:.1f} MiB):"]
    lines += [f"  {name:<58} {t:7.3f} s  {100 * t / total:5.1f} %" for name, t in steps]
    lines.append("  the counting pass taken apart (same windows, outside the package's loop):")
    lines += [f"    {name:<56} {t:7.3f} s" for name, t in parts.items()]
    lines.append("  other ways of doing the counting pass (measured here, best of 3; not in the package):")
    lines += [f"    {name:<56} {t:7.3f} s" for name, t in _count_alternatives(evidence, points).items()]
    return "\n".join(lines) + "\n"


def _count_parts(evidence: str, points) -> dict[str, float]:
    """Time count_evidence's per-block work apart: read, deposit block, histogram, deposit classes."""
    parts = dict.fromkeys(("ReadAsArray", "DepositCells.block (int64 block of counts)",
                           "np.bincount of the codes", "deposits' classes (flatnonzero, np.add.at)"), 0.0)
    names = list(parts)
    ds = gdal.Open(evidence)  # kept in a variable: a band whose dataset is freed crashes GDAL
    band = ds.GetRasterBand(1)
    found = np.zeros(256, np.int64)
    for window in iter_windows(ds.RasterXSize, ds.RasterYSize):
        t0 = time.perf_counter()
        raw = band.ReadAsArray(window.col_off, window.row_off, window.width, window.height)
        t1 = time.perf_counter()
        dep = points.block(window)
        t2 = time.perf_counter()
        np.bincount(raw.ravel(), minlength=256)
        t3 = time.perf_counter()
        hit = np.flatnonzero(dep)
        np.add.at(found, raw.ravel()[hit].astype(np.int64), 1)
        t4 = time.perf_counter()
        for name, a, b in zip(names, (t0, t1, t2, t3), (t1, t2, t3, t4)):
            parts[name] += b - a
    band = None
    ds = None
    return parts


def _count_alternatives(evidence: str, points) -> dict[str, float]:
    """Time other ways of the counting pass on the same windows; return seconds by name.

    Each one's histograms are checked against the package's way (a plain
    ``np.bincount`` of the codes and the dense deposit block) before its
    time is reported.
    """
    import threading
    from concurrent.futures import ThreadPoolExecutor

    def deposit_codes(raw, window):
        # The few deposits of a window looked up by index, without a dense block.
        start, stop = np.searchsorted(points.rows, [window.row_off, window.row_off + window.height])
        rows, cols = points.rows[start:stop], points.cols[start:stop]
        inside = (cols >= window.col_off) & (cols < window.col_off + window.width)
        return raw[rows[inside] - window.row_off, cols[inside] - window.col_off].astype(np.int64)

    def pairs(raw):
        # Two Byte cells as one uint16: half as many elements for bincount, folded back to 256 bins.
        flat = raw.ravel()
        odd = flat.size % 2
        folded = np.bincount(flat[:flat.size - odd].view(np.uint16), minlength=65536).reshape(256, 256)
        out = folded.sum(axis=0) + folded.sum(axis=1)
        return out + np.bincount(flat[flat.size - odd:], minlength=256)

    def package_way(raw, window):
        hit = np.flatnonzero(points.block(window))
        return np.bincount(raw.ravel(), minlength=256), raw.ravel()[hit].astype(np.int64)

    def by_index(raw, window):
        return np.bincount(raw.ravel(), minlength=256), deposit_codes(raw, window)

    def by_index_pairs(raw, window):
        return pairs(raw), deposit_codes(raw, window)

    ds = gdal.Open(evidence)
    windows = list(iter_windows(ds.RasterXSize, ds.RasterYSize))
    ds = None
    local = threading.local()

    def read(window):
        if not hasattr(local, "band"):
            local.ds = gdal.Open(evidence)  # one handle per thread; the band keeps its dataset
            local.band = local.ds.GetRasterBand(1)
        return local.band.ReadAsArray(window.col_off, window.row_off, window.width, window.height)

    def one_pass(count, threads):
        cells, deposits = np.zeros(256, np.int64), np.zeros(256, np.int64)
        with ThreadPoolExecutor(max_workers=threads) as pool:
            for hist, codes in pool.map(lambda w: count(read(w), w), windows):
                cells += hist
                np.add.at(deposits, codes, 1)
        return cells, deposits

    ways = {"read + the package's counting, 1 thread": (package_way, 1),
            "read + deposits by index (no dense block), 1 thread": (by_index, 1),
            "  and bincount of uint16 pairs, 1 thread": (by_index_pairs, 1),
            "read + deposits by index, 2 threads": (by_index, 2),
            "  and bincount of uint16 pairs, 2 threads": (by_index_pairs, 2)}
    reference = one_pass(package_way, 1)
    out = {}
    for name, (count, threads) in ways.items():
        best = math.inf
        for _ in range(3):
            t0 = time.perf_counter()
            got = one_pass(count, threads)
            best = min(best, time.perf_counter() - t0)
        if not all(np.array_equal(g, r) for g, r in zip(got, reference)):
            raise AssertionError(f"{name}: its counts differ from the package's way")
        out[name] = best
    return out


CHILDREN = {"idle": child_idle, "floor": child_floor, "core": child_core, "profile": child_profile}


# -- the independent check -----------------------------------------------------


def expected_tables(evidence: str, cells_file: Path, unit: float) -> dict:
    """Count the evidence and the deposits here, independently of Favour; return the expected rows.

    The raster is read at once and counted with ``numpy.bincount``; the
    deposit cells are the ones the generator placed (not Favour's placing of
    the points). W+, W− and their standard deviations follow Bonham-Carter
    (1994, ch. 9) from the counts; the contrast and s(C) come from
    statsmodels' ``Table2x2`` (the log odds ratio of [[a, b], [c, d]] and its
    Woolf (1955) standard error), and the two-sided p-value of C / s(C) from
    ``scipy.stats.norm``.
    """
    from scipy.stats import norm
    from statsmodels.stats.contingency_tables import Table2x2

    values = read_whole(evidence)
    cells = np.bincount(values.ravel(), minlength=256).astype(np.int64)
    doc = json.loads(cells_file.read_text())
    dep_classes = np.array([values[r, c] for r, c in doc["cells"]], dtype=np.int64)
    deposits = np.bincount(dep_classes, minlength=256)
    scale = CELL * CELL / 1e6 / unit
    codes = np.flatnonzero(cells[1:]) + 1
    area_n = float(cells[1:].sum()) * scale
    dep_n = float(deposits[1:].sum())
    out = {"nodata_deposits": int(deposits[NODATA]), "known_deposits": int(dep_n),
           "known_cells": int(cells[1:].sum()), "nodata_cells": int(cells[NODATA]),
           "outside": sum(p["cell"] is None for p in doc["points"]),
           "merged": len(doc["points"]) - sum(p["cell"] is None for p in doc["points"]) - len(doc["cells"])}
    for method in METHODS:
        cls_area, cls_dep = cells[codes] * scale, deposits[codes].astype(np.float64)
        if method == "ascending":
            cls_area, cls_dep = np.cumsum(cls_area), np.cumsum(cls_dep)
        rows = {}
        for code, pat_area, a in zip(codes, cls_area, cls_dep):
            b, c = pat_area - a, dep_n - a
            d = (area_n - pat_area) - c
            row = {"area_units": pat_area, "deposits": a}
            # Each weight is defined where its own counts are positive, the contrast where all are.
            if a > 0 and b > 0:
                row["w_plus"] = math.log((a / dep_n) / (b / (area_n - dep_n)))
                row["s_w_plus"] = math.sqrt(1 / a + 1 / b)
            if c > 0 and d > 0:
                row["w_minus"] = math.log((c / dep_n) / (d / (area_n - dep_n)))
                row["s_w_minus"] = math.sqrt(1 / c + 1 / d)
            if min(a, b, c, d) > 0:
                table = Table2x2(np.array([[a, b], [c, d]]), shift_zeros=False)
                z = table.log_oddsratio / table.log_oddsratio_se
                row.update(contrast=table.log_oddsratio, s_contrast=table.log_oddsratio_se,
                           studentized_contrast=z, p_value=2 * norm.sf(abs(z)))
            rows[float(code)] = row
        out[method] = rows
    return out


def check_table(path: str, method: str, expected: dict) -> list[str]:
    """Compare a weights table (CSV and its lineage) with the independent count; return the problems."""
    problems = []
    with open(path, newline="", encoding="utf-8") as handle:
        got = {float(row["class"]): row for row in csv.DictReader(handle)}
    rows = expected[method]
    # Integer codes are their own thresholds, so an ascending table keeps the last code too
    # ("≤ the largest code" is the whole known area: its weights are undefined).
    wanted = set(rows)
    if set(got) != wanted:
        problems.append(f"classes {sorted(got)} against {sorted(wanted)} expected")
    for code in sorted(wanted & set(got)):
        row, want = got[code], rows[code]
        for key in ("area_units", "deposits", "w_plus", "s_w_plus", "w_minus", "s_w_minus", "contrast",
                    "s_contrast", "studentized_contrast", "p_value"):
            value = row.get(key, "")
            if key not in want:
                if value != "":
                    problems.append(f"class {code:g}: {key} = {value}, expected undefined")
                continue
            # p-values: the tail function's own accuracy, relative, down to 1e-300.
            tol, floor = (1e-7, 1e-300) if key == "p_value" else (TOLERANCE, 1e-12)
            if value == "" or not math.isclose(float(value), want[key], rel_tol=tol, abs_tol=floor):
                problems.append(f"class {code:g}: {key} = {value or 'undefined'}, expected {want[key]!r}")
    record = json.loads(Path(path + ".lineage.json").read_text())
    table, points = record["table"], record["deposits"]
    for label, value, want in (("deposits on known evidence", table["deposits"], expected["known_deposits"]),
                               ("deposits on nodata", table["nodata_deposits"], expected["nodata_deposits"]),
                               ("merged deposits", table["merged_deposits"], expected["merged"]),
                               ("points outside the grid", points["outside_grid"], expected["outside"])):
        if value != want:
            problems.append(f"{label}: {value}, expected {want}")
    return problems


# -- the run ------------------------------------------------------------------


def main(argv: list[str] | None = None) -> int:
    """Build the inputs, run every stage, check the tables, print the measures and PASS/MISS."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--workdir", default=str(ROOT / "build" / "bench" / "evidence"),
                        help="folder for inputs and outputs (default: build/bench/evidence/)")
    parser.add_argument("--size", type=int, default=FULL,
                        help=f"the evidence is SIZE x SIZE cells (default {FULL})")
    parser.add_argument("--profile", action="store_true",
                        help="also profile the core path (cProfile) and time its steps from outside")
    parser.add_argument("--clean", action="store_true",
                        help="remove the work folder (inputs and outputs) and stop")
    parser.add_argument("--child", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)

    stop = housekeeping(args, parser, CHILDREN, "stage (c)")
    if stop is not None:
        return stop
    return run(Path(args.workdir).resolve(), args.size, args.profile)


def run(work: Path, size: int, profile: bool) -> int:
    """Run the benchmark in ``work`` for a ``size`` x ``size`` evidence raster; return the exit status."""
    load = os.getloadavg()
    env = bench_env(work)
    logs = work / "logs"
    result = logs / "child-result.json"
    inputs_dir = work / f"inputs-{size}"
    out = work / f"outputs-{size}"
    out.mkdir(parents=True, exist_ok=True)
    manifest = build_inputs(inputs_dir, size)
    evidence, deposits = str(inputs_dir / "host_rock.tif"), str(inputs_dir / "deposits.gpkg")
    hash_once(env, [evidence, deposits])
    # QGIS writes approximate statistics beside a raster layer it opens; start every run without them.
    for stale in (*inputs_dir.glob("*.aux.xml"), *(work / "inputs-64").glob("*.aux.xml")):
        stale.unlink()
    unit = repr(unit_area_km2(size))
    tiny_dir = work / "inputs-64"
    build_inputs(tiny_dir, 64)
    m: dict[str, Measure] = {}

    print("\nidle children (start-up, imports, a 64 x 64 job):", flush=True)
    m["true"] = run_child("measurement floor (/bin/true through the launcher)", ["true"], env,
                          logs / "true.log")
    m["idle_read"] = run_child("idle python + GDAL + what the floor imports",
                               python_child("idle", str(result), "floor"), env, logs / "idle-read.log",
                               result)
    m["idle_py"] = run_child("idle python + GDAL + favour_plugin.raster.wofe_jobs",
                             python_child("idle", str(result), "job"), env, logs / "idle-python.log",
                             result)
    favour = Qgis(work / "qgis-profile-favour", with_plugin=True)
    m["idle_favour"] = favour.run(
        "idle qgis_process + Favour (evidenceweights 64 x 64)", "favour:evidenceweights",
        [("EVIDENCE", tiny_dir / "host_rock.tif"), ("DEPOSITS", tiny_dir / "deposits.gpkg"),
         ("METHOD", "categorical"), ("UNIT_AREA", repr(unit_area_km2(64))),
         ("OUTPUT_TABLE", fresh(out / "idle.csv"))], logs / "idle-favour.log")

    print(f"\n(a) I/O floor, {size} x {size}: read the evidence once, block by block:", flush=True)
    m["a"] = run_child("(a) floor", python_child("floor", str(result), evidence), env,
                       logs / "a-floor.log", result)

    print("\n(c) Favour:", flush=True)
    tables = {}
    for method in METHODS:
        tables[f"c_{method}"] = fresh(out / f"qgis-{method}.csv")
        m[f"c_{method}"] = favour.run(
            f"(c) favour:evidenceweights {method} via qgis_process.bin", "favour:evidenceweights",
            [("EVIDENCE", evidence), ("DEPOSITS", deposits), ("METHOD", method), ("UNIT_AREA", unit),
             ("OUTPUT_TABLE", tables[f"c_{method}"])], logs / f"c-qgis-{method}.log")
    for method in METHODS:
        tables[f"core_{method}"] = fresh(out / f"core-{method}.csv")
        m[f"core_{method}"] = run_child(
            f"(c) core path evidence_weights {method}",
            python_child("core", str(result), evidence, deposits, method, tables[f"core_{method}"], unit),
            env, logs / f"c-core-{method}.log", result)
    m["core_generalised"] = run_child(
        "core path categorical + OUTPUT_GENERALISED (reference)",
        python_child("core", str(result), evidence, deposits, "categorical",
                     fresh(out / "core-generalised.csv"), unit, fresh(out / "core-generalised.tif")),
        env, logs / "c-core-generalised.log", result)

    print("\nthe tables against an independent count (numpy bincount of the whole raster, the "
          "generator's deposit cells, statsmodels Table2x2):", flush=True)
    expected = expected_tables(evidence, inputs_dir / "deposits.json", float(unit))
    problems = {}
    for key, path in tables.items():
        problems[key] = check_table(path, key.split("_", 1)[1], expected)
        rows = len(expected[key.split("_", 1)[1]])
        state = "agrees" if not problems[key] else f"{len(problems[key])} problems: " + "; ".join(
            problems[key][:4])
        print(f"  {Path(path).name}: {rows} classes; {state}")
    print(f"  counted here: {expected['known_cells']} known cells, {expected['nodata_cells']} nodata "
          f"(generator: {manifest['nodata_cells']}); {expected['known_deposits']} deposit cells on known "
          f"evidence, {expected['nodata_deposits']} on nodata, {expected['merged']} merged, "
          f"{expected['outside']} outside the grid")

    if profile:
        print("\nprofile of the core path (cProfile; then its steps timed from outside):", flush=True)
        report = logs / "profile.txt"
        m["profile"] = run_child("core path categorical under cProfile",
                                 python_child("profile", str(result), evidence, deposits, "categorical",
                                              fresh(out / "profile.csv"), unit, str(report),
                                              str(tiny_dir / "host_rock.tif"),
                                              str(tiny_dir / "deposits.gpkg"), repr(unit_area_km2(64))),
                                 env, logs / "profile.log", result)
        print(report.read_text())

    summary(m, manifest, size, unit, load)
    print(f"\ninputs and outputs are kept in {work} for the next run; "
          "`bench/bench_evidence.py --clean` removes them")
    # A missed target is a finding; a table that disagrees with the count means
    # the job did not do the work that was timed.
    return 0 if not any(problems.values()) else 1


def summary(m: dict, manifest: dict, size: int, unit: str, load: tuple[float, float, float]) -> None:
    """Print the table of measures, the ratios against the targets, and PASS/MISS."""
    idle_py, idle_favour, a = m["idle_py"], m["idle_favour"], m["a"]
    print("\n" + "=" * 100)
    print(f"SUMMARY  {size} x {size} Byte evidence, {CLASSES} classes (DEFLATE ratio "
          f"{manifest['compression']:.1f}), {manifest['points']} deposit points, unit cell "
          f"{float(unit):g} km², {os.cpu_count()} cores")
    print(f"(c) is favour:evidenceweights run with {QGIS_PROCESS} (isolated profile, plugin from {ROOT});"
          " the core path is evidence_weights in a Python child.")
    print("-" * 100)
    print(f"{'stage':<62}{'wall s':>8}{'inside s':>10}{'peak RSS':>10}{'over idle':>10}")
    rows = [("measurement floor (/bin/true through the launcher)", m["true"], None),
            ("idle python + GDAL + what the floor imports", m["idle_read"], None),
            ("idle python + GDAL + favour_plugin.raster.wofe_jobs", idle_py, None),
            ("idle qgis_process + Favour (evidenceweights 64 x 64)", idle_favour, None),
            ("(a) I/O floor: read once, block by block", a, m["idle_read"])]
    rows += [(f"(c) favour:evidenceweights {method} via qgis_process", m[f"c_{method}"], idle_favour)
             for method in METHODS]
    rows += [(f"(c) core path evidence_weights {method}", m[f"core_{method}"], idle_py) for method in METHODS]
    rows.append(("core path categorical + generalised raster (reference)", m["core_generalised"], idle_py))
    if "profile" in m:
        rows.append(("core path under cProfile (not a target)", m["profile"], idle_py))
    for label, measure, idle in rows:
        over = "" if idle is None else f"{measure.peak_mb - idle.peak_mb:+.0f} MB"
        inner = "" if measure.inner is None else f"{measure.inner:.2f}"
        print(f"{label:<62}{measure.seconds:>8.2f}{inner:>10}{mb(measure.peak_mb):>10}{over:>10}")
    print("-" * 100)
    checks = []
    for method in METHODS:
        c, core = m[f"c_{method}"], m[f"core_{method}"]
        net = c.seconds - idle_favour.seconds
        checks += [
            (f"{method}: (c)/(a), wall times, start-up included", c.seconds / a.seconds),
            (f"{method}: ((c) - idle qgis_process + Favour) / (a inside)", net / a.inner),
            (f"{method}: core path / (a), both measured inside the child", core.inner / a.inner),
        ]
    print(f"{'target (c)/(a) <= ' + format(TARGET_OVER_FLOOR, 'g'):<72}{'measured':>14}{'':>4}verdict")
    for label, ratio in checks:
        print(f"{label:<72}{ratio:>14.2f}{'':>4}{verdict(ratio <= TARGET_OVER_FLOOR)}")
    print(f"{'target peak RSS <= ' + format(TARGET_PEAK_MB, 'g') + ' MB':<72}")
    for method in METHODS:
        c, core = m[f"c_{method}"], m[f"core_{method}"]
        over = c.peak_mb - idle_favour.peak_mb
        for label, value in ((f"{method}: (c), whole qgis_process", c.peak_mb),
                             (f"{method}: (c), over idle qgis_process + Favour", over),
                             (f"{method}: core path, whole process", core.peak_mb)):
            print(f"{label:<72}{mb(value):>14}{'':>4}{verdict(value <= TARGET_PEAK_MB)}")
    print("-" * 100)
    print("for reading (not targets):")
    print(f"  qgis_process start-up with Favour (the idle row) is {idle_favour.seconds:.2f} s of each (c) "
          f"run; the floor's child spends {a.seconds - a.inner:.2f} s of its {a.seconds:.2f} s starting")
    print("  core path / (a), wall times: " + ", ".join(
        f"{method} {m[f'core_{method}'].seconds / a.seconds:.2f}" for method in METHODS)
          + f"; with the generalised raster (a second pass and a write): inside "
          f"{m['core_generalised'].inner / a.inner:.2f}")
    print(f"  load average (1 min) at the start {load[0]:.2f}, at the end {os.getloadavg()[0]:.2f}"
          " (2 cores: anything above 0.5 at the start means something else was running)")
    print("  one run on one machine: times move with the disk cache and the load; run again "
          "before drawing a conclusion from a near miss")
    print("=" * 100)


if __name__ == "__main__":
    sys.exit(main())
