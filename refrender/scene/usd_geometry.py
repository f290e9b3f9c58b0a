"""OpenUSD geometry -> world-space triangle lists and exact shapes.

Pure numpy on arrays already read from the stage (the caller reads the
attributes with ``pxr``); every function returns world-space data in the
renderer's convention: a triangle (a, b, c) faces (b - a) x (c - a).

Tessellations (stated in the README's mapping table):

* ``Sphere`` that is not transformed into a sphere (non-uniform scale or
  shear): a latitude-longitude mesh of ``SPHERE_SEGMENTS`` x ``SPHERE_RINGS``.
* ``Cylinder``, ``Cone``, ``Capsule``: ``ROUND_SEGMENTS`` facets around the
  axis (vertices on the exact surface; caps as fans; a capsule's hemispheres
  with ``SPHERE_RINGS // 2`` rings each).
* ``Cube`` and ``Plane`` are exact (12 and 2 triangles).
"""
from __future__ import annotations

import math

import numpy as np

from ._shapes import zero_area

SPHERE_SEGMENTS = 48
SPHERE_RINGS = 24
ROUND_SEGMENTS = 64


# ----------------------------------------------------------------------------- matrices

def apply(matrix: np.ndarray, points: np.ndarray) -> np.ndarray:
    """(n, 3) points transformed by a (4, 4) column-vector affine matrix (-0.0 becomes 0.0)."""
    return points @ matrix[:3, :3].T + matrix[:3, 3] + 0.0


def similarity_scale(linear: np.ndarray, tol: float = 1e-9) -> float | None:
    """The uniform scale s if *linear* (3, 3) is s times a rotation (or mirror), else None."""
    gram = linear.T @ linear
    s2 = float(np.trace(gram)) / 3.0
    if s2 <= 0.0 or not np.allclose(gram, s2 * np.eye(3), rtol=0.0, atol=tol * s2):
        return None
    return math.sqrt(s2)


# ----------------------------------------------------------------------------- polygon meshes

def fan_triangles(counts: np.ndarray, holes: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Fan triangulation of polygons given by their vertex counts.

    Returns (corners (m, 3) int64 indices into the face-vertex list, face (m,)
    int64 the polygon of each triangle).  Polygon f with first corner s and c
    corners gives (s, s + k, s + k + 1) for k = 1 .. c - 2: exact for convex
    planar polygons.  Polygons with fewer than 3 corners and those listed in
    *holes* (``holeIndices``) are skipped.
    """
    counts = np.asarray(counts, dtype=np.int64)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    keep = counts >= 3
    if holes is not None and len(holes):
        keep[np.asarray(holes, dtype=np.int64)] = False
    tris_per = np.where(keep, counts - 2, 0)
    face = np.repeat(np.arange(len(counts), dtype=np.int64), tris_per)
    first = np.repeat(starts, tris_per)
    k = np.arange(len(face), dtype=np.int64) - np.repeat(np.cumsum(tris_per) - tris_per, tris_per) + 1
    corners = np.stack([first, first + k, first + k + 1], axis=1)
    return corners, face


def triangle_entry(positions: np.ndarray, indices: np.ndarray, uvs: np.ndarray | None = None) -> dict | None:
    """A ``triangles`` scene entry (world positions) without zero-area triangles; None if none remain.

    Vertices not used by any remaining triangle are dropped.
    """
    indices = np.asarray(indices, dtype=np.int64).reshape(-1, 3)
    if len(indices) == 0:
        return None
    keep = ~zero_area(positions, indices)
    indices = indices[keep]
    if len(indices) == 0:
        return None
    used, inverse = np.unique(indices, return_inverse=True)
    entry = {"shape": "triangles", "positions": positions[used].tolist(),
             "indices": inverse.reshape(-1, 3).tolist()}
    if uvs is not None:
        entry["uvs"] = uvs[used].tolist()
    entry["_dropped"] = int((~keep).sum())
    return entry


def mesh_entry(points, counts, corner_vertex, matrix, *, left_handed=False, holes=None,
               uv=None, uv_interpolation=None) -> dict | None:
    """World-space ``triangles`` entry of a ``UsdGeom.Mesh``.

    *corner_vertex* is ``faceVertexIndices``; *uv* the flattened ``st`` values
    with *uv_interpolation* (``vertex``/``varying``: one per point,
    ``faceVarying``: one per corner, ``uniform``: one per face, ``constant``).
    ``leftHanded`` and a mirroring *matrix* (negative determinant) each flip
    the winding, so the front side is the one USD's orientation rule names,
    carried through the transform.
    """
    points = np.asarray(points, dtype=np.float64).reshape(-1, 3)
    corner_vertex = np.asarray(corner_vertex, dtype=np.int64)
    corners, face = fan_triangles(counts, holes)
    flip = left_handed != (np.linalg.det(matrix[:3, :3]) < 0.0)
    if flip:
        corners = corners[:, [0, 2, 1]]
    world = apply(matrix, points)
    if uv is None or uv_interpolation in (None, "constant"):
        return triangle_entry(world, corner_vertex[corners])
    uv = np.asarray(uv, dtype=np.float64).reshape(-1, 2)
    if uv_interpolation in ("vertex", "varying"):
        return triangle_entry(world, corner_vertex[corners], uv)
    # faceVarying / uniform: one vertex per triangle corner (unwelded)
    flat = corners.reshape(-1)
    positions = world[corner_vertex[flat]]
    per_corner = uv[flat] if uv_interpolation == "faceVarying" else np.repeat(uv[face], 3, axis=0)
    return triangle_entry(positions, np.arange(len(flat)).reshape(-1, 3), per_corner)


# ----------------------------------------------------------------------------- gprims

def _axis_frame(axis: str) -> np.ndarray:
    """(3, 3) matrix taking the canonical +Z-axis shape onto the prim's ``axis``."""
    if axis == "X":
        return np.array([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    if axis == "Y":
        return np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0]])
    return np.eye(3)


def _lathe(profile: list[tuple[float, float]], segments: int) -> tuple[np.ndarray, np.ndarray]:
    """Surface of revolution about +Z of a profile [(radius, z), ...] listed bottom to top.

    Rings of radius 0 become single poles.  Outward-facing triangles.
    """
    phi = 2.0 * math.pi * np.arange(segments) / segments
    ring_ids, points = [], []
    for r, z in profile:
        if r == 0.0:
            ring_ids.append([len(points)] * segments)
            points.append((0.0, 0.0, z))
        else:
            ring_ids.append(list(range(len(points), len(points) + segments)))
            points.extend((r * math.cos(p), r * math.sin(p), z) for p in phi)
    tris = []
    for lo, hi in zip(ring_ids[:-1], ring_ids[1:]):
        for j in range(segments):
            a, b, c, d = lo[j], lo[(j + 1) % segments], hi[(j + 1) % segments], hi[j]
            if a != b:                 # not at a pole
                tris.append((a, b, c))
            if c != d:
                tris.append((a, c, d))
    return np.array(points, dtype=np.float64), np.array(tris, dtype=np.int64)


def sphere_mesh(radius: float) -> tuple[np.ndarray, np.ndarray]:
    rings = SPHERE_RINGS
    profile = [(radius * math.sin(math.pi * i / rings), -radius * math.cos(math.pi * i / rings))
               for i in range(rings + 1)]
    profile[0], profile[-1] = (0.0, -radius), (0.0, radius)
    return _lathe(profile, SPHERE_SEGMENTS)


def cylinder_mesh(radius: float, height: float, axis: str, top_radius: float | None = None):
    """Capped cylinder (or a cone when top_radius = 0) centred on the origin."""
    top = radius if top_radius is None else top_radius
    h = 0.5 * height
    profile = [(0.0, -h), (radius, -h), (top, h)] + ([(0.0, h)] if top > 0.0 else [])
    pts, tris = _lathe(profile, ROUND_SEGMENTS)
    return pts @ _axis_frame(axis).T, tris


def capsule_mesh(radius: float, height: float, axis: str):
    """Cylinder of the given height between two hemispheres of *radius*."""
    h = 0.5 * height
    half = SPHERE_RINGS // 2
    bottom = [(radius * math.sin(0.5 * math.pi * i / half), -h - radius * math.cos(0.5 * math.pi * i / half))
              for i in range(half + 1)]
    top = [(radius * math.cos(0.5 * math.pi * i / half), h + radius * math.sin(0.5 * math.pi * i / half))
           for i in range(half + 1)]
    bottom[0], top[-1] = (0.0, -h - radius), (0.0, h + radius)
    pts, tris = _lathe(bottom + top, ROUND_SEGMENTS)
    return pts @ _axis_frame(axis).T, tris


def cube_mesh(size: float):
    """Axis-aligned cube of edge *size* centred on the origin, 12 outward triangles."""
    s = 0.5 * size
    pts = np.array([[x, y, z] for x in (-s, s) for y in (-s, s) for z in (-s, s)], dtype=np.float64)
    quads = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
    tris = []
    for a, b, c, d in quads:
        tris += [(a, b, c), (a, c, d)]
    return pts, np.array(tris, dtype=np.int64)


def plane_mesh(width: float, length: float, axis: str):
    """USD ``Plane``: width along x (z for axis X), length along y (z for axis Y); faces +axis."""
    w, l = 0.5 * width, 0.5 * length
    if axis == "X":
        pts = [[0.0, -l, -w], [0.0, l, -w], [0.0, l, w], [0.0, -l, w]]
    elif axis == "Y":
        pts = [[-w, 0.0, -l], [-w, 0.0, l], [w, 0.0, l], [w, 0.0, -l]]
    else:
        pts = [[-w, -l, 0.0], [w, -l, 0.0], [w, l, 0.0], [-w, l, 0.0]]
    return np.array(pts, dtype=np.float64), np.array([(0, 1, 2), (0, 2, 3)], dtype=np.int64)


def solid_entry(points: np.ndarray, tris: np.ndarray, matrix: np.ndarray) -> dict | None:
    """World-space ``triangles`` entry of a tessellated gprim (winding kept under mirrors)."""
    if np.linalg.det(matrix[:3, :3]) < 0.0:
        tris = tris[:, [0, 2, 1]]
    return triangle_entry(apply(matrix, points), tris)


def disk_mesh(radius: float) -> tuple[np.ndarray, np.ndarray]:
    """Fan of ROUND_SEGMENTS triangles in the XY plane facing -Z (a DiskLight's front)."""
    phi = 2.0 * math.pi * np.arange(ROUND_SEGMENTS) / ROUND_SEGMENTS
    pts = np.concatenate([[[0.0, 0.0, 0.0]],
                          np.stack([radius * np.cos(phi), radius * np.sin(phi), 0 * phi], axis=1)])
    tris = [(0, 1 + (j + 1) % ROUND_SEGMENTS, 1 + j) for j in range(ROUND_SEGMENTS)]
    return pts, np.array(tris, dtype=np.int64)


def cylinder_side_mesh(radius: float, length: float) -> tuple[np.ndarray, np.ndarray]:
    """A CylinderLight: the open side of a cylinder along local X, outward-facing."""
    pts, tris = _lathe([(radius, -0.5 * length), (radius, 0.5 * length)], ROUND_SEGMENTS)
    return pts @ _axis_frame("X").T, tris
