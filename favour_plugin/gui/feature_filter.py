"""What a vector criterion's feature filter can choose from, read off the main thread.

:func:`read_choices` opens the layer's file and returns the fields a filter
can compare (numbers and text) and, for the chosen field, its distinct
values (:func:`~favour_plugin.raster.vector.distinct_values`: a streamed read
of that one field, bounded in features and values). :func:`choice_service`
runs it as a task per (file, layer, field) and keeps the answers, so going
back to a criterion shows its values at once.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..raster.gdalenv import gdal_job
from ..raster.vector import distinct_values, filterable_fields, read_layer_facts
from .common import tr
from .tasks import KeyedTasks

#: Most values listed to tick; a field with more is not a set of classes.
MAX_VALUES = 500


@dataclass(frozen=True)
class FilterChoices:
    """The fields a filter can use (name → "number" or "text") and the chosen field's values.

    ``complete`` is False when the read stopped before the end of the layer
    (more than :data:`MAX_VALUES` values, or a very large layer): the values
    listed are those found first.
    """

    fields: dict
    values: tuple
    complete: bool = True


def read_choices(path: str, layer: str | None, field: str | None) -> FilterChoices:
    """Return the filterable fields of a vector layer and the distinct values of ``field`` (worker thread).

    Raises
    ------
    FavourError
        The file or layer cannot be read, or it has no field ``field``.
    """
    with gdal_job():
        fields = filterable_fields(read_layer_facts(path, layer, "layer"))
        if not field or field not in fields:
            return FilterChoices(fields, ())
        values, complete = distinct_values(path, layer, field, MAX_VALUES)
    return FilterChoices(fields, tuple(values), complete)


def choice_service(parent=None) -> KeyedTasks:
    """Return a keeper of :func:`read_choices` answers by (file, layer, field), read in tasks."""
    return KeyedTasks(read_choices, tr("Favour: reading the fields and values of {0}"), parent)
