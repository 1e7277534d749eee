"""Everything Favour refuses, and every fault it survives, in one place.

Each row of ``CASES`` is one rule: what the user did, how it reaches Favour
(a core call, the command line, or a processing algorithm), the error and the
message the user must see. Every row also checks that nothing was lost: the
folder of the case — inputs, the user's earlier outputs planted under the
output names, everything — is byte for byte as it was, with no temporary
file, lock or folder left behind. The faults that need more than one call
(a cancel at each checkpoint, two runs at once, an interrupt from the
terminal, the leftovers of a killed run) follow the table.

``help/refusals.md`` tells users the same rules; a test keeps every rule's
sentence there.

The messages are the outside reference here: each is what a user reads, and
the property that must hold is that nothing on disk changed.
"""

from __future__ import annotations

import hashlib
import os
import re
import resource
import shutil
import signal
import subprocess
import sys
import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

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
)
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.tree import Tree
from favour_plugin.raster.engine import evaluate_tree, evaluate_tree_file, reproduce
from favour_plugin.raster.outputs import OutputLock
from favour_plugin.raster.wofe_jobs import evidence_weights, posterior
from tests.helpers import ORIGIN, leaf, run_cli, tree_doc, write_raster, write_tree, write_vector

ROOT = Path(__file__).resolve().parent.parent
HELP = ROOT / "help" / "refusals.md"
CELL = 100.0  # m: one cell is 0.01 km²
CELL_KM2 = CELL * CELL / 1e6


# -- the scene: good inputs, the user's earlier outputs, and everything on disk -------------


class Scene:
    """A folder of good inputs for one case; outputs go under ``out/``, where earlier ones are planted."""

    def __init__(self, root: Path, monkeypatch=None) -> None:
        self.root = Path(root)
        self.monkeypatch = monkeypatch
        self.out = self.root / "out"
        self.out.mkdir()
        self.cleanups: list[Callable[[], None]] = []

    def path(self, name: str) -> str:
        """Return a path in the scene's folder."""
        return str(self.root / name)

    def earlier(self, name: str) -> str:
        """Plant the user's earlier output at ``out/name`` and return its path."""
        path = self.out / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(f"the user's earlier {name}".encode())
        return str(path)

    def raster(self, name: str = "mag.tif", array=None, **kwargs) -> str:
        """Write a raster (a 60 x 80 continuous one by default) and return its path."""
        if array is None:
            array = np.random.default_rng(5).normal(50, 20, (60, 80)).astype(np.float32)
        return write_raster(self.root / name, array, **kwargs)

    def tree_doc(self) -> dict:
        """A sound tree over ``mag.tif``: two components, gamma at the root."""
        self.raster()
        return tree_doc([
            {"name": "Source", "component": "source", "operator": {"type": "or"},
             "children": [leaf("Mag", "mag.tif", {"type": "linear", "lower": 20, "upper": 90})]},
            {"name": "Trap", "component": "trap", "operator": {"type": "gamma", "gamma": 0.5},
             "children": [leaf("Mag2", "mag.tif", {"type": "trapezoid", "points": [0, 30, 60, 100]})]},
        ], {"type": "gamma", "gamma": 0.9})

    def tree_file(self, doc: dict | None = None, name: str = "tree.json") -> str:
        """Write a tree file (the sound one by default) and return its path."""
        return write_tree(self.root / name, doc if doc is not None else self.tree_doc())

    def tree(self) -> Tree:
        """The sound tree, loaded from its file (so relative paths resolve)."""
        return Tree.load(self.tree_file())

    def evidence(self) -> tuple[str, str]:
        """Class-coded evidence (1 and 2 in stripes) and three deposits on it."""
        values = np.tile(np.array([1, 2], np.uint8), (20, 10))
        return (write_raster(self.root / "e.tif", values, cell=CELL),
                write_vector(self.root / "d.gpkg", points([(1, 0), (3, 2), (5, 1)]), layer="d"))


def points(cells) -> list[str]:
    """WKT points at the centres of (row, column) cells of the 100 m test grid."""
    return [f"POINT ({ORIGIN[0] + (c + 0.5) * CELL} {ORIGIN[1] - (r + 0.5) * CELL})" for r, c in cells]


def snapshot(root: Path) -> dict[str, str]:
    """Every file (SHA-256), link (target) and folder under ``root``."""
    found = {}
    for path in sorted(root.rglob("*")):
        key = str(path.relative_to(root))
        if path.is_symlink():
            found[key] = "link to " + os.readlink(path)
        elif path.is_dir():
            found[key] = "folder"
        else:
            found[key] = hashlib.sha256(path.read_bytes()).hexdigest()
    return found


def leftovers(root: Path) -> list[str]:
    """Temporary files, locks and work folders a job must never leave behind."""
    return [str(p) for p in root.rglob("*") if ".favour-" in p.name or ".partial" in p.name]


# -- the rules -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One thing Favour refuses or survives.

    ``make(scene)`` prepares the case and returns what to run: a callable
    (``via="core"``), the command line's arguments (``"cli"``), or an
    algorithm id and its parameters (``"processing"``). ``error`` is the
    exception expected (the command line always exits 2 with ``error: …``),
    ``message`` a regular expression the message must match, and ``rule``
    the sentence ``help/refusals.md`` tells users.
    """

    id: str
    rule: str
    via: str
    make: Callable
    error: type = Exception
    message: str = ""


RULE_OVER_INPUT = "An output that is, or resolves to, a file the job reads."
RULE_OUTPUT_TWICE = "Two outputs of one job that are the same file."
RULE_LOCKED = "A second run aimed at an output another run is writing."
RULE_OUTPUT_NAME = "An output that is not a GeoTIFF file name, or whose folder cannot be written."
RULE_TREE = "A tree file that is not valid JSON, not a Favour tree, or from a newer Favour."
RULE_NODE = "A tree node with a missing, unknown or out-of-range operator or membership parameter."
RULE_LAYER = "A proxy layer that is missing, empty, without a CRS, or off the grid."
RULE_READ = "An input that cannot be read part-way through (a damaged or truncated file)."
RULE_MU = "A raster given as a membership whose values are not in [0, 1]."
RULE_LINEAGE = "Reproducing an output that has no lineage beside it."
RULE_PARAMETER = "A processing parameter that is missing, out of range or not a number."
RULE_EVIDENCE = ("Weights of evidence with no usable deposits, evidence that is all nodata, a "
                 "single class, non-integer classes, a geographic grid, or breaks where none apply.")
RULE_WOFE_PARAMETER = "A weights-of-evidence parameter out of range (unit cell, kind, small-count rule)."
RULE_FULL = "A disk that fills, or a file-size limit reached, while an output is written."
RULE_COMMIT = "A failure while the finished outputs are put in place."


def _evaluate(scene: Scene, output: str, tree: Tree | None = None, nodes: str | None = None, **kw):
    """Return a call that evaluates ``tree`` (the scene's sound tree by default) into ``output``."""
    tree = tree or scene.tree()
    return lambda: evaluate_tree(tree, output, nodes, **kw)


def _symlinked_output(scene: Scene):
    tree = scene.tree()
    link = scene.out / "fav.tif"
    link.symlink_to(Path(scene.path("mag.tif")))
    return _evaluate(scene, str(link), tree)


def _hard_linked_output(scene: Scene):
    tree = scene.tree()
    os.link(scene.path("mag.tif"), scene.out / "fav.tif")
    return _evaluate(scene, str(scene.out / "fav.tif"), tree)


def _lineage_over_tree_file(scene: Scene):
    tree_file = scene.tree_file(name="fav.tif.lineage.json")
    scene.earlier("fav.tif")
    return lambda: evaluate_tree_file(tree_file, str(scene.root / "fav.tif"))


def _node_raster_over_proxy(scene: Scene):
    doc = scene.tree_doc()
    scene.raster("source.tif")
    doc["root"]["children"][0]["children"][0]["proxy"]["path"] = "source.tif"
    tree = Tree.load(scene.tree_file(doc))
    return _evaluate(scene, scene.earlier("fav.tif"), tree, nodes=str(scene.root))


def _held_lock(scene: Scene):
    tree = scene.tree()
    output = scene.earlier("fav.tif")
    lock = OutputLock([output])
    lock.acquire()
    scene.cleanups.append(lock.release)
    return _evaluate(scene, output, tree)


def _generalised_over_evidence(scene: Scene):
    evidence, deposits = scene.evidence()
    table = scene.earlier("w.csv")
    return lambda: evidence_weights(evidence, deposits, "categorical", table,
                                    unit_area_km2=CELL_KM2, output_generalised=evidence)


def _table_twice(scene: Scene):
    evidence, deposits = scene.evidence()
    generalised = scene.earlier("g.tif")
    return lambda: evidence_weights(evidence, deposits, "categorical", generalised + ".weights.csv",
                                    unit_area_km2=CELL_KM2, output_generalised=generalised)


def _posterior_outputs(scene: Scene, probability: str | None, std: str | None):
    evidence, deposits = scene.evidence()
    binary = scene.raster("b.tif", np.tile(np.array([0, 1], np.uint8), (20, 10)), cell=CELL)
    probability = probability or scene.earlier("p.tif")
    std = std or scene.earlier("s.tif")
    return lambda: posterior([binary], deposits, probability.replace("EVIDENCE", binary),
                             std.replace("EVIDENCE", binary), unit_area_km2=CELL_KM2)


def _blocked_folder(scene: Scene):
    tree = scene.tree()
    Path(scene.path("blocker")).write_text("a file, not a folder")
    return _evaluate(scene, scene.path("blocker/fav.tif"), tree)


def _cli_tree(scene: Scene, change) -> list:
    doc = scene.tree_doc()
    change(doc)
    return ["evaluate", scene.tree_file(doc), "-o", scene.earlier("fav.tif"),
            "--nodes", str(scene.out / "nodes")]


def _set(path, value):
    """Return a change of a tree document: ``doc[path] = value`` (deleted when value is ...)."""
    def change(doc):
        target = doc
        for key in path[:-1]:
            target = target[key]
        if value is ...:
            del target[path[-1]]
        else:
            target[path[-1]] = value
    return change


MAG = ("root", "children", 0, "children", 0)
TRAP = ("root", "children", 1)


def _bad_leaf(make_leaf):
    """A case whose second leaf (made by ``make_leaf(scene)``) is unusable; core call."""
    def make(scene: Scene):
        mag = scene.raster()
        doc = tree_doc([leaf("Mag", mag, {"type": "linear", "lower": 60, "upper": 160}),
                        make_leaf(scene)], grid={"reference": mag})
        return _evaluate(scene, scene.earlier("fav.tif"), Tree.from_dict(doc), nodes=str(scene.out / "nodes"))
    return make


def _truncated(scene: Scene) -> str:
    """A tiled GeoTIFF cut short: its first tiles read, later ones fail."""
    rng = np.random.default_rng(3)
    path = write_raster(scene.root / "cut.tif", rng.random((600, 600)).astype(np.float32),
                        options=("TILED=YES", "COMPRESS=DEFLATE"))
    size = os.path.getsize(path)
    with open(path, "r+b") as handle:
        handle.truncate(int(size * 0.6))
    return path


def _truncated_tree(scene: Scene) -> str:
    cut = _truncated(scene)
    return write_tree(scene.root / "cut.json",
                      tree_doc([leaf("Cut", cut, {"type": "linear", "lower": 0, "upper": 1})]))


def _failing_writer(scene: Scene):
    """The writer fails after its first block, as a disk would."""
    from favour_plugin.raster import writer as writer_module

    original = writer_module.RasterWriter.write
    calls = {"n": 0}

    def write(self, window, values):
        calls["n"] += 1
        if calls["n"] > 1:
            raise OutputError(f"cannot write {self.path}: no space left on device (simulated)")
        original(self, window, values)
    scene.monkeypatch.setattr(writer_module.RasterWriter, "write", write)
    rng = np.random.default_rng(9)
    big = scene.raster("big.tif", rng.random((700, 700)).astype(np.float32))
    tree = Tree.from_dict(tree_doc([leaf("Big", big, {"type": "linear", "lower": 0, "upper": 1})]))
    return _evaluate(scene, scene.earlier("fav.tif"), tree)


def _failing_commit(scene: Scene):
    """The second rename of the commit fails: the first output must get its earlier file back."""
    from favour_plugin.raster import outputs as outputs_module

    original = os.replace
    calls = {"n": 0}

    def replace(src, dst):
        if ".partial" in str(src):
            calls["n"] += 1
            if calls["n"] == 2:
                raise OSError(28, "No space left on device")
        original(src, dst)
    scene.monkeypatch.setattr(outputs_module.os, "replace", replace)
    tree = scene.tree()
    scene.earlier("fav.tif.lineage.json")
    scene.earlier("fav.qml")
    return _evaluate(scene, scene.earlier("fav.tif"), tree)


CASES: list[Case] = [
    # -- outputs never over inputs ------------------------------------------------------------
    Case("output is a proxy (cli)", RULE_OVER_INPUT, "cli",
         lambda s: ["evaluate", s.tree_file(), "-o", s.path("mag.tif")], OutputError,
         r"the output .*mag\.tif \(the favourability\) is a file this job reads: the layer of "
         r"Favourability > Source > Mag"),
    Case("output links to a proxy", RULE_OVER_INPUT, "core", _symlinked_output, OutputError,
         r"is a file this job reads: the layer of Favourability > Source > Mag "
         r"\(it resolves to .*mag\.tif\)"),
    Case("output is a hard link of a proxy", RULE_OVER_INPUT, "core", _hard_linked_output, OutputError,
         r"out/fav\.tif \(the favourability\) is a file this job reads: the layer of .*Mag"),
    Case("output reaches a proxy through ..", RULE_OVER_INPUT, "core",
         lambda s: _evaluate(s, str(s.out / ".." / "mag.tif")), OutputError,
         r"mag\.tif \(the favourability\) is a file this job reads"),
    Case("lineage over the tree file", RULE_OVER_INPUT, "core", _lineage_over_tree_file, OutputError,
         r"fav\.tif\.lineage\.json \(its lineage\) is a file this job reads: the tree file"),
    Case("component raster over a proxy", RULE_OVER_INPUT, "core", _node_raster_over_proxy, OutputError,
         r"source\.tif \(the raster of Favourability > Source\) is a file this job reads"),
    Case("grid reference as output (cli)", RULE_OVER_INPUT, "cli",
         lambda s: ["evaluate", s.tree_file({**s.tree_doc(), "grid": {"reference": "ref.tif"}}), "-o",
                    s.raster("ref.tif")],
         OutputError, r"ref\.tif \(the favourability\) is a file this job reads: the grid reference"),
    Case("generalised evidence over the evidence", RULE_OVER_INPUT, "core", _generalised_over_evidence,
         OutputError, r"e\.tif \(the generalised evidence\) is a file this job reads: the evidence"),
    Case("posterior over its evidence", RULE_OVER_INPUT, "core",
         lambda s: _posterior_outputs(s, "EVIDENCE", None), OutputError,
         r"b\.tif \(the posterior probability\) is a file this job reads: the evidence"),
    Case("output is a proxy (processing)", RULE_OVER_INPUT, "processing",
         lambda s: ("favour:evaluatetree", {"TREE": s.tree_file(), "OUTPUT": s.path("mag.tif")}),
         Exception, r"is a file this job reads: the layer of Favourability > Source > Mag"),
    Case("weights table written twice", RULE_OUTPUT_TWICE, "core", _table_twice, OutputError,
         r"two outputs are the same file: .*w?\.csv .*and .*g\.tif\.weights\.csv"),
    Case("posterior and its spread one file", RULE_OUTPUT_TWICE, "core",
         lambda s: _posterior_outputs(s, s.path("out/p.tif"), s.path("out/p.tif")), OutputError,
         r"two outputs are the same file: .*p\.tif \(the posterior probability\) and .*p\.tif"),
    Case("another run holds the output", RULE_LOCKED, "core", _held_lock, OutputError,
         r"another Favour run is writing .*fav\.tif \(process \d+ on .*\); wait for it"),
    # -- output names and folders ---------------------------------------------------------------
    Case("folder blocked by a file", RULE_OUTPUT_NAME, "core", _blocked_folder, OutputError,
         r"cannot write to the folder .*blocker"),
    Case("output not a GeoTIFF", RULE_OUTPUT_NAME, "core",
         lambda s: _evaluate(s, s.path("out/fav.png")), OutputError, r"must be a GeoTIFF"),
    Case("folder blocked by a file (cli)", RULE_OUTPUT_NAME, "cli",
         lambda s: (Path(s.path("blocked")).write_text("not a folder"),
                    ["evaluate", s.tree_file(), "-o", s.path("blocked/fav.tif")])[1],
         OutputError, r"cannot write to the folder .*blocked"),
    # -- tree files, on the command line ------------------------------------------------------------
    Case("unknown membership (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*MAG, "membership", "type"), "fuzzy")), ParameterError,
         r"Favourability > Source > Mag: membership\.type: must be one of"),
    Case("unknown operator (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*TRAP, "operator", "type"), "xor")), ParameterError,
         r"Favourability > Trap: operator\.type: must be one of"),
    Case("missing parameter (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*MAG, "membership", "upper"), ...)), ParameterError,
         r"Favourability > Source > Mag: membership: 'upper' is required"),
    Case("non-numeric parameter (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*MAG, "membership", "lower"), "low")), ParameterError,
         r"Favourability > Source > Mag: membership\.lower: must be of type number"),
    Case("gamma outside [0, 1] (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*TRAP, "operator", "gamma"), 1.5)), ParameterError,
         r"Favourability > Trap: operator\.gamma: must be at most 1, got 1\.5"),
    Case("lower equals upper (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*MAG, "membership", "upper"), 20)), ParameterError,
         r"Favourability > Source > Mag: membership 'linear': 'lower' and 'upper' are both 20"),
    Case("unordered trapezoid (cli)", RULE_NODE, "cli",
         lambda s: _cli_tree(s, _set((*TRAP, "children", 0, "membership", "points"), [0, 60, 30, 100])),
         ParameterError, r"Favourability > Trap > Mag2: membership 'trapezoid': points must be ordered"),
    Case("missing proxy file (cli)", RULE_LAYER, "cli",
         lambda s: _cli_tree(s, _set((*MAG, "proxy", "path"), "gone.tif")), MissingInputError,
         r"Favourability > Source > Mag: the layer file .*gone\.tif does not exist"),
    Case("tree from a newer Favour (cli)", RULE_TREE, "cli",
         lambda s: _cli_tree(s, _set(("version",), 3)), ParameterError,
         r"tree file version 3 is newer than this Favour reads"),
    Case("invalid JSON (cli)", RULE_TREE, "cli",
         lambda s: (Path(s.path("tree.json")).write_text(
             '{"format": "favour-tree", "version": 1,, "root": {}}'),
             ["evaluate", s.path("tree.json"), "-o", s.earlier("fav.tif")])[1],
         ParameterError, r"not valid JSON: .* line 1"),
    Case("vector proxy without features (cli)", RULE_LAYER, "cli",
         lambda s: (write_vector(s.root / "none.gpkg", [], layer="faults"),
                    _cli_tree(s, _set((*MAG, "proxy"), {"path": "none.gpkg", "measure": "distance"})))[1],
         InputError, r"Favourability > Source > Mag: .*has no features"),
    Case("raster proxy without a CRS (cli)", RULE_LAYER, "cli",
         lambda s: (write_raster(s.root / "nocrs.tif", np.ones((10, 10), np.float32), crs=None),
                    _cli_tree(s, _set((*MAG, "proxy"), {"path": "nocrs.tif"})))[1],
         GridError, r"Favourability > Source > Mag: .*has no CRS"),
    # -- proxy layers ------------------------------------------------------------------------
    Case("proxy file missing", RULE_LAYER, "core",
         _bad_leaf(lambda s: leaf("Missing", s.path("nope.tif"), {"type": "linear", "lower": 0, "upper": 1})),
         MissingInputError, r"Favourability > Missing: the layer file .*nope\.tif does not exist"),
    Case("vector proxy without features", RULE_LAYER, "core",
         _bad_leaf(lambda s: leaf("Empty", write_vector(s.root / "empty.gpkg", [], layer="none"),
                                  {"type": "linear", "lower": 0, "upper": 1}, measure="distance")),
         InputError, r"Favourability > Empty: the vector layer empty\.gpkg:none has no features"),
    Case("raster proxy without a CRS", RULE_LAYER, "core",
         _bad_leaf(lambda s: leaf("NoCRS", s.raster("nocrs.tif", crs=None),
                                  {"type": "linear", "lower": 0, "upper": 1})),
         GridError, r"Favourability > NoCRS: the layer .*nocrs\.tif has no CRS"),
    Case("vector proxy without a CRS", RULE_LAYER, "core",
         _bad_leaf(lambda s: leaf("NoCRSv", write_vector(s.root / "nocrs.gpkg", points([(2, 2)]), crs=None),
                                  {"type": "linear", "lower": 0, "upper": 1}, measure="distance")),
         GridError, r"Favourability > NoCRSv: the vector layer nocrs\.gpkg:features has no CRS"),
    Case("proxy off the grid", RULE_LAYER, "core",
         _bad_leaf(lambda s: leaf("Far", s.raster("far.tif", np.ones((5, 5), np.float32), origin=(9e6, 9e6)),
                                  {"type": "linear", "lower": 0, "upper": 1})),
         GridError, r"Favourability > Far: the layer .*far\.tif .* does not overlap the grid"),
    Case("identity over values that are not μ", RULE_MU, "core",
         _bad_leaf(lambda s: leaf("Not mu", s.raster(), {"type": "identity"})),
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
             _truncated_tree(s), s.earlier("fav.tif")), InputError,
         r"Favourability > Cut: cannot read .*cut\.tif at rows \d+–\d+, columns \d+–\d+: "
         r".*damaged or truncated"),
    Case("truncated proxy (cli)", RULE_READ, "cli",
         lambda s: ["evaluate", _truncated_tree(s), "-o", s.earlier("fav.tif")], InputError,
         r"Favourability > Cut: cannot read .*cut\.tif at rows"),
    # -- lineage ---------------------------------------------------------------------------------
    Case("reproduce without lineage", RULE_LINEAGE, "core",
         lambda s: (lambda plain: lambda: reproduce(plain))(s.raster("plain.tif")), LineageError,
         r"plain\.tif\.lineage\.json does not exist"),
    Case("reproduce without lineage (processing)", RULE_LINEAGE, "processing",
         lambda s: ("favour:reproduce", {"INPUT": s.raster("plain.tif")}), Exception, "no lineage found"),
    # -- a full disk and a failing commit -----------------------------------------------------------
    Case("writer fails after a block", RULE_FULL, "core", _failing_writer, OutputError,
         r"cannot write .*fav\.tif: no space left on device"),
    Case("file-size limit reached (cli)", RULE_FULL, "cli-limited",
         lambda s: ["evaluate", s.tree_file(tree_doc([leaf("Big", s.raster(
             "big.tif", np.random.default_rng(2).random((900, 900)).astype(np.float32)),
             {"type": "linear", "lower": 0, "upper": 1})])), "-o", s.earlier("fav.tif")],
         OutputError, r"cannot (write|finish) .*fav\.tif.*File too large"),
    Case("second rename of the commit fails", RULE_COMMIT, "core", _failing_commit, OutputError,
         r"cannot put the finished .* in place: No space left on device; every earlier file is as it was"),
]


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


def _evidence_case(name, change, error, message) -> Case:
    """Weights of evidence on the striped evidence, with one thing changed by ``change(scene)``."""
    def make(s: Scene):
        evidence, deposits = s.evidence()
        kwargs = {"evidence": evidence, "deposits": deposits, "method": "categorical"}
        kwargs.update(change(s))
        kwargs.update(output_table=s.earlier("w.csv"), output_generalised=s.earlier("g.tif"))
        return lambda: evidence_weights(unit_area_km2=CELL_KM2, **kwargs)
    return Case(name, RULE_EVIDENCE, "core", make, error, message)


def _geographic(s: Scene) -> dict:
    subprocess.run(["gdalwarp", "-q", "-t_srs", "EPSG:4326", s.path("e.tif"), s.path("g4326.tif")],
                   check=True)
    return {"evidence": s.path("g4326.tif")}


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
    _evidence_case("geographic grid", _geographic, GridError, "not projected"),
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


# -- running a case ------------------------------------------------------------------------


def _limited():
    """In the child: a 2 MiB file-size limit, with writes past it failing instead of killing."""
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (2 * 2**20, 2 * 2**20))


def _check(case: Case, made, request) -> None:
    """Run what the case made and check the error and the message the user gets."""
    if case.via.startswith("cli"):
        result = run_cli(*made, preexec_fn=_limited if case.via == "cli-limited" else None)
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
    else:
        with pytest.raises(case.error, match=case.message):
            made()


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


# -- faults that take more than one call ------------------------------------------------------


class CancelAt(Feedback):
    """Feedback that answers "cancelled" from its ``at``-th question on, and counts the questions."""

    def __init__(self, at: int | None = None) -> None:
        super().__init__()
        self.at = at
        self.asked = 0

    def is_cancelled(self) -> bool:
        """Count the question; cancel from the ``at``-th on."""
        self.asked += 1
        return self.at is not None and self.asked >= self.at


def _tall_scene(scene: Scene) -> Tree:
    """A tree over a raster three windows tall, a vector proxy and a component raster."""
    rng = np.random.default_rng(4)
    scene.raster("tall.tif", rng.normal(50, 20, (600, 300)).astype(np.float32))
    write_vector(scene.root / "faults.gpkg", [f"LINESTRING ({ORIGIN[0] + 500} {ORIGIN[1]}, "
                                              f"{ORIGIN[0] + 9000} {ORIGIN[1] - 50000})"], layer="faults")
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "or"},
         "children": [leaf("Tall", "tall.tif", {"type": "linear", "lower": 20, "upper": 90})]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "and"},
         "children": [leaf("Faults", "faults.gpkg", {"type": "linear", "lower": 3000, "upper": 0},
                           measure="distance")]},
    ], grid={"reference": "tall.tif"})
    return Tree.load(scene.tree_file(doc))


def _cancel_jobs(scene: Scene) -> dict[str, Callable[[Feedback], object]]:
    """Each job that writes, as a call taking a feedback; outputs planted as earlier files."""
    tree = _tall_scene(scene)
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


class Gate(Feedback):
    """Feedback that holds the job at its first progress report until ``release`` is set."""

    def __init__(self) -> None:
        super().__init__()
        self.reached = threading.Event()
        self.release = threading.Event()

    def set_progress(self, fraction: float) -> None:
        """Stop here once, until released."""
        if fraction > 0.2 and not self.reached.is_set():
            self.reached.set()
            assert self.release.wait(60)


def test_two_runs_aimed_at_one_output_at_once(tmp_path):
    """While one run writes an output, a second aimed at it is refused at once, naming the first.

    A run aimed at another output in the same folder goes ahead, and the first
    then completes.
    """
    scene = Scene(tmp_path)
    tree = _tall_scene(scene)
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


def _slow_tree(scene: Scene) -> str:
    """A tree file over a raster big enough that a run takes a few seconds."""
    rng = np.random.default_rng(8)
    big = write_raster(scene.root / "big.tif", rng.random((3000, 3000)).astype(np.float32))
    return write_tree(scene.root / "slow.json", tree_doc([
        leaf("A", big, {"type": "linear", "lower": 0, "upper": 1}),
        leaf("B", big, {"type": "gaussian", "centre": 0.5, "spread": 0.2})], {"type": "gamma", "gamma": 0.5}))


def _start_cli(*args) -> subprocess.Popen:
    """Start ``python -m favour_plugin`` and return it once it reports its first progress."""
    process = subprocess.Popen([sys.executable, "-m", "favour_plugin", *map(str, args)], cwd=ROOT,
                               stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    for line in process.stderr:
        if line.strip().endswith("%") and not line.strip().startswith("0%"):
            break
    return process


@pytest.mark.slow
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["Ctrl-C", "SIGTERM"])
def test_an_interrupt_from_the_terminal_changes_nothing(signum, tmp_path):
    """Ctrl-C or SIGTERM part-way: exit 130, the earlier output as it was, nothing left behind."""
    scene = Scene(tmp_path)
    tree = _slow_tree(scene)
    output = scene.earlier("fav.tif")
    before = snapshot(tmp_path)
    process = _start_cli("evaluate", tree, "-o", output, "--nodes", scene.out / "nodes")
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
    tree = _slow_tree(scene)
    output = scene.earlier("fav.tif")
    process = _start_cli("evaluate", tree, "-o", output)
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
