"""Membership functions: a proxy's values turned into fuzzy membership μ in [0, 1].

Every function is vectorised over a numpy array of any shape, returns float64
of the same shape, and maps NaN (nodata) to NaN. Parameters are validated by
:func:`parse_membership`, which names the bad value; the functions themselves
assume valid parameters.

References are listed once, with DOIs, in ``help/references.md``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy.special import expit

from .errors import InputError, ParameterError

# Tolerance on μ for the identity membership: a μ raster written as float32
# may carry rounding a little outside [0, 1].
IDENTITY_TOLERANCE = 1e-6


def linear(x: np.ndarray, lower: float, upper: float) -> np.ndarray:
    """Linear ramp from μ = 0 at ``lower`` to μ = 1 at ``upper``, clamped.

    Parameters
    ----------
    x : ndarray
        Proxy values, in the proxy's units; NaN is nodata.
    lower, upper : float
        Values (proxy units) where μ is 0 and 1. ``lower > upper`` gives a
        falling ramp (μ = 1 at ``upper``, the smaller value). Must differ.

    Returns
    -------
    ndarray of float64
        μ in [0, 1], NaN where ``x`` is NaN.

    Notes
    -----
    μ(x) = clip((x − lower) / (upper − lower), 0, 1).
    The linear fuzzy membership of Bonham-Carter (1994, ch. 9) [BC94]_.
    """
    mu = np.subtract(np.asarray(x, dtype=np.float64), lower)
    with np.errstate(over="ignore"):  # a very steep ramp overflows to ±inf, clamped to 0 or 1
        np.divide(mu, upper - lower, out=mu)
    # In place and NaN-preserving; np.clip does the same several times slower.
    np.maximum(mu, 0.0, out=mu)
    return np.minimum(mu, 1.0, out=mu)


def logistic(x: np.ndarray, midpoint: float, slope: float) -> np.ndarray:
    """Logistic (sigmoid) membership: μ = 1 / (1 + exp(−slope · (x − midpoint))).

    Parameters
    ----------
    x : ndarray
        Proxy values; NaN is nodata.
    midpoint : float
        Value (proxy units) where μ = 0.5.
    slope : float
        Steepness in 1/proxy units; negative for a falling curve. Not zero.

    Returns
    -------
    ndarray of float64
        μ in (0, 1), NaN where ``x`` is NaN.

    Notes
    -----
    The sigmoid membership of fuzzy-set practice (Zimmermann 2001) [Zim01]_,
    the same curve as scikit-fuzzy's ``sigmf(x, b=midpoint, c=slope)``.
    Evaluated with ``scipy.special.expit`` so large |slope·(x − midpoint)|
    does not overflow.
    """
    x = np.asarray(x, dtype=np.float64)
    return expit(slope * (x - midpoint))


def gaussian(x: np.ndarray, centre: float, spread: float) -> np.ndarray:
    """Gaussian membership: μ = exp(−(x − centre)² / (2 · spread²)).

    Parameters
    ----------
    x : ndarray
        Proxy values; NaN is nodata.
    centre : float
        Value (proxy units) where μ = 1.
    spread : float
        Standard-deviation-like width in proxy units; positive.

    Returns
    -------
    ndarray of float64
        μ in (0, 1], NaN where ``x`` is NaN.

    Notes
    -----
    The Gaussian membership of fuzzy-set practice (Zimmermann 2001) [Zim01]_,
    the same curve as scikit-fuzzy's ``gaussmf(x, mean=centre, sigma=spread)``.
    """
    mu = np.subtract(np.asarray(x, dtype=np.float64), centre)
    np.multiply(mu, mu, out=mu)
    np.divide(mu, -2.0 * spread * spread, out=mu)
    return np.exp(mu, out=mu)


def trapezoid(x: np.ndarray, a: float, b: float, c: float, d: float) -> np.ndarray:
    """Trapezoidal membership: 0 below ``a``, rising to 1 at ``b``, 1 to ``c``, 0 at ``d``.

    Parameters
    ----------
    x : ndarray
        Proxy values; NaN is nodata.
    a, b, c, d : float
        Corner values in proxy units, ``a <= b <= c <= d`` and ``a < d``.
        ``a == b`` (or ``c == d``) gives a vertical edge with μ = 1 at the edge.
        ``b == c`` gives a triangle.

    Returns
    -------
    ndarray of float64
        μ in [0, 1], NaN where ``x`` is NaN.

    Notes
    -----
    μ = max(0, min((x − a)/(b − a), 1, (d − x)/(d − c))), with a vertical edge
    taken as 1 on and inside it. The trapezoidal membership of fuzzy-set
    practice (Zimmermann 2001) [Zim01]_, as scikit-fuzzy's ``trapmf``.
    """
    x = np.asarray(x, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        rise = np.ones_like(x) if b == a else (x - a) / (b - a)
        fall = np.ones_like(x) if d == c else (d - x) / (d - c)
    mu = np.clip(np.minimum(rise, fall), 0.0, 1.0)
    mu = np.where((x < a) | (x > d), 0.0, mu)
    return np.where(np.isnan(x), np.nan, mu)


def piecewise(x: np.ndarray, xs: np.ndarray, mus: np.ndarray) -> np.ndarray:
    """Piecewise-linear membership through the points (xs[i], mus[i]), clamped at the ends.

    Parameters
    ----------
    x : ndarray
        Proxy values; NaN is nodata.
    xs : ndarray
        Strictly increasing break values, proxy units.
    mus : ndarray
        μ at each break, each in [0, 1].

    Returns
    -------
    ndarray of float64
        μ in [0, 1], NaN where ``x`` is NaN.

    Notes
    -----
    Linear interpolation between breaks (``numpy.interp``); below the first
    break μ = mus[0], above the last μ = mus[-1]. A general form of the
    expert-drawn membership curves of Bonham-Carter (1994, ch. 9) [BC94]_.
    """
    x = np.asarray(x, dtype=np.float64)
    return np.interp(x, xs, mus)


def categories(x: np.ndarray, codes: np.ndarray, scores: np.ndarray, default: float) -> np.ndarray:
    """Class scores: each class code gets the expert's μ; other codes get ``default``.

    Parameters
    ----------
    x : ndarray
        Class codes (a categorical grid read as floats); NaN is nodata.
    codes : ndarray
        Sorted unique class codes that have a score.
    scores : ndarray
        μ for each code, in [0, 1].
    default : float
        μ for any code not listed; NaN makes unlisted codes nodata.

    Returns
    -------
    ndarray of float64
        μ per cell, NaN where ``x`` is NaN.

    Notes
    -----
    The multi-class score map of knowledge-driven overlay (Bonham-Carter
    1994, ch. 9) [BC94]_. Codes match exactly; a lookup by binary search keeps
    it vectorised.
    """
    x = np.asarray(x, dtype=np.float64)
    out = np.full(x.shape, default, dtype=np.float64)
    if codes.size:
        index = np.clip(np.searchsorted(codes, x), 0, codes.size - 1)
        hit = codes[index] == x
        out[hit] = scores[index[hit]]
    out[np.isnan(x)] = np.nan
    return out


def weights_score(x: np.ndarray, codes: np.ndarray, weights: np.ndarray, default: float) -> np.ndarray:
    """Class weights of evidence turned into membership: μ = 1 / (1 + exp(−W)) of each class's weight.

    Parameters
    ----------
    x : ndarray
        Class codes of the evidence layer; NaN is nodata.
    codes : ndarray
        Sorted class codes that have a weight.
    weights : ndarray
        The weight W of each class (a log ratio, natural logarithm): W+ of
        the pattern, W− outside it, or each class's W+ for categorical evidence.
    default : float
        μ for codes without a weight; NaN makes them nodata.

    Returns
    -------
    ndarray of float64
        μ in (0, 1), NaN where ``x`` is NaN.

    Notes
    -----
    A hybrid of the data-driven and knowledge-driven methods: weights of
    evidence counted where deposits are known (an analogue district) score
    the same evidence in greenfield ground, and the fuzzy tree combines them
    with expert-scored criteria, in the spirit of the hybrid fuzzy
    weights-of-evidence model of Porwal, Carranza & Hale (2006) [PCH06]_
    (from memory; the transform there may differ). The transform is our
    choice: the logistic of W, so that W = 0 (the class tells nothing) gives
    μ = 0.5, a positive weight more and a negative one less; for a binary
    pattern it equals P(B | D) / (P(B | D) + P(B | not D)).
    """
    return categories(x, codes, expit(weights), default)


def identity(x: np.ndarray) -> np.ndarray:
    """Values that already are μ, checked and passed through as float64.

    Parameters
    ----------
    x : ndarray
        μ values in [0, 1]; NaN is nodata.

    Returns
    -------
    ndarray of float64
        ``x`` clipped to [0, 1]; values within ``IDENTITY_TOLERANCE`` of the
        range are float32 rounding and are clipped.

    Raises
    ------
    InputError
        A value lies further outside [0, 1]: the proxy is not a μ layer.
    """
    x = np.asarray(x, dtype=np.float64)
    bad = (x < -IDENTITY_TOLERANCE) | (x > 1.0 + IDENTITY_TOLERANCE)
    if np.any(bad):
        raise InputError(
            f"membership 'identity' needs values already in [0, 1], found {float(x[bad][0]):g}; "
            "give this proxy a membership function instead")
    return np.clip(x, 0.0, 1.0)


@dataclass(frozen=True)
class Membership:
    """A validated membership specification, callable on an array of proxy values.

    Build one with :func:`parse_membership`; ``spec`` keeps the plain-data form
    as it appears in a tree file.
    """

    type: str
    spec: dict
    function: Callable[[np.ndarray], np.ndarray] = field(compare=False, repr=False)
    categorical: bool = False

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Return μ for the proxy values ``x`` (float64, NaN for nodata)."""
        return self.function(x)


def _number(spec: Mapping, key: str, kind: str) -> float:
    """Return ``spec[key]`` as a finite float or raise a ParameterError naming it."""
    if key not in spec:
        raise ParameterError(f"membership '{kind}' needs a numeric '{key}', which is missing")
    value = spec[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ParameterError(f"membership '{kind}': '{key}' must be a number, got {value!r}")
    if not math.isfinite(value):
        raise ParameterError(f"membership '{kind}': '{key}' must be finite, got {value!r}")
    return float(value)


def _unit(value, what: str, kind: str) -> float:
    """Return ``value`` as a float in [0, 1] or raise naming ``what``."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ParameterError(f"membership '{kind}': {what} must be a number in [0, 1], got {value!r}")
    if not 0.0 <= value <= 1.0:
        raise ParameterError(f"membership '{kind}': {what} must lie in [0, 1], got {value!r}")
    return float(value)


def _parse_linear(spec: Mapping) -> Callable:
    lower = _number(spec, "lower", "linear")
    upper = _number(spec, "upper", "linear")
    if lower == upper:
        raise ParameterError(
            f"membership 'linear': 'lower' and 'upper' are both {lower:g}; "
            "a ramp needs two different values")
    return lambda x: linear(x, lower, upper)


def _parse_logistic(spec: Mapping) -> Callable:
    midpoint = _number(spec, "midpoint", "logistic")
    slope = _number(spec, "slope", "logistic")
    if slope == 0:
        raise ParameterError("membership 'logistic': 'slope' is 0, which makes μ a constant 0.5")
    return lambda x: logistic(x, midpoint, slope)


def _parse_gaussian(spec: Mapping) -> Callable:
    centre = _number(spec, "centre", "gaussian")
    spread = _number(spec, "spread", "gaussian")
    if spread <= 0:
        raise ParameterError(f"membership 'gaussian': 'spread' must be positive, got {spread:g}")
    return lambda x: gaussian(x, centre, spread)


def _point_list(spec: Mapping, kind: str) -> list:
    points = spec.get("points")
    if points is None:
        raise ParameterError(f"membership '{kind}' needs 'points', which is missing")
    if not isinstance(points, list):
        raise ParameterError(f"membership '{kind}': 'points' must be a list, got {points!r}")
    return points


def _parse_trapezoid(spec: Mapping) -> Callable:
    points = _point_list(spec, "trapezoid")
    if len(points) != 4:
        raise ParameterError(
            f"membership 'trapezoid': 'points' must be four numbers [a, b, c, d], got {points!r}")
    a, b, c, d = (_number({"points": p}, "points", "trapezoid") for p in points)
    if not (a <= b <= c <= d) or a == d:
        raise ParameterError(
            f"membership 'trapezoid': points must be ordered a <= b <= c <= d with a < d, "
            f"got {points!r}")
    return lambda x: trapezoid(x, a, b, c, d)


def _parse_piecewise(spec: Mapping) -> Callable:
    points = _point_list(spec, "piecewise")
    if len(points) < 2:
        raise ParameterError(
            f"membership 'piecewise': 'points' needs at least two [x, μ] pairs, got {points!r}")
    xs, mus = [], []
    for i, pair in enumerate(points):
        if not isinstance(pair, list) or len(pair) != 2:
            raise ParameterError(
                f"membership 'piecewise': point {i} must be a pair [x, μ], got {pair!r}")
        xs.append(_number({"x": pair[0]}, "x", "piecewise"))
        mus.append(_unit(pair[1], f"μ of point {i}", "piecewise"))
    if any(x1 <= x0 for x0, x1 in zip(xs, xs[1:])):
        raise ParameterError(
            f"membership 'piecewise': x values must increase strictly, got {xs!r}")
    xs_a, mus_a = np.array(xs), np.array(mus)
    return lambda x: piecewise(x, xs_a, mus_a)


def _class_table(spec: Mapping, key: str, kind: str, what: str, value_of) -> tuple[np.ndarray, np.ndarray]:
    """Parse a {class code: value} map into sorted codes and their values, naming any bad entry.

    ``value_of(value, label)`` checks and converts one value; ``what`` says
    what the values are, for the message when the map is missing.
    """
    table = spec.get(key)
    if not isinstance(table, Mapping) or not table:
        raise ParameterError(f"membership '{kind}' needs '{key}', a non-empty map of class code to {what}")
    codes, values = [], []
    for code, value in table.items():
        try:
            codes.append(float(code))
        except (TypeError, ValueError):
            raise ParameterError(f"membership '{kind}': class code {code!r} is not a number") from None
        values.append(value_of(value, code))
    order = np.argsort(codes)
    codes_a = np.array(codes)[order]
    if np.any(np.diff(codes_a) == 0):
        raise ParameterError(f"membership '{kind}': a class code is listed twice")
    return codes_a, np.array(values)[order]


def _parse_categories(spec: Mapping) -> Callable:
    codes, scores = _class_table(spec, "scores", "categories", "μ",
                                 lambda value, code: _unit(value, f"the score of class {code}",
                                                           "categories"))
    if "default" not in spec:
        raise ParameterError(
            "membership 'categories' needs 'default' (μ for classes not listed, or null for nodata)")
    default = spec["default"]
    default = math.nan if default is None else _unit(default, "'default'", "categories")
    return lambda x: categories(x, codes, scores, default)


def _finite_weight(value, code) -> float:
    """Return a class's weight of evidence as a float, or raise naming the class."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ParameterError(
            f"membership 'weights': the weight of class {code} must be a finite number, got {value!r}")
    return float(value)


def _parse_weights(spec: Mapping) -> Callable:
    codes, weights = _class_table(spec, "weights", "weights", "weight of evidence", _finite_weight)
    default = spec.get("default")
    default = math.nan if default is None else _unit(default, "'default'", "weights")
    return lambda x: weights_score(x, codes, weights, default)


_PARSERS: dict[str, Callable[[Mapping], Callable]] = {
    "linear": _parse_linear,
    "logistic": _parse_logistic,
    "gaussian": _parse_gaussian,
    "trapezoid": _parse_trapezoid,
    "piecewise": _parse_piecewise,
    "categories": _parse_categories,
    "weights": _parse_weights,
    "identity": lambda spec: identity,
}

#: Membership types a tree file may name.
MEMBERSHIP_TYPES = tuple(_PARSERS)

#: Membership types whose proxy holds class codes (resampled with nearest neighbour).
CATEGORICAL_TYPES = ("categories", "weights")


def parse_membership(spec: Mapping) -> Membership:
    """Validate a membership specification from a tree file and return a :class:`Membership`.

    Parameters
    ----------
    spec : mapping
        ``{"type": <one of MEMBERSHIP_TYPES>, ...parameters}`` as in the tree file.

    Raises
    ------
    ParameterError
        Unknown type, or a parameter missing, non-numeric or out of range; the
        message names the parameter and the value.
    """
    if not isinstance(spec, Mapping):
        raise ParameterError(f"membership must be an object with a 'type', got {spec!r}")
    kind = spec.get("type")
    if kind not in _PARSERS:
        raise ParameterError(
            f"unknown membership type {kind!r}; expected one of {', '.join(MEMBERSHIP_TYPES)}")
    function = _PARSERS[kind](spec)
    return Membership(type=kind, spec=dict(spec), function=function,
                      categorical=kind in CATEGORICAL_TYPES)
