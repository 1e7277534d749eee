"""Why here: every node's value at one cell, read through the evaluation's own preparation and plan.

:class:`Probe` answers "why does this cell score what it does?" for one
cell at a time. It does not compute μ another way: it builds the reference
grid (:func:`~.engine.reference_grid`), aligns the proxies with
:func:`~.engine.prepare_inputs` (warped VRTs, vector proxies measured onto
the whole grid) into a work folder of its own, reads the one cell with
:func:`~.engine.read_leaves` on a 1 x 1 :class:`~.blocks.Window`, and turns
it into μ with :meth:`~favour_plugin.core.tree.EvaluationPlan.evaluate_block`
keeping every node, exactly as the evaluation does for a block.

Preparing can take a while (a distance proxy is measured over the whole
grid), so the prepared inputs are kept and reused by later questions. They
are prepared again only when what preparing reads changes: the grid
definition, a leaf's path or proxy (layer, band, measure, field, filter,
margin, resampling, whether its membership takes class codes), or a proxy
file on disk (its size or modification time). A change of weights,
operators or membership parameters needs no new preparation: the plan is
compiled afresh for every question. :meth:`Probe.close` removes the work
folder.
"""

from __future__ import annotations

import copy
import json
import math
import os
import shutil
import tempfile
import threading
from dataclasses import dataclass

from osgeo import gdal, osr

from ..core.errors import GridError, ParameterError
from ..core.feedback import Feedback
from ..core.tree import PATH_SEPARATOR, EvaluationPlan, Tree
from .blocks import Window
from .engine import PreparedInputs, prepare_inputs, read_leaves, reference_grid
from .gdalenv import gdal_job
from .grid import Grid, crs_label, srs_from_text
from .sources import BlockReader

#: Name prefix of the probe's work folder (hidden, inside the folder it is given).
WORK_PREFIX = ".favour-probe-"
#: Short names of the linear units distance proxies are measured in.
UNIT_NAMES = {"metre": "m", "meter": "m", "metres": "m", "meters": "m", "foot": "ft", "feet": "ft",
              "us survey foot": "ft (US)", "kilometre": "km", "kilometer": "km"}


@dataclass(frozen=True)
class NodeValue:
    """One node's answer at the cell.

    Attributes
    ----------
    path : str
        The node's path (``Favourability > Source > Mag``).
    name : str
        The node's own name.
    kind : str
        ``"root"``, ``"component"``, ``"criterion"`` (combines criteria of its
        own) or ``"leaf"`` (scores one proxy).
    depth : int
        0 for the root, 1 under it, …
    mu : float or None
        μ at the cell; None where the evaluation gives nodata.
    weight : float
        The node's weight (counts when its parent takes a weighted mean).
    operator : dict or None
        The combining node's operator, as in the tree file.
    membership : dict or None
        The leaf's membership function, as in the tree file.
    value : float or None
        Leaves: the proxy's value at the cell after alignment to the grid
        (scale and offset applied; None for nodata). Distances are in map
        units of the grid's CRS.
    units : str or None
        Leaves: the units of ``value`` where known (the distance proxies'
        map units, a raster band's unit type).
    measure : str or None
        Leaves on vector layers: ``"distance"`` or ``"attribute"``.
    """

    path: str
    name: str
    kind: str
    depth: int
    mu: float | None
    weight: float = 1.0
    operator: dict | None = None
    membership: dict | None = None
    value: float | None = None
    units: str | None = None
    measure: str | None = None


@dataclass(frozen=True)
class CellValues:
    """Every node's μ at one cell of the model's grid, and where that cell is.

    Attributes
    ----------
    row, col : int
        The cell, from the grid's upper-left corner (0-based).
    x, y : float
        The cell's centre in the grid's CRS.
    point : tuple of float
        The point asked about, in the grid's CRS.
    crs : str
        The grid's CRS, as messages name it.
    grid : Grid
        The model's grid.
    nodes : tuple of NodeValue
        Every node, the root first, each followed by the nodes under it in
        the tree's order.
    prepared : bool
        True when the inputs were prepared for this question, False when
        prepared inputs were reused.
    """

    row: int
    col: int
    x: float
    y: float
    point: tuple[float, float]
    crs: str
    grid: Grid
    nodes: tuple[NodeValue, ...]
    prepared: bool

    @property
    def root(self) -> NodeValue:
        """Return the root's answer."""
        return self.nodes[0]

    def node(self, path: str) -> NodeValue:
        """Return the answer of the node at ``path``.

        Raises
        ------
        KeyError
            No node has this path.
        """
        for node in self.nodes:
            if node.path == path:
                return node
        raise KeyError(f"no node {path!r} in the answer")


def locate(grid: Grid, x: float, y: float, crs_wkt: str) -> tuple[int, int, float, float]:
    """Return the cell (row, column) holding a point, and the point in the grid's CRS.

    Parameters
    ----------
    grid : Grid
        The model's grid.
    x, y : float
        The point, in ``crs_wkt``.
    crs_wkt : str
        The point's CRS (WKT, or anything GDAL reads as a CRS); empty for the
        grid's own CRS.

    Returns
    -------
    tuple
        ``(row, col, x, y)``, the last two in the grid's CRS.

    Raises
    ------
    ParameterError
        A coordinate that is not a finite number.
    GridError
        A CRS GDAL does not recognise or cannot turn into the grid's, or a
        point outside the grid (the message gives the point and the grid's
        extent, both in the grid's CRS).
    """
    try:
        gx, gy = float(x), float(y)
    except (TypeError, ValueError):
        gx = gy = math.nan
    if isinstance(x, bool) or isinstance(y, bool) or not (math.isfinite(gx) and math.isfinite(gy)):
        raise ParameterError(f"the point ({x!r}, {y!r}) is not a pair of finite numbers")
    target = grid.srs
    if crs_wkt and crs_wkt.strip():
        source = srs_from_text(crs_wkt)
        if not source.IsSame(target):
            try:
                gx, gy, *_ = osr.CoordinateTransformation(source, target).TransformPoint(gx, gy)
            except RuntimeError as exc:
                raise GridError(f"the point ({x:.10g}, {y:.10g}) in {crs_label(source)} cannot be turned "
                                f"into the grid's CRS {crs_label(target)}: {exc}") from None
            if not (math.isfinite(gx) and math.isfinite(gy)):
                raise GridError(f"the point ({x:.10g}, {y:.10g}) in {crs_label(source)} has no place in "
                                f"the grid's CRS {crs_label(target)}")
    col = math.floor((gx - grid.xmin) / grid.cell_x)
    row = math.floor((grid.ymax - gy) / grid.cell_y)
    if not (0 <= col < grid.width and 0 <= row < grid.height):
        xmin, ymin, xmax, ymax = grid.extent
        raise GridError(f"the point ({gx:.10g}, {gy:.10g}) in {crs_label(target)} lies outside the "
                        f"model's grid, which covers x {xmin:.10g} to {xmax:.10g} and y {ymin:.10g} to "
                        f"{ymax:.10g} ({grid.describe()}); pick a place inside the grid")
    return row, col, gx, gy


def _file_state(path: str) -> list:
    """Return what says a file changed: its size and modification time (None if it is missing)."""
    try:
        info = os.stat(path)
    except OSError:
        return [path, None]
    return [path, info.st_size, info.st_mtime_ns]


def inputs_key(tree: Tree, plan: EvaluationPlan) -> str:
    """Return what preparing the inputs depends on, as text: equal keys can share prepared inputs.

    The grid definition (and the reference raster's file), and for each leaf
    its path, its proxy as in the tree file, whether its membership takes
    class codes (nearest-neighbour alignment), and its file's size and
    modification time.
    """
    spec = copy.deepcopy(tree.grid or {})
    parts: list = [spec, str(tree.base_dir) if tree.base_dir else None]
    if "reference" in spec:
        parts.append(_file_state(str(tree.resolve(spec["reference"]))))
    for leaf in plan.leaves:
        path = str(leaf.proxy.resolve(tree.base_dir))
        parts.append([leaf.path, leaf.proxy.to_dict(), bool(leaf.membership.categorical),
                      _file_state(path)])
    return json.dumps(parts, sort_keys=True, default=str)


def _units(tree: Tree, plan: EvaluationPlan, grid: Grid) -> dict[str, str | None]:
    """Return the units of each leaf's values where known: map units for distances, a band's unit type."""
    found: dict[str, str | None] = {}
    srs = grid.srs
    map_units = "degree" if srs.IsGeographic() else \
        UNIT_NAMES.get((srs.GetLinearUnitsName() or "").lower(), srs.GetLinearUnitsName() or None)
    for leaf in plan.leaves:
        proxy = leaf.proxy
        if proxy.measure == "distance":
            found[leaf.path] = map_units
            continue
        if proxy.is_vector:
            found[leaf.path] = None
            continue
        unit = None
        try:
            ds = gdal.Open(str(proxy.resolve(tree.base_dir)), gdal.GA_ReadOnly)
            band = ds.GetRasterBand(proxy.band or 1) if ds is not None else None
            unit = (band.GetUnitType() or None) if band is not None else None
            band = None
            ds = None
        except RuntimeError:
            unit = None  # the proxy was readable when prepared; units are only a label
        found[leaf.path] = unit
    return found


def _without_frames(exc: BaseException) -> BaseException:
    """Return ``exc`` with its traceback and chained exceptions dropped, so their frames go now.

    A failure while preparing can leave GDAL bands and their datasets in the
    frames of the traceback (a cancelled distance measure, say). Dropped
    here, they are freed at once and in order, bands before datasets. Kept
    by a caller that the error refers back to (a task keeping its error),
    they would be freed by the garbage collector in any order, and a band
    freed after its dataset crashes the interpreter.
    """
    exc.__traceback__ = None
    exc.__context__ = None
    exc.__cause__ = None
    return exc


def _kind(tree: Tree, path: str, node) -> str:
    if path == tree.root.name:
        return "root"
    if node.component is not None:
        return "component"
    return "leaf" if node.is_leaf else "criterion"


def _number(array) -> float | None:
    value = float(array.reshape(-1)[0])
    return value if math.isfinite(value) else None


class Probe:
    """Prepared inputs kept for many questions about single cells of one model.

    Parameters
    ----------
    work_parent : str, optional
        Folder the work folder (``.favour-probe-XXXXXXXX``) is made in when
        the inputs are prepared; the system's temporary folder if None. It may
        be changed between questions; a new preparation uses the new one.

    Notes
    -----
    One question is answered at a time (a lock), so a probe can be asked
    from a worker thread while :meth:`close` is called from another.
    """

    def __init__(self, work_parent: str | None = None) -> None:
        self.work_parent = work_parent
        self.preparations = 0
        self._lock = threading.Lock()
        self._key: str | None = None
        self._prepared: PreparedInputs | None = None
        self._units: dict[str, str | None] = {}
        self._workdir: str | None = None

    @property
    def workdir(self) -> str | None:
        """Return the work folder holding the prepared inputs (None before the first preparation)."""
        return self._workdir

    def is_prepared_for(self, tree: Tree) -> bool:
        """Return True when a question about ``tree`` would reuse the prepared inputs."""
        try:
            key = inputs_key(tree, tree.compile())
        except (ValueError, OSError):
            return False
        return key == self._key

    def value_at(self, tree: Tree, x: float, y: float, crs_wkt: str = "",
                 feedback: Feedback | None = None) -> CellValues:
        """Return every node's μ (and each leaf's proxy value) at the cell holding the point.

        Parameters
        ----------
        tree : Tree
            The model, its proxies with absolute paths or a ``base_dir``.
        x, y : float
            The point, in ``crs_wkt``.
        crs_wkt : str
            The point's CRS; empty for the grid's own.
        feedback : Feedback, optional
            Progress and cancel while the inputs are prepared.

        Raises
        ------
        FavourError
            Problems that stop an evaluation (named by node path), a point
            outside the grid, unusable proxies, a cancel while preparing.
        """
        try:
            return self._value_at(tree, x, y, crs_wkt, feedback or Feedback())
        except Exception as exc:
            failure = _without_frames(exc)
        raise failure

    def _value_at(self, tree: Tree, x: float, y: float, crs_wkt: str, feedback: Feedback) -> CellValues:
        """Body of :meth:`value_at`."""
        with self._lock, gdal_job():
            plan = tree.compile()
            grid, _ = reference_grid(tree)
            row, col, gx, gy = locate(grid, x, y, crs_wkt)
            key = inputs_key(tree, plan)
            fresh = key != self._key or self._prepared is None
            if fresh:
                self._prepare(tree, plan, key, feedback)
            prepared = self._prepared
            reader = BlockReader()
            try:
                values = read_leaves(plan, prepared.sources, reader, Window(col, row, 1, 1))
            finally:
                reader.close()
            mus = plan.evaluate_block(values, keep=plan.node_paths)
            feedback.set_progress(1.0)
        grid = prepared.grid
        nodes = []
        for path, node in tree.walk():
            is_leaf = path in values
            nodes.append(NodeValue(
                path=path, name=node.name, kind=_kind(tree, path, node), depth=path.count(PATH_SEPARATOR),
                mu=_number(mus[path]), weight=float(node.weight),
                operator=copy.deepcopy(node.operator) if not is_leaf else None,
                membership=copy.deepcopy(node.membership) if is_leaf else None,
                value=_number(values[path]) if is_leaf else None,
                units=self._units.get(path) if is_leaf else None,
                measure=node.proxy.measure if is_leaf and node.proxy is not None else None))
        return CellValues(row, col, grid.xmin + (col + 0.5) * grid.cell_x,
                          grid.ymax - (row + 0.5) * grid.cell_y, (gx, gy), crs_label(grid.srs), grid,
                          tuple(nodes), fresh)

    def _prepare(self, tree: Tree, plan: EvaluationPlan, key: str, feedback: Feedback) -> None:
        """Prepare the inputs into a new work folder; on success drop the previous one."""
        if self.work_parent:
            os.makedirs(self.work_parent, exist_ok=True)
        workdir = tempfile.mkdtemp(prefix=WORK_PREFIX, dir=self.work_parent or None)
        failure = None
        try:
            prepared = prepare_inputs(tree, plan, None, workdir, feedback, span=(0.0, 0.95),
                                      hash_inputs=False)
            units = _units(tree, plan, prepared.grid)
        except BaseException as exc:
            failure = _without_frames(exc)  # closes the files GDAL still had open in the work folder
        if failure is not None:
            shutil.rmtree(workdir, ignore_errors=True)
            raise failure
        previous = self._workdir
        self._prepared, self._units, self._workdir, self._key = prepared, units, workdir, key
        self.preparations += 1
        if previous:
            shutil.rmtree(previous, ignore_errors=True)

    def close(self) -> None:
        """Forget the prepared inputs and remove the work folder (waits for a question being answered)."""
        with self._lock:
            workdir, self._workdir = self._workdir, None
            self._prepared, self._key, self._units = None, None, {}
            if workdir:
                shutil.rmtree(workdir, ignore_errors=True)

    def __enter__(self) -> Probe:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
