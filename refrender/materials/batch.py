"""Vectorised entry points to the BSDF kernels, for tests and tools.

They loop over arrays of directions and call exactly the functions the
integrator calls (``bsdf_eval``, ``bsdf_pdf``, ``bsdf_sample``).
"""
import numpy as np

from .._jit import kernel
from ..geometry.intersect import surface_uv
from .bsdf import bsdf_eval, bsdf_pdf, bsdf_sample
from .fresnel import fresnel_conductor, fresnel_dielectric
from .microfacet import ggx_d, ggx_g1, ggx_g2, pdf_vndf, sample_vndf
from .textures import texture_rgb, texture_scalar


@kernel
def eval_many(kind, p, front, n, wo, wi):
    """f (m, 3) and pdf (m,) for one wo (3,) and directions wi (m, 3)."""
    m = wi.shape[0]
    f = np.zeros((m, 3))
    pdf = np.zeros(m)
    for j in range(m):
        r, g, b = bsdf_eval(kind, p, front, n[0], n[1], n[2], wo[0], wo[1], wo[2],
                            wi[j, 0], wi[j, 1], wi[j, 2])
        f[j, 0] = r
        f[j, 1] = g
        f[j, 2] = b
        pdf[j] = bsdf_pdf(kind, p, front, n[0], n[1], n[2], wo[0], wo[1], wo[2],
                          wi[j, 0], wi[j, 1], wi[j, 2])
    return f, pdf


@kernel
def sample_many(kind, p, front, n, wo, u):
    """Samples for random numbers u (m, 3): wi (m, 3), f (m, 3), pdf (m,), delta (m,)."""
    m = u.shape[0]
    wi = np.zeros((m, 3))
    f = np.zeros((m, 3))
    pdf = np.zeros(m)
    delta = np.zeros(m, dtype=np.bool_)
    for j in range(m):
        x, y, z, r, g, b, pd, dl = bsdf_sample(kind, p, front, n[0], n[1], n[2], wo[0], wo[1],
                                               wo[2], u[j, 0], u[j, 1], u[j, 2])
        wi[j, 0] = x
        wi[j, 1] = y
        wi[j, 2] = z
        f[j, 0] = r
        f[j, 1] = g
        f[j, 2] = b
        pdf[j] = pd
        delta[j] = dl
    return wi, f, pdf, delta


@kernel
def ggx_many(m, o, i, ax, ay):
    """Columns D(m), G1(o), G2(o, i), D_o(m) (visible-normal pdf) for rows of m, o, i (k, 3)."""
    k = m.shape[0]
    out = np.zeros((k, 4))
    for j in range(k):
        out[j, 0] = ggx_d(m[j, 0], m[j, 1], m[j, 2], ax, ay)
        out[j, 1] = ggx_g1(o[j, 0], o[j, 1], o[j, 2], ax, ay)
        out[j, 2] = ggx_g2(o[j, 0], o[j, 1], o[j, 2], i[j, 0], i[j, 1], i[j, 2], ax, ay)
        out[j, 3] = pdf_vndf(o[j, 0], o[j, 1], o[j, 2], m[j, 0], m[j, 1], m[j, 2], ax, ay)
    return out


@kernel
def vndf_many(o, ax, ay, u):
    """Visible normals sampled from direction o (3,) for random numbers u (k, 2)."""
    k = u.shape[0]
    out = np.zeros((k, 3))
    for j in range(k):
        x, y, z = sample_vndf(o[0], o[1], o[2], ax, ay, u[j, 0], u[j, 1])
        out[j, 0] = x
        out[j, 1] = y
        out[j, 2] = z
    return out


@kernel
def fresnel_many(cos_i, eta, k, conductor):
    """Unpolarised Fresnel reflectance for an array of cosines."""
    out = np.zeros(cos_i.shape[0])
    for j in range(cos_i.shape[0]):
        if conductor:
            out[j] = fresnel_conductor(cos_i[j], eta, k)
        else:
            out[j] = fresnel_dielectric(cos_i[j], eta)[0]
    return out


@kernel
def texture_many(info, data, t, uv, scalar):
    """Texture t at texture coordinates uv (k, 2): (k, 3) colours or (k, 1) scalars."""
    k = uv.shape[0]
    out = np.zeros((k, 3))
    for j in range(k):
        if scalar:
            out[j, 0] = texture_scalar(info, data, t, uv[j, 0], uv[j, 1])
        else:
            r, g, b = texture_rgb(info, data, t, uv[j, 0], uv[j, 1])
            out[j, 0] = r
            out[j, 1] = g
            out[j, 2] = b
    return out


@kernel
def vndf_case_sample(o, ax, ay, reflect, u, distort, out_dir, out_pdf):
    """Sampler-battery form of VNDF sampling (local frame, normal +z): the
    visible normal m itself, or (``reflect``) i = reflect(o, m) over the whole
    sphere with pdf D_o(h) / (4 |o.h|), which integrates to 1 (Heitz 2014)."""
    for j in range(u.shape[0]):
        mx, my, mz = sample_vndf(o[0], o[1], o[2], ax, ay, u[j, 0] ** distort, u[j, 1])
        pm = pdf_vndf(o[0], o[1], o[2], mx, my, mz, ax, ay)
        if reflect:
            om = o[0] * mx + o[1] * my + o[2] * mz
            out_dir[j, 0] = 2.0 * om * mx - o[0]
            out_dir[j, 1] = 2.0 * om * my - o[1]
            out_dir[j, 2] = 2.0 * om * mz - o[2]
            out_pdf[j] = pm / (4.0 * abs(om)) if om != 0.0 else 0.0
        else:
            out_dir[j, 0] = mx
            out_dir[j, 1] = my
            out_dir[j, 2] = mz
            out_pdf[j] = pm


@kernel
def vndf_case_pdf(o, ax, ay, reflect, dirs, out_pdf):
    """pdf function matching vndf_case_sample."""
    for j in range(dirs.shape[0]):
        x, y, z = dirs[j, 0], dirs[j, 1], dirs[j, 2]
        if reflect:
            hx = o[0] + x
            hy = o[1] + y
            hz = o[2] + z
            ln = (hx * hx + hy * hy + hz * hz) ** 0.5
            if ln == 0.0:
                out_pdf[j] = 0.0
                continue
            hx /= ln
            hy /= ln
            hz /= ln
            oh = o[0] * hx + o[1] * hy + o[2] * hz
            out_pdf[j] = pdf_vndf(o[0], o[1], o[2], hx, hy, hz, ax, ay) / (4.0 * abs(oh))
        else:
            out_pdf[j] = pdf_vndf(o[0], o[1], o[2], x, y, z, ax, ay)


@kernel
def uv_many(kind, g, uvrow, pts, bary):
    """Texture coordinates of points pts (k, 3) on one primitive (row g, uv row);
    ``bary`` (k, 2) are the intersector's (u, v) (barycentrics or edge fractions)."""
    k = pts.shape[0]
    out = np.zeros((k, 2))
    for j in range(k):
        u, v = surface_uv(kind, g, uvrow, pts[j, 0], pts[j, 1], pts[j, 2], bary[j, 0], bary[j, 1])
        out[j, 0] = u
        out[j, 1] = v
    return out
