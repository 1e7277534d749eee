"""Errors and warnings raised by Favour.

Every error derives from :class:`FavourError` and also from the builtin it
resembles, so callers may catch either. Messages name the broken condition and
the values involved; where a tree node is at fault the message starts with the
node's path (``Favourability > Source > Mafic host: ...``).
"""


class FavourError(Exception):
    """Root of every error Favour raises on purpose."""


class TreeFileError(FavourError, ValueError):
    """A tree file cannot be read: bad JSON, a schema violation, a future version."""


class ParameterError(FavourError, ValueError):
    """A membership, operator or algorithm parameter is missing or out of range."""


class SheetError(FavourError, ValueError):
    """A workshop score sheet cannot be imported; the message names the file, row and column."""


class GridError(FavourError, ValueError):
    """A grid cannot be defined or a layer cannot be placed on it (no CRS, no overlap)."""


class GridMismatchError(GridError):
    """Arrays or rasters that must share one grid do not."""


class InputError(FavourError, ValueError):
    """An input layer is unusable: no features, all nodata, values out of range."""


class MissingInputError(FavourError, FileNotFoundError):
    """An input file named by a tree or a lineage record does not exist."""


class OutputError(FavourError, OSError):
    """An output cannot be written where it was asked for."""


class LineageError(FavourError, ValueError):
    """A lineage record is missing, unreadable or from a future version."""


class CancelledError(FavourError, RuntimeError):
    """The user cancelled a long operation; nothing was written under the final name."""


class FavourWarning(UserWarning):
    """Root of the recoverable conditions Favour reports and carries on from."""


class AlignmentWarning(FavourWarning):
    """A proxy was resampled or reprojected onto the reference grid."""


class NodataWarning(FavourWarning):
    """Part of an input or output is nodata in a way the user should know about."""


class SmallSampleWarning(FavourWarning):
    """A statistic rests on so few cells or deposits that it is fragile."""
