"""Binned-SAH bounding volume hierarchy, flattened into typed arrays.

Layout (``m`` nodes):

- ``node_bounds`` (m, 6) float64: min x, y, z, max x, y, z.
- ``node_offset`` (m,) int32: interior node: index of the left child (the
  right child is ``offset + 1``); leaf: first entry in the primitive order.
- ``node_count`` (m,) int32: 0 for an interior node, else the leaf's size.

An empty hierarchy (no primitives) is a single root with an empty box
(min = +inf, max = -inf) and offset -1; no ray enters it.

Built with 16 SAH bins per axis over the centroid bounds (Wald, "On fast
Construction of SAH-based Bounding Volume Hierarchies", IEEE RT 2007).
"""
import numpy as np

from .._jit import kernel

N_BINS = 16
MAX_LEAF = 8
TRAVERSAL_COST = 1.0     # relative to one primitive test
#: Deeper nodes become leaves whatever their size, so that the traversal
#: stack (TRAVERSAL_STACK entries) can never overflow.
MAX_DEPTH = 60
TRAVERSAL_STACK = 64


@kernel
def _build(bmin, bmax, cent):
    n = bmin.shape[0]
    order = np.arange(n).astype(np.int64)
    max_nodes = max(1, 2 * n - 1)
    node_bounds = np.empty((max_nodes, 6))
    node_offset = np.zeros(max_nodes, dtype=np.int32)
    node_count = np.zeros(max_nodes, dtype=np.int32)
    stack_node = np.empty(128, dtype=np.int64)
    stack_lo = np.empty(128, dtype=np.int64)
    stack_hi = np.empty(128, dtype=np.int64)
    stack_depth = np.empty(128, dtype=np.int64)
    bin_min = np.empty((N_BINS, 3))
    bin_max = np.empty((N_BINS, 3))
    bin_cnt = np.empty(N_BINS, dtype=np.int64)
    right_area = np.empty(N_BINS)
    right_cnt = np.empty(N_BINS, dtype=np.int64)
    n_nodes = 1
    sp = 0
    stack_node[0] = 0
    stack_lo[0] = 0
    stack_hi[0] = n
    stack_depth[0] = 0
    sp = 1
    while sp > 0:
        sp -= 1
        node = stack_node[sp]
        lo = stack_lo[sp]
        hi = stack_hi[sp]
        depth = stack_depth[sp]
        # bounds of the primitives and of their centroids
        b0 = np.inf; b1 = np.inf; b2 = np.inf
        b3 = -np.inf; b4 = -np.inf; b5 = -np.inf
        c0 = np.inf; c1 = np.inf; c2 = np.inf
        c3 = -np.inf; c4 = -np.inf; c5 = -np.inf
        for i in range(lo, hi):
            p = order[i]
            b0 = min(b0, bmin[p, 0]); b1 = min(b1, bmin[p, 1]); b2 = min(b2, bmin[p, 2])
            b3 = max(b3, bmax[p, 0]); b4 = max(b4, bmax[p, 1]); b5 = max(b5, bmax[p, 2])
            c0 = min(c0, cent[p, 0]); c1 = min(c1, cent[p, 1]); c2 = min(c2, cent[p, 2])
            c3 = max(c3, cent[p, 0]); c4 = max(c4, cent[p, 1]); c5 = max(c5, cent[p, 2])
        node_bounds[node, 0] = b0; node_bounds[node, 1] = b1; node_bounds[node, 2] = b2
        node_bounds[node, 3] = b3; node_bounds[node, 4] = b4; node_bounds[node, 5] = b5
        count = hi - lo
        if count <= 2 or depth >= MAX_DEPTH:
            node_offset[node] = lo
            node_count[node] = count
            continue
        ex = b3 - b0; ey = b4 - b1; ez = b5 - b2
        parent_area = ex * ey + ey * ez + ez * ex
        best_cost = np.inf
        best_axis = -1
        best_split = 0
        cmin = (c0, c1, c2)
        cmax = (c3, c4, c5)
        for axis in range(3):
            lo_c = cmin[axis]
            hi_c = cmax[axis]
            if not (hi_c > lo_c):
                continue
            scale = N_BINS / (hi_c - lo_c)
            for k in range(N_BINS):
                bin_cnt[k] = 0
                for j in range(3):
                    bin_min[k, j] = np.inf
                    bin_max[k, j] = -np.inf
            for i in range(lo, hi):
                p = order[i]
                k = int((cent[p, axis] - lo_c) * scale)
                if k >= N_BINS:
                    k = N_BINS - 1
                bin_cnt[k] += 1
                for j in range(3):
                    bin_min[k, j] = min(bin_min[k, j], bmin[p, j])
                    bin_max[k, j] = max(bin_max[k, j], bmax[p, j])
            # sweep from the right
            r0 = np.inf; r1 = np.inf; r2 = np.inf
            r3 = -np.inf; r4 = -np.inf; r5 = -np.inf
            rc = 0
            for k in range(N_BINS - 1, 0, -1):
                if bin_cnt[k] > 0:
                    r0 = min(r0, bin_min[k, 0]); r1 = min(r1, bin_min[k, 1]); r2 = min(r2, bin_min[k, 2])
                    r3 = max(r3, bin_max[k, 0]); r4 = max(r4, bin_max[k, 1]); r5 = max(r5, bin_max[k, 2])
                rc += bin_cnt[k]
                right_cnt[k] = rc
                if rc > 0:
                    ax = r3 - r0; ay = r4 - r1; az = r5 - r2
                    right_area[k] = ax * ay + ay * az + az * ax
                else:
                    right_area[k] = 0.0
            l0 = np.inf; l1 = np.inf; l2 = np.inf
            l3 = -np.inf; l4 = -np.inf; l5 = -np.inf
            lc = 0
            for k in range(0, N_BINS - 1):
                if bin_cnt[k] > 0:
                    l0 = min(l0, bin_min[k, 0]); l1 = min(l1, bin_min[k, 1]); l2 = min(l2, bin_min[k, 2])
                    l3 = max(l3, bin_max[k, 0]); l4 = max(l4, bin_max[k, 1]); l5 = max(l5, bin_max[k, 2])
                lc += bin_cnt[k]
                if lc == 0 or right_cnt[k + 1] == 0:
                    continue
                ax = l3 - l0; ay = l4 - l1; az = l5 - l2
                cost = (ax * ay + ay * az + az * ax) * lc + right_area[k + 1] * right_cnt[k + 1]
                if cost < best_cost:
                    best_cost = cost
                    best_axis = axis
                    best_split = k + 1
        leaf_cost = float(count)
        if best_axis >= 0 and parent_area > 0.0:
            split_cost = TRAVERSAL_COST + best_cost / parent_area
        else:
            split_cost = np.inf
        if split_cost >= leaf_cost and count <= MAX_LEAF:
            node_offset[node] = lo
            node_count[node] = count
            continue
        mid = lo
        if best_axis >= 0:
            lo_c = cmin[best_axis]
            scale = N_BINS / (cmax[best_axis] - lo_c)
            i = lo
            j = hi - 1
            while i <= j:
                p = order[i]
                k = int((cent[p, best_axis] - lo_c) * scale)
                if k >= N_BINS:
                    k = N_BINS - 1
                if k < best_split:
                    i += 1
                else:
                    order[i] = order[j]
                    order[j] = p
                    j -= 1
            mid = i
        if mid == lo or mid == hi:
            mid = (lo + hi) // 2      # all centroids coincide: split the list
        left = n_nodes
        n_nodes += 2
        node_offset[node] = left
        node_count[node] = 0
        stack_node[sp] = left + 1
        stack_lo[sp] = mid
        stack_hi[sp] = hi
        stack_depth[sp] = depth + 1
        sp += 1
        stack_node[sp] = left
        stack_lo[sp] = lo
        stack_hi[sp] = mid
        stack_depth[sp] = depth + 1
        sp += 1
    return order, node_bounds[:n_nodes].copy(), node_offset[:n_nodes].copy(), node_count[:n_nodes].copy()


def build_bvh(bmin: np.ndarray, bmax: np.ndarray):
    """Build a BVH over axis-aligned boxes.

    Parameters
    ----------
    bmin, bmax : (n, 3) float64
        Bounds of each primitive.

    Returns
    -------
    order : (n,) int64
        Primitive permutation: leaf entries ``order[offset : offset + count]``.
    node_bounds : (m, 6) float64
    node_offset, node_count : (m,) int32
    """
    bmin = np.ascontiguousarray(bmin, dtype=np.float64)
    bmax = np.ascontiguousarray(bmax, dtype=np.float64)
    if bmin.shape[0] == 0:
        # the empty hierarchy: one root whose box is empty (min > max), which the
        # traversal's root test never enters, so its children are never read
        return (np.zeros(0, np.int64), np.array([[np.inf] * 3 + [-np.inf] * 3]),
                np.full(1, -1, np.int32), np.zeros(1, np.int32))
    cent = 0.5 * (bmin + bmax)
    return _build(bmin, bmax, cent)
