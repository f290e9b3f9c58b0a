"""One registry of every direction sampler, for the statistical test battery.

Each :class:`SamplerCase` wraps a sampler and its pdf function as seen from a
fixed shading point: ``sample(u)`` maps uniform numbers (N, 3) to unit
directions (N, 3) and the pdf the sampler reports (solid angle, sr^-1);
``pdf(dirs)`` evaluates the separate pdf function.  ``axis`` and
``cos_min`` bound the support: every direction with pdf > 0 has
dot(axis, d) >= cos_min, so a test can bin (cos theta, phi) about ``axis``
on [cos_min, 1] only.  ``tests/test_samplers.py`` runs every case through the
same tests; a new sampler (a BSDF, a light) is added here once.

``distort`` (> 0, default 1) feeds u1**distort instead of u1 to the sampler
while its pdf stays unchanged: a deliberately broken sampler, for testing the
tests.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from numba import prange

from .._jit import kernel
from ..geometry.intersect import DISK, RECTANGLE, SPHERE, TRIANGLE, intersect_prim, surface_point
from ..materials.bsdf import bsdf_pdf, bsdf_sample
from .envmap import env_pdf, env_sample
from .lights import (MODE_AREA, MODE_SOLID_ANGLE, pdf_distant_cone, pdf_emitter, sample_area,
                     sample_distant_cone, sample_emitter)


# --- batch kernels ---------------------------------------------------------------

@kernel(parallel=True)
def batch_emitter_sample(kind, G, area, mode, x, u, distort, out_dir, out_pdf):
    for i in prange(u.shape[0]):
        qx, qy, qz, mx, my, mz, pdf = sample_emitter(kind, G[0], area, mode, x[0], x[1], x[2],
                                                     u[i, 0] ** distort, u[i, 1])
        dx = qx - x[0]
        dy = qy - x[1]
        dz = qz - x[2]
        d = math.sqrt(dx * dx + dy * dy + dz * dz)
        out_dir[i, 0] = dx / d
        out_dir[i, 1] = dy / d
        out_dir[i, 2] = dz / d
        out_pdf[i] = pdf


@kernel(parallel=True)
def batch_emitter_pdf(kind, G, area, mode, x, dirs, out_pdf):
    """pdf_emitter at the point where the ray x + t d meets the primitive (0 on a miss)."""
    for i in prange(dirs.shape[0]):
        dx, dy, dz = dirs[i, 0], dirs[i, 1], dirs[i, 2]
        t, hu, hv = intersect_prim(kind, G, 0, x[0], x[1], x[2], dx, dy, dz, 0.0, math.inf)
        if math.isinf(t):
            out_pdf[i] = 0.0
            continue
        yx, yy, yz, nx, ny, nz = surface_point(kind, G[0], x[0], x[1], x[2], dx, dy, dz, t, hu, hv)
        out_pdf[i] = pdf_emitter(kind, G[0], area, mode, x[0], x[1], x[2], yx, yy, yz, nx, ny, nz)


@kernel(parallel=True)
def batch_sphere_area_sample(g, u, distort, out_dir, out_pdf):
    """Area sampling of a sphere, reported by its normal: pdf_A * r^2 per sr of normals."""
    for i in prange(u.shape[0]):
        yx, yy, yz, nx, ny, nz = sample_area(SPHERE, g, u[i, 0] ** distort, u[i, 1])
        out_dir[i, 0] = nx
        out_dir[i, 1] = ny
        out_dir[i, 2] = nz
        out_pdf[i] = g[3] * g[3] / (4.0 * math.pi * g[3] * g[3])


@kernel(parallel=True)
def batch_env_sample(env, img, pmf, marg, cond, u, distort, out_dir, out_pdf):
    for i in prange(u.shape[0]):
        dx, dy, dz, pdf, r, g, b = env_sample(env, img, pmf, marg, cond, u[i, 0] ** distort, u[i, 1])
        out_dir[i, 0] = dx
        out_dir[i, 1] = dy
        out_dir[i, 2] = dz
        out_pdf[i] = pdf


@kernel(parallel=True)
def batch_env_pdf(env, img, pmf, dirs, out_pdf):
    for i in prange(dirs.shape[0]):
        out_pdf[i] = env_pdf(env, img, pmf, dirs[i, 0], dirs[i, 1], dirs[i, 2])


@kernel(parallel=True)
def batch_cone_sample(a, omc, u, distort, out_dir, out_pdf):
    for i in prange(u.shape[0]):
        wx, wy, wz, pdf = sample_distant_cone(a[0], a[1], a[2], omc, u[i, 0] ** distort, u[i, 1])
        out_dir[i, 0] = wx
        out_dir[i, 1] = wy
        out_dir[i, 2] = wz
        out_pdf[i] = pdf


@kernel(parallel=True)
def batch_cone_pdf(a, omc, dirs, out_pdf):
    for i in prange(dirs.shape[0]):
        out_pdf[i] = pdf_distant_cone(a[0], a[1], a[2], omc, dirs[i, 0], dirs[i, 1], dirs[i, 2])


@kernel(parallel=True)
def batch_bsdf_sample(mkind, p, front, n, wo, u, distort, out_dir, out_pdf):
    for i in prange(u.shape[0]):
        wx, wy, wz, fr, fg, fb, pdf, delta = bsdf_sample(mkind, p, front, n[0], n[1], n[2], wo[0],
                                                         wo[1], wo[2], u[i, 0] ** distort, u[i, 1],
                                                         u[i, 2])
        out_dir[i, 0] = wx
        out_dir[i, 1] = wy
        out_dir[i, 2] = wz
        out_pdf[i] = pdf


@kernel(parallel=True)
def batch_bsdf_pdf(mkind, p, front, n, wo, dirs, out_pdf):
    for i in prange(dirs.shape[0]):
        out_pdf[i] = bsdf_pdf(mkind, p, front, n[0], n[1], n[2], wo[0], wo[1], wo[2],
                              dirs[i, 0], dirs[i, 1], dirs[i, 2])


# --- the registry ------------------------------------------------------------------

@dataclass
class SamplerCase:
    name: str
    sample_fn: Callable
    pdf_fn: Callable
    axis: np.ndarray
    cos_min: float = -1.0

    def sample(self, u, distort=1.0):
        u = np.ascontiguousarray(u, dtype=np.float64)
        d = np.empty((u.shape[0], 3))
        p = np.empty(u.shape[0])
        self.sample_fn(u, float(distort), d, p)
        return d, p

    def pdf(self, dirs):
        dirs = np.ascontiguousarray(dirs, dtype=np.float64)
        p = np.empty(dirs.shape[0])
        self.pdf_fn(dirs, p)
        return p


def _unit(v):
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


def emitter_case(name, kind, g, area, mode, x, boundary):
    """Light sampler of primitive row g (9 floats) from x; ``boundary`` (k, 3)
    points on the emitter's outline (its support is their convex cone)."""
    G = np.ascontiguousarray(np.asarray(g, dtype=np.float64).reshape(1, 9))
    x = np.asarray(x, dtype=np.float64)
    if kind == SPHERE:
        axis = _unit(G[0, :3] - x)
        d = np.linalg.norm(G[0, :3] - x)
        cmin = math.sqrt(max(0.0, 1.0 - (G[0, 3] / d) ** 2)) if d > G[0, 3] else -1.0
    else:
        pts = np.asarray(boundary, dtype=np.float64)
        axis = _unit((pts - x).mean(axis=0))
        cmin = float(((pts - x) @ axis / np.linalg.norm(pts - x, axis=1)).min())
    cmin = max(-1.0, cmin - 1e-3 * (1.0 - cmin))
    return SamplerCase(
        name,
        lambda u, k, dd, pp: batch_emitter_sample(kind, G, float(area), mode, x, u, k, dd, pp),
        lambda dirs, pp: batch_emitter_pdf(kind, G, float(area), mode, x, dirs, pp),
        axis, cmin)


def env_case(name, image, scale=(1.0, 1.0, 1.0), rotate_degrees=0.0):
    from .envmap import build_env_distribution
    img = np.ascontiguousarray(np.asarray(image, dtype=np.float64))
    pmf, marg, cond, _ = build_env_distribution(img, np.asarray(scale, float))
    env = np.zeros(8)
    env[:3] = scale
    env[4] = 1.0
    a = math.radians(rotate_degrees)
    env[5], env[6] = math.cos(a), math.sin(a)
    return SamplerCase(name,
                       lambda u, k, dd, pp: batch_env_sample(env, img, pmf, marg, cond, u, k, dd, pp),
                       lambda dirs, pp: batch_env_pdf(env, img, pmf, dirs, pp),
                       np.array([0.0, 1.0, 0.0]), -1.0)


def uniform_env_case():
    env = np.zeros(8)
    env[:3] = 1.0
    env[5] = 1.0
    img = np.ones((1, 1, 3))
    pmf = np.ones((1, 1))
    marg = np.array([0.0, 1.0])
    cond = np.array([[0.0, 1.0]])
    return SamplerCase("environment uniform",
                       lambda u, k, dd, pp: batch_env_sample(env, img, pmf, marg, cond, u, k, dd, pp),
                       lambda dirs, pp: batch_env_pdf(env, img, pmf, dirs, pp),
                       np.array([0.0, 0.0, 1.0]), -1.0)


def distant_cone_case(name, axis, angular_diameter_deg):
    """The distant-disc light sampler (a directional light with angular_diameter)."""
    a = _unit(axis)
    half = math.radians(angular_diameter_deg) / 2.0
    omc = 2.0 * math.sin(half / 2.0) ** 2
    cmin = math.cos(half)
    return SamplerCase(name,
                       lambda u, k, dd, pp: batch_cone_sample(a, omc, u, k, dd, pp),
                       lambda dirs, pp: batch_cone_pdf(a, omc, dirs, pp),
                       a, max(-1.0, cmin - 1e-3 * (1.0 - cmin)))


def bsdf_case(name, mkind, params, normal, wo, front=True):
    """A (non-delta) BSDF sampler at a surface of the given normal, for outgoing wo.
    ``params`` is the material's parameter row (see materials/bsdf.py)."""
    from ..geometry.compile import MAT_PARAMS
    p = np.zeros(MAT_PARAMS)
    p[:len(params)] = params
    n = _unit(normal)
    wo = _unit(wo)
    return SamplerCase(name,
                       lambda u, k, dd, pp: batch_bsdf_sample(mkind, p, front, n, wo, u, k, dd, pp),
                       lambda dirs, pp: batch_bsdf_pdf(mkind, p, front, n, wo, dirs, pp),
                       n, -1.0)


def sphere_area_case(name, center, radius):
    g = np.zeros(9)
    g[:3] = center
    g[3] = radius
    return SamplerCase(name,
                       lambda u, k, dd, pp: batch_sphere_area_sample(g, u, k, dd, pp),
                       lambda dirs, pp: pp.__setitem__(slice(None), 1.0 / (4.0 * math.pi)),
                       np.array([0.0, 0.0, 1.0]), -1.0)


def _rect(o, e1, e2):
    g = np.concatenate([o, e1, e2]).astype(float)
    o, e1, e2 = (np.asarray(v, float) for v in (o, e1, e2))
    return g, float(np.linalg.norm(np.cross(e1, e2))), np.array([o, o + e1, o + e1 + e2, o + e2])


def _tri(a, b, c):
    a, b, c = (np.asarray(v, float) for v in (a, b, c))
    g = np.concatenate([a, b - a, c - a])
    return g, float(0.5 * np.linalg.norm(np.cross(b - a, c - a))), np.array([a, b, c])


def _disk(c, n, r):
    c = np.asarray(c, float)
    n = _unit(n)
    g = np.zeros(9)
    g[:3], g[3:6], g[6] = c, n, r
    t = np.cross(n, [1.0, 0, 0] if abs(n[0]) < 0.9 else [0, 1.0, 0])
    t /= np.linalg.norm(t)
    b = np.cross(n, t)
    ang = np.linspace(0, 2 * math.pi, 721)
    ring = c + r * (np.cos(ang)[:, None] * t + np.sin(ang)[:, None] * b)
    return g, math.pi * r * r, ring


def registry():
    """Every sampler of the renderer, each from a representative shading point."""
    from ..materials.bsdf import MAT_LAMBERTIAN
    cases = []
    x = np.zeros(3)
    modes = (("solid_angle", MODE_SOLID_ANGLE), ("area", MODE_AREA))
    sphere = np.array([0.3, 0.2, 1.6, 1.0, 0, 0, 0, 0, 0])       # seen from 1.6 radii (about)
    for label, mode in modes[:1]:
        cases.append(emitter_case(f"sphere {label}", SPHERE, sphere, 4 * math.pi, mode, x, None))
    cases.append(sphere_area_case("sphere area (by normal)", [0.3, 0.2, 1.6], 1.0))
    rect = _rect([-0.5, -0.3, 1.0], [0.0, 1.2, 0.0], [1.5, 0.0, 0.0])
    tri = _tri([0.2, 0.1, 1.0], [3.0, 0.0, 1.0], [0.0, 4.0, 1.0])       # Ureña, Fajardo & King 2013, An Area-Preserving Parametrization for Spherical Rectangles; van Oosterom & Strackee 1983, IEEE Trans. Biomed. Eng. 30(2)
    tri2 = _tri([1.0, -1.0, 2.0], [2.0, 1.0, 2.5], [-1.0, 0.5, 1.5])    # Ureña, Fajardo & King 2013, An Area-Preserving Parametrization for Spherical Rectangles; van Oosterom & Strackee 1983, IEEE Trans. Biomed. Eng. 30(2)
    disk = _disk([0.4, 0.0, 1.0], [0.2, 0.1, -1.0], 0.8)
    for label, mode in modes:
        cases.append(emitter_case(f"rectangle {label}", RECTANGLE, rect[0], rect[1], mode, x, rect[2]))
        cases.append(emitter_case(f"triangle {label}", TRIANGLE, tri[0], tri[1], mode, x, tri[2]))
        cases.append(emitter_case(f"triangle2 {label}", TRIANGLE, tri2[0], tri2[1], mode, x, tri2[2]))
        cases.append(emitter_case(f"disk {label}", DISK, disk[0], disk[1], mode, x, disk[2]))
    cases.append(emitter_case("sphere solid_angle, fallback inside", SPHERE,
                              np.array([0.1, 0.0, 0.0, 1.0, 0, 0, 0, 0, 0]), 4 * math.pi,
                              MODE_SOLID_ANGLE, np.array([0.0, 0.0, 0.0]), None))
    cases.append(uniform_env_case())
    cases.append(distant_cone_case("distant disc 0.53 deg", [0.3, 0.9, -0.2], 0.53))
    cases.append(distant_cone_case("distant disc 40 deg", [-0.5, 0.1, 0.8], 40.0))
    rng = np.random.default_rng(7)
    img = rng.gamma(0.6, 1.0, size=(16, 32, 3))
    img[3, 20] = 400.0                     # a bright sun-like pixel
    cases.append(env_case("environment image", img, (1.0, 0.8, 0.6), 30.0))
    cases.append(bsdf_case("diffuse BSDF", MAT_LAMBERTIAN, [0.7, 0.7, 0.7], [0.2, -0.3, 0.9],
                           [0.0, 0.5, 1.0]))
    cases.extend(ggx_cases())
    return cases


def ggx_cases():
    """GGX visible-normal sampling (Heitz 2018) and its reflection Jacobian, in the
    local frame of the surface (normal +z).  The BSDFs that use them (rough
    conductor, rough dielectric, metallic-roughness) lose the samples that fall
    below the surface, so their pdfs integrate to less than 1; they have their
    own battery in tests/test_materials.py."""
    from ..materials.batch import vndf_case_pdf, vndf_case_sample
    cases = []
    z = np.array([0.0, 0.0, 1.0])
    for label, o, ax, ay in (("iso a=0.3 theta=40", _unit([0.64, 0.0, 0.77]), 0.3, 0.3),
                             ("aniso a=(0.15,0.6) theta=70", _unit([0.8, 0.5, 0.34]), 0.15, 0.6)):
        for reflect in (False, True):
            name = f"GGX {'VNDF reflection' if reflect else 'visible normals'} {label}"
            cases.append(SamplerCase(
                name,
                lambda u, k, dd, pp, o=o, ax=ax, ay=ay, r=reflect: vndf_case_sample(o, ax, ay, r, u, k, dd, pp),
                lambda dirs, pp, o=o, ax=ax, ay=ay, r=reflect: vndf_case_pdf(o, ax, ay, r, dirs, pp),
                z, -1.0))
    return cases
