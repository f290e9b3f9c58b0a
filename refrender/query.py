"""Batch ray queries against a scene's BVH (for tests, tools and benchmarks)."""
from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from .errors import RenderError
from .geometry.compile import SceneArrays
from .geometry.traverse import trace_batch, trace_stream
from .prepared import prepare


class Hits(NamedTuple):
    """Closest hits of N rays.  On a miss: t = inf, object = prim = -1."""
    t: np.ndarray          # (N,) float64
    object: np.ndarray     # (N,) int32 index into scene.objects
    prim: np.ndarray       # (N,) int64 primitive index within the object (triangle index)
    u: np.ndarray          # (N,) barycentric b1 (triangles) / edge fraction (rectangles)
    v: np.ndarray          # (N,) barycentric b2 / edge fraction


#: kernels of trace(): one ray after the other, or many interleaved
KERNELS = ("auto", "sequential", "interleaved")


def is_coherent(origins: np.ndarray, directions: np.ndarray, radius: float) -> bool:
    """Whether consecutive rays are coherent (like camera rays in pixel order).

    Median, over up to 4096 consecutive pairs, of the angle between their
    directions < 0.05 rad (3 degrees) and of the distance between their origins < 1 % of
    the scene's bounding radius.  Coherent rays visit the same nodes one
    after the other, so they are fastest one at a time; incoherent ones
    spend their time waiting for memory and gain from interleaving.
    """
    n = min(len(origins), 4097)
    if n < 2:
        return True
    with np.errstate(invalid="ignore", divide="ignore"):
        d = directions[:n] / np.linalg.norm(directions[:n], axis=1, keepdims=True)
    cos = np.clip(np.einsum("ij,ij->i", d[1:], d[:-1]), -1.0, 1.0)
    gap = np.linalg.norm(origins[1:n] - origins[:n - 1], axis=1)
    return bool(np.median(np.arccos(cos)) < 0.05 and np.median(gap) < 0.01 * radius)


def trace(scene, origins, directions, *, arrays: SceneArrays | None = None,
          kernel: str = "auto") -> Hits:
    """Closest hit of every ray (parallel over rays).

    Parameters
    ----------
    scene : Scene
    origins, directions : (N, 3) array_like float
        Ray origins and directions (need not be unit length; t is in units of
        the given direction's length).
    arrays : SceneArrays, optional
        A compiled scene to use instead of the scene's own.  Not needed for
        speed: the scene is compiled on its first use and reused by later
        calls (see refrender.prepared).
    kernel : {"auto", "sequential", "interleaved"}
        "sequential" traces one ray after the other (fastest for coherent
        rays), "interleaved" advances 16 rays in turn with prefetching
        (fastest for incoherent rays); "auto" chooses by is_coherent.  The
        hits are identical either way.
    """
    if kernel not in KERNELS:
        raise RenderError(f"trace: kernel must be one of {', '.join(KERNELS)}, got {kernel!r}")
    o = np.ascontiguousarray(origins, dtype=np.float64)
    d = np.ascontiguousarray(directions, dtype=np.float64)
    if o.ndim != 2 or o.shape[1] != 3 or d.shape != o.shape:
        raise RenderError(f"trace: origins and directions must both be (N, 3), got {o.shape} and {d.shape}")
    if not (np.isfinite(o).all() and np.isfinite(d).all()):
        raise RenderError("trace: origins and directions must be finite")
    S = arrays if arrays is not None else prepare(scene).arrays
    n = o.shape[0]
    k = np.empty(n, dtype=np.int64)
    t = np.empty(n)
    u = np.empty(n)
    v = np.empty(n)
    if kernel == "auto":
        kernel = "sequential" if is_coherent(o, d, S.radius) else "interleaved"
    run = trace_batch if kernel == "sequential" else trace_stream
    # blocks of rays are handed to the threads one at a time (dynamic
    # scheduling: rays differ in cost); each ray's hit does not depend on it
    with numba.parallel_chunksize(1):
        run(S.nodes, S.nodes.view(np.int32), S.prim_type, S.prim_geom, o, d, k, t, u, v)
    hit = k >= 0
    obj = np.where(hit, S.prim_object[np.maximum(k, 0)] if len(S.prim_object) else -1, -1).astype(np.int32)
    prim = np.where(hit, S.prim_index[np.maximum(k, 0)] if len(S.prim_index) else -1, -1).astype(np.int64)
    return Hits(t, obj, prim, u, v)
