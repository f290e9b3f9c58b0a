"""Small helpers shared by the scene loader: field paths, errors, vectors.

A *field path* is a tuple of keys (str) and list indices (int) leading from the
document root to a value, e.g. ``("objects", 2, "radius")``; it is shown to the
user as ``objects[2].radius``.
"""
from __future__ import annotations

import json
import re
from typing import Any, Sequence

import numpy as np

from ..errors import SceneError

_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_MAX_REPR = 60


def format_path(path: Sequence[str | int]) -> str:
    """Render a field path as ``objects[2].radius`` (``scene`` for the root).

    Keys that are not plain identifiers are quoted: ``materials["my mat"]``.
    """
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        elif _IDENTIFIER.match(part):
            out += f".{part}" if out else part
        else:
            out += f"[{json.dumps(part)}]"
    return out or "scene"


def one_line(text: str) -> str:
    """Collapse *text* to a single line (error messages must be one line)."""
    return " ".join(str(text).split())


def path_problem(exc: BaseException) -> str:
    """A short reason for an OSError, ValueError or RuntimeError raised by a file path.

    Covers a name longer than the file system allows (OSError ENAMETOOLONG), a
    NUL byte in the name (ValueError) and a symlink loop (RuntimeError or
    OSError ELOOP, by Python version).
    """
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror.lower()
    if isinstance(exc, RuntimeError) and "loop" in str(exc).lower():
        return "symbolic link loop"
    if isinstance(exc, ValueError) and "null" in str(exc).lower():
        return "the path contains a NUL byte"
    text = one_line(str(exc))
    return (text[:120] or type(exc).__name__)


def scene_error(path: Sequence[str | int], message: str) -> SceneError:
    """A :class:`SceneError` whose one-line message starts with the field path."""
    return SceneError(one_line(f"{format_path(path)}: {message}"))


def show(value: Any) -> str:
    """A short JSON-like rendering of a user value, for error messages."""
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, (list, tuple)) and len(value) > 4:
        return f"a list of {len(value)} items"
    try:
        text = json.dumps(value, allow_nan=True)
    except (TypeError, ValueError):
        text = repr(value)
    if isinstance(value, float) and not np.isfinite(value):
        text = repr(value)  # nan, inf, -inf
    return text if len(text) <= _MAX_REPR else text[: _MAX_REPR - 3] + "..."


def vec3(value: Sequence[float]) -> np.ndarray:
    """A validated 3-vector (list of 3 finite numbers) as a (3,) float64 array."""
    return np.array([float(v) for v in value], dtype=np.float64)


def unit(value: Sequence[float], path: Sequence[str | int]) -> np.ndarray:
    """Normalise a 3-vector; a zero vector is an error naming *path*.

    Returns
    -------
    (3,) float64 array of length 1 (dimensionless direction).
    """
    v = vec3(value)
    peak = float(np.max(np.abs(v)))
    if peak == 0.0:
        raise scene_error(path, f"must be a non-zero vector, got {show(list(value))}")
    v = v / peak  # scaled first so that huge components cannot overflow the length
    return v / np.linalg.norm(v)
