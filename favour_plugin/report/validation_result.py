"""What the targets job and the report read from a validation result (the JSON the validation job writes).

Every key read from that file is named here, in :data:`KEYS`, and nowhere
else, so a change of the validation job's format is met in one place. A
result lacking a part (no hold-out, say) gives ``None`` for it and the report
leaves that figure out, saying so.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

from ..core.errors import InputError
from ..core.jsonio import LINEAGE_MAX_BYTES, read_json_file

#: The keys read from the validation result (raster/validation_jobs.py ``validate``), by what they hold.
KEYS = {
    "auc": "auc",                    # AUC of the first set's curve
    "auc_ci": "auc_ci",              # [low, high], the bootstrap interval
    "n_deposits": "n_deposits",
    "crossing": "pa_crossing",       # [P %, A %]: P % of the deposits in A = (100 − P) % of the area
    "nd": "nd",                      # P / (100 − P)
    "crossing_threshold": "pa_threshold",  # {"value": the map's value there, "area_percent", …}
    "capture": "capture",            # [{"top_area_percent", "deposits_percent"}, …]
    "sets": "sets",                  # one entry per deposit set (used, held out), each with:
    "set_label": "set",              # . its name,
    "set_curve": "curve",            # . "success-rate" or "prediction-rate",
    "set_points": "points",          # . {"area_percent": [...], "deposits_percent": [...]},
    "set_pa": "pa_plot",             # . {"threshold", "area_percent", "prediction_percent"}: lists
    "notes": "warnings",             # [{"category", "message"}, …]
}
#: The curve names of a set, and what the report calls them.
CURVE_NAMES = {"success-rate": "success_curve", "prediction-rate": "prediction_curve"}
#: Keys inside a set's points and P–A plot.
CURVE_KEYS = {"area": "area_percent", "deposits": "deposits_percent"}
PA_KEYS = {"threshold": "threshold", "prediction": "prediction_percent", "area": "area_percent"}


@dataclass
class Crossing:
    """The prediction–area crossing: P % of the deposits in (100 − P) % of the area, at a threshold."""

    prediction_percent: float
    area_percent: float
    threshold: float | None = None
    nd: float | None = None


@dataclass
class ValidationView:
    """The parts of a validation result the targets and the report use."""

    path: str
    auc: float | None = None
    auc_ci: tuple[float, float] | None = None
    n_deposits: int | None = None
    crossing: Crossing | None = None
    curves: dict[str, dict[str, list[float]]] = field(default_factory=dict)
    capture: dict[str, float] = field(default_factory=dict)  # top area % (text) -> deposits %
    pa_curve: dict[str, list[float]] | None = None
    notes: list[str] = field(default_factory=list)
    raw: dict = field(default_factory=dict)


def _number(value) -> float | None:
    """Return a finite float, else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        return None
    return float(value)


def _numbers(value) -> list[float] | None:
    """Return a list of finite floats, else None."""
    if not isinstance(value, list) or not value:
        return None
    out = [_number(v) for v in value]
    return None if any(v is None for v in out) else out


def _crossing(doc: dict) -> Crossing | None:
    """Read the crossing [P %, A %], with Nd and the map's value there when the result has them."""
    pair = _numbers(doc.get(KEYS["crossing"]))
    if pair is None or len(pair) < 2:
        return None
    at = doc.get(KEYS["crossing_threshold"])
    threshold = _number(at.get("value")) if isinstance(at, dict) else _number(at)
    return Crossing(pair[0], pair[1], threshold, _number(doc.get(KEYS["nd"])))


def _curve(value, keys: dict[str, str]) -> dict[str, list[float]] | None:
    """Read a curve: an object of equally long lists of numbers."""
    if not isinstance(value, dict):
        return None
    out = {}
    for name, key in keys.items():
        numbers = _numbers(value.get(key))
        if numbers is None:
            return None
        out[name] = numbers
    return out if len({len(v) for v in out.values()}) == 1 else None


def read_validation(path: str) -> ValidationView:
    """Read a validation result and return the parts Favour uses.

    Raises
    ------
    InputError
        The file cannot be read as JSON (missing, not a plain file, not
        UTF-8 JSON) or is not a JSON object.
    """
    path = os.path.abspath(path)
    doc = read_json_file(path, max_bytes=LINEAGE_MAX_BYTES, error=InputError, what="validation result",
                         kind="validation result")
    if not isinstance(doc, dict):
        raise InputError(f"the validation result {path} is not a JSON object")
    view = ValidationView(path=path, raw=doc)
    view.auc = _number(doc.get(KEYS["auc"]))
    ci = _numbers(doc.get(KEYS["auc_ci"]))
    view.auc_ci = (ci[0], ci[1]) if ci is not None and len(ci) == 2 else None
    count = doc.get(KEYS["n_deposits"])
    view.n_deposits = count if isinstance(count, int) and not isinstance(count, bool) else None
    view.crossing = _crossing(doc)
    sets = doc.get(KEYS["sets"])
    for entry in sets if isinstance(sets, list) else ():
        if not isinstance(entry, dict):
            continue
        name = CURVE_NAMES.get(entry.get(KEYS["set_curve"]))
        curve = _curve(entry.get(KEYS["set_points"]), CURVE_KEYS)
        if name and curve is not None and name not in view.curves:
            auc = _number(entry.get(KEYS["auc"]))
            view.curves[name] = {**curve, **({"auc": [auc]} if auc is not None else {}),
                                 "label": str(entry.get(KEYS["set_label"], ""))}
        if view.pa_curve is None:
            view.pa_curve = _curve(entry.get(KEYS["set_pa"]), PA_KEYS)
    capture = doc.get(KEYS["capture"])
    for item in capture if isinstance(capture, list) else ():
        if isinstance(item, dict):
            top, share = _number(item.get("top_area_percent")), _number(item.get("deposits_percent"))
            if top is not None and share is not None:
                view.capture[f"{top:g}"] = share
    notes = doc.get(KEYS["notes"])
    if isinstance(notes, list):
        view.notes = [n if isinstance(n, str) else str(n.get("message", n)) if isinstance(n, dict) else str(n)
                      for n in notes]
    return view
