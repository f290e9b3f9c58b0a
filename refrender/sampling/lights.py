"""Sampling points on emitting primitives, by area or by solid angle.

``sample_emitter`` returns a point y on the primitive, its front unit normal
and the pdf of the chosen direction x -> y **in solid angle** as seen from the
shading point x; ``pdf_emitter`` returns the same pdf for a given y (needed
by MIS when a BSDF-sampled ray hits the emitter).  They always take the same
decision between methods, so sampler and pdf agree exactly.

Methods (``mode`` 0 = area, 1 = solid angle):

- area, every shape: uniform on the surface, pdf_A = 1/A, converted by
  dist^2 / |cos theta_y|.
- solid angle, sphere: uniform in the cone of the visible cap.  Falls back to
  area sampling when x is inside or on the sphere: |x - c|^2 <= r^2 (1 + 1e-6).
- solid angle, rectangle: Urena, Fajardo & King, "An Area-Preserving
  Parametrization for Spherical Rectangles", CGF 32(4), EGSR 2013.  Falls
  back to area sampling when the subtended solid angle is below
  RECT_MIN_SOLID_ANGLE (1e-6 sr, where the spherical excess loses relative
  precision) or x lies within 1e-7 edge lengths of the rectangle's plane.
- solid angle, triangle (every triangle of a mesh emitter): spherical
  triangle sampling, Arvo, "Stratified Sampling of Spherical Triangles",
  SIGGRAPH 1995.  The solid angle comes from van Oosterom & Strackee (IEEE
  Trans. Biomed. Eng. BME-30(2), 1983).  Falls back to area sampling when it
  is below TRI_MIN_SOLID_ANGLE (1e-6 sr) or x lies within TRI_MIN_HEIGHT
  (1e-7) longest-edge lengths of the triangle's plane (grazing).
- solid angle, disk: no closed-form uniform solid-angle map of the elliptic
  cone a disk subtends is used; disks are sampled by area in both modes (the
  documented fallback; the battery tests it in both modes).

``uses_solid_angle`` reports the decision for a given x, so tests can check
both sides of every threshold.
"""
import math

from .._jit import inline
from ..geometry.intersect import DISK, RECTANGLE, SPHERE, TRIANGLE
from .warp import (PI, pdf_uniform_cone, sample_concentric_disk,
                   sample_uniform_cone, sample_uniform_sphere, sample_uniform_triangle, local_to_global)

MODE_AREA = 0
MODE_SOLID_ANGLE = 1

SPHERE_INSIDE_MARGIN = 1e-6
RECT_MIN_SOLID_ANGLE = 1e-6
RECT_MIN_HEIGHT = 1e-7
TRI_MIN_SOLID_ANGLE = 1e-6
TRI_MIN_HEIGHT = 1e-7


# --- area sampling -----------------------------------------------------------

@inline
def sample_area(kind, g, u1, u2):
    """Uniform point on the primitive (area measure, pdf 1/area).  Pdf: pdf_area.

    Returns yx, yy, yz, nx, ny, nz (front normal).
    """
    if kind == SPHERE:
        lx, ly, lz = sample_uniform_sphere(u1, u2)
        r = g[3]
        return g[0] + r * lx, g[1] + r * ly, g[2] + r * lz, lx, ly, lz
    if kind == DISK:
        dx, dy = sample_concentric_disk(u1, u2)
        r = g[6]
        nx, ny, nz = g[3], g[4], g[5]
        px, py, pz = local_to_global(dx * r, dy * r, 0.0, nx, ny, nz)
        return g[0] + px, g[1] + py, g[2] + pz, nx, ny, nz
    if kind == TRIANGLE:
        b1, b2 = sample_uniform_triangle(u1, u2)
    else:
        b1, b2 = u1, u2
    e1x, e1y, e1z = g[3], g[4], g[5]
    e2x, e2y, e2z = g[6], g[7], g[8]
    nx = e1y * e2z - e1z * e2y
    ny = e1z * e2x - e1x * e2z
    nz = e1x * e2y - e1y * e2x
    inv = 1.0 / math.sqrt(nx * nx + ny * ny + nz * nz)
    return (g[0] + b1 * e1x + b2 * e2x, g[1] + b1 * e1y + b2 * e2y, g[2] + b1 * e1z + b2 * e2z,
            nx * inv, ny * inv, nz * inv)


@inline
def pdf_area(area):
    """Area pdf of sample_area: 1/area (m^-2)."""
    return 1.0 / area


@inline
def area_to_solid_angle(pdf_a, xx, xy, xz, yx, yy, yz, nx, ny, nz):
    """Convert an area pdf at y (normal n) to solid angle seen from x."""
    dx = yx - xx
    dy = yy - xy
    dz = yz - xz
    d2 = dx * dx + dy * dy + dz * dz
    c = abs(dx * nx + dy * ny + dz * nz) / math.sqrt(d2)
    if c <= 0.0:
        return math.inf
    return pdf_a * d2 / c


# --- sphere: uniform cone over the visible cap -------------------------------

@inline
def _sphere_cone(g, xx, xy, xz):
    """(use_cone, d, 1 - cos theta_max) for the sphere g seen from x."""
    cx = g[0] - xx
    cy = g[1] - xy
    cz = g[2] - xz
    d2 = cx * cx + cy * cy + cz * cz
    r2 = g[3] * g[3]
    if d2 <= r2 * (1.0 + SPHERE_INSIDE_MARGIN):
        return False, 0.0, 0.0
    s2 = r2 / d2                       # sin^2 theta_max
    omc = s2 / (1.0 + math.sqrt(1.0 - s2))   # 1 - cos theta_max, no cancellation
    return True, math.sqrt(d2), omc


@inline
def sample_sphere_cone(g, xx, xy, xz, d, omc, u1, u2):
    """Point on the visible cap, direction uniform in the cone (solid angle).

    Pdf: pdf_uniform_cone(omc).  Returns y, normal.
    """
    ax = (g[0] - xx) / d
    ay = (g[1] - xy) / d
    az = (g[2] - xz) / d
    lx, ly, lz = sample_uniform_cone(u1, u2, omc)
    wx, wy, wz = local_to_global(lx, ly, lz, ax, ay, az)
    # distance along w to the near intersection: d cos - sqrt(r^2 - d^2 sin^2)
    r = g[3]
    sin2 = lx * lx + ly * ly
    disc = r * r - d * d * sin2
    t = d * lz - math.sqrt(max(0.0, disc))
    yx = xx + t * wx
    yy = xy + t * wy
    yz = xz + t * wz
    nx = (yx - g[0]) / r
    ny = (yy - g[1]) / r
    nz = (yz - g[2]) / r
    inv = 1.0 / math.sqrt(nx * nx + ny * ny + nz * nz)
    return yx, yy, yz, nx * inv, ny * inv, nz * inv


# --- rectangle: spherical rectangle sampling ---------------------------------

@inline
def _norm3(x, y, z):
    inv = 1.0 / math.sqrt(x * x + y * y + z * z)
    return x * inv, y * inv, z * inv


@inline
def _rect_setup(g, xx, xy, xz):
    """Local frame and solid angle of the rectangle g seen from x.

    Returns ok, S, x0, y0, x1, y1, z0, b0, b1, k, frame (ex, ey, ez) where
    ok is False when the method must fall back to area sampling.
    """
    e1x, e1y, e1z = g[3], g[4], g[5]
    e2x, e2y, e2z = g[6], g[7], g[8]
    l1 = math.sqrt(e1x * e1x + e1y * e1y + e1z * e1z)
    l2 = math.sqrt(e2x * e2x + e2y * e2y + e2z * e2z)
    exx, exy, exz = e1x / l1, e1y / l1, e1z / l1
    eyx, eyy, eyz = e2x / l2, e2y / l2, e2z / l2
    ezx = exy * eyz - exz * eyy
    ezy = exz * eyx - exx * eyz
    ezz = exx * eyy - exy * eyx
    dx = g[0] - xx
    dy = g[1] - xy
    dz = g[2] - xz
    x0 = dx * exx + dy * exy + dz * exz
    y0 = dx * eyx + dy * eyy + dz * eyz
    z0 = dx * ezx + dy * ezy + dz * ezz
    if z0 > 0.0:
        z0 = -z0
        ezx = -ezx
        ezy = -ezy
        ezz = -ezz
    x1 = x0 + l1
    y1 = y0 + l2
    if -z0 < RECT_MIN_HEIGHT * max(l1, l2):
        return (False, 0.0, x0, y0, x1, y1, z0, 0.0, 0.0, 0.0,
                exx, exy, exz, eyx, eyy, eyz, ezx, ezy, ezz)
    # normals of the four planes through x and consecutive edges
    n0x, n0y, n0z = _norm3(0.0, z0, -y0)          # cross(v00, v10) / |.|
    n1x, n1y, n1z = _norm3(-z0, 0.0, x1)          # cross(v10, v11)
    n2x, n2y, n2z = _norm3(0.0, -z0, y1)          # cross(v11, v01)
    n3x, n3y, n3z = _norm3(z0, 0.0, -x0)          # cross(v01, v00)
    g0 = math.acos(min(1.0, max(-1.0, -(n0x * n1x + n0y * n1y + n0z * n1z))))
    g1 = math.acos(min(1.0, max(-1.0, -(n1x * n2x + n1y * n2y + n1z * n2z))))
    g2 = math.acos(min(1.0, max(-1.0, -(n2x * n3x + n2y * n3y + n2z * n3z))))
    g3 = math.acos(min(1.0, max(-1.0, -(n3x * n0x + n3y * n0y + n3z * n0z))))
    b0 = n0z
    b1 = n2z
    k = 2.0 * PI - g2 - g3
    S = g0 + g1 - k
    ok = S >= RECT_MIN_SOLID_ANGLE
    return (ok, S, x0, y0, x1, y1, z0, b0, b1, k,
            exx, exy, exz, eyx, eyy, eyz, ezx, ezy, ezz)


@inline
def sample_rect_solid_angle(g, xx, xy, xz, u1, u2):
    """Uniform in the solid angle of the rectangle (pdf 1/S, solid angle).

    Pdf: pdf_emitter with MODE_SOLID_ANGLE.  Returns ok, y, normal, S.
    """
    (ok, S, x0, y0, x1, y1, z0, b0, b1, k,
     exx, exy, exz, eyx, eyy, eyz, ezx, ezy, ezz) = _rect_setup(g, xx, xy, xz)
    if not ok:
        return False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
    au = u1 * S + k
    fu = (math.cos(au) * b0 - b1) / math.sin(au)
    cu = 1.0 / math.sqrt(fu * fu + b0 * b0)
    if fu <= 0.0:
        cu = -cu
    cu = min(1.0, max(-1.0, cu))
    xu = -(cu * z0) / math.sqrt(max(1e-300, 1.0 - cu * cu))
    xu = min(x1, max(x0, xu))
    dd = math.sqrt(xu * xu + z0 * z0)
    h0 = y0 / math.sqrt(dd * dd + y0 * y0)
    h1 = y1 / math.sqrt(dd * dd + y1 * y1)
    hv = h0 + u2 * (h1 - h0)
    hv2 = hv * hv
    if hv2 < 1.0 - 1e-14:
        yv = (hv * dd) / math.sqrt(1.0 - hv2)
    else:
        yv = y1
    yv = min(y1, max(y0, yv))
    px = xx + xu * exx + yv * eyx + z0 * ezx
    py = xy + xu * exy + yv * eyy + z0 * ezy
    pz = xz + xu * exz + yv * eyz + z0 * ezz
    e1x, e1y, e1z = g[3], g[4], g[5]
    e2x, e2y, e2z = g[6], g[7], g[8]
    nx, ny, nz = _norm3(e1y * e2z - e1z * e2y, e1z * e2x - e1x * e2z, e1x * e2y - e1y * e2x)
    return True, px, py, pz, nx, ny, nz, S


# --- triangle: spherical triangle sampling ------------------------------------

@inline
def _tri_setup(g, xx, xy, xz):
    """Unit vertex directions and solid angle of triangle g seen from x.

    Returns ok, omega, a, b, c (unit vectors to the vertices).  ok is False
    when the method must fall back to area sampling.
    """
    ax = g[0] - xx
    ay = g[1] - xy
    az = g[2] - xz
    e1x, e1y, e1z = g[3], g[4], g[5]
    e2x, e2y, e2z = g[6], g[7], g[8]
    nx = e1y * e2z - e1z * e2y
    ny = e1z * e2x - e1x * e2z
    nz = e1x * e2y - e1y * e2x
    nl = math.sqrt(nx * nx + ny * ny + nz * nz)
    l1 = e1x * e1x + e1y * e1y + e1z * e1z
    l2 = e2x * e2x + e2y * e2y + e2z * e2z
    e3x = e2x - e1x
    e3y = e2y - e1y
    e3z = e2z - e1z
    l3 = e3x * e3x + e3y * e3y + e3z * e3z
    lmax = math.sqrt(max(l1, l2, l3))
    h = abs(ax * nx + ay * ny + az * nz) / nl
    if not (h >= TRI_MIN_HEIGHT * lmax) or not (nl > 0.0):
        return (False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
    ux, uy, uz = _norm3(ax, ay, az)
    vx, vy, vz = _norm3(ax + e1x, ay + e1y, az + e1z)
    wx, wy, wz = _norm3(ax + e2x, ay + e2y, az + e2z)
    # van Oosterom & Strackee 1983 (unit vectors): tan(omega/2) = |a.(b x c)| / (1 + a.b + a.c + b.c)
    num = abs(ux * (vy * wz - vz * wy) + uy * (vz * wx - vx * wz) + uz * (vx * wy - vy * wx))
    den = 1.0 + (ux * vx + uy * vy + uz * vz) + (ux * wx + uy * wy + uz * wz) + (vx * wx + vy * wy + vz * wz)
    omega = 2.0 * math.atan2(num, den)
    ok = omega >= TRI_MIN_SOLID_ANGLE
    return (ok, omega, ux, uy, uz, vx, vy, vz, wx, wy, wz)


@inline
def sample_spherical_triangle(ax, ay, az, bx, by, bz, cx, cy, cz, omega, u1, u2):
    """Arvo 1995: direction uniform in the spherical triangle abc (unit
    vertices) of area omega.  Pdf: 1/omega (solid angle).  Returns w (unit)."""
    # interior angle alpha at a: between the planes (a, b) and (a, c)
    pbx, pby, pbz = _norm3(ay * bz - az * by, az * bx - ax * bz, ax * by - ay * bx)
    pcx, pcy, pcz = _norm3(ay * cz - az * cy, az * cx - ax * cz, ax * cy - ay * cx)
    cos_alpha = min(1.0, max(-1.0, pbx * pcx + pby * pcy + pbz * pcz))
    sin_alpha = math.sqrt(max(0.0, 1.0 - cos_alpha * cos_alpha))
    alpha = math.acos(cos_alpha)
    cos_c = ax * bx + ay * by + az * bz          # arc length of side ab
    area_hat = u1 * omega
    s = math.sin(area_hat - alpha)
    t = math.cos(area_hat - alpha)
    uu = t - cos_alpha
    vv = s + sin_alpha * cos_c
    den = (vv * s + uu * t) * sin_alpha
    if den != 0.0:
        q = ((vv * t - uu * s) * cos_alpha - vv) / den
    else:
        q = 1.0
    q = min(1.0, max(-1.0, q))
    # new vertex c_hat on arc ac
    ca = cx * ax + cy * ay + cz * az
    ex, ey, ez = cx - ca * ax, cy - ca * ay, cz - ca * az
    el = math.sqrt(ex * ex + ey * ey + ez * ez)
    if el > 0.0:
        ex /= el
        ey /= el
        ez /= el
    sq = math.sqrt(max(0.0, 1.0 - q * q))
    chx = q * ax + sq * ex
    chy = q * ay + sq * ey
    chz = q * az + sq * ez
    # point on arc b c_hat with cos(angle to b) uniform
    cb = chx * bx + chy * by + chz * bz
    z = 1.0 - u2 * (1.0 - cb)
    fx, fy, fz = chx - cb * bx, chy - cb * by, chz - cb * bz
    fl = math.sqrt(fx * fx + fy * fy + fz * fz)
    if fl > 0.0:
        fx /= fl
        fy /= fl
        fz /= fl
    sz = math.sqrt(max(0.0, 1.0 - z * z))
    return _norm3(z * bx + sz * fx, z * by + sz * fy, z * bz + sz * fz)


@inline
def sample_tri_solid_angle(g, xx, xy, xz, u1, u2):
    """Uniform in the solid angle of triangle g (pdf 1/omega, solid angle).

    Pdf: pdf_emitter with MODE_SOLID_ANGLE.  Returns ok, y, normal, omega.
    """
    ok, omega, ax, ay, az, bx, by, bz, cx, cy, cz = _tri_setup(g, xx, xy, xz)
    if not ok:
        return False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
    wx, wy, wz = sample_spherical_triangle(ax, ay, az, bx, by, bz, cx, cy, cz, omega, u1, u2)
    e1x, e1y, e1z = g[3], g[4], g[5]
    e2x, e2y, e2z = g[6], g[7], g[8]
    nx, ny, nz = _norm3(e1y * e2z - e1z * e2y, e1z * e2x - e1x * e2z, e1x * e2y - e1y * e2x)
    dn = wx * nx + wy * ny + wz * nz
    hn = (g[0] - xx) * nx + (g[1] - xy) * ny + (g[2] - xz) * nz
    if dn == 0.0:
        return False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
    t = hn / dn
    return True, xx + t * wx, xy + t * wy, xz + t * wz, nx, ny, nz, omega


@inline
def uses_solid_angle(kind, g, mode, xx, xy, xz):
    """True when sample_emitter / pdf_emitter use the solid-angle method for
    primitive g seen from x (False: area sampling, by mode or by fallback)."""
    if mode != MODE_SOLID_ANGLE:
        return False
    if kind == SPHERE:
        return _sphere_cone(g, xx, xy, xz)[0]
    if kind == RECTANGLE:
        return _rect_setup(g, xx, xy, xz)[0]
    if kind == TRIANGLE:
        return _tri_setup(g, xx, xy, xz)[0]
    return False


# --- public interface -------------------------------------------------------

@inline
def sample_emitter(kind, g, area, mode, xx, xy, xz, u1, u2):
    """Sample a point y on primitive g for shading point x.

    Returns yx, yy, yz, nx, ny, nz, pdf (solid angle at x; 0 = failed).
    Pdf: pdf_emitter.
    """
    if mode == MODE_SOLID_ANGLE:
        if kind == SPHERE:
            use, d, omc = _sphere_cone(g, xx, xy, xz)
            if use:
                yx, yy, yz, nx, ny, nz = sample_sphere_cone(g, xx, xy, xz, d, omc, u1, u2)
                return yx, yy, yz, nx, ny, nz, pdf_uniform_cone(omc)
        elif kind == RECTANGLE:
            ok, yx, yy, yz, nx, ny, nz, S = sample_rect_solid_angle(g, xx, xy, xz, u1, u2)
            if ok:
                return yx, yy, yz, nx, ny, nz, 1.0 / S
        elif kind == TRIANGLE:
            ok, yx, yy, yz, nx, ny, nz, S = sample_tri_solid_angle(g, xx, xy, xz, u1, u2)
            if ok:
                return yx, yy, yz, nx, ny, nz, 1.0 / S
    yx, yy, yz, nx, ny, nz = sample_area(kind, g, u1, u2)
    pdf = area_to_solid_angle(pdf_area(area), xx, xy, xz, yx, yy, yz, nx, ny, nz)
    return yx, yy, yz, nx, ny, nz, pdf


@inline
def pdf_emitter(kind, g, area, mode, xx, xy, xz, yx, yy, yz, nx, ny, nz):
    """Solid-angle pdf at x of sample_emitter producing the point y (normal n)."""
    if mode == MODE_SOLID_ANGLE:
        if kind == SPHERE:
            use, d, omc = _sphere_cone(g, xx, xy, xz)
            if use:
                return pdf_uniform_cone(omc)
        elif kind == RECTANGLE:
            res = _rect_setup(g, xx, xy, xz)
            if res[0]:
                return 1.0 / res[1]
        elif kind == TRIANGLE:
            res = _tri_setup(g, xx, xy, xz)
            if res[0]:
                return 1.0 / res[1]
    return area_to_solid_angle(pdf_area(area), xx, xy, xz, yx, yy, yz, nx, ny, nz)


# --- distant discs (directional lights of finite angular size) ------------------

@inline
def sample_distant_cone(ax, ay, az, one_minus_cos_max, u1, u2):
    """Direction uniform in solid angle inside the cone of half-angle theta_max about the
    unit axis a (toward the source).  Returns wx, wy, wz and the solid-angle pdf
    1 / (2 pi (1 - cos theta_max)).  Pdf: pdf_distant_cone."""
    lx, ly, lz = sample_uniform_cone(u1, u2, one_minus_cos_max)
    wx, wy, wz = local_to_global(lx, ly, lz, ax, ay, az)
    return wx, wy, wz, pdf_uniform_cone(one_minus_cos_max)


@inline
def pdf_distant_cone(ax, ay, az, one_minus_cos_max, wx, wy, wz):
    """Solid-angle pdf of sample_distant_cone for the unit direction w: 1 / (2 pi (1 -
    cos theta_max)) where 1 - a.w <= 1 - cos theta_max, else 0."""
    if 1.0 - (ax * wx + ay * wy + az * wz) <= one_minus_cos_max:
        return pdf_uniform_cone(one_minus_cos_max)
    return 0.0
