"""Fresnel reflectance of smooth interfaces (unpolarised light).

Sources: Born & Wolf, *Principles of Optics* (Fresnel formulae, optics of
metals); Hecht, *Optics*.  ``eta`` is always the index of the far side over
the index of the side the light comes from (relative index).
"""
import cmath
import math

from .._jit import inline


@inline
def fresnel_dielectric(cos_i, eta):
    """Unpolarised reflectance R = (r_s^2 + r_p^2)/2 of a real relative index.

    ``cos_i`` > 0 is the cosine on the incident side; returns (R, cos_t) with
    cos_t >= 0 the cosine of the refracted direction; R = 1 and cos_t = 0 under
    total internal reflection.
    """
    c = min(1.0, abs(cos_i))
    sin2_t = (1.0 - c * c) / (eta * eta)
    if sin2_t >= 1.0:
        return 1.0, 0.0
    ct = math.sqrt(1.0 - sin2_t)
    rs = (c - eta * ct) / (c + eta * ct)
    rp = (eta * c - ct) / (eta * c + ct)
    return 0.5 * (rs * rs + rp * rp), ct


@inline
def fresnel_conductor(cos_i, n, k):
    """Unpolarised reflectance of a conductor of complex relative index n + ik.

    Exact form with w = sqrt(eta^2 - sin^2) on the principal branch:
    r_s = (cos - w)/(cos + w), r_p = (eta^2 cos - w)/(eta^2 cos + w).
    """
    c = min(1.0, abs(cos_i))
    s2 = 1.0 - c * c
    eta = complex(n, k)
    eta2 = eta * eta
    w = cmath.sqrt(eta2 - s2)
    return 0.5 * (_ratio2(c - w, c + w) + _ratio2(eta2 * c - w, eta2 * c + w))


@inline
def _ratio2(num, den):
    """|num / den|^2 of a Fresnel amplitude; 1 where den = 0.

    The denominators vanish only for eta = 0 (n = k = 0) at normal or grazing
    incidence, where the amplitude's limit as eta -> 0 has modulus 1 (the
    reflectance of the index-0 limit is 1 at every angle).  numba raises
    ZeroDivisionError on a complex division by zero whatever its error model,
    so the case is decided here.
    """
    if den == 0:
        return 1.0
    return abs(num / den) ** 2


@inline
def schlick(cos_i, f0):
    """Schlick's approximation F0 + (1 - F0)(1 - cos)^5 (Schlick 1994)."""
    m = 1.0 - min(1.0, abs(cos_i))
    m2 = m * m
    return f0 + (1.0 - f0) * m2 * m2 * m
