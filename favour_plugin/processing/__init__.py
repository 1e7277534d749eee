"""Favour's processing provider (id ``favour``): thin algorithms over core and raster."""
