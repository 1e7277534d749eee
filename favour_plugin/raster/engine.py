"""The one evaluation path: a criteria tree streamed block by block into rasters with lineage.

:func:`evaluate_tree` is what the processing algorithms, the command line,
the dock and the tests all call. It compiles the tree, builds the reference
grid, aligns every proxy to it (lazily), streams the blocks through
:meth:`~favour_plugin.core.tree.EvaluationPlan.evaluate_block` on a small pool
of threads (GDAL and numpy release the GIL, so both cores work), writes the
favourability and any node rasters to temporary files, and only on success
renames them, writes their styles and the lineage record.

:func:`reproduce` evaluates a lineage's tree again and compares every cell.
"""

from __future__ import annotations

import os
import platform
import shutil
import tempfile
import threading
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal

from .. import about
from ..core import lineage as lin
from ..core.errors import (
    GridError,
    GridMismatchError,
    InputError,
    LineageError,
    MissingInputError,
    NodataWarning,
)
from ..core.feedback import Feedback, ScaledFeedback
from ..core.tree import PATH_SEPARATOR, EvaluationPlan, Tree
from .blocks import BLOCK_COLS, BLOCK_ROWS, count_windows, iter_windows
from .cluster import Cluster, connect, evaluate_on_cluster
from .gdalenv import gdal_job, set_stream_cache
from .grid import Grid
from .outputs import OutputJob, check_apart, stage_lineage
from .sources import BlockReader, SourceSpec, cache_need, open_raster, raster_source
from .streaming import DEFAULT_THREADS, map_windows
from .style import membership_style, style_path
from .vector import vector_source
from .writer import RasterWriter, annotate_file, check_raster_name, compression_options


@dataclass
class EvaluationResult:
    """What an evaluation wrote: the favourability raster, node rasters and the lineage."""

    output: str
    node_outputs: dict[str, str]
    lineage_file: str
    lineage: dict
    warnings: list[dict] = field(default_factory=list)


def reference_grid(tree: Tree) -> tuple[Grid, dict]:
    """Return the tree's reference grid and a lineage note saying where it came from.

    The grid is ``grid.reference`` (a raster), or ``grid.crs`` + ``grid.extent``
    + ``grid.cell_size``, or else the grid of the first raster proxy.
    """
    spec = tree.grid or {}
    if "reference" in spec:
        path = str(tree.resolve(spec["reference"]))
        ds = open_raster(path, "grid reference")
        return Grid.from_dataset(ds, f"grid reference {path}"), {"source": "reference", "path": path}
    if spec:
        grid = Grid.from_spec(spec["crs"], spec["extent"], spec["cell_size"])
        return grid, {"source": "tree file", "crs": spec["crs"], "extent": spec["extent"],
                      "cell_size": spec["cell_size"]}
    for node_path, node in tree.walk():
        if node.is_leaf and node.proxy is not None and not node.proxy.is_vector:
            path = str(node.proxy.resolve(tree.base_dir))
            ds = open_raster(path, node_path)
            return (Grid.from_dataset(ds, f"{node_path}: the layer {path}"),
                    {"source": "first raster proxy", "node": node_path, "path": path})
    raise GridError("the tree has no raster proxy to take a grid from; add 'grid' with "
                    "'reference' or 'crs', 'extent' and 'cell_size' to the tree file")


def node_file_name(path: str) -> str:
    """Return a file name for a node's raster from its path (``source``, ``source-faults``)."""
    parts = path.split(PATH_SEPARATOR)[1:] or path.split(PATH_SEPARATOR)
    slug = "-".join("".join(ch if ch.isalnum() else "_" for ch in part.lower()).strip("_")
                    for part in parts)
    while "__" in slug:
        slug = slug.replace("__", "_")
    return (slug or "node") + ".tif"


def _prepare_sources(tree: Tree, plan: EvaluationPlan, grid: Grid, workdir: str,
                     feedback: Feedback, span: tuple[float, float]) -> dict[str, SourceSpec]:
    """Open and align every leaf's proxy; vector proxies are measured onto the grid."""
    sources: dict[str, SourceSpec] = {}
    vectors = [leaf for leaf in plan.leaves if leaf.proxy.is_vector]
    step = (span[1] - span[0]) / max(1, len(vectors))
    done = 0
    for leaf in plan.leaves:
        feedback.check_cancelled()
        proxy = leaf.proxy
        path = str(proxy.resolve(tree.base_dir))
        if proxy.is_vector:
            start = span[0] + done * step
            sources[leaf.path] = vector_source(path, proxy.layer, proxy.measure, proxy.field, grid,
                                               workdir, leaf.path, feedback, (start, start + step),
                                               where=proxy.where, margin=proxy.margin)
            done += 1
        else:
            resampling = proxy.resampling or ("nearest" if leaf.membership.categorical else "bilinear")
            sources[leaf.path] = raster_source(path, proxy.band or 1, grid, resampling, leaf.path,
                                               feedback, workdir)
        feedback.set_progress(span[0] + done * step)
    return sources


def input_files(path: str, vector: bool) -> list[str]:
    """Return the files GDAL reads for an input, without statistics and overview sidecars."""
    try:
        ds = gdal.OpenEx(path, gdal.OF_READONLY | (gdal.OF_VECTOR if vector else gdal.OF_RASTER))
        files = ds.GetFileList() or [path]
    except RuntimeError:
        files = [path]
    return lin.relevant_files(files)


class _Hasher(threading.Thread):
    """Computes SHA-256 of the input files while the blocks stream."""

    def __init__(self, files: list[str]) -> None:
        super().__init__(daemon=True, name="favour-hash")
        self.files = files
        self.result: dict[str, dict] = {}
        self.error: BaseException | None = None

    def run(self) -> None:
        try:
            for entry in lin.describe_files(self.files):
                self.result[entry["path"]] = entry
        except OSError as exc:  # a file vanished mid-run; reported in the lineage check
            self.error = exc


def evaluate_tree(tree: Tree, output: str, node_folder: str | None = None,
                  feedback: Feedback | None = None, grid: Grid | None = None,
                  threads: int | None = None, job: str = "evaluate-tree",
                  tree_file: str | None = None, max_cells: int | None = None,
                  compress: str | None = None, cluster: str | Cluster | None = None) -> EvaluationResult:
    """Evaluate a criteria tree onto its grid and write the favourability raster with lineage.

    Parameters
    ----------
    tree : Tree
        The model; relative proxy paths resolve from ``tree.base_dir``.
    output : str
        The favourability GeoTIFF to write (``.tif``).
    node_folder : str, optional
        Folder for one raster per component and per node marked ``save_output``.
    feedback : Feedback, optional
        Progress, notes, warnings and cancel.
    grid : Grid, optional
        Evaluate on this grid instead of the tree's (a coarse preview, say).
    threads : int, optional
        Worker threads for the block pass (default: up to 2).
    job : str
        Name of the job in the lineage.
    tree_file : str, optional
        The tree file the tree came from, hashed into the lineage.
    max_cells : int, optional
        Coarsen the grid by a whole factor until it has at most this many
        cells (a quick look); the lineage records the factor.
    compress : str, optional
        Compression of the rasters written (:func:`~.writer.compression_options`;
        None: the fast default); recorded in the lineage.
    cluster : str or Cluster, optional
        Run the blocks on a Dask cluster instead of this machine's threads:
        ``"local"`` (a LocalCluster here), a scheduler address
        (``tcp://HOST:PORT``) or a connected :class:`~.cluster.Cluster`. The
        cells are the same; the lineage says where they were computed.

    Returns
    -------
    EvaluationResult

    Raises
    ------
    FavourError
        A tree problem, a missing or unusable input, an output that is one of
        the inputs or cannot be written, another run writing the same output,
        or a cancel. Nothing is left under the final names and earlier
        outputs are as they were.
    """
    feedback = feedback or Feedback()
    threads = threads or DEFAULT_THREADS
    plan = tree.compile()
    compression_options(compress)  # an unknown compression is refused before any work
    output = os.path.abspath(output)
    check_raster_name(output)
    node_folder = os.path.abspath(node_folder) if node_folder else None
    node_outputs = _node_outputs(plan, node_folder)
    with gdal_job():
        check_apart(_planned_outputs(output, node_outputs), job_inputs(tree, plan, tree_file, grid))
    connection = connect(cluster) if isinstance(cluster, str) else cluster
    try:
        with OutputJob([output, *node_outputs.values()], [node_folder] if node_folder else []) as run:
            with gdal_job():
                return _evaluate(tree, plan, output, node_outputs, feedback, grid, threads, job,
                                 tree_file, run.workdir, run.outputs, max_cells, compress, connection)
    finally:
        if isinstance(cluster, str) and connection is not None:
            connection.close()


def _node_outputs(plan: EvaluationPlan, node_folder: str | None) -> dict[str, str]:
    """Return node path → raster file for the nodes written to ``node_folder``, names made distinct."""
    if not node_folder:
        return {}
    files: dict[str, str] = {}
    taken: set[str] = set()
    for path in plan.saved:
        stem = node_file_name(path)[:-len(".tif")]
        name, n = stem, 1
        while name.lower() in taken:
            n += 1
            name = f"{stem}-{n}"
        taken.add(name.lower())
        files[path] = os.path.join(node_folder, name + ".tif")
    return files


def _planned_outputs(output: str, node_outputs: dict[str, str]) -> list[tuple[str, str]]:
    """Return (label, path) of every file an evaluation writes, sidecars included."""
    planned = [("the favourability", output), ("its lineage", str(lin.lineage_path(output))),
               ("its style", style_path(output))]
    for node, path in node_outputs.items():
        planned += [(f"the raster of {node}", path), (f"the style of {node}", style_path(path))]
    return planned


def job_inputs(tree: Tree, plan: EvaluationPlan, tree_file: str | None = None,
               grid: Grid | None = None) -> list[tuple[str, str]]:
    """Return (label, path) of every file an evaluation reads: tree file, grid reference, proxies.

    A proxy stands for every file GDAL opens for it (a shapefile's .shp,
    .shx, .dbf and .prj, say). Files that do not exist are left out: they
    fail later with a message of their own.
    """
    found = []
    if tree_file:
        found.append(("the tree file", os.path.abspath(tree_file)))
    spec = tree.grid or {}
    if grid is None and "reference" in spec:
        found.append(("the grid reference", str(tree.resolve(spec["reference"]))))
    for leaf in plan.leaves:
        path = str(leaf.proxy.resolve(tree.base_dir))
        for f in input_files(path, leaf.proxy.is_vector) or [path]:
            found.append((f"the layer of {leaf.path}", f))
    return found


@dataclass
class PreparedInputs:
    """What a streamed job over a tree's proxies needs before its first block.

    ``sources`` maps each leaf path to how it is read on ``grid``;
    ``leaf_files`` to the files GDAL reads for it; the ``hasher`` is already
    computing their checksums in the background (:meth:`checksums` waits).
    """

    grid: Grid
    grid_note: dict
    sources: dict[str, SourceSpec]
    leaf_files: dict[str, list[str]]
    cache_bytes: int
    hasher: _Hasher

    def checksums(self) -> dict[str, dict]:
        """Wait for the input checksums and return them by path.

        Raises
        ------
        MissingInputError
            An input file could not be read while hashing it.
        """
        self.hasher.join()
        if self.hasher.error is not None:
            raise MissingInputError(f"an input file could not be read while hashing it: {self.hasher.error}")
        return self.hasher.result


def prepare_inputs(tree: Tree, plan: EvaluationPlan, grid: Grid | None, workdir: str,
                   feedback: Feedback, tree_file: str | None = None, max_cells: int | None = None,
                   span: tuple[float, float] = (0.0, 0.15)) -> PreparedInputs:
    """Build the grid, align every leaf's proxy to it and start hashing the inputs.

    ``grid`` overrides the tree's grid; ``max_cells`` coarsens it for a
    quick look. Run inside :func:`~.gdalenv.gdal_job`.
    """
    if grid is None:
        grid, grid_note = reference_grid(tree)
    else:
        grid_note = {"source": "given by the caller"}
    if max_cells and grid.cells > max_cells:
        coarse = grid.coarsened(max_cells)
        grid_note["coarsened"] = {"from": grid.to_dict(), "factor": round(coarse.cell_x / grid.cell_x),
                                  "max_cells": max_cells}
        feedback.info(f"quick look: cells {round(coarse.cell_x / grid.cell_x)} times larger on each side")
        grid = coarse
    feedback.info(f"grid: {grid.describe()}")
    sources = _prepare_sources(tree, plan, grid, workdir, feedback, span)
    unique = {spec.key: spec for spec in sources.values()}.values()
    cache_bytes = set_stream_cache(sum(cache_need(spec.record) for spec in unique))
    files = []
    if tree_file:
        files.append(os.path.abspath(tree_file))
    if grid_note.get("source") == "reference":
        files.append(grid_note["path"])
    leaf_files = {}
    for leaf in plan.leaves:
        path = str(leaf.proxy.resolve(tree.base_dir))
        leaf_files[leaf.path] = input_files(path, sources[leaf.path].record["kind"] == "vector")
        files.extend(leaf_files[leaf.path])
    hasher = _Hasher(list(dict.fromkeys(files)))
    hasher.start()
    return PreparedInputs(grid, grid_note, sources, leaf_files, cache_bytes, hasher)


def read_leaves(plan: EvaluationPlan, sources: dict[str, SourceSpec], reader: BlockReader,
                window) -> dict[str, np.ndarray]:
    """Read every leaf's proxy on ``window``; leaves sharing a layer read it once.

    Raises
    ------
    InputError
        A block could not be read; the message starts with the leaf's path.
    """
    by_key: dict[str, np.ndarray] = {}
    values = {}
    for leaf in plan.leaves:
        spec = sources[leaf.path]
        if spec.key not in by_key:
            try:
                by_key[spec.key] = reader.read(spec, window)
            except InputError as exc:
                raise InputError(f"{leaf.path}: {exc}") from None
        values[leaf.path] = by_key[spec.key]
    return values


def base_record(job: str, created: str, tree: Tree, plan: EvaluationPlan, prepared: PreparedInputs,
                tree_file: str | None, threads: int) -> dict:
    """Return the lineage fields every tree job shares: tool, tree, grid, inputs and checksums."""
    checksums = prepared.checksums()
    return {
        "format": lin.FORMAT, "version": lin.VERSION, "job": job, "created": created,
        "tool": {"name": about.NAME, "version": about.VERSION, "python": platform.python_version(),
                 "numpy": np.__version__, "gdal": gdal.__version__},
        "host": platform.platform(),
        "tree": tree.to_dict(), "base_dir": str(tree.base_dir) if tree.base_dir else None,
        "tree_file": checksums.get(os.path.abspath(tree_file)) if tree_file else None,
        "root": plan.root_path,
        "grid": {**prepared.grid.to_dict(), "from": prepared.grid_note},
        "inputs": [{"node": leaf.path, **prepared.sources[leaf.path].record,
                    "files": [checksums[f] for f in prepared.leaf_files[leaf.path]]}
                   for leaf in plan.leaves],
        "parameters": {"block": [BLOCK_ROWS, BLOCK_COLS], "threads": threads,
                       "gdal_cache_bytes": prepared.cache_bytes,
                       "dtype": "float32", "nodata_value": -9999.0,
                       "arithmetic": "float64 within each block"},
        "nodata_policy": {step.path: step.operator.nodata for step in plan.steps},
        "seed": None,
        "caution": lin.CAUTION,
    }


def _evaluate(tree, plan, output, node_outputs, feedback, grid, threads, job, tree_file,
              workdir, outputs, max_cells, compress=None, cluster=None) -> EvaluationResult:
    """Body of :func:`evaluate_tree`, run inside the GDAL job settings."""
    created = lin.utc_now()
    prepared = prepare_inputs(tree, plan, grid, workdir, feedback, tree_file, max_cells)
    grid = prepared.grid
    finals = {plan.root_path: output, **node_outputs}
    if cluster is None:
        writers = {path: RasterWriter(final, grid, path, outputs=outputs, compress=compress)
                   for path, final in finals.items()}
        stats = _stream(plan, prepared.sources, grid, writers, feedback, threads, (0.15, 0.97))
    else:
        targets = {}
        for path, final in finals.items():
            targets[path] = outputs.reserve(final, ".tif")
            outputs.remove_on_commit(final + ".aux.xml")
        stats = evaluate_on_cluster(cluster, plan, prepared.sources, grid, targets, workdir, feedback,
                                    (0.15, 0.97), compress)
    root_stats = stats[plan.root_path]
    if root_stats["valid_cells"] == 0:
        feedback.warning("the favourability has no valid cell: every cell is nodata in some "
                         "proxy that the tree propagates; check the proxies' extents and nodata",
                         NodataWarning)
    for leaf in plan.leaves:
        if stats[leaf.path]["valid_cells"] == 0:
            feedback.warning(f"{leaf.path}: the proxy has no valid cell on the grid", NodataWarning)

    method, options = compression_options(compress)
    record = {
        **base_record(job, created, tree, plan, prepared, tree_file, threads),
        "statistics": stats,
        "compression": {"method": method, "options": options},
        "ran_on": cluster.description if cluster is not None else
        {"kind": "this machine", "threads": threads},
        "outputs": {"favourability": output, "nodes": dict(node_outputs)},
        "lineage_file": os.path.basename(str(lin.lineage_path(output))),
        "warnings": list(feedback.warnings),
    }
    feedback.check_cancelled()
    for path, final in finals.items():
        items = lin.summary_metadata(record, path)
        if cluster is None:
            writers[path].set_metadata(items, stats[path])
            writers[path].finish()
        else:
            annotate_file(targets[path], path, items, stats[path])
        outputs.add_text(style_path(final), membership_style())
    lineage_file = stage_lineage(outputs, record, output)
    feedback.check_cancelled()
    outputs.commit()
    feedback.set_progress(1.0)
    return EvaluationResult(output, dict(node_outputs), lineage_file, record, list(feedback.warnings))


def _stream(plan: EvaluationPlan, sources: dict[str, SourceSpec], grid: Grid,
            writers: dict[str, RasterWriter], feedback: Feedback, threads: int,
            span: tuple[float, float]) -> dict[str, dict]:
    """Read, evaluate and write every block; return per-node statistics.

    Workers read the block and return its μ and statistics; this thread
    writes the blocks in order (``map_windows``).
    """
    keep = list(writers) + [leaf.path for leaf in plan.leaves]

    def work(window, reader):
        results = plan.evaluate_block(read_leaves(plan, sources, reader, window), keep)
        block_stats = {path: lin.NodeStatistics.of_block(array, histogram=path in writers)
                       for path, array in results.items()}
        return {path: results[path] for path in writers}, block_stats

    totals = {path: lin.NodeStatistics(histogram=path in writers) for path in keep}
    for window, (arrays, block_stats) in map_windows(work, grid, feedback, threads, span):
        for path, array in arrays.items():
            writers[path].write(window, array)
        for path, stats in block_stats.items():
            totals[path].merge(stats)
    return {path: s.to_dict() for path, s in totals.items()}


def evaluate_tree_file(tree_file: str, output: str, node_folder: str | None = None,
                       feedback: Feedback | None = None, threads: int | None = None,
                       max_cells: int | None = None, compress: str | None = None,
                       cluster: str | None = None) -> EvaluationResult:
    """Load a tree file and evaluate it (see :func:`evaluate_tree`)."""
    tree = Tree.load(tree_file)
    return evaluate_tree(tree, output, node_folder, feedback, threads=threads, tree_file=tree_file,
                         max_cells=max_cells, compress=compress, cluster=cluster)


#: Jobs whose output is one tree evaluated on a grid, which :func:`reproduce` can run again.
TREE_JOBS = ("evaluate-tree", "membership", "distance-membership", "combine")


@dataclass
class Reproduction:
    """The outcome of evaluating a lineage's tree again and comparing every cell."""

    output: str
    identical: bool
    cells: int
    differing_cells: int
    nodata_mismatches: int
    max_abs_difference: float
    changed_inputs: list[dict]
    rebuilt: bool = False

    def summary(self) -> str:
        """Return a few lines saying whether the cells are identical and what changed."""
        lines = []
        if self.rebuilt:
            lines.append(f"{self.output} was missing; rebuilt it from its lineage")
        elif self.identical:
            lines.append(f"identical: all {self.cells} cells of {self.output} are reproduced exactly")
        else:
            lines.append(
                f"different: {self.differing_cells} of {self.cells} cells differ "
                f"(largest difference {self.max_abs_difference:.6g}, "
                f"{self.nodata_mismatches} differ in nodata)")
        for change in self.changed_inputs:
            what = "is missing" if change["change"] == "missing" else "has changed since the run"
            lines.append(f"input {change['path']} ({change['node'] or 'tree file'}) {what}")
        if not self.changed_inputs:
            lines.append("every input file has the size and SHA-256 recorded in the lineage")
        return "\n".join(lines)


def reproduce(output: str, feedback: Feedback | None = None, threads: int | None = None
              ) -> Reproduction:
    """Evaluate the tree recorded in ``output``'s lineage again and compare every cell.

    Inputs whose size or SHA-256 differ from the lineage are named. If the
    output itself is missing it is rebuilt from the lineage.

    Raises
    ------
    LineageError
        No lineage, or one that cannot be read.
    FavourError
        The evaluation itself failed (a missing input, say).
    """
    feedback = feedback or Feedback()
    output = os.path.abspath(output)
    record = lin.read_lineage(output)
    if record["job"] not in TREE_JOBS:
        raise LineageError(f"{output} comes from a {record['job']!r} job; reproduce evaluates the tree of "
                           f"a tree evaluation again ({', '.join(TREE_JOBS)}), so run that job again instead")
    changes = lin.changed_inputs(record)
    tree_doc = record.get("tree")
    if not isinstance(tree_doc, dict) or not isinstance(record.get("grid"), dict):
        raise LineageError(f"the lineage of {output} holds no tree or no grid")
    tree = Tree.from_dict(tree_doc, base_dir=record.get("base_dir"))
    grid = Grid.from_dict(record["grid"])
    if record.get("tree_file"):
        tree_path = record["tree_file"]["path"]
        if not os.path.isfile(tree_path) or lin.file_digest(tree_path) != record["tree_file"]["sha256"]:
            feedback.info(f"the tree file {tree_path} has changed since the run; "
                          "the lineage's own copy of the tree is used")
    if not os.path.exists(output):
        evaluate_tree(tree, output, None, feedback, grid=grid, threads=threads, job=record["job"])
        return Reproduction(output, False, grid.cells, 0, 0, 0.0, changes, rebuilt=True)
    folder = tempfile.mkdtemp(prefix=".favour-reproduce-", dir=os.path.dirname(output))
    try:
        again = os.path.join(folder, "again.tif")
        evaluate_tree(tree, again, None, ScaledFeedback(feedback, 0.0, 0.9), grid=grid,
                      threads=threads, job=record["job"])
        with gdal_job():
            comparison = compare_rasters(output, again, feedback)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    feedback.set_progress(1.0)
    return Reproduction(output, comparison["differing_cells"] == 0, comparison["cells"],
                        comparison["differing_cells"], comparison["nodata_mismatches"],
                        comparison["max_abs_difference"], changes)


def compare_rasters(first: str, second: str, feedback: Feedback | None = None) -> dict:
    """Compare two single-band rasters on the same grid cell by cell, block by block.

    Returns
    -------
    dict
        ``cells``, ``differing_cells`` (value or nodata differs),
        ``nodata_mismatches`` and ``max_abs_difference`` over cells valid in both.
    """
    feedback = feedback or Feedback()
    a_ds, b_ds = open_raster(first, "first raster"), open_raster(second, "second raster")
    a_grid = Grid.from_dataset(a_ds, first)
    if not a_grid.same_as(Grid.from_dataset(b_ds, second)):
        raise GridMismatchError(f"{first} and {second} are on different grids")
    a_spec = SourceSpec("a", first, 1, a_ds.GetRasterBand(1).GetNoDataValue(), 1.0, 0.0, {})
    b_spec = SourceSpec("b", second, 1, b_ds.GetRasterBand(1).GetNoDataValue(), 1.0, 0.0, {})
    a_ds = b_ds = None
    reader = BlockReader()
    differing = mismatched = 0
    largest = 0.0
    total = count_windows(a_grid.width, a_grid.height)
    for i, window in enumerate(iter_windows(a_grid.width, a_grid.height)):
        feedback.check_cancelled()
        a = reader.read(a_spec, window)
        b = reader.read(b_spec, window)
        a_nan, b_nan = np.isnan(a), np.isnan(b)
        both = ~a_nan & ~b_nan
        mismatched += int(np.count_nonzero(a_nan != b_nan))
        diff = np.abs(a[both] - b[both])
        differing += int(np.count_nonzero(diff)) + int(np.count_nonzero(a_nan != b_nan))
        if diff.size:
            largest = max(largest, float(diff.max()))
        feedback.set_progress(0.9 + 0.1 * (i + 1) / total)
    return {"cells": a_grid.cells, "differing_cells": differing, "nodata_mismatches": mismatched,
            "max_abs_difference": largest}
