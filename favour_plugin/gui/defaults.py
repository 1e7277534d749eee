"""Starting parameters for a membership function, from the range of the proxy's values.

When a criterion gets a layer, or its function type changes, the form starts
from parameters that span the data rather than from numbers that mean nothing
for this layer. The geologist then sets them; these are only a start.
"""

from __future__ import annotations

import math

from ..core.membership import MEMBERSHIP_TYPES

#: Distance (map units) over which a new distance proxy falls from μ 1 to 0: a start only.
DISTANCE_START = 1000.0


def _round(value: float) -> float:
    """Round to three significant figures, so the form shows tidy numbers."""
    if value == 0 or not math.isfinite(value):
        return 0.0
    digits = 2 - math.floor(math.log10(abs(value)))
    rounded = round(value, digits)
    return int(rounded) if float(rounded).is_integer() else rounded


def starting_membership(kind: str, low: float, high: float, classes=None, falling: bool = False) -> dict:
    """Return a membership of type ``kind`` spanning ``[low, high]`` (proxy units).

    ``falling`` makes μ high at ``low`` (nearness to features, say).
    ``classes`` (codes) fill a ``categories`` table (every class at 0.5) or a
    ``weights`` table (every weight 0, which is μ 0.5).
    """
    if kind not in MEMBERSHIP_TYPES:
        raise ValueError(f"unknown membership type {kind!r}")
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        low, high = 0.0, 1.0
    span = high - low
    a, b = (_round(high), _round(low)) if falling else (_round(low), _round(high))
    if a == b:
        a, b = (low, high) if not falling else (high, low)
    mid = _round(low + span / 2)
    if kind == "linear":
        return {"type": "linear", "lower": a, "upper": b}
    if kind == "logistic":
        slope = _round((-8.0 if falling else 8.0) / span)
        return {"type": "logistic", "midpoint": mid, "slope": slope}
    if kind == "gaussian":
        return {"type": "gaussian", "centre": _round(low) if falling else mid,
                "spread": _round(span / 4) or 1}
    if kind == "trapezoid":
        points = sorted(_round(low + f * span) for f in (0.0, 0.25, 0.75, 1.0))
        return {"type": "trapezoid", "points": points}
    if kind == "piecewise":
        first, last = (1.0, 0.0) if falling else (0.0, 1.0)
        return {"type": "piecewise", "points": [[_round(low), first], [_round(high), last]]}
    if kind == "categories":
        codes = sorted(classes or [])
        return {"type": "categories", "scores": {code_key(c): 0.5 for c in codes}, "default": None}
    if kind == "weights":  # W = 0 says nothing: μ 0.5 until weights are counted or set
        codes = sorted(classes or [])
        return {"type": "weights", "weights": {code_key(c): 0.0 for c in codes}, "default": None}
    if kind == "identity":
        return {"type": "identity"}
    raise ValueError(f"no starting parameters for membership type {kind!r}")


def code_key(code: float) -> str:
    """Return a class code as the tree file writes it ("3", not "3.0")."""
    code = float(code)
    return str(int(code)) if code.is_integer() else repr(code)


def starting_for_proxy(is_vector: bool, low: float | None = None, high: float | None = None) -> dict:
    """Return the membership a new criterion starts with: a ramp over the data or the distance."""
    if is_vector:
        return starting_membership("linear", 0.0, DISTANCE_START, falling=True)
    if low is None or high is None:
        return starting_membership("linear", 0.0, 1.0)
    return starting_membership("linear", low, high)
