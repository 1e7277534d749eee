"""``favour:membership``: one raster band turned into membership μ by a membership function.

The algorithm builds a one-leaf criteria tree in memory and evaluates it
through :func:`favour_plugin.raster.engine.evaluate_tree`, the one evaluation
path, so the output streams in blocks, carries a lineage and can be
reproduced. :class:`MembershipParameters` holds the function parameters that
``favour:distancemembership`` shares.
"""

from __future__ import annotations

import math
import numbers
import re

from qgis.core import (
    QgsProcessingException,
    QgsProcessingOutputFile,
    QgsProcessingParameterBand,
    QgsProcessingParameterEnum,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
)

from ..core.errors import ParameterError
from ..core.membership import parse_membership
from ..core.tree import FORMAT, PATH_SEPARATOR, VERSION, Tree
from ..raster.engine import evaluate_tree
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .layers import raster_layer_path

#: The membership functions an algorithm offers (``identity`` is for μ layers, see favour:combine).
FUNCTIONS = ("linear", "logistic", "gaussian", "trapezoid", "piecewise", "categories")

# Which parameters each function needs, with what they mean, for "missing" messages.
_NEEDS = {
    "linear": (("LOWER", "the value where μ is 0"), ("UPPER", "the value where μ is 1")),
    "logistic": (("MIDPOINT", "the value where μ is 0.5"),
                 ("SLOPE", "the steepness, per unit of the values; negative for a falling curve")),
    "gaussian": (("CENTRE", "the value where μ is 1"), ("SPREAD", "the width, in units of the values")),
    "trapezoid": (("POINTS", "four corner values 'a, b, c, d'"),),
    "piecewise": (("POINTS", "break points 'x:μ, x:μ, ...'"),),
    "categories": (("SCORES", "class scores 'code:μ, code:μ, ...'"),),
}

# Keys of a membership specification and the parameters they come from.
_PARAMETER_OF_KEY = {"lower": "LOWER", "upper": "UPPER", "midpoint": "MIDPOINT", "slope": "SLOPE",
                     "centre": "CENTRE", "spread": "SPREAD", "points": "POINTS", "x": "POINTS",
                     "scores": "SCORES", "default": "DEFAULT"}

_CODE = re.compile(r"^-?[0-9]+(\.[0-9]+)?$")


def _number(text: str, parameter: str, what: str) -> float:
    """Return ``text`` as a finite float or raise naming the parameter."""
    try:
        value = float(text)
    except ValueError:
        raise QgsProcessingException(f"{parameter}: {what} {text.strip()!r} is not a number") from None
    if not math.isfinite(value):
        raise QgsProcessingException(f"{parameter}: {what} {text.strip()!r} is not a finite number")
    return value


def _items(text: str) -> list[str]:
    """Split a comma- or semicolon-separated list, dropping empty items."""
    return [item.strip() for item in re.split(r"[,;]", text) if item.strip()]


def parse_corners(text: str) -> list[float]:
    """Parse POINTS for the trapezoid: ``"a, b, c, d"`` -> four floats.

    Raises
    ------
    QgsProcessingException
        Not four numbers; the message names POINTS.
    """
    items = _items(text)
    if len(items) != 4:
        raise QgsProcessingException(
            f"POINTS: the trapezoid needs four corner values 'a, b, c, d', got {text.strip()!r}")
    return [_number(item, "POINTS", "corner") for item in items]


def parse_pairs(text: str, parameter: str, left: str) -> list[tuple[str, float]]:
    """Parse ``"x:μ, x:μ, ..."`` into ``(x text, μ)`` pairs.

    Parameters
    ----------
    text : str
        The parameter's text.
    parameter : str
        POINTS or SCORES, for messages.
    left : str
        What the left-hand side is ("break value", "class code"), for messages.

    Raises
    ------
    QgsProcessingException
        An item without exactly one ``:`` or a side that is not a number.
    """
    pairs = []
    for item in _items(text):
        parts = item.split(":")
        if len(parts) != 2 or not parts[0].strip() or not parts[1].strip():
            raise QgsProcessingException(
                f"{parameter}: {item!r} is not a pair '{left}:μ'; write e.g. '1:0.2, 2:0.9'")
        _number(parts[0], parameter, left)
        pairs.append((parts[0].strip(), _number(parts[1], parameter, f"μ of {parts[0].strip()}")))
    return pairs


def class_code(text: str) -> str:
    """Return a class code in the tree file's form: ``"3"``, ``"-1"``, ``"2.5"``.

    Raises
    ------
    QgsProcessingException
        The code is not a number, or not one a tree file can hold.
    """
    value = _number(text, "SCORES", "class code")
    code = str(int(value)) if value == int(value) else format(value, "f").rstrip("0")
    if not _CODE.match(code):
        raise QgsProcessingException(f"SCORES: class code {text!r} cannot be written as a plain "
                                     "decimal number")
    return code


def node_name(label: str, fallback: str = "layer") -> str:
    """Return ``label`` usable as a tree node name (non-empty, no path separator)."""
    name = label.replace(PATH_SEPARATOR.strip(), "-").strip()
    return name or fallback


def one_leaf_tree(name: str, root: str, leaf: dict, grid: dict | None = None) -> Tree:
    """Build a tree whose root ("and" over one child) holds ``leaf``, checked like a tree file.

    Going through :meth:`Tree.from_dict` checks the tree against the schema,
    so the tree copied into the lineage is one that ``favour:reproduce`` reads.
    """
    doc = {"format": FORMAT, "version": VERSION, "name": name,
           "root": {"name": root, "operator": {"type": "and"}, "children": [leaf]}}
    if grid is not None:
        doc["grid"] = grid
    return run_guarded(Tree.from_dict, doc)


class MembershipParameters:
    """The FUNCTION parameter and its numbers and lists, shared by the membership algorithms."""

    FUNCTION = "FUNCTION"
    LOWER = "LOWER"
    UPPER = "UPPER"
    MIDPOINT = "MIDPOINT"
    SLOPE = "SLOPE"
    CENTRE = "CENTRE"
    SPREAD = "SPREAD"
    POINTS = "POINTS"
    SCORES = "SCORES"
    DEFAULT = "DEFAULT"

    def add_membership_parameters(self) -> None:
        """Declare FUNCTION and the optional numbers and lists each function reads."""
        self.addParameter(QgsProcessingParameterEnum(
            self.FUNCTION, self.tr("Membership function"), options=list(FUNCTIONS),
            defaultValue=FUNCTIONS[0], usesStaticStrings=True))
        numbers = (
            (self.LOWER, "linear: value where μ is 0"),
            (self.UPPER, "linear: value where μ is 1"),
            (self.MIDPOINT, "logistic: value where μ is 0.5"),
            (self.SLOPE, "logistic: steepness (negative falls)"),
            (self.CENTRE, "gaussian: value where μ is 1"),
            (self.SPREAD, "gaussian: width (standard deviation)"),
        )
        for key, label in numbers:
            self.addParameter(QgsProcessingParameterNumber(
                key, self.tr(label), QgsProcessingParameterNumber.Double, optional=True))
        self.addParameter(QgsProcessingParameterString(
            self.POINTS, self.tr("trapezoid: a, b, c, d   piecewise: x:μ, x:μ, ..."), optional=True))
        self.addParameter(QgsProcessingParameterString(
            self.SCORES, self.tr("categories: code:μ, code:μ, ..."), optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.DEFAULT, self.tr("categories: μ of unlisted codes (empty: nodata)"),
            QgsProcessingParameterNumber.Double, optional=True, minValue=0.0, maxValue=1.0))

    def _optional_number(self, parameters, key: str, context) -> float | None:
        """Return a numeric parameter, or None when it was left empty."""
        raw = parameters.get(key)
        if isinstance(raw, numbers.Real) and not isinstance(raw, bool):
            value = float(raw)  # numpy scalars too, which QGIS's variant conversion drops
        elif not self.parameterAsString(parameters, key, context).strip():
            return None
        else:
            value = self.parameterAsDouble(parameters, key, context)
        if not math.isfinite(value):
            raise QgsProcessingException(f"{key}: must be a finite number, got {value!r}")
        return value

    def membership_spec(self, parameters, context) -> dict:
        """Read FUNCTION and its parameters into a checked membership specification.

        Raises
        ------
        QgsProcessingException
            A parameter the function needs is empty or unusable; the message
            names the parameter.
        """
        kind = self.parameterAsEnumString(parameters, self.FUNCTION, context)
        if kind not in FUNCTIONS:
            raise QgsProcessingException(
                f"FUNCTION: {kind!r} is not a membership function; use one of {', '.join(FUNCTIONS)}")
        texts = {key: self.parameterAsString(parameters, key, context).strip()
                 for key in (self.POINTS, self.SCORES)}
        for key, meaning in _NEEDS[kind]:
            if key in texts:
                empty = not texts[key]
            else:
                empty = self._optional_number(parameters, key, context) is None
            if empty:
                raise QgsProcessingException(f"{key}: the {kind} function needs {meaning}; it is empty")

        spec: dict = {"type": kind}
        if kind == "linear":
            spec["lower"] = self._optional_number(parameters, self.LOWER, context)
            spec["upper"] = self._optional_number(parameters, self.UPPER, context)
        elif kind == "logistic":
            spec["midpoint"] = self._optional_number(parameters, self.MIDPOINT, context)
            spec["slope"] = self._optional_number(parameters, self.SLOPE, context)
        elif kind == "gaussian":
            spec["centre"] = self._optional_number(parameters, self.CENTRE, context)
            spec["spread"] = self._optional_number(parameters, self.SPREAD, context)
        elif kind == "trapezoid":
            spec["points"] = parse_corners(texts[self.POINTS])
        elif kind == "piecewise":
            spec["points"] = [[float(x), mu] for x, mu in
                              parse_pairs(texts[self.POINTS], self.POINTS, "break value")]
        else:
            scores = {}
            for code, mu in parse_pairs(texts[self.SCORES], self.SCORES, "class code"):
                key = class_code(code)
                if key in scores:
                    raise QgsProcessingException(f"SCORES: class code {code} is listed twice")
                scores[key] = mu
            spec["scores"] = scores
            spec["default"] = self._optional_number(parameters, self.DEFAULT, context)
        try:
            parse_membership(spec)
        except ParameterError as exc:
            raise QgsProcessingException(f"{exc} (parameter {', '.join(_parameters_named(exc, kind))})"
                                         ) from None
        return spec


def _parameters_named(exc: ParameterError, kind: str) -> list[str]:
    """Return the parameters a membership message is about (its quoted keys, else the function's)."""
    text = str(exc)
    named = [_PARAMETER_OF_KEY[key] for key in _PARAMETER_OF_KEY if f"'{key}'" in text]
    if kind == "categories" and not named:
        named = ["SCORES"]
    return list(dict.fromkeys(named)) or [key for key, _ in _NEEDS[kind]]


class MembershipAlgorithm(MembershipParameters, FavourAlgorithm):
    """Turn one raster band into a membership μ raster."""

    INPUT = "INPUT"
    BAND = "BAND"
    OUTPUT = "OUTPUT"
    LINEAGE = "LINEAGE"

    NAME = "membership"
    DISPLAY = "Raster to membership"
    HELP = ("Turns the values of one raster band into membership μ between 0 and 1 with the "
            "chosen function. linear: a ramp from μ 0 at LOWER to μ 1 at UPPER (swap them for a "
            "falling ramp). logistic: an S-curve with μ 0.5 at MIDPOINT and steepness SLOPE. "
            "gaussian: a bell with μ 1 at CENTRE and width SPREAD. trapezoid: POINTS 'a, b, c, d', "
            "rising from a to b, 1 to c, falling to d. piecewise: POINTS 'x:μ, x:μ, ...' joined by "
            "straight lines. categories: SCORES 'code:μ, ...' for class codes; other codes get "
            "DEFAULT, or nodata when it is empty. Nodata stays nodata. Writes the μ raster, its "
            "style and a lineage record (<output>.lineage.json) that Reproduce can check.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterRasterLayer(self.INPUT, self.tr("Raster layer")))
        # Optional so that a run which leaves BAND out reads band 1 (QGIS 3.22 does not
        # fall back on a band parameter's default when it checks the values).
        self.addParameter(QgsProcessingParameterBand(
            self.BAND, self.tr("Band"), defaultValue=1, parentLayerParameterName=self.INPUT,
            optional=True))
        self.add_membership_parameters()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Membership")))
        self.add_compression()
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the raster's file in the main thread, where layers may be touched."""
        layer = self.parameterAsRasterLayer(parameters, self.INPUT, context)
        self._path = raster_layer_path(layer, self.INPUT)
        self._label = node_name(layer.name())
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, evaluate the one-leaf tree, return the outputs."""
        band = self.parameterAsInt(parameters, self.BAND, context) or 1
        spec = self.membership_spec(parameters, context)
        output = self.parameterAsOutputLayer(parameters, self.OUTPUT, context)
        note_temporary(feedback, output)
        leaf = {"name": self._label, "proxy": {"path": self._path, "band": band},
                "membership": spec}
        tree = one_leaf_tree(f"Membership of {self._label}", "Membership", leaf)
        result = run_guarded(evaluate_tree, tree, output, None, ProcessingFeedback(feedback),
                             job="membership", compress=self.compression_from(parameters, context))
        style_on_load(context, result.output)
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file}
