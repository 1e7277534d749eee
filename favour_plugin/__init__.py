"""Favour, a QGIS plugin for knowledge-driven mineral-systems favourability mapping."""


def classFactory(iface):  # noqa: N802 (the name QGIS calls)
    """Return the plugin object QGIS loads; ``iface`` is None under qgis_process."""
    from .plugin import FavourPlugin

    return FavourPlugin(iface)
