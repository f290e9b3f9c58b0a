"""BVH traversal: closest hit and occlusion (any hit)."""
import math

import numpy as np
from numba import prange

from .._jit import hot, inline, kernel
from .bvh import CHILD_COUNT, CHILD_REF, RECORD, WIDE_STACK
from .intersect import intersect_prim
from .intrinsics import box8_entry, lowest_bit, popcount, prefetch

INF = math.inf
#: the traversal stack's first _S entries hold the entry distances of a node's children
_S = 8
#: float64 entries of one traversal stack (see new_stack)
STACK_LEN = _S + 3 * WIDE_STACK


@hot
def _safe_inv(d):
    if abs(d) < 1e-300:
        return 1e300 if d >= 0.0 else -1e300
    return 1.0 / d


@hot
def _near_planes(ix, iy, iz):
    """Offsets (0 or 3) of the near slab plane per axis, from the direction's signs."""
    return (0 if ix >= 0.0 else 3), (0 if iy >= 0.0 else 3), (0 if iz >= 0.0 else 3)


@hot
def _push_sorted(stack, off, sp, s0, t, ref, cnt):
    """Insert (t, ref, cnt) into the pending entries s0..sp-1 of the stack at
    ``stack[off:]`` so that the nearest is on top (popped first; on equal t
    the earlier child).  Returns the new stack size."""
    i = sp
    e = off + _S + 3 * i
    while i > s0 and stack[e - 3] <= t:
        stack[e] = stack[e - 3]
        stack[e + 1] = stack[e - 2]
        stack[e + 2] = stack[e - 1]
        i -= 1
        e -= 3
    stack[e] = t
    stack[e + 1] = ref
    stack[e + 2] = cnt
    return sp + 1


@hot
def closest_hit(nodes, nodes_i, prim_type, prim_geom, stack, ox, oy, oz, dx, dy, dz,
                tmin, tmax, skip):
    """Nearest hit with t in (tmin, tmax), ignoring primitive ``skip`` (-1: none).

    ``nodes``/``nodes_i`` are the 8-wide BVH (bvh.wide_bvh) as float32 and
    int32; ``stack`` is scratch space from new_stack.  Children are visited
    nearest entry first and pending ones culled against the best hit so far.
    Returns (prim, t, u, v); prim = -1 on a miss.
    """
    ix = _safe_inv(dx)
    iy = _safe_inv(dy)
    iz = _safe_inv(dz)
    pnx, pny, pnz = _near_planes(ix, iy, iz)
    best = -1
    bt = tmax
    bu = 0.0
    bv = 0.0
    sp = 0
    ref = 0
    cnt = 0
    while True:
        if cnt == 0:
            base = ref * RECORD
            mask = box8_entry(nodes, base, ox, oy, oz, ix, iy, iz, pnx, pny, pnz, bt, stack, 0)
            if mask != 0:
                c = lowest_bit(mask)
                if popcount(mask) == 1:
                    ref = nodes_i[base + CHILD_REF + c]
                    cnt = nodes_i[base + CHILD_COUNT + c]
                    continue
                s0 = sp
                while mask != 0:
                    c = lowest_bit(mask)
                    mask &= mask - 1
                    sp = _push_sorted(stack, 0, sp, s0, stack[c], nodes_i[base + CHILD_REF + c],
                                      nodes_i[base + CHILD_COUNT + c])
                sp -= 1
                ref = int(stack[_S + 3 * sp + 1])
                cnt = int(stack[_S + 3 * sp + 2])
                continue
        else:
            for k in range(ref, ref + cnt):
                if k == skip:
                    continue
                t, u, v = intersect_prim(prim_type[k], prim_geom, k, ox, oy, oz,
                                         dx, dy, dz, tmin, bt)
                if t < bt:
                    bt = t
                    bu = u
                    bv = v
                    best = k
        # pop the nearest pending child still in front of the best hit
        found = False
        lim = bt * 1.0000000000000004
        while sp > 0:
            sp -= 1
            if stack[_S + 3 * sp] <= lim:
                found = True
                break
        if not found:
            break
        ref = int(stack[_S + 3 * sp + 1])
        cnt = int(stack[_S + 3 * sp + 2])
    if best < 0:
        return -1, INF, 0.0, 0.0
    return best, bt, bu, bv


@hot
def occluded(nodes, nodes_i, prim_type, prim_geom, stack, ox, oy, oz, dx, dy, dz,
             tmin, tmax, skip_a, skip_b):
    """True if any primitive other than skip_a/skip_b is hit with t in (tmin, tmax)."""
    ix = _safe_inv(dx)
    iy = _safe_inv(dy)
    iz = _safe_inv(dz)
    pnx, pny, pnz = _near_planes(ix, iy, iz)
    sp = 0
    ref = 0
    cnt = 0
    while True:
        if cnt == 0:
            base = ref * RECORD
            mask = box8_entry(nodes, base, ox, oy, oz, ix, iy, iz, pnx, pny, pnz, tmax, stack, 0)
            if mask != 0:
                c = lowest_bit(mask)
                mask &= mask - 1
                ref = nodes_i[base + CHILD_REF + c]
                cnt = nodes_i[base + CHILD_COUNT + c]
                while mask != 0:
                    c = lowest_bit(mask)
                    mask &= mask - 1
                    stack[_S + 3 * sp + 1] = nodes_i[base + CHILD_REF + c]
                    stack[_S + 3 * sp + 2] = nodes_i[base + CHILD_COUNT + c]
                    sp += 1
                continue
        else:
            for k in range(ref, ref + cnt):
                if k == skip_a or k == skip_b:
                    continue
                t, u, v = intersect_prim(prim_type[k], prim_geom, k, ox, oy, oz,
                                         dx, dy, dz, tmin, tmax)
                if t < tmax:
                    return True
        if sp == 0:
            return False
        sp -= 1
        ref = int(stack[_S + 3 * sp + 1])
        cnt = int(stack[_S + 3 * sp + 2])


@inline
def new_stack():
    """Scratch traversal stack (allocate once per path or per batch of rays):
    eight entry distances of the node in hand, then WIDE_STACK pending
    children of three float64 each (entry distance, reference, count)."""
    return np.empty(STACK_LEN)


BATCH = 4096


@kernel(parallel=True)
def trace_batch(nodes, nodes_i, prim_type, prim_geom, origins, directions,
                out_prim, out_t, out_u, out_v):
    """Closest hits of many rays, one ray after the other (parallel over blocks).

    The kernel for coherent rays (camera rays); see trace_stream for
    incoherent ones.  Each ray is independent.
    """
    n = origins.shape[0]
    for b in prange((n + BATCH - 1) // BATCH):
        stack = new_stack()
        for i in range(b * BATCH, min(n, (b + 1) * BATCH)):
            p, t, u, v = closest_hit(nodes, nodes_i, prim_type, prim_geom, stack,
                                     origins[i, 0], origins[i, 1], origins[i, 2],
                                     directions[i, 0], directions[i, 1], directions[i, 2],
                                     0.0, INF, -1)
            out_prim[i] = p
            out_t[i] = t
            out_u[i] = u
            out_v[i] = v


# --------------------------------------------------------------------------
# Interleaved traversal of many rays (batch queries of incoherent rays).
# --------------------------------------------------------------------------

#: rays traversed together by one thread in the interleaved kernel
LANES = 16
#: rays per parallel work item of the interleaved kernel
STREAM_BLOCK = 2048
#: bytes of one prim_geom row (9 float64)
_ROW_BYTES = 72


@hot
def _prefetch_item(nodes, prim_geom, prim_type, ref, cnt):
    """Prefetch what visiting (ref, cnt) will read: a node or a leaf's rows."""
    if cnt == 0:
        b = ref * (4 * RECORD)
        prefetch(nodes, b)
        prefetch(nodes, b + 64)
        prefetch(nodes, b + 128)
        prefetch(nodes, b + 192)
    else:
        b = ref * _ROW_BYTES
        e = (ref + cnt) * _ROW_BYTES
        while b < e:
            prefetch(prim_geom, b)
            b += 64
        prefetch(prim_geom, e - 1)
        prefetch(prim_type, ref * prim_type.itemsize)


@hot
def _start_ray(j, i, origins, directions, R, ray, bt, best, bu, bv, sp, cur_ref, cur_cnt):
    """Put ray i into lane j of the interleaved kernel, at the root."""
    R[j, 0] = origins[i, 0]
    R[j, 1] = origins[i, 1]
    R[j, 2] = origins[i, 2]
    R[j, 3] = directions[i, 0]
    R[j, 4] = directions[i, 1]
    R[j, 5] = directions[i, 2]
    R[j, 6] = _safe_inv(R[j, 3])
    R[j, 7] = _safe_inv(R[j, 4])
    R[j, 8] = _safe_inv(R[j, 5])
    ray[j] = i
    bt[j] = INF
    best[j] = -1
    bu[j] = 0.0
    bv[j] = 0.0
    sp[j] = 0
    cur_ref[j] = 0
    cur_cnt[j] = 0


@kernel
def _stream_block(nodes, nodes_i, prim_type, prim_geom, origins, directions, lo, hi,
                  out_prim, out_t, out_u, out_v):
    """Closest hits of rays lo..hi-1, LANES rays interleaved with prefetching.

    Each lane advances its ray by one traversal step (one node or one leaf)
    per round and prefetches what its next step reads, so that the memory
    latency of one ray is hidden behind the steps of the others.  Every ray
    takes exactly the steps of closest_hit (same order, same culling), so
    the results are those of the one-ray-at-a-time kernel.
    """
    K = LANES
    ray = np.full(K, -1, np.int64)
    cur_ref = np.zeros(K, np.int64)
    cur_cnt = np.zeros(K, np.int64)
    R = np.empty((K, 9))
    bt = np.empty(K)
    bu = np.empty(K)
    bv = np.empty(K)
    best = np.empty(K, np.int64)
    stride = STACK_LEN
    stack = np.empty(K * stride)
    sp = np.zeros(K, np.int64)
    nxt = lo
    active = 0
    for j in range(K):
        if nxt < hi:
            i = nxt
            nxt += 1
            _start_ray(j, i, origins, directions, R, ray, bt, best, bu, bv, sp, cur_ref, cur_cnt)
            active += 1
    while active > 0:
        for j in range(K):
            if ray[j] < 0:
                continue
            so = j * stride
            ox = R[j, 0]
            oy = R[j, 1]
            oz = R[j, 2]
            ix = R[j, 6]
            iy = R[j, 7]
            iz = R[j, 8]
            t_best = bt[j]
            cnt = cur_cnt[j]
            ref = cur_ref[j]
            s = sp[j]
            if cnt == 0:
                pnx, pny, pnz = _near_planes(ix, iy, iz)
                base = ref * RECORD
                mask = box8_entry(nodes, base, ox, oy, oz, ix, iy, iz, pnx, pny, pnz,
                                  t_best, stack, so)
                if mask != 0:
                    c = lowest_bit(mask)
                    if popcount(mask) == 1:
                        ref = nodes_i[base + CHILD_REF + c]
                        cnt = nodes_i[base + CHILD_COUNT + c]
                    else:
                        s0 = s
                        while mask != 0:
                            c = lowest_bit(mask)
                            mask &= mask - 1
                            s = _push_sorted(stack, so, s, s0, stack[so + c],
                                             nodes_i[base + CHILD_REF + c], nodes_i[base + CHILD_COUNT + c])
                        s -= 1
                        ref = int(stack[so + _S + 3 * s + 1])
                        cnt = int(stack[so + _S + 3 * s + 2])
                        sp[j] = s
                    cur_ref[j] = ref
                    cur_cnt[j] = cnt
                    _prefetch_item(nodes, prim_geom, prim_type, ref, cnt)
                    continue
            else:
                dx = R[j, 3]
                dy = R[j, 4]
                dz = R[j, 5]
                for k in range(ref, ref + cnt):
                    t, u, v = intersect_prim(prim_type[k], prim_geom, k, ox, oy, oz,
                                             dx, dy, dz, 0.0, t_best)
                    if t < t_best:
                        t_best = t
                        bu[j] = u
                        bv[j] = v
                        best[j] = k
                bt[j] = t_best
            # pop the nearest pending child still in front of the best hit
            found = False
            lim = t_best * 1.0000000000000004
            while s > 0:
                s -= 1
                if stack[so + _S + 3 * s] <= lim:
                    found = True
                    break
            sp[j] = s
            if found:
                ref = int(stack[so + _S + 3 * s + 1])
                cnt = int(stack[so + _S + 3 * s + 2])
                cur_ref[j] = ref
                cur_cnt[j] = cnt
                _prefetch_item(nodes, prim_geom, prim_type, ref, cnt)
                continue
            # this ray is done: write it and start the next one in this lane
            i = ray[j]
            if best[j] < 0:
                out_prim[i] = -1
                out_t[i] = INF
                out_u[i] = 0.0
                out_v[i] = 0.0
            else:
                out_prim[i] = best[j]
                out_t[i] = t_best
                out_u[i] = bu[j]
                out_v[i] = bv[j]
            if nxt < hi:
                i = nxt
                nxt += 1
                _start_ray(j, i, origins, directions, R, ray, bt, best, bu, bv, sp, cur_ref, cur_cnt)
                _prefetch_item(nodes, prim_geom, prim_type, 0, 0)
            else:
                ray[j] = -1
                active -= 1


@kernel(parallel=True)
def trace_stream(nodes, nodes_i, prim_type, prim_geom, origins, directions,
                 out_prim, out_t, out_u, out_v):
    """Closest hits of many rays with the interleaved kernel (parallel over blocks)."""
    n = origins.shape[0]
    for b in prange((n + STREAM_BLOCK - 1) // STREAM_BLOCK):
        _stream_block(nodes, nodes_i, prim_type, prim_geom, origins, directions,
                      b * STREAM_BLOCK, min(n, (b + 1) * STREAM_BLOCK),
                      out_prim, out_t, out_u, out_v)


#: closest_hit / occluded as separately compiled functions for the path
#: tracer: calling them costs a little per ray, but inlining them into the
#: (large) path kernel made its compile much slower
closest_hit_fn = kernel(closest_hit.py_func)
occluded_fn = kernel(occluded.py_func)
