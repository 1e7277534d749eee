"""Build favour_plugin.zip for QGIS's "Install from ZIP": the plugin folder, licence and help.

Usage: python scripts/package.py [--output favour_plugin.zip]
"""

from __future__ import annotations

import argparse
import os
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SKIP_DIRS = {"__pycache__", ".pytest_cache", ".ruff_cache"}
SKIP_SUFFIXES = (".pyc", ".pyo", ".partial")


def plugin_files() -> list[tuple[Path, str]]:
    """Return (source file, name in the zip) for everything the installed plugin needs."""
    files = []
    for folder, dirs, names in os.walk(ROOT / "favour_plugin"):
        dirs[:] = sorted(d for d in dirs if d not in SKIP_DIRS)
        for name in sorted(names):
            if not name.endswith(SKIP_SUFFIXES):
                path = Path(folder) / name
                files.append((path, path.relative_to(ROOT).as_posix()))
    files.append((ROOT / "LICENSE", "favour_plugin/LICENSE"))
    for path in sorted((ROOT / "help").rglob("*")):
        if path.is_file():
            files.append((path, "favour_plugin/help/" + path.relative_to(ROOT / "help").as_posix()))
    return files


def build(output: Path) -> Path:
    """Write the zip atomically and return its path."""
    tmp = output.with_name(output.name + ".partial")
    with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED) as archive:
        for path, name in plugin_files():
            archive.write(path.resolve(), name)
    os.replace(tmp, output)
    return output


def main() -> None:
    """Build the package and say where it is."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--output", type=Path, default=ROOT / "favour_plugin.zip")
    args = parser.parse_args()
    path = build(args.output)
    print(f"built {path}: install it in QGIS with Plugins > Manage and Install Plugins > Install from ZIP")


if __name__ == "__main__":
    main()
