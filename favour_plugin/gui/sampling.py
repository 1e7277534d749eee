"""A proxy's values, sampled for the membership editor's histogram (run in a worker thread).

Nothing here touches Qt or the project: :func:`sample_proxy` takes a copy of
the tree and a leaf's path and returns plain numbers. Rasters are read
decimated (:func:`~favour_plugin.raster.checks.sample_values`); vector
proxies are measured onto a coarse version of the tree's grid by the same
code the evaluation uses (:func:`~favour_plugin.raster.vector.vector_source`).
"""

from __future__ import annotations

import json
import shutil
import tempfile
from dataclasses import dataclass

import numpy as np

from ..core.feedback import Feedback
from ..core.tree import Tree
from ..raster.checks import sample_values
from ..raster.engine import reference_grid
from ..raster.gdalenv import gdal_job
from ..raster.vector import vector_source

#: At most this many class codes are listed for a categorical proxy.
MAX_CLASSES = 64
BINS = 48


@dataclass(frozen=True)
class ProxySample:
    """A histogram of a proxy's sampled values.

    ``edges`` and ``counts`` are the histogram over ``[low, high]`` (the
    0.5th to 99.5th percentiles; values beyond are counted in the end bins).
    ``classes`` maps each class code to its count when the values are whole
    numbers with at most ``MAX_CLASSES`` codes, else it is None. ``fit`` is
    the 2nd and 98th percentiles, for fitting a ramp to the data.
    """

    key: tuple
    count: int
    low: float
    high: float
    edges: np.ndarray
    counts: np.ndarray
    classes: dict | None
    fit: tuple[float, float]


def sample_key(tree: Tree, path: str) -> tuple:
    """Return what identifies a proxy's sample: file, band, layer, measure, field, filter, margin, grid."""
    proxy = tree.find(path).proxy
    grid = repr(sorted((tree.grid or {}).items())) if proxy.is_vector else None
    return (str(proxy.resolve(tree.base_dir)), proxy.band or 1, proxy.layer, proxy.measure,
            proxy.field, grid, json.dumps(proxy.where, sort_keys=True, default=str), repr(proxy.margin))


def sample_proxy(tree: Tree, path: str, max_cells: int = 250_000) -> ProxySample:
    """Sample the values of the proxy of the leaf at ``path`` and summarise them.

    Raises
    ------
    FavourError
        The layer cannot be read, or a vector proxy has no grid to be measured on.
    """
    proxy = tree.find(path).proxy
    if proxy is None:
        raise ValueError(f"{path} has no layer yet")
    if proxy.is_vector:
        work = tempfile.mkdtemp(prefix="favour-sample-")
        try:
            with gdal_job():
                grid = reference_grid(tree)[0].coarsened(max_cells)
                spec = vector_source(str(proxy.resolve(tree.base_dir)), proxy.layer, proxy.measure,
                                     proxy.field, grid, work, path, Feedback(), where=proxy.where,
                                     margin=proxy.margin)
            values = sample_values(spec.target, spec.band, max_cells)
        finally:
            shutil.rmtree(work, ignore_errors=True)
    else:
        values = sample_values(str(proxy.resolve(tree.base_dir)), proxy.band or 1, max_cells)
    return summarise(values, sample_key(tree, path))


def summarise(values: np.ndarray, key: tuple = ()) -> ProxySample:
    """Turn sampled values into a histogram, class counts and a fitting range."""
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return ProxySample(key, 0, 0.0, 1.0, np.linspace(0.0, 1.0, BINS + 1), np.zeros(BINS, int),
                           None, (0.0, 1.0))
    classes = None
    codes, counts = np.unique(values, return_counts=True)
    if codes.size <= MAX_CLASSES and np.all(codes == np.round(codes)):
        classes = {float(c): int(n) for c, n in zip(codes, counts)}
    low, high = (float(v) for v in np.percentile(values, [0.5, 99.5]))
    if high <= low:
        low, high = float(values.min()), float(values.max())
    if high <= low:
        low, high = low - 0.5, high + 0.5
    hist, edges = np.histogram(np.clip(values, low, high), bins=BINS, range=(low, high))
    fit = tuple(float(v) for v in np.percentile(values, [2.0, 98.0]))
    if fit[1] <= fit[0]:
        fit = (low, high)
    return ProxySample(key, int(values.size), low, high, edges, hist, classes, fit)
