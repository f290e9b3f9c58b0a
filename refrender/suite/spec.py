"""Reading a suite file into validated :class:`Case` objects.

Steps, in order: parse the JSON (no NaN, no duplicate keys: the scene
loader's parser), validate against the shipped JSON Schema
(``refrender/suite/schema.json``), then the checks a schema cannot express
(unique case names, ``frame`` xor ``frame_command``, known placeholders,
parsable gates, loadable scenes and masks, a crop inside the film).  Every
problem is one :class:`SuiteError` line starting with the field path, e.g.
``cases[2].fail_if[0]: cannot parse 'relmse>>1' ...``.
"""
from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path

import jsonschema

from ..errors import RefrenderError
from ..scene._util import format_path, one_line

#: placeholders a frame command may use
PLACEHOLDERS = ("scene", "frame", "case", "suite_dir", "python")
_PLACEHOLDER = re.compile(r"\{([^{}]*)\}")
#: default seconds a frame command may run
DEFAULT_FRAME_TIMEOUT = 600.0
#: default gate when a case names none
DEFAULT_FAIL_IF = ("significant",)


class SuiteError(RefrenderError, ValueError):
    """A suite file is invalid; the message starts with the field path."""


def suite_error(path, message: str) -> SuiteError:
    return SuiteError(one_line(f"{format_path(path) if path else 'suite'}: {message}"))


@dataclass
class Case:
    """One validated case (paths resolved, defaults applied)."""
    index: int
    name: str
    scene_path: Path
    scene: object                      # refrender Scene
    reference: dict                    # spp / target_error / time_s / min_spp / seed (only those given)
    fail_if: list
    frame: Path | None = None
    frame_command: list | None = None
    frame_suffix: str = ".exr"
    frame_timeout: float = DEFAULT_FRAME_TIMEOUT
    tolerance: float | None = None
    crop: tuple | None = None
    mask_path: Path | None = None
    mask: object = None                # (H, W) bool array or None
    tags: list = field(default_factory=list)
    description: str = ""


@dataclass
class Suite:
    path: Path
    name: str
    description: str
    cache: Path
    cases: list


@lru_cache(maxsize=1)
def schema() -> dict:
    """The shipped suite JSON Schema (draft 2020-12) as a dict."""
    return json.loads(resources.files("refrender.suite").joinpath("schema.json").read_text("utf-8"))


def _schema_errors(doc) -> None:
    from ..scene._schema_check import _describe, _document_order
    errors = list(jsonschema.Draft202012Validator(schema()).iter_errors(doc))
    if not errors:
        return
    path, message = min((_describe(e) for e in errors), key=lambda pm: _document_order(doc, pm[0]))
    raise suite_error(path, message)


def _read(path: Path):
    from ..errors import SceneError
    from ..scene.load import _parse_json, _read_text, plain_document
    label = str(path)
    try:
        text = _read_text(path, label)
    except SceneError as exc:
        raise SuiteError(str(exc).replace("scene file not found", "suite file not found")) from None
    try:
        return plain_document(_parse_json(text, label))
    except SceneError as exc:           # the parser's messages name the file or the field
        raise SuiteError(str(exc)) from None


def load_suite(path, *, farm: bool = False) -> Suite:
    """Load and validate a suite file.  ``farm``: references will be rendered
    on a Dask cluster, which takes ``spp`` budgets only."""
    path = Path(path)
    doc = _read(path)
    _schema_errors(doc)
    base = path.resolve().parent
    defaults = doc.get("defaults", {})
    names = {}
    cases = []
    for i, raw in enumerate(doc["cases"]):
        where = ("cases", i)
        if raw["name"] in names:
            raise suite_error(where + ("name",), f"duplicate case name {raw['name']!r} "
                              f"(also cases[{names[raw['name']]}])")
        names[raw["name"]] = i
        cases.append(_case(i, raw, defaults, base, farm))
    cache = Path(doc["cache"]) if "cache" in doc else Path(".refrender-references")
    return Suite(path=path, name=doc.get("name", path.stem), description=doc.get("description", ""),
                 cache=cache if cache.is_absolute() else base / cache, cases=cases)


def _gates(conditions, where) -> list:
    from ..compare.core import EXTRA_QUANTITIES, parse_condition
    from ..compare.metrics import METRICS
    for j, text in enumerate(conditions):
        try:
            name = parse_condition(text)[0]
        except RefrenderError as exc:
            raise suite_error(where + (j,), str(exc).removeprefix("--fail-if: ")) from None
        if name != "significant" and name not in METRICS and name not in EXTRA_QUANTITIES:
            raise suite_error(where + (j,), f"unknown quantity {name!r} in {text!r} "
                              f"(use {', '.join(METRICS + EXTRA_QUANTITIES)} or 'significant')")
    return list(conditions)


def _reference(raw: dict, where, farm: bool) -> dict:
    from ..overnight import parse_duration
    out = {k: raw[k] for k in ("spp", "target_error", "min_spp", "seed") if k in raw}
    if "time" in raw:
        try:
            out["time_s"] = parse_duration(raw["time"], format_path(where + ("time",)))
        except RefrenderError as exc:
            raise SuiteError(one_line(str(exc))) from None
        if not out["time_s"] > 0:
            raise suite_error(where + ("time",), f"must be a positive duration, got {raw['time']!r}")
    if farm and ("time_s" in out or "target_error" in out):
        key = "time" if "time_s" in out else "target_error"
        raise suite_error(where + (key,), "references rendered on a Dask cluster take an spp budget only")
    return out


def _case(i: int, raw: dict, defaults: dict, base: Path, farm: bool) -> Case:
    from .. import load_scene
    from ..compare.inputs import load_mask
    where = ("cases", i)
    merged = dict(defaults)
    merged.update(raw)
    ref_raw = dict(defaults.get("reference", {}))
    ref_raw.update(raw.get("reference", {}))
    ref_where = where + ("reference",) if "reference" in raw else ("defaults", "reference")
    if ("frame" in raw) == ("frame_command" in raw):
        raise suite_error(where, "give either frame (an image file) or frame_command (a command that writes it)")
    scene_path = _resolve(base, raw["scene"])
    try:
        scene = load_scene(scene_path)
    except RefrenderError as exc:
        raise suite_error(where + ("scene",), str(exc)) from None
    command = None
    if "frame_command" in raw:
        command = list(raw["frame_command"])
        for j, part in enumerate(command):
            for name in _PLACEHOLDER.findall(part):
                if name not in PLACEHOLDERS:
                    raise suite_error(where + ("frame_command", j), f"unknown placeholder {{{name}}} "
                                      f"(use {', '.join('{' + p + '}' for p in PLACEHOLDERS)})")
    fail_where = where + ("fail_if",) if "fail_if" in raw else ("defaults", "fail_if")
    fail_if = _gates(merged.get("fail_if", list(DEFAULT_FAIL_IF)), fail_where)
    x0, y0, x1, y1 = scene.film.window
    w, h = x1 - x0, y1 - y0
    crop = None
    if "crop" in raw:
        cx0, cy0, cx1, cy1 = raw["crop"]
        if not (cx0 < cx1 <= w and cy0 < cy1 <= h):
            raise suite_error(where + ("crop",), f"{raw['crop']} is not inside the {w}x{h} film "
                              "(half-open [x0, y0, x1, y1], x0 < x1, y0 < y1)")
        crop = (cx0, cy0, cx1, cy1)
    mask_path = mask = None
    if "mask" in raw:
        mask_path = _resolve(base, raw["mask"])
        if not mask_path.is_file():
            raise suite_error(where + ("mask",), f"file not found: {mask_path}")
        try:
            mask = load_mask(mask_path, (h, w))
        except RefrenderError as exc:
            raise suite_error(where + ("mask",), str(exc).removeprefix("--mask: ")) from None
    tags = list(dict.fromkeys(list(defaults.get("tags", [])) + list(raw.get("tags", []))))
    return Case(index=i, name=raw["name"], scene_path=scene_path, scene=scene,
                reference=_reference(ref_raw, ref_where, farm), fail_if=fail_if,
                frame=_resolve(base, raw["frame"]) if "frame" in raw else None, frame_command=command,
                frame_suffix=raw.get("frame_suffix", ".exr"),
                frame_timeout=float(merged.get("frame_timeout", DEFAULT_FRAME_TIMEOUT)),
                tolerance=merged.get("tolerance"), crop=crop, mask_path=mask_path, mask=mask, tags=tags,
                description=raw.get("description", ""))


def _resolve(base: Path, text: str) -> Path:
    p = Path(text).expanduser()
    return p if p.is_absolute() else base / p


def select(cases, patterns) -> list:
    """The cases whose name or one of whose tags matches a glob pattern (all if none given)."""
    if not patterns:
        return list(cases)
    from fnmatch import fnmatchcase
    return [c for c in cases if any(fnmatchcase(c.name, p) or any(fnmatchcase(t, p) for t in c.tags)
                                    for p in patterns)]
