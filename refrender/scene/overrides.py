"""Command-line overrides of a scene document: ``--set KEY=VALUE``, ``--film WxH``, ``--crop``.

Overrides edit the plain JSON document before validation, so the scene hash
(``scene_sha256``, the canonical JSON of the document) includes them and two
renders with different overrides never pass for the same scene.
"""
from __future__ import annotations

import copy
import json
import re
from pathlib import Path

from ..errors import SceneError

_INDEX = re.compile(r"\[(\d+)\]")


def _path_parts(key: str) -> list:
    """``"objects[2].radius"`` or ``"objects.2.radius"`` -> ["objects", 2, "radius"]."""
    parts = []
    for piece in _INDEX.sub(r".\1", key).split("."):
        if piece == "":
            raise SceneError(f"--set {key}: empty key segment")
        parts.append(int(piece) if piece.isdigit() else piece)
    return parts


def parse_assignment(text: str) -> tuple[str, object]:
    """``KEY=VALUE`` with VALUE as JSON (a bare word that is not JSON is a string)."""
    key, eq, raw = text.partition("=")
    key = key.strip()
    if not eq or not key:
        raise SceneError(f"--set: expected KEY=VALUE (e.g. camera.fov_y=40), got {text!r}")
    try:
        value = json.loads(raw)
    except ValueError:
        if re.fullmatch(r"[A-Za-z_][\w.\-/]*", raw.strip()):
            value = raw.strip()
        else:
            raise SceneError(f"--set {key}: value is not JSON: {raw!r}") from None
    return key, value


def set_value(document: dict, key: str, value) -> None:
    """Set the dotted ``key`` of ``document`` (lists by index) to ``value``; missing
    dict levels are created, list indices must exist."""
    parts = _path_parts(key)
    node = document
    for i, part in enumerate(parts):
        last = i == len(parts) - 1
        where = ".".join(str(p) for p in parts[:i]) or "the scene"
        if isinstance(node, list):
            if not isinstance(part, int) or not 0 <= part < len(node):
                raise SceneError(f"--set {key}: {where} is a list of {len(node)}; give an index 0..{len(node) - 1}")
        elif isinstance(node, dict):
            part = str(part)
        else:
            raise SceneError(f"--set {key}: {where} is not an object or a list")
        if last:
            node[part] = copy.deepcopy(value)
        else:
            if isinstance(node, dict) and part not in node:
                node[part] = {}
            node = node[part]


def apply_overrides(document: dict, assignments=(), *, film: str | None = None, crop: str | None = None) -> dict:
    """A copy of ``document`` with ``--film WxH``, ``--crop X0,Y0,X1,Y1`` and the ``--set`` assignments applied
    (in that order)."""
    doc = copy.deepcopy(document)
    if film is not None:
        m = re.fullmatch(r"\s*(\d+)\s*[xX]\s*(\d+)\s*", film)
        if not m:
            raise SceneError(f"--film: expected WxH with positive integers, e.g. 160x120, got {film!r}")
        set_value(doc, "film.width", int(m.group(1)))
        set_value(doc, "film.height", int(m.group(2)))
        if crop is None and isinstance(doc.get("film"), dict):
            doc["film"].pop("crop", None)          # a crop of the old film rarely fits the new one
    if crop is not None:
        try:
            window = [int(v) for v in crop.split(",")]
        except ValueError:
            raise SceneError(f"--crop: expected X0,Y0,X1,Y1 (integers), got {crop!r}") from None
        if len(window) != 4:
            raise SceneError(f"--crop: expected four integers X0,Y0,X1,Y1, got {crop!r}")
        set_value(doc, "film.crop", window)
    for text in assignments:
        key, value = parse_assignment(text)
        set_value(doc, key, value)
    return doc


def load_with_overrides(path, assignments=(), *, film=None, crop=None):
    """Load the scene file ``path`` with overrides; relative paths in it stay
    relative to its folder, and ``source_path`` names the original file."""
    import dataclasses

    from .load import _parse_json, _read_text, load_scene
    path = Path(path)
    if not assignments and film is None and crop is None:
        return load_scene(path)
    doc = _parse_json(_read_text(path, str(path)), str(path))
    if not isinstance(doc, dict):
        return load_scene(path)                     # the loader names the problem
    doc = apply_overrides(doc, assignments, film=film, crop=crop)
    scene = load_scene(doc, base_dir=path.resolve().parent)
    return dataclasses.replace(scene, source_path=path.resolve())
