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


def _resolved(path: Path, node: ast.ImportFrom) -> str:
    """Return the dotted module a relative import names, from the package root (``core.errors``)."""
    parts = list(path.relative_to(PACKAGE).with_suffix("").parts)
    base = parts[:len(parts) - node.level]
    return ".".join(base + ([node.module] if node.module else []))


def test_core_relative_imports_stay_in_core():
    """core/ never reaches up into raster/, processing/ or gui/ through a relative import."""
    for path in (PACKAGE / "core").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level >= 1:
                module = _resolved(path, node)
                assert module == "about" or module == "core" or module.startswith("core."), \
                    f"{path.relative_to(PACKAGE)} imports {module}"
