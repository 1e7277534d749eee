"""Weights of evidence: weights, contrast, best cut, posterior probability, independence checks.

The statistics rest on counts in unit cells, and counts stream in block by
block: a raster layer feeds :class:`ClassCounts` (one evidence layer) or
:class:`ConditionCounts` (several layers at once) with one block of class
codes and deposit counts at a time, and nothing that grows with the grid is
held. Everything after counting works on the small per-class or
per-condition tables.

Modules
-------
``rules``         constants shared by the others (kinds, limits, table columns)
``counts``        :class:`ClassCounts`: cells and deposits per class, block by block
``table``         :func:`pattern_weights` and :class:`WeightsTable` of one layer
``patterns``      the best cut, generalised classes, :class:`LayerWeights`
``posterior``     the prior, :func:`posterior_block` and s(P)
``independence``  :class:`ConditionCounts` and the independence tests

Every public name is importable from this package as before.

Counting rules
--------------
Study area
    Cells where ``area_mask`` is False are outside the study area and count
    for nothing; deposits there are counted as ``outside_deposits`` and
    reported.
Deposit cells
    A deposit layer comes in as the number of deposit points per cell. A cell
    holding one or more deposits counts once, as one deposit cell (the
    weights model one deposit per unit cell at most); the extra points are
    counted as ``merged_deposits`` and reported.
Missing evidence (nodata, NaN in core)
    Weights of a layer are computed over the area where that layer is known:
    its own N and n_D. Cells and deposits on nodata are counted
    (``nodata_cells``, ``nodata_deposit_cells``) and reported, never dropped.
    In the posterior a missing layer has weight 0 and adds the missing-data
    variance of Agterberg, Bonham-Carter & Wright (1990) [ABW90]_.
Areas
    area in unit cells = cells × ``cell_area_km2`` / ``unit_cell_km2``.
    The caller converts the grid's cell area to km² (m² or CRS units² times
    a factor) before calling.

Counts of one pattern, following Bonham-Carter (1994, ch. 9) [BC94]_:

====  ===================================================
a     deposits on the pattern
b     area on the pattern without deposits (unit cells)
c     deposits off the pattern
d     area off the pattern without deposits (unit cells)
====  ===================================================

so that n_D = a + c and N − n_D = b + d over the known area.

Undefined weights
-----------------
A weight is undefined when a count it needs is zero or negative: no
deposits on (a = 0) or off (c = 0) the pattern, or no deposit-free unit
cells (b ≤ 0 or d ≤ 0, which also means the unit cell may be too large).
Such a row carries ``None`` in the undefined columns, ``flag = "undefined"``
and a ``note`` that says why; no ±inf or NaN reaches a table. Only when the
caller asks (``small_count="haldane"``) are 0.5 added to each of a, b, c and
d of a row with a zero count, the Haldane–Anscombe correction [Hal56]_
[Ans56]_; the row is then flagged ``"adjusted"``. Rows whose pattern is
empty or covers the whole known area are structural (there is nothing to
contrast) and are never adjusted.

References
----------
Listed here once; details marked "(from memory)" were recalled, not looked up.

.. [ABW90] Agterberg, F.P., Bonham-Carter, G.F. and Wright, D.F. (1990).
   Statistical pattern integration for mineral exploration. In Gaál, G. and
   Merriam, D.F. (eds), Computer Applications in Resource Estimation:
   Prediction and Assessment for Metals and Petroleum. Pergamon, Oxford,
   1–21. (from memory: pages; the missing-data variance formula.)
.. [BC94] Bonham-Carter, G.F. (1994). Geographic Information Systems for
   Geoscientists: Modelling with GIS. Pergamon, Oxford. Chapter 9.
   (from memory: the prior variance, the s(P) ≈ P·s(logit) practice and the
   n/T < 0.85 rule of thumb.)
.. [AC02] Agterberg, F.P. and Cheng, Q. (2002). Conditional independence
   test for weights-of-evidence modeling. Natural Resources Research 11(4),
   249–255. (from memory: volume and pages; s²(T) = Σ N_k² s²(P_k).)
.. [Agt14] Agterberg, F.P. (2014). Geomathematics: Theoretical Foundations,
   Applications and Future Developments. Springer, Cham. (from memory: the
   worked figure s(logit) = 0.401 at P = 0.069, s(P) ≈ 0.028.)
.. [Woo55] Woolf, B. (1955). On estimating the relation between blood group
   and disease. Annals of Human Genetics 19, 251–253.
.. [Hal56] Haldane, J.B.S. (1956). The estimation and significance of the
   logarithm of a ratio of frequencies. Annals of Human Genetics 20,
   309–311. (from memory)
.. [Ans56] Anscombe, F.J. (1956). On estimating binomial response
   relations. Biometrika 43, 461–464. (from memory)
.. [Yat34] Yates, F. (1934). Contingency tables involving small numbers and
   the χ² test. Supplement to the Journal of the Royal Statistical Society
   1, 217–235. (from memory)
.. [Coc54] Cochran, W.G. (1954). Some methods for strengthening the common
   χ² tests. Biometrics 10, 417–451. (from memory: the "expected counts of
   at least 5" rule.)
"""

from __future__ import annotations

from .counts import (
    ClassCounts,
    code_by_breaks,
)
from .independence import (
    ConditionCounts,
    conditional_independence,
    overall_independence,
    pairwise_independence,
)
from .patterns import (
    NEGATIVE,
    NEUTRAL,
    POSITIVE,
    BestCut,
    Generalisation,
    LayerWeights,
    best_cut,
    generalise,
    layer_weights,
    weights_membership,
)
from .posterior import (
    PosteriorBlock,
    Prior,
    posterior_block,
    s_probability,
    study_prior,
)
from .rules import (
    CI_RATIO_RULE,
    COLUMNS,
    DEFAULT_LEVEL,
    KINDS,
    MAX_CLASSES,
    MAX_CONDITIONS,
    MIN_EXPECTED,
    S_P_RULES,
    SMALL_COUNT_RULES,
    TABLE_SCHEMA_FILE,
)
from .table import (
    CSV_COLUMNS,
    WeightsTable,
    pattern_weights,
    report_table,
    unit_cells,
    weights_table,
)

__all__ = [
    "CI_RATIO_RULE",
    "COLUMNS",
    "CSV_COLUMNS",
    "DEFAULT_LEVEL",
    "KINDS",
    "MAX_CLASSES",
    "MAX_CONDITIONS",
    "MIN_EXPECTED",
    "NEGATIVE",
    "NEUTRAL",
    "POSITIVE",
    "SMALL_COUNT_RULES",
    "S_P_RULES",
    "TABLE_SCHEMA_FILE",
    "BestCut",
    "ClassCounts",
    "ConditionCounts",
    "Generalisation",
    "LayerWeights",
    "PosteriorBlock",
    "Prior",
    "WeightsTable",
    "best_cut",
    "code_by_breaks",
    "conditional_independence",
    "generalise",
    "layer_weights",
    "overall_independence",
    "pairwise_independence",
    "pattern_weights",
    "posterior_block",
    "report_table",
    "s_probability",
    "study_prior",
    "unit_cells",
    "weights_membership",
    "weights_table",
]
