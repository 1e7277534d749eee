"""Start QGIS desktop under a virtual display with Favour from this checkout; screenshot the dock on the demo.

``make screenshot`` writes ``help/dock.png``, ``help/results-tab.png`` and
``help/keep-results.png``.
QGIS runs as a user would start it: ``/usr/bin/qgis`` under ``xvfb-run``, an
isolated profile (a prepared ``QGIS3.ini`` that enables the plugin, so no
first-run questions), the plugin found through ``QGIS_PLUGINPATH=<checkout>``,
and ``--code scripts/dock_session.py``, which opens the dock, loads the demo
tree, runs it, saves the screenshots and quits. A ``startup.py`` in the
profile records every QGIS log message from the start into a file, so Python
errors during plugin loading are caught too.

Nothing lands outside the work folder: ``HOME`` (so the documents folder) is
``<work>/home``, with the demo layers in ``~/Tarrowin``, and the temporary
folder (``TMPDIR``) is ``~/tmp`` (shown as such in the dock). The demo tree file is opened from that
temporary folder, as a file saved from an e-mail would be, so with a new
unsaved project and no folder chosen the run goes to ``~/Documents/Favour``.

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


def demo_folder(folder: Path, tree_folder: Path) -> Path:
    """Generate the demo layers into ``folder/layers`` (unless up to date); return a demo tree file.

    The tree file is written into ``tree_folder`` with absolute layer paths.
    """
    spec = importlib.util.spec_from_file_location("favour_demo_generate_desktop", DEMO / "generate.py")
    generate = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = generate
    spec.loader.exec_module(generate)
    if not generate.is_up_to_date(folder / "layers"):
        generate.generate(folder / "layers")
    doc = json.loads((DEMO / "district.favour.json").read_text(encoding="utf-8"))

    def anchor(node: dict) -> None:
        if "proxy" in node:
            node["proxy"]["path"] = str(folder / node["proxy"]["path"])
        for child in node.get("children", []):
            anchor(child)

    anchor(doc["root"])
    doc["grid"]["reference"] = str(folder / doc["grid"]["reference"])
    tree_folder.mkdir(parents=True, exist_ok=True)
    tree_file = tree_folder / "district.favour.json"
    tree_file.write_text(json.dumps(doc, indent=2), encoding="utf-8")
    return tree_file


def run_desktop(work: Path, screenshot: Path, keep_screenshot: Path | None = None,
                timeout: int = 240, results_screenshot: Path | None = None) -> DesktopRun:
    """Start QGIS desktop under Xvfb on the demo in ``work``; return what the session left.

    ``screenshot`` is the dock after the run; ``keep_screenshot`` (default:
    ``keep-results.png`` beside it) the question to keep a quick look;
    ``results_screenshot`` (default: ``results-tab.png`` beside it) the
    Results tab after validating, finding targets and writing the report.
    """
    work = Path(work).resolve()
    work.mkdir(parents=True, exist_ok=True)
    # The temporary folder sits in the home folder so the dock shows it as ~/tmp/…, not a machine path.
    home = work / "home"
    temporary = home / "tmp"
    for folder in (home / "Documents", home / ".config", temporary):  # no results from earlier sessions
        shutil.rmtree(folder, ignore_errors=True)
    temporary.mkdir(parents=True)
    tree_file = demo_folder(home / "Tarrowin", temporary)
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
    screenshot = Path(screenshot).resolve()
    screenshot.parent.mkdir(parents=True, exist_ok=True)
    keep_screenshot = Path(keep_screenshot or screenshot.with_name("keep-results.png")).resolve()
    results_screenshot = Path(results_screenshot or screenshot.with_name("results-tab.png")).resolve()
    for picture in (screenshot, keep_screenshot, results_screenshot):
        picture.unlink(missing_ok=True)  # a picture left from an earlier session proves nothing
    settings = {"tree": str(tree_file), "layers": str(home / "Tarrowin" / "layers"),
                "screenshot": str(screenshot), "keep_screenshot": str(keep_screenshot),
                "results_screenshot": str(results_screenshot),
                "status": str(status), "timeout": max(30, timeout - 30)}
    env = {k: v for k, v in os.environ.items() if k != "QT_QPA_PLATFORM"}
    env.update(QGIS_PLUGINPATH=str(ROOT), FAVOUR_DESKTOP=json.dumps(settings), QT_QPA_PLATFORM="xcb",
               XDG_RUNTIME_DIR=str(work), XDG_DATA_HOME=str(data_home), HOME=str(home),
               XDG_CONFIG_HOME=str(home / ".config"), TMPDIR=str(temporary))
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
    parser.add_argument("--out", default=str(ROOT / "help" / "dock.png"), help="PNG of the dock to write")
    parser.add_argument("--keep-out", default=str(ROOT / "help" / "keep-results.png"),
                        help="PNG of the question to keep a quick look")
    parser.add_argument("--results-out", default=str(ROOT / "help" / "results-tab.png"),
                        help="PNG of the Results tab after validation, targets and the report")
    parser.add_argument("--work", default=str(ROOT / "build" / "screenshot"), help="working folder")
    args = parser.parse_args(argv)
    if not shutil.which("xvfb-run") or not os.path.exists("/usr/bin/qgis"):
        print("screenshot: needs xvfb-run and /usr/bin/qgis (make setup installs them)", file=sys.stderr)
        return 1
    run = run_desktop(Path(args.work), Path(args.out), Path(args.keep_out),
                      results_screenshot=Path(args.results_out))
    errors = run.python_errors() + run.favour_errors()
    if run.status.get("error") or errors or not Path(args.out).exists() or not Path(args.keep_out).exists() \
            or not Path(args.results_out).exists():
        print(f"screenshot: failed (QGIS exit {run.returncode})", file=sys.stderr)
        print(run.status.get("error") or "", file=sys.stderr)
        print("\n".join(errors), file=sys.stderr)
        return 1
    print(f"wrote {args.out}, {args.results_out} and {args.keep_out}; "
          f"QGIS log in {Path(args.work) / 'qgis-log.txt'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
