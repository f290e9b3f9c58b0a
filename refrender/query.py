"""Batch ray queries against a scene's BVH (for tests, tools and benchmarks)."""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .errors import RenderError
from .geometry.compile import SceneArrays, compile_scene
from .geometry.traverse import trace_batch


class Hits(NamedTuple):
    """Closest hits of N rays.  On a miss: t = inf, object = prim = -1."""
    t: np.ndarray          # (N,) float64
    object: np.ndarray     # (N,) int32 index into scene.objects
    prim: np.ndarray       # (N,) int64 primitive index within the object (triangle index)
    u: np.ndarray          # (N,) barycentric b1 (triangles) / edge fraction (rectangles)
    v: np.ndarray          # (N,) barycentric b2 / edge fraction


def trace(scene, origins, directions, *, arrays: SceneArrays | None = None) -> Hits:
    """Closest hit of every ray (parallel over rays).

    Parameters
    ----------
    scene : Scene
    origins, directions : (N, 3) array_like float
        Ray origins and directions (need not be unit length; t is in units of
        the given direction's length).
    arrays : SceneArrays, optional
        A compiled scene to reuse across calls.
    """
    o = np.ascontiguousarray(origins, dtype=np.float64)
    d = np.ascontiguousarray(directions, dtype=np.float64)
    if o.ndim != 2 or o.shape[1] != 3 or d.shape != o.shape:
        raise RenderError(f"trace: origins and directions must both be (N, 3), got {o.shape} and {d.shape}")
    if not (np.isfinite(o).all() and np.isfinite(d).all()):
        raise RenderError("trace: origins and directions must be finite")
    S = arrays if arrays is not None else compile_scene(scene)
    n = o.shape[0]
    k = np.empty(n, dtype=np.int64)
    t = np.empty(n)
    u = np.empty(n)
    v = np.empty(n)
    trace_batch(S.node_bounds, S.node_offset, S.node_count, S.prim_type, S.prim_geom, o, d, k, t, u, v)
    hit = k >= 0
    obj = np.where(hit, S.prim_object[np.maximum(k, 0)] if len(S.prim_object) else -1, -1).astype(np.int32)
    prim = np.where(hit, S.prim_index[np.maximum(k, 0)] if len(S.prim_index) else -1, -1)
    return Hits(t, obj, prim, u, v)
