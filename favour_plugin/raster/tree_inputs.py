"""What an evaluation reads: the reference grid, each leaf's aligned source, checksums and the record.

:func:`prepare_inputs` aligns every proxy to the grid (warped VRTs for rasters,
measured grids for vector proxies) in a work folder; :func:`read_leaves` reads
one window of every leaf; :func:`job_inputs` and :func:`base_record` say what a
job read for its lineage. The evaluation (:mod:`.engine`), the Monte Carlo, the
redundancy check and the cluster runs all prepare their inputs here.
"""
from __future__ import annotations

import os
import threading
from dataclasses import dataclass

import numpy as np
from osgeo import gdal

from ..core import lineage as lin
from ..core.errors import (
    GridError,
    InputError,
    MissingInputError,
)
from ..core.feedback import Feedback
from ..core.tree import PATH_SEPARATOR, EvaluationPlan, Tree
from .blocks import BLOCK_COLS, BLOCK_ROWS
from .gdalenv import set_stream_cache
from .grid import Grid
from .outputs import lineage_header
from .sources import BlockReader, SourceSpec, cache_need, open_raster, raster_source
from .vector import vector_source


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


class FileHasher(threading.Thread):
    """Describes files (path, size, SHA-256) in the background while the blocks stream.

    Started on creation; :meth:`wait` returns the descriptions by path and
    raises, in the caller's thread, what reading a file raised here.
    """

    def __init__(self, files: list[str]) -> None:
        super().__init__(daemon=True, name="favour-hash")
        self.files = list(dict.fromkeys(files))
        self.result: dict[str, dict] = {}
        self.error: BaseException | None = None
        self.start()

    def run(self) -> None:
        """Describe every file; keep an error to raise in the caller's thread."""
        try:
            for entry in lin.describe_files(self.files):
                self.result[entry["path"]] = entry
        except OSError as exc:  # a file vanished mid-run; reported in the lineage check
            self.error = exc

    def wait(self) -> dict[str, dict]:
        """Wait for the checksums; return them by path.

        Raises
        ------
        MissingInputError
            An input file could not be read while hashing it.
        """
        self.join()
        if self.error is not None:
            raise MissingInputError(f"an input file could not be read while hashing it: {self.error}")
        return self.result


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
    ``leaf_files`` to the files GDAL reads for it; ``files`` are every file the
    job reads. Their checksums are computed in the background from the first
    call of :meth:`start_hashing` (made by :func:`prepare_inputs` unless told
    not to) and returned by :meth:`checksums`.
    """

    grid: Grid
    grid_note: dict
    sources: dict[str, SourceSpec]
    leaf_files: dict[str, list[str]]
    cache_bytes: int
    files: list[str]
    hasher: FileHasher | None = None

    def start_hashing(self) -> None:
        """Start computing the input checksums in the background (once)."""
        if self.hasher is None:
            self.hasher = FileHasher(self.files)

    def checksums(self) -> dict[str, dict]:
        """Wait for the input checksums and return them by path.

        Raises
        ------
        MissingInputError
            An input file could not be read while hashing it.
        """
        self.start_hashing()
        return self.hasher.wait()


def prepare_inputs(tree: Tree, plan: EvaluationPlan, grid: Grid | None, workdir: str,
                   feedback: Feedback, tree_file: str | None = None, max_cells: int | None = None,
                   span: tuple[float, float] = (0.0, 0.15), hash_inputs: bool = True) -> PreparedInputs:
    """Build the grid, align every leaf's proxy to it and start hashing the inputs.

    ``grid`` overrides the tree's grid; ``max_cells`` coarsens it for a
    quick look. ``hash_inputs`` False leaves the checksums until they are
    asked for (a job that writes no lineage never pays for them). Run inside
    :func:`~.gdalenv.gdal_job`.
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
    prepared = PreparedInputs(grid, grid_note, sources, leaf_files, cache_bytes, list(dict.fromkeys(files)))
    if hash_inputs:
        prepared.start_hashing()
    return prepared


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
        **lineage_header(job, created),
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
    }
