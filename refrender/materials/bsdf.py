"""BSDF evaluation, sampling and pdf, dispatched on the material type code.

Conventions: ``wo`` (toward the viewer) and ``wi`` (toward the light) are unit
world vectors; ``n`` is the unit geometric normal turned to the side of
``wo``, and ``front`` says whether that side is the front side of the surface
(the outside of a dielectric).  ``eval`` returns the BSDF value f (sr^-1) per
RGB channel *without* the cosine; ``sample`` returns a direction, f, and the
solid-angle pdf, and a flag for delta lobes.  Every ``sample_*`` has its
``pdf_*`` beside it.

Transport convention: camera paths carry **radiance**.  Across a refracting
interface radiance scales with the square of the index ratio, so the BTDF
from ``wo`` (index n_o) to ``wi`` (index n_i) carries the factor
(n_o / n_i)^2 = 1 / eta^2 with eta = n_i / n_o.  This makes the generalised
reciprocity f(wo, wi) / n_o^2 = f(wi, wo) / n_i^2 hold (n_o, n_i the indices on
the sides of wo and wi).

Material parameter rows (``p``, MAT_PARAMS floats; unused entries are 0;
columns 14 and 15 hold texture references, see :mod:`.textures`):

=====================  ==========================================================
type                   layout
=====================  ==========================================================
lambertian (1)         0-2 albedo
mirror (2)             0-2 reflectance
smooth glass (3)       0 relative index ior / exterior_ior (real); 10-12 absorption
                       coefficient of the inside (1 / scene unit, Beer-Lambert; 0 = clear)
rough glass (4)        0 relative index; 8 alpha along tangent; 9 along bitangent;
                       10-12 absorption as smooth glass
smooth metal (5)       0-2 n; 3-5 k (both / exterior_ior); 6 = 1: constant f0 in 0-2
rough metal (6)        as smooth metal; 8 alpha along tangent; 9 along bitangent
metallic_roughness (7) 0-2 base colour; 3 metallic; 4 roughness (alpha = roughness^2)
=====================  ==========================================================
"""
import math

from .._jit import inline
from ..sampling.warp import INV_PI, onb, sample_cosine_hemisphere
from .fresnel import fresnel_conductor, fresnel_dielectric, schlick
from .microfacet import ALPHA_MIN, ggx_d, ggx_g1, ggx_g2, pdf_vndf, sample_vndf

MAT_BLACK = 0
MAT_LAMBERTIAN = 1
MAT_MIRROR = 2
MAT_SMOOTH_GLASS = 3
MAT_ROUGH_GLASS = 4
MAT_SMOOTH_METAL = 5
MAT_ROUGH_METAL = 6
MAT_METALLIC_ROUGHNESS = 7

#: dielectric F0 of the glTF 2.0 metallic-roughness model (ior 1.5)
GLTF_F0 = 0.04
#: probability of sampling the specular lobe of a non-metal metallic-roughness material
GLTF_SPECULAR_PROB = 0.25

FAIL = (0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False)


@inline
def _local(wx, wy, wz, tx, ty, tz, bx, by, bz, nx, ny, nz):
    return (wx * tx + wy * ty + wz * tz, wx * bx + wy * by + wz * bz,
            wx * nx + wy * ny + wz * nz)


@inline
def _world(lx, ly, lz, tx, ty, tz, bx, by, bz, nx, ny, nz):
    return (lx * tx + ly * bx + lz * nx, lx * ty + ly * by + lz * ny,
            lx * tz + ly * bz + lz * nz)


@inline
def _normalize(x, y, z):
    inv = 1.0 / math.sqrt(x * x + y * y + z * z)
    return x * inv, y * inv, z * inv


@inline
def _alphas(p):
    return max(p[8], ALPHA_MIN), max(p[9], ALPHA_MIN)


@inline
def _eta(p, front):
    """Index of the far side over the index of the wo side."""
    return p[0] if front else 1.0 / p[0]


@inline
def _conductor_f(p, c):
    if p[6] > 0.5:
        return p[0], p[1], p[2]
    return (fresnel_conductor(c, p[0], p[3]), fresnel_conductor(c, p[1], p[4]),
            fresnel_conductor(c, p[2], p[5]))


# --- diffuse (Lambertian, albedo / pi) --------------------------------------

@inline
def eval_diffuse(p, iz):
    if iz <= 0.0:
        return 0.0, 0.0, 0.0
    return p[0] * INV_PI, p[1] * INV_PI, p[2] * INV_PI


@inline
def pdf_diffuse(iz):
    return iz * INV_PI if iz > 0.0 else 0.0


# --- rough conductor (GGX, height-correlated Smith, VNDF sampling) -----------

@inline
def eval_rough_conductor(p, ox, oy, oz, ix, iy, iz):
    """F(o.h) D(h) G2(o, i) / (4 cos_o cos_i) (Walter et al. 2007, eq. 20)."""
    if oz <= 0.0 or iz <= 0.0:
        return 0.0, 0.0, 0.0
    ax, ay = _alphas(p)
    hx, hy, hz = _normalize(ox + ix, oy + iy, oz + iz)
    s = ggx_d(hx, hy, hz, ax, ay) * ggx_g2(ox, oy, oz, ix, iy, iz, ax, ay) / (4.0 * oz * iz)
    fr, fg, fb = _conductor_f(p, ox * hx + oy * hy + oz * hz)
    return fr * s, fg * s, fb * s


@inline
def pdf_microfacet_reflection(ax, ay, ox, oy, oz, ix, iy, iz):
    """Solid-angle pdf of i = reflect(o, m), m ~ VNDF(o): D_o(h) / (4 o.h)."""
    if oz <= 0.0 or iz <= 0.0:
        return 0.0
    hx, hy, hz = _normalize(ox + ix, oy + iy, oz + iz)
    return ggx_g1(ox, oy, oz, ax, ay) * ggx_d(hx, hy, hz, ax, ay) / (4.0 * oz)


@inline
def sample_microfacet_reflection(ax, ay, ox, oy, oz, u1, u2):
    """i = reflect(o, m) with m from the visible normals; pdf: pdf_microfacet_reflection.
    Returns ix, iy, iz, ok (False when i falls below the surface)."""
    mx, my, mz = sample_vndf(ox, oy, oz, ax, ay, u1, u2)
    om = ox * mx + oy * my + oz * mz
    ix = 2.0 * om * mx - ox
    iy = 2.0 * om * my - oy
    iz = 2.0 * om * mz - oz
    return ix, iy, iz, iz > 0.0


# --- rough dielectric (Walter et al. 2007 with GGX) ---------------------------

@inline
def _dielectric_half(ox, oy, oz, ix, iy, iz, eta):
    """Half vector (toward +z) of a reflection (iz > 0) or refraction (iz < 0),
    and whether the pair is geometrically valid for it."""
    if iz > 0.0:
        hx, hy, hz = _normalize(ox + ix, oy + iy, oz + iz)
        return hx, hy, hz, True
    hx = ox + eta * ix
    hy = oy + eta * iy
    hz = oz + eta * iz
    l2 = hx * hx + hy * hy + hz * hz
    if not (l2 > 0.0):
        return 0.0, 0.0, 1.0, False
    hx, hy, hz = _normalize(hx, hy, hz)
    if hz < 0.0:
        hx, hy, hz = -hx, -hy, -hz
    ok = (ox * hx + oy * hy + oz * hz) > 0.0 and (ix * hx + iy * hy + iz * hz) < 0.0
    return hx, hy, hz, ok


@inline
def eval_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz):
    """Walter et al. 2007 eqs. 20-21 (radiance form: the BTDF carries 1/eta^2)."""
    if oz <= 0.0 or iz == 0.0:
        return 0.0
    ax, ay = _alphas(p)
    eta = _eta(p, front)
    hx, hy, hz, ok = _dielectric_half(ox, oy, oz, ix, iy, iz, eta)
    if not ok:
        return 0.0
    oh = ox * hx + oy * hy + oz * hz
    ih = ix * hx + iy * hy + iz * hz
    F, _ = fresnel_dielectric(oh, eta)
    d = ggx_d(hx, hy, hz, ax, ay)
    g = ggx_g2(ox, oy, oz, ix, iy, iz, ax, ay)
    if iz > 0.0:
        return F * d * g / (4.0 * oz * iz)
    den = oh + eta * ih
    return (1.0 - F) * d * g * abs(ih) * oh / (oz * abs(iz) * den * den)


@inline
def pdf_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz):
    """Solid-angle pdf of sample_rough_dielectric (its valid samples)."""
    if oz <= 0.0 or iz == 0.0:
        return 0.0
    ax, ay = _alphas(p)
    eta = _eta(p, front)
    hx, hy, hz, ok = _dielectric_half(ox, oy, oz, ix, iy, iz, eta)
    if not ok:
        return 0.0
    oh = ox * hx + oy * hy + oz * hz
    ih = ix * hx + iy * hy + iz * hz
    F, _ = fresnel_dielectric(oh, eta)
    dv = pdf_vndf(ox, oy, oz, hx, hy, hz, ax, ay)
    if iz > 0.0:
        return dv * F / (4.0 * oh)
    den = oh + eta * ih
    return dv * (1.0 - F) * eta * eta * abs(ih) / (den * den)


@inline
def sample_rough_dielectric(p, front, ox, oy, oz, u1, u2, u3):
    """m from the visible normals; reflect with probability F(o.m), else refract.
    Returns ix, iy, iz, ok; pdf: pdf_rough_dielectric."""
    ax, ay = _alphas(p)
    eta = _eta(p, front)
    mx, my, mz = sample_vndf(ox, oy, oz, ax, ay, u1, u2)
    om = ox * mx + oy * my + oz * mz
    F, ct = fresnel_dielectric(om, eta)
    if u3 < F:
        ix = 2.0 * om * mx - ox
        iy = 2.0 * om * my - oy
        iz = 2.0 * om * mz - oz
        return ix, iy, iz, iz > 0.0
    c = om / eta - ct
    ix = -ox / eta + c * mx
    iy = -oy / eta + c * my
    iz = -oz / eta + c * mz
    return ix, iy, iz, iz < 0.0


# --- glTF 2.0 metallic-roughness (Khronos glTF 2.0 specification, Appendix B) --

@inline
def _gltf_vis(c, a2):
    """One factor of the spec's V term: 1 / (|N.w| + sqrt(a^2 + (1 - a^2)(N.w)^2))."""
    return 1.0 / (c + math.sqrt(a2 + (1.0 - a2) * c * c))


@inline
def _gltf_alpha(p):
    return max(p[4] * p[4], ALPHA_MIN)


@inline
def eval_metallic_roughness(p, ox, oy, oz, ix, iy, iz):
    """mix(fresnel_mix(0.04, diffuse, specular), conductor_fresnel(base, specular), metallic)."""
    if oz <= 0.0 or iz <= 0.0:
        return 0.0, 0.0, 0.0
    a = _gltf_alpha(p)
    a2 = a * a
    hx, hy, hz = _normalize(ox + ix, oy + iy, oz + iz)
    vh = ox * hx + oy * hy + oz * hz
    spec = ggx_d(hx, hy, hz, a, a) * _gltf_vis(oz, a2) * _gltf_vis(iz, a2)
    met = p[3]
    fd = schlick(vh, GLTF_F0)
    kd = (1.0 - met) * (1.0 - fd) * INV_PI
    ks = (1.0 - met) * fd * spec
    return (kd * p[0] + ks + met * schlick(vh, p[0]) * spec,
            kd * p[1] + ks + met * schlick(vh, p[1]) * spec,
            kd * p[2] + ks + met * schlick(vh, p[2]) * spec)


@inline
def _gltf_spec_prob(p):
    return p[3] + (1.0 - p[3]) * GLTF_SPECULAR_PROB


@inline
def pdf_metallic_roughness(p, ox, oy, oz, ix, iy, iz):
    """Mixture of VNDF reflection (probability q) and cosine sampling (1 - q)."""
    if oz <= 0.0 or iz <= 0.0:
        return 0.0
    a = _gltf_alpha(p)
    q = _gltf_spec_prob(p)
    return q * pdf_microfacet_reflection(a, a, ox, oy, oz, ix, iy, iz) + (1.0 - q) * iz * INV_PI


@inline
def sample_metallic_roughness(p, ox, oy, oz, u1, u2, u3):
    """Lobe chosen by u3; pdf: pdf_metallic_roughness."""
    if u3 < _gltf_spec_prob(p):
        a = _gltf_alpha(p)
        return sample_microfacet_reflection(a, a, ox, oy, oz, u1, u2)
    lx, ly, lz = sample_cosine_hemisphere(u1, u2)
    return lx, ly, lz, lz > 0.0


# --- dispatch ----------------------------------------------------------------

@inline
def bsdf_is_delta(kind):
    """Whether every lobe of the material is a delta (no light sampling there)."""
    return kind == MAT_MIRROR or kind == MAT_SMOOTH_GLASS or kind == MAT_SMOOTH_METAL


@inline
def bsdf_transmits(kind):
    """Whether a non-delta lobe reaches directions below the surface."""
    return kind == MAT_ROUGH_GLASS


@inline
def bsdf_eval(kind, p, front, nx, ny, nz, wox, woy, woz, wix, wiy, wiz):
    """f(wo, wi) per channel (sr^-1), cosine not included; 0 for delta lobes."""
    tx, ty, tz, bx, by, bz = onb(nx, ny, nz)
    ix, iy, iz = _local(wix, wiy, wiz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    if kind == MAT_LAMBERTIAN:
        return eval_diffuse(p, iz)
    ox, oy, oz = _local(wox, woy, woz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    if kind == MAT_ROUGH_METAL:
        return eval_rough_conductor(p, ox, oy, oz, ix, iy, iz)
    if kind == MAT_ROUGH_GLASS:
        f = eval_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz)
        return f, f, f
    if kind == MAT_METALLIC_ROUGHNESS:
        return eval_metallic_roughness(p, ox, oy, oz, ix, iy, iz)
    return 0.0, 0.0, 0.0


@inline
def bsdf_pdf(kind, p, front, nx, ny, nz, wox, woy, woz, wix, wiy, wiz):
    """Solid-angle pdf with which bsdf_sample picks wi given wo (0 for delta lobes)."""
    tx, ty, tz, bx, by, bz = onb(nx, ny, nz)
    ix, iy, iz = _local(wix, wiy, wiz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    if kind == MAT_LAMBERTIAN:
        return pdf_diffuse(iz)
    ox, oy, oz = _local(wox, woy, woz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    if kind == MAT_ROUGH_METAL:
        ax, ay = _alphas(p)
        return pdf_microfacet_reflection(ax, ay, ox, oy, oz, ix, iy, iz)
    if kind == MAT_ROUGH_GLASS:
        return pdf_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz)
    if kind == MAT_METALLIC_ROUGHNESS:
        return pdf_metallic_roughness(p, ox, oy, oz, ix, iy, iz)
    return 0.0


@inline
def bsdf_sample(kind, p, front, nx, ny, nz, wox, woy, woz, u1, u2, u3):
    """Sample wi.  Returns wix, wiy, wiz, f_r, f_g, f_b, pdf, is_delta.

    pdf == 0 means no direction (the path ends).  For a delta lobe ``pdf`` is
    the probability of choosing the lobe and ``f`` its weight divided by
    |cos(wi)|, so that f |cos| / pdf is the throughput factor; MIS does not
    apply.  ``u3`` chooses between lobes.
    """
    tx, ty, tz, bx, by, bz = onb(nx, ny, nz)
    ox, oy, oz = _local(wox, woy, woz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    if kind == MAT_LAMBERTIAN:
        lx, ly, lz = sample_cosine_hemisphere(u1, u2)
        pdf = pdf_diffuse(lz)
        if not (pdf > 0.0):
            return FAIL
        wx, wy, wz = _world(lx, ly, lz, tx, ty, tz, bx, by, bz, nx, ny, nz)
        return wx, wy, wz, p[0] * INV_PI, p[1] * INV_PI, p[2] * INV_PI, pdf, False
    if oz <= 0.0:
        return FAIL
    if kind == MAT_MIRROR or kind == MAT_SMOOTH_METAL:
        wx, wy, wz = _world(-ox, -oy, oz, tx, ty, tz, bx, by, bz, nx, ny, nz)
        if kind == MAT_MIRROR:
            fr, fg, fb = p[0], p[1], p[2]
        else:
            fr, fg, fb = _conductor_f(p, oz)
        return wx, wy, wz, fr / oz, fg / oz, fb / oz, 1.0, True
    if kind == MAT_SMOOTH_GLASS:
        eta = _eta(p, front)
        F, ct = fresnel_dielectric(oz, eta)
        if u3 < F:
            wx, wy, wz = _world(-ox, -oy, oz, tx, ty, tz, bx, by, bz, nx, ny, nz)
            return wx, wy, wz, F / oz, F / oz, F / oz, F, True
        if not (ct > 0.0):
            return FAIL
        wx, wy, wz = _world(-ox / eta, -oy / eta, -ct, tx, ty, tz, bx, by, bz, nx, ny, nz)
        f = (1.0 - F) / (eta * eta * ct)
        return wx, wy, wz, f, f, f, 1.0 - F, True
    if kind == MAT_ROUGH_METAL:
        ax, ay = _alphas(p)
        ix, iy, iz, ok = sample_microfacet_reflection(ax, ay, ox, oy, oz, u1, u2)
        if not ok:
            return FAIL
        pdf = pdf_microfacet_reflection(ax, ay, ox, oy, oz, ix, iy, iz)
        fr, fg, fb = eval_rough_conductor(p, ox, oy, oz, ix, iy, iz)
    elif kind == MAT_ROUGH_GLASS:
        ix, iy, iz, ok = sample_rough_dielectric(p, front, ox, oy, oz, u1, u2, u3)
        if not ok:
            return FAIL
        pdf = pdf_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz)
        fr = eval_rough_dielectric(p, front, ox, oy, oz, ix, iy, iz)
        fg = fr
        fb = fr
    elif kind == MAT_METALLIC_ROUGHNESS:
        ix, iy, iz, ok = sample_metallic_roughness(p, ox, oy, oz, u1, u2, u3)
        if not ok:
            return FAIL
        pdf = pdf_metallic_roughness(p, ox, oy, oz, ix, iy, iz)
        fr, fg, fb = eval_metallic_roughness(p, ox, oy, oz, ix, iy, iz)
    else:
        return FAIL
    if not (pdf > 0.0):
        return FAIL
    wx, wy, wz = _world(ix, iy, iz, tx, ty, tz, bx, by, bz, nx, ny, nz)
    return wx, wy, wz, fr, fg, fb, pdf, False


#: first column of a dielectric's interior absorption coefficient (RGB)
ABSORPTION = 10


@inline
def absorbs(kind, p):
    """Whether a ray inside a body of this material is absorbed (Beer-Lambert)."""
    return ((kind == MAT_SMOOTH_GLASS or kind == MAT_ROUGH_GLASS)
            and (p[ABSORPTION] > 0.0 or p[ABSORPTION + 1] > 0.0 or p[ABSORPTION + 2] > 0.0))


@inline
def is_black(kind):
    return kind == MAT_BLACK
