"""BSDF evaluation, sampling and pdf, dispatched on the material type code.

Conventions: ``wo`` (toward the viewer) and ``wi`` (toward the light) are unit
world vectors; ``n`` is the unit geometric normal turned to the side of
``wo``.  ``eval`` returns the BSDF value f (sr^-1) per RGB channel *without*
the cosine; ``sample`` returns a direction, f, and the solid-angle pdf, and a
flag for delta lobes.  Every ``sample_*`` has its ``pdf_*`` beside it.
"""

from .._jit import inline
from ..sampling.warp import INV_PI, pdf_cosine_hemisphere, sample_cosine_hemisphere, to_world

MAT_BLACK = 0
MAT_DIFFUSE = 1


# --- diffuse (Lambertian, albedo / pi) --------------------------------------

@inline
def eval_diffuse(p, nx, ny, nz, wix, wiy, wiz):
    """Lambertian BRDF albedo/pi for wi above the surface (reflection only)."""
    if nx * wix + ny * wiy + nz * wiz <= 0.0:
        return 0.0, 0.0, 0.0
    return p[0] * INV_PI, p[1] * INV_PI, p[2] * INV_PI


@inline
def sample_diffuse(p, nx, ny, nz, u1, u2):
    """Cosine-weighted reflection direction; pdf: pdf_diffuse."""
    lx, ly, lz = sample_cosine_hemisphere(u1, u2)
    wx, wy, wz = to_world(lx, ly, lz, nx, ny, nz)
    return wx, wy, wz, lz * INV_PI


@inline
def pdf_diffuse(nx, ny, nz, wix, wiy, wiz):
    """Solid-angle pdf of sample_diffuse."""
    return pdf_cosine_hemisphere(nx * wix + ny * wiy + nz * wiz)


# --- dispatch ----------------------------------------------------------------

@inline
def bsdf_eval(kind, p, nx, ny, nz, wox, woy, woz, wix, wiy, wiz):
    """f(wo, wi) per channel (sr^-1), cosine not included."""
    if kind == MAT_DIFFUSE:
        return eval_diffuse(p, nx, ny, nz, wix, wiy, wiz)
    return 0.0, 0.0, 0.0


@inline
def bsdf_pdf(kind, p, nx, ny, nz, wox, woy, woz, wix, wiy, wiz):
    """Solid-angle pdf with which bsdf_sample picks wi given wo."""
    if kind == MAT_DIFFUSE:
        return pdf_diffuse(nx, ny, nz, wix, wiy, wiz)
    return 0.0


@inline
def bsdf_sample(kind, p, nx, ny, nz, wox, woy, woz, u1, u2):
    """Sample wi.  Returns wix, wiy, wiz, f_r, f_g, f_b, pdf, is_delta.

    pdf == 0 means no direction (the path ends).  For a delta lobe ``f`` is
    the lobe's weight divided into ``pdf`` consistently (f/pdf is the
    throughput factor including the cosine), and MIS does not apply.
    """
    if kind == MAT_DIFFUSE:
        wx, wy, wz, pdf = sample_diffuse(p, nx, ny, nz, u1, u2)
        if pdf <= 0.0:
            return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False
        return wx, wy, wz, p[0] * INV_PI, p[1] * INV_PI, p[2] * INV_PI, pdf, False
    return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False


@inline
def is_black(kind):
    return kind == MAT_BLACK


