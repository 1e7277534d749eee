"""Everything Favour refuses, and every fault it survives, in one place.

Each row of ``CASES`` is one rule: what the user did, how it reaches Favour
(a core call, the command line, a processing algorithm, or a tree stored in a
QGIS project), the error and the message the user must see. Every row also
checks that nothing was lost: the folder of the case — inputs, the user's
earlier outputs planted under the output names, everything — is byte for byte
as it was, with no temporary file, lock or folder left behind. Rows over a
tree or a score sheet check too that the tree in memory is unchanged, and
where a refusal must come quickly or a read could block (a 50 MB file, a
FIFO), the row's call carries its own time limit. The faults that need more
than one call (a cancel at each checkpoint, two runs at once, an interrupt
from the terminal, the leftovers of a killed run) follow the table.

The scene, the snapshot and the small case builders are in
``tests/refusal_cases.py``; the table itself is here. ``help/refusals.md``
tells users the same rules; a test keeps every rule's sentence there.

The messages are the outside reference here: each is what a user reads, and
the property that must hold is that nothing on disk changed.
"""

from __future__ import annotations

import csv
import json
import os
import re
import resource
import shutil
import signal
import subprocess
import threading
from collections.abc import Callable
from dataclasses import dataclass
from functools import partial
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal

from favour_plugin.core import membership as m
from favour_plugin.core import overlay as o
from favour_plugin.core import wofe
from favour_plugin.core.errors import (
    CancelledError,
    GridError,
    GridMismatchError,
    InputError,
    LineageError,
    MissingInputError,
    OutputError,
    ParameterError,
    SheetError,
    TreeFileError,
)
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.lineage import read_lineage
from favour_plugin.core.pairwise import matrix_from_judgements, pairwise_weights
from favour_plugin.core.scoring import Scores, Workshop
from favour_plugin.core.sheet_import import read_sheets
from favour_plugin.core.sheets import export_sheets, write_sheet
from favour_plugin.core.tree import MAX_NODES, Node, Tree
from favour_plugin.core.uncertainty import MAX_DRAWS, sample_trees, sensitivity_variants
from favour_plugin.core.wofe import WeightsTable
from favour_plugin.core.workshop import check_expert_weights
from favour_plugin.raster.engine import evaluate_tree, evaluate_tree_file, reproduce
from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo, sensitivity
from favour_plugin.raster.holdout_jobs import holdouts
from favour_plugin.raster.probe import Probe
from favour_plugin.raster.redundancy_jobs import redundancy
from favour_plugin.raster.report_jobs import write_report
from favour_plugin.raster.target_jobs import find_targets
from favour_plugin.raster.validation_jobs import validate
from favour_plugin.raster.wofe_jobs import evidence_weights, posterior
from favour_plugin.raster.workshop_jobs import pairwise_job
from tests.helpers import (
    ORIGIN,
    deep_tree_text,
    example_tree_doc,
    leaf,
    node_chain,
    run_cli,
    scored_tree,
    sheet_edit,
    small_workshop,
    tree_doc,
    varied_tree_doc,
    write_raster,
    write_tree,
    write_vector,
)
from tests.refusal_cases import (
    CELL,
    CELL_KM2,
    COVER,
    GAMMA_LINE,
    GRANITE,
    HINGES,
    KEEL,
    LAST_ROW,
    MAG,
    MESH,
    MIB,
    NOT_UTF8_AT,
    NOT_UTF8_LINE,
    PILE,
    ROWS,
    SOURCE,
    SPLAYS,
    TRAP,
    CancelAt,
    Gate,
    Scene,
    absurd_numbers,
    bad_in_two_files,
    bad_leaf,
    bad_sheet,
    blocked_folder,
    changed,
    cli_tree,
    damaged_lineage,
    damaged_weights_file,
    duplicate_row,
    evaluate_call,
    failing_commit,
    failing_writer,
    generalised_over_evidence,
    geographic,
    hard_linked_output,
    held_lock,
    huge_tree_file,
    invalid_pool,
    latin1_note,
    leftovers,
    lineage_over_tree_file,
    lineage_text,
    many_bad_rows,
    node_raster_over_proxy,
    not_utf8_tree_file,
    points,
    posterior_outputs,
    read_fifo,
    scores_of,
    set_at,
    sheet_file,
    sheets_over_sheets,
    slow_tree,
    snapshot,
    start_cli,
    symlinked_output,
    table_twice,
    tall_scene,
    then,
    three_experts,
    truncated_tree,
    unchanged,
    varied_tree_file,
    weights_into_source,
    with_surrogate_name,
    within,
    written_lineage,
    written_weights,
)

ROOT = Path(__file__).resolve().parent.parent
HELP = ROOT / "help" / "refusals.md"


# -- the rules -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One thing Favour refuses or survives.

    ``make(scene)`` prepares the case and returns what to run: a callable
    (``via="core"``), the command line's arguments (``"cli"``, or
    ``"cli-limited"`` under a 2 MiB file-size limit), an algorithm id and its
    parameters (``"processing"``), or the text of a tree stored in a QGIS
    project (``"project"``: the dock must stay empty and say why). ``error``
    is the exception expected (the command line always exits 2 with
    ``error: …``), ``message`` a regular expression the message must match,
    and ``rule`` the sentence ``help/refusals.md`` tells users.
    """

    id: str
    rule: str
    via: str
    make: Callable
    error: type = Exception
    message: str = ""


# Outputs
RULE_OVER_INPUT = "An output that is, or resolves to, a file the job reads."
RULE_OUTPUT_TWICE = "Two outputs of one job that are the same file."
RULE_LOCKED = "A second run aimed at an output another run is writing."
RULE_OUTPUT_NAME = "An output that is not a GeoTIFF file name, or whose folder cannot be written."
RULE_FULL = "A disk that fills, or a file-size limit reached, while an output is written."
RULE_COMMIT = "A failure while the finished outputs are put in place."
# Tree files and nodes
RULE_TREE = "A tree file that is not valid JSON, not a Favour tree, or from a newer Favour."
RULE_NODE = "A tree node with a missing, unknown or out-of-range operator or membership parameter."
RULE_SIBLINGS = "Two children of one node with the same name."
RULE_DEEP = "A tree more than 32 levels deep or of more than 1000 nodes."
RULE_HUGE_NUMBER = ("A number in a tree beyond ±10¹⁵, or a grid of more than 2 147 483 647 columns "
                    "or rows.")
RULE_DRAFT = "A tree kept by the dock whose fields are of the wrong type."
RULE_PARAMETER = "A processing parameter that is missing, out of range or not a number."
# Files Favour reads
RULE_NOT_A_FILE = ("A file to read that is missing, a folder, or not a plain file (a named pipe, a socket "
                   "or a device).")
RULE_FILE_SIZE = "A tree file over 8 MiB."
RULE_NESTING = "JSON nested more than 100 levels deep."
RULE_TEXT = ("Bytes that are not UTF-8, or JSON holding NaN, Infinity, a number no float can hold, or "
             "half of a UTF-16 surrogate pair.")
RULE_DAMAGED_RECORD = "A lineage or a weights table damaged or edited by hand."
RULE_PROJECT_TREE = "A tree stored in a QGIS project that cannot be read."
# Layers
RULE_LAYER = "A proxy layer that is missing, empty, without a CRS, or off the grid."
RULE_READ = "An input that cannot be read part-way through (a damaged or truncated file)."
RULE_MU = "A raster given as a membership whose values are not in [0, 1]."
RULE_LINEAGE = "Reproducing an output that has no lineage beside it."
RULE_FILTER_MARGIN = ("A vector proxy filtered on a field its layer lacks, by values that are neither "
                      "numbers nor text or not of the field's kind, or given a margin that is negative, "
                      "wider than the grid or on a measure other than distance.")
# Weights of evidence
RULE_EVIDENCE = ("Weights of evidence with no usable deposits, evidence that is all nodata, a "
                 "single class, non-integer classes, a geographic grid, or breaks where none apply.")
RULE_WOFE_PARAMETER = "A weights-of-evidence parameter out of range (unit cell, kind, small-count rule)."
# Score sheets and the workshop
RULE_SHEET = ("A score sheet with an unknown node or item, a value that is not a number or is off its "
              "scale, a bad range or confidence, a repeated row, or siblings scored on two scales.")
RULE_SHEET_FILE = ("A score sheet that is empty, not UTF-8, without the sheet's header row, not a .csv "
                   "or .xlsx file, or missing.")
RULE_SHEET_MEMBERSHIP = ("Scores, one expert's or pooled, that make an invalid membership or weigh every "
                         "child of a node 0.")
RULE_SHEET_WRITE = ("Score sheets asked for in another format than .csv or .xlsx, or for expert ids that "
                    "repeat or start with '#'.")
RULE_SHEET_OVER = "Score sheets written where a sheet of the same name already exists."
RULE_ROUND = "A round of scores added out of turn."
RULE_EXPERT_WEIGHTS = ("Expert weights that name someone who gave no scores, leave someone out, are "
                       "negative or not a number, or are all 0.")
RULE_NODE_WEIGHTS = ("Weights put into a node that do not match its children in number, are negative, or "
                     "are all 0.")
RULE_MATRIX = ("A pairwise matrix that is not square, has fewer than 2 or more than 15 elements, holds "
               "an entry that is not a positive number, has a diagonal entry other than 1, or is not "
               "reciprocal.")
RULE_JUDGEMENTS = ("Pairwise judgements that leave a pair out, judge a pair twice or an element against "
                   "itself, name an unknown element, or lie off the scale from 1/9 to 9.")
RULE_SAMPLER = ("A Monte Carlo request for fewer than 1 realisation, with a seed that is not a whole "
                "number from 0, or with an unknown sampling mode or statistic.")
RULE_NO_VALID_DRAW = "Experts' ranges from which no valid membership can be drawn."
RULE_SENSITIVITY = "A sensitivity weight change that is not a fraction strictly between 0 and 1."
RULE_EDIT = ("An edit of the tree that would give two siblings one name, a name that is empty or holds '>', "
             "criteria under a leaf that reads a layer, a node under itself, or no root.")
RULE_MC_REQUEST = ("A Monte Carlo or sensitivity run asked for outputs it does not write, a top area "
                   "outside 0–100 %, or a table that is not CSV.")
# Validation
RULE_VALIDATION_DEPOSITS = ("Validation with no usable deposits: an empty or unknown layer, points "
                            "without a CRS or none on the grid (after reprojection), or every deposit on "
                            "nodata.")
RULE_VALIDATION_MAP = "A map to validate with no valid cell, or with infinite values."
RULE_VALIDATION_REQUEST = ("A validation asked for a top area outside 0–100 %, no bootstrap resample, a "
                           "confidence level outside 0–1, or a result that is not .json (or curves not "
                           ".csv).")
RULE_HOLDOUT_BLOCKS = ("Hold-out blocks whose side is not a positive length, or one block holding every "
                       "deposit.")
RULE_REDUNDANCY = ("A redundancy check of a tree with fewer than two leaves, with a threshold outside 0–1, "
                   "or with a lineage that is not a posterior's.")
# Targets and the report
RULE_TARGETS_CUT = ("Targets from a raster with no valid cell, a threshold that leaves no cell, or a minimum "
                    "area larger than the grid or than every zone.")
RULE_TARGETS_INPUTS = ("Component or robustness rasters on another grid than the favourability, or "
                       "occurrences in a CRS that cannot be reprojected to the grid's.")
RULE_TARGETS_REQUEST = ("Targets asked for with a top area outside 0–100 %, both a threshold and a "
                        "validation result, a negative minimum area or merge distance, or an output that is "
                        "not a .gpkg file or is named after the favourability.")
RULE_WHY_HERE = ("Why here? asked at a point outside the model's grid, or at a point in a CRS with no "
                 "way to the grid's.")
RULE_REPORT = ("A report asked for with an output that is not an .html file, a chart that is not a PNG "
               "image, a sensitivity table without the sensitivity job's columns, or a posterior that is "
               "not a posterior's lineage.")


CASES: list[Case] = [
    # -- outputs never over inputs ------------------------------------------------------------
    Case("output is a proxy (cli)", RULE_OVER_INPUT, "cli",
         lambda s: ["evaluate", s.tree_file(), "-o", s.path("mag.tif")], OutputError,
         r"the output .*mag\.tif \(the favourability\) is a file this job reads: the layer of "
         r"Favourability > Source > Mag"),
    Case("output links to a proxy", RULE_OVER_INPUT, "core", symlinked_output, OutputError,
         r"is a file this job reads: the layer of Favourability > Source > Mag "
         r"\(it resolves to .*mag\.tif\)"),
    Case("output is a hard link of a proxy", RULE_OVER_INPUT, "core", hard_linked_output, OutputError,
         r"out/fav\.tif \(the favourability\) is a file this job reads: the layer of .*Mag"),
    Case("output reaches a proxy through ..", RULE_OVER_INPUT, "core",
         lambda s: evaluate_call(s, str(s.out / ".." / "mag.tif")), OutputError,
         r"mag\.tif \(the favourability\) is a file this job reads"),
    Case("lineage over the tree file", RULE_OVER_INPUT, "core", lineage_over_tree_file, OutputError,
         r"fav\.tif\.lineage\.json \(its lineage\) is a file this job reads: the tree file"),
    Case("component raster over a proxy", RULE_OVER_INPUT, "core", node_raster_over_proxy, OutputError,
         r"source\.tif \(the raster of Favourability > Source\) is a file this job reads"),
    Case("grid reference as output (cli)", RULE_OVER_INPUT, "cli",
         lambda s: ["evaluate", s.tree_file({**s.tree_doc(), "grid": {"reference": "ref.tif"}}), "-o",
                    s.raster("ref.tif")],
         OutputError, r"ref\.tif \(the favourability\) is a file this job reads: the grid reference"),
    Case("generalised evidence over the evidence", RULE_OVER_INPUT, "core", generalised_over_evidence,
         OutputError, r"e\.tif \(the generalised evidence\) is a file this job reads: the evidence"),
    Case("posterior over its evidence", RULE_OVER_INPUT, "core",
         lambda s: posterior_outputs(s, "EVIDENCE", None), OutputError,
         r"b\.tif \(the posterior probability\) is a file this job reads: the evidence"),
    Case("output is a proxy (processing)", RULE_OVER_INPUT, "processing",
         lambda s: ("favour:evaluatetree", {"TREE": s.tree_file(), "OUTPUT": s.path("mag.tif")}),
         Exception, r"is a file this job reads: the layer of Favourability > Source > Mag"),
    Case("weights table written twice", RULE_OUTPUT_TWICE, "core", table_twice, OutputError,
         r"two outputs are the same file: .*w?\.csv .*and .*g\.tif\.weights\.csv"),
    Case("posterior and its spread one file", RULE_OUTPUT_TWICE, "core",
         lambda s: posterior_outputs(s, s.path("out/p.tif"), s.path("out/p.tif")), OutputError,
         r"two outputs are the same file: .*p\.tif \(the posterior probability\) and .*p\.tif"),
    Case("another run holds the output", RULE_LOCKED, "core", held_lock, OutputError,
         r"another Favour run is writing .*fav\.tif \(process \d+ on .*\); wait for it"),
    # -- output names and folders ---------------------------------------------------------------
    Case("folder blocked by a file", RULE_OUTPUT_NAME, "core", blocked_folder, OutputError,
         r"cannot write to the folder .*blocker"),
    Case("output not a GeoTIFF", RULE_OUTPUT_NAME, "core",
         lambda s: evaluate_call(s, s.path("out/fav.png")), OutputError, r"must be a GeoTIFF"),
    Case("folder blocked by a file (cli)", RULE_OUTPUT_NAME, "cli",
         lambda s: (Path(s.path("blocked")).write_text("not a folder"),
                    ["evaluate", s.tree_file(), "-o", s.path("blocked/fav.tif")])[1],
         OutputError, r"cannot write to the folder .*blocked"),
    # -- tree files, on the command line ------------------------------------------------------------
    Case("unknown membership (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*MAG, "membership", "type"), "fuzzy")), ParameterError,
         r"Favourability > Source > Mag: membership\.type: must be one of"),
    Case("unknown operator (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*TRAP, "operator", "type"), "xor")), ParameterError,
         r"Favourability > Trap: operator\.type: must be one of"),
    Case("missing parameter (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*MAG, "membership", "upper"), ...)), ParameterError,
         r"Favourability > Source > Mag: membership: 'upper' is required"),
    Case("non-numeric parameter (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*MAG, "membership", "lower"), "low")), ParameterError,
         r"Favourability > Source > Mag: membership\.lower: must be of type number"),
    Case("gamma outside [0, 1] (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*TRAP, "operator", "gamma"), 1.5)), ParameterError,
         r"Favourability > Trap: operator\.gamma: must be at most 1, got 1\.5"),
    Case("lower equals upper (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*MAG, "membership", "upper"), 20)), ParameterError,
         r"Favourability > Source > Mag: membership 'linear': 'lower' and 'upper' are both 20"),
    Case("unordered trapezoid (cli)", RULE_NODE, "cli",
         lambda s: cli_tree(s, set_at((*TRAP, "children", 0, "membership", "points"), [0, 60, 30, 100])),
         ParameterError, r"Favourability > Trap > Mag2: membership 'trapezoid': points must be ordered"),
    Case("missing proxy file (cli)", RULE_LAYER, "cli",
         lambda s: cli_tree(s, set_at((*MAG, "proxy", "path"), "gone.tif")), MissingInputError,
         r"Favourability > Source > Mag: the layer file .*gone\.tif does not exist"),
    Case("tree from a newer Favour (cli)", RULE_TREE, "cli",
         lambda s: cli_tree(s, set_at(("version",), 3)), ParameterError,
         r"tree file version 3 is newer than this Favour reads"),
    Case("invalid JSON (cli)", RULE_TREE, "cli",
         lambda s: (Path(s.path("tree.json")).write_text(
             '{"format": "favour-tree", "version": 1,, "root": {}}'),
             ["evaluate", s.path("tree.json"), "-o", s.earlier("fav.tif")])[1],
         ParameterError, r"not valid JSON: .* line 1"),
    Case("vector proxy without features (cli)", RULE_LAYER, "cli",
         lambda s: (write_vector(s.root / "none.gpkg", [], layer="faults"),
                    cli_tree(s, set_at((*MAG, "proxy"), {"path": "none.gpkg", "measure": "distance"})))[1],
         InputError, r"Favourability > Source > Mag: .*has no features"),
    Case("raster proxy without a CRS (cli)", RULE_LAYER, "cli",
         lambda s: (write_raster(s.root / "nocrs.tif", np.ones((10, 10), np.float32), crs=None),
                    cli_tree(s, set_at((*MAG, "proxy"), {"path": "nocrs.tif"})))[1],
         GridError, r"Favourability > Source > Mag: .*has no CRS"),
    # -- proxy layers ------------------------------------------------------------------------
    Case("proxy file missing", RULE_LAYER, "core",
         bad_leaf(lambda s: leaf("Missing", s.path("nope.tif"), {"type": "linear", "lower": 0, "upper": 1})),
         MissingInputError, r"Favourability > Missing: the layer file .*nope\.tif does not exist"),
    Case("vector proxy without features", RULE_LAYER, "core",
         bad_leaf(lambda s: leaf("Empty", write_vector(s.root / "empty.gpkg", [], layer="none"),
                                  {"type": "linear", "lower": 0, "upper": 1}, measure="distance")),
         InputError, r"Favourability > Empty: the vector layer empty\.gpkg:none has no features"),
    Case("raster proxy without a CRS", RULE_LAYER, "core",
         bad_leaf(lambda s: leaf("NoCRS", s.raster("nocrs.tif", crs=None),
                                  {"type": "linear", "lower": 0, "upper": 1})),
         GridError, r"Favourability > NoCRS: the layer .*nocrs\.tif has no CRS"),
    Case("vector proxy without a CRS", RULE_LAYER, "core",
         bad_leaf(lambda s: leaf("NoCRSv", write_vector(s.root / "nocrs.gpkg", points([(2, 2)]), crs=None),
                                  {"type": "linear", "lower": 0, "upper": 1}, measure="distance")),
         GridError, r"Favourability > NoCRSv: the vector layer nocrs\.gpkg:features has no CRS"),
    Case("proxy off the grid", RULE_LAYER, "core",
         bad_leaf(lambda s: leaf("Far", s.raster("far.tif", np.ones((5, 5), np.float32), origin=(9e6, 9e6)),
                                  {"type": "linear", "lower": 0, "upper": 1})),
         GridError, r"Favourability > Far: the layer .*far\.tif .* does not overlap the grid"),
    Case("identity over values that are not μ", RULE_MU, "core",
         bad_leaf(lambda s: leaf("Not mu", s.raster(), {"type": "identity"})),
         InputError, r"Favourability > Not mu: membership 'identity' needs values already in \[0, 1\]"),
    Case("identity refuses 1.7", RULE_MU, "core",
         lambda s: lambda: m.parse_membership({"type": "identity"})(np.array([0.2, 1.7])),
         InputError, "found 1.7"),
    Case("combine over a raster that is not μ", RULE_MU, "processing",
         lambda s: ("favour:combine", {"INPUTS": [s.raster("mu.tif", np.full((20, 20), 0.5, np.float32)),
                                                  s.raster()],
                                       "OPERATOR": "and", "OUTPUT": s.earlier("c.tif")}),
         Exception, "identity"),
    # -- reads that fail part-way ----------------------------------------------------------------
    Case("truncated proxy", RULE_READ, "core",
         lambda s: (lambda tree, out: lambda: evaluate_tree_file(tree, out))(
             truncated_tree(s), s.earlier("fav.tif")), InputError,
         r"Favourability > Cut: cannot read .*cut\.tif at rows \d+–\d+, columns \d+–\d+: "
         r".*damaged or truncated"),
    Case("truncated proxy (cli)", RULE_READ, "cli",
         lambda s: ["evaluate", truncated_tree(s), "-o", s.earlier("fav.tif")], InputError,
         r"Favourability > Cut: cannot read .*cut\.tif at rows"),
    # -- lineage ---------------------------------------------------------------------------------
    Case("reproduce without lineage", RULE_LINEAGE, "core",
         lambda s: (lambda plain: lambda: reproduce(plain))(s.raster("plain.tif")), LineageError,
         r"plain\.tif\.lineage\.json does not exist"),
    Case("reproduce without lineage (processing)", RULE_LINEAGE, "processing",
         lambda s: ("favour:reproduce", {"INPUT": s.raster("plain.tif")}), Exception, "no lineage found"),
    # -- a full disk and a failing commit -----------------------------------------------------------
    Case("writer fails after a block", RULE_FULL, "core", failing_writer, OutputError,
         r"cannot write .*fav\.tif: no space left on device"),
    Case("file-size limit reached (cli)", RULE_FULL, "cli-limited",
         lambda s: ["evaluate", s.tree_file(tree_doc([leaf("Big", s.raster(
             "big.tif", np.random.default_rng(2).random((900, 900)).astype(np.float32)),
             {"type": "linear", "lower": 0, "upper": 1})])), "-o", s.earlier("fav.tif")],
         OutputError, r"cannot (write|finish) .*fav\.tif.*File too large"),
    Case("second rename of the commit fails", RULE_COMMIT, "core", failing_commit, OutputError,
         r"cannot put the finished .* in place: No space left on device; every earlier file is as it was"),
]


# -- memberships and operators, each parsed alone --------------------------------------------------


def _membership_case(spec, message) -> Case:
    return Case(f"membership {spec}", RULE_NODE, "core",
                lambda s: lambda: m.parse_membership(spec), ParameterError, message)


CASES += [_membership_case(spec, message) for spec, message in [
    ({"type": "linear", "lower": 5, "upper": 5}, "'lower' and 'upper' are both 5"),
    ({"type": "linear", "lower": 5}, "needs a numeric 'upper', which is missing"),
    ({"type": "linear", "lower": "five", "upper": 6}, "'lower' must be a number, got 'five'"),
    ({"type": "linear", "lower": True, "upper": 6}, "'lower' must be a number"),
    ({"type": "logistic", "midpoint": 1, "slope": 0}, "'slope' is 0"),
    ({"type": "gaussian", "centre": 1, "spread": -2}, "'spread' must be positive, got -2"),
    ({"type": "trapezoid", "points": [4, 3, 5, 6]}, "must be ordered a <= b <= c <= d"),
    ({"type": "trapezoid", "points": [1, 2, 3]}, "must be four numbers"),
    ({"type": "trapezoid", "points": [2, 2, 2, 2]}, "with a < d"),
    ({"type": "piecewise", "points": [[0, 0], [0, 1]]}, "x values must increase strictly"),
    ({"type": "piecewise", "points": [[0, 0], [1, 1.5]]}, "must lie in \\[0, 1\\], got 1.5"),
    ({"type": "categories", "scores": {"a": 0.5}, "default": 0}, "class code 'a' is not a number"),
    ({"type": "categories", "scores": {"1": 0.5}}, "needs 'default'"),
    ({"type": "categories", "scores": {}, "default": 0}, "non-empty map"),
    ({"type": "sigmoid"}, "unknown membership type 'sigmoid'"),
    ({"lower": 1}, "unknown membership type None"),
]]


def _operator_case(spec, message) -> Case:
    return Case(f"operator {spec}", RULE_NODE, "core",
                lambda s: lambda: o.parse_operator(spec), ParameterError, message)


CASES += [_operator_case(spec, message) for spec, message in [
    ({"type": "gamma"}, "needs a numeric 'gamma'"),
    ({"type": "gamma", "gamma": 1.5}, "must lie in \\[0, 1\\], got 1.5"),
    ({"type": "gamma", "gamma": -0.1}, "must lie in \\[0, 1\\]"),
    ({"type": "gamma", "gamma": "high"}, "must be a number, got 'high'"),
    ({"type": "xor"}, "unknown operator type 'xor'"),
    ({"type": "and", "nodata": "skip"}, "unknown nodata rule 'skip'"),
]]
CASES.append(Case("children on different grids", RULE_NODE, "core",
                  lambda s: lambda: o.fuzzy_and([np.zeros(2), np.zeros(3)]), GridMismatchError,
                  r"\(3,\).*\(2,\)"))


# -- processing parameters -------------------------------------------------------------------------


def _processing_membership_case(parameters, named) -> Case:
    return Case(f"favour:membership {parameters}", RULE_PARAMETER, "processing",
                lambda s: ("favour:membership", {"INPUT": s.raster(), "OUTPUT": s.earlier("mu.tif"),
                                                 **parameters}),
                Exception, named)


CASES += [_processing_membership_case(parameters, named) for parameters, named in [
    ({"FUNCTION": "linear", "LOWER": 1.0}, "UPPER"),
    ({"FUNCTION": "linear", "LOWER": 5.0, "UPPER": 5.0}, "LOWER, UPPER"),
    ({"FUNCTION": "logistic", "MIDPOINT": 5.0, "SLOPE": 0.0}, "SLOPE"),
    ({"FUNCTION": "gaussian", "SPREAD": 2.0}, "CENTRE"),
    ({"FUNCTION": "gaussian", "CENTRE": 1.0, "SPREAD": -2.0}, "SPREAD"),
    ({"FUNCTION": "trapezoid", "POINTS": "1, 2, 3"}, "POINTS"),
    ({"FUNCTION": "trapezoid", "POINTS": "4, 3, 2, 1"}, "POINTS"),
    ({"FUNCTION": "trapezoid", "POINTS": "1, 2, three, 4"}, "POINTS"),
    ({"FUNCTION": "piecewise", "POINTS": "0:0, 10:1.5"}, "POINTS"),
    ({"FUNCTION": "piecewise", "POINTS": "0:0, 10"}, "POINTS"),
    ({"FUNCTION": "piecewise", "POINTS": "10:0, 0:1"}, "POINTS"),
    ({"FUNCTION": "categories"}, "SCORES"),
    ({"FUNCTION": "categories", "SCORES": "1:0.5, 2:1.2"}, "SCORES"),
    ({"FUNCTION": "categories", "SCORES": "1:0.5, 1.0:0.2"}, "SCORES"),
    ({"FUNCTION": "categories", "SCORES": "granite:0.5"}, "SCORES"),
]]


def _weights_case(weights) -> Case:
    def make(s: Scene):
        mus = [s.raster(f"mu{i}.tif", np.full((20, 20), 0.5, np.float32)) for i in range(3)]
        return ("favour:combine", {"INPUTS": mus, "OPERATOR": "weighted_mean", "WEIGHTS": weights,
                                   "OUTPUT": s.earlier("out.tif")})
    return Case(f"favour:combine weights {weights!r}", RULE_PARAMETER, "processing", make, Exception,
                "WEIGHTS")


CASES += [_weights_case(weights) for weights in ["1, 2", "1, -1, 1", "1, x, 1", "0, 0, 0"]]


# -- weights of evidence ---------------------------------------------------------------------------


def _evidence_case(name, change, error, message) -> Case:
    """Weights of evidence on the striped evidence, with one thing changed by ``change(scene)``."""
    def make(s: Scene):
        evidence, deposits = s.evidence()
        kwargs = {"evidence": evidence, "deposits": deposits, "method": "categorical"}
        kwargs.update(change(s))
        kwargs.update(output_table=s.earlier("w.csv"), output_generalised=s.earlier("g.tif"))
        return lambda: evidence_weights(unit_area_km2=CELL_KM2, **kwargs)
    return Case(name, RULE_EVIDENCE, "core", make, error, message)


CASES += [
    _evidence_case("no deposits", lambda s: {"deposits": write_vector(s.root / "none.gpkg", [], layer="d")},
                   InputError, "has no features; weights of evidence needs known deposits"),
    _evidence_case("evidence all nodata", lambda s: {"evidence": s.raster(
        "n.tif", np.full((20, 20), -9999, np.float32), cell=CELL, nodata=-9999)},
        InputError, "nodata in every one of the 400 cells"),
    _evidence_case("deposits in one class", lambda s: {"deposits": write_vector(
        s.root / "one.gpkg", points([(1, 0), (3, 2), (5, 4)]), layer="d")},
        InputError, "all 3 deposits on known evidence fall in class 1"),
    _evidence_case("categorical codes not whole", lambda s: {"evidence": s.raster(
        "f.tif", np.tile(np.array([1.25, 2.25], np.float32), (20, 10)), cell=CELL)},
        InputError, "categorical evidence needs whole-number class codes"),
    _evidence_case("geographic grid", geographic, GridError, "not projected"),
    _evidence_case("polygons as deposits", lambda s: {"deposits": write_vector(
        s.root / "poly.gpkg", ["POLYGON ((500000 1019000, 500500 1019000, 500500 1019500, "
                               "500000 1019000))"], layer="p")},
        InputError, "deposits must be points"),
    _evidence_case("breaks for categorical evidence", lambda s: {"breaks": [1, 2]}, ParameterError,
                   "breaks apply to ascending"),
    Case("deposits off the evidence (processing)", RULE_EVIDENCE, "processing",
         lambda s: ("favour:evidenceweights", {
             "EVIDENCE": s.raster("e1.tif", np.ones((10, 10), np.uint8), cell=CELL),
             "DEPOSITS": write_vector(s.root / "far.gpkg", points([(50, 50)]), layer="d"),
             "METHOD": "binary", "OUTPUT_TABLE": s.earlier("w.csv")}),
         Exception, "none of the 1 points"),
]


def _table_case(name, counts, kind, unit, error, message, cell=1.0, **kwargs) -> Case:
    """A weights table counted from ``counts()`` that must be refused."""
    return Case(name, RULE_EVIDENCE if error is InputError else RULE_WOFE_PARAMETER, "core",
                lambda s: lambda: wofe.weights_table(counts(), kind, unit, cell, **kwargs),
                error, message)


CASES += [
    _table_case("no deposit on known evidence",
                lambda: wofe.ClassCounts.from_arrays(np.array([[1.0, 2.0], [2.0, 1.0]])),
                "categorical", 1.0, InputError, "no deposit lies on known evidence", cell=0.01),
    _table_case("every deposit in one class", lambda: wofe.ClassCounts.from_table([1, 2], [500, 500], [4, 0]),
                "categorical", 1.0, InputError, "all 4 deposits on known evidence fall in class 1"),
    _table_case("counts all nodata", lambda: wofe.ClassCounts.from_arrays(np.full((2, 2), np.nan)),
                "binary", 1.0, InputError, "nodata in every one of the 4 cells"),
    _table_case("class codes not whole", lambda: wofe.ClassCounts.from_table([1, 1.5], [50, 50], [1, 1]),
                "categorical", 1, InputError, r"whole-number class codes, found \[1.5\]"),
    _table_case("binary evidence with a third code",
                lambda: wofe.ClassCounts.from_table([0, 1, 2], [50, 50, 5], [1, 1, 0]),
                "binary", 1, InputError, r"binary evidence takes 1 .* found \[2.0\]"),
    _table_case("a single class", lambda: wofe.ClassCounts.from_table([3], [50], [1]),
                "categorical", 1, InputError, "single class"),
    _table_case("unit cell of zero", lambda: wofe.ClassCounts.from_table([0, 1], [500, 500], [4, 2]),
                "binary", 0, ParameterError, "unit_cell_km2 must be a positive number of km², got 0"),
    _table_case("unknown kind", lambda: wofe.ClassCounts.from_table([0, 1], [500, 500], [4, 2]),
                "sideways", 1.0, ParameterError, "kind must be one of"),
    _table_case("unknown small-count rule", lambda: wofe.ClassCounts.from_table([0, 1], [500, 500], [4, 2]),
                "binary", 1.0, ParameterError, "small_count must be None or 'haldane'",
                small_count="add-one"),
    _table_case("unit cell too large", lambda: wofe.ClassCounts.from_table([0, 1], [500, 500], [4, 2]),
                "binary", 1000.0, ParameterError, "too large"),
    Case("unknown s(P) rule", RULE_WOFE_PARAMETER, "core",
         lambda s: lambda: wofe.s_probability(0.1, 0.2, "exact"), ParameterError, "rule must be one of"),
    Case("breaks not increasing", RULE_WOFE_PARAMETER, "core",
         lambda s: lambda: wofe.code_by_breaks(np.zeros(3), [2.0, 1.0], "ascending"), ParameterError,
         "strictly increasing"),
    Case("class with undefined weights", RULE_EVIDENCE, "core",
         lambda s: lambda: wofe.layer_weights(wofe.weights_table(
             wofe.ClassCounts.from_table([1, 2, 3], [400, 300, 500], [0, 6, 9]), "categorical", 1.0, 1.0)),
         InputError, "class 1: no deposits on the pattern"),
    Case("class values without weights", RULE_EVIDENCE, "core",
         lambda s: lambda: wofe.posterior_block(
             [np.array([1.0, 7.0])],
             [wofe.layer_weights(wofe.weights_table(wofe.ClassCounts.from_table(
                 [1, 2, 3], [400, 300, 500], [0, 6, 9]), "categorical", 1.0, 1.0, small_count="haldane"))],
             wofe.study_prior(1200, 15, 1.0, 1.0)),
         InputError, r"class values \[7.0\] have no weight"),
    Case("continuous evidence not classed", RULE_EVIDENCE, "core",
         lambda s: lambda: wofe.ClassCounts(max_classes=100).add_block(
             np.random.default_rng(0).random((20, 20))),
         InputError, "code_by_breaks"),
]


# -- tree files and nodes ----------------------------------------------------------------------


def _example_case(path, value, message) -> Case:
    """The example tree with one value changed: refused naming the node's path and the field."""
    return Case(f"example tree, {'.'.join(map(str, path))} = {value!r}", RULE_NODE, "core",
                lambda s: partial(Tree.from_dict, changed(example_tree_doc(), path, value)),
                TreeFileError, message)


CASES += [_example_case(path, value, message) for path, value, message in [
    (("root", "operator", "gamma"), 1.5, r"Favourability: operator.gamma: must be at most 1, got 1.5"),
    (("root", "children", 0, "children", 1, "membership", "lower"), 80,
     r"Favourability > Source > Magnetic high: membership 'linear': 'lower' and 'upper' are both 80"),
    (("root", "children", 1, "children", 3, "membership", "points"), [0, 60, 50, 200],
     r"Favourability > Pathway > Depth: membership 'trapezoid': points must be ordered"),
    (("root", "children", 0, "children", 0, "membership", "type"), "fuzzy",
     r"Favourability > Source > Mafic volcanic host: membership.type: must be one of"),
    (("root", "children", 0, "operator", "type"), "xor",
     r"Favourability > Source: operator.type: must be one of"),
    (("root", "children", 1, "children", 1, "membership", "spread"), "wide",
     r"Favourability > Pathway > Gravity ridge: membership.spread: must be of type number"),
]]


def _draft_case(path, value, message) -> Case:
    """The varied tree read as the dock reads it, with one field of the wrong type."""
    return Case(f"draft, {'.'.join(map(str, path))} = {value!r}", RULE_DRAFT, "core",
                lambda s: partial(Tree.from_draft, changed(varied_tree_doc(), path, value)),
                TreeFileError, message)


CASES += [_draft_case(path, value, message) for path, value, message in [
    (("root", "children", 0, "name"), 7, r"Favourability > \(child 0\): 'name' must be text, got 7"),
    (("root", "children", 1, "children"), "abc", r"> Pathway: 'children' must be a list"),
    (("root", "children", 1, "children"), {"a": 1}, r"> Pathway: 'children' must be a list"),
    (("root", "children", 0, "children", 0, "proxy"), [1],
     r"Favourability > Source > Mafic host: 'proxy' must be an object"),
    (("root", "children", 0, "children", 0, "proxy", "band"), "1",
     r"Favourability > Source > Mafic host: 'proxy.band' must be a whole number or null"),
    (("root", "children", 0, "weight"), True, r"Favourability > Source: 'weight' must be a number"),
]]


def _absurd_case(expected: str) -> Case:
    """Numbers that pass the schema but no computation should meet: a problem at their node."""
    return Case(f"absurd number: {expected}", RULE_HUGE_NUMBER, "core", lambda s: absurd_numbers().compile,
                TreeFileError, r"(?m)^  - " + re.escape(expected))


CASES += [_absurd_case(expected) for expected in [
    "Favourability > Source > Mafic host: weight must be at most 1e+15, got 1e+308",
    "Favourability > Source > Gravity: membership.centre is 1e+308",
    "Favourability > Pathway: operator.gamma is (an integer of about 401 digits)",
    "grid: the extent spans inf columns of cell_size 1e-300",
]]

CASES += [
    Case("absurd number in a tree file", RULE_HUGE_NUMBER, "core",
         lambda s: partial(Tree.from_dict, changed(
             varied_tree_doc(), ("root", "children", 0, "children", 1, "membership", "centre"), 1e308)),
         TreeFileError, r"Source > Gravity: membership\.centre is 1e\+308"),
    Case("two children with one name", RULE_SIBLINGS, "core",
         lambda s: partial(Tree.from_dict, changed(example_tree_doc(), ("root", "children", 1, "name"),
                                                   "Source")),
         TreeFileError, "two children are named 'Source'"),
    Case("tree from a newer Favour", RULE_TREE, "core",
         lambda s: partial(Tree.from_dict, changed(example_tree_doc(), ("version",), 2)),
         TreeFileError, r"version 2 is newer than this Favour reads \(version 1\)"),
    Case("invalid JSON names line and column", RULE_TREE, "core",
         lambda s: partial(Tree.load, s.text(
             "broken.json", '{\n  "format": "favour-tree",\n  "version": 1\n  "root": {}\n}\n')),
         TreeFileError, "not valid JSON: Expecting ',' delimiter at line 4, column 3"),
    Case("JSON of another kind", RULE_TREE, "core",
         lambda s: partial(Tree.from_dict, {"type": "FeatureCollection"}), TreeFileError,
         "not a Favour tree file"),
    Case("tree 5000 levels deep", RULE_DEEP, "core",
         lambda s: partial(Tree.from_dict, {"format": "favour-tree", "version": 1, "root": node_chain(5000)}),
         TreeFileError, r"more than 32 levels deep here"),
    Case("tree 40 levels deep names a shortened path", RULE_DEEP, "core",
         lambda s: partial(Tree.from_dict, json.loads(deep_tree_text(40))), TreeFileError,
         r"L > L > L > L > L > L > … \d+ more … > L > L: .*32 levels"),
    Case("draft 5000 levels deep", RULE_DEEP, "core",
         lambda s: partial(Tree.from_draft, {"format": "favour-tree", "version": 1,
                                             "root": node_chain(5000)}),
         TreeFileError, r"more than 32 levels deep"),
    Case("one node more than allowed", RULE_DEEP, "core",
         lambda s: partial(Tree.from_dict, tree_doc([leaf(f"Leaf {i}", "a.tif", {"type": "identity"})
                                                     for i in range(MAX_NODES)])),
         TreeFileError, rf"Favourability: with its {MAX_NODES} children the tree has more than "
                        rf"{MAX_NODES} nodes"),
]


# -- files Favour reads: never read when not a plain file, never past a limit, strictly UTF-8 JSON --


CASES += [
    Case("tree file missing", RULE_NOT_A_FILE, "core",
         lambda s: partial(Tree.load, s.path("missing.json")), TreeFileError,
         r"missing\.json does not exist"),
    Case("folder as tree file", RULE_NOT_A_FILE, "core",
         lambda s: partial(Tree.load, s.folder("folder.favour.json")), TreeFileError,
         r"folder\.favour\.json is a folder, not a file"),
    Case("FIFO as tree file, refused without blocking", RULE_NOT_A_FILE, "core",
         lambda s: read_fifo(s, "pipe.favour.json", Tree.load), TreeFileError,
         r"is not a regular file \(a FIFO, socket or device\)"),
    Case("FIFO as lineage, refused without blocking", RULE_NOT_A_FILE, "core",
         lambda s: read_fifo(s, "out.tif.lineage.json", read_lineage, s.root / "out.tif"), LineageError,
         "is not a regular file"),
    Case("FIFO as score sheet, refused without blocking", RULE_NOT_A_FILE, "core",
         lambda s: read_fifo(s, "pipe.csv", lambda f: read_sheets([f], scored_tree())), SheetError,
         "is not a regular file"),
    Case("FIFO as workbook, refused without blocking", RULE_NOT_A_FILE, "core",
         lambda s: read_fifo(s, "pipe.xlsx", lambda f: read_sheets([f], scored_tree())), SheetError,
         "is not a regular file"),
    Case("FIFO as pairwise matrix, refused without blocking", RULE_NOT_A_FILE, "core",
         lambda s: read_fifo(s, "pipe-matrix.csv", pairwise_job), ParameterError, "is not a regular file"),
    Case("FIFO as tree file (cli)", RULE_NOT_A_FILE, "cli",
         lambda s: ["evaluate", s.fifo("pipe.favour.json"), "-o", s.earlier("fav.tif")], TreeFileError,
         r"(?m)^error: tree file .*is not a regular file"),
    Case("50 MB tree file, refused by its size in under 2 s", RULE_FILE_SIZE, "core",
         lambda s: within(2.0, partial(Tree.load, huge_tree_file(s))), TreeFileError,
         r"huge\.favour\.json is 50 MiB; Favour reads a tree file of at most 8 MiB"),
    Case("9 MiB of tree text", RULE_FILE_SIZE, "core",
         lambda s: partial(Tree.from_json, "[" + " " * (9 * MIB) + "]"), TreeFileError,
         r"Favour reads at most 8 MiB"),
    Case("tree file nested 5000 deep", RULE_NESTING, "core",
         lambda s: partial(Tree.load, s.text("deep.favour.json", deep_tree_text(5000))), TreeFileError,
         r"deep\.favour\.json nests arrays and objects more than 100 levels deep \(at line 1, column \d+\)"),
    Case("tree file nested 5000 deep (cli)", RULE_NESTING, "cli",
         lambda s: ["evaluate", s.text("deep.favour.json", deep_tree_text(5000)), "-o", s.earlier("fav.tif")],
         TreeFileError, r"(?m)^error: tree file .*nests arrays and objects more than 100 levels deep"),
    Case("bytes that are not UTF-8", RULE_TEXT, "core",
         lambda s: partial(Tree.load, not_utf8_tree_file(s)), TreeFileError,
         rf"is not UTF-8 text: the byte 0xe9 at byte offset {NOT_UTF8_AT} "
         rf"\(line {NOT_UTF8_LINE}, column \d+\)"),
    *[Case(f"{token} in a tree file", RULE_TEXT, "core",
           lambda s, token=token: partial(Tree.load, varied_tree_file(
               s, "nan.favour.json", '"gamma": 0.8', f'"gamma": {token}')),
           TreeFileError, rf"nan\.favour\.json cannot be read: .* \(at line {GAMMA_LINE}, column \d+\)")
      for token in ["NaN", "Infinity", "-Infinity", "1e999"]],
    Case("a 5000-digit integer in a tree file", RULE_TEXT, "core",
         lambda s: partial(Tree.load, varied_tree_file(s, "digits.favour.json", '"weight": 2',
                                                       '"weight": ' + "7" * 5000, indent=None)),
         TreeFileError, r"an integer of 5000 digits is beyond the range of a float"),
    Case("a 5000-digit integer in a lineage", RULE_TEXT, "core",
         lambda s: lineage_text(s, '{"format": "favour-lineage", "size": ' + "1" * 5000 + "}"),
         LineageError, r"an integer of 5000 digits"),
    Case("a lone surrogate in a name", RULE_TEXT, "core",
         lambda s: partial(Tree.from_dict, with_surrogate_name()), TreeFileError,
         r"Favourability > Source > Mafic \\udc80: name: holds a lone UTF-16 surrogate"),
    Case("a lone surrogate in stored text", RULE_TEXT, "core",
         lambda s: partial(Tree.from_draft_json, '{"root": {"name": "\\ud800"}}'), TreeFileError,
         r"root\.name holds a lone UTF-16 surrogate"),
    Case("a lineage edited by hand", RULE_DAMAGED_RECORD, "core", damaged_lineage, LineageError,
         r"(?s)^(?=.*out\.tif\.lineage\.json)(?=.*inputs\[0\]\.files\[0\]\.sha256: must be of type "
         r"string, got 3)(?=.*grid: 'width' is required)"),
    Case("a weights table with text for a weight", RULE_DAMAGED_RECORD, "core",
         lambda s: partial(WeightsTable.from_dict, changed(
             written_weights(s)["table"], ("rows", 0, "w_plus"), "high")),
         ParameterError, r"rows\[0\]\.w_plus: must be of type number or null"),
    Case("a weights table's lineage edited by hand", RULE_DAMAGED_RECORD, "core", damaged_weights_file,
         LineageError,
         r"t\.csv\.lineage\.json is damaged.*\n.*table\.rows\[0\]\.s_w_plus: must be of type number"),
    *[Case(f"tree stored in a project: {label}", RULE_PROJECT_TREE, "project", lambda s, text=text: text,
           TreeFileError, "The Favour dock stays empty: .*" + message)
      for label, text, message in [
          ("a name that is a number", '{"root": {"name": 7}}', r"\(root\): 'name' must be text, got 7"),
          ("nested 5000 deep", deep_tree_text(5000),
           r"nests arrays and objects more than 100 levels deep \(at line 1, column \d+\)"),
          ("NaN", '{"root": {"name": "R", "weight": NaN}}',
           r"NaN is not a JSON number .*\(at line 1, column 34\)"),
          ("children that are text", '{"root": {"name": "R", "children": "abc"}}',
           r"R: 'children' must be a list, got 'abc'"),
          ("cut short", "[1, 2", r"is not valid JSON: .* at line 1, column 6"),
          ("just text", '"just text"', r"a stored tree must be a JSON object with a 'root' object")]],
]


# -- score sheets: every cell checked, the file, row and column named, nothing changed ------------


def _sheet(name, change, message, rule=RULE_SHEET) -> Case:
    """E1's sheet broken by ``change``: refused naming file, row and column; the tree unchanged."""
    return Case(f"sheet: {name}", rule, "core", bad_sheet(change), SheetError, message)


CASES += [
    _sheet("unknown node", sheet_edit(SPLAYS, "membership.lower", node="Favourability > Pathway > Splay"),
           r"E1\.csv row 16, column 'node': unknown node 'Favourability > Pathway > Splay'"),
    _sheet("item the node lacks", sheet_edit(SPLAYS, "membership.lower", item="membership.spread"),
           r"E1\.csv row 16, column 'item': node 'Favourability > Pathway > Splays' has no item "
           r"'membership\.spread'"),
    _sheet("item on the root", sheet_edit(SOURCE, "importance", node="Favourability"),
           r"E1\.csv row 7, column 'item': node 'Favourability' has no item 'importance': it has nothing "
           r"to score"),
    _sheet("importance above 9", sheet_edit(SOURCE, "importance", value="12"),
           r"E1\.csv row 7, column 'value': importance must lie between 1 and 9, got 12"),
    _sheet("importance below 1", sheet_edit(SOURCE, "importance", value="0.5"),
           r"E1\.csv row 7, column 'value': importance must lie between 1 and 9, got 0\.5"),
    _sheet("negative weight", sheet_edit(COVER, "weight", value="-1"),
           r"E1\.csv row 35, column 'value': weight must be 0 or more, got -1"),
    _sheet("not a number", sheet_edit(KEEL, "membership.midpoint", value="two"),
           r"E1\.csv row 9, column 'value': 'two' is not a number"),
    _sheet("decimal comma", sheet_edit(KEEL, "membership.midpoint", value="2,5"),
           r"E1\.csv row 9, column 'value': '2,5' is not a number \(use a decimal point\)"),
    _sheet("NaN", sheet_edit(KEEL, "membership.midpoint", value="nan"),
           r"E1\.csv row 9, column 'value': must be a finite number, got 'nan'"),
    _sheet("infinity", sheet_edit(KEEL, "membership.midpoint", value="-inf"),
           r"E1\.csv row 9, column 'value': must be a finite number, got '-inf'"),
    _sheet("μ above 1", sheet_edit(PILE, "membership.scores.1", value="1.5"),
           r"E1\.csv row 12, column 'value': membership\.scores\.1 must lie between 0 and 1, got 1\.5"),
    _sheet("spread 0", sheet_edit(HINGES, "membership.spread", value="0"),
           r"E1\.csv row 26, column 'value': membership\.spread must be above 0, got 0"),
    _sheet("slope 0", sheet_edit(KEEL, "membership.slope", value="0"),
           r"E1\.csv row 10, column 'value': membership\.slope must not be 0"),
    _sheet("duplicate row", duplicate_row(KEEL, "membership.midpoint"),
           rf"E1\.csv row {LAST_ROW + 1}, column 'item': duplicate of .*E1\.csv row 9 "
           r"\(same expert, node and item\)"),
    _sheet("missing expert id", sheet_edit(KEEL, "membership.midpoint", expert=""),
           r"E1\.csv row 9, column 'expert': missing expert id"),
    _sheet("range low above high", sheet_edit(SPLAYS, "membership.lower", low="900", high="700"),
           r"E1\.csv row 16, column 'low': low 900 is above high 700"),
    _sheet("range with one end", sheet_edit(SPLAYS, "membership.lower", low="700"),
           r"E1\.csv row 16, column 'high': a range needs both low and high"),
    _sheet("range on an item that takes none", sheet_edit(SOURCE, "importance", low="5", high="8"),
           r"E1\.csv row 7, column 'low': item 'importance' takes no range"),
    _sheet("value outside its range", sheet_edit(SPLAYS, "membership.lower", low="100", high="500"),
           r"E1\.csv row 16, column 'value': 800 lies outside its own range 100 to 500"),
    _sheet("range without a value", sheet_edit(SPLAYS, "membership.lower", value="", low="700", high="900"),
           r"E1\.csv row 16, column 'value': a range needs a value"),
    _sheet("confidence not low/medium/high", sheet_edit(KEEL, "membership.midpoint", confidence="sure"),
           r"E1\.csv row 9, column 'confidence': 'sure' is not low, medium or high"),
    _sheet("siblings on two scales", sheet_edit(COVER, "weight", item="importance", value="9"),
           r"E1\.csv row 38, column 'item': 'weight' for 'Favourability > Preservation > Granite', but a "
           r"sibling is scored by 'importance' \(.*E1\.csv row 35\)"),
    _sheet("invalid membership from one expert", sheet_edit(SPLAYS, "membership.upper", value="800"),
           r"E1\.csv row 16, column 'value': with E1's values the membership of "
           r"'Favourability > Pathway > Splays' is invalid: .*'lower' and 'upper' are both 800",
           RULE_SHEET_MEMBERSHIP),
    _sheet("every weight 0",
           then(sheet_edit(COVER, "weight", value="0"), sheet_edit(GRANITE, "weight", value="0")),
           r"E1\.csv row 35, column 'value': E1 weights every child of 'Favourability > Preservation' 0",
           RULE_SHEET_MEMBERSHIP),
    _sheet("wrong header", lambda text: text.replace("expert,node,item,value,", "expert,node,item,score,"),
           r"E1\.csv row 6: not a score sheet: the header row lacks column\(s\) 'value'", RULE_SHEET_FILE),
    _sheet("not a sheet", lambda text: "name,colour\nkeel,blue\n",
           r"E1\.csv row 1: not a score sheet: the header row lacks column\(s\) 'expert', 'node'",
           RULE_SHEET_FILE),
    _sheet("only comments",
           lambda text: "".join(line + "\n" for line in text.split("\n") if line.startswith("#")),
           r"E1\.csv: not a score sheet: no header row", RULE_SHEET_FILE),
    _sheet("non-UTF-8 bytes", latin1_note,
           r"E1\.csv row 9: byte 0xe0 at position \d+ is not UTF-8; save the sheet as CSV with UTF-8",
           RULE_SHEET_FILE),
    _sheet("empty file", lambda text: "", r"E1\.csv: the file is empty", RULE_SHEET_FILE),
    _sheet("blank lines only", lambda text: "\n \n\n", r"E1\.csv: the file is empty", RULE_SHEET_FILE),
    Case("sheet: more than twenty problems, twenty listed", RULE_SHEET, "core", many_bad_rows, SheetError,
         r"problem\(s\); nothing was changed\):\n  - [^\n]*row 7, column[^\n]*\n(?:  - [^\n]*\n){19}"
         r"  - … and \d+ more\s*$"),
    Case("sheets: problems in two files, reported together", RULE_SHEET, "core", bad_in_two_files,
         SheetError, r"E1\.csv row 7, column 'value'(?s:.*)E2\.csv row 8, column 'item': duplicate of "
                     r".*E1\.csv row 8"),
    Case("sheet: .xlsx that is not a workbook", RULE_SHEET_FILE, "core",
         lambda s: sheet_file(s, "E1.xlsx", "expert,node\n"), SheetError, r"E1\.xlsx: not an XLSX workbook"),
    Case("sheet: a .txt file", RULE_SHEET_FILE, "core", lambda s: sheet_file(s, "E1.txt", "x"), SheetError,
         r"E1\.txt: a score sheet is a \.csv or \.xlsx file"),
    Case("sheet: missing", RULE_SHEET_FILE, "core", lambda s: sheet_file(s, "missing.csv", None), SheetError,
         r"missing\.csv does not exist"),
    Case("write a sheet as .ods", RULE_SHEET_WRITE, "core",
         lambda s: partial(write_sheet, s.root / "E1.ods", scored_tree(), "E1"), ParameterError,
         r"\.csv or \.xlsx, got 'E1\.ods'"),
    Case("export sheets for repeated ids", RULE_SHEET_WRITE, "core",
         lambda s: partial(export_sheets, scored_tree(), s.root, ["E1", "E1"]), ParameterError,
         "repeated: E1"),
    Case("export a sheet for an id starting with #", RULE_SHEET_WRITE, "core",
         lambda s: partial(export_sheets, scored_tree(), s.root, ["#1"]), ParameterError,
         "not start with '#'"),
    Case("score sheets over filled sheets", RULE_SHEET_OVER, "core", sheets_over_sheets, OutputError,
         r"E1\.csv already exists and may hold an expert's scores"),
]


# -- the workshop: rounds, expert weights, pooled values, pairwise weights ---------------------------


CASES += [Case(f"expert weights {weights!r}", RULE_EXPERT_WEIGHTS, "core",
               lambda s, weights=weights: partial(check_expert_weights, ("E1", "E2"), weights),
               ParameterError, message) for weights, message in [
    ({"E1": 1, "E2": 1, "E9": 1}, r"name E9, who gave no scores"),
    ({"E1": 1}, r"lack E2"),
    ({"E1": -1, "E2": 1}, r"expert weight of E1 must be a finite number >= 0, got -1"),
    ({"E1": float("nan"), "E2": 1}, r"expert weight of E1 must be a finite number >= 0, got nan"),
    ({"E1": 0, "E2": 0}, r"all 0"),
]]

CASES += [
    Case("a round added out of turn", RULE_ROUND, "core",
         lambda s: partial(Workshop((Scores({}, ()), Scores({}, (), round_number=2))).add_round,
                           Scores({}, ())),
         ParameterError, "must be round 3, got round 1"),
    Case("pooled values that make an invalid membership", RULE_SHEET_MEMBERSHIP, "core", invalid_pool,
         ParameterError, r"^Favourability > Pathway > Splays: these values make an invalid membership "
                          r"\(lower = 450, upper = 450\)"),
    Case("three weights for two children", RULE_NODE_WEIGHTS, "core", weights_into_source([1, 2, 3]),
         ParameterError, r"Favourability > Source: 2 children but 3 weights"),
    Case("a negative weight for a child", RULE_NODE_WEIGHTS, "core",
         weights_into_source({"Keel": -1, "Pile": 1}),
         ParameterError, r"Favourability > Source > Keel: weight must be"),
    Case("weights all 0 for a node", RULE_NODE_WEIGHTS, "core", weights_into_source([0, 0]),
         ParameterError, r"Favourability > Source: the weights are all 0"),
]

CASES += [Case(f"pairwise matrix: {name}", RULE_MATRIX, "core",
               lambda s, matrix=matrix: partial(pairwise_weights, matrix), ParameterError, message)
          for name, matrix, message in [
    ("not square", [[1, 2, 3], [0.5, 1, 2]], r"must be square, got shape \(2, 3\)"),
    ("ragged", [[1, 2], [0.5]], r"square table of numbers"),
    ("text", [["a", "b"], ["c", "d"]], r"square table of numbers"),
    ("one element", [[1]], r"at least 2 elements, got 1"),
    ("empty", np.ones((0, 0)), r"at least 2 elements, got 0"),
    ("too many", np.ones((16, 16)), r"tabulated up to n = 15"),
    ("zero", [[1, 0], [0, 1]], r"finite and positive; entry \(1, 2\) is 0\.0"),
    ("negative", [[1, -3], [-1 / 3, 1]], r"finite and positive; entry \(1, 2\) is -3\.0"),
    ("nan", [[1, float("nan")], [1, 1]], r"finite and positive; entry \(1, 2\) is nan"),
    ("inf", [[1, 2], [float("inf"), 1]], r"finite and positive; entry \(2, 1\) is inf"),
    ("diagonal", [[1, 3, 5], [1 / 3, 2, 3], [1 / 5, 1 / 3, 1]],
     r"diagonal .* must be 1 .*entry \(2, 2\) is 2\.0"),
    ("not reciprocal", [[1, 3, 5], [1 / 3, 1, 3], [1 / 5, 3, 1]],
     r"not reciprocal: entry \(2, 3\) is 3 and entry \(3, 2\) is 3, but it must be 1/3 = 0\.3333"),
    ("two decimals", [[1, 7], [0.14, 1]], r"not reciprocal: entry \(1, 2\) is 7 and entry \(2, 1\) is 0\.14"),
]]

CASES += [Case(f"pairwise judgements: {name}", RULE_JUDGEMENTS, "core",
               lambda s, names=names, judgements=judgements: partial(
                   matrix_from_judgements, names, judgements),
               ParameterError, message) for name, names, judgements, message in [
    ("a pair not judged", ["a", "b", "c"], [("a", "b", 3), ("a", "c", 5)], r"1 pair\(s\) not judged: b / c"),
    ("a pair judged twice", ["a", "b"], [("a", "b", 3), ("b", "a", 1 / 3)],
     r"judgement 2 judges 'b' against 'a' again"),
    ("an element against itself", ["a", "b"], [("a", "a", 3)], r"judgement 1 compares 'a' with itself"),
    ("above 9", ["a", "b"], [("a", "b", 12)], r"from 1/9 to 9 on Saaty's scale, got 12"),
    ("below 1/9", ["a", "b"], [("a", "b", 0.1)], r"from 1/9 to 9 on Saaty's scale, got 0\.1"),
    ("an unknown element", ["a", "b"], [("a", "z", 3)], r"judgement names 'z', which is not one of: a, b"),
    ("repeated names", ["a", "a"], [], r"repeated: a"),
    ("one element", ["a"], [], r"at least 2 elements, got 1"),
]]


# -- the uncertainty: realisations drawn from the experts, sensitivity variants ----------------------


def _sampler_case(kwargs, message, rule=RULE_SAMPLER) -> Case:
    """sample_trees on the scored tree and three experts, with one argument wrong."""
    args = {"n": 3, "seed": 0, **kwargs}
    n, seed = args.pop("n"), args.pop("seed")
    return Case(f"sampler {kwargs!r}", rule, "core",
                lambda s: partial(sample_trees, scored_tree(), three_experts(), n, seed, **args),
                ParameterError, message)


CASES += [
    _sampler_case({"n": 0}, r"number of realisations must be a whole number from 1, got 0"),
    _sampler_case({"seed": -1}, r"seed must be a whole number >= 0, got -1"),
    _sampler_case({"seed": 1.5}, r"seed must be a whole number >= 0, got 1\.5"),
    _sampler_case({"mode": "bootstrap"}, r"sampling mode must be one of experts, ranges, got 'bootstrap'"),
    _sampler_case({"statistic": "mode"}, r"statistic must be one of pool, mean, median, trimmed, got 'mode'"),
    _sampler_case({"expert_weights": {"E1": 1, "E2": 1, "E3": 1, "E7": 1}}, r"name E7, who gave no scores",
                  RULE_EXPERT_WEIGHTS),
    Case("a membership no draw can make valid", RULE_NO_VALID_DRAW, "core",
         lambda s: partial(sample_trees, scored_tree(), scores_of({"E1": {MESH: {
             "membership.points[0]": (0, 500, 600), "membership.points[1]": (300, 100, 200)}}}),
             5, seed=1, mode="ranges"),
         ParameterError,
         rf"^Favourability > Pathway > Mesh: no valid draw of its membership in {MAX_DRAWS} tries"),
    *[Case(f"sensitivity fraction {fraction!r}", RULE_SENSITIVITY, "core",
           lambda s, fraction=fraction: partial(sensitivity_variants, scored_tree(), fraction),
           ParameterError, "fraction between 0 and 1")
      for fraction in [0, 1, 1.5, -0.1, float("nan"), True, "0.1"]],
]


def _faults_call(where=None, margin=None, measure="distance") -> Callable:
    """A case: measure a fault layer (an 'order' field) on the scene's grid with a filter or a margin."""
    def make(scene: Scene):
        from favour_plugin.raster.grid import Grid
        from favour_plugin.raster.vector import vector_source

        ds = gdal.Open(scene.raster())
        grid = Grid.from_dataset(ds, "mag")
        ds = None
        faults = write_vector(scene.root / "faults.gpkg", [
            f"LINESTRING ({ORIGIN[0] + 500} {ORIGIN[1] - 500}, {ORIGIN[0] + 3000} {ORIGIN[1] - 4000})"],
            layer="faults", fields={"order": [1]})
        work = scene.folder("work")
        return lambda: vector_source(faults, "faults", measure, "order" if measure == "attribute" else None,
                                     grid, work, "Favourability > Faults", Feedback(), where=where,
                                     margin=margin)
    return make


FAULTS_PROXY = ("root", "children", 1, "children", 0, "proxy")

CASES += [
    Case("filter on a field the layer lacks", RULE_FILTER_MARGIN, "core",
         _faults_call(where={"field": "rank", "values": [1]}), InputError,
         r"^Favourability > Faults: the filter's field 'rank' is not a field of layer faults; it has order$"),
    Case("filter by text on a numeric field", RULE_FILTER_MARGIN, "core",
         _faults_call(where={"field": "order", "values": ["first"]}), InputError,
         r"Favourability > Faults: field 'order' of layer faults holds numbers; the filter's value "
         r"'first' is not a number"),
    Case("filter value true in a tree file", RULE_FILTER_MARGIN, "core",
         lambda s: partial(Tree.from_dict, changed(example_tree_doc(), (*FAULTS_PROXY, "where"),
                                                   {"field": "order", "values": [True]})),
         TreeFileError, r"Favourability > Pathway > Near faults: proxy\.where\.values\[0\]: must be of "
                        r"type number or string, got true"),
    Case("filter as SQL text kept by the dock", RULE_FILTER_MARGIN, "core",
         lambda s: Tree.from_draft(changed(example_tree_doc(), (*FAULTS_PROXY, "where"),
                                           "order IN (1, 2) OR 1=1")).compile,
         TreeFileError, r"Favourability > Pathway > Near faults: proxy where must be an object "
                        r"\{'field': name, 'values': \[\.\.\.\]\}, got 'order IN \(1, 2\) OR 1=1'"),
    Case("negative margin in a tree file", RULE_FILTER_MARGIN, "core",
         lambda s: partial(Tree.from_dict, changed(example_tree_doc(), (*FAULTS_PROXY, "margin"), -250)),
         TreeFileError,
         r"Favourability > Pathway > Near faults: proxy\.margin: must be at least 0, got -250"),
    Case("negative margin (cli)", RULE_FILTER_MARGIN, "cli",
         lambda s: (write_vector(s.root / "f.gpkg", points([(2, 2)]), layer="f"),
                    cli_tree(s, set_at((*MAG, "proxy"), {"path": "f.gpkg", "measure": "distance",
                                                         "margin": -1})))[1],
         ParameterError, r"Favourability > Source > Mag: proxy\.margin: must be at least 0, got -1"),
    Case("margin wider than the grid", RULE_FILTER_MARGIN, "core", _faults_call(margin=1e6), InputError,
         r"Favourability > Faults: a margin of 1e\+06 map units is wider than the grid itself"),
    Case("margin on an attribute", RULE_FILTER_MARGIN, "core", _faults_call(margin=100, measure="attribute"),
         InputError, r"Favourability > Faults: a margin applies only to measure 'distance'"),
]


def _edit_tree() -> Tree:
    """A small sound tree for the edit refusals: root AND over two leaves and a group with one leaf."""
    linear = {"type": "linear", "lower": 0, "upper": 1}
    return Tree.from_dict(tree_doc([
        leaf("Alpha", "layers/a.tif", linear), leaf("Beta", "/data/b.tif", linear),
        {"name": "Group", "operator": {"type": "or"},
         "children": [leaf("Gamma", "layers/sub/c.tif", linear)]}]))


def _edit_case(name: str, edit, message: str, prepare=None) -> Case:
    """An edit of the dock's tree (core.tree) that must be refused, leaving the tree as it was."""
    def make(scene: Scene):
        tree = _edit_tree()
        if prepare is not None:
            prepare(tree)
        return unchanged(tree, lambda: edit(tree))
    return Case(f"edit: {name}", RULE_EDIT, "core", make, ParameterError, message)


CASES += [
    _edit_case("add a sibling's name", lambda t: t.add_child("Favourability", Node(name="Alpha")),
               "already has a criterion named 'Alpha'"),
    _edit_case("add a name holding '>'", lambda t: t.add_child("Favourability", Node(name="A > B")),
               "must not contain '>'"),
    _edit_case("add under a leaf that reads a layer",
               lambda t: t.add_child("Favourability > Alpha", Node(name="Sub")),
               "cannot take criteria under it"),
    _edit_case("remove the root", lambda t: t.remove("Favourability"),
               "the root of the tree cannot be removed"),
    _edit_case("rename to a sibling's name", lambda t: t.rename("Favourability > Alpha", "Beta"),
               "already has a criterion named 'Beta'"),
    _edit_case("rename to blanks", lambda t: t.rename("Favourability > Alpha", "  "), "non-empty"),
    _edit_case("move a node under itself",
               lambda t: t.move("Favourability > Group", "Favourability > Group", 0),
               "cannot be moved under itself"),
    _edit_case("move next to a sibling of the same name",
               lambda t: t.move("Favourability > Group > Gamma", "Favourability", 0),
               "already has a criterion named 'Gamma'",
               prepare=lambda t: t.add_child("Favourability", Node(name="Gamma", operator={"type": "and"}))),
    Case("a stored tree without a root object", RULE_DRAFT, "core",
         lambda s: partial(Tree.from_draft, {"format": "favour-tree"}), TreeFileError, "'root' object"),
    Case("a stored node without a name", RULE_DRAFT, "core",
         lambda s: partial(Tree.from_draft, {"root": {"operator": {"type": "and"}}}), TreeFileError, "lacks"),
]


def _mc_call(scene: Scene, **change) -> Callable:
    """A Monte Carlo of the small workshop in the scene, with one argument changed."""
    tree, _, sheets = small_workshop(scene.root)
    outputs = {name: scene.earlier(f"mc-{name}.tif") for name in MC_OUTPUTS}
    kwargs = {"outputs": outputs, "n": 4, "seed": 1, **change}
    if callable(kwargs["outputs"]):
        kwargs["outputs"] = kwargs["outputs"](scene, outputs)
    return partial(monte_carlo, tree, sheets, **kwargs)


def _pairwise_over_tree(scene: Scene):
    """Weights for Source's two children, to be written over the very tree file they were read from."""
    tree, _, _ = small_workshop(scene.root)
    matrix = scene.root / "matrix.csv"
    matrix.write_text(",Mag,Grav\nMag,1,3\nGrav,1/3,1\n", encoding="utf-8")
    tree_file = scene.path("tree.json")
    return partial(pairwise_job, str(matrix), tree, "Favourability > Source", tree_file, tree_file)


CASES += [
    Case("Monte Carlo output named oddly", RULE_MC_REQUEST, "core",
         lambda s: _mc_call(s, outputs=lambda s, o: {"median": o["p50"]}), ParameterError,
         r"Monte Carlo outputs are named mean, std, p10, p50, p90, robustness; got median"),
    Case("Monte Carlo top area of 0 %", RULE_MC_REQUEST, "core", lambda s: _mc_call(s, top_percent=0),
         ParameterError, r"the top area must be a percentage between 0 and 100 \(10 for the top 10 %\), "
                         r"got 0"),
    Case("Monte Carlo output over a proxy", RULE_OVER_INPUT, "core",
         lambda s: _mc_call(s, outputs=lambda s, o: {**o, "mean": str(s.root / "mag.tif")}),
         OutputError, r"mag\.tif \(the mean raster\) is a file this job reads: the layer of "
                      r"Favourability > Source > Mag"),
    Case("pairwise weights written over the tree file read", RULE_OVER_INPUT, "core",
         lambda s: _pairwise_over_tree(s), OutputError,
         r"tree\.json \(the weighted tree\) is a file this job reads: the tree file"),
    Case("sensitivity table not CSV", RULE_MC_REQUEST, "core",
         lambda s: partial(sensitivity, small_workshop(s.root)[0], str(s.out / "s.txt")), ParameterError,
         r"the sensitivity table .*s\.txt must end in \.csv"),
]


# -- validation, hold-outs and redundancy --------------------------------------------------------


def _map(scene: Scene, values=None, nodata=None) -> str:
    """A 20 x 20 favourability map in the scene (random values unless given)."""
    values = np.random.default_rng(6).random((20, 20)).astype(np.float32) if values is None else values
    return scene.raster("fav.tif", values, nodata=nodata)


def _known(scene: Scene, name: str = "d.gpkg", cells=((1, 1), (5, 5), (9, 3)), **kwargs) -> str:
    """Deposit points at the centres of ``cells`` (layer "d")."""
    return write_vector(scene.root / name, points(cells), layer="d", **kwargs)


def _validate_call(**change) -> Callable:
    """A case: validation of the scene's map and deposits, with ``change`` (values or builders) applied."""
    def make(scene: Scene):
        kwargs = {"raster": _map(scene), "deposits": _known(scene), "output_json": scene.earlier("v.json")}
        kwargs.update({k: v(scene) if callable(v) else v for k, v in change.items()})
        return lambda: validate(**kwargs)
    return make


def _validate_cli(*extra, deposits=None, raster=None) -> Callable:
    """A case: ``validate`` on the command line, the map and deposits built by the given builders."""
    return lambda s: ["validate", (raster or _map)(s), (deposits or _known)(s), "--json",
                      s.earlier("v.json"), *extra]


def _holdout_call(block_size, via: str = "core") -> Callable:
    """A case: hold-outs of the scene's striped evidence and three deposits, blocks of ``block_size``."""
    def make(scene: Scene):
        evidence, deposits = scene.evidence()
        output = scene.earlier("h.json")
        if via == "cli":
            return ["holdouts", evidence, "--deposits", deposits, "--unit-area", str(CELL_KM2),
                    "--block-size", str(block_size), "--json", output]
        return lambda: holdouts([evidence], deposits, output, unit_area_km2=CELL_KM2, block_size=block_size)
    return make


def _redundancy_call(tree=None, **change) -> Callable:
    """A case: redundancy of the scene's two-leaf tree (or ``tree(scene)``) with ``change`` applied."""
    def make(scene: Scene):
        kwargs = {k: v(scene) if callable(v) else v for k, v in change.items()}
        model, output = tree(scene) if tree else scene.tree(), scene.earlier("r.json")
        return lambda: redundancy(model, output, **kwargs)
    return make


def _no_deposits(scene: Scene) -> str:
    """An empty point layer ("d")."""
    return write_vector(scene.root / "none.gpkg", [], layer="d")


def _diagonal(value: float) -> np.ndarray:
    """A 20 x 20 map of 0.5 with ``value`` on its diagonal."""
    return np.where(np.eye(20, dtype=bool), value, 0.5).astype(np.float32)


def _all_nodata(scene: Scene) -> str:
    """A 20 x 20 map whose every cell is nodata."""
    return _map(scene, np.full((20, 20), -1.0, np.float32), nodata=-1.0)


def _one_leaf(scene: Scene) -> Tree:
    """A tree of one leaf over the scene's raster."""
    return Tree.from_dict(tree_doc([leaf("Mag", scene.raster(), {"type": "linear", "lower": 0, "upper": 1})]))


def _evaluated(scene: Scene) -> str:
    """A favourability written by Favour in ``scene/written`` (its lineage is an evaluation's)."""
    written_lineage(scene)
    return str(scene.root / "written" / "fav.tif")


CASES += [
    Case("validate: no deposits", RULE_VALIDATION_DEPOSITS, "core",
         _validate_call(deposits=_no_deposits), InputError,
         r"deposits: the vector layer none\.gpkg:d has no features; validation needs known deposits"),
    Case("validate: no deposits (cli)", RULE_VALIDATION_DEPOSITS, "cli", _validate_cli(deposits=_no_deposits),
         InputError, r"none\.gpkg:d has no features; validation needs known deposits"),
    Case("validate: unknown deposits layer", RULE_VALIDATION_DEPOSITS, "core",
         _validate_call(deposits_layer="nope"), InputError, r"d\.gpkg has no layer 'nope'; it has d"),
    Case("validate: deposits without a CRS", RULE_VALIDATION_DEPOSITS, "core",
         _validate_call(deposits=lambda s: _known(s, "nocrs.gpkg", crs=None)), GridError,
         r"nocrs\.gpkg:d has no CRS; assign one first"),
    Case("validate: deposits in another CRS, off the grid", RULE_VALIDATION_DEPOSITS, "core",
         _validate_call(deposits=lambda s: write_vector(
             s.root / "far.gpkg", ["POINT (10 10)", "POINT (11 10)"], layer="d", crs="EPSG:4326")),
         InputError, r"none of the 2 points of far\.gpkg:d falls on the grid"),
    Case("validate: every deposit on nodata", RULE_VALIDATION_DEPOSITS, "core",
         _validate_call(raster=lambda s: _map(s, _diagonal(-1.0), nodata=-1.0),
                        deposits=lambda s: _known(s, cells=((1, 1), (5, 5)))), InputError,
         r"none of the 2 deposit cells lies on a valid cell of the raster \(all are nodata\)"),
    Case("validate: a map with no valid cell", RULE_VALIDATION_MAP, "core",
         _validate_call(raster=_all_nodata), InputError,
         r"fav\.tif: the raster has no valid cell: all 400 cells are nodata"),
    Case("validate: a map with no valid cell (cli)", RULE_VALIDATION_MAP, "cli",
         _validate_cli(raster=_all_nodata), InputError, r"the raster has no valid cell"),
    Case("validate: infinite values", RULE_VALIDATION_MAP, "core",
         _validate_call(raster=lambda s: _map(s, _diagonal(np.inf))), InputError,
         r"fav\.tif: 20 cells hold an infinite value"),
    Case("validate: top area of 120 %", RULE_VALIDATION_REQUEST, "core", _validate_call(capture=[5, 120]),
         ParameterError, r"percentages strictly between 0 and 100 \(5 for the top 5 %\), got \[5, 120\]"),
    Case("validate: top area of 0 % (cli)", RULE_VALIDATION_REQUEST, "cli",
         _validate_cli("--capture", "0,10"), ParameterError,
         r"percentages strictly between 0 and 100 .*got \[0\.0, 10\.0\]"),
    Case("validate: top areas that are not numbers (cli)", RULE_VALIDATION_REQUEST, "cli",
         _validate_cli("--capture", "five"), ParameterError,
         r"--capture: 'five' is not a list of percentages"),
    Case("validate: top area of 150 % (processing)", RULE_VALIDATION_REQUEST, "processing",
         lambda s: ("favour:validate", {"INPUT": _map(s), "DEPOSITS": _known(s), "CAPTURE": "5, 150",
                                        "OUTPUT_JSON": s.earlier("v.json")}),
         Exception, r"percentages strictly between 0 and 100"),
    Case("validate: no bootstrap resample", RULE_VALIDATION_REQUEST, "core", _validate_call(resamples=0),
         ParameterError, r"whole number of resamples from 1, got 0"),
    Case("validate: confidence level of 95", RULE_VALIDATION_REQUEST, "core", _validate_call(level=95),
         ParameterError, r"confidence level must lie strictly between 0 and 1 .*got 95"),
    Case("validate: result not .json", RULE_VALIDATION_REQUEST, "core",
         _validate_call(output_json=lambda s: s.earlier("v.txt")), OutputError, r"v\.txt must end in \.json"),
    Case("validate: result over its deposits", RULE_OVER_INPUT, "core",
         _validate_call(deposits=lambda s: _known(s, "d.json"), output_json=lambda s: s.path("d.json")),
         OutputError, r"d\.json \(the validation result\) is a file this job reads: the deposits"),
    Case("hold-out blocks of 0 m", RULE_HOLDOUT_BLOCKS, "core", _holdout_call(0.0), ParameterError,
         r"the block size must be a positive number of map units, got 0\.0"),
    Case("hold-out blocks of -5 m (cli)", RULE_HOLDOUT_BLOCKS, "cli", _holdout_call(-5, "cli"),
         ParameterError, r"the block size must be a positive number of map units, got -5\.0"),
    Case("one hold-out block holding every deposit", RULE_HOLDOUT_BLOCKS, "core", _holdout_call(1e7),
         ParameterError, r"all 3 deposit cells fall in one block; nothing would be left"),
    Case("redundancy of a single leaf", RULE_REDUNDANCY, "core", _redundancy_call(_one_leaf),
         ParameterError, r"the tree has 1 leaf; redundancy compares pairs of leaves"),
    Case("redundancy threshold of 1.5", RULE_REDUNDANCY, "core", _redundancy_call(threshold=1.5),
         ParameterError,
         r"threshold on \|r\| must lie strictly between 0 and 1 \(0\.8 by default\), got 1\.5"),
    Case("redundancy with an evaluation's lineage", RULE_REDUNDANCY, "core",
         _redundancy_call(posterior=_evaluated), InputError,
         r"fav\.tif\.lineage\.json comes from a 'evaluate-tree' job; the conditional-independence table "
         r"comes from the lineage of a weights-of-evidence posterior"),
]


# -- targets and the report ----------------------------------------------------------------------

LOCAL_GRID = 'LOCAL_CS["site grid",UNIT["metre",1]]'


def _targets_call(**change) -> Callable:
    """A case: targets from the scene's map (top 10 %), with ``change`` (values or builders) applied."""
    def make(scene: Scene):
        kwargs = {"favourability": _map(scene), "output": scene.earlier("t.gpkg")}
        kwargs.update({k: v(scene) if callable(v) else v for k, v in change.items()})
        return lambda: find_targets(**kwargs)
    return make


def _report_call(**change) -> Callable:
    """A case: the report of the scene's map, with ``change`` (values or builders) applied."""
    def make(scene: Scene):
        kwargs = {"favourability": _map(scene), "output": scene.earlier("r.html")}
        kwargs.update({k: v(scene) if callable(v) else v for k, v in change.items()})
        return lambda: write_report(**kwargs)
    return make


def _shifted(name: str) -> Callable:
    """A builder: a 20 x 20 raster one cell east of the scene's map."""
    return lambda s: s.raster(name, np.full((20, 20), 0.5, np.float32), origin=(ORIGIN[0] + CELL, ORIGIN[1]))


CASES += [
    Case("targets: a threshold leaving no cell", RULE_TARGETS_CUT, "core", _targets_call(threshold=1.5),
         InputError, r"the threshold 1\.5 leaves no cell: the highest favourability of .*fav\.tif is 0\.9"),
    Case("targets: a threshold leaving no cell (cli)", RULE_TARGETS_CUT, "cli",
         lambda s: ["targets", _map(s), "-o", s.earlier("t.gpkg"), "--threshold", "2"], InputError,
         r"the threshold 2 leaves no cell"),
    Case("targets: a map with no valid cell", RULE_TARGETS_CUT, "core",
         _targets_call(favourability=_all_nodata), InputError,
         r"fav\.tif has no valid cell: every one of its 400 cells is nodata"),
    Case("targets: minimum area larger than the grid", RULE_TARGETS_CUT, "core",
         _targets_call(min_area_km2=5), ParameterError,
         r"the minimum area 5 km² is larger than the whole grid \(4 km²"),
    Case("targets: minimum area larger than the grid (processing)", RULE_TARGETS_CUT, "processing",
         lambda s: ("favour:targets", {"INPUT": _map(s), "MIN_AREA": 5.0, "OUTPUT": s.earlier("t.gpkg")}),
         Exception, r"the minimum area 5 km² is larger than the whole grid"),
    Case("targets: no zone reaches the minimum area", RULE_TARGETS_CUT, "core",
         _targets_call(top_percent=1, min_area_km2=3), InputError,
         r"no zone reaches the minimum area 3 km²: the largest of the \d+ zones covers 0\.0\d km²"),
    Case("targets: a component raster on another grid", RULE_TARGETS_INPUTS, "core",
         _targets_call(components=lambda s: [_shifted("c.tif")(s)]), GridMismatchError,
         r"the component raster c .*c\.tif is on another grid .*than the favourability"),
    Case("targets: a robustness raster on another grid", RULE_TARGETS_INPUTS, "core",
         _targets_call(robustness=_shifted("r.tif")), GridMismatchError,
         r"the robustness raster .*r\.tif is on another grid"),
    _evidence_case("deposits in a CRS that cannot be reprojected",
                   lambda s: {"deposits": _known(s, "local.gpkg", crs=LOCAL_GRID)}, GridError,
                   r"the points of local\.gpkg:d cannot be reprojected to the grid's CRS"),
    Case("targets: occurrences that cannot be reprojected", RULE_TARGETS_INPUTS, "core",
         _targets_call(deposits=lambda s: _known(s, "local.gpkg", crs=LOCAL_GRID)), GridError,
         r"deposits: the layer local\.gpkg:d is in site grid, which cannot be reprojected to the grid's"),
    Case("targets: occurrences that cannot be reprojected (cli)", RULE_TARGETS_INPUTS, "cli",
         lambda s: ["targets", _map(s), "-o", s.earlier("t.gpkg"), "--deposits",
                    _known(s, "local.gpkg", crs=LOCAL_GRID)], GridError, r"cannot be reprojected"),
    Case("targets: top area of 0 %", RULE_TARGETS_REQUEST, "core", _targets_call(top_percent=0),
         ParameterError,
         r"the top area must be a percentage between 0 and 100 \(10 for the top 10 %\), got 0"),
    Case("targets: a threshold and a validation result", RULE_TARGETS_REQUEST, "core",
         _targets_call(threshold=0.5, validation=lambda s: s.text("v.json", "{}")), ParameterError,
         r"give a favourability threshold or a validation result, not both"),
    Case("targets: a negative merge distance", RULE_TARGETS_REQUEST, "core", _targets_call(merge_distance=-1),
         ParameterError, r"the merge distance \(map units\) must be a number of 0 or more, got -1"),
    Case("targets: output not a GeoPackage", RULE_TARGETS_REQUEST, "core",
         _targets_call(output=lambda s: s.earlier("t.shp")), OutputError,
         r"t\.shp must be a GeoPackage file name ending in \.gpkg"),
    Case("targets: named after the favourability", RULE_TARGETS_REQUEST, "core",
         _targets_call(output=lambda s: s.path("fav.gpkg")), OutputError,
         r"would write their style .*fav\.qml, the name QGIS takes the favourability's own style from"),
    Case("targets: output over the occurrences", RULE_OVER_INPUT, "core",
         _targets_call(deposits=lambda s: _known(s, "d.gpkg"), output=lambda s: s.path("d.gpkg")),
         OutputError, r"d\.gpkg \(the targets\) is a file this job reads: the deposits"),
    Case("report: output not HTML", RULE_REPORT, "core", _report_call(output=lambda s: s.earlier("r.pdf")),
         OutputError, r"r\.pdf must be an HTML file name ending in \.html"),
    Case("report: output not HTML (cli)", RULE_REPORT, "cli",
         lambda s: ["report", _map(s), "-o", s.earlier("r.txt")], OutputError, r"must be an HTML file name"),
    Case("report: a chart that is not a PNG", RULE_REPORT, "core",
         _report_call(sensitivity_chart=lambda s: s.text("chart.png", "not an image")), InputError,
         r"the chart .*chart\.png is not a PNG image"),
    Case("report: a sensitivity table of another kind", RULE_REPORT, "core",
         _report_call(sensitivity_table=lambda s: s.text("s.csv", "a,b\n1,2\n")), InputError,
         r"s\.csv lacks the columns 'label' and 'top_area_change_percent'"),
    Case("report: a posterior that is not one", RULE_REPORT, "core", _report_call(posterior=_evaluated),
         InputError, r"fav\.tif comes from a 'evaluate-tree' job, not a posterior"),
    Case("report: its lineage over an input", RULE_OVER_INPUT, "core",
         _report_call(output=lambda s: s.path("r.html"),
                      validation=lambda s: s.text("r.html.lineage.json", "{}")),
         OutputError, r"r\.html\.lineage\.json \(its lineage\) is a file this job reads: validation result"),
]


# -- running a case ------------------------------------------------------------------------


def _limited():
    """In the child: a 2 MiB file-size limit, with writes past it failing instead of killing."""
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (2 * 2**20, 2 * 2**20))


def _check(case: Case, made, request) -> None:
    """Run what the case made and check the error and the message the user gets."""
    if case.via.startswith("cli"):
        result = run_cli(*made, preexec_fn=_limited if case.via == "cli-limited" else None, timeout=120)
        assert result.returncode == 2, result.stderr
        assert "error: " in result.stderr and re.search(case.message, result.stderr), result.stderr
        assert "Traceback" not in result.stderr, result.stderr
    elif case.via == "processing":
        request.getfixturevalue("favour_provider")
        import processing
        from qgis.core import QgsProcessingException, QgsProcessingFeedback

        algorithm, parameters = made
        with pytest.raises(QgsProcessingException, match=case.message):
            processing.run(algorithm, parameters, feedback=QgsProcessingFeedback())
    elif case.via == "project":
        _check_project(made, case.message, request.getfixturevalue("qgis_iface"))
    else:
        with pytest.raises(case.error, match=case.message):
            made()


def _check_project(text: str, message: str, iface) -> None:
    """A project storing ``text`` as its tree: the dock stays empty and the message bar says why.

    A sound tree stored afterwards is shown: the refusal leaves nothing stuck.
    """
    from qgis.core import Qgis, QgsProject

    from favour_plugin.gui.controller import TreeController
    from favour_plugin.gui.project_store import SCOPE, ProjectStore

    project = QgsProject()
    controller = TreeController()
    store = ProjectStore(controller, project, iface)
    bar = iface.messageBar()
    try:
        controller.reset(Tree.new("Before"))
        for level in bar.messages:
            bar.messages[level] = []
        project.writeEntry(SCOPE, "tree", text)
        store.read()
        assert controller.tree is None, text
        shown = "\n".join(bar.get_messages(Qgis.Critical))
        assert re.search(message, shown), shown
        project.writeEntry(SCOPE, "tree", Tree.from_dict(varied_tree_doc()).to_json())
        store.read()
        assert controller.tree is not None and controller.tree.name == "Test tree"
    finally:
        store.disconnect_all()


@pytest.mark.parametrize("case", CASES, ids=lambda case: case.id)
def test_refused_with_its_message_and_nothing_lost(case, tmp_path, monkeypatch, request):
    """The case is refused with its message, and every file and folder of the case is as it was."""
    scene = Scene(tmp_path, monkeypatch)
    try:
        made = case.make(scene)
        before = snapshot(tmp_path)  # after making the case: what it planted is the user's
        _check(case, made, request)
        assert snapshot(tmp_path) == before
    finally:
        for cleanup in scene.cleanups:
            cleanup()
    assert leftovers(tmp_path) == []


def test_the_matrix_holds_at_least_forty_cases():
    """The issue asks for at least forty rules and faults in one table (common practice, no source)."""
    assert len(CASES) >= 40
    assert len({case.id for case in CASES}) == len(CASES)


def test_the_help_page_states_every_rule():
    """Every rule in the table is stated, word for word, on the users' page of refusals."""
    text = HELP.read_text(encoding="utf-8")
    missing = sorted({case.rule for case in CASES if case.rule not in text})
    assert missing == []


def test_the_sheet_rows_the_cases_break_are_where_the_exporter_puts_them(tmp_path):
    """The rows named in ROWS are where the exporter puts those items (tree order, header row 6)."""
    (path,) = export_sheets(scored_tree(), tmp_path, ["E1"])
    rows = list(csv.reader(path.read_text(encoding="utf-8").split("\n")))
    assert rows[5][:4] == ["expert", "node", "item", "value"]
    for (node, item), number in ROWS.items():
        assert rows[number - 1][1:3] == [node, item]
    assert len([r for r in rows if r]) == LAST_ROW


# -- faults that take more than one call ------------------------------------------------------


def _cancel_jobs(scene: Scene) -> dict[str, Callable[[Feedback], object]]:
    """Each job that writes, as a call taking a feedback; outputs planted as earlier files."""
    tree = tall_scene(scene)
    output, nodes = scene.earlier("fav.tif"), str(scene.out / "nodes")
    scene.earlier("nodes/source.tif")
    _, deposits = scene.evidence()
    binary = scene.raster("b.tif", np.tile(np.array([0, 1], np.uint8), (20, 10)), cell=CELL)
    table, generalised = scene.earlier("w.csv"), scene.earlier("g.tif")
    probability, spread = scene.earlier("p.tif"), scene.earlier("s.tif")
    return {
        "evaluate": lambda feedback: evaluate_tree(tree, output, nodes, feedback),
        "evidence weights": lambda feedback: evidence_weights(
            binary, deposits, "binary", table, unit_area_km2=CELL_KM2,
            output_generalised=generalised, feedback=feedback),
        "posterior": lambda feedback: posterior([binary], deposits, probability, spread,
                                                unit_area_km2=CELL_KM2, feedback=feedback),
    }


@pytest.mark.parametrize("job", ["evaluate", "evidence weights", "posterior"])
def test_a_cancel_at_every_checkpoint_changes_nothing(job, tmp_path):
    """Cancelled at each checkpoint in turn, a job leaves every file as it was.

    The last checkpoint comes after the last block, before the outputs are put
    in place; uncancelled, the job completes and writes.
    """
    scene = Scene(tmp_path)
    run = _cancel_jobs(scene)[job]
    before = snapshot(tmp_path)
    counter = CancelAt()
    run(counter)
    checkpoints = counter.asked
    assert checkpoints >= 3
    assert snapshot(tmp_path) != before and leftovers(tmp_path) == []
    shutil.rmtree(tmp_path)
    tmp_path.mkdir()
    scene = Scene(tmp_path)
    run = _cancel_jobs(scene)[job]
    before = snapshot(tmp_path)
    for at in range(1, checkpoints + 1):
        with pytest.raises(CancelledError, match="cancelled by the user; no output was written"):
            run(CancelAt(at))
        assert snapshot(tmp_path) == before, f"cancelled at checkpoint {at} of {checkpoints}"
        assert leftovers(tmp_path) == [], f"cancelled at checkpoint {at} of {checkpoints}"


def _processing_cancel_cases(scene: Scene) -> dict[str, tuple[str, dict]]:
    """Each processing algorithm that writes a raster, on small inputs."""
    from qgis.core import QgsCoordinateReferenceSystem, QgsFeature, QgsGeometry, QgsPointXY, QgsVectorLayer

    grade = scene.raster("grade.tif")
    mus = [scene.raster(f"mu{i}.tif", np.random.default_rng(i).random((60, 80)).astype(np.float32))
           for i in range(3)]
    collars = write_vector(scene.root / "collars.gpkg", points([(5, 5), (30, 40)]))
    memory = QgsVectorLayer("Point", "drill collars", "memory")
    memory.setCrs(QgsCoordinateReferenceSystem.fromProj(
        "+proj=tmerc +lat_0=-48 +lon_0=-125 +k=1 +x_0=500000 +y_0=1000000 +datum=WGS84 +units=m +no_defs"))
    feature = QgsFeature()
    feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(ORIGIN[0] + 550, ORIGIN[1] - 550)))
    memory.dataProvider().addFeatures([feature])
    scene.cleanups.append(lambda: memory)  # keeps the layer alive until the case ends
    return {
        "membership": ("favour:membership", {"INPUT": grade, "FUNCTION": "linear", "LOWER": 0.0,
                                             "UPPER": 1.0}),
        "distance": ("favour:distancemembership", {"INPUT": collars, "REFERENCE": grade,
                                                   "FUNCTION": "linear", "LOWER": 500.0, "UPPER": 0.0}),
        "distance from a memory layer": ("favour:distancemembership", {
            "INPUT": memory, "REFERENCE": grade, "FUNCTION": "linear", "LOWER": 500.0, "UPPER": 0.0}),
        "combine": ("favour:combine", {"INPUTS": mus, "OPERATOR": "gamma", "GAMMA": 0.7}),
        "evaluate tree": ("favour:evaluatetree", {"TREE": scene.tree_file()}),
    }


@pytest.mark.parametrize("case", ["membership", "distance", "distance from a memory layer", "combine",
                                  "evaluate tree"])
def test_a_cancel_in_processing_changes_nothing(case, tmp_path, favour_provider):
    """Cancelling a processing algorithm at its first progress report raises and changes no file."""
    import processing
    from qgis.core import QgsProcessingException, QgsProcessingFeedback

    scene = Scene(tmp_path)
    algorithm, parameters = _processing_cancel_cases(scene)[case]
    output = scene.earlier("result.tif")
    before = snapshot(tmp_path)
    feedback = QgsProcessingFeedback()
    feedback.progressChanged.connect(lambda progress: progress > 0 and feedback.cancel())
    with pytest.raises(QgsProcessingException, match="cancelled"):
        processing.run(algorithm, {**parameters, "OUTPUT": output}, feedback=feedback)
    assert feedback.isCanceled()
    assert snapshot(tmp_path) == before and leftovers(tmp_path) == []


def test_two_runs_aimed_at_one_output_at_once(tmp_path):
    """While one run writes an output, a second aimed at it is refused at once, naming the first.

    A run aimed at another output in the same folder goes ahead, and the first
    then completes.
    """
    scene = Scene(tmp_path)
    tree = tall_scene(scene)
    output = scene.earlier("fav.tif")
    gate = Gate()
    outcome = {}

    def first():
        try:
            outcome["result"] = evaluate_tree(tree, output, feedback=gate)
        except BaseException as exc:  # reported by the assertion below
            outcome["error"] = exc
    worker = threading.Thread(target=first)
    worker.start()
    try:
        assert gate.reached.wait(60)
        with pytest.raises(OutputError, match=rf"another Favour run is writing {re.escape(output)} "
                                              rf"\(process {os.getpid()} on "):
            evaluate_tree(tree, output)
        other = evaluate_tree(tree, str(scene.out / "other.tif"))
        assert os.path.exists(other.output)
    finally:
        gate.release.set()
        worker.join(120)
    assert "error" not in outcome, outcome.get("error")
    assert Path(output).read_bytes()[:4] in (b"II*\x00", b"II+\x00")  # a GeoTIFF, not the earlier bytes
    assert leftovers(tmp_path) == []


@pytest.mark.slow
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["Ctrl-C", "SIGTERM"])
def test_an_interrupt_from_the_terminal_changes_nothing(signum, tmp_path):
    """Ctrl-C or SIGTERM part-way: exit 130, the earlier output as it was, nothing left behind."""
    scene = Scene(tmp_path)
    tree = slow_tree(scene)
    output = scene.earlier("fav.tif")
    before = snapshot(tmp_path)
    process = start_cli("evaluate", tree, "-o", output, "--nodes", scene.out / "nodes")
    process.send_signal(signum)
    rest = process.communicate(timeout=120)[1]
    assert process.returncode == 130, rest
    assert "interrupted; nothing was written" in rest and "Traceback" not in rest
    assert snapshot(tmp_path) == before and leftovers(tmp_path) == []


@pytest.mark.slow
def test_what_a_killed_run_leaves_is_tidied_by_the_next(tmp_path):
    """What a run killed outright leaves is tidied by the next run aimed at the same output.

    The killed run leaves hidden partial files and its lock file; the system
    released the lock itself, so the next run takes it, removes them, and
    completes.
    """
    scene = Scene(tmp_path)
    tree = slow_tree(scene)
    output = scene.earlier("fav.tif")
    process = start_cli("evaluate", tree, "-o", output)
    process.kill()
    process.communicate(timeout=60)
    assert leftovers(tmp_path), "a killed run leaves its temporary files"
    assert Path(output).read_bytes() == b"the user's earlier fav.tif"
    result = run_cli("evaluate", tree, "-o", output, "-q")
    assert result.returncode == 0, result.stderr
    assert leftovers(tmp_path) == []


@pytest.fixture()
def small_disk(tmp_path):
    """A 2 MiB tmpfs mounted in the test's folder (skipped where mounting is not allowed)."""
    folder = tmp_path / "small"
    folder.mkdir()
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(folder)],
                             capture_output=True, text=True)
    if mounted.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here: {mounted.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", str(folder)], check=True)


def test_a_full_disk_leaves_the_earlier_output(small_disk, tmp_path):
    """A disk that fills while the output is written changes nothing.

    Exit 2 naming the file and the free space; the earlier output is as it was
    and nothing else is left on the small disk.
    """
    rng = np.random.default_rng(2)
    big = write_raster(tmp_path / "big.tif", rng.random((1500, 1500)).astype(np.float32))
    tree = write_tree(tmp_path / "t.json", tree_doc([leaf("A", big, {"type": "linear", "lower": 0,
                                                                     "upper": 1})]))
    earlier = small_disk / "fav.tif"
    earlier.write_bytes(b"the user's earlier map")
    result = run_cli("evaluate", tree, "-o", earlier, "-q")
    assert result.returncode == 2, result.stderr
    assert re.search(r"error: cannot (write|finish) .*fav\.tif.*MiB free", result.stderr), result.stderr
    assert "Traceback" not in result.stderr
    assert earlier.read_bytes() == b"the user's earlier map"
    assert sorted(os.listdir(small_disk)) == ["fav.tif"]


# -- Why here? -----------------------------------------------------------------------------------


def _probe_at(x: float, y: float, crs: str = "") -> Callable:
    """A case: the scene's tree asked why at (x, y); the probe's work folder goes in the scene."""
    def make(scene: Scene):
        probe, tree = Probe(scene.folder("probe")), scene.tree()
        return lambda: probe.value_at(tree, x, y, crs)
    return make


CASES += [
    Case("why here: a point outside the grid", RULE_WHY_HERE, "core", _probe_at(-1e7, -1e7), GridError,
         r"the point \(-10000000, -10000000\) in .* lies outside the model's grid, which covers x .*"
         r"pick a place inside the grid"),
    Case("why here: a point in a CRS with no way to the grid's", RULE_WHY_HERE, "core",
         _probe_at(10.0, 10.0, LOCAL_GRID), GridError,
         r"the point \(10, 10\) in site grid cannot be turned into the grid's CRS"),
]
