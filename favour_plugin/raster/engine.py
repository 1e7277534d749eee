"""The one evaluation path: a criteria tree streamed block by block into rasters with lineage.

:func:`evaluate_tree` is what the processing algorithms, the command line,
the dock and the tests all call. It compiles the tree, builds the reference
grid, aligns every proxy to it (lazily), streams the blocks through
:meth:`~favour_plugin.core.tree.EvaluationPlan.evaluate_block` on a small pool
of threads (GDAL and numpy release the GIL, so both cores work), writes the
favourability and any node rasters to temporary files, and only on success
renames them, writes their styles and the lineage record.

What an evaluation reads is prepared in :mod:`.tree_inputs`; :func:`reproduce`
(:mod:`.reproduce`) evaluates a lineage's tree again and compares every cell.
Their public names are importable from here too, as callers have always
imported them.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

from ..core import lineage as lin
from ..core.errors import (
    NodataWarning,
)
from ..core.feedback import Feedback
from ..core.tree import EvaluationPlan, Tree
from .cluster import Cluster, connect, evaluate_on_cluster
from .gdalenv import gdal_job
from .grid import Grid
from .outputs import OutputJob, check_apart, stage_lineage
from .reproduce import TREE_JOBS, Reproduction, compare_rasters, reproduce
from .sources import SourceSpec
from .streaming import DEFAULT_THREADS, map_windows
from .style import membership_style, style_path
from .tree_inputs import (
    PreparedInputs,
    base_record,
    input_files,
    job_inputs,
    node_file_name,
    prepare_inputs,
    read_leaves,
    reference_grid,
)
from .writer import RasterWriter, annotate_file, check_raster_name, compression_options

__all__ = ["TREE_JOBS", "EvaluationResult", "PreparedInputs", "Reproduction", "base_record",
           "compare_rasters", "evaluate_tree", "evaluate_tree_file", "input_files", "job_inputs",
           "node_file_name", "prepare_inputs", "read_leaves", "reference_grid", "reproduce"]


@dataclass
class EvaluationResult:
    """What an evaluation wrote: the favourability raster, node rasters and the lineage."""

    output: str
    node_outputs: dict[str, str]
    lineage_file: str
    lineage: dict
    warnings: list[dict] = field(default_factory=list)


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
