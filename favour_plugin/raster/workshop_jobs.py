"""The workshop's file jobs: score sheets written, rounds aggregated, pairwise weights applied.

These jobs read and write tables and tree files, not rasters, but follow the
same rules as every job that writes (:mod:`.outputs`): no output over an
input, all outputs put in place together or not at all, a lineage beside the
main output. Score sheets are never written over an existing file: a sheet
in the folder may already hold an expert's scores.
"""

from __future__ import annotations

import csv
import io
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..core import lineage as lin
from ..core.errors import OutputError, ParameterError
from ..core.pairwise import PairwiseResult, pairwise_weights
from ..core.sheet_import import declared_round, read_sheets
from ..core.sheets import default_experts, write_sheet
from ..core.tree import Tree
from ..core.workshop import (
    DEFAULT_THRESHOLD,
    STATISTICS,
    Aggregate,
    aggregate,
    aggregate_tree,
    compare_rounds,
    tree_with_weights,
)
from .outputs import OutputJob, check_apart, lineage_header, stage_lineage

SHEET_FORMATS = ("csv", "xlsx")


def _record(job: str, inputs: list[dict], parameters: dict, **extra) -> dict:
    """Return a lineage record for a job without a grid."""
    return {**lineage_header(job, lin.utc_now(), rasters=False), "inputs": inputs, "parameters": parameters,
            "seed": None, **extra}


def _file_inputs(role: str, paths: Sequence[str]) -> list[dict]:
    """Return lineage input entries for plain files: role, path, size and SHA-256."""
    return [{"role": role, "path": p, "files": lin.describe_files([p])} for p in paths]


def parse_expert_weights(text: str | None) -> dict[str, float] | None:
    """Parse ``"E1=2, E2=1"`` into expert weights (None for an empty text).

    Raises
    ------
    ParameterError
        An entry that is not ``id=number``.
    """
    if not text or not text.strip():
        return None
    weights = {}
    for part in re.split(r"[,;]", text):
        if not part.strip():
            continue
        name, sep, value = part.partition("=")
        try:
            if not sep or not name.strip():
                raise ValueError
            weights[name.strip()] = float(value)
        except ValueError:
            raise ParameterError(f"expert weights are written 'E1=2, E2=1'; cannot read {part.strip()!r}") \
                from None
    return weights


# -- score sheets -----------------------------------------------------------------------------


def write_score_sheets(tree: Tree, folder: str, experts: int | Sequence[str] = 4, fmt: str = "csv",
                       previous_sheets: Sequence[str] | None = None,
                       expert_weights: Mapping[str, float] | None = None) -> list[str]:
    """Write one score sheet per expert into ``folder``; round 2 when ``previous_sheets`` are given.

    A next-round sheet carries the expert's own scores of the previous round
    (the round the previous sheets declare, plus one) and the group's median,
    IQR and count beside each item.

    Raises
    ------
    OutputError
        A sheet of that name is already in the folder (it may hold an
        expert's scores), or the folder cannot be written. Nothing is written.
    SheetError
        The previous round's sheets cannot be read.
    """
    if fmt not in SHEET_FORMATS:
        raise ParameterError(f"sheet format must be one of {', '.join(SHEET_FORMATS)}, got {fmt!r}")
    tree.compile()
    folder = os.path.abspath(folder)
    previous = group = None
    round_number = 1
    if previous_sheets:
        round_number = max(declared_round(path) for path in previous_sheets) + 1
        previous = read_sheets(previous_sheets, tree, round_number=round_number - 1)
        group = aggregate(previous, expert_weights)
        ids = tuple(previous.experts)
    else:
        ids = default_experts(experts) if isinstance(experts, int) else tuple(experts)
    finals = []
    for expert in ids:
        stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", expert)
        name = f"{stem}.{fmt}" if round_number == 1 else f"{stem}-round{round_number}.{fmt}"
        finals.append(os.path.join(folder, name))
    taken = [f for f in finals if os.path.lexists(f)]
    if taken:
        raise OutputError(f"{taken[0]} already exists and may hold an expert's scores; Favour never "
                          "writes over a sheet: choose an empty folder")
    check_apart([("a score sheet", f) for f in finals],
                [("a previous sheet", p) for p in previous_sheets or ()])
    with OutputJob(finals) as run:
        for expert, final in zip(ids, finals):
            write_sheet(run.outputs.reserve(final, f".{fmt}"), tree, expert, previous=previous, group=group,
                        round_number=round_number)
        run.outputs.commit()
    return finals


# -- aggregation ----------------------------------------------------------------------------


@dataclass
class AggregateResult:
    """What :func:`aggregate_scores` found and wrote."""

    rounds: list[Aggregate]
    table_file: str
    tree_file: str | None
    lineage_file: str

    @property
    def latest(self) -> Aggregate:
        """The last round's aggregate."""
        return self.rounds[-1]


TABLE_COLUMNS = ("round", "node", "item", "n", "mean", "median", "trimmed", "pool", "iqr", "cv",
                 "flagged", "low", "high", "change_from_previous_round")


def aggregate_table(rounds: Sequence[Aggregate], experts: Sequence[str]) -> str:
    """Return the aggregate of every round as CSV text: one row per round and item, experts' values too.

    ``change_from_previous_round`` is the change of the linear pool since the
    round before (blank in round 1 and for items new in a round).
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([*TABLE_COLUMNS, *experts])
    previous = None
    for result in rounds:
        before = {(c.node, c.item): c.before for c in compare_rounds(previous, result)} if previous else {}
        for (node, item), s in result.summaries.items():
            earlier = before.get((node, item))
            change = s.pool - earlier.pool if earlier is not None else None
            values = dict(zip(s.experts, s.values))
            writer.writerow([result.round_number, node, item, s.n, *(_g(v) for v in (
                s.mean, s.median, s.trimmed, s.pool, s.iqr, s.cv)), "yes" if s.flagged else "",
                _g(s.low), _g(s.high), _g(change), *(_g(values.get(e)) for e in experts)])
        previous = result
    return buffer.getvalue()


def _g(value) -> str:
    """Format a table cell: six significant figures, blank for None."""
    if value is None:
        return ""
    return f"{value:.6g}" if isinstance(value, float) else str(value)


def aggregate_scores(tree: Tree, sheets: Sequence[str], output_table: str,
                     later_rounds: Sequence[Sequence[str]] = (),
                     expert_weights: Mapping[str, float] | None = None, statistic: str = "pool",
                     threshold: float = DEFAULT_THRESHOLD, output_tree: str | None = None,
                     tree_file: str | None = None) -> AggregateResult:
    """Aggregate one or more rounds of score sheets into a table, and optionally a tree.

    Parameters
    ----------
    tree : Tree
        The tree the experts scored.
    sheets : sequence of str
        Round 1's sheets.
    output_table : str
        CSV with every round's aggregate per item (see :data:`TABLE_COLUMNS`,
        then each expert's value), flags and the change from the previous round.
    later_rounds : sequence of sequences of str
        The sheets of round 2, 3, … (each round kept beside the others).
    expert_weights : mapping, optional
        For the linear pool; equal when omitted.
    statistic : str
        The central value put into ``output_tree``: pool, mean, median or trimmed.
    threshold : float
        The CV above which an item is flagged for discussion.
    output_tree : str, optional
        A tree file holding the last round's aggregate (weights and
        membership parameters); relative layer paths are rewritten for its folder.

    Raises
    ------
    SheetError, ParameterError, OutputError
        Bad sheets or parameters, an aggregate that would make an invalid
        membership (named), an output over an input. Nothing is written.
    """
    if statistic not in STATISTICS:
        raise ParameterError(f"statistic must be one of {', '.join(STATISTICS)}, got {statistic!r}")
    output_table = os.path.abspath(output_table)
    if not output_table.lower().endswith(".csv"):
        raise ParameterError(f"the aggregate table {output_table} must end in .csv")
    finals = [output_table]
    planned = [("the aggregate table", output_table), ("its lineage", str(lin.lineage_path(output_table)))]
    if output_tree:
        output_tree = os.path.abspath(output_tree)
        if not output_tree.lower().endswith(".json"):
            raise ParameterError(f"the aggregated tree {output_tree} must be a .json tree file")
        finals.append(output_tree)
        planned.append(("the aggregated tree", output_tree))
    all_rounds = [list(sheets), *[list(r) for r in later_rounds]]
    read = [("a score sheet", os.path.abspath(p)) for r in all_rounds for p in r]
    if tree_file:
        read.append(("the tree file", os.path.abspath(tree_file)))
    check_apart(planned, read)
    rounds = []
    for number, paths in enumerate(all_rounds, start=1):
        scores = read_sheets(paths, tree, round_number=number)
        rounds.append(aggregate(scores, expert_weights, threshold=threshold))
    experts = list(dict.fromkeys(e for r in rounds for s in r.summaries.values() for e in s.experts))
    new_tree = aggregate_tree(tree, rounds[-1], statistic) if output_tree else None
    with OutputJob(finals) as run:
        run.outputs.add_text(output_table, aggregate_table(rounds, experts))
        if new_tree is not None:
            new_tree.rebase(os.path.dirname(output_tree))
            run.outputs.add_text(output_tree, new_tree.to_json())
        record = _record("aggregate-scores",
                         _file_inputs("score sheet", [p for _, p in read if _ == "a score sheet"])
                         + (_file_inputs("tree file", [os.path.abspath(tree_file)]) if tree_file else []),
                         {"statistic": statistic, "threshold": threshold,
                          "expert_weights": dict(rounds[-1].expert_weights), "rounds": len(rounds)},
                         tree=tree.to_dict(), base_dir=str(tree.base_dir) if tree.base_dir else None,
                         flagged=[{"round": r.round_number, "node": s.node, "item": s.item, "cv": s.cv}
                                  for r in rounds for s in r.flagged],
                         outputs={"table": output_table, "tree": output_tree})
        lineage_file = stage_lineage(run.outputs, record, output_table)
        run.outputs.commit()
    return AggregateResult(rounds, output_table, output_tree, lineage_file)


# -- pairwise comparison ----------------------------------------------------------------------


def read_matrix(path: str) -> tuple[list[str], np.ndarray]:
    """Read a pairwise-comparison matrix from CSV: a header of names, then one row per name.

    Cells hold numbers or fractions (``1/3``); the first cell of each row is
    its name, which must follow the header's order.

    Raises
    ------
    ParameterError
        The file cannot be read or its table is not a square matrix of
        numbers with matching names; the message names the row and column.
    """
    from ..core.jsonio import read_user_bytes

    data = read_user_bytes(Path(path), max_bytes=1 << 20, error=ParameterError, what="matrix file")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ParameterError(f"the matrix file {path} is not UTF-8 text: {exc}") from None
    rows = [row for row in csv.reader(io.StringIO(text)) if any(cell.strip() for cell in row)]
    if len(rows) < 3:
        raise ParameterError(f"the matrix file {path} needs a header of names and a row per name")
    names = [cell.strip() for cell in rows[0][1:]]
    if len(rows) - 1 != len(names):
        raise ParameterError(f"the matrix file {path} names {len(names)} elements in its header but has "
                             f"{len(rows) - 1} rows")
    matrix = np.empty((len(names), len(names)))
    for i, row in enumerate(rows[1:]):
        if row[0].strip() != names[i]:
            raise ParameterError(f"{path}, row {i + 2}: expected the row of {names[i]!r}, found "
                                 f"{row[0].strip()!r}")
        if len(row) - 1 != len(names):
            raise ParameterError(f"{path}, row {i + 2}: {len(row) - 1} values for {len(names)} names")
        for j, cell in enumerate(row[1:]):
            matrix[i, j] = _fraction(cell, f"{path}, row {i + 2}, column {names[j]!r}")
    return names, matrix


def _fraction(text: str, where: str) -> float:
    """Read a number or a fraction ``a/b``."""
    text = text.strip()
    try:
        if "/" in text:
            top, bottom = text.split("/")
            return float(top) / float(bottom)
        return float(text)
    except (ValueError, ZeroDivisionError):
        raise ParameterError(f"{where}: {text!r} is not a number or a fraction such as 1/3") from None


@dataclass
class PairwiseJob:
    """Weights from a matrix, and the tree they were put into (if any)."""

    names: list[str]
    result: PairwiseResult
    tree_file: str | None = None


def pairwise_job(matrix_file: str, tree: Tree | None = None, node: str | None = None,
                 output_tree: str | None = None, source_tree: str | None = None) -> PairwiseJob:
    """Weights of the elements of a pairwise-comparison matrix; put into a node's children if asked.

    With ``tree``, ``node`` and ``output_tree`` the matrix's names must be the
    node's children; the tree with those weights is written to
    ``output_tree`` (a new file; relative layer paths rewritten for its folder).
    ``source_tree`` is the file ``tree`` was read from, so the output is never
    written over it.

    Raises
    ------
    ParameterError
        A matrix that is not reciprocal (the pair named), names that are not
        the node's children, an unknown node.
    OutputError
        ``output_tree`` is the matrix or the tree file read.
    """
    names, matrix = read_matrix(matrix_file)
    result = pairwise_weights(matrix)
    if output_tree is None:
        return PairwiseJob(names, result)
    if tree is None or not node:
        raise ParameterError("to put the weights into a tree, give the tree and the node whose children "
                             "the matrix compares")
    try:
        children = [child.name for child in tree.find(node).children]
    except KeyError:
        raise ParameterError(f"the tree has no node {node!r}") from None
    if sorted(children) != sorted(names):
        raise ParameterError(f"{node}: the matrix compares {', '.join(names)} but the node's children are "
                             f"{', '.join(children) or 'none'}")
    new_tree = tree_with_weights(tree, node, dict(zip(names, (float(w) for w in result.weights))))
    output_tree = os.path.abspath(output_tree)
    read = [("the matrix", os.path.abspath(matrix_file))]
    if source_tree:
        read.append(("the tree file", os.path.abspath(source_tree)))
    check_apart([("the weighted tree", output_tree)], read)
    with OutputJob([output_tree]) as run:
        new_tree.rebase(os.path.dirname(output_tree))
        run.outputs.add_text(output_tree, new_tree.to_json())
        run.outputs.commit()
    return PairwiseJob(names, result, output_tree)


def describe_pairwise(job: PairwiseJob, node: str | None = None) -> str:
    """Return a few lines stating the weights, λmax, CI, CR and the worst judgement."""
    r = job.result
    lines = [f"{name}: weight {w:.4f}" for name, w in zip(job.names, r.weights)]
    lines.append(f"λmax = {r.lambda_max:.4f}, CI = {r.ci:.4f}, CR = {r.cr:.4f} "
                 f"({'acceptable' if r.consistent else 'inconsistent: CR ≥ 0.10, revisit the judgements'})")
    if job.names and len(job.names) > 2:
        i, j = r.worst_pair
        lines.append(f"most inconsistent judgement: {job.names[i]} against {job.names[j]} "
                     f"(given {r.matrix[i, j]:.3g}, the weights imply {r.worst_consistent_value:.3g})")
    if job.tree_file:
        lines.append(f"weights put into the children of {node} in {job.tree_file}")
    return "\n".join(lines)

