"""Project layers as proxies: a layer (or a dragged layer) turned into a tree proxy, and back.

A raster layer becomes a raster proxy on one of its bands; a vector layer
becomes a distance proxy (distance to its features). The layer's id is kept
in the proxy (``qgis_layer_id``) so a proxy whose layer is removed from the
project is marked, never deleted: the proxy keeps its file path and still runs.
"""

from __future__ import annotations

import os

from qgis.core import (
    QgsMimeDataUtils,
    QgsProject,
    QgsProviderRegistry,
    QgsRasterLayer,
    QgsVectorLayer,
)

from ..core.tree import Problem, Proxy, Tree
from .common import tr
from .controller import LAYER_ID_KEY

#: Mime type QGIS's layers panel and browser give dragged layers.
URI_MIME = "application/x-vnd.qgis.qgis.uri"


class UnusableLayerError(ValueError):
    """A layer that cannot stand as a proxy (not a file Favour can read); the message says why."""


def _file_of(provider: str, source: str) -> tuple[str, str | None]:
    """Return (file path, layer name within the file) of a gdal or ogr source."""
    parts = QgsProviderRegistry.instance().decodeUri(provider, source)
    path = parts.get("path") or ""
    layer = parts.get("layerName") or None
    return path, layer if isinstance(layer, str) else None


def proxy_from_source(kind: str, provider: str, source: str, name: str, layer_id: str | None = None,
                      band: int = 1) -> Proxy:
    """Return the proxy for a raster or vector data source.

    Raises
    ------
    UnusableLayerError
        The source is not a local file read by GDAL/OGR (a memory layer, a
        web service, a database table).
    """
    if kind == "raster" and provider == "gdal":
        path, _ = _file_of(provider, source)
        proxy = Proxy(path=path, band=band)
    elif kind == "vector" and provider == "ogr":
        path, layer = _file_of(provider, source)
        proxy = Proxy(path=path, layer=layer, measure="distance")
    else:
        raise UnusableLayerError(tr("{name} is not a raster or vector file; save it to a GeoTIFF or "
                           "GeoPackage first").format(name=name))
    if not path or not os.path.isfile(path):
        raise UnusableLayerError(tr("{name} is not read from a local file; save it to a file "
                           "first").format(name=name))
    if layer_id:
        proxy.extra[LAYER_ID_KEY] = layer_id
    return proxy


def proxy_from_layer(layer) -> Proxy:
    """Return the proxy for a project layer (band 1 of a raster, distance to a vector's features).

    Raises
    ------
    UnusableLayerError
        Not a file layer, or a vector layer with a filter (the tree reads the
        whole file, so the filter would be lost).
    """
    if isinstance(layer, QgsRasterLayer):
        kind = "raster"
    elif isinstance(layer, QgsVectorLayer):
        kind = "vector"
        if layer.subsetString():
            raise UnusableLayerError(tr(
                "{name} has a QGIS filter, which the tree file cannot keep (it reads whole files): "
                "take the filter off and tick the values under 'Only features whose' in the "
                "criterion's Layer box, or save the filtered features to a file").format(
                    name=layer.name()))
    else:
        raise UnusableLayerError(tr("{name} is neither a raster nor a vector layer").format(
            name=layer.name()))
    return proxy_from_source(kind, layer.providerType(), layer.source(), layer.name(), layer.id())


def dropped_layers(mime, project: QgsProject | None = None) -> list[tuple[str, object, Proxy | str]]:
    """Return (name, project layer or None, proxy or why it is not one) for each dragged layer.

    Layers from the layers panel carry their id and come with their project
    layer; files from the browser come as a proxy alone.
    """
    project = project or QgsProject.instance()
    out = []
    for uri in QgsMimeDataUtils.decodeUriList(mime):
        layer = project.mapLayer(uri.layerId) if uri.layerId else None
        try:
            if layer is not None:
                out.append((layer.name(), layer, proxy_from_layer(layer)))
            else:
                out.append((uri.name, None, proxy_from_source(uri.layerType, uri.providerKey, uri.uri,
                                                              uri.name)))
        except UnusableLayerError as exc:
            out.append((uri.name, layer, str(exc)))
    return out


def layer_for_proxy(proxy: Proxy | None, tree: Tree, project: QgsProject | None = None):
    """Return the project layer a proxy reads: by the id it came with, else by file (or None)."""
    if proxy is None:
        return None
    project = project or QgsProject.instance()
    layer = project.mapLayer(proxy.extra.get(LAYER_ID_KEY) or "")
    if layer is not None:
        return layer
    target = os.path.normcase(str(proxy.resolve(tree.base_dir)))
    for candidate in project.mapLayers().values():
        if candidate.providerType() not in ("gdal", "ogr"):
            continue
        path, name = _file_of(candidate.providerType(), candidate.source())
        if path and os.path.normcase(os.path.abspath(path)) == target and \
                (proxy.is_vector == isinstance(candidate, QgsVectorLayer)) and \
                (not proxy.is_vector or proxy.layer in (None, name)):
            return candidate
    return None


def removed_layer_problems(tree: Tree | None, project: QgsProject | None = None) -> list[Problem]:
    """Mark each proxy whose project layer has been removed (a warning: the file still runs)."""
    if tree is None:
        return []
    project = project or QgsProject.instance()
    found = []
    for path, node in tree.walk():
        layer_id = node.proxy.extra.get(LAYER_ID_KEY) if node.proxy is not None else None
        if layer_id and project.mapLayer(layer_id) is None:
            found.append(Problem(path, tr("its layer was removed from the project; the criterion "
                                          "still reads {file}").format(
                file=node.proxy.resolve(tree.base_dir)), "warning"))
    return found


def raster_bands(layer) -> list[str]:
    """Return the band names of a raster layer ("Band 1: …"), empty for other layers."""
    if not isinstance(layer, QgsRasterLayer):
        return []
    return [layer.bandName(i) for i in range(1, layer.bandCount() + 1)]


def numeric_fields(layer) -> list[str]:
    """Return the numeric field names of a vector layer."""
    if not isinstance(layer, QgsVectorLayer):
        return []
    return [f.name() for f in layer.fields() if f.isNumeric()]


def layer_value_range(layer) -> tuple[float, float] | None:
    """Return the value range QGIS already uses to draw a raster layer (no new statistics), or None."""
    renderer = layer.renderer() if isinstance(layer, QgsRasterLayer) else None
    if renderer is None:
        return None
    enhancement = getattr(renderer, "contrastEnhancement", None)
    if enhancement is not None and enhancement() is not None:
        low, high = enhancement().minimumValue(), enhancement().maximumValue()
    elif hasattr(renderer, "classificationMin"):
        low, high = renderer.classificationMin(), renderer.classificationMax()
    else:
        return None
    return (float(low), float(high)) if high > low else None
