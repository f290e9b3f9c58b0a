"""The validation boundary of metadata read back from our own files.

A state file's JSON metadata and an EXR's ``refrender`` header attribute pass
their checksums (zip CRC-32, SHA-256 of the arrays) even when a field has been
damaged or edited by hand; :func:`check_metadata` validates them against
``metadata.schema.json`` (JSON Schema draft 2020-12), like scenes are, before
any command reads a field.  Problems are one line naming the file and the
field: ``out.state: corrupted refrender metadata (run.sessions: expected an
integer, got "3")``.
"""
from __future__ import annotations

import json
import math
from functools import lru_cache
from importlib import resources
from typing import Any, Iterable

from ..errors import ImageError

__all__ = ["check_metadata", "metadata_schema", "STATE_REQUIRED"]

#: keys a state file must have (the estimator settings, see result.ESTIMATOR_KEYS, and its samples)
STATE_REQUIRED = ("scene_sha256", "seed", "strategy", "light_sampling", "max_bounces", "rr_start",
                  "width", "height", "window", "sample_ranges")


@lru_cache(maxsize=1)
def metadata_schema() -> dict:
    """The shipped metadata JSON Schema as a dict."""
    return json.loads(resources.files("refrender.io").joinpath("metadata.schema.json").read_text("utf-8"))


@lru_cache(maxsize=1)
def _validator():
    import jsonschema
    return jsonschema.Draft202012Validator(metadata_schema())


def _non_finite(value: Any, path: tuple = ()) -> tuple | None:
    """The field path of the first NaN or infinity in *value* (JSON allows them as extensions)."""
    if isinstance(value, float):
        return None if math.isfinite(value) else path
    if isinstance(value, dict):
        items: Iterable = value.items()
    elif isinstance(value, list):
        items = enumerate(value)
    else:
        return None
    for key, item in items:
        found = _non_finite(item, path + (key,))
        if found is not None:
            return found
    return None


def check_metadata(meta: Any, where, required: Iterable[str] = ()) -> None:
    """Raise a one-line ImageError naming *where* if *meta* breaks the metadata schema.

    *required*: keys that must be present (a state file: :data:`STATE_REQUIRED`).
    """
    from ..scene._schema_check import _describe
    from ..scene._util import format_path, one_line
    problem = None
    if not isinstance(meta, dict):
        problem = "not a JSON object"
    else:
        bad = _non_finite(meta)
        if bad is not None:
            problem = f"{format_path(bad)}: must be a finite number"
        else:
            errors = sorted(_validator().iter_errors(meta), key=lambda e: list(map(str, e.absolute_path)))
            if errors:
                path, message = _describe(errors[0])
                problem = f"{format_path(path) if path else 'metadata'}: {message}"
            else:
                missing = [k for k in required if k not in meta]
                if missing:
                    problem = f"{missing[0]}: required key is missing"
    if problem is not None:
        raise ImageError(one_line(f"{where}: corrupted refrender metadata ({problem})"))
