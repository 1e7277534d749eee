"""The criteria tree as a diagram, and each leaf's membership curve, for the report.

The diagram is drawn with matplotlib: one box per node, the root on the
left and the leaves on the right, each box holding the node's name, its
operator (or, for a leaf, its membership function) and its weight where the
parent weighs its children; the number in each box points to the node's
rationale in the report's table. The curves are μ(x) of each leaf's own
membership function (:func:`favour_plugin.core.membership.parse_membership`,
the function the evaluation uses) over the range its parameters span.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np

from ..core.membership import parse_membership
from ..core.tree import PATH_SEPARATOR, Node, Tree
from ..raster.style import RAMP
from .charts import _pyplot
from .figures import png_bytes

#: Box fill by kind of node: root, component, criterion (group), proxy (leaf).
FILLS = {"root": RAMP[0][1], "component": RAMP[1][1], "group": RAMP[2][1], "leaf": "#f3ead0"}
TEXT = {"root": "white", "component": "white", "group": "#101010", "leaf": "#101010"}


def operator_text(operator: dict | None) -> str:
    """Return a node's operator in words: ``gamma 0.75``, ``weighted mean (nodata: ignore)``."""
    if not operator:
        return ""
    kind = operator.get("type", "?")
    text = {"and": "fuzzy and (minimum)", "or": "fuzzy or (maximum)", "product": "fuzzy product",
            "sum": "fuzzy sum", "weighted_mean": "weighted mean"}.get(kind, str(kind))
    if kind == "gamma":
        text = f"fuzzy gamma {operator.get('gamma')}"
    if operator.get("nodata") == "ignore":
        text += " (nodata: ignore)"
    return text


def membership_text(spec: dict | None) -> str:
    """Return a leaf's membership in a few words: ``linear 20 → -80``, ``logistic at 600``."""
    if not spec:
        return ""
    kind = spec.get("type", "?")
    if kind == "linear":
        return f"linear {spec.get('lower'):g} → {spec.get('upper'):g}"
    if kind == "logistic":
        return f"logistic, 0.5 at {spec.get('midpoint'):g}"
    if kind == "gaussian":
        return f"gaussian at {spec.get('centre'):g} ± {spec.get('spread'):g}"
    if kind == "trapezoid":
        return "trapezoid " + ", ".join(f"{p:g}" for p in spec.get("points", ()))
    if kind == "piecewise":
        return f"piecewise, {len(spec.get('points', ()))} points"
    if kind in ("categories", "weights"):
        return f"{kind}, {len(spec.get('scores' if kind == 'categories' else 'weights', {}))} classes"
    return str(kind)


def numbered_nodes(tree: Tree) -> list[tuple[int, str, Node, int]]:
    """Return (number, path, node, depth) for every node, parents before children, numbered from 1."""
    return [(i, path, node, path.count(PATH_SEPARATOR))
            for i, (path, node) in enumerate(tree.walk(), start=1)]


def _kind(node: Node, depth: int) -> str:
    if depth == 0:
        return "root"
    if node.component:
        return "component"
    return "leaf" if node.is_leaf else "group"


def tree_diagram(tree: Tree) -> bytes:
    """Draw the tree, root on the left, leaves stacked on the right; return the PNG's bytes."""
    plt = _pyplot()
    from matplotlib.patches import FancyBboxPatch

    nodes = numbered_nodes(tree)
    depth_max = max(d for *_, d in nodes)
    leaves = [path for _, path, node, _ in nodes if not node.children]
    y: dict[str, float] = {path: float(i) for i, path in enumerate(leaves)}
    for _, path, node, _ in reversed(nodes):  # parents after children: centre on them
        if node.children:
            kids = [path + PATH_SEPARATOR + c.name for c in node.children]
            y[path] = sum(y[k] for k in kids) / len(kids)
    width_in = 3.0 * (depth_max + 1) + 0.6
    figure, ax = plt.subplots(figsize=(max(8.0, width_in), 0.62 * len(leaves) + 0.9))
    box_w, box_h, step = 2.55, 0.78, 3.0
    parents = {path: tree_node for _, path, tree_node, _ in nodes}
    for number, path, node, depth in nodes:
        x, yy = depth * step, -y[path]
        kind = _kind(node, depth)
        if depth:
            parent_path = path.rsplit(PATH_SEPARATOR, 1)[0]
            px, py = (depth - 1) * step + box_w, -y[parent_path]
            mid = px + (x - px) / 2
            ax.plot([px, mid, mid, x], [py, py, yy, yy], color="#7a8594", linewidth=0.8, zorder=1)
        ax.add_patch(FancyBboxPatch((x, yy - box_h / 2), box_w, box_h,
                                    boxstyle="round,pad=0.02,rounding_size=0.12", facecolor=FILLS[kind],
                                    edgecolor="#33404f", linewidth=0.7, zorder=2))
        detail = operator_text(node.operator) if node.children or node.operator else \
            membership_text(node.membership)
        parent = parents.get(path.rsplit(PATH_SEPARATOR, 1)[0]) if depth else None
        if parent is not None and (parent.operator or {}).get("type") == "weighted_mean":
            detail += f"; weight {node.weight:g}"
        elif depth and node.weight != 1.0:
            detail += f"; weight {node.weight:g} (unused)"
        name = textwrap.shorten(node.name, 30, placeholder="…")
        ax.text(x + 0.08, yy + 0.13, f"{number}. {name}", fontsize=7.4, fontweight="bold", color=TEXT[kind],
                va="center", zorder=3)
        ax.text(x + 0.08, yy - 0.17, textwrap.shorten(detail, 46, placeholder="…"), fontsize=6.4,
                color=TEXT[kind], va="center", zorder=3)
    ax.set_xlim(-0.1, depth_max * step + box_w + 0.1)
    ax.set_ylim(-(len(leaves) - 1) - 0.7, 0.7)
    ax.axis("off")
    figure.tight_layout(pad=0.3)
    return png_bytes(figure)


def parameter_range(spec: dict) -> tuple[float, float]:
    """Return the x range a membership's parameters span, with a margin on each side."""
    kind = spec.get("type")
    if kind == "linear":
        low, high = sorted((float(spec["lower"]), float(spec["upper"])))
    elif kind == "logistic":
        half = 6.0 / abs(float(spec["slope"]))
        low, high = float(spec["midpoint"]) - half, float(spec["midpoint"]) + half
        return low, high
    elif kind == "gaussian":
        centre, spread = float(spec["centre"]), float(spec["spread"])
        return centre - 3.5 * spread, centre + 3.5 * spread
    elif kind == "trapezoid":
        low, high = float(spec["points"][0]), float(spec["points"][-1])
    elif kind == "piecewise":
        xs = [float(p[0]) for p in spec["points"]]
        low, high = min(xs), max(xs)
    else:
        return 0.0, 1.0
    span = (high - low) or max(1.0, abs(low))
    return low - 0.15 * span, high + 0.15 * span


def _layer_name(node: Node) -> str:
    """Return the proxy's file name (with its layer, for a vector proxy)."""
    proxy = node.proxy
    if proxy is None:
        return "the proxy"
    name = proxy.path.replace("\\", "/").rsplit("/", 1)[-1]
    return f"{name}:{proxy.layer}" if proxy.layer else name


def _axis_label(node: Node) -> str:
    """Say what x is: the proxy's layer, and the measure for a vector proxy."""
    proxy = node.proxy
    name = _layer_name(node)
    if proxy is None:
        return "proxy value"
    if proxy.measure == "distance":
        return f"distance to {name} (map units)"
    if proxy.measure == "attribute":
        return f"{proxy.field} of {name}"
    return f"value of {name}"


def membership_curves(tree: Tree, columns: int = 3) -> bytes | None:
    """Draw μ(x) of every leaf over the range of its parameters (bars for class memberships).

    Returns the PNG's bytes, or None for a tree without leaves.
    """
    plt = _pyplot()
    leaves = [(number, node) for number, _, node, _ in numbered_nodes(tree) if node.is_leaf]
    if not leaves:
        return None
    columns = min(columns, len(leaves))
    rows = math.ceil(len(leaves) / columns)
    figure, axes = plt.subplots(rows, columns, figsize=(3.7 * columns, 2.45 * rows), squeeze=False)
    for ax in axes.ravel()[len(leaves):]:
        ax.set_visible(False)
    line, fill = RAMP[4][1], RAMP[3][1]
    for ax, (number, node) in zip(axes.ravel(), leaves):
        spec = node.membership or {}
        function = parse_membership(spec)
        if function.categorical:
            table = spec.get("scores") if spec.get("type") == "categories" else spec.get("weights")
            codes = sorted(table, key=float)
            mu = function(np.array([float(c) for c in codes]))
            ax.bar(range(len(codes)), np.nan_to_num(mu, nan=0.0), color=fill, edgecolor=line, linewidth=0.6)
            ax.set_xticks(range(len(codes)))
            ax.set_xticklabels(codes, fontsize=6.5)
            default = spec.get("default")
            ax.set_xlabel(f"class of {_layer_name(node)}; others: "
                          f"{'nodata' if default is None else f'μ {default:g}'}", fontsize=6.5)
        else:
            low, high = parameter_range(spec)
            if node.proxy is not None and node.proxy.measure == "distance":
                low = max(low, 0.0)  # no distance is negative
            x = np.linspace(low, high, 400)
            ax.plot(x, function(x), color=line, linewidth=1.6)
            ax.fill_between(x, function(x), color=fill, alpha=0.35)
            ax.set_xlabel(_axis_label(node), fontsize=6.5)
        ax.set_ylim(-0.03, 1.05)
        ax.tick_params(labelsize=6.5)
        ax.set_ylabel("μ", fontsize=7)
        ax.grid(alpha=0.25, linewidth=0.5)
        ax.set_title(f"{number}. {textwrap.shorten(node.name, 34, placeholder='…')}\n"
                     f"{membership_text(spec)}", fontsize=7.5, loc="left")
    height = 2.45 * rows
    # Fixed margins (inches turned into fractions): tight_layout costs seconds on a dozen panels.
    figure.subplots_adjust(left=0.06, right=0.98, bottom=0.55 / height, top=1 - 0.5 / height, wspace=0.28,
                           hspace=0.95 / 1.4)
    return png_bytes(figure)
