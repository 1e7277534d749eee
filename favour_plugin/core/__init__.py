"""The science of Favour: memberships, fuzzy overlay, the criteria tree, lineage.

Everything here takes and returns numpy arrays or plain Python data. Nothing
here imports qgis, osgeo or Qt (a test enforces it).
"""
