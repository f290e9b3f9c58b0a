"""Ray-primitive intersection on flat float64 records.

Every finite primitive is one row of ``prim_geom`` (n, 9) float64 and one
entry of ``prim_type``:

=========  ====  ===========================================
type       code  row layout
=========  ====  ===========================================
sphere     0     cx cy cz r  - - - - -
rectangle  1     ox oy oz e1x e1y e1z e2x e2y e2z
disk       2     cx cy cz nx ny nz r - -
triangle   3     ax ay az e1x e1y e1z e2x e2y e2z  (e1=b-a, e2=c-a)
=========  ====  ===========================================

Intersectors read row ``k`` of ``G`` directly (no row views in the hot loop)
and return (t, u, v): the ray parameter of the nearest hit in
(tmin, tmax), or inf, and two surface coordinates (barycentrics b1, b2 for a
triangle, edge fractions for a rectangle, 0 otherwise).
"""
import math

from .._jit import hot, inline

SPHERE = 0
RECTANGLE = 1
DISK = 2
TRIANGLE = 3

INF = math.inf


@hot
def intersect_sphere(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax):
    """Sphere; the quadratic in the precise form of Haines et al.,
    "Precision Improvements for Ray/Sphere Intersection", Ray Tracing Gems 2019."""
    fx = ox - G[k, 0]
    fy = oy - G[k, 1]
    fz = oz - G[k, 2]
    r = G[k, 3]
    a = dx * dx + dy * dy + dz * dz
    b = -(fx * dx + fy * dy + fz * dz)           # b' = -f.d
    # |f - (f.d/a) d|^2 computed directly: loses no precision when |f| >> r
    s = b / a
    px = fx + s * dx
    py = fy + s * dy
    pz = fz + s * dz
    disc = a * (r * r - (px * px + py * py + pz * pz))
    if disc < 0.0:
        return INF, 0.0, 0.0
    c = fx * fx + fy * fy + fz * fz - r * r
    sq = math.sqrt(disc)
    q = b + sq if b >= 0.0 else b - sq
    if q == 0.0:
        return INF, 0.0, 0.0
    t0 = c / q
    t1 = q / a
    if t0 > t1:
        t0, t1 = t1, t0
    if t0 > tmin and t0 < tmax:
        return t0, 0.0, 0.0
    if t1 > tmin and t1 < tmax:
        return t1, 0.0, 0.0
    return INF, 0.0, 0.0


@hot
def intersect_rectangle(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax):
    """Parallelogram with perpendicular edges e1, e2 from corner o."""
    e1x, e1y, e1z = G[k, 3], G[k, 4], G[k, 5]
    e2x, e2y, e2z = G[k, 6], G[k, 7], G[k, 8]
    nx = e1y * e2z - e1z * e2y
    ny = e1z * e2x - e1x * e2z
    nz = e1x * e2y - e1y * e2x
    denom = nx * dx + ny * dy + nz * dz
    if denom == 0.0:
        return INF, 0.0, 0.0
    wx = G[k, 0] - ox
    wy = G[k, 1] - oy
    wz = G[k, 2] - oz
    t = (nx * wx + ny * wy + nz * wz) / denom
    if not (t > tmin and t < tmax):
        return INF, 0.0, 0.0
    px = ox + t * dx - G[k, 0]
    py = oy + t * dy - G[k, 1]
    pz = oz + t * dz - G[k, 2]
    u = (px * e1x + py * e1y + pz * e1z) / (e1x * e1x + e1y * e1y + e1z * e1z)
    if u < 0.0 or u > 1.0:
        return INF, 0.0, 0.0
    v = (px * e2x + py * e2y + pz * e2z) / (e2x * e2x + e2y * e2y + e2z * e2z)
    if v < 0.0 or v > 1.0:
        return INF, 0.0, 0.0
    return t, u, v


@hot
def intersect_disk(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax):
    """Disk of centre c, unit normal n, radius r."""
    nx, ny, nz = G[k, 3], G[k, 4], G[k, 5]
    denom = nx * dx + ny * dy + nz * dz
    if denom == 0.0:
        return INF, 0.0, 0.0
    t = (nx * (G[k, 0] - ox) + ny * (G[k, 1] - oy) + nz * (G[k, 2] - oz)) / denom
    if not (t > tmin and t < tmax):
        return INF, 0.0, 0.0
    px = ox + t * dx - G[k, 0]
    py = oy + t * dy - G[k, 1]
    pz = oz + t * dz - G[k, 2]
    if px * px + py * py + pz * pz > G[k, 6] * G[k, 6]:
        return INF, 0.0, 0.0
    return t, 0.0, 0.0


@hot
def intersect_triangle(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax):
    """Moller & Trumbore, "Fast, minimum storage ray-triangle intersection",
    JGT 2(1), 1997.  Returns (t, b1, b2).

    Written without early exits: every quantity is computed and one combined
    test decides (the same arithmetic as the early-exit form, so the same
    result), which avoids mispredicted branches in the traversal loop.  A
    zero determinant gives inf/nan, which every comparison rejects.
    """
    e1x, e1y, e1z = G[k, 3], G[k, 4], G[k, 5]
    e2x, e2y, e2z = G[k, 6], G[k, 7], G[k, 8]
    px = dy * e2z - dz * e2y
    py = dz * e2x - dx * e2z
    pz = dx * e2y - dy * e2x
    det = e1x * px + e1y * py + e1z * pz
    inv = 1.0 / det
    sx = ox - G[k, 0]
    sy = oy - G[k, 1]
    sz = oz - G[k, 2]
    b1 = (sx * px + sy * py + sz * pz) * inv
    qx = sy * e1z - sz * e1y
    qy = sz * e1x - sx * e1z
    qz = sx * e1y - sy * e1x
    b2 = (dx * qx + dy * qy + dz * qz) * inv
    t = (e2x * qx + e2y * qy + e2z * qz) * inv
    ok = (det != 0.0) & (b1 >= 0.0) & (b1 <= 1.0) & (b2 >= 0.0) & (b1 + b2 <= 1.0) \
        & (t > tmin) & (t < tmax)
    if ok:
        return t, b1, b2
    return INF, 0.0, 0.0


@hot
def intersect_prim(kind, G, k, ox, oy, oz, dx, dy, dz, tmin, tmax):
    """Dispatch on the primitive type code."""
    if kind == TRIANGLE:
        return intersect_triangle(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax)
    if kind == SPHERE:
        return intersect_sphere(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax)
    if kind == RECTANGLE:
        return intersect_rectangle(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax)
    return intersect_disk(G, k, ox, oy, oz, dx, dy, dz, tmin, tmax)


@inline
def surface_point(kind, g, ox, oy, oz, dx, dy, dz, t, u, v):
    """Accurate hit point and front (geometric) unit normal of a hit.

    The point is recomputed from the surface parameters (barycentrics, edge
    fractions, re-projection onto the sphere) instead of o + t d, which keeps
    its error relative to the primitive's own coordinates.
    Returns px, py, pz, nx, ny, nz.
    """
    if kind == TRIANGLE or kind == RECTANGLE:
        e1x, e1y, e1z = g[3], g[4], g[5]
        e2x, e2y, e2z = g[6], g[7], g[8]
        px = g[0] + u * e1x + v * e2x
        py = g[1] + u * e1y + v * e2y
        pz = g[2] + u * e1z + v * e2z
        nx = e1y * e2z - e1z * e2y
        ny = e1z * e2x - e1x * e2z
        nz = e1x * e2y - e1y * e2x
        inv = 1.0 / math.sqrt(nx * nx + ny * ny + nz * nz)
        return px, py, pz, nx * inv, ny * inv, nz * inv
    px = ox + t * dx
    py = oy + t * dy
    pz = oz + t * dz
    if kind == SPHERE:
        nx = px - g[0]
        ny = py - g[1]
        nz = pz - g[2]
        inv = 1.0 / math.sqrt(nx * nx + ny * ny + nz * nz)
        nx *= inv
        ny *= inv
        nz *= inv
        r = g[3]
        return g[0] + r * nx, g[1] + r * ny, g[2] + r * nz, nx, ny, nz
    # disk: project onto its plane
    nx, ny, nz = g[3], g[4], g[5]
    off = (px - g[0]) * nx + (py - g[1]) * ny + (pz - g[2]) * nz
    return px - off * nx, py - off * ny, pz - off * nz, nx, ny, nz


@inline
def is_planar(kind):
    """A planar primitive cannot be hit again by a ray leaving its surface."""
    return kind != SPHERE


@inline
def surface_uv(kind, g, uvrow, px, py, pz, u, v):
    """Texture coordinates (u, v) of a hit point (see the README, "Textures").

    Triangle: interpolated from ``uvrow`` = [has_uv, ua, va, ub, vb, uc, vc]
    at the barycentrics (u, v), or the barycentrics themselves without UVs.
    Rectangle: the edge fractions (along edge1, along edge2).  Sphere:
    longitude phi / 2 pi with phi = atan2(-dz, dx) in [0, 2 pi) (right-handed
    about +Y from +X) and latitude v = 1 - theta / pi (theta from +Y, so v = 1
    at the +Y pole).  Disk: phi / 2 pi about its normal (from the tangent of
    the normal's orthonormal basis, Duff et al. 2017) and radius / R.
    """
    if kind == TRIANGLE:
        if uvrow[0] > 0.0:
            w = 1.0 - u - v
            return (w * uvrow[1] + u * uvrow[3] + v * uvrow[5],
                    w * uvrow[2] + u * uvrow[4] + v * uvrow[6])
        return u, v
    if kind == RECTANGLE:
        return u, v
    if kind == SPHERE:
        dx = (px - g[0]) / g[3]
        dy = (py - g[1]) / g[3]
        dz = (pz - g[2]) / g[3]
        phi = math.atan2(-dz, dx)
        if phi < 0.0:
            phi += 2.0 * math.pi
        return phi / (2.0 * math.pi), 1.0 - math.acos(max(-1.0, min(1.0, dy))) / math.pi
    # disk: orthonormal basis of the normal (same construction as sampling.warp.onb)
    nx, ny, nz = g[3], g[4], g[5]
    sign = 1.0 if nz >= 0.0 else -1.0
    a = -1.0 / (sign + nz)
    b = nx * ny * a
    tx, ty, tz = 1.0 + sign * nx * nx * a, sign * b, -sign * nx
    bx, by, bz = b, sign + ny * ny * a, -ny
    qx = px - g[0]
    qy = py - g[1]
    qz = pz - g[2]
    phi = math.atan2(qx * bx + qy * by + qz * bz, qx * tx + qy * ty + qz * tz)
    if phi < 0.0:
        phi += 2.0 * math.pi
    r = math.sqrt(qx * qx + qy * qy + qz * qz) / g[6]
    return phi / (2.0 * math.pi), min(r, 1.0)
