"""Loading a scene document (a JSON file or a dict) into a validated :class:`Scene`.

Every problem is a :class:`refrender.errors.SceneError` with a one-line message
that starts with the field path, e.g. ``objects[2].radius: must be > 0, got -1``
(or with the file name for problems of the file itself: missing, unreadable,
not JSON). The steps, in order:

1. read and parse the JSON text, rejecting ``NaN``/``Infinity`` constants and
   duplicate keys (the dict form is deep-copied into plain JSON values);
2. check that every number is finite;
3. validate against the shipped JSON Schema (``refrender/scene/schema.json``);
4. semantic checks that a schema cannot express, while building the objects of
   :mod:`refrender.scene.model` (mesh files are read here).
"""
from __future__ import annotations

import hashlib
import json
import math
import os
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import SceneError
from ..limits import SCENE_NUMBER_MAX
from ._build import build_camera, build_film, build_lights, build_materials, build_objects, build_render
from ._schema_check import check_schema
from ._shapes import FileLog
from ._util import one_line, path_problem, scene_error, show
from .model import Scene

__all__ = ["load_scene", "scene_sha256"]


class _NonFinite:
    """Placeholder the JSON parser puts where the text has NaN, Infinity or -Infinity."""

    def __init__(self, name: str) -> None:
        self.name = name


class _Duplicates(dict):
    """A parsed JSON object whose text repeats a key (``repeated`` names it)."""

    repeated: str = ""


def _object_pairs(pairs: list[tuple[str, Any]]) -> dict:
    """object_pairs_hook: a dict, or a :class:`_Duplicates` marking the first repeated key."""
    result = dict(pairs)
    if len(result) == len(pairs):
        return result
    marked = _Duplicates(result)
    seen: set[str] = set()
    for key, _ in pairs:
        if key in seen:
            marked.repeated = key
            break
        seen.add(key)
    return marked


def _read_text(path: Path, label: str) -> str:
    """The text of a scene file; errors name the file (*label*)."""
    if not path.exists():
        raise SceneError(one_line(f"{label}: scene file not found"))
    if not path.is_file():
        raise SceneError(one_line(f"{label}: not a file"))
    try:
        return path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise SceneError(one_line(f"{label}: not UTF-8 text (byte {exc.start})")) from None
    except OSError as exc:
        raise SceneError(one_line(f"{label}: cannot read: {exc.strerror or exc}")) from None


def _parse_json(text: str, label: str) -> Any:
    """Parse JSON text; syntax errors give the line and column."""
    try:
        return json.loads(text, parse_constant=_NonFinite, object_pairs_hook=_object_pairs)
    except json.JSONDecodeError as exc:
        raise SceneError(one_line(f"{label}: invalid JSON at line {exc.lineno}, column {exc.colno}: "
                                  f"{exc.msg}")) from None
    except (ValueError, RecursionError) as exc:  # e.g. an integer of more than 4300 digits
        raise SceneError(one_line(f"{label}: invalid JSON: {exc}")) from None


def _plain_number(value: Any, path: tuple) -> int | float:
    """A finite Python int or float of magnitude <= SCENE_NUMBER_MAX, or an error naming *path*."""
    if isinstance(value, (int, np.integer)):
        if abs(int(value)) > _MAX_INT:
            raise scene_error(path, f"must have magnitude at most {SCENE_NUMBER_MAX:g} (refrender's "
                              f"limit for scene numbers), got an integer of {len(str(abs(int(value))))} digits")
        return int(value)
    number = float(value)
    if not math.isfinite(number):
        raise scene_error(path, f"must be a finite number, got {show(number)}")
    if abs(number) > SCENE_NUMBER_MAX:
        raise scene_error(path, f"must have magnitude at most {SCENE_NUMBER_MAX:g} (refrender's limit "
                          f"for scene numbers), got {number:g}")
    return number


_MAX_INT = int(SCENE_NUMBER_MAX)


def _is_plain_number(x: Any) -> bool:
    """Fast test for the common case: a Python float or int of magnitude <= SCENE_NUMBER_MAX."""
    kind = type(x)
    return (kind is float and -SCENE_NUMBER_MAX <= x <= SCENE_NUMBER_MAX) or (kind is int and -_MAX_INT <= x <= _MAX_INT)


def plain_document(value: Any, path: tuple = ()) -> Any:
    """A deep copy of *value* made of plain JSON values (dict, list, str, int, float, bool, None).

    Tuples and numpy arrays become lists, numpy scalars Python numbers. NaN,
    infinities, duplicate keys, non-string keys and other types are errors.
    """
    kind = type(value)
    if kind is list or kind is tuple:
        if all(map(_is_plain_number, value)):  # fast path: a vector or matrix row
            return list(value)
        return [plain_document(item, path + (i,)) for i, item in enumerate(value)]
    if kind is dict:
        return _plain_object(value, path)
    if value is None or kind is str or kind is bool:
        return value
    return _plain_other(value, path)


def _plain_object(value: dict, path: tuple) -> dict:
    out = {}
    for key, item in value.items():
        if not isinstance(key, str):
            raise scene_error(path, f"keys must be strings, got {show(key)}")
        out[key] = plain_document(item, path + (key,))
    return out


def _plain_other(value: Any, path: tuple) -> Any:
    """plain_document for the uncommon types: markers of the parser, numbers, numpy values."""
    if isinstance(value, _Duplicates):
        raise scene_error(path + (value.repeated,), "duplicate key")
    if isinstance(value, _NonFinite):
        raise scene_error(path, f"{value.name} is not allowed (every number must be finite)")
    if isinstance(value, np.ndarray):
        return plain_document(value.tolist(), path)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, float, np.integer, np.floating)):
        return _plain_number(value, path)
    if isinstance(value, dict):
        return _plain_object(value, path)
    if isinstance(value, (list, tuple)):
        return [plain_document(item, path + (i,)) for i, item in enumerate(value)]
    if isinstance(value, str):
        return str(value)
    raise scene_error(path, f"not a JSON value (a Python {type(value).__name__})")


def scene_sha256(document: dict, file_digests: list[bytes]) -> str:
    """SHA-256 (hex) identifying a scene and the files it references.

    The hash input is the canonical JSON of *document* (``sort_keys=True``,
    separators ``","`` and ``":"``, ASCII, UTF-8 bytes) followed by the 32-byte
    SHA-256 digest of the bytes of each referenced file, in document order.
    Only the file paths as written in the document enter the hash, not the
    folder they resolve in: moving a scene folder keeps its hash.
    """
    canonical = json.dumps(document, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(canonical.encode("utf-8"))
    for file_digest in file_digests:
        digest.update(file_digest)
    return digest.hexdigest()


def _document_of(source: Any) -> tuple[Any, Path | None]:
    """The plain document of *source* and the resolved scene file path (None for a dict)."""
    if isinstance(source, dict):
        return plain_document(source), None
    if isinstance(source, (str, os.PathLike)):
        path, label = Path(source), one_line(repr(str(source))[1:-1])
        try:
            text = _read_text(path, label)
            resolved = path.resolve()
        except SceneError:
            raise
        except (OSError, ValueError, RuntimeError) as exc:
            # a name too long for the file system, a NUL byte, a symlink loop ...
            raise SceneError(one_line(f"{label[:200]}: cannot read the scene file: {path_problem(exc)}")) from None
        return plain_document(_parse_json(text, label)), resolved
    raise SceneError(f"scene: expected a path to a JSON file or a dict, got a {type(source).__name__}")


def load_scene(source: str | os.PathLike | dict, *, base_dir: str | os.PathLike | None = None) -> Scene:
    """Load, validate and build a scene.

    Parameters
    ----------
    source
        Path of a scene JSON file, or the document itself as a dict (the same
        structure; tuples and numpy values are accepted and converted), or an
        OpenUSD stage (.usd, .usda, .usdc, .usdz; see :mod:`refrender.scene.usd`).
    base_dir
        Folder against which relative file paths in the scene (meshes) are
        resolved. Default: the folder of the scene file, or the current
        working directory for a dict.

    Returns
    -------
    Scene
        With world-space shapes, ``sha256`` (see :func:`scene_sha256`),
        ``document`` (a deep copy of the validated document, without defaults
        filled in) and ``source_path`` (the resolved file path or None).

    Raises
    ------
    SceneError
        One line naming the field, e.g. ``objects[2].radius: must be > 0, got -1``.
    """
    from .usd import expand_usd_objects, is_usd, load_usd_scene
    if is_usd(source):
        return load_usd_scene(source)
    try:
        document, source_path = _document_of(source)
    except RecursionError:
        raise SceneError("scene: nested too deeply") from None
    check_schema(document)
    if base_dir is not None:
        folder = Path(base_dir)
    else:
        folder = source_path.parent if source_path is not None else Path.cwd()
    files = FileLog(folder.resolve())
    built = document
    if any(spec.get("shape") == "usd" for spec in document["objects"]):
        built = expand_usd_objects(document, files)   # the stages' entries, validated like the rest
        check_schema(built)
    camera = build_camera(built["camera"])
    film = build_film(built["film"])
    materials = build_materials(built.get("materials", {}), files)
    imported = {}
    for i, spec in enumerate(built["objects"]):
        if spec["shape"] == "gltf":
            from .gltf import expand_gltf_object
            imported[i] = expand_gltf_object(spec, ("objects", i), files)
            materials.update(imported[i].materials)
    objects = build_objects(built["objects"], materials, files, imported)
    lights = build_lights(built.get("lights", []), files)
    for part in imported.values():
        lights.extend(part.lights)
    render = build_render(built.get("render", {}))
    return Scene(
        camera=camera, film=film, materials=materials, objects=objects, lights=lights, render=render,
        sha256=scene_sha256(document, [d for _, d in files.digests]),
        source_path=source_path, document=document,
    )
