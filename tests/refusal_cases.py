"""The pieces the table of refusals (tests/test_refusals.py) is built from.

A :class:`Scene` is the folder of one case: good inputs, and the user's
earlier outputs planted under the output names. :func:`snapshot` records every
file, link and folder in it, so the test can show that a refusal changed
nothing. The rest are small builders: each prepares one case in a scene and
returns what the table's row runs, or wraps a call with a check of its own (a
time limit, a guard against a hang, a tree that must stay as it was).
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
import stat
import subprocess
import sys
import threading
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from favour_plugin.core.errors import FavourError, OutputError
from favour_plugin.core.feedback import Feedback
from favour_plugin.core.lineage import read_lineage
from favour_plugin.core.scoring import Score, Scores
from favour_plugin.core.sheet_import import read_sheets
from favour_plugin.core.sheets import export_sheets, xlsx_available
from favour_plugin.core.tree import Tree
from favour_plugin.core.workshop import aggregate, aggregate_tree, tree_with_weights
from favour_plugin.raster.engine import evaluate_tree, evaluate_tree_file, reproduce
from favour_plugin.raster.outputs import OutputLock
from favour_plugin.raster.wofe_jobs import evidence_weights, posterior, read_weights_table
from favour_plugin.raster.workshop_jobs import write_score_sheets
from tests.helpers import (
    ORIGIN,
    leaf,
    scored_tree,
    sheet_edit,
    small_workshop,
    tree_doc,
    varied_tree_doc,
    write_raster,
    write_tree,
    write_vector,
)

ROOT = Path(__file__).resolve().parent.parent
CELL = 100.0  # m: one cell is 0.01 km²
CELL_KM2 = CELL * CELL / 1e6
MIB = 1024 * 1024


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

    def folder(self, name: str) -> str:
        """Make a folder and return its path."""
        (self.root / name).mkdir()
        return self.path(name)

    def text(self, name: str, text: str) -> str:
        """Write a UTF-8 text file and return its path."""
        (self.root / name).write_text(text, encoding="utf-8")
        return self.path(name)

    def fifo(self, name: str) -> str:
        """Make a named pipe (FIFO) and return its path."""
        os.mkfifo(self.root / name)
        return self.path(name)


def points(cells) -> list[str]:
    """WKT points at the centres of (row, column) cells of the 100 m test grid."""
    return [f"POINT ({ORIGIN[0] + (c + 0.5) * CELL} {ORIGIN[1] - (r + 0.5) * CELL})" for r, c in cells]


def snapshot(root: Path) -> dict[str, str]:
    """Every file (SHA-256), link (target), folder and special file (a FIFO: never read) under ``root``."""
    found = {}
    for path in sorted(root.rglob("*")):
        key = str(path.relative_to(root))
        mode = os.lstat(path).st_mode
        if stat.S_ISLNK(mode):
            found[key] = "link to " + os.readlink(path)
        elif stat.S_ISDIR(mode):
            found[key] = "folder"
        elif stat.S_ISREG(mode):
            found[key] = hashlib.sha256(path.read_bytes()).hexdigest()
        else:
            found[key] = f"special file {stat.S_IFMT(mode):o}"
    return found


def leftovers(root: Path) -> list[str]:
    """Temporary files, locks and work folders a job must never leave behind."""
    return [str(p) for p in root.rglob("*") if ".favour-" in p.name or ".partial" in p.name]


# -- calls, and checks wrapped around them ---------------------------------------------------


def evaluate_call(scene: Scene, output: str, tree: Tree | None = None, nodes: str | None = None, **kw):
    """Return a call that evaluates ``tree`` (the scene's sound tree by default) into ``output``."""
    tree = tree or scene.tree()
    return lambda: evaluate_tree(tree, output, nodes, **kw)


def within(seconds: float, call: Callable) -> Callable:
    """Return ``call`` made to fail when it takes ``seconds`` or more, whether it returns or raises."""
    def run():
        start = time.perf_counter()
        try:
            return call()
        finally:
            took = time.perf_counter() - start
            assert took < seconds, f"took {took:.3f} s, more than {seconds} s"
    return run


def without_hanging(call: Callable, fifo: str, seconds: float = 10.0) -> Callable:
    """Return ``call`` run in a thread: a call still blocked on ``fifo`` after ``seconds`` fails."""
    def run():
        outcome: dict = {}

        def target():
            try:
                outcome["value"] = call()
            except BaseException as exc:  # re-raised below, in the test's thread
                outcome["error"] = exc
        worker = threading.Thread(target=target, daemon=True)
        worker.start()
        worker.join(seconds)
        if worker.is_alive():  # unblock the reader before failing
            os.close(os.open(fifo, os.O_WRONLY | os.O_NONBLOCK))
            pytest.fail(f"blocked on the FIFO {fifo} for {seconds} s")
        if "error" in outcome:
            raise outcome["error"]
        return outcome.get("value")
    return run


def unchanged(tree: Tree, call: Callable, says: str | None = None) -> Callable:
    """Return ``call`` checked to leave ``tree`` as it was and, when it refuses, to say ``says``."""
    def run():
        before = tree.to_dict()
        try:
            return call()
        except FavourError as exc:
            assert says is None or says in str(exc), str(exc)
            raise
        finally:
            assert tree.to_dict() == before, "the tree was changed"
    return run


def checked(call: Callable, check: Callable[[str], None]) -> Callable:
    """Return ``call`` whose refusal message also passes ``check`` (an assertion on the text)."""
    def run():
        try:
            return call()
        except FavourError as exc:
            check(str(exc))
            raise
    return run


# -- outputs ----------------------------------------------------------------------------------


def symlinked_output(scene: Scene):
    """The output is a link to a proxy."""
    tree = scene.tree()
    link = scene.out / "fav.tif"
    link.symlink_to(Path(scene.path("mag.tif")))
    return evaluate_call(scene, str(link), tree)


def hard_linked_output(scene: Scene):
    """The output is a hard link of a proxy."""
    tree = scene.tree()
    os.link(scene.path("mag.tif"), scene.out / "fav.tif")
    return evaluate_call(scene, str(scene.out / "fav.tif"), tree)


def lineage_over_tree_file(scene: Scene):
    """The output's lineage would land on the tree file."""
    tree_file = scene.tree_file(name="fav.tif.lineage.json")
    scene.earlier("fav.tif")
    return lambda: evaluate_tree_file(tree_file, str(scene.root / "fav.tif"))


def node_raster_over_proxy(scene: Scene):
    """A component's raster would land on a proxy."""
    doc = scene.tree_doc()
    scene.raster("source.tif")
    doc["root"]["children"][0]["children"][0]["proxy"]["path"] = "source.tif"
    tree = Tree.load(scene.tree_file(doc))
    return evaluate_call(scene, scene.earlier("fav.tif"), tree, nodes=str(scene.root))


def held_lock(scene: Scene):
    """Another run holds the output's lock."""
    tree = scene.tree()
    output = scene.earlier("fav.tif")
    lock = OutputLock([output])
    lock.acquire()
    scene.cleanups.append(lock.release)
    return evaluate_call(scene, output, tree)


def generalised_over_evidence(scene: Scene):
    """The generalised evidence would land on the evidence."""
    evidence, deposits = scene.evidence()
    table = scene.earlier("w.csv")
    return lambda: evidence_weights(evidence, deposits, "categorical", table,
                                    unit_area_km2=CELL_KM2, output_generalised=evidence)


def table_twice(scene: Scene):
    """The weights table is named twice: once itself, once as the generalised raster's table."""
    evidence, deposits = scene.evidence()
    generalised = scene.earlier("g.tif")
    return lambda: evidence_weights(evidence, deposits, "categorical", generalised + ".weights.csv",
                                    unit_area_km2=CELL_KM2, output_generalised=generalised)


def posterior_outputs(scene: Scene, probability: str | None, std: str | None):
    """A posterior whose outputs are given (EVIDENCE stands for the evidence's path)."""
    evidence, deposits = scene.evidence()
    binary = scene.raster("b.tif", np.tile(np.array([0, 1], np.uint8), (20, 10)), cell=CELL)
    probability = probability or scene.earlier("p.tif")
    std = std or scene.earlier("s.tif")
    return lambda: posterior([binary], deposits, probability.replace("EVIDENCE", binary),
                             std.replace("EVIDENCE", binary), unit_area_km2=CELL_KM2)


def blocked_folder(scene: Scene):
    """The output's folder is a file."""
    tree = scene.tree()
    Path(scene.path("blocker")).write_text("a file, not a folder")
    return evaluate_call(scene, scene.path("blocker/fav.tif"), tree)


# -- tree documents ---------------------------------------------------------------------------


MAG = ("root", "children", 0, "children", 0)
TRAP = ("root", "children", 1)


def set_at(path, value):
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


def changed(doc: dict, path, value) -> dict:
    """Return a deep copy of ``doc`` with ``doc[path] = value``."""
    doc = copy.deepcopy(doc)
    set_at(path, value)(doc)
    return doc


def cli_tree(scene: Scene, change) -> list:
    """Command-line arguments evaluating the scene's tree changed by ``change``."""
    doc = scene.tree_doc()
    change(doc)
    return ["evaluate", scene.tree_file(doc), "-o", scene.earlier("fav.tif"),
            "--nodes", str(scene.out / "nodes")]


def bad_leaf(make_leaf):
    """A case whose second leaf (made by ``make_leaf(scene)``) is unusable; core call."""
    def make(scene: Scene):
        mag = scene.raster()
        doc = tree_doc([leaf("Mag", mag, {"type": "linear", "lower": 60, "upper": 160}),
                        make_leaf(scene)], grid={"reference": mag})
        return evaluate_call(scene, scene.earlier("fav.tif"), Tree.from_dict(doc),
                             nodes=str(scene.out / "nodes"))
    return make


def with_surrogate_name() -> dict:
    r"""The varied tree with a leaf named 'Mafic \udc80' (half of a UTF-16 pair)."""
    return changed(varied_tree_doc(), ("root", "children", 0, "children", 0, "name"), "Mafic \udc80")


def absurd_numbers() -> Tree:
    """The varied tree, as a draft, with numbers no computation should meet (1e308, 10**400...)."""
    doc = varied_tree_doc()
    source = doc["root"]["children"][0]
    for child in source["children"]:
        child["weight"] = 1e308
    source["children"][1]["membership"]["centre"] = 1e308
    doc["root"]["children"][1]["operator"]["gamma"] = 10**400
    doc["grid"] = {"crs": "EPSG:32750", "extent": [0, 0, 1e15, 1000], "cell_size": 1e-300}
    return Tree.from_draft(doc)


# -- files Favour reads -------------------------------------------------------------------------


VARIED_TEXT = json.dumps(varied_tree_doc(), indent=2)
#: Where a byte 0xe9 goes in VARIED_TEXT (inside 'Mafic'), and its line.
NOT_UTF8_AT = VARIED_TEXT.encode("utf-8").index(b"Mafic") + 1
NOT_UTF8_LINE = VARIED_TEXT[:NOT_UTF8_AT].count("\n") + 1
#: The line of the Pathway's gamma in VARIED_TEXT.
GAMMA_LINE = VARIED_TEXT[:VARIED_TEXT.index('"gamma": 0.8')].count("\n") + 1


def varied_tree_file(scene: Scene, name: str, old: str = "", new: str = "", indent: int | None = 2) -> str:
    """Write the varied tree as JSON text with ``old`` replaced by ``new``; return its path."""
    return scene.text(name, json.dumps(varied_tree_doc(), indent=indent).replace(old, new))


def not_utf8_tree_file(scene: Scene) -> str:
    """The varied tree with the byte 0xe9 at NOT_UTF8_AT (inside 'Mafic')."""
    text = VARIED_TEXT.encode("utf-8")
    path = scene.root / "latin1.favour.json"
    path.write_bytes(text[:NOT_UTF8_AT] + b"\xe9" + text[NOT_UTF8_AT:])
    return str(path)


def lineage_text(scene: Scene, text: str) -> Callable:
    """A call reading ``text`` as the lineage of ``x.tif``."""
    scene.text("x.tif.lineage.json", text)
    return lambda: read_lineage(scene.root / "x.tif")


def read_fifo(scene: Scene, name: str, read: Callable, target=None) -> Callable:
    """A call of ``read(target)`` (the FIFO itself by default) with a FIFO ``name``, failing on a hang."""
    fifo = scene.fifo(name)
    return without_hanging(lambda: read(fifo if target is None else target), fifo)


def huge_tree_file(scene: Scene) -> str:
    """A 50 MB tree file (sparse: the start of a tree, then zeros)."""
    path = scene.root / "huge.favour.json"
    with open(path, "wb") as handle:
        handle.write(b'{"format": "favour-tree", "version": 1, "name": "')
        handle.truncate(50 * MIB)
    return str(path)


def written_lineage(scene: Scene) -> dict:
    """A tiny tree evaluated by Favour in ``scene/written``; return the lineage it wrote."""
    where = scene.root / "written"
    where.mkdir()
    write_raster(where / "v.tif", np.arange(400, dtype=np.float32).reshape(20, 20))
    tree = write_tree(where / "t.favour.json", tree_doc(
        [leaf("Value", "v.tif", {"type": "linear", "lower": 0, "upper": 400})]))
    evaluate_tree_file(tree, str(where / "fav.tif"))
    return read_lineage(where / "fav.tif")


def written_weights(scene: Scene) -> dict:
    """A weights table written by Favour in ``scene/written``; return its lineage (the table inside)."""
    where = scene.root / "written"
    where.mkdir()
    evidence = np.zeros((20, 20), np.uint8)
    evidence[:5] = 1
    write_raster(where / "e.tif", evidence)
    write_vector(where / "d.gpkg", points([(1, 1), (2, 2), (10, 10), (15, 3)]), layer="deposits")
    evidence_weights(str(where / "e.tif"), str(where / "d.gpkg"), "binary", str(where / "w.csv"),
                     unit_area_km2=0.01)
    return read_lineage(where / "w.csv")


def damaged_lineage(scene: Scene) -> Callable:
    """A lineage edited by hand (a checksum made a number, the grid's width deleted); reproduce it."""
    record = written_lineage(scene)
    record["inputs"][0]["files"][0]["sha256"] = 3
    del record["grid"]["width"]
    target = scene.text("out.tif.lineage.json", json.dumps(record))

    def names_the_file(message: str) -> None:
        assert target in message, message
    return checked(lambda: reproduce(scene.path("out.tif")), names_the_file)


def damaged_weights_file(scene: Scene) -> Callable:
    """The lineage of a weights table whose s(W+) of row 0 is null; read the table."""
    record = written_weights(scene)
    record["table"]["rows"][0]["s_w_plus"] = None
    scene.text("t.csv.lineage.json", json.dumps(record))
    return lambda: read_weights_table(scene.path("t.csv"))


# -- score sheets and the workshop ------------------------------------------------------------------

SOURCE, KEEL = "Favourability > Source", "Favourability > Source > Keel"
PILE = "Favourability > Source > Pile"
SPLAYS, MESH = "Favourability > Pathway > Splays", "Favourability > Pathway > Mesh"
HINGES = "Favourability > Trap > Hinges"
COVER, GRANITE = "Favourability > Preservation > Cover", "Favourability > Preservation > Granite"

# Sheet layout of SCORED_TREE_DOC: five comment lines, the header on row 6, then one row per node
# and item in tree order. The rows the bad-sheet cases break:
ROWS = {
    (SOURCE, "importance"): 7,
    (KEEL, "membership.midpoint"): 9,
    (KEEL, "membership.slope"): 10,
    (PILE, "membership.scores.1"): 12,
    (SPLAYS, "membership.lower"): 16,
    (SPLAYS, "membership.upper"): 17,
    (HINGES, "membership.spread"): 26,
    (COVER, "weight"): 35,
    (GRANITE, "weight"): 38,
}
LAST_ROW = 40


def then(*changes):
    """Return the changes of a sheet's text applied one after the other."""
    def change(text: str) -> str:
        for one in changes:
            text = one(text)
        return text
    return change


def duplicate_row(node: str, item: str):
    """Return a change that repeats E1's row of (node, item) at the end of the sheet."""
    def change(text: str) -> str:
        line = next(line for line in text.split("\n") if line.startswith(f"E1,{node},{item},"))
        return text + line + "\n"
    return change


def latin1_note(text: str) -> bytes:
    """The sheet with a note in Latin-1 (not UTF-8) on Keel's midpoint row."""
    data = sheet_edit(KEEL, "membership.midpoint", note="XNOTEX")(text).encode("utf-8")
    return data.replace(b"XNOTEX", "gneiss à grenat".encode("latin-1"))


def bad_sheet(change):
    """A case: E1's first-round sheet broken by ``change``, read against the scored tree.

    The call must say that nothing was changed and leave the tree as it was.
    """
    def make(scene: Scene):
        tree = scored_tree()
        (path,) = export_sheets(tree, scene.root, ["E1"])
        broken = change(path.read_text(encoding="utf-8"))
        if isinstance(broken, bytes):
            path.write_bytes(broken)
        else:
            path.write_text(broken, encoding="utf-8")
        return unchanged(tree, lambda: read_sheets([path], tree), says="nothing was changed")
    return make


def many_bad_rows(scene: Scene):
    """A sheet with more than twenty problems: every importance row shifted, 25 unknown nodes."""
    tree = scored_tree()
    (path,) = export_sheets(tree, scene.root, ["E1"])
    lines = path.read_text(encoding="utf-8").split("\n")
    # an extra comma after the item shifts every importance value into 'low': three problems a row
    bad = [line.replace(",importance,", ",importance,,", 1) for line in lines]
    bad += [f"E1,Favourability > Nowhere {k},importance,5,,,,," for k in range(25)]
    path.write_text("\n".join(bad), encoding="utf-8")
    return unchanged(tree, lambda: read_sheets([path], tree), says="nothing was changed")


def bad_in_two_files(scene: Scene):
    """E1's sheet with an importance of 10, and E2's sheet relabelled E1 (duplicates across files)."""
    tree = scored_tree()
    first, second = export_sheets(tree, scene.root, ["E1", "E2"])
    second.write_text(second.read_text(encoding="utf-8").replace("E2,", "E1,"), encoding="utf-8")
    first.write_text(sheet_edit(SOURCE, "importance", value="10")(first.read_text(encoding="utf-8")),
                     encoding="utf-8")
    return unchanged(tree, lambda: read_sheets([first, second], tree), says="nothing was changed")


def sheet_file(scene: Scene, name: str, text: str | None):
    """A call reading the sheet ``name`` (written with ``text``, or absent) against the scored tree."""
    if name.endswith(".xlsx") and not xlsx_available():
        pytest.skip("openpyxl is not installed")
    if text is not None:
        (scene.root / name).write_text(text, encoding="utf-8")
    tree = scored_tree()
    return unchanged(tree, lambda: read_sheets([scene.root / name], tree))


def scores_of(table: dict) -> Scores:
    """Scores from {expert: {node: {item: value or (value, low, high)}}}."""
    def score(v):
        return Score(*v) if isinstance(v, tuple) else Score(float(v))
    return Scores(table={e: {n: {i: score(v) for i, v in items.items()} for n, items in nodes.items()}
                         for e, nodes in table.items()}, experts=tuple(table))


def three_experts() -> Scores:
    """Three experts who disagree on the Pathway's weights and on the Splays ramp."""
    return scores_of({
        "E1": {SPLAYS: {"importance": 9, "membership.lower": (800, 700, 900), "membership.upper": 100},
               MESH: {"importance": 3}, HINGES: {"membership.spread": (700, 500, 900)}},
        "E2": {SPLAYS: {"importance": 6, "membership.lower": (800, 600, 1000), "membership.upper": 150},
               MESH: {"importance": 6}, HINGES: {"membership.spread": 900}},
        "E3": {SPLAYS: {"importance": 9, "membership.lower": 750, "membership.upper": 120},
               MESH: {"importance": 1}},
    })


def sheets_over_sheets(scene: Scene):
    """Score sheets written once and one filled in; the call writes them again into the same folder."""
    tree, _, _ = small_workshop(scene.root)
    first = write_score_sheets(tree, scene.path("sheets"), 2)
    with open(first[0], "a", encoding="utf-8") as handle:
        handle.write("\n# an expert's notes\n")
    return lambda: write_score_sheets(tree, scene.path("sheets"), 2)


def invalid_pool(scene: Scene) -> Callable:
    """Two valid ramps of Splays, 800 to 100 and 100 to 800, that pool to lower = upper = 450."""
    tree = scored_tree()
    scores = scores_of({"E1": {SPLAYS: {"membership.lower": 800, "membership.upper": 100}},
                        "E2": {SPLAYS: {"membership.lower": 100, "membership.upper": 800}}})
    return unchanged(tree, lambda: aggregate_tree(tree, aggregate(scores)))


def weights_into_source(weights) -> Callable:
    """A case putting ``weights`` into the Source node of the scored tree."""
    def make(scene: Scene):
        tree = scored_tree()
        return unchanged(tree, lambda: tree_with_weights(tree, SOURCE, weights))
    return make


# -- faults, one call and several --------------------------------------------------------------


def truncated(scene: Scene) -> str:
    """A tiled GeoTIFF cut short: its first tiles read, later ones fail."""
    rng = np.random.default_rng(3)
    path = write_raster(scene.root / "cut.tif", rng.random((600, 600)).astype(np.float32),
                        options=("TILED=YES", "COMPRESS=DEFLATE"))
    size = os.path.getsize(path)
    with open(path, "r+b") as handle:
        handle.truncate(int(size * 0.6))
    return path


def truncated_tree(scene: Scene) -> str:
    """A tree file over the truncated GeoTIFF."""
    cut = truncated(scene)
    return write_tree(scene.root / "cut.json",
                      tree_doc([leaf("Cut", cut, {"type": "linear", "lower": 0, "upper": 1})]))


def failing_writer(scene: Scene):
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
    return evaluate_call(scene, scene.earlier("fav.tif"), tree)


def failing_commit(scene: Scene):
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
    return evaluate_call(scene, scene.earlier("fav.tif"), tree)


def geographic(scene: Scene) -> dict:
    """The striped evidence warped to a geographic CRS (EPSG:4326)."""
    subprocess.run(["gdalwarp", "-q", "-t_srs", "EPSG:4326", scene.path("e.tif"), scene.path("g4326.tif")],
                   check=True)
    return {"evidence": scene.path("g4326.tif")}


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


def tall_scene(scene: Scene) -> Tree:
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


def slow_tree(scene: Scene) -> str:
    """A tree file over a raster big enough that a run takes a few seconds."""
    rng = np.random.default_rng(8)
    big = write_raster(scene.root / "big.tif", rng.random((3000, 3000)).astype(np.float32))
    return write_tree(scene.root / "slow.json", tree_doc([
        leaf("A", big, {"type": "linear", "lower": 0, "upper": 1}),
        leaf("B", big, {"type": "gaussian", "centre": 0.5, "spread": 0.2})], {"type": "gamma", "gamma": 0.5}))


def start_cli(*args) -> subprocess.Popen:
    """Start ``python -m favour_plugin`` and return it once it reports its first progress."""
    process = subprocess.Popen([sys.executable, "-m", "favour_plugin", *map(str, args)], cwd=ROOT,
                               stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    for line in process.stderr:
        if line.strip().endswith("%") and not line.strip().startswith("0%"):
            break
    return process
