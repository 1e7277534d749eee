"""Reading a tree file that may be anything: its shape and types checked before the schema.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

from collections.abc import Mapping

from ..errors import TreeFileError
from ..jsonio import MAX_NESTING, lone_surrogate, too_deep
from ..schema import describe
from .limits import MAX_DEPTH, MAX_NODES, PATH_SEPARATOR


def locate(doc, json_path: tuple) -> tuple[str, str]:
    """Turn a JSON path into (node path, message prefix naming the field).

    ``("root", "children", 0, "membership", "lower")`` becomes
    ``("Favourability > Source", "membership.lower")`` with node names looked up
    in ``doc``.
    """
    names: list[str] = []
    rest: list[str] = []
    node = doc
    parts = list(json_path)
    if parts and parts[0] == "root":
        node = doc.get("root")
        names.append(_node_label(node, "root"))
        parts = parts[1:]
        while len(parts) >= 2 and parts[0] == "children" and isinstance(parts[1], int):
            children = node.get("children") if isinstance(node, Mapping) else None
            node = children[parts[1]] if isinstance(children, list) and parts[1] < len(children) else None
            names.append(_node_label(node, f"child {parts[1]}"))
            parts = parts[2:]
    else:
        rest.append("tree")
    rest.extend(str(p) if not isinstance(p, int) else f"[{p}]" for p in parts)
    return PATH_SEPARATOR.join(names), ".".join(rest).replace(".[", "[")


def _node_label(node, fallback: str) -> str:
    """Return a node's name for messages, or ``fallback`` when it has none.

    A name that is not valid text (a lone surrogate) is shown with the bad
    character escaped, so the message itself can be printed.
    """
    if isinstance(node, Mapping) and isinstance(node.get("name"), str) and node["name"]:
        name = node["name"]
        return name if name.isascii() else name.encode("utf-8", "backslashreplace").decode("utf-8")
    return f"({fallback})"


def clip(text: str, width: int = 40) -> str:
    """Return ``text`` cut to ``width`` characters with an ellipsis."""
    return text if len(text) <= width else text[:width - 1] + "…"


def brief(value) -> str:
    """Return a short rendering of a value for a message: repr for plain scalars, else bounded."""
    if value is None or isinstance(value, (bool, float)) or (isinstance(value, int)
                                                             and value.bit_length() <= 200):
        return repr(value)
    if isinstance(value, str):
        return repr(clip(value, 60))
    return describe(value)


def _short_path(names) -> str:
    """Join node names into a path for a message, abbreviating a long one and long names."""
    names = [clip(name) for name in names]
    if len(names) > 10:
        names = [*names[:6], f"… {len(names) - 8} more …", *names[-2:]]
    return PATH_SEPARATOR.join(names)


def check_shape(doc: Mapping) -> None:
    """Refuse a tree too deep, too large, nested too deeply or holding non-text strings.

    Runs before anything that recurses over the document (the schema
    validator, :meth:`Node.from_dict`, ``copy.deepcopy``, ``json.dumps``) and
    itself uses no recursion. Messages name the node where the limit is crossed.
    """
    root = doc.get("root")
    if isinstance(root, Mapping):
        count = 0
        stack = [(root, (_node_label(root, "root"),))]
        while stack:
            node, names = stack.pop()
            count += 1
            if len(names) > MAX_DEPTH:
                raise TreeFileError(
                    f"{_short_path(names)}: the tree is more than {MAX_DEPTH} levels deep here; "
                    f"Favour reads trees of at most {MAX_DEPTH} levels (a mineral-systems model "
                    "is about 5)")
            children = node.get("children") if isinstance(node, Mapping) else None
            if isinstance(children, (list, tuple)):
                if count + len(stack) + len(children) > MAX_NODES:
                    raise TreeFileError(
                        f"{_short_path(names)}: with its {len(children)} children the tree has more "
                        f"than {MAX_NODES} nodes; Favour reads trees of at most {MAX_NODES} nodes")
                stack.extend((child, (*names, _node_label(child, f"child {i}")))
                             for i, child in reversed(list(enumerate(children))))
    for finder, problem in ((too_deep, f"arrays and objects nest more than {MAX_NESTING} levels "
                                       f"deep here; Favour reads at most {MAX_NESTING}"),
                            (lone_surrogate, "holds a lone UTF-16 surrogate (half of a character), "
                                             "which is not text")):
        path = finder(doc, MAX_NESTING)
        if path is not None:
            node, where = locate(doc, path)
            where = clip(where or "the document", 80)
            raise TreeFileError(f"{_short_path(node.split(PATH_SEPARATOR)) if node else 'tree'}: "
                                f"{where}: {problem}")


#: Types of the fields of a draft node, a proxy and the tree that Favour's code relies on.
_NUMBER = "number"
_DRAFT_TREE_TYPES = {"name": (str,), "description": (str,), "grid": (Mapping, type(None))}
_DRAFT_NODE_TYPES = {"name": (str,), "component": (str, type(None)), "rationale": (str,),
                     "weight": _NUMBER, "save_output": (bool,), "operator": (Mapping, type(None)),
                     "membership": (Mapping, type(None)), "children": (list,), "proxy": (Mapping,)}
_DRAFT_PROXY_TYPES = {"path": (str,), "band": (int, type(None)), "layer": (str, type(None)),
                      "measure": (str, type(None)), "field": (str, type(None)),
                      "resampling": (str, type(None))}
_DRAFT_GRID_TYPES = {"reference": (str,), "crs": (str,), "extent": (list,), "cell_size": _NUMBER,
                     "band": (int,)}
_TYPE_NAMES = {str: "text", type(None): "null", Mapping: "an object", list: "a list",
               bool: "true or false", int: "a whole number"}


def _wrong_type(value, kinds) -> str | None:
    """Return what ``value`` should be if it is not of ``kinds``, else None."""
    if kinds == _NUMBER:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return None
        return "a number"
    if isinstance(value, bool) and bool not in kinds:
        return " or ".join(_TYPE_NAMES[k] for k in kinds)
    if isinstance(value, kinds):
        return None
    return " or ".join(_TYPE_NAMES[k] for k in kinds)


def check_draft_types(doc: Mapping) -> None:
    """Refuse, naming the node and the field, a draft whose fields have types Favour cannot use."""
    def refuse(where: str, field: str, value, expected: str) -> None:
        raise TreeFileError(f"the stored tree cannot be read: {where}: '{field}' must be {expected}, "
                            f"got {brief(value)}")

    for key, kinds in _DRAFT_TREE_TYPES.items():
        if key in doc and (expected := _wrong_type(doc[key], kinds)):
            refuse("tree", key, doc[key], expected)
    grid = doc.get("grid")
    if isinstance(grid, Mapping):
        for key, kinds in _DRAFT_GRID_TYPES.items():
            if key in grid and (expected := _wrong_type(grid[key], kinds)):
                refuse("tree", f"grid.{key}", grid[key], expected)
    stack = [(doc["root"], (_node_label(doc["root"], "root"),))]
    while stack:
        node, names = stack.pop()
        where = _short_path(names)
        if not isinstance(node, Mapping):
            raise TreeFileError(f"the stored tree cannot be read: {where}: a node must be an object, "
                                f"got {brief(node)}")
        if "name" not in node:
            raise TreeFileError(f"the stored tree cannot be read: {where}: the node lacks a 'name'")
        for key, kinds in _DRAFT_NODE_TYPES.items():
            if key in node and (expected := _wrong_type(node[key], kinds)):
                refuse(where, key, node[key], expected)
        proxy = node.get("proxy")
        if isinstance(proxy, Mapping):
            if "path" not in proxy:
                raise TreeFileError(f"the stored tree cannot be read: {where}: the proxy lacks a 'path'")
            for key, kinds in _DRAFT_PROXY_TYPES.items():
                if key in proxy and (expected := _wrong_type(proxy[key], kinds)):
                    refuse(where, f"proxy.{key}", proxy[key], expected)
        stack.extend((child, (*names, _node_label(child, f"child {i}")))
                     for i, child in reversed(list(enumerate(node.get("children", ())))))
