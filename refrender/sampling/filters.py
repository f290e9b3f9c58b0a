"""Pixel reconstruction filters, by filter importance sampling.

A pixel's value is the filter-weighted mean of the radiance arriving on the
film around the pixel centre c:

    I = ∫ f(x - c) L(x) dx / ∫ f(x) dx .

Following Ernst, Stamminger & Greiner, "Filter Importance Sampling" (IEEE
Symposium on Interactive Ray Tracing 2006), every camera sample of a pixel
draws its film offset x from a density p close to |f| and counts for that
pixel alone with the weight f(x) / (p(x) ∫f).  Its expectation is I
exactly, whatever p is (as long as p > 0 wherever f != 0).  With p = |f|/∫|f|
the weight is sign(f) ∫|f| / ∫f, the form of the paper; ours is p
tabulated from |f| in TABLE_BINS bins per axis (piecewise constant), so the
weight varies by the small ratio f/p within a bin and stays exact.  Samples
are never splatted to neighbouring pixels: the samples of a pixel are
independent and identically distributed, so the per-pixel variance of the
mean, merges of sample ranges, resumed renders and farm renders stay exact.

Every 2-D filter here is separable: f(x, y) = f1(x) f1(y), so the two axes
are sampled independently (random dimensions 0 and 1 of the path) and the
weight is the product of the two axis weights.

1-D profiles (r = radius in pixels; f1 = 0 for |x| >= r):

* ``box``: 1.  ``radius`` 0.5 (the default) is the plain pixel square; the
  kernel then keeps the historical film position ``pixel + u`` with weight 1,
  so images are bit-identical to those before filters existed.
* ``triangle``: 1 - |x|/r (radius default 1).
* ``gaussian``: exp(-x^2 / (2 sigma^2)), truncated at r (no offset; radius
  default 1.5, sigma 0.5).
* ``blackman_harris``: the four-term Blackman-Harris window over [-r, r]
  (Harris, "On the use of windows for harmonic analysis with the discrete
  Fourier transform", Proc. IEEE 66(1), 1978; coefficients 0.35875,
  0.48829, 0.14128, 0.01168), radius default 2.
* ``mitchell_netravali``: the cubic of Mitchell & Netravali,
  "Reconstruction filters in computer graphics", SIGGRAPH 1988, over
  |t| = 2|x|/r < 2 (radius default 2, B = C = 1/3; negative lobes).
* ``lanczos``: sinc(t) sinc(t / a) with t = a x / r, a = ``lobes``
  (Duchon, "Lanczos filtering in one and two dimensions", J. Applied
  Meteorology 18, 1979); radius default 2, lobes 2 (negative lobes).
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .._jit import inline, kernel

FILTER_BOX = 0
FILTER_TRIANGLE = 1
FILTER_GAUSSIAN = 2
FILTER_BLACKMAN_HARRIS = 3
FILTER_MITCHELL = 4
FILTER_LANCZOS = 5

#: name -> (code, {parameter: default})
FILTERS = {
    "box": (FILTER_BOX, {"radius": 0.5}),
    "triangle": (FILTER_TRIANGLE, {"radius": 1.0}),
    "gaussian": (FILTER_GAUSSIAN, {"radius": 1.5, "sigma": 0.5}),
    "blackman_harris": (FILTER_BLACKMAN_HARRIS, {"radius": 2.0}),
    "mitchell_netravali": (FILTER_MITCHELL, {"radius": 2.0, "B": 1.0 / 3.0, "C": 1.0 / 3.0}),
    "lanczos": (FILTER_LANCZOS, {"radius": 2.0, "lobes": 2.0}),
}
#: bins of the tabulated sampling density per axis
TABLE_BINS = 4096
#: largest filter radius, pixels
MAX_RADIUS = 16.0
_BH = (0.35875, 0.48829, 0.14128, 0.01168)

# filt layout: [0] code, [1] radius, [2] p1, [3] p2, [4] integral of f1,
#              [5] 1 if the plain pixel-square path applies (box, radius 0.5)
FILT_LEN = 6


class FilterArrays(NamedTuple):
    filt: np.ndarray      # (FILT_LEN,) float64, see above
    cdf: np.ndarray       # (TABLE_BINS + 1,) float64 over [-r, r]
    pdf: np.ndarray       # (TABLE_BINS,) float64 density per bin (1 / pixel)


# ------------------------------------------------------------------ kernels

@inline
def filter_eval(filt, x):
    """The 1-D profile f1(x) (not normalised)."""
    code = filt[0]
    r = filt[1]
    ax = abs(x)
    if not (ax < r):
        return 0.0
    if code == FILTER_BOX:
        return 1.0
    if code == FILTER_TRIANGLE:
        return 1.0 - ax / r
    if code == FILTER_GAUSSIAN:
        s = filt[2]
        return math.exp(-0.5 * (x / s) * (x / s))
    if code == FILTER_BLACKMAN_HARRIS:
        a = math.pi * x / r
        return 0.35875 + 0.48829 * math.cos(a) + 0.14128 * math.cos(2.0 * a) \
            + 0.01168 * math.cos(3.0 * a)
    if code == FILTER_MITCHELL:
        b = filt[2]
        c = filt[3]
        t = 2.0 * ax / r
        if t < 1.0:
            return ((12.0 - 9.0 * b - 6.0 * c) * t * t * t + (-18.0 + 12.0 * b + 6.0 * c) * t * t
                    + (6.0 - 2.0 * b)) / 6.0
        return ((-b - 6.0 * c) * t * t * t + (6.0 * b + 30.0 * c) * t * t
                + (-12.0 * b - 48.0 * c) * t + (8.0 * b + 24.0 * c)) / 6.0
    # lanczos
    a = filt[2]
    t = a * x / r
    if t == 0.0:
        return 1.0
    pt = math.pi * t
    return math.sin(pt) / pt * math.sin(pt / a) / (pt / a)


@inline
def filter_sample(filt, cdf, pdf, u):
    """Film offset x (pixels from the pixel centre) drawn from the tabulated
    density, and that density at x (see filter_pdf)."""
    r = filt[1]
    if filt[0] == FILTER_BOX:
        return r * (2.0 * u - 1.0), 0.5 / r
    n = pdf.shape[0]
    lo = 0
    hi = n
    while hi - lo > 1:          # largest i with cdf[i] <= u
        mid = (lo + hi) >> 1
        if cdf[mid] <= u:
            lo = mid
        else:
            hi = mid
    width = cdf[lo + 1] - cdf[lo]
    frac = (u - cdf[lo]) / width if width > 0.0 else 0.5
    frac = min(max(frac, 0.0), 1.0)
    dx = 2.0 * r / n
    x = -r + (lo + frac) * dx
    return x, pdf[lo]


@inline
def filter_pdf(filt, cdf, pdf, x):
    """Density of filter_sample at offset x (1 / pixel)."""
    r = filt[1]
    if not (abs(x) < r):
        return 0.0
    if filt[0] == FILTER_BOX:
        return 0.5 / r
    n = pdf.shape[0]
    i = int((x + r) / (2.0 * r) * n)
    i = min(max(i, 0), n - 1)
    return pdf[i]


@inline
def filter_offset(filt, cdf, pdf, u):
    """(offset, weight) of one axis: x ~ filter_sample, weight f1(x) / (p(x) ∫f1)."""
    x, p = filter_sample(filt, cdf, pdf, u)
    if not (p > 0.0):
        return 0.0, 0.0
    return x, filter_eval(filt, x) / (p * filt[4])


@kernel
def batch_filter_sample(filt, cdf, pdf, u, out_x, out_pdf, out_w):
    for i in range(u.shape[0]):
        x, p = filter_sample(filt, cdf, pdf, u[i])
        out_x[i] = x
        out_pdf[i] = p
        out_w[i] = filter_eval(filt, x) / (p * filt[4]) if p > 0.0 else 0.0


@kernel
def batch_filter_pdf(filt, cdf, pdf, x, out):
    for i in range(x.shape[0]):
        out[i] = filter_pdf(filt, cdf, pdf, x[i])


@kernel
def batch_filter_eval(filt, x, out):
    for i in range(x.shape[0]):
        out[i] = filter_eval(filt, x[i])


# ------------------------------------------------------------------ Python side

def profile(name: str, params: dict):
    """The 1-D profile as a vectorised numpy function (same formulas as filter_eval)."""
    arrays = build_filter(name, params)
    filt = arrays.filt

    def f(x):
        x = np.ascontiguousarray(np.atleast_1d(np.asarray(x, dtype=np.float64)))
        out = np.empty_like(x)
        batch_filter_eval(filt, x.ravel(), out.ravel())
        return out
    return f


def resolve(spec) -> tuple[str, dict]:
    """(name, full parameters) of a ``film.filter`` value: a name or
    {"type": name, parameter: value, ...}.  Raises ValueError naming the field."""
    from ..errors import SceneError
    if spec is None:
        spec = "box"
    if isinstance(spec, str):
        spec = {"type": spec}
    if not isinstance(spec, dict) or "type" not in spec:
        raise SceneError("film.filter: expected a filter name or an object with 'type'")
    name = spec["type"]
    if name not in FILTERS:
        raise SceneError(f"film.filter.type: must be one of {', '.join(FILTERS)}, got {name!r}")
    params = dict(FILTERS[name][1])
    for key, value in spec.items():
        if key == "type":
            continue
        if key not in params:
            raise SceneError(f"film.filter.{key}: not a parameter of the {name} filter "
                             f"(has {', '.join(params)})")
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise SceneError(f"film.filter.{key}: must be a number, got {value!r}")
        params[key] = float(value)
    r = params["radius"]
    if not 0.0 < r <= MAX_RADIUS:
        raise SceneError(f"film.filter.radius: must be in (0, {MAX_RADIUS:g}] pixels, got {r!r}")
    if name == "gaussian" and not params["sigma"] > 0.0:
        raise SceneError(f"film.filter.sigma: must be > 0, got {params['sigma']!r}")
    if name == "lanczos" and not params["lobes"] >= 1.0:
        raise SceneError(f"film.filter.lobes: must be >= 1, got {params['lobes']!r}")
    arrays = build_filter(name, params)
    if not arrays.filt[4] > 0.0:
        raise SceneError(f"film.filter: the {name} filter with {params} has a non-positive integral")
    return name, params


def is_pixel_square(name: str, params: dict) -> bool:
    return name == "box" and params.get("radius", 0.5) == 0.5


def _gauss_legendre(f, a: float, b: float, pieces: int = 64, order: int = 32) -> float:
    """∫_a^b f by composite Gauss-Legendre quadrature (numpy's nodes)."""
    xg, wg = np.polynomial.legendre.leggauss(order)
    edges = np.linspace(a, b, pieces + 1)
    mid = 0.5 * (edges[1:] + edges[:-1])[:, None]
    half = 0.5 * (edges[1:] - edges[:-1])[:, None]
    x = mid + half * xg[None, :]
    return float(np.sum(half * wg[None, :] * f(x.ravel()).reshape(x.shape)))


def build_filter(name: str, params: dict) -> FilterArrays:
    """Kernel arrays of a filter: parameters, integral of f1 and the sampling table."""
    code, defaults = FILTERS[name]
    p = dict(defaults)
    p.update(params)
    r = float(p["radius"])
    filt = np.zeros(FILT_LEN)
    filt[0], filt[1] = code, r
    if name == "gaussian":
        filt[2] = p["sigma"]
    elif name == "mitchell_netravali":
        filt[2], filt[3] = p["B"], p["C"]
    elif name == "lanczos":
        filt[2] = p["lobes"]
    filt[5] = 1.0 if is_pixel_square(name, p) else 0.0
    if code == FILTER_BOX:
        filt[4] = 2.0 * r
        return FilterArrays(filt, np.array([0.0, 1.0]), np.array([0.5 / r]))

    def f(x):
        x = np.ascontiguousarray(x, dtype=np.float64)
        out = np.empty_like(x)
        batch_filter_eval(filt, x, out)
        return out

    # ∫ f1: breakpoints at 0 and (Mitchell-Netravali) +-r/2, where the pieces join
    cuts = [-r, -0.5 * r, 0.0, 0.5 * r, r] if code == FILTER_MITCHELL else [-r, 0.0, r]
    filt[4] = sum(_gauss_legendre(f, a, b) for a, b in zip(cuts, cuts[1:]))
    # the table: mass of |f1| per bin (8-point Gauss-Legendre per bin), floored so that
    # every bin where f1 may be non-zero has a positive density
    n = TABLE_BINS
    edges = np.linspace(-r, r, n + 1)
    xg, wg = np.polynomial.legendre.leggauss(8)
    half = 0.5 * (edges[1] - edges[0])
    x = 0.5 * (edges[1:] + edges[:-1])[:, None] + half * xg[None, :]
    mass = (half * wg[None, :] * np.abs(f(x.ravel())).reshape(x.shape)).sum(axis=1)
    mass = np.maximum(mass, 1e-6 * mass.max())
    cdf = np.zeros(n + 1)
    cdf[1:] = np.cumsum(mass)
    total = cdf[-1]
    cdf /= total
    cdf[-1] = 1.0
    pdf = mass / total / (2.0 * half)
    return FilterArrays(filt, cdf, pdf)
