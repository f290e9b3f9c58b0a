"""Validation of a scene document against the shipped JSON Schema.

jsonschema's own messages are long reprs; this module picks one error (the
first in document order) and rewrites it as ``field.path: short sentence``.
"""
from __future__ import annotations

import difflib
import json
from functools import lru_cache
from importlib import resources
from typing import Any, Iterable

import jsonschema

from ..errors import SceneError
from ._util import scene_error, show

_TYPE_NAMES = {
    "number": "a number",
    "integer": "an integer",
    "string": "a string",
    "boolean": "true or false",
    "array": "a list",
    "object": "an object",
    "null": "null",
}

#: Extra words for a missing required key, by its field path.
_REQUIRED_HINTS = {
    ("camera", key): " (give position and look_at, or camera_to_world)" for key in ("position", "look_at")
}


@lru_cache(maxsize=1)
def schema() -> dict:
    """The shipped scene JSON Schema (draft 2020-12) as a dict."""
    text = resources.files("refrender.scene").joinpath("schema.json").read_text("utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(schema())


def check_schema(doc: Any) -> None:
    """Raise a one-line :class:`SceneError` if *doc* breaks the schema.

    *doc* must hold plain JSON values only (see ``load.plain_document``).
    """
    view = _schema_view(doc)
    errors = list(_validator().iter_errors(view))
    if errors:
        raise _best_error(view, errors)


# jsonschema costs about 0.1 ms per list item, so a triangles object with 10^5
# positions would take seconds. Its bulk lists are checked here in plain Python
# instead, with the same rules as the schema; a list that passes is shortened to
# its first item before validation, one that fails is left whole so that
# jsonschema reports the exact item.

def _is_vec3_list(items: list) -> bool:
    """Every item a list of 3 numbers (schema: #/$defs/vec3); values are plain JSON."""
    return all(type(v) is list and len(v) == 3 and all(type(x) in (int, float) for x in v) for v in items)


def _is_index_list(items: list) -> bool:
    """Every item a list of 3 integers in [0, 2^31 - 1] (schema: triangles.indices items)."""
    return all(type(v) is list and len(v) == 3 and all(type(x) is int and 0 <= x <= _INDEX_MAX for x in v)
               for v in items)


_INDEX_MAX = 2 ** 31 - 1


_BULK_LISTS = {"triangles": (("positions", _is_vec3_list), ("indices", _is_index_list))}


def _object_view(obj: Any) -> Any:
    if not isinstance(obj, dict) or not isinstance(obj.get("shape"), str):
        return obj
    view = dict(obj)
    for key, well_formed in _BULK_LISTS.get(obj["shape"], ()):
        items = obj.get(key)
        if isinstance(items, list) and len(items) > 1 and well_formed(items):
            view[key] = items[:1]
    return view


def _schema_view(doc: Any) -> Any:
    """*doc* with its well-formed bulk lists shortened (a shallow copy; *doc* is unchanged)."""
    if not isinstance(doc, dict) or not isinstance(doc.get("objects"), list):
        return doc
    return {**doc, "objects": [_object_view(obj) for obj in doc["objects"]]}


def _best_error(doc: Any, errors: Iterable[jsonschema.ValidationError]) -> SceneError:
    """The error whose field comes first in the document, rewritten."""
    described = [_describe(e) for e in errors]
    path, message = min(described, key=lambda pm: _document_order(doc, pm[0]))
    return scene_error(path, message)


def _document_order(doc: Any, path: tuple) -> tuple:
    """Sort key placing a field path where it appears in the document.

    A key absent from its object (a missing required key) sorts after the
    keys present, so an unknown key (``raduis``) wins over the missing key it
    was meant to be (``radius``).
    """
    key = []
    node = doc
    for part in path:
        if isinstance(node, dict):
            keys = list(node)
            key.append(keys.index(part) if part in node else len(keys))
            node = node.get(part)
        elif isinstance(node, list) and isinstance(part, int) and part < len(node):
            key.append(part)
            node = node[part]
        else:
            key.append(0)
            node = None
    return tuple(key)


def _describe(error: jsonschema.ValidationError) -> tuple[tuple, str]:
    """(field path, short message) for one jsonschema error."""
    path = tuple(error.absolute_path)
    kind = error.validator
    value = error.validator_value
    inst = error.instance
    if kind == "additionalProperties":
        return _unknown_key(path, inst, error.schema)
    if kind == "required":
        missing = [k for k in value if k not in inst]
        where = path + (missing[0],)
        return where, "required key is missing" + _REQUIRED_HINTS.get(where, "")
    if kind == "not" and value == {}:
        reason = error.schema.get("description", "not allowed here")
        return path, f"not allowed: {reason}"
    return path, _value_message(kind, value, inst, error.schema)


def _unknown_key(path: tuple, inst: dict, subschema: dict) -> tuple[tuple, str]:
    known = list(subschema.get("properties", {}))
    extra = [k for k in inst if k not in known]
    expected = ", ".join(known) if known else "no keys"
    return path + (extra[0],), f"unknown key{_did_you_mean(extra[0], known)} (expected one of: {expected})"


def _did_you_mean(given: Any, valid: list) -> str:
    """'; did you mean "x"?' for the closest valid string (difflib ratio >= 0.6), or ''."""
    if not isinstance(given, str):
        return ""
    close = difflib.get_close_matches(given, [v for v in valid if isinstance(v, str)], n=1, cutoff=0.6)
    return f"; did you mean {json.dumps(close[0])}?" if close else ""


def _value_message(kind: str, value: Any, inst: Any, subschema: dict) -> str:
    """Message for a check on one value (type, range, enum, length)."""
    got = show(inst)
    if kind == "type":
        names = value if isinstance(value, list) else [value]
        return f"expected {' or '.join(_TYPE_NAMES.get(n, n) for n in names)}, got {got}"
    if kind == "enum":
        return (f"must be one of {', '.join(json.dumps(v) for v in value)}; got {got}"
                f"{_did_you_mean(inst, value)}")
    if kind == "const":
        return f"must be {json.dumps(value)}, got {got}"
    bounds = {"minimum": ">=", "maximum": "<=", "exclusiveMinimum": ">", "exclusiveMaximum": "<"}
    if kind in bounds:
        return f"must be {bounds[kind]} {show(value)}, got {got}"
    if kind in ("minItems", "maxItems"):
        return _length_message(kind, value, inst, subschema)
    if kind == "minLength":
        return "must not be empty"
    return f"invalid value {got}"  # a schema keyword without a dedicated message


def _length_message(kind: str, value: int, inst: list, subschema: dict) -> str:
    if kind == "minItems" and value == 1:
        return "must not be empty"
    # Fixed-size lists (vectors, matrices) have minItems == maxItems.
    if subschema.get("minItems") == subschema.get("maxItems"):
        word = "exactly"
    else:
        word = "at least" if kind == "minItems" else "at most"
    return f"must have {word} {value} items, got {len(inst)}"
