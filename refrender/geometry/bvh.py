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
#: stack (WIDE_STACK entries) can never overflow.
MAX_DEPTH = 60


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


#: children per node of the wide BVH the kernels traverse
WIDTH = 8
#: float32 entries of one wide node (256 bytes, four cache lines)
RECORD = 64
#: offsets in a wide node of the eight child references and counts (int32)
CHILD_REF = 48
CHILD_COUNT = 56
#: pending-child stack of the wide traversal: at most WIDTH - 1 entries per
#: level of a hierarchy of depth <= MAX_DEPTH (+ 1 for the widest push)
WIDE_STACK = (WIDTH - 1) * (MAX_DEPTH + 1) + WIDTH


def _aligned_empty(n, dtype, align=64):
    """Uninitialised 1-D array whose data starts on an ``align``-byte boundary."""
    itemsize = np.dtype(dtype).itemsize
    buf = np.empty(n + align // itemsize, dtype=dtype)
    start = (-buf.ctypes.data % align) // itemsize
    return buf[start:start + n]


def _round_out(lo, hi):
    """float32 copies of float64 box bounds rounded outwards (never shrink a box)."""
    lo32 = lo.astype(np.float32)
    hi32 = hi.astype(np.float32)
    down = lo32.astype(np.float64) > lo
    lo32[down] = np.nextafter(lo32[down], np.float32(-np.inf))
    up = hi32.astype(np.float64) < hi
    hi32[up] = np.nextafter(hi32[up], np.float32(np.inf))
    return lo32, hi32


@kernel
def _collapse(lo32, hi32, noff, ncnt, out):
    """Fill ``out`` with the wide nodes of the binary BVH; returns their number.

    Each wide node starts from a binary interior node's two children and
    repeatedly opens its interior child of largest surface area (in place,
    so the children keep their left-to-right order) until it has WIDTH
    children or only leaves.  Nodes are numbered breadth first.
    """
    out_i = out.view(np.int32)
    src_of = np.empty(max(1, noff.shape[0]), np.int64)
    ch = np.empty(WIDTH + 1, np.int64)
    src_of[0] = 0
    n_wide = 1
    head = 0
    while head < n_wide:
        src = src_of[head]
        base = head * RECORD
        head += 1
        if ncnt[src] > 0:
            k = 1                         # a root that is a leaf
            ch[0] = src
        elif noff[src] < 0:
            k = 0                         # the empty hierarchy
        else:
            ch[0] = noff[src]
            ch[1] = noff[src] + 1
            k = 2
            while k < WIDTH:
                best = -1
                best_area = -1.0
                for i in range(k):
                    c = ch[i]
                    if ncnt[c] == 0:
                        ex = np.float64(hi32[c, 0]) - lo32[c, 0]
                        ey = np.float64(hi32[c, 1]) - lo32[c, 1]
                        ez = np.float64(hi32[c, 2]) - lo32[c, 2]
                        area = ex * ey + ey * ez + ez * ex
                        if area > best_area:
                            best_area = area
                            best = i
                if best < 0:
                    break
                c = ch[best]
                for i in range(k, best + 1, -1):
                    ch[i] = ch[i - 1]
                ch[best] = noff[c]
                ch[best + 1] = noff[c] + 1
                k += 1
        for slot in range(WIDTH):
            if slot < k:
                c = ch[slot]
                for a in range(3):
                    out[base + 8 * a + slot] = lo32[c, a]
                    out[base + 8 * (a + 3) + slot] = hi32[c, a]
                if ncnt[c] > 0:
                    out_i[base + CHILD_REF + slot] = noff[c]
                    out_i[base + CHILD_COUNT + slot] = ncnt[c]
                else:
                    src_of[n_wide] = c
                    out_i[base + CHILD_REF + slot] = n_wide
                    out_i[base + CHILD_COUNT + slot] = 0
                    n_wide += 1
            else:
                for a in range(3):
                    out[base + 8 * a + slot] = np.inf
                    out[base + 8 * (a + 3) + slot] = -np.inf
                out_i[base + CHILD_REF + slot] = 0
                out_i[base + CHILD_COUNT + slot] = 0
    return n_wide


def wide_bvh(node_bounds, node_offset, node_count):
    """The binary BVH collapsed into 8-wide nodes, as one float32 array.

    Node ``r`` is the 64 float32 at ``nodes[64 r:]`` (256 bytes, 64-byte
    aligned; ``nodes.view(np.int32)`` reads the integer entries):

    - ``[8 p + c]`` for plane p = min x, y, z, max x, y, z of child c
      (structure of arrays, so one vector load per plane), float32 rounded
      outwards: no ray that enters a child's float64 box misses its float32
      box, so the traversal finds exactly the hits of the float64 hierarchy;
    - ``[48 + c]`` (int32) the child's reference and ``[56 + c]`` its count:
      count > 0 is a leaf of ``count`` primitives from ``ref`` in the
      primitive order, count == 0 an interior child whose node is ``ref``.

    Unused slots have an empty box (min = +inf > max = -inf) that no ray
    enters.  Node 0 is the root; a root that is itself a leaf is slot 0 of
    node 0, and the empty hierarchy is a node of eight empty slots.
    """
    lo32, hi32 = _round_out(node_bounds[:, :3], node_bounds[:, 3:])
    n_interior = int(np.count_nonzero(node_count == 0))
    work = np.empty(max(1, n_interior) * RECORD, np.float32)
    n_wide = _collapse(np.ascontiguousarray(lo32), np.ascontiguousarray(hi32),
                       node_offset, node_count, work)
    nodes = _aligned_empty(n_wide * RECORD, np.float32)
    nodes[:] = work[:n_wide * RECORD]
    return nodes
