"""Finished runs shown in the project: a layer group per run, styled, with the lineage in the metadata.

Runs in the main thread after a :class:`~.run_job.RunJob` succeeded. Layers
are styled and annotated by the same :class:`~favour_plugin.processing.base.StyleLoader`
that styles processing outputs. A quick look replaces the previous one. A
Monte Carlo run from the workshop view adds its rasters as one group; the
targets found from the Results tab join as a styled polygon layer.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil

from qgis.core import QgsProject, QgsRasterLayer, QgsVectorLayer

from ..core.lineage import read_lineage
from ..core.tree import PATH_SEPARATOR
from ..processing.base import StyleLoader
from ..raster.target_zones import LAYER as TARGETS_LAYER
from .common import tr

GROUP = "Favour results"
RUN_PROPERTY = "favour/run"
QUICK_PROPERTY = "favour/quick_look"


def _group(project: QgsProject):
    root = project.layerTreeRoot()
    group = root.findGroup(tr(GROUP))
    return group if group is not None else root.insertGroup(0, tr(GROUP))


def _layer(path: str, name: str, folder: str) -> QgsRasterLayer:
    layer = QgsRasterLayer(path, name, "gdal")
    if not layer.isValid():
        raise RuntimeError(tr("QGIS cannot open the result {path}").format(path=path))
    StyleLoader(path).postProcessLayer(layer, None, None)
    layer.setCustomProperty(RUN_PROPERTY, folder)
    return layer


def _node_names(lineage: str | None) -> dict[str, str]:
    """Return component raster file → node name from the run's lineage."""
    if not lineage or not os.path.exists(lineage):
        return {}
    record = read_lineage(lineage)
    nodes = record.get("outputs", {}).get("nodes", {})
    return {os.path.abspath(f): path.split(PATH_SEPARATOR)[-1] for path, f in nodes.items()}


def add_results(outcome, tree_name: str, project: QgsProject | None = None) -> list[QgsRasterLayer]:
    """Add a successful run's rasters to the project and return them (favourability first)."""
    project = project or QgsProject.instance()
    group = _group(project)
    if outcome.quick:
        remove_quick_looks(project)
        layer = _layer(outcome.output, tr("Quick look: {name}").format(name=tree_name or tr("model")),
                       outcome.folder)
        layer.setCustomProperty(QUICK_PROPERTY, True)
        project.addMapLayer(layer, False)
        group.insertLayer(0, layer)
        return [layer]
    stamp = _dt.datetime.now().strftime("%Y-%m-%d %H:%M:%S")
    run_group = group.insertGroup(0, f"{tree_name or tr('model')} · {stamp}")
    layers = [_layer(outcome.output, tr("Favourability"), outcome.folder)]
    if outcome.node_folder and os.path.isdir(outcome.node_folder):
        names = _node_names(outcome.lineage)
        for file in sorted(os.listdir(outcome.node_folder)):
            if file.lower().endswith(".tif"):
                path = os.path.abspath(os.path.join(outcome.node_folder, file))
                layers.append(_layer(path, names.get(path, os.path.splitext(file)[0]), outcome.folder))
    for i, layer in enumerate(layers):
        project.addMapLayer(layer, False)
        node = run_group.addLayer(layer)
        node.setItemVisibilityChecked(i == 0)
        node.setExpanded(False)
    return layers


#: Layer names of the Monte Carlo rasters, by output parameter.
UNCERTAINTY_NAMES = {
    "OUTPUT_MEAN": "Mean favourability",
    "OUTPUT_STD": "Standard deviation",
    "OUTPUT_P10": "P10",
    "OUTPUT_P50": "P50 (median)",
    "OUTPUT_P90": "P90",
    "OUTPUT_ROBUSTNESS": "Robustness (share of draws in the top area)",
}


def add_uncertainty_results(outcome, tree_name: str,
                            project: QgsProject | None = None) -> list[QgsRasterLayer]:
    """Add a Monte Carlo run's rasters to the project as one group; return them (mean first).

    ``outcome`` is an :class:`~.ensemble_job.EnsembleOutcome`; its ``files``
    map output parameters to rasters. The mean is shown, the others are
    listed unticked.
    """
    project = project or QgsProject.instance()
    rasters = [(key, outcome.files[key]) for key in UNCERTAINTY_NAMES
               if outcome.files.get(key) and str(outcome.files[key]).lower().endswith(".tif")]
    if not rasters:
        return []
    layers = [_layer(os.path.abspath(path), tr(UNCERTAINTY_NAMES[key]), outcome.folder)
              for key, path in rasters]
    stamp = _dt.datetime.now().strftime("%Y-%m-%d %H:%M:%S")
    run_group = _group(project).insertGroup(0, tr("Monte Carlo: {name} · {stamp}").format(
        name=tree_name or tr("model"), stamp=stamp))
    for i, layer in enumerate(layers):
        project.addMapLayer(layer, False)
        node = run_group.addLayer(layer)
        node.setItemVisibilityChecked(i == 0)
        node.setExpanded(False)
    return layers




def add_targets_layer(path: str, name: str = "", project: QgsProject | None = None) -> QgsVectorLayer:
    """Add the targets GeoPackage the targets job wrote, styled with its ``.qml``; return the layer.

    The layer goes on top of the *Favour results* group, with the job's
    lineage in its metadata (as every Favour result).

    Raises
    ------
    RuntimeError
        QGIS cannot open the GeoPackage's targets layer.
    """
    project = project or QgsProject.instance()
    layer = QgsVectorLayer(f"{path}|layername={TARGETS_LAYER}",
                           tr("Targets: {name}").format(name=name) if name else tr("Targets"), "ogr")
    if not layer.isValid():
        raise RuntimeError(tr("QGIS cannot open the targets {path}").format(path=path))
    StyleLoader(path).postProcessLayer(layer, None, None)
    layer.setCustomProperty(RUN_PROPERTY, os.path.dirname(os.path.abspath(path)))
    project.addMapLayer(layer, False)
    _group(project).insertLayer(0, layer)
    return layer


def remove_quick_looks(project: QgsProject | None = None) -> None:
    """Remove earlier quick-look layers from the project, and their files."""
    project = project or QgsProject.instance()
    for layer in list(project.mapLayers().values()):
        if layer.customProperty(QUICK_PROPERTY):
            folder = layer.customProperty(RUN_PROPERTY)
            project.removeMapLayer(layer.id())
            if folder and os.path.basename(str(folder)).startswith("quick-"):
                shutil.rmtree(str(folder), ignore_errors=True)
