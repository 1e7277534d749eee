"""Figures and documents made from results: charts, maps and the report, drawn with matplotlib.

``charts`` (tornado chart, rate curves, prediction–area plot), ``figures``
(maps), ``tree_figures`` (the tree diagram, membership curves), ``html`` and
``sections`` (the self-contained report page) and ``validation_result`` (the
keys read from a validation result). Nothing here imports qgis (a test
enforces it); figures are drawn with matplotlib's Agg backend, so they are
made the same headless, in QGIS and on the command line. The report job that
reads the rasters is :mod:`favour_plugin.raster.report_jobs`.
"""
