"""A small JSON Schema validator for the subset of draft 2020-12 our schemas use.

The tree file is validated against ``favour_plugin/schema/`` when it is
loaded. QGIS installations do not all ship the ``jsonschema`` package, so this
module checks the keywords our schemas use and refuses a schema that uses any
other (so a schema edit cannot silently go unchecked). The test suite checks
it against the ``jsonschema`` reference implementation on the same documents.

An extra annotation keyword, ``x-message``, gives the message reported when an
``anyOf`` fails; ``jsonschema`` ignores it.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from functools import cache
from pathlib import Path

SCHEMA_DIR = Path(__file__).resolve().parent.parent / "schema"

_ANNOTATIONS = {"$schema", "$id", "title", "description", "$defs", "x-message", "default"}
_KEYWORDS = {
    "type", "required", "properties", "additionalProperties", "$ref", "anyOf", "allOf",
    "if", "then", "else", "enum", "const", "minimum", "maximum", "exclusiveMinimum",
    "exclusiveMaximum", "minLength", "minItems", "maxItems", "items", "minProperties",
    "propertyNames", "pattern", "prefixItems",
}


@dataclass(frozen=True)
class SchemaIssue:
    """One place where a document breaks its schema: a JSON path and a message."""

    path: tuple
    message: str


def _is_type(value, kind: str) -> bool:
    """Return True if ``value`` has JSON type ``kind``."""
    if kind == "object":
        return isinstance(value, Mapping)
    if kind == "array":
        return isinstance(value, list)
    if kind == "string":
        return isinstance(value, str)
    if kind == "boolean":
        return isinstance(value, bool)
    if kind == "null":
        return value is None
    if isinstance(value, bool):
        return False
    if kind == "number":  # an int is always finite; NaN and ±inf are no JSON numbers
        return isinstance(value, int) or (isinstance(value, float) and math.isfinite(value))
    if kind == "integer":
        return isinstance(value, int) or (isinstance(value, float) and value.is_integer())
    raise ValueError(f"schema uses unknown type {kind!r}")


def describe(value, width: int = 60) -> str:
    """Return a short JSON-like rendering of ``value`` for a message, at most ``width`` characters.

    Bounded whatever the value: long strings and containers are cut before
    they are rendered, deep ones are shown to three levels, and an integer too
    long to print is described by its number of digits.
    """
    text = _render(value, 3, width)
    return text if len(text) <= width else text[:width - 3] + "..."


def _render(value, levels: int, width: int) -> str:
    """Render ``value`` as compact JSON, cutting strings and containers past ``width``."""
    if value is None or isinstance(value, bool):
        return json.dumps(value)
    if isinstance(value, int):
        if value.bit_length() > 200:
            return f"(an integer of about {int(value.bit_length() * math.log10(2)) + 1} digits)"
        return str(value)
    if isinstance(value, float):
        return json.dumps(value)
    if isinstance(value, str):
        return json.dumps(value[:width + 1], ensure_ascii=False)
    if isinstance(value, Mapping):
        if levels == 0:
            return "{...}" if value else "{}"
        items = [f"{_render(str(k), 0, 20)}: {_render(v, levels - 1, width)}"
                 for k, v in list(value.items())[:4]]
        return "{" + ", ".join(items) + (", ..." if len(value) > 4 else "") + "}"
    if isinstance(value, (list, tuple)):
        if levels == 0:
            return "[...]" if value else "[]"
        items = [_render(v, levels - 1, width) for v in value[:8]]
        return "[" + ", ".join(items) + (", ..." if len(value) > 8 else "") + "]"
    return f"({type(value).__name__})"


def _bound(value) -> str:
    """Return a schema's bound for a message: ``1``, ``0.5``, ``1e+15``."""
    return f"{value:g}" if isinstance(value, float) and abs(value) >= 1e6 else str(value)


class Validator:
    """Validate documents against one schema (a dict already parsed from JSON)."""

    def __init__(self, schema: Mapping) -> None:
        self.schema = schema
        self._check_keywords(schema)

    def _check_keywords(self, node) -> None:
        """Refuse a schema that uses a keyword this validator does not implement."""
        if isinstance(node, Mapping):
            for key, value in node.items():
                if key not in _KEYWORDS and key not in _ANNOTATIONS:
                    raise ValueError(f"schema keyword {key!r} is not supported by core.schema")
                if key in ("properties", "$defs"):
                    for sub in value.values():
                        self._check_keywords(sub)
                elif key not in ("enum", "const", "required", "x-message", "default"):
                    self._check_keywords(value)
        elif isinstance(node, list):
            for item in node:
                self._check_keywords(item)

    def _resolve(self, ref: str) -> Mapping:
        """Return the subschema a local ``$ref`` ("#/$defs/name") points at."""
        if not ref.startswith("#/"):
            raise ValueError(f"only local $ref is supported, got {ref!r}")
        node = self.schema
        for part in ref[2:].split("/"):
            node = node[part]
        return node

    def issues(self, document) -> list[SchemaIssue]:
        """Return every issue found in ``document`` (empty when it is valid)."""
        return list(self._validate(document, self.schema, ()))

    def _validate(self, value, schema: Mapping, path: tuple) -> Iterator[SchemaIssue]:
        if "$ref" in schema:
            yield from self._validate(value, self._resolve(schema["$ref"]), path)
        if "type" in schema:
            kinds = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
            if not any(_is_type(value, k) for k in kinds):
                yield SchemaIssue(path, f"must be of type {' or '.join(kinds)}, got {describe(value)}")
                return
        if "const" in schema and value != schema["const"]:
            yield SchemaIssue(path, f"must be {describe(schema['const'])}, got {describe(value)}")
        if "enum" in schema and value not in schema["enum"]:
            allowed = ", ".join(describe(v) for v in schema["enum"])
            yield SchemaIssue(path, f"must be one of {allowed}; got {describe(value)}")
        if _is_type(value, "number"):
            yield from self._numbers(value, schema, path)
        if isinstance(value, str):
            if "minLength" in schema and len(value) < schema["minLength"]:
                yield SchemaIssue(path, "must not be empty" if schema["minLength"] == 1
                                  else f"must have at least {schema['minLength']} characters")
            if "pattern" in schema and not re.search(schema["pattern"], value):
                yield SchemaIssue(path, f"{describe(value)} does not match the pattern {schema['pattern']}")
        if isinstance(value, list):
            yield from self._array(value, schema, path)
        if isinstance(value, Mapping):
            yield from self._object(value, schema, path)
        for sub in schema.get("allOf", ()):
            yield from self._validate(value, sub, path)
        if "anyOf" in schema and not any(
                not list(self._validate(value, sub, path)) for sub in schema["anyOf"]):
            yield SchemaIssue(path, schema.get("x-message", "does not match any allowed form"))
        if "if" in schema:
            branch = "then" if not list(self._validate(value, schema["if"], path)) else "else"
            if branch in schema:
                yield from self._validate(value, schema[branch], path)

    def _numbers(self, value, schema, path):
        shown = describe(value)
        if "minimum" in schema and value < schema["minimum"]:
            yield SchemaIssue(path, f"must be at least {_bound(schema['minimum'])}, got {shown}")
        if "maximum" in schema and value > schema["maximum"]:
            yield SchemaIssue(path, f"must be at most {_bound(schema['maximum'])}, got {shown}")
        if "exclusiveMinimum" in schema and value <= schema["exclusiveMinimum"]:
            yield SchemaIssue(path, f"must be greater than {_bound(schema['exclusiveMinimum'])}, "
                                    f"got {shown}")
        if "exclusiveMaximum" in schema and value >= schema["exclusiveMaximum"]:
            yield SchemaIssue(path, f"must be less than {_bound(schema['exclusiveMaximum'])}, got {shown}")

    def _array(self, value, schema, path):
        if "minItems" in schema and len(value) < schema["minItems"]:
            yield SchemaIssue(path, f"must have at least {schema['minItems']} items, got {len(value)}")
        if "maxItems" in schema and len(value) > schema["maxItems"]:
            yield SchemaIssue(path, f"must have at most {schema['maxItems']} items, got {len(value)}")
        prefix = schema.get("prefixItems", ())
        for i, (item, sub) in enumerate(zip(value, prefix)):
            yield from self._validate(item, sub, (*path, i))
        if "items" in schema:  # as in draft 2020-12: the items after those prefixItems describe
            for i in range(len(prefix), len(value)):
                yield from self._validate(value[i], schema["items"], (*path, i))

    def _object(self, value, schema, path):
        for key in schema.get("required", ()):
            if key not in value:
                yield SchemaIssue(path, f"'{key}' is required")
        if "minProperties" in schema and len(value) < schema["minProperties"]:
            yield SchemaIssue(path, f"must have at least {schema['minProperties']} entries")
        properties = schema.get("properties", {})
        for key, item in value.items():
            if key in properties:
                yield from self._validate(item, properties[key], (*path, key))
            elif isinstance(schema.get("additionalProperties"), Mapping):
                yield from self._validate(item, schema["additionalProperties"], (*path, key))
            elif schema.get("additionalProperties") is False:
                yield SchemaIssue(path, f"unexpected entry '{key}'")
            if "propertyNames" in schema:
                for issue in self._validate(key, schema["propertyNames"], path):
                    yield SchemaIssue(path, f"key {issue.message}")


@cache
def load_validator(name: str) -> Validator:
    """Return the validator for the schema file ``schema/<name>``."""
    with open(SCHEMA_DIR / name, encoding="utf-8") as handle:
        return Validator(json.load(handle))
