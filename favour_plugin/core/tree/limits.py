"""What a tree file may hold: its format, the node and tree keys, and the size limits.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

FORMAT = "favour-tree"
VERSION = 1
SCHEMA_FILE = "tree-v1.schema.json"
COMPONENTS = ("source", "pathway", "trap", "preservation")
PATH_SEPARATOR = " > "

NODE_KEYS = {"name", "component", "rationale", "weight", "save_output", "operator",
              "children", "proxy", "membership"}
TREE_KEYS = {"format", "version", "name", "description", "grid", "root"}

#: Deepest tree read, in levels of nodes (the root is level 1). A mineral-systems
#: model is about 5 deep: root, component, criterion, sub-criterion, proxy
#: (common practice, no source).
MAX_DEPTH = 32

#: Most nodes a tree may hold; a model a person can argue for has tens
#: (common practice, no source).
MAX_NODES = 1000

#: Largest magnitude of a number in a node's operator, membership, weight or
#: band, and in the grid: far beyond any map coordinate, distance or value,
#: yet small enough that sums and products of such numbers stay finite
#: (common practice, no source).
MAX_MAGNITUDE = 1e15

#: Largest raster side in cells (GDAL's raster sizes and band numbers are C ints).
MAX_CELLS_PER_SIDE = 2**31 - 1
