"""Raster and vector I/O with GDAL: grids, alignment, blocks, writing, the evaluation engine.

Nothing here imports qgis (a test enforces it), so the command line and the
processing algorithms share the same code.
"""
