"""Validation on the command line: ``validate``, ``holdouts`` and ``redundancy``.

Each subcommand calls the same job as its processing algorithm and writes a
JSON result (``--json``), with a lineage beside it; ``--csv`` adds the table
of curves (or of pairs).
"""

from __future__ import annotations

import sys

from ..core import redundancy as red
from ..core import validation as val
from ..core.errors import ParameterError
from ..core.lineage import CAUTION
from .console import add_common


def add_parsers(sub) -> None:
    """Declare the subcommands of this module."""
    check = sub.add_parser("validate", help="a favourability or posterior raster against known deposits")
    check.add_argument("raster", help="the map (higher values rank first)")
    check.add_argument("deposits", help="known deposits (points)")
    check.add_argument("--json", required=True, metavar="OUT.json", help="the result to write")
    check.add_argument("--csv", metavar="OUT.csv", help="also write the curves as a table")
    check.add_argument("--band", type=int, default=1)
    check.add_argument("--deposits-layer", help="layer of the deposits file, if it holds several")
    check.add_argument("--curve", choices=tuple(val.CURVES), default="success",
                       help="the deposits built the map (success, the default) or were kept out of it")
    check.add_argument("--held-out", metavar="POINTS", help="held-out deposits: a prediction-rate curve too")
    check.add_argument("--held-out-layer", help="layer of the held-out file, if it holds several")
    _bootstrap_options(check)
    add_common(check)
    check.set_defaults(run=run_validate)

    hold = sub.add_parser("holdouts", help="leave-one-out and spatially blocked hold-outs of weights of "
                                           "evidence")
    hold.add_argument("evidence", nargs="+", help="generalised evidence rasters, as for the posterior")
    hold.add_argument("--deposits", required=True, help="known deposits (points)")
    hold.add_argument("--deposits-layer", help="layer of the deposits file, if it holds several")
    hold.add_argument("--json", required=True, metavar="OUT.json", help="the result to write")
    hold.add_argument("--csv", metavar="OUT.csv", help="also write the curves as a table")
    hold.add_argument("--unit-area", type=float, default=1.0, metavar="KM2", help="the unit cell, km²")
    hold.add_argument("--study-area", help="polygons limiting the study area")
    hold.add_argument("--study-layer", help="layer of the study-area file, if it holds several")
    hold.add_argument("--block-size", type=float, metavar="METRES",
                      help="side of the hold-out blocks, in map units (leave out: leave-one-out only)")
    _bootstrap_options(hold)
    add_common(hold)
    hold.set_defaults(run=run_holdouts)

    alike = sub.add_parser("redundancy", help="correlation of the tree's leaf memberships on a lattice")
    alike.add_argument("tree", help="the tree file")
    alike.add_argument("--json", required=True, metavar="OUT.json", help="the result to write")
    alike.add_argument("--csv", metavar="OUT.csv", help="also write the pairs as a table")
    alike.add_argument("--sample", type=int, default=red.DEFAULT_SAMPLE, metavar="CELLS",
                       help=f"cells in the lattice, at most (default {red.DEFAULT_SAMPLE})")
    alike.add_argument("--threshold", type=float, default=red.DEFAULT_THRESHOLD,
                       help="flag pairs with |r| above this (default 0.8; common practice, no source)")
    alike.add_argument("--posterior", help="a posterior raster (or its lineage): add its "
                                           "conditional-independence table")
    add_common(alike)
    alike.set_defaults(run=run_redundancy)


def _bootstrap_options(parser) -> None:
    parser.add_argument("--capture", default=",".join(f"{p:g}" for p in val.DEFAULT_CAPTURE),
                        metavar="5,10,20", help="top shares of the area for the capture efficiency, in %%")
    parser.add_argument("--resamples", type=int, default=val.DEFAULT_RESAMPLES,
                        help=f"bootstrap resamples (default {val.DEFAULT_RESAMPLES})")
    parser.add_argument("--seed", type=int, default=val.DEFAULT_SEED, help="bootstrap seed")
    parser.add_argument("--level", type=float, default=val.DEFAULT_LEVEL,
                        help="confidence level of the AUC interval (default 0.95)")


def parse_capture(text: str) -> list[float]:
    """Parse ``--capture`` ("5,10,20"); the range is checked by the job."""
    items = [item.strip() for item in text.replace(";", ",").split(",") if item.strip()]
    try:
        return [float(item) for item in items]
    except ValueError:
        raise ParameterError(f"--capture: {text!r} is not a list of percentages (5,10,20)") from None


def _options(args) -> dict:
    return {"capture": parse_capture(args.capture), "resamples": args.resamples, "seed": args.seed,
            "level": args.level}


def _print_section(label: str, section: dict) -> None:
    if section is None or section.get("auc") is None:
        print(f"{label}: no curve")
        return
    low, high = section["auc_ci"]
    p, a = section["pa_crossing"]
    print(f"{label}: {section['curve']} curve, {section['n_deposits']} deposit cells, "
          f"AUC {section['auc']:.3f} (interval {low:.3f}–{high:.3f}); P–A crossing {p:.1f} % of deposits "
          f"in {a:.1f} % of the area, Nd {section['nd']:.2f}")


def run_validate(args, feedback) -> int:
    """Validate the raster; print the figures and the files written."""
    from ..raster.validation_jobs import validate

    job = validate(args.raster, args.deposits, args.json, args.csv, args.band, args.deposits_layer,
                   args.held_out, args.held_out_layer, curve=args.curve, feedback=feedback,
                   threads=args.threads, **_options(args))
    for section in job.result["sets"]:
        _print_section(section["set"], section)
    print(f"result:  {job.json_file}")
    if job.csv_file:
        print(f"curves:  {job.csv_file}")
    print(f"lineage: {job.lineage_file}")
    print(CAUTION, file=sys.stderr)
    return 0


def run_holdouts(args, feedback) -> int:
    """Hold the deposits out; print the AUC of each scheme."""
    from ..raster.holdout_jobs import SCHEMES, holdouts

    job = holdouts(args.evidence, args.deposits, args.json, args.csv, args.deposits_layer, args.unit_area,
                   args.study_area, args.study_layer, args.block_size, feedback=feedback, **_options(args))
    for key, label in SCHEMES.items():
        if key in job.result:
            _print_section(label, job.result[key])
    print(f"result:  {job.json_file}")
    print(f"lineage: {job.lineage_file}")
    return 0


def run_redundancy(args, feedback) -> int:
    """Correlate the leaves; print the flagged pairs."""
    from ..core.tree import Tree
    from ..raster.redundancy_jobs import redundancy

    job = redundancy(Tree.load(args.tree), args.json, args.csv, args.sample, args.threshold, args.posterior,
                     tree_file=args.tree, feedback=feedback, threads=args.threads)
    flagged = job.result["flagged"]
    for pair in flagged:
        print(f"alike: {pair['leaf_a']} and {pair['leaf_b']}, r = {pair['r']:.3f}")
    if not flagged:
        print(f"no pair of leaves has |r| above {job.result['threshold']:g}")
    print(f"result:  {job.json_file}")
    print(f"lineage: {job.lineage_file}")
    return 0
