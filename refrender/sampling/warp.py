"""Warps from the unit square to directions, disks and triangles.

Every sampler has its pdf function right below it.  Directions are in a local
frame whose +z axis is the normal (use :func:`onb` to go to world space).
Measures are stated on each function: "solid angle" (sr^-1) or "area" (m^-2).
"""
import math

from .._jit import inline

PI = math.pi
INV_PI = 1.0 / math.pi
INV_4PI = 1.0 / (4.0 * math.pi)


@inline
def onb(nx, ny, nz):
    """Orthonormal basis (t, b) completing the unit normal n.

    Duff et al., "Building an Orthonormal Basis, Revisited", JCGT 6(1), 2017.
    Returns tx, ty, tz, bx, by, bz.
    """
    sign = 1.0 if nz >= 0.0 else -1.0
    a = -1.0 / (sign + nz)
    b = nx * ny * a
    return (1.0 + sign * nx * nx * a, sign * b, -sign * nx,
            b, sign + ny * ny * a, -ny)


@inline
def local_to_global(lx, ly, lz, nx, ny, nz):
    """Local direction (lx, ly, lz) in the frame of normal n -> world."""
    tx, ty, tz, bx, by, bz = onb(nx, ny, nz)
    return (lx * tx + ly * bx + lz * nx,
            lx * ty + ly * by + lz * ny,
            lx * tz + ly * bz + lz * nz)


# --- cosine-weighted hemisphere --------------------------------------------

@inline
def sample_cosine_hemisphere(u1, u2):
    """Direction about +z with density cos(theta)/pi (solid angle).  Pdf: pdf_cosine_hemisphere."""
    r = math.sqrt(u1)
    phi = 2.0 * PI * u2
    z = math.sqrt(max(0.0, 1.0 - u1))
    return r * math.cos(phi), r * math.sin(phi), z


@inline
def pdf_cosine_hemisphere(cos_theta):
    """Solid-angle pdf of sample_cosine_hemisphere."""
    return cos_theta * INV_PI if cos_theta > 0.0 else 0.0


# --- uniform sphere ----------------------------------------------------------

@inline
def sample_uniform_sphere(u1, u2):
    """Uniform direction on the unit sphere (solid angle).  Pdf: pdf_uniform_sphere."""
    z = 1.0 - 2.0 * u1
    r = math.sqrt(max(0.0, 1.0 - z * z))
    phi = 2.0 * PI * u2
    return r * math.cos(phi), r * math.sin(phi), z


@inline
def pdf_uniform_sphere():
    """Solid-angle pdf of sample_uniform_sphere: 1/(4 pi)."""
    return INV_4PI


# --- uniform cone --------------------------------------------------------------

@inline
def sample_uniform_cone(u1, u2, one_minus_cos_max):
    """Uniform direction in the cone about +z with 1 - cos(theta_max) given.

    Works in terms of t = 1 - cos(theta) so that very narrow cones keep full
    precision: sin^2 = t (2 - t).  Pdf: pdf_uniform_cone.
    """
    t = u1 * one_minus_cos_max
    z = 1.0 - t
    s = math.sqrt(max(0.0, t * (2.0 - t)))
    phi = 2.0 * PI * u2
    return s * math.cos(phi), s * math.sin(phi), z


@inline
def pdf_uniform_cone(one_minus_cos_max):
    """Solid-angle pdf of sample_uniform_cone inside the cone: 1/(2 pi (1 - cos max))."""
    return 1.0 / (2.0 * PI * one_minus_cos_max)


# --- disk and triangle ------------------------------------------------------

@inline
def sample_concentric_disk(u1, u2):
    """Uniform point on the unit disk (Shirley & Chiu 1997 concentric map).

    Area pdf 1/pi on the unit disk: pdf_concentric_disk.
    """
    a = 2.0 * u1 - 1.0
    b = 2.0 * u2 - 1.0
    if a == 0.0 and b == 0.0:
        return 0.0, 0.0
    if abs(a) > abs(b):
        r = a
        phi = (PI / 4.0) * (b / a)
    else:
        r = b
        phi = (PI / 2.0) - (PI / 4.0) * (a / b)
    return r * math.cos(phi), r * math.sin(phi)


@inline
def pdf_concentric_disk():
    """Area pdf of sample_concentric_disk on the unit disk."""
    return INV_PI


@inline
def sample_uniform_triangle(u1, u2):
    """Uniform barycentrics (b1, b2) on a triangle (square-root warp).

    Area pdf 1/A for a triangle of area A: pdf_uniform_triangle.
    """
    s = math.sqrt(u1)
    return 1.0 - s, u2 * s


@inline
def pdf_uniform_triangle(area):
    """Area pdf of sample_uniform_triangle."""
    return 1.0 / area
