"""``evaluate`` and ``reproduce``: a tree into a favourability raster, and a lineage run again."""

from __future__ import annotations

import sys

from ..core.lineage import CAUTION
from .console import add_cluster, add_common, add_compression


def add_parsers(sub) -> None:
    """Declare the subcommands of this module."""
    evaluate = sub.add_parser("evaluate", help="evaluate a tree file into a favourability raster")
    evaluate.add_argument("tree", help="the tree file (.json)")
    evaluate.add_argument("-o", "--output", required=True, help="favourability GeoTIFF to write")
    evaluate.add_argument("--nodes", metavar="FOLDER",
                          help="also write one raster per component (and per node marked save_output)")
    add_compression(evaluate)
    add_cluster(evaluate)
    add_common(evaluate)
    evaluate.set_defaults(run=run_evaluate)
    reproduce = sub.add_parser(
        "reproduce", help="evaluate an output's lineage again and compare every cell")
    reproduce.add_argument("output", help="an output raster with its .lineage.json beside it")
    add_common(reproduce)
    reproduce.set_defaults(run=run_reproduce)


def run_evaluate(args, feedback) -> int:
    """Evaluate the tree; print what was written."""
    from ..raster.engine import evaluate_tree_file

    result = evaluate_tree_file(args.tree, args.output, args.nodes, feedback, args.threads,
                                compress=args.compress, cluster=args.cluster)
    print(f"favourability: {result.output}")
    for node, path in result.node_outputs.items():
        print(f"node raster:   {path}  ({node})")
    print(f"lineage:       {result.lineage_file}")
    print(CAUTION, file=sys.stderr)
    return 0


def run_reproduce(args, feedback) -> int:
    """Run the lineage again; 0 when identical or rebuilt, 1 when cells differ."""
    from ..raster.engine import reproduce

    outcome = reproduce(args.output, feedback, args.threads)
    print(outcome.summary())
    return 0 if outcome.identical or outcome.rebuilt else 1
