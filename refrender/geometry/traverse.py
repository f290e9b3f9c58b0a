"""BVH traversal: closest hit and occlusion (any hit)."""
import math

import numpy as np
from numba import prange

from .._jit import hot, inline, kernel
from .bvh import TRAVERSAL_STACK
from .intersect import intersect_prim

INF = math.inf


@hot
def _safe_inv(d):
    if abs(d) < 1e-300:
        return 1e300 if d >= 0.0 else -1e300
    return 1.0 / d


@hot
def _box_entry(nb, i, ox, oy, oz, ix, iy, iz, tmax):
    """Entry distance of the ray into box i (slab test), or inf if missed.

    The near and far planes are chosen by the sign of the inverse direction
    (no swaps), so an empty (inverted, min > max) box is never entered.
    """
    if ix >= 0.0:
        t0 = (nb[i, 0] - ox) * ix
        t1 = (nb[i, 3] - ox) * ix
    else:
        t0 = (nb[i, 3] - ox) * ix
        t1 = (nb[i, 0] - ox) * ix
    if iy >= 0.0:
        u0 = (nb[i, 1] - oy) * iy
        u1 = (nb[i, 4] - oy) * iy
    else:
        u0 = (nb[i, 4] - oy) * iy
        u1 = (nb[i, 1] - oy) * iy
    if iz >= 0.0:
        w0 = (nb[i, 2] - oz) * iz
        w1 = (nb[i, 5] - oz) * iz
    else:
        w0 = (nb[i, 5] - oz) * iz
        w1 = (nb[i, 2] - oz) * iz
    tn = max(max(t0, u0), max(w0, 0.0))
    # widen the exit by 2 ulps-ish so that rounding never culls a real hit
    tf = min(min(t1, u1), min(w1, tmax)) * 1.0000000000000004
    if tn <= tf:
        return tn
    return INF


@hot
def closest_hit(nb, noff, ncnt, prim_type, prim_geom, stack, ox, oy, oz, dx, dy, dz,
                tmin, tmax, skip):
    """Nearest hit with t in (tmin, tmax), ignoring primitive ``skip`` (-1: none).

    ``stack`` is scratch space of TRAVERSAL_STACK int32 (see new_stack).
    Returns (prim, t, u, v); prim = -1 on a miss.
    """
    ix = _safe_inv(dx)
    iy = _safe_inv(dy)
    iz = _safe_inv(dz)
    best = -1
    bt = tmax
    bu = 0.0
    bv = 0.0
    if _box_entry(nb, 0, ox, oy, oz, ix, iy, iz, bt) == INF:
        return best, INF, bu, bv
    sp = 0
    node = 0
    while True:
        cnt = ncnt[node]
        if cnt > 0:
            start = noff[node]
            for k in range(start, start + cnt):
                if k == skip:
                    continue
                t, u, v = intersect_prim(prim_type[k], prim_geom, k, ox, oy, oz,
                                         dx, dy, dz, tmin, bt)
                if t < bt:
                    bt = t
                    bu = u
                    bv = v
                    best = k
        else:
            left = noff[node]
            tl = _box_entry(nb, left, ox, oy, oz, ix, iy, iz, bt)
            tr = _box_entry(nb, left + 1, ox, oy, oz, ix, iy, iz, bt)
            if tl != INF and tr != INF:
                if tl <= tr:
                    stack[sp] = left + 1
                    node = left
                else:
                    stack[sp] = left
                    node = left + 1
                sp += 1
                continue
            if tl != INF:
                node = left
                continue
            if tr != INF:
                node = left + 1
                continue
        # pop, skipping nodes now farther than the best hit
        found = False
        while sp > 0:
            sp -= 1
            node = stack[sp]
            if _box_entry(nb, node, ox, oy, oz, ix, iy, iz, bt) != INF:
                found = True
                break
        if not found:
            break
    if best < 0:
        return -1, INF, 0.0, 0.0
    return best, bt, bu, bv


@hot
def occluded(nb, noff, ncnt, prim_type, prim_geom, stack, ox, oy, oz, dx, dy, dz,
             tmin, tmax, skip_a, skip_b):
    """True if any primitive other than skip_a/skip_b is hit with t in (tmin, tmax)."""
    ix = _safe_inv(dx)
    iy = _safe_inv(dy)
    iz = _safe_inv(dz)
    if _box_entry(nb, 0, ox, oy, oz, ix, iy, iz, tmax) == INF:
        return False
    stack[0] = 0
    sp = 1
    while sp > 0:
        sp -= 1
        node = stack[sp]
        cnt = ncnt[node]
        if cnt > 0:
            start = noff[node]
            for k in range(start, start + cnt):
                if k == skip_a or k == skip_b:
                    continue
                t, u, v = intersect_prim(prim_type[k], prim_geom, k, ox, oy, oz,
                                         dx, dy, dz, tmin, tmax)
                if t < tmax:
                    return True
        else:
            left = noff[node]
            if _box_entry(nb, left, ox, oy, oz, ix, iy, iz, tmax) != INF:
                stack[sp] = left
                sp += 1
            if _box_entry(nb, left + 1, ox, oy, oz, ix, iy, iz, tmax) != INF:
                stack[sp] = left + 1
                sp += 1
    return False


@inline
def new_stack():
    """Scratch traversal stack (allocate once per path or per batch of rays)."""
    return np.empty(TRAVERSAL_STACK, dtype=np.int32)


BATCH = 4096


@kernel(parallel=True)
def trace_batch(nb, noff, ncnt, prim_type, prim_geom, origins, directions,
                out_prim, out_t, out_u, out_v):
    """Closest hits of many rays (parallel over blocks of rays; each ray is independent)."""
    n = origins.shape[0]
    for b in prange((n + BATCH - 1) // BATCH):
        stack = new_stack()
        for i in range(b * BATCH, min(n, (b + 1) * BATCH)):
            p, t, u, v = closest_hit(nb, noff, ncnt, prim_type, prim_geom, stack,
                                     origins[i, 0], origins[i, 1], origins[i, 2],
                                     directions[i, 0], directions[i, 1], directions[i, 2],
                                     0.0, INF, -1)
            out_prim[i] = p
            out_t[i] = t
            out_u[i] = u
            out_v[i] = v
