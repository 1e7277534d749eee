"""What makes a node, a proxy or a grid unusable, found without reading any cells.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping

from ..errors import ParameterError
from ..membership import parse_membership
from ..overlay import parse_operator
from .limits import COMPONENTS, MAX_CELLS_PER_SIDE, MAX_MAGNITUDE, PATH_SEPARATOR
from .nodes import Node, Problem, Proxy
from .reading import brief, clip


def _usable_number(value) -> float | None:
    """Return ``value`` as a float if it is a finite number within ±MAX_MAGNITUDE, else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return float(value) if abs(value) <= MAX_MAGNITUDE else None


def _number_problems(spec, where: str, class_maps: tuple[str, ...] = ()) -> Iterator[str]:
    """Yield a message for each number in ``spec`` that is not finite or beyond ±MAX_MAGNITUDE.

    ``class_maps`` names the entries of ``spec`` whose keys are class codes
    (numbers written as text), which are checked too. At most five messages.
    """
    shown = 0
    stack = [(spec, where)]
    while stack and shown < 5:
        value, at = stack.pop()
        if isinstance(value, Mapping):
            if at.count(".") == 1 and at.rpartition(".")[2] in class_maps:
                for key in value:
                    try:
                        code = float(key)
                    except (TypeError, ValueError, OverflowError):
                        continue  # not a number: the membership names it
                    if _usable_number(code) is None:
                        shown += 1
                        yield (f"{at}: the class code {brief(key)} is not a finite number within "
                               f"±{MAX_MAGNITUDE:g}")
            stack.extend((item, f"{at}.{key}") for key, item in reversed(list(value.items())))
        elif isinstance(value, (list, tuple)):
            stack.extend((item, f"{at}[{i}]") for i, item in reversed(list(enumerate(value))))
        elif isinstance(value, (int, float)) and not isinstance(value, bool) \
                and _usable_number(value) is None:
            shown += 1
            yield (f"{at} is {brief(value)}; numbers in a tree must be finite and within "
                   f"±{MAX_MAGNITUDE:g}")


def _parse_problem(parse, spec, what: str) -> tuple[object, str | None]:
    """Return ``(parse(spec), None)``, or ``(None, message)`` when ``parse`` refuses ``spec``."""
    try:
        return parse(spec), None
    except ParameterError as exc:
        return None, clip(str(exc), 500)
    except (TypeError, ValueError, KeyError, IndexError, AttributeError, OverflowError) as exc:
        # The parsers expect the tree-file form; a draft may hold anything.
        return None, f"the {what} cannot be read: {type(exc).__name__}: {clip(str(exc), 200)}"


def node_problems(node: Node) -> Iterator[str]:
    """Yield the messages for what is wrong with one node (not its subtree)."""
    if node.children and (node.proxy is not None or node.membership is not None):
        yield "a node has either children or a proxy with a membership, not both"
    if node.children or node.operator is not None:
        if node.operator is None:
            yield "has children but no operator"
        else:
            unusable = list(_number_problems(node.operator, "operator"))
            yield from unusable
            op, message = (None, None) if unusable else _parse_problem(parse_operator, node.operator,
                                                                       "operator")
            if message:
                yield message
            if op is not None and op.type == "weighted_mean" and node.children:
                weights = [_usable_number(child.weight) for child in node.children]
                # A weight that is no usable number is marked at its own node.
                if None not in weights and math.fsum(max(w, 0.0) for w in weights) <= 0:
                    yield "operator 'weighted_mean' needs at least one child with a positive weight"
        if not node.children:
            yield "has an operator but no children"
        names = [child.name for child in node.children]
        for name in sorted({n for n in names if names.count(n) > 1}, key=str):
            yield f"two children are named {brief(name)}; sibling names must differ"
    else:
        if node.proxy is None:
            yield "a leaf needs a proxy layer"
        if node.membership is None:
            yield "a leaf needs a membership function"
        elif isinstance(node.membership, Mapping) and not isinstance(node.membership.get("type"), str):
            yield (f"membership.type must name a membership function, "
                   f"got {brief(node.membership.get('type'))}")
        else:
            unusable = list(_number_problems(node.membership, "membership", ("scores", "weights")))
            yield from unusable
            message = None if unusable else _parse_problem(parse_membership, node.membership,
                                                           "membership")[1]
            if message:
                yield message
        if node.proxy is not None:
            yield from _proxy_problems(node.proxy)
    if node.component is not None and node.component not in COMPONENTS:
        yield f"component must be one of {', '.join(COMPONENTS)}, got {brief(node.component)}"
    weight = node.weight
    if isinstance(weight, bool) or not isinstance(weight, (int, float)) \
            or (isinstance(weight, float) and not math.isfinite(weight)) or weight < 0:
        yield f"weight must be a finite number >= 0, got {brief(weight)}"
    elif weight > MAX_MAGNITUDE:
        yield (f"weight must be at most {MAX_MAGNITUDE:g}, got {brief(weight)}; a weight only "
               "counts relative to its siblings'")
    if not isinstance(node.name, str) or not node.name or PATH_SEPARATOR.strip() in node.name:
        yield f"a node name must be non-empty and must not contain '{PATH_SEPARATOR.strip()}'"


def _proxy_problems(proxy: Proxy) -> Iterator[str]:
    """Yield the messages for what is wrong with a proxy's fields."""
    if not proxy.path:
        yield "the proxy has no layer path"
    if proxy.measure not in (None, "distance", "attribute"):
        yield f"proxy measure must be 'distance' or 'attribute', got {brief(proxy.measure)}"
    if proxy.measure == "attribute" and not proxy.field:
        yield "proxy measure 'attribute' needs a 'field' to burn into the grid"
    if proxy.band is not None and (isinstance(proxy.band, bool) or not isinstance(proxy.band, int)
                                   or not 1 <= proxy.band <= MAX_CELLS_PER_SIDE):
        yield f"proxy band must be a whole number from 1 to {MAX_CELLS_PER_SIDE}, got {brief(proxy.band)}"
    if proxy.where is not None:
        if not proxy.is_vector:
            yield "proxy where (a filter of features) applies only to a vector layer"
        yield from _filter_problems(proxy.where)
    if proxy.margin is not None:
        margin = _usable_number(proxy.margin)
        if margin is None or margin < 0:
            yield (f"proxy margin must be a distance of 0 or more (map units of the grid, at most "
                   f"{MAX_MAGNITUDE:g}), got {brief(proxy.margin)}")
        if proxy.measure != "distance":
            yield "proxy margin (features outside the grid that count) applies only to measure 'distance'"


#: Most values a proxy's filter may list: a filter picks classes of features, not features.
MAX_FILTER_VALUES = 1000


def _filter_problems(where) -> Iterator[str]:
    """Yield the messages for what is wrong with a proxy's ``where`` (plain data, never SQL)."""
    if not isinstance(where, Mapping):
        yield (f"proxy where must be an object {{'field': name, 'values': [...]}}, "
               f"got {brief(where)}")
        return
    unknown = sorted(str(key) for key in where if key not in ("field", "values"))
    if unknown:
        yield f"proxy where holds {', '.join(map(repr, unknown))}; it takes only 'field' and 'values'"
    field_name = where.get("field")
    if not isinstance(field_name, str) or not field_name:
        yield f"proxy where.field must name a field of the layer, got {brief(field_name)}"
    values = where.get("values")
    if not isinstance(values, list):
        yield (f"proxy where.values must be a list of the values to keep (numbers or text), "
               f"got {brief(values)}")
        return
    if not values:
        yield "proxy where.values lists no value; tick at least one value of the field to keep"
    if len(values) > MAX_FILTER_VALUES:
        yield f"proxy where.values lists {len(values)} values; a filter takes at most {MAX_FILTER_VALUES}"
    for i, value in enumerate(values[:MAX_FILTER_VALUES]):
        if isinstance(value, str):
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float)) or _usable_number(value) is None:
            yield (f"proxy where.values[{i}] must be a number or text (a value the field holds), "
                   f"got {brief(value)}")
            break


def grid_problems(grid) -> Iterator[str]:
    """Yield the messages for numbers of the tree's grid that no raster can use."""
    if not isinstance(grid, Mapping):
        return
    yield from _number_problems({k: grid[k] for k in ("extent", "cell_size", "band") if k in grid}, "grid")
    band = grid.get("band")
    if isinstance(band, int) and not isinstance(band, bool) and band > MAX_CELLS_PER_SIDE:
        yield f"grid: band must be at most {MAX_CELLS_PER_SIDE}, got {brief(band)}"
    extent, cell = grid.get("extent"), _usable_number(grid.get("cell_size"))
    if not isinstance(extent, list) or len(extent) != 4 or cell is None or cell <= 0:
        return
    corners = [_usable_number(v) for v in extent]
    if None in corners:
        return
    xmin, ymin, xmax, ymax = corners
    for axis, span in (("columns", xmax - xmin), ("rows", ymax - ymin)):
        if span / cell > MAX_CELLS_PER_SIDE:
            yield (f"grid: the extent spans {span / cell:.3g} {axis} of cell_size {cell:g}; "
                   f"a raster has at most {MAX_CELLS_PER_SIDE} {axis}")


def join_problems(headline: str, problems: list[Problem]) -> str:
    """Render a headline and up to 20 problems, one per line."""
    lines = []
    for problem in problems[:20]:
        lines.append(f"  - {problem}")
    if len(problems) > 20:
        lines.append(f"  - ... and {len(problems) - 20} more")
    return f"{headline}:\n" + "\n".join(lines)
