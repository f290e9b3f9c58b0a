"""Geometry: BVH + intersection against a brute-force oracle, BVH invariants, and
ray-origin offsets (self-intersection) at every scale.

Sources of the expected values:

* the brute-force oracle below (written here, vectorised numpy): Moller & Trumbore,
  "Fast, minimum storage ray-triangle intersection", JGT 2(1) 1997, for triangles; the
  ray-sphere quadratic in its numerically stable form (common practice) for spheres;
  plane intersection plus bounds for rectangles and disks (elementary geometry);
* trimesh's ``RayMeshIntersector`` (a general-purpose library) as an outside reference;
* "§2a": closed enclosure L = Le / (1 - rho) (radiosity, Goral, Torrance, Greenberg &
  Battaile 1984); "§5b": solid angle of a rectangle seen from a point (Ureña, Fajardo &
  King 2013; van Oosterom & Strackee 1983); "§7": point light E = I cos(theta) / d^2 and
  L_o = rho E / pi (inverse-square and cosine laws, common practice);
* BVH layout invariants: the documented layout of refrender.geometry.bvh (invariant).
"""
from __future__ import annotations

import math
import subprocess
import sys
import textwrap

import numba
import numpy as np
import pytest
import trimesh
from trimesh.ray.ray_triangle import ray_triangle_id

import refrender
from refrender.geometry import bvh as bvh_mod
from refrender.geometry.bvh import build_bvh
from refrender.geometry.bvh import wide_bvh
from refrender.geometry.intrinsics import box8_entry
from refrender.scene.model import Disk, Rectangle, Sphere, TriangleMesh

SEED = 20260611
T_RTOL = 1e-9        # brief: t to 1e-9 relative
TIE_RTOL = 1e-12     # two primitives hit at the same t within this are a tie
N_SIGMA = 4.0


# ----------------------------------------------------------------------------- scenes

def _scene(objects, *, film=(8, 8), camera=None, materials=None, lights=None, render=None):
    doc = {
        "version": 1,
        "camera": camera or {"position": [0, 0, 10], "look_at": [0, 0, 0]},
        "film": {"width": film[0], "height": film[1]},
        "objects": objects,
    }
    if materials is not None:
        doc["materials"] = materials
    if lights is not None:
        doc["lights"] = lights
    if render is not None:
        doc["render"] = render
    return refrender.load_scene(doc)


def _tri_object(positions, indices, **extra):
    obj = {"shape": "triangles", "positions": np.asarray(positions).tolist(),
           "indices": np.asarray(indices).tolist()}
    obj.update(extra)
    return obj


def _soup(rng, n, centre_range=1.0, size=0.15):
    """n independent random triangles (positions (3n, 3), indices (n, 3))."""
    centres = rng.uniform(-centre_range, centre_range, size=(n, 1, 3))
    verts = centres + rng.normal(scale=size, size=(n, 3, 3))
    return verts.reshape(-1, 3), np.arange(3 * n).reshape(n, 3)


def _perpendicular_edges(rng, size):
    e1 = rng.normal(size=3)
    e2 = np.cross(e1, rng.normal(size=3))
    e1 *= rng.uniform(0.2, 1.0) * size / np.linalg.norm(e1)
    e2 *= rng.uniform(0.2, 1.0) * size / np.linalg.norm(e2)
    return e1, e2


def _rays(rng, n, box=1.5, outside_radius=4.0, axis_aligned=0.15):
    """Half the origins inside the geometry's box, half outside on a sphere aimed inwards;
    directions not unit length; a fraction exactly axis-aligned (zero components)."""
    n_in = n // 2
    o_in = rng.uniform(-box, box, size=(n_in, 3))
    d_in = rng.normal(size=(n_in, 3))
    u = rng.normal(size=(n - n_in, 3))
    o_out = outside_radius * u / np.linalg.norm(u, axis=1, keepdims=True)
    d_out = rng.uniform(-1, 1, size=(n - n_in, 3)) - o_out
    o = np.concatenate([o_in, o_out])
    d = np.concatenate([d_in, d_out])
    d *= rng.uniform(0.3, 3.0, size=(n, 1))            # t is in units of |d|
    k = int(axis_aligned * n)
    axes = rng.integers(0, 3, size=k)
    signs = rng.choice([-1.0, 1.0], size=k)
    d[:k] = 0.0
    d[np.arange(k), axes] = signs * rng.uniform(0.5, 2.0, size=k)
    return o, d


# ----------------------------------------------------------------------------- oracle

def _dot(a, b):
    return np.sum(a * b, axis=-1)


def _oracle_triangles(o, d, a, e1, e2):
    """(R, M) t of every ray against every triangle (Moller-Trumbore), inf on a miss;
    plus barycentrics b1, b2."""
    O = o[:, None, :]
    D = d[:, None, :]
    p = np.cross(D, e2[None])
    det = _dot(e1[None], p)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / det
        s = O - a[None]
        b1 = _dot(s, p) * inv
        q = np.cross(s, e1[None])
        b2 = _dot(D, q) * inv
        t = _dot(e2[None], q) * inv
        hit = (det != 0) & (b1 >= 0) & (b1 <= 1) & (b2 >= 0) & (b1 + b2 <= 1) & (t > 0)
    return np.where(hit, t, np.inf), b1, b2


def _oracle_spheres(o, d, c, r):
    """(R, M) nearest positive root of |o + t d - c|^2 = r^2 (stable quadratic)."""
    f = o[:, None, :] - c[None]
    D = d[:, None, :]
    A = _dot(D, D)
    B = _dot(f, D)                       # half the linear coefficient
    C = _dot(f, f) - r[None] ** 2
    disc = B * B - A * C
    with np.errstate(invalid="ignore", divide="ignore"):
        sq = np.sqrt(disc)
        qq = -(B + np.copysign(sq, B))
        r1 = qq / A
        r2 = C / qq
    t0 = np.minimum(r1, r2)
    t1 = np.maximum(r1, r2)
    t = np.where(t0 > 0, t0, np.where(t1 > 0, t1, np.inf))
    return np.where(disc >= 0, t, np.inf)


def _oracle_rectangles(o, d, org, e1, e2):
    n = np.cross(e1, e2)
    D = d[:, None, :]
    denom = _dot(n[None], D)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _dot(n[None], org[None] - o[:, None, :]) / denom
        p = o[:, None, :] + t[..., None] * D - org[None]
        u = _dot(p, e1[None]) / _dot(e1, e1)[None]
        v = _dot(p, e2[None]) / _dot(e2, e2)[None]
    hit = (denom != 0) & (t > 0) & (u >= 0) & (u <= 1) & (v >= 0) & (v <= 1)
    return np.where(hit, t, np.inf), u, v


def _oracle_disks(o, d, c, n, r):
    D = d[:, None, :]
    denom = _dot(n[None], D)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _dot(n[None], c[None] - o[:, None, :]) / denom
        p = o[:, None, :] + t[..., None] * D - c[None]
    hit = (denom != 0) & (t > 0) & (_dot(p, p) <= r[None] ** 2)
    return np.where(hit, t, np.inf)


def _oracle(scene, o, d):
    """Brute force over every primitive of the scene model: (t, u, v, column table)
    with t (R, P); columns are (object, primitive) in object order."""
    ts, us, vs, cols = [], [], [], []
    for i, obj in enumerate(scene.objects):
        s = obj.shape
        if isinstance(s, TriangleMesh):
            p = np.asarray(s.positions)
            idx = np.asarray(s.indices)
            a, b, c = p[idx[:, 0]], p[idx[:, 1]], p[idx[:, 2]]
            t, u, v = _oracle_triangles(o, d, a, b - a, c - a)
        elif isinstance(s, Sphere):
            t = _oracle_spheres(o, d, np.asarray(s.center)[None], np.array([s.radius]))
            u = v = np.zeros_like(t)
        elif isinstance(s, Rectangle):
            t, u, v = _oracle_rectangles(o, d, np.asarray(s.origin)[None],
                                         np.asarray(s.edge1)[None], np.asarray(s.edge2)[None])
        elif isinstance(s, Disk):
            t = _oracle_disks(o, d, np.asarray(s.center)[None], np.asarray(s.normal)[None],
                              np.array([s.radius]))
            u = v = np.zeros_like(t)
        else:  # pragma: no cover
            raise TypeError(type(s))
        ts.append(t)
        us.append(u)
        vs.append(v)
        cols.extend((i, k) for k in range(t.shape[1]))
    return np.concatenate(ts, 1), np.concatenate(us, 1), np.concatenate(vs, 1), cols


def _compare_with_oracle(scene, o, d, chunk=200):
    """Assert refrender.trace equals the brute force with both kernels (which must
    agree bit for bit); return (hit fraction, tie count)."""
    hits = refrender.trace(scene, o, d, kernel="interleaved")
    seq = refrender.trace(scene, o, d, kernel="sequential")
    for name, a, b in zip(hits._fields, hits, seq):
        assert np.array_equal(a, b), f"interleaved and sequential kernels differ in {name}"
    n_hit = 0
    n_tie = 0
    col_of = None
    for lo in range(0, len(o), chunk):
        sl = slice(lo, lo + chunk)
        T, U, V, cols = _oracle(scene, o[sl], d[sl])
        if col_of is None:
            col_of = {c: j for j, c in enumerate(cols)}
        tmin = T.min(axis=1)
        kt, ko, kp = hits.t[sl], hits.object[sl], hits.prim[sl]
        miss_o = ~np.isfinite(tmin)
        miss_k = ko < 0
        bad = np.nonzero(miss_o != miss_k)[0]
        assert bad.size == 0, (f"hit/miss disagree for ray {lo + bad[0]}: trace t={kt[bad[0]]} "
                               f"obj={ko[bad[0]]}, oracle t={tmin[bad[0]]}")
        assert np.all(np.isinf(kt[miss_k])) and np.all(kp[miss_k] == -1)
        for r in np.nonzero(~miss_k)[0]:
            j = col_of[(int(ko[r]), int(kp[r]))]
            t_or = T[r, j]
            ray = lo + r
            assert np.isfinite(t_or), (f"ray {ray}: trace hit obj {ko[r]} prim {kp[r]} at "
                                       f"t={kt[r]!r}, which the oracle says it misses")
            assert abs(kt[r] - t_or) <= T_RTOL * t_or, (f"ray {ray}: t {kt[r]!r} vs oracle {t_or!r}")
            assert t_or <= tmin[r] * (1 + TIE_RTOL), (
                f"ray {ray}: trace chose obj {ko[r]} prim {kp[r]} at t={t_or!r} but the nearest "
                f"is column {int(np.argmin(T[r]))} at t={tmin[r]!r}")
            if np.argmin(T[r]) != j:
                n_tie += 1
            if isinstance(scene.objects[int(ko[r])].shape, (TriangleMesh, Rectangle)):
                assert abs(hits.u[ray] - U[r, j]) <= 1e-9 and abs(hits.v[ray] - V[r, j]) <= 1e-9
        n_hit += int((~miss_k).sum())
    return n_hit / len(o), n_tie


# ----------------------------------------------------------------------------- BVH + intersection vs brute force

def test_triangle_soup_matches_brute_force():
    rng = np.random.default_rng(SEED)
    pos, idx = _soup(rng, 2000)
    scene = _scene([_tri_object(pos, idx)])
    o, d = _rays(rng, 3000)
    frac, ties = _compare_with_oracle(scene, o, d)
    assert 0.3 < frac < 0.99      # both hits and misses are exercised
    assert ties <= 3              # independent random triangles: ties are rare


@pytest.mark.parametrize("subdivisions", [1, 3])
def test_icosphere_matches_brute_force(subdivisions):
    """A closed mesh: rays from inside hit back faces; rays on shared edges are ties."""
    mesh = trimesh.creation.icosphere(subdivisions=subdivisions, radius=1.0)
    scene = _scene([_tri_object(mesh.vertices, mesh.faces)])
    rng = np.random.default_rng(SEED + subdivisions)
    o, d = _rays(rng, 2000, box=0.5, outside_radius=3.0)
    frac, _ = _compare_with_oracle(scene, o, d)
    assert frac > 0.6            # every inside ray hits; most outside rays are aimed at it


def test_mixed_scene_matches_brute_force():
    rng = np.random.default_rng(SEED + 7)
    objects = []
    for _ in range(30):
        objects.append({"shape": "sphere", "center": rng.uniform(-2, 2, 3).tolist(),
                        "radius": float(rng.uniform(0.05, 0.4))})
        e1, e2 = _perpendicular_edges(rng, 0.8)
        objects.append({"shape": "rectangle", "origin": rng.uniform(-2, 2, 3).tolist(),
                        "edge1": e1.tolist(), "edge2": e2.tolist()})
        nrm = rng.normal(size=3)
        objects.append({"shape": "disk", "center": rng.uniform(-2, 2, 3).tolist(),
                        "normal": nrm.tolist(), "radius": float(rng.uniform(0.05, 0.5))})
    # axis-aligned flat primitives (zero-thickness boxes) against axis-aligned rays
    objects.append({"shape": "rectangle", "origin": [-2, -2, 0.25], "edge1": [1.5, 0, 0],
                    "edge2": [0, 1.5, 0]})
    objects.append({"shape": "disk", "center": [1, 1, -0.5], "normal": [0, 1, 0], "radius": 0.7})
    for _ in range(3):
        pos, idx = _soup(rng, 100, centre_range=2.0, size=0.2)
        objects.append(_tri_object(pos, idx))
    rng.shuffle(objects)
    scene = _scene(objects)
    o, d = _rays(rng, 3000, box=2.5, outside_radius=6.0, axis_aligned=0.3)
    frac, ties = _compare_with_oracle(scene, o, d)
    assert 0.3 < frac < 0.99
    assert ties <= 3
    kinds = {type(scene.objects[i].shape) for i in
             set(refrender.trace(scene, o, d).object.tolist()) - {-1}}
    assert kinds == {Sphere, Rectangle, Disk, TriangleMesh}   # every kind was actually hit


def test_kernel_choice_by_coherence():
    """Camera rays in pixel order are coherent, random rays are not; an unknown
    kernel name is a one-line error."""
    from refrender.errors import RenderError
    from refrender.query import is_coherent
    ys, xs = np.mgrid[0:64, 0:64]
    d = np.stack([(xs - 31.5) / 64, (ys - 31.5) / 64, -np.ones_like(xs, float)], -1).reshape(-1, 3)
    o = np.tile([0.0, 0.0, 3.0], (len(d), 1))
    assert is_coherent(o, d, 1.0)
    rng = np.random.default_rng(SEED + 14)
    assert not is_coherent(rng.normal(size=(5000, 3)), rng.normal(size=(5000, 3)), 1.0)
    scene = _scene([{"shape": "sphere", "center": [0, 0, 0], "radius": 1}])
    with pytest.raises(RenderError, match="kernel must be one of"):
        refrender.trace(scene, o, d, kernel="fast")


class _AllCandidates:
    """Broad phase for trimesh's ray_triangle_id: every triangle is a candidate.

    trimesh's RayMeshIntersector needs the optional `rtree` package (not installed here)
    only for this broad phase; its narrow phase (plane intersection, barycentric test,
    nearest hit) in ``ray_triangle_id`` is what serves as the outside reference."""

    def __init__(self, triangles):
        self.bounds = np.concatenate([triangles.min(axis=(0, 1)), triangles.max(axis=(0, 1))])
        self._all = list(range(len(triangles)))

    def intersection(self, bounds):
        return self._all


def test_icosphere_agrees_with_trimesh():
    """trimesh's ray query (a general-purpose library) agrees on hit/miss and t.

    Rays passing within 2e-2 of the unit sphere's silhouette are excluded (the facets of
    a subdivision-3 icosphere lie within 1.3e-2 of it, and trimesh accepts barycentrics
    down to -tol.zero, a different edge rule)."""
    mesh = trimesh.creation.icosphere(subdivisions=3, radius=1.0)
    scene = _scene([_tri_object(mesh.vertices, mesh.faces)])
    rng = np.random.default_rng(SEED + 11)
    o, d = _rays(rng, 1000, box=0.5, outside_radius=3.0, axis_aligned=0.0)
    d /= np.linalg.norm(d, axis=1, keepdims=True)       # trimesh distances need unit d
    hits = refrender.trace(scene, o, d)
    tris = mesh.triangles
    tri, ray, loc = ray_triangle_id(tris, o, d, triangles_normal=mesh.face_normals,
                                    tree=_AllCandidates(tris), multiple_hits=False)
    t_tm = np.full(len(o), np.inf)
    t_tm[ray] = _dot(loc - o[ray], d[ray])
    b = _dot(o, d)
    closest = np.sqrt(np.maximum(_dot(o, o) - b * b, 0.0))
    keep = (np.abs(closest - 1.0) > 2e-2) | (_dot(o, o) < 1.0) | (b > 0)
    assert keep.mean() > 0.9
    np.testing.assert_array_equal(np.isfinite(hits.t[keep]), np.isfinite(t_tm[keep]))
    h = keep & np.isfinite(t_tm)
    assert h.sum() > 600
    np.testing.assert_allclose(hits.t[h], t_tm[h], rtol=T_RTOL)
    # same triangle, except on shared edges (ties at equal t)
    same = hits.prim[ray] == tri
    assert same.mean() > 0.99


def test_t_is_in_units_of_the_direction_length():
    """Invariant: scaling d by k divides t by k exactly up to rounding."""
    rng = np.random.default_rng(SEED + 3)
    pos, idx = _soup(rng, 300)
    scene = _scene([_tri_object(pos, idx), {"shape": "sphere", "center": [0, 0, 0], "radius": 0.5}])
    o, d = _rays(rng, 1000)
    a = refrender.trace(scene, o, d)
    b = refrender.trace(scene, o, 4.0 * d)        # a power of two: exact scaling
    np.testing.assert_array_equal(a.object, b.object)
    np.testing.assert_array_equal(a.prim, b.prim)
    np.testing.assert_allclose(b.t * 4.0, a.t, rtol=1e-12)


# ----------------------------------------------------------------------------- BVH structure

def _check_bvh(bmin, bmax, order, nb, noff, ncnt):
    """Assert the documented layout invariants; return the maximum depth."""
    n = len(bmin)
    m = len(nb)
    assert sorted(order.tolist()) == list(range(n)), "order is not a permutation"
    if n == 0:
        # documented in bvh.py: the empty hierarchy is one root with an empty box
        assert m == 1 and np.all(nb[0, :3] > nb[0, 3:]) and noff[0] == -1
        return 0
    seen = np.zeros(m, dtype=int)
    ranges = []
    stack = [(0, 0)]
    max_depth = 0
    while stack:
        node, depth = stack.pop()
        seen[node] += 1
        assert seen[node] == 1, f"node {node} is reached twice"
        max_depth = max(max_depth, depth)
        lo, hi = nb[node, :3], nb[node, 3:]
        if ncnt[node] > 0:
            start, cnt = int(noff[node]), int(ncnt[node])
            assert 0 <= start and start + cnt <= n
            ranges.append((start, start + cnt))
            prims = order[start:start + cnt]
            assert np.all(lo <= bmin[prims]) and np.all(hi >= bmax[prims]), \
                f"leaf {node} does not contain its primitives"
        else:
            left = int(noff[node])
            assert 0 < left and left + 1 < m, f"interior node {node}: children {left}, {left + 1} of {m}"
            for child in (left, left + 1):
                assert np.all(lo <= nb[child, :3]) and np.all(hi >= nb[child, 3:]), \
                    f"node {node} does not contain child {child}"
                stack.append((child, depth + 1))
    assert np.all(seen == 1), "orphan nodes"
    ranges.sort()
    covered = 0
    for a, b in ranges:
        assert a == covered, "leaf ranges overlap or leave a gap"
        covered = b
    assert covered == n, "every primitive appears in exactly one leaf"
    assert max_depth <= bvh_mod.MAX_DEPTH      # the bound the traversal stack is sized for
    return max_depth


def _boxes_of_centres(c, half):
    return c - half, c + half


@pytest.mark.parametrize("case", ["random", "identical", "single", "collinear", "coincident_pairs",
                                  "exponential"])
def test_bvh_invariants(case):
    rng = np.random.default_rng(SEED + 5)
    if case == "random":
        c = rng.uniform(-10, 10, size=(3000, 3))
        bmin, bmax = _boxes_of_centres(c, rng.uniform(0.0, 1.0, size=(3000, 3)))
    elif case == "identical":
        bmin, bmax = np.full((1000, 3), -1.0), np.full((1000, 3), 1.0)
    elif case == "single":
        bmin, bmax = np.array([[0.0, 1, 2]]), np.array([[1.0, 2, 3]])
    elif case == "collinear":
        c = np.outer(rng.uniform(0, 5, 777), [1.0, 2.0, -1.0])
        bmin, bmax = _boxes_of_centres(c, 0.1)
    elif case == "coincident_pairs":   # few distinct centroids, many copies
        c = np.repeat(rng.uniform(-1, 1, size=(7, 3)), 150, axis=0)
        bmin, bmax = _boxes_of_centres(c, rng.uniform(0.01, 0.2, size=(len(c), 3)))
    else:                               # centroids 2^-k: a maximally skewed split sequence
        c = np.zeros((200, 3))
        c[:, 0] = 2.0 ** -np.arange(200)
        bmin, bmax = _boxes_of_centres(c, 0.0)
    order, nb, noff, ncnt = build_bvh(bmin, bmax)
    depth = _check_bvh(bmin, bmax, order, nb, noff, ncnt)
    leaf = ncnt > 0
    assert depth <= bvh_mod.MAX_DEPTH
    if case != "exponential":
        assert ncnt[leaf].max() <= bvh_mod.MAX_LEAF


def test_bvh_of_nothing_is_well_formed():
    """BUG (reported): the BVH of zero primitives was malformed (a root read as an
    interior node whose children do not exist), so traversal descended into it
    (see test_empty_scene_trace_terminates).  Now: a root with an empty box and
    offset -1, whose wide node has eight empty slots that no ray enters."""
    order, nb, noff, ncnt = build_bvh(np.zeros((0, 3)), np.zeros((0, 3)))
    assert len(order) == 0
    _check_bvh(np.zeros((0, 3)), np.zeros((0, 3)), order, nb, noff, ncnt)
    nodes = wide_bvh(nb, noff, ncnt)
    assert len(nodes) == bvh_mod.RECORD
    rng = np.random.default_rng(SEED + 11)
    for _ in range(50):
        mask, _t = _box8(nodes, 0, rng.normal(size=3), rng.normal(size=3), math.inf)
        assert mask == 0, "a ray enters a slot of the empty hierarchy"


@numba.njit
def _box8_kernel(nodes, base, o, inv, near, tmax, tout):
    return box8_entry(nodes, base, o[0], o[1], o[2], inv[0], inv[1], inv[2],
                      near[0], near[1], near[2], tmax, tout, 0)


def _box8(nodes, base, o, d, tmax):
    inv = 1.0 / d
    tout = np.empty(8)
    mask = _box8_kernel(nodes, base, o, inv, np.where(inv >= 0, 0, 3), tmax, tout)
    return mask, tout


def _scalar_entry(lo, hi, o, inv, tmax):
    """The scalar slab test the vector one must equal (same operations, same order)."""
    near = np.where(inv >= 0, lo, hi)
    far = np.where(inv >= 0, hi, lo)
    t0 = (near - o) * inv
    t1 = (far - o) * inv
    tn = max(max(t0[0], t0[1]), max(t0[2], 0.0))
    tf = min(min(t1[0], t1[1]), min(t1[2], tmax)) * 1.0000000000000004
    return tn <= tf, tn


def test_box8_entry_equals_the_scalar_slab_test():
    """The vector slab test (an LLVM intrinsic) gives bit for bit the scalar test's
    entry distances and hit decisions, for random boxes, empty slots, rays that
    start inside boxes and axis-parallel rays (common practice: the slab method)."""
    rng = np.random.default_rng(SEED + 12)
    for it in range(3000):
        lo = rng.uniform(-1, 1, (3, 8)).astype(np.float32)
        hi = (lo + rng.uniform(0, 1, (3, 8))).astype(np.float32)
        empty = rng.uniform(size=8) < 0.2
        lo[:, empty] = np.inf
        hi[:, empty] = -np.inf
        nodes = np.zeros(3 * 64, np.float32)
        nodes[64:112] = np.concatenate([lo, hi]).ravel()
        o = rng.uniform(-2, 2, 3)
        d = rng.normal(size=3)
        if it % 5 == 0:
            d[rng.integers(3)] = 0.0                       # axis-parallel
        if it % 7 == 0 and not empty[0]:
            o = 0.5 * (lo[:, 0] + hi[:, 0]).astype(float)  # inside child 0
        with np.errstate(divide="ignore"):
            inv = np.where(d == 0, np.copysign(1e300, d), 1.0 / np.where(d == 0, 1, d))
        tmax = [math.inf, 1.5][it % 2]
        tout = np.empty(8)
        mask = _box8_kernel(nodes, 64, o, inv, np.where(inv >= 0, 0, 3), tmax, tout)
        for c in range(8):
            hit, tn = _scalar_entry(lo[:, c].astype(float), hi[:, c].astype(float), o, inv, tmax)
            assert bool(mask >> c & 1) == hit, f"iteration {it} child {c}"
            if not empty[c]:
                assert tout[c] == tn
            else:
                assert not hit


@pytest.mark.parametrize("case", ["random", "collinear", "exponential", "single"])
def test_wide_bvh_is_the_binary_one_collapsed(case):
    """Every primitive is in exactly one leaf of the 8-wide hierarchy, every float32
    child box contains the float64 boxes of its primitives (outward rounding), and
    the pending-child stack bound WIDE_STACK holds."""
    rng = np.random.default_rng(SEED + 13)
    if case == "random":
        c = rng.uniform(-10, 10, size=(5000, 3))
        bmin, bmax = _boxes_of_centres(c, rng.uniform(0.0, 1.0, size=(5000, 3)))
    elif case == "collinear":
        c = np.outer(rng.uniform(0, 5, 777), [1.0, 2.0, -1.0])
        bmin, bmax = _boxes_of_centres(c, 0.1)
    elif case == "single":
        bmin, bmax = np.array([[0.0, 1, 2]]), np.array([[1.0, 2, 3]])
    else:
        c = np.zeros((200, 3))
        c[:, 0] = 2.0 ** -np.arange(200)
        bmin, bmax = _boxes_of_centres(c, 0.0)
    order, nb, noff, ncnt = build_bvh(bmin, bmax)
    nodes = wide_bvh(nb, noff, ncnt)
    assert nodes.ctypes.data % 64 == 0
    ni = nodes.view(np.int32)
    n_wide = len(nodes) // bvh_mod.RECORD
    seen = np.zeros(len(order), int)
    visits = np.zeros(n_wide, int)
    todo = [(0, 0)]
    max_pending = 0
    while todo:
        r, depth = todo.pop()
        visits[r] += 1
        rec = nodes[64 * r:64 * r + 48].reshape(6, 8)
        n_children = 0
        for c in range(8):
            lo, hi = rec[:3, c], rec[3:, c]
            ref, cnt = ni[64 * r + 48 + c], ni[64 * r + 56 + c]
            if lo[0] > hi[0]:
                assert cnt == 0 and np.all(lo == np.inf)
                continue
            n_children += 1
            if cnt > 0:
                prims = order[ref:ref + cnt]
                seen[ref:ref + cnt] += 1
                assert np.all(lo <= bmin[prims]) and np.all(hi >= bmax[prims])
            else:
                sub = nodes[64 * ref:64 * ref + 48].reshape(6, 8)
                live = sub[0] <= sub[3]
                assert np.all(lo[:, None] <= sub[:3, live]) and np.all(hi[:, None] >= sub[3:, live])
                todo.append((ref, depth + 1))
        assert n_children >= 1
        max_pending = max(max_pending, (depth + 1) * 7)
    assert np.all(seen == 1), "every primitive appears in exactly one leaf"
    assert np.all(visits == 1), "every wide node is reached exactly once"
    assert max_pending <= bvh_mod.WIDE_STACK


def test_empty_scene_trace_terminates(tmp_path):
    """BUG (reported): refrender.trace (and refrender.render) on a scene with no objects
    never returns.  Run in a child process with a timeout so the suite cannot hang."""
    # compile trace_batch in this process first, so the child only loads the cache
    refrender.trace(_scene([{"shape": "sphere", "center": [0, 0, 0], "radius": 1}]),
                    np.zeros((1, 3)), np.array([[0.0, 0.0, 1.0]]))
    code = textwrap.dedent("""
        import numpy as np, refrender
        s = refrender.load_scene({"version": 1, "camera": {"position": [0, 0, 1], "look_at": [0, 0, 0]},
                                  "film": {"width": 2, "height": 2}, "objects": []})
        h = refrender.trace(s, np.zeros((2, 3)), np.array([[0, 0, -1.0], [1, 1, 1.0]]))
        assert (h.object == -1).all() and np.isinf(h.t).all()
        print("ok")
    """)
    try:
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                             timeout=15, cwd=tmp_path)
    except subprocess.TimeoutExpired:
        pytest.fail("BUG: refrender.trace on a scene with no objects did not return within 15 s "
                    "(empty BVH root is treated as an interior node)")
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr[-2000:]


@pytest.mark.parametrize("case", ["identical", "single", "collinear"])
def test_degenerate_bvh_traces_correctly(case):
    """Degenerate inputs build and trace like the brute force."""
    rng = np.random.default_rng(SEED + 9)
    tri = np.array([[0.0, 0, 0], [1, 0, 0], [0, 1, 0]])
    if case == "identical":        # 1000 copies of one triangle: identical boxes, every hit a tie
        pos = np.tile(tri, (1000, 1))
    elif case == "single":
        pos = tri
    else:                          # centroids on one line through space
        shift = np.outer(np.linspace(-3, 3, 500), [1.0, 0.5, -0.25])
        pos = (tri[None] * 0.2 + shift[:, None, :]).reshape(-1, 3)
    idx = np.arange(len(pos)).reshape(-1, 3)
    scene = _scene([_tri_object(pos, idx)])
    if case == "collinear":        # aim at points near the line, from anywhere around it
        o = rng.uniform(-5, 5, size=(1500, 3))
        target = np.outer(rng.uniform(-3, 3, 1500), [1.0, 0.5, -0.25])
        d = target + rng.normal(scale=0.1, size=(1500, 3)) - o
    else:
        o = rng.uniform(-1, 2, size=(1500, 3))
        o[:, 2] = rng.choice([-2.0, 2.0], size=1500)
        d = np.column_stack([rng.uniform(-0.3, 0.3, size=(1500, 2)), -np.sign(o[:, 2])])
    frac, _ = _compare_with_oracle(scene, o, d)
    assert 0.05 < frac < 0.99


# ----------------------------------------------------------------------------- self-intersection at every scale

SCALES = [1e-3, 1.0, 1e3]


def _enclosure(scale, rho, le):
    """Two-sided emissive diffuse sphere of radius `scale` centred at scale*(1,2,3),
    camera at its centre (emission must be two-sided to reach the inside)."""
    c = (scale * np.array([1.0, 2.0, 3.0])).tolist()
    return {
        "version": 1,
        "camera": {"position": c, "look_at": [c[0], c[1], c[2] - scale], "fov_y": 60},
        "film": {"width": 8, "height": 8},
        "materials": {"wall": {"type": "lambertian", "albedo": [rho] * 3}},
        "objects": [{"shape": "sphere", "center": c, "radius": scale, "material": "wall",
                     "emission": [le] * 3, "emits_both_sides": True}],
    }


def _image_mean(res):
    """Mean over pixels of channel 0 and its standard error (pixels are independent)."""
    m = res.mean[..., 0]
    return float(m.mean()), float(math.sqrt(res.variance[..., 0].sum()) / m.size)


@pytest.mark.parametrize("strategy", ["bsdf", "mis"])
@pytest.mark.parametrize("scale", SCALES)
def test_closed_sphere_enclosure_at_every_scale(scale, strategy):
    """§2a: inside a closed enclosure of uniform emission Le and albedo rho,
    L = Le / (1 - rho) everywhere (Goral et al. 1984).  Self-intersection (acne) would
    bias it.  "bsdf" isolates the geometry (no light sampling); "mis" is the default."""
    rho, le = 0.5, 1.0
    scene = refrender.load_scene(_enclosure(scale, rho, le))
    res = refrender.render(scene, spp=256, seed=3, strategy=strategy)
    mean, se = _image_mean(res)
    expected = le / (1.0 - rho)
    assert se <= 0.01 * expected
    assert abs(mean - expected) <= N_SIGMA * se, (
        f"scale {scale}, {strategy}: L = {mean:.5f} +- {se:.5f}, expected {expected} (§2a)")
    assert res.stats["nonfinite_samples"] == 0


@pytest.mark.parametrize("centre", [(0.0, 0.0, 0.0), (1.0, 2.0, 3.0)])
@pytest.mark.parametrize("scale", SCALES)
def test_nee_from_a_point_on_the_emitting_sphere(scale, centre):
    """Regression: next-event estimation from a point ON an emitting sphere toward that
    same sphere.  Before commit 1a0a315 the "far side of a sphere" test in
    integrator/path.py judged |x - c|^2 > r^2 with x on the sphere itself, so rounding
    dropped 40-60 % of these samples (found here with the sphere centred at the origin:
    L_1 = 1.2158 instead of 1.5).

    Expected value: one scattering event inside a closed two-sided emissive sphere,
    L_1 = Le (1 + rho) (§2a, N = 1).  With strategy "nee" and light_sampling "area"
    every sample equals Le + rho Le (between two points of a sphere
    cos cos / d^2 = 1 / (4 r^2), so the estimator has zero variance): the tolerance is
    float64 rounding."""
    rho, le = 0.5, 1.0
    doc = _enclosure(scale, rho, le)
    c = (scale * np.array(centre)).tolist()
    doc["camera"].update(position=c, look_at=[c[0], c[1], c[2] - scale])
    doc["objects"][0]["center"] = c
    res = refrender.render(refrender.load_scene(doc), spp=16, seed=1, strategy="nee",
                           light_sampling="area", max_bounces=1)
    np.testing.assert_allclose(res.mean, le * (1 + rho), rtol=1e-9,
                               err_msg="NEE inside an emissive sphere loses light (§2a, N = 1)")


def _floor_scene(scale, kind):
    """Diffuse floor (plane y = y0, front +y) under a point light at height h = scale/2
    above the view centre; orthographic camera looking straight down, view = scale."""
    s = scale
    cx, y0, cz = s * 1.0, s * 2.0, s * 3.0
    objects = []
    if kind in ("rectangle", "coincident"):
        objects.append({"shape": "rectangle", "origin": [cx - s, y0, cz - s],
                        "edge1": [0, 0, 2 * s], "edge2": [2 * s, 0, 0], "material": "floor"})
    if kind in ("triangle_grid", "coincident"):
        k = 7
        xs = np.linspace(cx - s, cx + s, k + 1)
        zs = np.linspace(cz - s, cz + s, k + 1)
        pos = np.array([[x, y0, z] for x in xs for z in zs])
        vid = lambda i, j: i * (k + 1) + j  # noqa: E731
        idx = []
        for i in range(k):
            for j in range(k):
                a, b, c, e = vid(i, j), vid(i, j + 1), vid(i + 1, j), vid(i + 1, j + 1)
                idx += [[a, b, c], [c, b, e]]       # (b - a) x (c - a) points to +y
        objects.append({**_tri_object(pos, idx), "material": "floor"})
    return {
        "version": 1,
        "camera": {"projection": "orthographic", "position": [cx, y0 + 2 * s, cz],
                   "look_at": [cx, y0, cz], "up": [0, 0, -1], "view_height": s},
        "film": {"width": 8, "height": 8},
        "materials": {"floor": {"type": "lambertian", "albedo": [0.5, 0.5, 0.5]}},
        "objects": objects,
        "lights": [{"type": "point", "position": [cx, y0 + 0.5 * s, cz],
                    "intensity": [2.0 * s * s] * 3}],
    }


def _rect_solid_angle(x1, x2, y1, y2, c):
    """§5b: solid angle of [x1,x2]x[y1,y2] in a plane at distance c (viewpoint over the
    origin), by signed superposition of the corner form atan(ab / (c sqrt(a^2+b^2+c^2)))."""
    f = lambda a, b: np.arctan(a * b / (c * np.sqrt(a * a + b * b + c * c)))  # noqa: E731
    return f(x2, y2) - f(x1, y2) - f(x2, y1) + f(x1, y1)


def _floor_expected(scale, rho=0.5):
    """Pixel mean of L_o = rho E / pi with E = I cos / d^2 (§7), averaged over the pixel
    footprint: the integral of cos / d^2 over a patch is its solid angle (§5b), so
    pixel = rho I Omega / (pi A).  The image is symmetric about both axes through the
    light's foot, so the raster orientation does not enter."""
    s = scale
    h = 0.5 * s
    intensity = 2.0 * s * s
    p = s / 8
    edges = -s / 2 + p * np.arange(9)
    out = np.empty((8, 8))
    for j in range(8):
        for i in range(8):
            om = _rect_solid_angle(edges[i], edges[i + 1], edges[j], edges[j + 1], h)
            out[j, i] = rho * intensity * om / (math.pi * p * p)
    return out


@pytest.mark.parametrize("kind", ["rectangle", "triangle_grid", "coincident"])
@pytest.mark.parametrize("scale", SCALES)
def test_floor_under_point_light_at_every_scale(scale, kind):
    """§7 + §5b per pixel within 4 sigma; a shadow ray that re-hits the floor (or a
    coincident copy of it) would darken pixels."""
    scene = refrender.load_scene(_floor_scene(scale, kind))
    res = refrender.render(scene, spp=256, seed=5)
    expected = _floor_expected(scale)
    m = res.mean[..., 0]
    se = np.sqrt(res.variance[..., 0])
    assert np.all(se <= 0.01 * expected)
    z = (m - expected) / se
    worst = np.unravel_index(np.argmax(np.abs(z)), z.shape)
    assert np.all(np.abs(z) <= N_SIGMA), (
        f"scale {scale}, {kind}: pixel {worst[::-1]} = {m[worst]:.6g}, expected "
        f"{expected[worst]:.6g} (z = {z[worst]:.1f})")
    # the three channels are the same estimator (grey albedo and light)
    np.testing.assert_array_equal(res.mean[..., 0], res.mean[..., 2])
