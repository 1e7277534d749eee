"""Weights-of-evidence jobs on rasters: an evidence layer's weights table, and the posterior map.

:func:`evidence_weights` counts one evidence raster against deposit points
(block by block), writes the weights table (CSV), the best cut or the
generalised classes as a raster with its own table, and a lineage record.
:func:`posterior` combines generalised evidence rasters into the posterior
probability per unit cell and its standard deviation, with the
conditional-independence checks in an HTML report.

Both follow the engine's rules: outputs are checked before any work,
written to temporary files and renamed only on success; progress and cancel
reach every block; every input is hashed into the lineage.

Modules: ``weights`` (:func:`evidence_weights`), ``posterior``
(:func:`posterior`, :func:`read_weights_table`, :func:`count_conditions`)
and ``common`` (output checks and the lineage record both share).
"""

from __future__ import annotations

from .posterior import (
    PosteriorResult,
    count_conditions,
    posterior,
    read_weights_table,
    unique_names,
)
from .weights import (
    AUTO_BREAKS,
    EvidenceResult,
    evidence_weights,
)

__all__ = [
    "AUTO_BREAKS",
    "EvidenceResult",
    "PosteriorResult",
    "count_conditions",
    "evidence_weights",
    "posterior",
    "read_weights_table",
    "unique_names",
]
