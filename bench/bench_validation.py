"""Benchmark: validation of a 6000 x 6000 favourability raster against 300 deposits, against one read.

Run with ``make bench`` or ``.venv/bin/python bench/bench_validation.py``.
The script builds, in a work folder, a float32 favourability raster as
Favour writes its maps (GeoTIFF, 256 x 256 tiles, DEFLATE with the
floating-point predictor, nodata -9999 on an unsurveyed corner and on
scattered cells; the values are a smooth synthetic field from a seeded
generator squashed into [0, 1]) and a GeoPackage of 300 deposit points on
distinct valid cells, drawn more often where the map is high. It then
measures, each in a child process of its own (``bench/common.py``):

(a) the floor: the raster read once, block by block, with the engine's
    windows (``raster.blocks.iter_windows``) and ``band.ReadAsArray``,
    nothing computed, on 1 thread and on as many as the job uses; the
    faster of the two is the floor (decompressing DEFLATE is work a second
    thread shares);
(c) the job: ``raster.validation_jobs.validate`` writing the JSON result and
    the CSV of curves with their lineages (2 threads, as it runs by
    default): the tiles holding deposits read first and kept, the rest of
    the raster read once, every block counted, the bootstrap, the inputs
    hashed.

Targets (from the issue): (c) / (a) at most 2, and peak memory flat: the
same job on a 12000 x 12000 raster (four times the cells) must peak within
10 % of the first (our own threshold). The AUC the job reports is checked
against one computed here from the whole raster read at once (numpy sort
and search); a disagreement sets the exit status to 1, since then the job
did not do the work that was timed. A missed target prints MISS and leaves
the exit status 0. See ``bench/README.md``.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import time
from pathlib import Path

import numpy as np
from common import (
    CELL,
    ORIGIN,
    ROOT,
    Field,
    bench_env,
    hash_once,
    python_child,
    run_child,
    srs,
    verdict,
    write_seconds,
)
from osgeo import gdal, ogr, osr

from favour_plugin.raster.streaming import DEFAULT_THREADS

gdal.UseExceptions()
ogr.UseExceptions()
osr.UseExceptions()

GENERATOR = 1  # bump when the raster or the points change, so old inputs are rebuilt
SEED = 20240809
FULL = 6000
DEPOSITS = 300
NODATA = -9999.0
STRIP = 256
#: DEFLATE with the floating-point predictor: slower to read than the ZSTD Favour now writes by default,
#: so the floor (which reads it too) is the harder one to stay near.
CREATION = ("TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", "PREDICTOR=3",
            "BIGTIFF=IF_SAFER", "NUM_THREADS=ALL_CPUS")
TARGET_OVER_FLOOR = 2.0
GROWTH_ALLOWED = 0.10
TOLERANCE = 1e-12


# -- synthetic inputs --------------------------------------------------------


def favourability(field: Field, row: int, rows: int, size: int) -> np.ndarray:
    """Return rows of the map: the field squashed into [0, 1] (float32), with nodata where planned."""
    values = 1.0 / (1.0 + np.exp(-1.5 * field.strip(row, rows, size)))
    out = values.astype(np.float32)
    corner_rows = max(1, size // 10)
    if row < corner_rows:
        out[:min(rows, corner_rows - row), size - max(1, size // 8):] = NODATA
    return out


def build_inputs(folder: Path, size: int) -> dict:
    """Write the map and the deposits (reused while generator, seed and size match); return the manifest."""
    wanted = {"generator": GENERATOR, "seed": SEED, "size": size, "deposits": DEPOSITS}
    manifest_file = folder / "manifest.json"
    if manifest_file.exists() and all(json.loads(manifest_file.read_text()).get(k) == v
                                       for k, v in wanted.items()) \
            and (folder / "favourability.tif").exists() and (folder / "deposits.gpkg").exists():
        return json.loads(manifest_file.read_text())
    folder.mkdir(parents=True, exist_ok=True)
    print(f"building the {size} x {size} map and {DEPOSITS} deposits in {folder} …", flush=True)
    field = Field(SEED)
    field.kx, field.ky = field.kx * FULL / size, field.ky * FULL / size
    rng = np.random.default_rng([SEED, size])
    holes = rng.integers(0, size, (200, 2))
    path = folder / "favourability.tif"
    ds = gdal.GetDriverByName("GTiff").Create(str(path) + ".partial.tif", size, size, 1, gdal.GDT_Float32,
                                              list(CREATION))
    ds.SetGeoTransform((ORIGIN[0], CELL, 0.0, ORIGIN[1], 0.0, -CELL))
    ds.SetProjection(srs().ExportToWkt())
    band = ds.GetRasterBand(1)
    band.SetNoDataValue(NODATA)
    chosen_rows, chosen_cols = [], []
    per_strip = DEPOSITS * STRIP / size
    for row in range(0, size, STRIP):
        rows = min(STRIP, size - row)
        values = favourability(field, row, rows, size)
        inside = (holes[:, 0] >= row) & (holes[:, 0] < row + rows)
        values[holes[inside, 0] - row, holes[inside, 1]] = NODATA
        band.WriteArray(values, 0, row)
        # deposits: drawn where the map is high (weight μ⁴), on valid cells, distinct
        count = round(per_strip * (row + rows) / STRIP) - len(chosen_rows)
        weight = np.where(values == NODATA, 0.0, values.astype(np.float64) ** 4).ravel()
        picks = rng.choice(weight.size, max(0, count), replace=False, p=weight / weight.sum())
        chosen_rows += (picks // size + row).tolist()
        chosen_cols += (picks % size).tolist()
    band = None
    ds = None
    os.replace(str(path) + ".partial.tif", path)
    chosen_rows, chosen_cols = chosen_rows[:DEPOSITS], chosen_cols[:DEPOSITS]
    write_points(folder / "deposits.gpkg", chosen_rows, chosen_cols)
    manifest = {**wanted, "cells": {"rows": chosen_rows, "cols": chosen_cols},
                "megabytes": path.stat().st_size / 2**20}
    manifest_file.write_text(json.dumps(manifest))
    return manifest


def write_points(path: Path, rows: list[int], cols: list[int]) -> None:
    """Write points at the centres of the given cells to a GeoPackage."""
    if path.exists():
        path.unlink()
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    layer = ds.CreateLayer("deposits", srs(), ogr.wkbPoint)
    for r, c in zip(rows, cols):
        feature = ogr.Feature(layer.GetLayerDefn())
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(ORIGIN[0] + (c + 0.5) * CELL, ORIGIN[1] - (r + 0.5) * CELL)
        feature.SetGeometry(point)
        layer.CreateFeature(feature)
        feature = None
    layer = None
    ds = None


def expected_auc(raster: Path, manifest: dict) -> float:
    """AUC from the whole raster read at once: mean over deposits of (#below + ½ #equal) / #valid."""
    ds = gdal.Open(str(raster))
    band = ds.GetRasterBand(1)
    values = band.ReadAsArray()
    band = None
    ds = None
    at = values[manifest["cells"]["rows"], manifest["cells"]["cols"]].astype(np.float64)
    valid = np.sort(values[values != NODATA]).astype(np.float64)
    below = np.searchsorted(valid, at, side="left")
    equal = np.searchsorted(valid, at, side="right") - below
    return float(np.mean((below + 0.5 * equal) / valid.size))


# -- children ----------------------------------------------------------------


def child_floor(result: str, raster: str, threads: str = "1") -> None:
    """Read every block of the raster once, nothing computed, on ``threads`` threads (own handles each)."""
    import threading
    from concurrent.futures import ThreadPoolExecutor

    from favour_plugin.raster.blocks import iter_windows
    from favour_plugin.raster.gdalenv import gdal_job

    local = threading.local()
    opened = []

    def read(window) -> None:
        if not hasattr(local, "band"):
            local.ds = gdal.Open(raster)
            local.band = local.ds.GetRasterBand(1)
            opened.append(local)
        local.band.ReadAsArray(window.col_off, window.row_off, window.width, window.height)

    with gdal_job():
        ds = gdal.Open(raster)
        windows = list(iter_windows(ds.RasterXSize, ds.RasterYSize))
        ds = None
        start = time.perf_counter()
        with ThreadPoolExecutor(max_workers=int(threads)) as pool:
            list(pool.map(read, windows))
        seconds = time.perf_counter() - start
        for handles in opened:
            handles.band = handles.ds = None
    write_seconds(result, seconds)


def child_job(result: str, raster: str, deposits: str, out: str) -> None:
    """Validate the raster against the deposits, writing the JSON, the CSV and their lineages."""
    from favour_plugin.raster.validation_jobs import validate

    for stale in Path(out).parent.glob(Path(out).stem + ".*"):
        stale.unlink()
    start = time.perf_counter()
    job = validate(raster, deposits, out, out[:-5] + ".csv")
    write_seconds(result, time.perf_counter() - start, auc=job.result["auc"], ci=job.result["auc_ci"],
                  pa=job.result["pa_crossing"], n=job.result["n_deposits"])


def child_idle(result: str) -> None:
    """Import what the job imports and stop (the idle row)."""
    start = time.perf_counter()
    import favour_plugin.raster.validation_jobs  # noqa: F401

    write_seconds(result, time.perf_counter() - start)


CHILDREN = {"floor": child_floor, "job": child_job, "idle": child_idle}


# -- the run -----------------------------------------------------------------


def measure(script: str, work: Path, size: int, env: dict, logs: Path, result: Path) -> dict:
    """Build the inputs of one size and run the floor and the job; return their measures."""
    inputs = work / f"inputs-{size}"
    manifest = build_inputs(inputs, size)
    raster, deposits = inputs / "favourability.tif", inputs / "deposits.gpkg"
    out = work / f"outputs-{size}"
    out.mkdir(parents=True, exist_ok=True)
    print(f"\n{size} x {size} ({manifest['megabytes']:.0f} MB on disk):", flush=True)
    hash_once(env, [str(raster), str(deposits)])
    floors = [run_child(f"(a) floor {size}, {threads} thread{'s' if threads > 1 else ''}",
                        python_child(script, "floor", str(result), str(raster), str(threads)), env,
                        logs / f"floor-{size}-{threads}.log", result)
              for threads in sorted({1, DEFAULT_THREADS})]
    floor = min(floors, key=lambda measure: measure.inner)
    job = run_child(f"(c) validate {size}",
                    python_child(script, "job", str(result), str(raster), str(deposits),
                                 str(out / "validation.json")), env, logs / f"job-{size}.log", result)
    figures = json.loads(result.read_text())
    return {"size": size, "manifest": manifest, "raster": raster, "floor": floor, "job": job,
            "figures": figures}


def main(argv: list[str] | None = None) -> int:
    """Build the inputs, run the stages, check the AUC, print the ratios and PASS/MISS."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--workdir", default=str(ROOT / "build" / "bench" / "validation"),
                        help="folder for inputs and outputs (default: build/bench/validation/)")
    parser.add_argument("--size", type=int, default=FULL,
                        help=f"the map is SIZE x SIZE cells (default {FULL})")
    parser.add_argument("--no-double", action="store_true", help="skip the run on twice the side")
    parser.add_argument("--clean", action="store_true", help="remove the work folder and stop")
    parser.add_argument("--child", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        CHILDREN[args.child[0]](*args.child[1:])
        return 0
    work = Path(args.workdir).resolve()
    if args.clean:
        shutil.rmtree(work, ignore_errors=True)
        print(f"removed {work}")
        return 0
    if args.size < 64:
        parser.error("--size must be at least 64")
    load = os.getloadavg()[0]
    env = bench_env(work)
    logs, result = work / "logs", work / "logs" / "child-result.json"
    script = str(Path(__file__).resolve())
    print(f"validation benchmark: {DEPOSITS} deposits; load average at start {load:.2f}", flush=True)
    idle = run_child("idle python + favour_plugin.raster.validation_jobs",
                     python_child(script, "idle", str(result)), env, logs / "idle.log", result)
    first = measure(script, work, args.size, env, logs, result)
    expected = expected_auc(first["raster"], first["manifest"])
    agree = abs(first["figures"]["auc"] - expected) <= TOLERANCE
    doubled = None
    if not args.no_double:
        free = shutil.disk_usage(work).free / 2**30
        if free < 2.0:
            print(f"\nskipping the doubled grid: {free:.1f} GiB free in {work}, it needs about 1 GiB")
        else:
            doubled = measure(script, work, 2 * args.size, env, logs, result)

    floor, job = first["floor"], first["job"]
    ratio = job.inner / floor.inner
    print("\n" + "=" * 96)
    print(f"SUMMARY  {args.size} x {args.size} float32 map, {first['figures']['n']} deposit cells used, "
          f"{os.cpu_count()} cores; times inside each child (start-up excluded)")
    print("-" * 96)
    print(f"{'stage':<58}{'inside s':>10}{'wall s':>9}{'peak RSS':>10}{'over idle':>10}")
    rows = [("idle python + favour_plugin.raster.validation_jobs", idle, False),
            (f"(a) floor: every block read once, faster of 1 and {DEFAULT_THREADS} threads ({args.size}²)",
             floor, True),
            (f"(c) validate: JSON + CSV + lineages, 2 threads ({args.size}²)", job, True)]
    if doubled is not None:
        rows += [(f"(a) floor ({2 * args.size}²)", doubled["floor"], True),
                 (f"(c) validate ({2 * args.size}²)", doubled["job"], True)]
    for label, m, over in rows:
        print(f"{label:<58}{m.inner:>10.2f}{m.seconds:>9.2f}{m.peak_mb:>8.0f} MB"
              f"{(f'{m.peak_mb - idle.peak_mb:+8.0f} MB') if over else '':>10}")
    print("-" * 96)
    print(f"(c)/(a), inside the children: {ratio:.2f} (target ≤ {TARGET_OVER_FLOOR:g}): "
          f"{verdict(ratio <= TARGET_OVER_FLOOR)}")
    print(f"(c)/(a), wall times (start-up included): {job.seconds / floor.seconds:.2f}")
    if doubled is not None:
        growth = doubled["job"].peak_mb / job.peak_mb - 1.0
        print(f"peak of (c) at {2 * args.size}² against {args.size}²: {doubled['job'].peak_mb:.0f} MB "
              f"against {job.peak_mb:.0f} MB ({100 * growth:+.1f} %; flat: within "
              f"{100 * GROWTH_ALLOWED:.0f} %): {verdict(growth <= GROWTH_ALLOWED)}")
        print(f"time of (c) at {2 * args.size}²: {doubled['job'].inner:.2f} s, "
              f"(c)/(a) {doubled['job'].inner / doubled['floor'].inner:.2f}")
    else:
        print("peak memory flat: not measured (--no-double, or no room for the doubled grid)")
    print(f"AUC {first['figures']['auc']:.6f} (interval {first['figures']['ci'][0]:.4f}–"
          f"{first['figures']['ci'][1]:.4f}); from the whole raster at once {expected:.6f}: "
          f"{'agrees' if agree else 'DISAGREES'}")
    print(f"load average (1 min) at the start {load:.2f}, at the end {os.getloadavg()[0]:.2f} "
          "(2 cores: above 0.5 at the start means something else was running)")
    print("=" * 96)
    print(f"inputs are kept in {work} for the next run; `bench/bench_validation.py --clean` removes them")
    return 0 if agree else 1


if __name__ == "__main__":
    sys.exit(main())
