"""The same evaluation plan, block by block, on a Dask cluster instead of this machine's threads.

A tree evaluated on a cluster runs exactly what :func:`~.engine.evaluate_tree`
runs: the same :class:`~favour_plugin.core.tree.EvaluationPlan`, the same
windows (:func:`~.blocks.iter_windows`), the same reads. Only who runs each
block changes. The grid is cut into bands of whole rows of windows; each
band is one Dask task, which reads its windows, evaluates them and writes
one tile file per output (ZSTD level 1) into the job's work folder, and
returns the band's statistics. The client then builds a VRT of the tiles of
each output and translates it once into the output's temporary file, so the
cells the workers computed reach the final raster unchanged.

Inputs and the work folder must be reachable from every worker under the
same paths: on one machine (``local``, a ``LocalCluster``) that is always so;
on a cluster, keep the layers and the outputs on storage every worker mounts
at the same place, or give the layers as GDAL virtual file system paths
(``/vsicurl/https://…``) every worker can open. Workers must be able to
import ``favour_plugin`` (the same checkout or installed plugin on each).

Dask and distributed come from Debian (``python3-dask``,
``python3-distributed``); nothing here schedules work by itself.
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from osgeo import gdal

from ..core import lineage as lin
from ..core.errors import CancelledError, OutputError, ParameterError
from ..core.feedback import Feedback
from ..core.tree import EvaluationPlan
from .blocks import BLOCK_ROWS, iter_windows
from .gdalenv import gdal_job
from .grid import Grid
from .sources import BlockReader, SourceSpec
from .tree_inputs import read_leaves
from .writer import NODATA, compression_options

#: Bands (rows of windows) per task: enough work per task to hide the scheduling.
BANDS_PER_TASK = 1


def _tile_options() -> list[str]:
    """Creation options of a worker's tile: the default compression of the worker's GDAL, one thread.

    Each worker compresses its own tiles, so GDAL's own threads would only
    compete with the other workers on the machine.
    """
    return [o for o in compression_options(None)[1] if not o.startswith("NUM_THREADS=")]


@dataclass
class Cluster:
    """A connection to a Dask cluster, and what to say about it in the lineage."""

    client: object
    description: dict
    owned: object | None = None

    def close(self) -> None:
        """Close the client and, for a cluster this process started, the cluster."""
        try:
            self.client.close()
        finally:
            if self.owned is not None:
                self.owned.close()


def connect(address: str, workers: int | None = None) -> Cluster:
    """Connect to ``address``: ``local`` starts a LocalCluster here; ``tcp://HOST:PORT`` a scheduler.

    Raises
    ------
    ParameterError
        Dask's distributed scheduler is not installed, or the address is
        neither ``local`` nor a scheduler that answers.
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ParameterError("running on a cluster needs Dask's distributed scheduler (Debian package "
                             "python3-distributed)") from None
    if address == "local":
        workers = workers or max(1, os.cpu_count() or 1)
        # Worker processes are started with this interpreter; inside the QGIS desktop that would
        # start QGIS itself, so there the workers are threads of this process.
        processes = os.path.basename(sys.executable).startswith("python")
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes,
                               dashboard_address=None)
        client = Client(cluster)
        return Cluster(client, {"address": "local", "kind": "Dask LocalCluster on this machine",
                                "workers": workers, "processes": processes}, owned=cluster)
    if not address.startswith(("tcp://", "tls://")):
        raise ParameterError(f"a cluster is 'local' or a scheduler address such as tcp://host:8786, got "
                             f"{address!r}")
    try:
        client = Client(address, timeout=20)
    except OSError as exc:
        raise ParameterError(f"no Dask scheduler answers at {address}: {exc}") from None
    workers = len(client.scheduler_info().get("workers", {}))
    if workers == 0:
        client.close()
        raise ParameterError(f"the Dask scheduler at {address} has no workers")
    return Cluster(client, {"address": address, "kind": "Dask scheduler", "workers": workers})


def _bands(grid: Grid) -> list[tuple[int, int]]:
    """Return (first row, rows) of each task's band: whole rows of windows."""
    rows = BLOCK_ROWS * BANDS_PER_TASK
    return [(row, min(rows, grid.height - row)) for row in range(0, grid.height, rows)]


def band_task(compute, grid: Grid, row: int, rows: int, tiles: dict[str, str]) -> list:
    """Run ``compute(window, reader)`` on the windows of one band (a task on a worker).

    ``compute`` returns ``(arrays, extra)``: the float arrays of the window by
    output name, written into that output's tile, and anything small to send
    back. The windows are the ones :func:`~.blocks.iter_windows` gives the
    grid, in its order, so a band computes exactly what the engine's threads
    would. Returns the ``extra`` of each window, in order.
    """
    band_grid = Grid(grid.crs_wkt, grid.xmin, grid.ymax - row * grid.cell_y, grid.cell_x, grid.cell_y,
                     grid.width, rows)
    extras = []
    with gdal_job():
        outputs = {}
        try:
            for name, tile in tiles.items():
                ds = gdal.GetDriverByName("GTiff").Create(tile, grid.width, rows, 1, gdal.GDT_Float32,
                                                          _tile_options())
                ds.SetGeoTransform(band_grid.transform)
                ds.SetProjection(grid.crs_wkt)
                ds.GetRasterBand(1).SetNoDataValue(NODATA)
                outputs[name] = ds
            reader = BlockReader()
            try:
                for local in iter_windows(grid.width, rows):  # a band is whole rows of windows
                    window = local._replace(row_off=local.row_off + row)
                    arrays, extra = compute(window, reader)
                    extras.append(extra)
                    for name, ds in outputs.items():
                        block = np.where(np.isnan(arrays[name]), NODATA, arrays[name]).astype(np.float32)
                        ds.GetRasterBand(1).WriteArray(block, window.col_off, window.row_off - row)
            finally:
                reader.close()
        finally:
            for name in list(outputs):
                ds = outputs.pop(name)
                ds.FlushCache()
                ds = None
    return extras


def item_task(compute, items: list, combine=None) -> list:
    """Run ``compute(item, reader)`` on each item (a task on a worker); return the results in order.

    With ``combine`` (a function of two results) the task returns one
    combined result in a list, so large results (histograms) travel once.
    """
    with gdal_job():
        reader = BlockReader()
        try:
            results = [compute(item, reader) for item in items]
        finally:
            reader.close()
    if combine is not None and results:
        return [functools.reduce(combine, results)]
    return results


def _gather(cluster: Cluster, futures: list, feedback: Feedback, span: tuple[float, float]) -> list:
    """Wait for the futures with progress and cancel; return their results in submission order."""
    from distributed import as_completed

    order = {future: k for k, future in enumerate(futures)}
    results: list = [None] * len(futures)
    done = 0
    try:
        for future in as_completed(futures):
            if feedback.is_cancelled():
                raise CancelledError("cancelled by the user; no output was written")
            results[order[future]] = future.result()
            done += 1
            feedback.set_progress(span[0] + (span[1] - span[0]) * done / len(futures))
    except BaseException:
        cluster.client.cancel(futures)
        raise
    return results


def run_bands(cluster: Cluster, compute, grid: Grid, names: Sequence[str], workdir: str,
              feedback: Feedback, span: tuple[float, float]) -> tuple[dict[str, list[str]], list]:
    """Run ``compute`` over every window, one band per task; return each output's tiles and the extras.

    ``compute`` is sent to the workers once; the tiles are written into
    ``workdir`` (which every worker must reach under the same path).
    """
    bands = _bands(grid)
    tiles = {name: [os.path.join(workdir, f"tile-{i}-{k:06d}.tif") for k in range(len(bands))]
             for i, name in enumerate(names)}
    client = cluster.client
    [shared] = client.scatter([compute], broadcast=True)
    futures = [client.submit(band_task, shared, grid, row, rows, {name: tiles[name][k] for name in names},
                             pure=False) for k, (row, rows) in enumerate(bands)]
    extras = [extra for band in _gather(cluster, futures, feedback, span) for extra in band]
    return tiles, extras


def run_items(cluster: Cluster, compute, items: Sequence, feedback: Feedback,
              span: tuple[float, float], combine=None) -> list:
    """Run ``compute(item, reader)`` on every item, a share of them per worker; results in order.

    With ``combine``, each task combines its share and one result per task comes back.
    """
    client = cluster.client
    workers = max(1, len(client.scheduler_info().get("workers", {})))
    size = -(-len(items) // (2 * workers))
    groups = [list(items[k:k + size]) for k in range(0, len(items), size)]
    [shared] = client.scatter([compute], broadcast=True)
    futures = [client.submit(item_task, shared, group, combine, pure=False) for group in groups]
    return [result for group in _gather(cluster, futures, feedback, span) for result in group]


def assemble(tiles: list[str], target: str, workdir: str, compress: str | None) -> None:
    """Build a VRT of an output's tiles and translate it once into ``target``.

    Raises
    ------
    OutputError
        GDAL cannot write ``target`` (a full disk, say).
    """
    _, options = compression_options(compress)
    vrt = os.path.join(workdir, os.path.basename(tiles[0]) + ".vrt")
    gdal.BuildVRT(vrt, tiles)
    try:
        gdal.Translate(target, vrt, format="GTiff", creationOptions=options)
    except RuntimeError as exc:
        raise OutputError(f"cannot assemble the tiles into {target}: {exc}") from None


def _evaluate_window(plan: EvaluationPlan, sources: dict[str, SourceSpec], keep: Sequence[str],
                     written: Sequence[str], window, reader) -> tuple[dict, dict]:
    """One window as the engine evaluates it: the written nodes' arrays and every kept node's statistics."""
    results = plan.evaluate_block(read_leaves(plan, sources, reader, window), keep)
    stats = {path: _stats_parts(lin.NodeStatistics.of_block(array, histogram=path in written))
             for path, array in results.items()}
    return {path: results[path] for path in written}, stats


def _stats_parts(stats: lin.NodeStatistics) -> dict:
    """Plain data of running statistics, to send back from a worker and merge."""
    return {"valid": stats.valid, "nodata": stats.nodata, "total": stats.total, "total_sq": stats.total_sq,
            "minimum": stats.minimum, "maximum": stats.maximum,
            "histogram": None if stats.histogram is None else stats.histogram.tolist()}


def _merge_parts(totals: dict[str, lin.NodeStatistics], parts: dict) -> None:
    """Add a window's statistics (:func:`_stats_parts`) to the running totals."""
    for path, part in parts.items():
        stats = lin.NodeStatistics(histogram=part["histogram"] is not None)
        stats.valid, stats.nodata = part["valid"], part["nodata"]
        stats.total, stats.total_sq = part["total"], part["total_sq"]
        stats.minimum, stats.maximum = part["minimum"], part["maximum"]
        if part["histogram"] is not None:
            stats.histogram = np.asarray(part["histogram"], dtype=np.int64)
        totals[path].merge(stats)


def evaluate_on_cluster(cluster: Cluster, plan: EvaluationPlan, sources: dict[str, SourceSpec], grid: Grid,
                        targets: dict[str, str], workdir: str, feedback: Feedback,
                        span: tuple[float, float], compress: str | None = None) -> dict[str, dict]:
    """Evaluate every band on the cluster and assemble each output into its temporary file.

    Parameters
    ----------
    targets : dict of node path to str
        The temporary file (reserved by the job's output set) each written
        node goes to; the root first.

    Returns
    -------
    dict
        Per-node statistics, as the engine's threads give them.

    Raises
    ------
    CancelledError
        The user cancelled: the tasks are cancelled and the tiles left for
        the job's clean-up.
    """
    keep = list(targets) + [leaf.path for leaf in plan.leaves if leaf.path not in targets]
    compute = functools.partial(_evaluate_window, plan, sources, keep, list(targets))
    low, high = span
    tiles, extras = run_bands(cluster, compute, grid, list(targets), workdir, feedback,
                              (low, low + 0.85 * (high - low)))
    totals = {path: lin.NodeStatistics(histogram=path in targets) for path in keep}
    for parts in extras:
        _merge_parts(totals, parts)
    for i, (path, target) in enumerate(targets.items()):
        feedback.check_cancelled()
        assemble(tiles[path], target, workdir, compress)
        feedback.set_progress(low + (high - low) * (0.85 + 0.15 * (i + 1) / len(targets)))
    return {path: s.to_dict() for path, s in totals.items()}
