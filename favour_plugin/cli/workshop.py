"""The workshop and its uncertainty on the command line.

Subcommands ``sheets``, ``aggregate``, ``pairwise``, ``montecarlo`` and ``sensitivity``.
"""

from __future__ import annotations

import os
import sys

from ..core.lineage import CAUTION
from ..core.uncertainty import MODES
from ..core.workshop import DEFAULT_THRESHOLD, STATISTICS
from .console import add_cluster, add_common, add_compression


def add_parsers(sub) -> None:
    """Declare the subcommands of this module."""
    sheets = sub.add_parser("sheets", help="write one score sheet per expert (or the next round's)")
    sheets.add_argument("tree", help="the tree file the experts score")
    sheets.add_argument("-o", "--output", required=True, metavar="FOLDER", help="folder for the sheets")
    sheets.add_argument("--experts", default="4", help="a number (ids E1, E2, …) or comma-separated ids")
    sheets.add_argument("--format", choices=("csv", "xlsx"), default="csv")
    sheets.add_argument("--previous", nargs="+", metavar="SHEET",
                        help="the previous round's filled sheets: write the next round's, with the "
                             "group's median and spread")
    add_common(sheets)
    sheets.set_defaults(run=run_sheets)

    aggregate = sub.add_parser("aggregate", help="aggregate score sheets, flag disagreement")
    aggregate.add_argument("tree", help="the tree file the experts scored")
    aggregate.add_argument("sheets", nargs="+", help="round 1's score sheets")
    aggregate.add_argument("--round2", nargs="+", metavar="SHEET", help="the re-scored sheets of round 2")
    aggregate.add_argument("--table", required=True, help="aggregate table to write (.csv)")
    aggregate.add_argument("--tree-out", help="tree file with the aggregated weights and parameters")
    _sampling_options(aggregate, with_mode=False)
    aggregate.add_argument("--flag", type=float, default=DEFAULT_THRESHOLD, metavar="CV",
                           help=f"flag items whose coefficient of variation exceeds this "
                                f"(default {DEFAULT_THRESHOLD})")
    add_common(aggregate)
    aggregate.set_defaults(run=run_aggregate)

    pairwise = sub.add_parser("pairwise", help="weights from a pairwise-comparison matrix (CSV)")
    pairwise.add_argument("matrix", help="CSV: a header of names, then one row per name (1/3 allowed)")
    pairwise.add_argument("--tree", help="a tree file, to put the weights into a node's children")
    pairwise.add_argument("--node", help="the node whose children the matrix compares (its path)")
    pairwise.add_argument("--tree-out", help="the tree file to write with the weights")
    add_common(pairwise)
    pairwise.set_defaults(run=run_pairwise)

    mc = sub.add_parser("montecarlo", help="realisations from the workshop, evaluated in one pass")
    mc.add_argument("tree", help="the tree file the experts scored")
    mc.add_argument("sheets", nargs="+", help="the score sheets of one round")
    mc.add_argument("-o", "--output", required=True, metavar="FOLDER",
                    help="folder for favourability-mean.tif, -std, -p10, -p50, -p90, -robustness")
    mc.add_argument("-n", "--realisations", type=int, default=200)
    mc.add_argument("--seed", type=int, default=1)
    mc.add_argument("--top", type=float, default=10.0, metavar="PERCENT",
                    help="top area for robustness, in %% of the area (default 10)")
    _sampling_options(mc, with_mode=True)
    add_compression(mc)
    add_cluster(mc)
    add_common(mc)
    mc.set_defaults(run=run_monte_carlo)

    sens = sub.add_parser("sensitivity",
                          help="change of the top area (and AUC) as weights and criteria change")
    sens.add_argument("tree", help="the tree file")
    sens.add_argument("--table", required=True, help="sensitivity table to write (.csv)")
    sens.add_argument("--chart", help="tornado chart to write (.png)")
    sens.add_argument("--fraction", type=float, default=0.1, help="weight change (0.1 for ±10%%)")
    sens.add_argument("--top", type=float, default=10.0, metavar="PERCENT",
                      help="top area, in %% of the area")
    sens.add_argument("--deposits", help="known deposits (points), for the AUC")
    sens.add_argument("--deposits-layer", help="layer of the deposits file, if it holds several")
    add_common(sens)
    sens.set_defaults(run=run_sensitivity)


def _sampling_options(parser, with_mode: bool) -> None:
    parser.add_argument("--weights", metavar="E1=2,E2=1", help="expert weights (default: equal)")
    parser.add_argument("--statistic", choices=STATISTICS, default="pool",
                        help="central value of the experts (default: the linear pool)")
    if with_mode:
        parser.add_argument("--mode", choices=MODES, default="experts",
                            help="draw each family from an expert's values, or within their ranges")


def _tree(path):
    from ..core.tree import Tree

    return Tree.load(path)


def run_sheets(args, feedback) -> int:
    """Write the sheets; print their paths."""
    from ..raster.workshop_jobs import write_score_sheets

    experts = int(args.experts) if args.experts.isdigit() else \
        [e.strip() for e in args.experts.split(",") if e.strip()]
    for path in write_score_sheets(_tree(args.tree), args.output, experts, args.format, args.previous):
        print(f"score sheet: {path}")
    return 0


def run_aggregate(args, feedback) -> int:
    """Aggregate the rounds; print the flagged items."""
    from ..raster.workshop_jobs import aggregate_scores, parse_expert_weights

    result = aggregate_scores(_tree(args.tree), args.sheets, args.table,
                              [args.round2] if args.round2 else [], parse_expert_weights(args.weights),
                              args.statistic, args.flag, args.tree_out, args.tree)
    print(f"aggregate table: {result.table_file}")
    if result.tree_file:
        print(f"aggregated tree: {result.tree_file}")
    for s in result.latest.flagged:
        print(f"flagged for discussion: {s.node}, {s.item}: CV {s.cv:.2f}, IQR {s.iqr:.4g}")
    return 0


def run_pairwise(args, feedback) -> int:
    """Compute the weights; print them with λmax, CI, CR and the worst judgement."""
    from ..raster.workshop_jobs import describe_pairwise, pairwise_job

    tree = _tree(args.tree) if args.tree else None
    job = pairwise_job(args.matrix, tree, args.node, args.tree_out, args.tree)
    print(describe_pairwise(job, args.node))
    return 0


def run_monte_carlo(args, feedback) -> int:
    """Run the Monte Carlo; print the rasters written."""
    from ..raster.ensemble_jobs import MC_OUTPUTS, monte_carlo
    from ..raster.workshop_jobs import parse_expert_weights

    outputs = {name: os.path.join(args.output, f"favourability-{name}.tif") for name in MC_OUTPUTS}
    result = monte_carlo(_tree(args.tree), args.sheets, outputs, args.realisations, args.seed, args.mode,
                         parse_expert_weights(args.weights), args.statistic, args.top, feedback,
                         args.threads, tree_file=args.tree, compress=args.compress, cluster=args.cluster)
    for name, path in result.files.items():
        print(f"{name + ':':12s} {path}")
    print(f"lineage:     {result.lineage_file}")
    print(CAUTION, file=sys.stderr)
    return 0


def run_sensitivity(args, feedback) -> int:
    """Run the sensitivity; print the table's path and the largest changes."""
    from ..raster.ensemble_jobs import sensitivity

    result = sensitivity(_tree(args.tree), args.table, args.chart, args.fraction, args.top, args.deposits,
                         args.deposits_layer, feedback, args.threads, tree_file=args.tree)
    for name, path in result.files.items():
        print(f"{name + ':':7s} {path}")
    ranked = sorted((r for r in result.rows[1:] if r["top_area_change_percent"] is not None),
                    key=lambda r: -r["top_area_change_percent"])
    for row in ranked[:5]:
        print(f"  {row['top_area_change_percent']:5.1f} % of the top area changes: {row['label']}")
    return 0
