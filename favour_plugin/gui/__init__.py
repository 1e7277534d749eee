"""The dock: a criteria-tree editor inside QGIS.

The dock holds no computation of its own. :mod:`.controller` keeps the tree,
its undo history and the file it came from; every edit goes through it.
Widgets only show and edit that state. Checks, value samples and evaluations
run off the main thread as ``QgsTask`` s (:mod:`.tasks`, :mod:`.problems`,
:mod:`.histogram`, :mod:`.run_job`), and evaluation goes through
``favour:evaluatetree``, the one evaluation path.
"""
