"""Many trees in one streamed pass: the workshop's Monte Carlo, and one-at-a-time sensitivity.

Both jobs evaluate a set of trees that share the base tree's proxies: N
realisations drawn from the experts' scores (:func:`monte_carlo`), or the
base tree with each weight nudged and each criterion left out
(:func:`sensitivity`). The proxies of a block are read once and every tree is
evaluated on them while the block is in memory, through the same
:meth:`~favour_plugin.core.tree.EvaluationPlan.evaluate_block` as a single
run; never one pass per tree. The stack of N maps is held a few rows at a
time (``STACK_BYTES``), so memory grows with N times a strip of a block,
never with the grid.

The top x % of each map's area needs the map's quantile, known only once
every cell has been seen. A pilot evaluates every tree on strips of rows
spread evenly over the grid (every cell when the grid has at most
``PILOT_CELLS`` cells, so small grids are exact) and takes each threshold from a fine histogram
(:class:`~favour_plugin.core.ensemble.UnitHistograms`); the full pass then
counts the share of the area each threshold actually cut off, and the
lineage records both.
"""

from __future__ import annotations

import functools
import os
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..core import lineage as lin
from ..core.ensemble import UnitHistograms, summarise_stack
from ..core.errors import InputError, ParameterError
from ..core.feedback import Feedback
from ..core.scoring import apply_values
from ..core.sheet_import import read_sheets
from ..core.targets import check_top_percent
from ..core.tree import BlockCache, EvaluationPlan, Tree
from ..core.uncertainty import MODES, sample_values, sensitivity_variants
from ..core.validation import MIN_DEPOSITS
from ..core.workshop import STATISTICS, check_expert_weights
from .blocks import Window, iter_windows
from .cluster import assemble, connect, run_bands, run_items
from .evidence import DepositCells, deposit_cells
from .gdalenv import gdal_job
from .grid import Grid
from .outputs import OutputJob, check_apart, stage_lineage
from .streaming import DEFAULT_THREADS, map_windows
from .style import membership_style, style_path
from .tree_inputs import PreparedInputs, base_record, input_files, job_inputs, prepare_inputs, read_leaves
from .writer import RasterWriter, annotate_file, check_raster_name, compression_options

#: The rasters a Monte Carlo writes, and what each holds.
MC_OUTPUTS = {
    "mean": "mean favourability over the realisations",
    "std": "standard deviation of favourability over the realisations",
    "p10": "10th percentile of favourability over the realisations",
    "p50": "median favourability over the realisations",
    "p90": "90th percentile of favourability over the realisations",
    "robustness": "fraction of realisations in which the cell is in the top area",
}
#: Bytes of one strip of the stack of N maps evaluated together. The summaries copy a strip a
#: few times (each cell's N values side by side, the partial sort, float64 deviations), so a
#: thread's peak is several times this. Measured with bench_montecarlo.py (200 realisations,
#: 10⁷ cells, 2 threads): 2 MB 227 s / 329 MB, 4 MB 120 s / 378 MB, 8 MB 87 s / 446 MB,
#: 16 MB 82 s / 557 MB; smaller strips pay each plan's per-strip overhead more often.
STACK_BYTES = 8 * 2**20
#: Cells of one strip: each intermediate map (and each cached one) is at most this many float64.
STRIP_CELLS = 65536
#: The pilot samples rows until it holds about this many cells; grids this small are read whole.
PILOT_CELLS = 1_000_000


@dataclass
class EnsembleResult:
    """What a Monte Carlo or a sensitivity run wrote, with the numbers it found."""

    files: dict[str, str]
    lineage_file: str
    record: dict
    rows: list[dict] = field(default_factory=list)


def _strip_rows(n: int, width: int) -> int:
    """Return how many rows of a block are evaluated together.

    N maps of them fit in ``STACK_BYTES`` (float32), and one intermediate
    map (float64) holds at most ``STRIP_CELLS`` cells.
    """
    width = max(1, width)
    return max(1, min(STACK_BYTES // (4 * max(1, n) * width), STRIP_CELLS // width))


def _stack(plans: Sequence[EvaluationPlan], values: Mapping[str, np.ndarray],
           cache: BlockCache) -> np.ndarray:
    """Evaluate every plan on one strip of proxy values; return their root maps stacked (float32).

    Plans that share a leaf or a subtree with the same parameters compute it
    once for the strip (``cache``, made by :meth:`BlockCache.for_plans`).
    """
    shape = next(iter(values.values())).shape
    stack = np.empty((len(plans), *shape), dtype=np.float32)
    cache = cache.fresh()
    for i, plan in enumerate(plans):
        stack[i] = plan.evaluate_block(values, cache=cache)[plan.root_path]
    return stack


#: Rows of one pilot strip, and the widest piece of a strip read at once.
PILOT_ROWS, PILOT_COLS = 8, 4096


def pilot_windows(grid: Grid, pilot_cells: int) -> list[Window]:
    """Return the windows the pilot reads: every window when the grid is small, else strips.

    Strips of ``PILOT_ROWS`` rows across the whole width, spaced evenly from
    the top row to the bottom one, until they hold about ``pilot_cells``
    cells; every column is sampled, so a side of the grid that differs (a
    basin under cover, say) is not missed. Strips wider than
    ``PILOT_COLS`` are read in pieces.
    """
    if grid.cells <= pilot_cells:
        return list(iter_windows(grid.width, grid.height))
    rows = min(PILOT_ROWS, grid.height)
    count = max(2, min(grid.height // rows, -(-pilot_cells // (rows * grid.width))))
    offsets = np.unique(np.linspace(0, grid.height - rows, count).round().astype(int))
    return [Window(col, int(row), min(PILOT_COLS, grid.width - col), rows)
            for row in offsets for col in range(0, grid.width, PILOT_COLS)]


def pilot_window(plans, base: EvaluationPlan, sources, shared: BlockCache, window, reader,
                 check=None) -> np.ndarray:
    """Histogram counts (N × BINS) of every plan's μ on one pilot window."""
    leaves = read_leaves(base, sources, reader, window)
    strip = _strip_rows(len(plans), window.width)
    local = UnitHistograms(len(plans))
    for start in range(0, window.height, strip):
        if check is not None:
            check()
        local.add(_stack(plans, {k: v[start:start + strip] for k, v in leaves.items()}, shared))
    return local.counts


def _add_counts(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    return first + second


def _pilot(base: EvaluationPlan, plans, prepared: PreparedInputs, feedback: Feedback, threads: int,
           pilot_cells: int, span: tuple[float, float], cluster=None) -> tuple[UnitHistograms, int]:
    """Histograms of every plan's μ on the pilot windows; and how many cells they hold."""
    windows = pilot_windows(prepared.grid, pilot_cells)
    histograms = UnitHistograms(len(plans))
    shared = BlockCache.for_plans(plans)
    compute = functools.partial(pilot_window, plans, base, prepared.sources, shared)
    if cluster is not None:
        for counts in run_items(cluster, compute, windows, feedback, span, combine=_add_counts):
            histograms.counts += counts
    else:
        lock = threading.Lock()

        def work(window, reader):
            counts = compute(window, reader, check=feedback.check_cancelled)
            with lock:
                histograms.counts += counts

        for _ in map_windows(work, prepared.grid, feedback, threads, span, items=windows):
            pass
    return histograms, sum(w.width * w.height for w in windows)


def mc_window(plans, base: EvaluationPlan, sources, shared: BlockCache, thresholds: np.ndarray,
              names: Sequence[str], window, reader, check=None) -> tuple[dict, tuple]:
    """Evaluate one window of the Monte Carlo.

    Returns each summary's block, and per realisation the cells at or above
    its threshold and the valid cells (for the share the thresholds cut off).
    """
    n = len(plans)
    leaves = read_leaves(base, sources, reader, window)
    strip = _strip_rows(n, window.width)
    blocks = {name: np.empty(window.shape, dtype=np.float64) for name in names}
    above = np.zeros(n, dtype=np.int64)
    valid = np.zeros(n, dtype=np.int64)
    for start in range(0, window.height, strip):
        if check is not None:
            check()
        stack = _stack(plans, {k: v[start:start + strip] for k, v in leaves.items()}, shared)
        summary = summarise_stack(stack, thresholds)
        for name in names:
            blocks[name][start:start + strip] = summary[name]
        flat = stack.reshape(n, -1)
        valid += (~np.isnan(flat)).sum(axis=1)
        above += (flat >= thresholds[:, None]).sum(axis=1)
    return blocks, (above, valid)


def _prepare(tree: Tree, tree_file: str | None, workdir: str, feedback: Feedback,
             span: tuple[float, float]) -> tuple[EvaluationPlan, PreparedInputs]:
    plan = tree.compile()
    return plan, prepare_inputs(tree, plan, None, workdir, feedback, tree_file, span=span)


def _pilot_note(grid: Grid, sampled: int, thresholds: np.ndarray, realised: np.ndarray,
                top_percent: float) -> dict:
    """Say where the top-area thresholds came from and what share of each map they cut off."""
    exact = sampled >= grid.cells
    return {"top_percent": top_percent,
            "threshold_source": "every cell of the grid" if exact else
            f"a pilot of {sampled} cells in strips spread evenly over the grid's {grid.cells}",
            "thresholds": {"min": float(np.nanmin(thresholds)), "max": float(np.nanmax(thresholds))},
            "realised_top_percent": {"min": float(np.nanmin(realised) * 100),
                                     "max": float(np.nanmax(realised) * 100)}}


# -- the Monte Carlo ------------------------------------------------------------------------


def monte_carlo(tree: Tree, sheets: Sequence[str], outputs: Mapping[str, str], n: int = 200,
                seed: int = 1, mode: str = "experts", expert_weights: Mapping[str, float] | None = None,
                statistic: str = "pool", top_percent: float = 10.0, feedback: Feedback | None = None,
                threads: int | None = None, tree_file: str | None = None,
                pilot_cells: int = PILOT_CELLS, compress: str | None = None,
                cluster=None) -> EnsembleResult:
    """Evaluate N realisations drawn from the workshop's score sheets in one streamed pass.

    Parameters
    ----------
    tree : Tree
        The tree the experts scored.
    sheets : sequence of str
        The score sheets (CSV or XLSX) of one round.
    outputs : mapping
        Output GeoTIFF per summary: keys among ``MC_OUTPUTS`` (``mean``,
        ``std``, ``p10``, ``p50``, ``p90``, ``robustness``).
    n, seed, mode, expert_weights, statistic
        The sampling (:func:`favour_plugin.core.uncertainty.sample_values`);
        the seed, N and every realisation's values go into the lineage.
    top_percent : float
        The top area, in % of the valid cells, for the robustness raster.
    feedback, threads, tree_file
        As for :func:`~.engine.evaluate_tree`.
    pilot_cells : int
        Cells the pilot samples for the top-area thresholds.
    compress : str, optional
        Compression of the rasters (:func:`~.writer.compression_options`).
    cluster : str or Cluster, optional
        Run the blocks on a Dask cluster (``"local"`` or ``tcp://HOST:PORT``,
        :mod:`.cluster`): each worker evaluates every realisation of its
        band; the cells are those of the threaded run.

    Returns
    -------
    EnsembleResult

    Raises
    ------
    FavourError
        Bad sheets (nothing is written), bad parameters, an output that is an
        input, an unusable proxy, a cancel. Nothing is left under the final
        names and earlier outputs are as they were.
    """
    feedback = feedback or Feedback()
    threads = threads or DEFAULT_THREADS
    top_percent = check_top_percent(top_percent)
    unknown = sorted(set(outputs) - set(MC_OUTPUTS))
    if unknown or not outputs:
        raise ParameterError(f"Monte Carlo outputs are named {', '.join(MC_OUTPUTS)}; got "
                             f"{', '.join(unknown) if unknown else 'none'}")
    if mode not in MODES or statistic not in STATISTICS:
        raise ParameterError(f"mode must be one of {', '.join(MODES)} and statistic one of "
                             f"{', '.join(STATISTICS)}; got {mode!r} and {statistic!r}")
    outputs = {name: os.path.abspath(path) for name, path in outputs.items()}
    for path in outputs.values():
        check_raster_name(path)
    compression_options(compress)
    sheets = [os.path.abspath(s) for s in sheets]
    base = tree.compile()
    planned = [(f"the {name} raster", path) for name, path in outputs.items()]
    planned += [(f"the lineage of the {name} raster", str(lin.lineage_path(p)))
                for name, p in outputs.items()]
    planned += [(f"the style of the {name} raster", style_path(p)) for name, p in outputs.items()]
    with gdal_job():
        check_apart(planned, job_inputs(tree, base, tree_file) + [("a score sheet", s) for s in sheets])
    scores = read_sheets(sheets, tree)
    weights = check_expert_weights(scores.experts, expert_weights)
    values = sample_values(tree, scores, n, seed, mode=mode, expert_weights=weights, statistic=statistic)
    plans = [apply_values(tree, v).compile() for v in values]
    feedback.info(f"{n} realisations drawn ({mode}, seed {seed}) from {len(scores.experts)} experts")
    connection = connect(cluster) if isinstance(cluster, str) else cluster
    try:
        return _monte_carlo_run(tree, base, plans, values, scores, weights, sheets, outputs, n, seed, mode,
                                statistic, top_percent, feedback, threads, tree_file, pilot_cells, compress,
                                connection)
    finally:
        if isinstance(cluster, str) and connection is not None:
            connection.close()


def _monte_carlo_run(tree, base, plans, values, scores, weights, sheets, outputs, n, seed, mode, statistic,
                     top_percent, feedback, threads, tree_file, pilot_cells, compress,
                     connection) -> EnsembleResult:
    """Body of :func:`monte_carlo` once the realisations are drawn: the pilot, the pass, the outputs."""
    with OutputJob(list(outputs.values())) as run, gdal_job():
        created = lin.utc_now()
        _, prepared = _prepare(tree, tree_file, run.workdir, feedback, (0.0, 0.05))
        histograms, sampled = _pilot(base, plans, prepared, feedback, threads, pilot_cells, (0.05, 0.15),
                                     connection)
        thresholds = histograms.top_thresholds(top_percent)
        grid = prepared.grid
        compute = functools.partial(mc_window, plans, base, prepared.sources, BlockCache.for_plans(plans),
                                    thresholds, list(outputs))
        above = np.zeros(n, dtype=np.int64)
        valid = np.zeros(n, dtype=np.int64)
        if connection is None:
            writers = {name: RasterWriter(path, grid, MC_OUTPUTS[name], outputs=run.outputs,
                                          compress=compress) for name, path in outputs.items()}
            lock = threading.Lock()

            def work(window, reader):
                blocks, (local_above, local_valid) = compute(window, reader, check=feedback.check_cancelled)
                with lock:
                    above[:] += local_above
                    valid[:] += local_valid
                return blocks

            for window, blocks in map_windows(work, grid, feedback, threads, (0.15, 0.97)):
                for name, writer in writers.items():
                    writer.write(window, blocks[name])
        else:
            writers = {}
            tiles, extras = run_bands(connection, compute, grid, list(outputs), run.workdir, feedback,
                                      (0.15, 0.9))
            for local_above, local_valid in extras:
                above += local_above
                valid += local_valid
            targets = {}
            for name, path in outputs.items():
                targets[name] = run.outputs.reserve(path, ".tif")
                run.outputs.remove_on_commit(path + ".aux.xml")
                assemble(tiles[name], targets[name], run.workdir, compress)
        realised = np.where(valid > 0, above / np.maximum(valid, 1), np.nan)
        note = _pilot_note(grid, sampled, thresholds, realised, top_percent)
        feedback.info(f"top {top_percent:g} % thresholds from {note['threshold_source']}; they cut off "
                      f"{note['realised_top_percent']['min']:.2f}–{note['realised_top_percent']['max']:.2f} "
                      "% of each realisation's area")
        record = {
            **base_record("monte-carlo", created, tree, base, prepared, tree_file, threads),
            "seed": seed,
            "sampling": {"n": n, "mode": mode, "statistic": statistic, "expert_weights": weights,
                         "experts": list(scores.experts)},
            "sheets": lin.describe_files(sheets),
            "realisations": values,
            "top_area": note,
            "compression": dict(zip(("method", "options"), compression_options(compress))),
            "ran_on": connection.description if connection is not None else
            {"kind": "this machine", "threads": threads},
            "outputs": dict(outputs),
            "warnings": list(feedback.warnings),
        }
        feedback.check_cancelled()
        if connection is not None:
            for name, path in outputs.items():
                items = lin.summary_metadata({**record, "lineage_file": os.path.basename(
                    str(lin.lineage_path(path)))}, name)
                annotate_file(targets[name], MC_OUTPUTS[name], items, None)
                run.outputs.add_text(style_path(path), membership_style(title=name))
                stage_lineage(run.outputs, record, path)
            run.outputs.commit()
            feedback.set_progress(1.0)
            return EnsembleResult(dict(outputs), str(lin.lineage_path(next(iter(outputs.values())))), record)
        return _commit_rasters(run, writers, record, feedback)


def _commit_rasters(run: OutputJob, writers: Mapping[str, RasterWriter], record: dict,
                    feedback: Feedback) -> EnsembleResult:
    """Finish the rasters, stage their styles and lineages, and put everything in place."""
    for name, writer in writers.items():
        writer.set_metadata(lin.summary_metadata(
            {**record, "lineage_file": os.path.basename(str(lin.lineage_path(writer.path)))}, name))
        writer.finish()
        run.outputs.add_text(style_path(writer.path), membership_style(title=name))
        stage_lineage(run.outputs, record, writer.path)
    feedback.check_cancelled()
    run.outputs.commit()
    feedback.set_progress(1.0)
    first = next(iter(writers.values())).path
    return EnsembleResult({name: w.path for name, w in writers.items()}, str(lin.lineage_path(first)),
                          record)


# -- sensitivity ----------------------------------------------------------------------------


def sensitivity(tree: Tree, output_table: str, output_chart: str | None = None, fraction: float = 0.1,
                top_percent: float = 10.0, deposits: str | None = None, deposits_layer: str | None = None,
                feedback: Feedback | None = None, threads: int | None = None,
                tree_file: str | None = None, pilot_cells: int = PILOT_CELLS) -> EnsembleResult:
    """One-at-a-time weight changes and leave-one-criterion-out, in one streamed pass.

    For each variant (:func:`favour_plugin.core.uncertainty.sensitivity_variants`)
    the table reports the cells that enter and leave the top ``top_percent`` %
    of the area against the base tree, their share of the base's top area,
    and, with deposits, the AUC of the success-rate curve and its change.

    Parameters
    ----------
    tree : Tree
        The base tree.
    output_table : str
        CSV table, one row per variant (skipped variants say why).
    output_chart : str, optional
        PNG tornado chart of the change in the top area (and the AUC).
    fraction : float
        Relative weight change (0.1 for ±10 %).
    top_percent : float
        The top area, in % of the valid cells.
    deposits, deposits_layer : str, optional
        Known deposits (points), for the AUC.

    Raises
    ------
    FavourError
        As :func:`monte_carlo`.
    """
    feedback = feedback or Feedback()
    threads = threads or DEFAULT_THREADS
    top_percent = check_top_percent(top_percent)
    output_table = os.path.abspath(output_table)
    if not output_table.lower().endswith(".csv"):
        raise ParameterError(f"the sensitivity table {output_table} must end in .csv")
    finals = [output_table]
    if output_chart:
        output_chart = os.path.abspath(output_chart)
        if not output_chart.lower().endswith(".png"):
            raise ParameterError(f"the tornado chart {output_chart} must end in .png")
        finals.append(output_chart)
    variants = sensitivity_variants(tree, fraction)
    used = [v for v in variants if not v.skipped]
    base = tree.compile()
    plans = [base] + [v.tree.compile() for v in used]
    planned = [("the sensitivity table", output_table),
               ("its lineage", str(lin.lineage_path(output_table)))]
    if output_chart:
        planned.append(("the tornado chart", output_chart))
    read = job_inputs(tree, base, tree_file)
    with gdal_job():
        if deposits:
            read += [("the deposits", f) for f in input_files(deposits, True) or [deposits]]
        check_apart(planned, read)
    with OutputJob(finals) as run, gdal_job():
        created = lin.utc_now()
        _, prepared = _prepare(tree, tree_file, run.workdir, feedback, (0.0, 0.05))
        grid = prepared.grid
        points = deposit_cells(deposits, deposits_layer, grid, feedback) if deposits else None
        histograms, sampled = _pilot(base, plans, prepared, feedback, threads, pilot_cells, (0.05, 0.15))
        thresholds = histograms.top_thresholds(top_percent)
        totals = _sensitivity_pass(base, plans, prepared, thresholds, points, feedback, threads)
        rows = _sensitivity_rows(variants, totals, top_percent)
        realised = totals["above"] / np.maximum(totals["valid"], 1)
        record = {
            **base_record("sensitivity", created, tree, base, prepared, tree_file, threads),
            "parameters_sensitivity": {"fraction": fraction, "top_percent": top_percent},
            "top_area": _pilot_note(grid, sampled, thresholds, realised, top_percent),
            "deposits": points.record if points is not None else None,
            "variants": [{"label": v.label, "node": v.node, "change": v.change,
                          "description": v.description, "skipped": v.skipped} for v in variants],
            "sensitivity_table": rows,
            "outputs": {"table": output_table, "chart": output_chart},
            "warnings": list(feedback.warnings),
        }
        if points is not None and points.on_grid < MIN_DEPOSITS:
            feedback.warning(f"only {points.on_grid} deposits on the grid: the AUC and its changes rest "
                             "on very little evidence")
        feedback.check_cancelled()
        run.outputs.add_text(output_table, _table_csv(rows))
        if output_chart:
            from ..report.charts import tornado_chart

            tornado_chart(rows, run.outputs.reserve(output_chart, ".png"), top_percent,
                          title=f"Sensitivity of the top {top_percent:g} % ({tree.name or base.root_path})")
        lineage_file = stage_lineage(run.outputs, record, output_table)
        feedback.check_cancelled()
        run.outputs.commit()
        feedback.set_progress(1.0)
        files = {"table": output_table, **({"chart": output_chart} if output_chart else {})}
        return EnsembleResult(files, lineage_file, record, rows)


def _sensitivity_pass(base, plans, prepared: PreparedInputs, thresholds, points: DepositCells | None,
                      feedback: Feedback, threads: int) -> dict:
    """Count, for every variant against the base, cells entering and leaving the top area."""
    v = len(plans)
    totals = {"entering": np.zeros(v, np.int64), "leaving": np.zeros(v, np.int64),
              "above": np.zeros(v, np.int64), "valid": np.zeros(v, np.int64)}
    histograms = UnitHistograms(v) if points is not None else None
    deposit_values: list[list[np.ndarray]] = [[] for _ in range(v)]
    lock = threading.Lock()
    shared = BlockCache.for_plans(plans)

    def work(window, reader):
        leaves = read_leaves(base, prepared.sources, reader, window)
        strip = _strip_rows(v, window.width)
        local = {key: np.zeros(v, np.int64) for key in totals}
        local_hist = UnitHistograms(v) if histograms is not None else None
        found = [[] for _ in range(v)]
        for start in range(0, window.height, strip):
            feedback.check_cancelled()
            stack = _stack(plans, {k: a[start:start + strip] for k, a in leaves.items()}, shared)
            flat = stack.reshape(v, -1)
            top = flat >= thresholds[:, None]
            both = ~np.isnan(flat) & ~np.isnan(flat[0])
            local["entering"] += (top & ~top[0] & both).sum(axis=1)
            local["leaving"] += (~top & top[0] & both).sum(axis=1)
            local["above"] += top.sum(axis=1)
            local["valid"] += (~np.isnan(flat)).sum(axis=1)
            if local_hist is not None:
                local_hist.add(stack)
                strip_window = Window(window.col_off, window.row_off + start, window.width, stack.shape[1])
                rows, cols, _ = points.in_window(strip_window)
                for r in range(v):
                    found[r].append(stack[r, rows, cols])
        with lock:
            for key in totals:
                totals[key] += local[key]
            if histograms is not None:
                histograms.merge(local_hist)
                for r in range(v):
                    deposit_values[r].extend(found[r])

    for _ in map_windows(work, prepared.grid, feedback, threads, (0.15, 0.95)):
        pass
    if histograms is not None:
        values = [np.concatenate(parts) if parts else np.empty(0) for parts in deposit_values]
        if not values[0].size or np.isnan(values[0]).all():
            raise InputError("no deposit falls on a cell where the base tree has a value; the AUC "
                             "cannot be computed")
        totals["auc"] = histograms.auc(values)
    return totals


def _sensitivity_rows(variants, totals: dict, top_percent: float) -> list[dict]:
    """One row per variant: its label, the change of the top area, the AUC and its change."""
    base_top = int(totals["above"][0])
    auc = totals.get("auc")
    rows = []
    k = 0
    for variant in variants:
        row = {"label": variant.label, "node": variant.node, "change": variant.change,
               "entering": None, "leaving": None, "top_area_change_percent": None,
               "auc": None, "auc_change": None, "note": variant.description}
        if not variant.skipped:
            k += 1
            row["entering"] = int(totals["entering"][k])
            row["leaving"] = int(totals["leaving"][k])
            row["top_area_change_percent"] = 100.0 * (row["entering"] + row["leaving"]) / max(1, base_top)
            if auc is not None:
                row["auc"] = float(auc[k])
                row["auc_change"] = float(auc[k] - auc[0])
        rows.append(row)
    rows.insert(0, {"label": "base tree", "node": "", "change": "none", "entering": 0, "leaving": 0,
                    "top_area_change_percent": 0.0, "auc": None if auc is None else float(auc[0]),
                    "auc_change": None if auc is None else 0.0,
                    "note": f"top {top_percent:g} % of the area: {base_top} cells"})
    return rows


def _table_csv(rows: list[dict]) -> str:
    """Return the sensitivity table as CSV text."""
    import csv
    import io

    columns = ["label", "node", "change", "entering", "leaving", "top_area_change_percent", "auc",
               "auc_change", "note"]
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, columns, lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({key: "" if row[key] is None else
                         (f"{row[key]:.6g}" if isinstance(row[key], float) else row[key]) for key in columns})
    return buffer.getvalue()
