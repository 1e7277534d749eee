"""Favour started as a user would: QGIS desktop under a virtual display, the plugin from this checkout.

``scripts/screenshot_dock.py`` starts ``/usr/bin/qgis`` under ``xvfb-run``
with an isolated profile that enables the plugin, and HOME and the temporary
folder inside the test's folder; the session script opens the dock from its
toolbar action, loads the demo tree, runs it, saves a screenshot, validates
the map, finds targets and writes the report from the Results tab, makes a
quick look, starts a new project (keeping the quick look when asked) and
exits; QGIS's own message log is recorded from start-up. The check is QGIS
itself: its log must hold no Python error and QGIS must quit cleanly (which
unloads the plugin).
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import sys
from pathlib import Path

import pytest
from osgeo import ogr
from qgis.PyQt.QtGui import QColor, QImage

from favour_plugin.raster.engine import reproduce
from favour_plugin.raster.style import RAMP

ROOT = Path(__file__).resolve().parent.parent

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(not shutil.which("xvfb-run") or not os.path.exists("/usr/bin/qgis"),
                       reason="needs xvfb-run and QGIS desktop (/usr/bin/qgis)"),
]


def _launcher():
    """Import scripts/screenshot_dock.py (a script, not a package)."""
    spec = importlib.util.spec_from_file_location("favour_screenshot_dock",
                                                  ROOT / "scripts" / "screenshot_dock.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def _ramp_pixels(image: QImage, colour: str, step: int = 4, tolerance: int = 40) -> int:
    """Count sampled pixels within ``tolerance`` (per channel) of a ramp colour."""
    target = QColor(colour)
    found = 0
    for y in range(0, image.height(), step):
        for x in range(0, image.width() - 620, step):  # the map side, left of the dock
            pixel = QColor(image.pixel(x, y))
            if max(abs(pixel.red() - target.red()), abs(pixel.green() - target.green()),
                   abs(pixel.blue() - target.blue())) <= tolerance:
                found += 1
    return found


def test_desktop_opens_the_dock_runs_the_demo_and_logs_no_python_error(tmp_path):
    """QGIS desktop loads Favour, the dock runs the demo, the map shows the ramp, no Python error.

    The run is made in the new, unsaved project QGIS starts with, with no
    results folder chosen: it must land in the documents folder Qt names for
    the session's HOME (QStandardPaths), not in a temporary folder. Then a
    quick look, File › New and Exit: QGIS's own dialogs and signals decide
    when Favour's keep question appears, and the kept copy is checked by
    replaying its lineage (``raster.engine.reproduce``) after QGIS removed
    the original with its temporary folder.
    """
    launcher = _launcher()
    work = tmp_path / "desktop"
    run = launcher.run_desktop(work, tmp_path / "dock.png", tmp_path / "keep-results.png", timeout=240,
                               results_screenshot=tmp_path / "results-tab.png")
    status = run.status
    assert status.get("error") is None, f"{status.get('error')}\n{run.output[-3000:]}"
    assert status["steps"] == ["open_dock_and_run", "frame_the_map", "screenshot", "results_tab",
                               "results_screenshot", "quick_look", "new_project", "quick_look_again",
                               "exit_qgis"]
    assert status["project_file"] == ""  # a new, unsaved project
    assert any("\tPlugins\tLoaded Favour" in line for line in run.log), run.log[:20]
    assert run.python_errors() == []
    assert run.favour_errors() == []
    assert run.returncode == 0, run.output[-3000:]

    # The run went to the documents folder, said before the run and named after it.
    documents = (work / "home" / "Documents" / "Favour").resolve()
    outcome = status["outcome"]
    assert outcome["ok"]
    folder = Path(outcome["folder"])
    assert folder.parent == documents and folder.name.startswith("run-")
    assert not str(folder).startswith(str((work / "home" / "tmp").resolve()))
    assert (folder / "favourability.tif").exists() and (folder / "favourability.tif.lineage.json").exists()
    assert "~/Documents/Favour (the default: in your documents)" in status["destination"]
    assert "Quick looks are temporary" in status["destination"]
    assert outcome["status"] == f"Run written to ~/Documents/Favour/{folder.name}"
    assert status["project_crs"]["description"] == "Tarrowin local grid (transverse Mercator)"

    # File › New: QGIS's own questions first, then Favour's, listing the quick look while it is there.
    quick = status["quick_outcome"]
    new = [d for d in status["dialogs"] if d["phase"] == "new"]
    asked = [d for d in new if d["name"] == "FavourKeepResults"]
    assert len(asked) == 1 and asked[0]["layers_in_project"] > 0
    assert "Quick look: Tarrowin orogenic gold (demo)" in asked[0]["informative"]
    home = str((work / "home").resolve())
    assert quick["output"].replace(home, "~", 1) in asked[0]["informative"]  # shown as ~/tmp/…
    assert "Run written" not in asked[0]["informative"] and outcome["output"] not in asked[0]["informative"]
    signals = [(s["signal"], s["layers"] > 0) for s in status["signals"] if s["phase"] == "new"]
    assert signals.index(("removeAll", True)) < signals.index(("cleared", False))
    # Keep: a new folder in documents holds the quick look's folder with its lineage ...
    kept = Path(status["kept"])
    assert kept.parent == documents and kept.name.startswith("kept-")
    quick_name = Path(quick["folder"]).name
    assert {f"{quick_name}/favourability.tif", f"{quick_name}/favourability.tif.lineage.json"} <= \
        set(status["kept_files"])
    # ... which outlives QGIS's temporary folder and still reproduces its cells from its lineage.
    assert not Path(quick["folder"]).exists()
    assert reproduce(str(kept / quick_name / "favourability.tif")).identical

    # Exit asks again about the second quick look.
    assert [d["name"] for d in status["dialogs"] if d["phase"] == "exit"][-1] == "FavourKeepResults"
    exit_signals = [(s["signal"], s["layers"] > 0) for s in status["signals"] if s["phase"] == "exit"]
    assert exit_signals[0] == ("removeAll", True)

    _results_tab_checks(status, documents, tmp_path)

    image = QImage(str(tmp_path / "dock.png"))
    assert (image.width(), image.height()) == (1600, 1000)
    # The favourability raster is drawn on the map in the ramp's colours, low to high.
    for _, colour in (RAMP[0], RAMP[3]):
        assert _ramp_pixels(image, colour) > 100, colour
    question = QImage(str(tmp_path / "keep-results.png"))
    assert (question.width(), question.height()) == (1600, 1000)


def _results_tab_checks(status: dict, documents: Path, tmp_path: Path) -> None:
    """The Results tab's three runs, pressed in QGIS desktop: each in a folder of its own, each complete."""
    runs = status["handover"]
    assert list(runs) == ["favour:validate", "favour:targets", "favour:report"]
    for outcome in runs.values():
        assert outcome["ok"], outcome["message"]
        assert Path(outcome["folder"]).parent == documents
        assert all(Path(path).exists() for path in outcome["files"].values())
    result = json.loads(Path(runs["favour:validate"]["files"]["OUTPUT_JSON"]).read_text(encoding="utf-8"))
    auc = result["auc"]
    assert f"AUC {auc:.3f}" in status["figures"]  # the tab shows the file's own numbers
    # Polygon areas from OGR's own geometry (not ours): every zone at least the smallest area asked.
    source = ogr.Open(runs["favour:targets"]["files"]["OUTPUT"])
    layer = source.GetLayer(0)
    areas = [feature.GetGeometryRef().GetArea() / 1e6 for feature in layer]
    assert areas and min(areas) >= 0.25 - 1e-9
    ranks = sorted(feature.GetField("rank") for feature in layer)
    assert ranks == list(range(1, len(areas) + 1))
    assert f"{len(areas)} zones at favourability" in runs["favour:targets"]["status"]
    page = Path(runs["favour:report"]["files"]["OUTPUT"]).read_text(encoding="utf-8")
    assert "not a resource estimate" in page and page.count("data:image/png;base64,") >= 4
    picture = QImage(str(tmp_path / "results-tab.png"))
    assert (picture.width(), picture.height()) == (1600, 1000)
