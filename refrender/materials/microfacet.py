"""GGX (Trowbridge-Reitz) microfacet distribution, Smith masking, VNDF sampling.

All functions work in the local frame of the surface: +z is the normal, the
anisotropic roughness ``ax`` acts along local x and ``ay`` along local y.

* D(m) = 1 / (pi ax ay (mx^2/ax^2 + my^2/ay^2 + mz^2)^2) for mz > 0
  (Walter, Marschner, Li & Torrance, "Microfacet Models for Refraction through
  Rough Surfaces", EGSR 2007; anisotropic form: Heitz 2014).
* Lambda(w) = (-1 + sqrt(1 + (ax^2 wx^2 + ay^2 wy^2) / wz^2)) / 2,
  G1 = 1 / (1 + Lambda), height-correlated G2 = 1 / (1 + Lambda(o) + Lambda(i))
  (Heitz, "Understanding the Masking-Shadowing Function in Microfacet-Based
  BRDFs", JCGT 3(2), 2014).
* Visible normals: D_o(m) = G1(o) max(0, o.m) D(m) / o_z, sampled exactly by
  Heitz, "Sampling the GGX Distribution of Visible Normals", JCGT 7(4), 2018.
"""
import math

from .._jit import inline

PI = math.pi
#: smallest roughness used by the kernels (alpha below it is raised to it)
ALPHA_MIN = 1e-4


@inline
def ggx_d(mx, my, mz, ax, ay):
    """GGX normal distribution D(m) (sr^-1, projected-area normalised)."""
    if mz <= 0.0:
        return 0.0
    e = (mx / ax) ** 2 + (my / ay) ** 2 + mz * mz
    return 1.0 / (PI * ax * ay * e * e)


@inline
def ggx_lambda(wx, wy, wz, ax, ay):
    """Smith Lambda of GGX for a direction (any side; uses |wz|)."""
    z2 = wz * wz
    if z2 <= 0.0:
        return math.inf
    a2t2 = (ax * ax * wx * wx + ay * ay * wy * wy) / z2
    return 0.5 * (-1.0 + math.sqrt(1.0 + a2t2))


@inline
def ggx_g1(wx, wy, wz, ax, ay):
    """Smith masking G1(w) = 1 / (1 + Lambda(w)) (without the chi+ factor)."""
    return 1.0 / (1.0 + ggx_lambda(wx, wy, wz, ax, ay))


@inline
def ggx_g2(ox, oy, oz, ix, iy, iz, ax, ay):
    """Height-correlated Smith masking-shadowing 1 / (1 + Lambda(o) + Lambda(i))."""
    return 1.0 / (1.0 + ggx_lambda(ox, oy, oz, ax, ay) + ggx_lambda(ix, iy, iz, ax, ay))


@inline
def sample_vndf(vx, vy, vz, ax, ay, u1, u2):
    """Heitz 2018: a microfacet normal with density pdf_vndf, seen from v (vz > 0)."""
    hx = ax * vx
    hy = ay * vy
    hz = vz
    inv = 1.0 / math.sqrt(hx * hx + hy * hy + hz * hz)
    hx *= inv
    hy *= inv
    hz *= inv
    lensq = hx * hx + hy * hy
    if lensq > 0.0:
        il = 1.0 / math.sqrt(lensq)
        t1x, t1y, t1z = -hy * il, hx * il, 0.0
    else:
        t1x, t1y, t1z = 1.0, 0.0, 0.0
    t2x = hy * t1z - hz * t1y
    t2y = hz * t1x - hx * t1z
    t2z = hx * t1y - hy * t1x
    r = math.sqrt(u1)
    phi = 2.0 * PI * u2
    p1 = r * math.cos(phi)
    p2 = r * math.sin(phi)
    s = 0.5 * (1.0 + hz)
    p2 = (1.0 - s) * math.sqrt(max(0.0, 1.0 - p1 * p1)) + s * p2
    p3 = math.sqrt(max(0.0, 1.0 - p1 * p1 - p2 * p2))
    nx = p1 * t1x + p2 * t2x + p3 * hx
    ny = p1 * t1y + p2 * t2y + p3 * hy
    nz = p1 * t1z + p2 * t2z + p3 * hz
    mx = ax * nx
    my = ay * ny
    mz = max(0.0, nz)
    inv = 1.0 / math.sqrt(mx * mx + my * my + mz * mz)
    return mx * inv, my * inv, mz * inv


@inline
def pdf_vndf(vx, vy, vz, mx, my, mz, ax, ay):
    """Density of sample_vndf over microfacet normals (sr^-1): G1(v) max(0, v.m) D(m) / v_z."""
    vm = vx * mx + vy * my + vz * mz
    if vm <= 0.0 or vz <= 0.0:
        return 0.0
    return ggx_g1(vx, vy, vz, ax, ay) * vm * ggx_d(mx, my, mz, ax, ay) / vz
