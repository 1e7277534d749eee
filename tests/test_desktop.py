"""Favour started as a user would: QGIS desktop under a virtual display, the plugin from this checkout.

``scripts/screenshot_dock.py`` starts ``/usr/bin/qgis`` under ``xvfb-run``
with an isolated profile that enables the plugin; the session script opens
the dock from its toolbar action, loads the demo tree, runs it and saves a
screenshot; QGIS's own message log is recorded from start-up. The check is
QGIS itself: its log must hold no Python error and QGIS must quit cleanly
(which unloads the plugin).
"""

from __future__ import annotations

import importlib.util
import os
import shutil
import sys
from pathlib import Path

import pytest
from qgis.PyQt.QtGui import QColor, QImage

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
    """QGIS desktop loads Favour, the dock runs the demo, the map shows the ramp, no Python error."""
    launcher = _launcher()
    run = launcher.run_desktop(tmp_path / "desktop", tmp_path / "dock.png", timeout=150)
    assert run.status.get("error") is None, f"{run.status.get('error')}\n{run.output[-3000:]}"
    assert run.status["steps"] == ["open_dock_and_run", "frame_the_map", "screenshot"]
    assert run.status["outcome"]["ok"]
    assert any("\tPlugins\tLoaded Favour" in line for line in run.log), run.log[:20]
    assert run.python_errors() == []
    assert run.favour_errors() == []
    assert run.returncode == 0, run.output[-3000:]
    image = QImage(str(tmp_path / "dock.png"))
    assert (image.width(), image.height()) == (1600, 1000)
    # The favourability raster is drawn on the map in the ramp's colours, low to high.
    for _, colour in (RAMP[0], RAMP[3]):
        assert _ramp_pixels(image, colour) > 100, colour
