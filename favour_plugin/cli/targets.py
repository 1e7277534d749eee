"""Targets and the report on the command line: ``targets`` and ``report``.

Both call the same jobs as their processing algorithms
(:func:`~favour_plugin.raster.target_jobs.find_targets`,
:func:`~favour_plugin.raster.report_jobs.write_report`).
"""

from __future__ import annotations

import sys

from ..core.lineage import CAUTION
from .console import add_common


def add_parsers(sub) -> None:
    """Declare the subcommands of this module."""
    targets = sub.add_parser("targets", help="the top of a favourability map as ranked target zones")
    targets.add_argument("favourability", help="the favourability (or posterior) raster")
    targets.add_argument("-o", "--output", required=True, metavar="OUT.gpkg", help="the GeoPackage to write")
    cut = targets.add_mutually_exclusive_group()
    cut.add_argument("--top", type=float, default=None, metavar="PERCENT",
                     help="the top of the area, in %% of the valid cells (default 10)")
    cut.add_argument("--threshold", type=float, metavar="MU", help="a favourability value: cells at or above")
    cut.add_argument("--validation", metavar="RESULT.json",
                     help="a validation result: cut at its prediction–area crossing")
    targets.add_argument("--min-area", type=float, default=0.0, metavar="KM2",
                         help="drop zones smaller than this (km², default 0)")
    targets.add_argument("--merge", type=float, default=0.0, metavar="DISTANCE",
                         help="merge zones closer than this (map units, edge to edge; default 0)")
    targets.add_argument("--components", metavar="FOLDER",
                         help="the component rasters (as 'evaluate --nodes' writes them)")
    targets.add_argument("--deposits", help="known occurrences (points), counted in each zone")
    targets.add_argument("--deposits-layer", help="layer of the occurrences file, if it holds several")
    targets.add_argument("--name-field", help="the occurrences' name field (default: a field called 'name')")
    targets.add_argument("--robustness", metavar="RASTER", help="a Monte Carlo robustness raster")
    add_common(targets)
    targets.set_defaults(run=run_targets)

    report = sub.add_parser("report", help="one self-contained HTML report of a favourability map")
    report.add_argument("favourability", help="the favourability raster (its lineage gives the tree)")
    report.add_argument("-o", "--output", required=True, metavar="OUT.html", help="the report to write")
    report.add_argument("--components", metavar="FOLDER", help="the component rasters")
    report.add_argument("--validation", metavar="RESULT.json", help="the validation result")
    report.add_argument("--targets", metavar="TARGETS.gpkg", help="the targets")
    report.add_argument("--montecarlo", nargs="+", metavar="RASTER",
                        help="Monte Carlo rasters (mean, std, p10, p50, p90, robustness)")
    report.add_argument("--sensitivity", metavar="TABLE.csv", help="the sensitivity table")
    report.add_argument("--tornado", metavar="CHART.png", help="the sensitivity job's tornado chart")
    report.add_argument("--posterior", metavar="RASTER", help="a posterior raster: its weights of evidence")
    report.add_argument("--deposits", help="known occurrences to draw (default: those the targets counted)")
    report.add_argument("--deposits-layer", help="layer of the occurrences file, if it holds several")
    report.add_argument("--title", help="the report's title (default: the tree's name)")
    add_common(report)
    report.set_defaults(run=run_report)


def run_targets(args, feedback) -> int:
    """Find the targets; print the table of zones."""
    from ..raster.target_jobs import find_targets

    result = find_targets(args.favourability, args.output, args.top, args.threshold, args.validation,
                          args.min_area, args.merge, args.components, args.deposits, args.deposits_layer,
                          args.name_field, args.robustness, feedback, args.threads)
    cut = result.threshold
    print(f"targets: {result.output}  ({len(result.rows)} zones at favourability ≥ {cut['value']:.6g})")
    for row in result.rows[:20]:
        found = f", {row['occurrences']} known" if "occurrences" in row else ""
        why = f"  [{row['why']}]" if row.get("why") else ""
        print(f"  {row['rank']:3d}. {row['area_km2']:9.3f} km²  mean {row['fav_mean']:.3f}  peak "
              f"{row['fav_peak']:.3f}{found}{why}")
    print(f"style:   {result.style_file}")
    print(f"lineage: {result.lineage_file}")
    print(CAUTION, file=sys.stderr)
    return 0


def run_report(args, feedback) -> int:
    """Write the report; print where it is and what it holds."""
    from ..raster.report_jobs import write_report

    result = write_report(args.favourability, args.output, args.components, args.validation, args.targets,
                          args.montecarlo, args.sensitivity, args.tornado, args.posterior, args.deposits,
                          args.deposits_layer, args.title, feedback)
    print(f"report:  {result.output}  ({len(result.figures)} figures: {', '.join(result.figures)})")
    print(f"lineage: {result.lineage_file}")
    print(CAUTION, file=sys.stderr)
    return 0
