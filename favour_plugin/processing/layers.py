"""Turn QGIS layer parameters into file paths that Favour's raster layer (GDAL) reads.

Favour records every input by its file and SHA-256 in the lineage, so an
algorithm works on files: a raster layer must be a file GDAL opens directly,
and a vector layer must be a plain OGR file with no filter. Anything else (a
memory layer, a subset filter, selected features only) is copied into a
GeoPackage beside the output by :func:`export_features`, and the copy is what
the lineage records, so the job can be run again from the lineage alone.
"""

from __future__ import annotations

import os
from contextlib import contextmanager

from qgis.core import (
    QgsFeature,
    QgsFields,
    QgsProcessingException,
    QgsProcessingFeatureSourceDefinition,
    QgsProviderRegistry,
    QgsVectorFileWriter,
)


def _text(value) -> str:
    """Return ``value`` if it is a non-empty string, else "" (decodeUri gives NULL variants)."""
    return value if isinstance(value, str) and value else ""


def raster_layer_path(layer, parameter: str) -> str:
    """Return the file behind a raster layer, or raise naming the parameter.

    Parameters
    ----------
    layer : QgsRasterLayer or None
        The layer given for ``parameter``.
    parameter : str
        The parameter's key, for messages.

    Raises
    ------
    QgsProcessingException
        No layer, a layer that is not a GDAL file (a web service, a table
        inside a GeoPackage, a virtual raster of QGIS's own), or a file that
        does not exist.
    """
    if layer is None:
        raise QgsProcessingException(f"{parameter}: no raster layer was given")
    if layer.providerType() != "gdal":
        raise QgsProcessingException(
            f"{parameter}: the layer {layer.name()!r} comes from the {layer.providerType()!r} "
            "provider; Favour reads raster files, so save it as a GeoTIFF first")
    uri = QgsProviderRegistry.instance().decodeUri("gdal", layer.source())
    path = _text(uri.get("path"))
    if not path or _text(uri.get("layerName")) or not os.path.isfile(path):
        raise QgsProcessingException(
            f"{parameter}: the layer {layer.name()!r} ({layer.source()}) is not a raster file "
            "GDAL opens directly; save it as a GeoTIFF first")
    return os.path.abspath(path)


def plain_vector_file(parameters: dict, parameter: str, layer) -> tuple[str, str | None] | None:
    """Return ``(path, layer name)`` when a vector parameter is a plain OGR file, else None.

    A plain file is read by GDAL as it is: the ``ogr`` provider, a file that
    exists, no subset filter, all features (not only the selected ones, no
    feature limit), and a layer named or the only one in the file.

    Parameters
    ----------
    parameters : dict
        The algorithm's parameter values.
    parameter : str
        The key of the vector parameter.
    layer : QgsVectorLayer or None
        ``parameterAsVectorLayer`` of that parameter.
    """
    value = parameters.get(parameter)
    if isinstance(value, QgsProcessingFeatureSourceDefinition):
        if value.selectedFeaturesOnly or value.featureLimit != -1:
            return None
    if layer is None or layer.providerType() != "ogr" or layer.subsetString():
        return None
    uri = QgsProviderRegistry.instance().decodeUri("ogr", layer.source())
    path = _text(uri.get("path"))
    if not path or not os.path.isfile(path) or _text(uri.get("subset")):
        return None
    name = _text(uri.get("layerName")) or None
    if name is None and isinstance(uri.get("layerId"), int):
        return None  # a layer picked by index: the copy settles which one it is
    return os.path.abspath(path), name


def features_copy_path(output: str, kind: str = "features") -> str:
    """Return where the features of a non-file vector layer are copied for ``output``.

    ``OUTPUT.EXT`` gives ``OUTPUT.KIND.gpkg`` beside it (``kind``: ``features``,
    ``deposits``, …), in the output's own folder whatever dots the path holds.
    """
    return os.path.splitext(output)[0] + f".{kind}.gpkg"


def export_features(source, path: str, context, feedback) -> int:
    """Copy the geometries of a feature source into a one-layer GeoPackage at ``path``.

    Only geometries are copied: the distance measure needs nothing else, and
    attribute names that a GeoPackage refuses (a non-integer ``fid``) cannot
    stop the job. The file is written under a temporary name and renamed.

    Returns
    -------
    int
        The number of features written.

    Raises
    ------
    QgsProcessingException
        The file cannot be written, or the user cancelled.
    """
    partial = path + ".partial.gpkg"
    if os.path.exists(partial):
        os.unlink(partial)
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    options.layerName = "features"
    options.fileEncoding = "UTF-8"
    fields = QgsFields()
    writer = QgsVectorFileWriter.create(partial, fields, source.wkbType(), source.sourceCrs(),
                                        context.transformContext(), options)
    if writer.hasError() != QgsVectorFileWriter.NoError:
        message = writer.errorMessage()
        writer = None
        raise QgsProcessingException(f"cannot write the copy of the features to {path}: {message}")
    count = 0
    try:
        for feature in source.getFeatures():
            if feedback.isCanceled():
                raise QgsProcessingException("cancelled by the user; no output was written")
            if not feature.hasGeometry():
                continue
            copy = QgsFeature(fields)
            copy.setGeometry(feature.geometry())
            if not writer.addFeature(copy):
                raise QgsProcessingException(
                    f"cannot write the copy of the features to {path}: {writer.errorMessage()}")
            count += 1
        writer = None  # closes the file
        os.replace(partial, path)
    finally:
        writer = None
        if os.path.exists(partial):
            os.unlink(partial)
    return count


class _Replacement:
    """A file put in place of an earlier one, which comes back if the job fails.

    The copy of the features must sit under its final name while the tree is
    evaluated (the lineage names it), so an earlier copy is moved aside and
    restored on failure, and the user's earlier result keeps its input.
    """

    def __init__(self, path: str) -> None:
        self.path = path
        self.partial = path + ".partial.gpkg"
        self.previous = path + ".previous.gpkg"

    def install(self) -> None:
        """Move an earlier file aside and the new one (written at ``partial``) into place."""
        if os.path.exists(self.path):
            os.replace(self.path, self.previous)
        os.replace(self.partial, self.path)

    def undo(self) -> None:
        """Remove the new file and bring the earlier one back."""
        for path in (self.partial, self.path):
            if os.path.exists(path):
                os.unlink(path)
        if os.path.exists(self.previous):
            os.replace(self.previous, self.path)

    def keep(self) -> None:
        """Drop the earlier file: the new one belongs to the new result."""
        if os.path.exists(self.previous):
            os.unlink(self.previous)


class VectorInput:
    """A vector parameter as a file Favour reads: the layer's own file, or a copy of its features.

    :meth:`prepare` runs in ``prepareAlgorithm`` (main thread, layers may be
    touched); :meth:`resolve` in ``processAlgorithm`` copies the features
    when the layer is not a plain file, and :meth:`kept_on_success` wraps the
    job so a failed run brings back any earlier copy.
    """

    def __init__(self, key: str, plain: tuple[str, str | None] | None, label: str) -> None:
        self.key = key
        self.plain = plain
        self.label = label
        self._copy: _Replacement | None = None

    @classmethod
    def prepare(cls, algorithm, parameters, key: str, context) -> VectorInput:
        """Look at the layer given for ``key`` and remember whether it is a plain file."""
        layer = algorithm.parameterAsVectorLayer(parameters, key, context)
        return cls(key, plain_vector_file(parameters, key, layer), layer.name() if layer else "")

    def resolve(self, algorithm, parameters, context, feedback, copy_path: str
                ) -> tuple[str, str | None]:
        """Return ``(path, layer name)`` to read, copying the features to ``copy_path`` if needed."""
        if self.plain is not None:
            return self.plain
        source = algorithm.parameterAsSource(parameters, self.key, context)
        if source is None:
            raise QgsProcessingException(f"{self.key}: no vector layer was given")
        self._copy = _Replacement(copy_path)
        count = export_features(source, self._copy.partial, context, feedback)
        self._copy.install()
        feedback.pushInfo(f"{self.key}: the layer is not a plain file (a memory layer, a filter or a "
                          f"selection); its {count} feature(s) were copied to {copy_path}, the file "
                          "the lineage records")
        return copy_path, "features"

    @contextmanager
    def kept_on_success(self):
        """Keep the copy if the body succeeds; restore the earlier state if it fails."""
        try:
            yield
        except BaseException:
            if self._copy is not None:
                self._copy.undo()
            raise
        if self._copy is not None:
            self._copy.keep()
