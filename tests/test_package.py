"""The plugin as QGIS sees it: metadata, the ZIP package, and loading from a checkout."""

import configparser
import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
REQUIRED = ("name", "qgisMinimumVersion", "description", "about", "version", "author", "email",
            "repository", "tracker", "hasProcessingProvider", "tags", "icon")


def test_top_level_metadata_is_the_plugins_own():
    """metadata.txt at the top and in favour_plugin/ are one file (QGIS_PLUGINPATH=<checkout>)."""
    assert (ROOT / "metadata.txt").read_bytes() == (ROOT / "favour_plugin" / "metadata.txt").read_bytes()


def test_metadata_has_what_the_plugin_repository_requires():
    """Every key the QGIS plugin repository checks is present; minimum 3.22 (common practice, no source)."""
    meta = configparser.ConfigParser(interpolation=None)
    meta.read(ROOT / "metadata.txt", encoding="utf-8")
    general = meta["general"]
    for key in REQUIRED:
        assert general.get(key), key
    assert general["qgisMinimumVersion"] == "3.22"
    assert general["hasProcessingProvider"] == "yes"
    assert (ROOT / "favour_plugin" / general["icon"]).exists()


def test_package_holds_the_plugin_and_nothing_stale(tmp_path):
    """make package's zip has the plugin folder, licence, help and metadata, and no caches."""
    out = tmp_path / "favour_plugin.zip"
    subprocess.run([sys.executable, str(ROOT / "scripts" / "package.py"), "--output", str(out)],
                   check=True, capture_output=True)
    names = zipfile.ZipFile(out).namelist()
    for needed in ("favour_plugin/__init__.py", "favour_plugin/metadata.txt", "favour_plugin/LICENSE",
                   "favour_plugin/plugin.py", "favour_plugin/schema/tree-v1.schema.json",
                   "favour_plugin/icons/favour.svg"):
        assert needed in names
    assert all(name.startswith("favour_plugin/") for name in names)
    assert not [n for n in names if "__pycache__" in n or n.endswith(".pyc")]
    assert any(n.startswith("favour_plugin/help/") for n in names)


def test_plugin_loads_with_the_qgis_desktop_interface(qgis_app, qgis_iface):
    """classFactory, initGui and unload work with QGIS's interface object (mocked headless)."""
    from qgis.core import QgsApplication

    import favour_plugin

    registry = QgsApplication.processingRegistry()
    earlier = registry.providerById("favour")  # another test's session fixture, if it ran
    if earlier is not None:
        registry.removeProvider(earlier)
    try:
        plugin = favour_plugin.classFactory(qgis_iface)
        plugin.initGui()
        assert registry.providerById("favour") is not None
        assert registry.algorithmById("favour:evaluatetree") is not None
        plugin.unload()
        assert registry.providerById("favour") is None
    finally:
        if earlier is not None:
            from favour_plugin.processing.provider import FavourProvider

            registry.addProvider(FavourProvider())
