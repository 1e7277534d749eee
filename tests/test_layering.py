"""The import rules of ARCHITECTURE.md: core imports no qgis/osgeo/Qt, raster imports no qgis."""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "favour_plugin"


def _imports(path: Path) -> set[str]:
    """Return the top-level module names a file imports (absolute imports only)."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    return names


@pytest.mark.parametrize("path", sorted((PACKAGE / "core").rglob("*.py")), ids=lambda p: p.name)
def test_core_imports_no_gis_or_qt(path):
    """core/ is pure science: no qgis, osgeo, PyQt or Qt import."""
    assert not _imports(path) & {"qgis", "osgeo", "PyQt5", "PyQt6", "sip"}


@pytest.mark.parametrize("path", sorted((PACKAGE / "raster").rglob("*.py")), ids=lambda p: p.name)
def test_raster_imports_no_qgis(path):
    """raster/ uses GDAL only: no qgis or Qt import."""
    assert not _imports(path) & {"qgis", "PyQt5", "PyQt6"}


def test_core_relative_imports_stay_in_core():
    """core/ never reaches up into raster/, processing/ or gui/ through a relative import."""
    for path in (PACKAGE / "core").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level >= 2:
                assert node.module in (None, "about"), f"{path.name} imports ..{node.module}"
