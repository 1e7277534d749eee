"""Figures and documents made from results: charts (matplotlib) and, later, the report.

Nothing here imports qgis (a test enforces it); figures are drawn with
matplotlib's Agg backend, so they are made the same headless, in QGIS and on
the command line.
"""
