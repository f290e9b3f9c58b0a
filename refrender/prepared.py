"""The compiled form of a scene, built once per Scene object and reused.

``refrender.trace``, ``refrender.render`` and the farm's workers all need the
flat arrays and the BVH of a scene (:func:`refrender.geometry.compile.compile_scene`,
seconds for a large mesh) and its light table.  :func:`prepare` builds them the
first time it sees a :class:`~refrender.scene.model.Scene` object and returns
the same :class:`Prepared` on every later call, so the second ``trace`` of a
scene starts tracing at once.

Keying.  The cache is held beside the Scene object, not in it (the scene stays
a plain picklable value: the farm's payload and ``copy`` never carry it):

* an entry belongs to one Scene object (``id`` plus a weak-reference
  finaliser that drops the entry when the scene dies, before its ``id`` can be
  reused), so a different scene, even an equal one, never reuses it;
* the entry also keeps the scene's parts it was built from (camera, film,
  render settings, every material, object, shape and light) and is rebuilt when any of them
  is no longer the same object, e.g. after ``scene.objects.append(...)`` or
  replacing a list item (a Scene is frozen, but its lists and dicts are not).

Arrays inside a scene (mesh positions, texture images) are taken as
immutable, like the frozen scene itself; after changing one in place, call
:func:`discard` (the content is not hashed: that would cost about 0.1 s per
10 MB on every call).
"""
from __future__ import annotations

import threading
import weakref
from dataclasses import dataclass, field

import numpy as np

from .geometry.compile import LightArrays, SceneArrays, build_lights, camera_array, compile_scene

#: id(scene) -> _Entry; entries are removed by a finaliser when the scene is collected
_ENTRIES: dict[int, "_Entry"] = {}
_LOCK = threading.Lock()


@dataclass
class Prepared:
    """A scene's arrays for the kernels: geometry + BVH, camera, and lights per strategy."""
    arrays: SceneArrays
    camera: np.ndarray
    _scene_ref: weakref.ref
    _lights: dict = field(default_factory=dict)
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def lights(self, strategy: str) -> LightArrays:
        """The light table for ``strategy`` (``bsdf`` keeps only delta lights), built once."""
        with self._lock:
            L = self._lights.get(strategy)
            if L is None:
                scene = self._scene_ref()
                L = self._lights[strategy] = build_lights(scene, self.arrays, strategy)
            return L


@dataclass
class _Entry:
    parts: tuple
    prepared: Prepared


def _parts(scene) -> tuple:
    """The objects a compiled scene depends on (compared by identity)."""
    objs = tuple(scene.objects)
    return ((scene.camera, scene.film, scene.render, scene.materials) + tuple(scene.materials.items())
            + objs + tuple(o.shape for o in objs) + (scene.lights,) + tuple(scene.lights))


def _same(a: tuple, b: tuple) -> bool:
    if len(a) != len(b):
        return False
    for x, y in zip(a, b):
        if isinstance(x, tuple):            # (name, Material) items of the material dict
            if x[0] != y[0] or x[1] is not y[1]:
                return False
        elif x is not y:
            return False
    return True


def _drop(key: int) -> None:
    with _LOCK:
        _ENTRIES.pop(key, None)


def prepare(scene) -> Prepared:
    """The compiled scene (arrays, BVH, camera, lights), built on the first call only.

    Later calls with the same Scene object return the same :class:`Prepared`
    (see the module notes for when it is rebuilt).
    """
    key = id(scene)
    parts = _parts(scene)
    with _LOCK:
        entry = _ENTRIES.get(key)
        if entry is not None and _same(entry.parts, parts):
            return entry.prepared
    # build outside the global lock (seconds for a big mesh); two threads
    # preparing the same new scene at once may both build, and the last wins
    S = compile_scene(scene)
    prepared = Prepared(S, camera_array(scene), weakref.ref(scene))
    with _LOCK:
        if key not in _ENTRIES:
            weakref.finalize(scene, _drop, key)
        _ENTRIES[key] = _Entry(parts, prepared)
    return prepared


def discard(scene) -> None:
    """Forget the compiled form of ``scene`` (the next :func:`prepare` rebuilds it)."""
    with _LOCK:
        entry = _ENTRIES.get(id(scene))
        if entry is not None:
            entry.parts = ()
