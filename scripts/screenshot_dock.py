"""Start QGIS desktop under a virtual display with Favour from this checkout; screenshot the dock on the demo.

``make screenshot`` writes ``help/dock.png``. QGIS runs as a user would start
it: ``/usr/bin/qgis`` under ``xvfb-run``, an isolated profile (a prepared
``QGIS3.ini`` that enables the plugin, so no first-run questions), the plugin
found through ``QGIS_PLUGINPATH=<checkout>``, and ``--code
scripts/dock_session.py``, which opens the dock, loads the demo tree, runs
it, saves the screenshot and quits. A ``startup.py`` in the profile records
every QGIS log message from the start into a file, so Python errors during
plugin loading are caught too.

:func:`run_desktop` is also what ``tests/test_desktop.py`` calls.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SESSION = Path(__file__).resolve().parent / "dock_session.py"
DEMO = ROOT / "resources" / "demo"
SCREEN = "1600x1000x24"
CRITICAL = 2  # Qgis.Critical, as the log file writes levels

_INI = """[PythonPlugins]
favour_plugin=true

[qgis]
checkVersion=false
showTips=false
iconSize=24
style=Fusion

[locale]
overrideFlag=true
userLocale=en_GB
globalLocale=en_GB
"""

# Runs as QGIS starts its Python: every log message, from then on, goes to a file.
_STARTUP = """from qgis.core import Qgis, QgsApplication
LOG_FILE = {log!r}
_handle = open(LOG_FILE, "a", encoding="utf-8")


def _record(message, tag, level):
    _handle.write(f"{{int(level)}}\\t{{tag}}\\t{{message}}\\n".replace("\\n", " | ").rstrip(" |") + "\\n")
    _handle.flush()


QgsApplication.messageLog().messageReceived[str, str, Qgis.MessageLevel].connect(_record)
"""


@dataclass
class DesktopRun:
    """What a desktop session left: its return code, status record, log lines and console output."""

    returncode: int
    status: dict
    log: list[str]
    output: str

    def python_errors(self) -> list[str]:
        """Return log lines reporting a Python error (QGIS's "Python error" tag or a traceback)."""
        return [line for line in self.log if "\tPython error\t" in line or "Traceback" in line]

    def favour_errors(self) -> list[str]:
        """Return critical messages Favour itself logged."""
        return [line for line in self.log if line.startswith(f"{CRITICAL}\tFavour\t")]


def demo_folder(folder: Path) -> Path:
    """Generate the demo layers into ``folder/layers`` (unless up to date) beside the demo tree."""
    spec = importlib.util.spec_from_file_location("favour_demo_generate_desktop", DEMO / "generate.py")
    generate = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = generate
    spec.loader.exec_module(generate)
    if not generate.is_up_to_date(folder / "layers"):
        generate.generate(folder / "layers")
    shutil.copy(DEMO / "district.favour.json", folder / "district.favour.json")
    return folder


def run_desktop(work: Path, screenshot: Path, timeout: int = 150) -> DesktopRun:
    """Start QGIS desktop under Xvfb on the demo in ``work``; return what the session left."""
    work = Path(work).resolve()
    work.mkdir(parents=True, exist_ok=True)
    demo = demo_folder(work / "demo")
    profiles = work / "profiles"
    shutil.rmtree(profiles, ignore_errors=True)
    profile = profiles / "profiles" / "default"
    (profile / "QGIS").mkdir(parents=True)
    (profile / "QGIS" / "QGIS3.ini").write_text(_INI, encoding="utf-8")
    log = work / "qgis-log.txt"
    log.write_text("", encoding="utf-8")
    # QGIS runs startup.py from its data folder (XDG_DATA_HOME/QGIS/QGIS3), before the plugins load.
    data_home = work / "xdg-data"
    (data_home / "QGIS" / "QGIS3").mkdir(parents=True, exist_ok=True)
    (data_home / "QGIS" / "QGIS3" / "startup.py").write_text(_STARTUP.format(log=str(log)),
                                                            encoding="utf-8")
    status = work / "status.json"
    status.unlink(missing_ok=True)
    results = work / "results"
    shutil.rmtree(results, ignore_errors=True)
    screenshot = Path(screenshot).resolve()
    screenshot.parent.mkdir(parents=True, exist_ok=True)
    settings = {"tree": str(demo / "district.favour.json"), "layers": str(demo / "layers"),
                "results": str(results), "screenshot": str(screenshot), "status": str(status),
                "timeout": max(30, timeout - 30)}
    env = {k: v for k, v in os.environ.items() if k != "QT_QPA_PLATFORM"}
    env.update(QGIS_PLUGINPATH=str(ROOT), FAVOUR_DESKTOP=json.dumps(settings), QT_QPA_PLATFORM="xcb",
               XDG_RUNTIME_DIR=str(work), XDG_DATA_HOME=str(data_home))
    command = ["xvfb-run", "-a", "-s", f"-screen 0 {SCREEN}", "/usr/bin/qgis",
               "--profiles-path", str(profiles), "--nologo", "--noversioncheck",
               "--code", str(SESSION)]
    try:
        done = subprocess.run(command, env=env, capture_output=True, text=True, timeout=timeout,
                              cwd=str(work))
        returncode, output = done.returncode, done.stdout + done.stderr
    except subprocess.TimeoutExpired as exc:
        returncode, output = -1, f"QGIS did not quit within {timeout} s\n{exc.stdout or ''}{exc.stderr or ''}"
    record = json.loads(status.read_text(encoding="utf-8")) if status.exists() else \
        {"error": "the session script wrote no status"}
    lines = [line for line in log.read_text(encoding="utf-8").splitlines() if line.strip()]
    return DesktopRun(returncode, record, lines, output)


def main(argv: list[str] | None = None) -> int:
    """Make the help page's screenshot; print what went wrong if anything did."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(ROOT / "help" / "dock.png"), help="PNG to write")
    parser.add_argument("--work", default=str(ROOT / "build" / "screenshot"), help="working folder")
    args = parser.parse_args(argv)
    if not shutil.which("xvfb-run") or not os.path.exists("/usr/bin/qgis"):
        print("screenshot: needs xvfb-run and /usr/bin/qgis (make setup installs them)", file=sys.stderr)
        return 1
    run = run_desktop(Path(args.work), Path(args.out))
    errors = run.python_errors() + run.favour_errors()
    if run.status.get("error") or errors or not Path(args.out).exists():
        print(f"screenshot: failed (QGIS exit {run.returncode})", file=sys.stderr)
        print(run.status.get("error") or "", file=sys.stderr)
        print("\n".join(errors), file=sys.stderr)
        return 1
    print(f"wrote {args.out}; QGIS log in {Path(args.work) / 'qgis-log.txt'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
