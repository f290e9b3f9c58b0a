"""Pixel reconstruction filters by filter importance sampling.

Sources: Ernst, Stamminger & Greiner, "Filter Importance Sampling" (IEEE
Symposium on Interactive Ray Tracing 2006) for the estimator (a sample drawn
from the filter counts for its own pixel with weight f / (p ∫f), whose
expectation is the filtered value); scipy.integrate.quad (a reference
library) for the integrals of the profiles and the edge responses; the erf
closed form of the truncated Gaussian's edge response (textbook calculus);
scipy.stats.chi2 through tests/_stats.py for the sampler χ² tests.  The
profile formulas are those cited in refrender/sampling/filters.py.
Tolerances are 4 standard errors of the estimates.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

import refrender
from refrender.errors import SceneError
from refrender.sampling import filters as F

from _stats import pooled_chi2_pvalue

ALL = [("box", {}), ("box", {"radius": 1.0}), ("triangle", {}), ("gaussian", {}),
       ("gaussian", {"radius": 2.0, "sigma": 0.8}), ("blackman_harris", {}),
       ("mitchell_netravali", {}), ("mitchell_netravali", {"B": 0.0, "C": 0.5}), ("lanczos", {}),
       ("lanczos", {"radius": 3.0, "lobes": 3.0})]
IDS = [f"{n}-{'-'.join(f'{k}{v}' for k, v in p.items()) or 'default'}" for n, p in ALL]
#: Šidák level of the χ² battery (overall 1 %)
ALPHA = 1.0 - (1.0 - 0.01) ** (1.0 / len(ALL))


def _reference_profile(name, p):
    """The 1-D profiles written out from their sources (independent of the kernel code)."""
    r = p["radius"]
    if name == "box":
        return lambda x: 1.0 if abs(x) < r else 0.0
    if name == "triangle":
        return lambda x: max(0.0, 1.0 - abs(x) / r)
    if name == "gaussian":
        return lambda x: math.exp(-x * x / (2 * p["sigma"] ** 2)) if abs(x) < r else 0.0
    if name == "blackman_harris":     # Harris 1978, centred on 0
        a = (0.35875, 0.48829, 0.14128, 0.01168)
        return lambda x: (sum(c * math.cos(k * math.pi * x / r) for k, c in enumerate(a))
                          if abs(x) < r else 0.0)
    if name == "mitchell_netravali":  # Mitchell & Netravali 1988, eq. (8)
        B, C = p["B"], p["C"]

        def k(x):
            t = 2 * abs(x) / r
            if t < 1:
                return ((12 - 9 * B - 6 * C) * t ** 3 + (-18 + 12 * B + 6 * C) * t ** 2 + 6 - 2 * B) / 6
            if t < 2:
                return ((-B - 6 * C) * t ** 3 + (6 * B + 30 * C) * t ** 2 + (-12 * B - 48 * C) * t
                        + 8 * B + 24 * C) / 6
            return 0.0
        return k
    a = p["lobes"]                    # Duchon 1979: sinc(t) sinc(t / a), t = a x / r
    return lambda x: float(np.sinc(a * x / r) * np.sinc(x / r)) if abs(x) < r else 0.0


def _quad(g, lo, hi, r):
    pts = [q for q in (-r / 2, 0.0, r / 2) if lo < q < hi]
    return integrate.quad(g, lo, hi, points=pts or None, limit=200, epsabs=1e-13, epsrel=1e-12)[0]


@pytest.mark.parametrize("name,params", ALL, ids=IDS)
def test_kernel_profiles_equal_the_reference_formulas(name, params):
    _, full = F.resolve({"type": name, **params})
    r = full["radius"]
    x = np.linspace(-1.2 * r, 1.2 * r, 1001)
    ref = np.array([_reference_profile(name, full)(v) for v in x])
    # float rounding relative to the peak (the cubic cancels near its ends)
    np.testing.assert_allclose(F.profile(name, full)(x), ref, rtol=1e-12, atol=1e-14)


def _arrays(name, params):
    _, full = F.resolve({"type": name, **params})
    return F.build_filter(name, full), full


def _draw(fa, u):
    x = np.empty_like(u)
    p = np.empty_like(u)
    w = np.empty_like(u)
    F.batch_filter_sample(fa.filt, fa.cdf, fa.pdf, u, x, p, w)
    return x, p, w


def _pdf(fa, x):
    x = np.ascontiguousarray(x, dtype=np.float64)
    out = np.empty_like(x)
    F.batch_filter_pdf(fa.filt, fa.cdf, fa.pdf, x, out)
    return out


# ----------------------------------------------------------------------------- profiles

def test_profiles_match_their_published_formulas_at_known_points():
    """Values from the formulas themselves (common practice): Mitchell-Netravali
    with B = C = 1/3 gives (6 - 2B)/6 = 8/9 at 0 and 0 at |t| = 2; Lanczos a = 2
    gives sinc(1) sinc(1/2) = 0 at x = 1; Blackman-Harris sums its
    coefficients at 0 (= 1.0) and is 0.00006 at the ends (Harris 1978)."""
    f = F.profile("mitchell_netravali", {"radius": 2.0})
    np.testing.assert_allclose(f([0.0, 1.999999999]), [8.0 / 9.0, 0.0], atol=1e-8)
    f = F.profile("lanczos", {"radius": 2.0, "lobes": 2.0})
    np.testing.assert_allclose(f([0.0, 1.0, 0.5]), [1.0, 0.0, np.sinc(0.5) * np.sinc(0.25)], atol=1e-15)
    f = F.profile("blackman_harris", {"radius": 2.0})
    np.testing.assert_allclose(f([0.0, 1.99999999]), [1.0, 0.00006], atol=1e-7)
    f = F.profile("gaussian", {"radius": 1.5, "sigma": 0.5})
    np.testing.assert_allclose(f([0.5, 1.6]), [math.exp(-0.5), 0.0], rtol=1e-15)


@pytest.mark.parametrize("name,params", ALL, ids=IDS)
def test_filter_integral_matches_scipy_quad(name, params):
    fa, full = _arrays(name, params)
    r = full["radius"]
    ref = _quad(_reference_profile(name, full), -r, r, r)
    assert fa.filt[4] == pytest.approx(ref, rel=1e-9)


def test_gaussian_integral_is_the_erf_closed_form():
    """∫_{-r}^{r} exp(-x²/2σ²) dx = σ √(2π) erf(r / (σ √2))."""
    fa, _ = _arrays("gaussian", {"radius": 1.5, "sigma": 0.5})
    assert fa.filt[4] == pytest.approx(0.5 * math.sqrt(2 * math.pi) * math.erf(1.5 / (0.5 * math.sqrt(2))),
                                       rel=1e-12)


# ----------------------------------------------------------------------------- sampler battery

@pytest.mark.parametrize("name,params", ALL, ids=IDS)
def test_filter_sampler_agrees_with_its_pdf(name, params):
    fa, full = _arrays(name, params)
    r = full["radius"]
    rng = np.random.default_rng(17)
    u = rng.random(200_000)
    x, p, w = _draw(fa, u)
    assert np.all(np.abs(x) <= r)
    # the pdf reported by the sampler is the separate pdf function
    np.testing.assert_allclose(p, _pdf(fa, x), rtol=0, atol=0)
    # normalisation of the pdf function (midpoint rule on its own constant pieces)
    n = 4096
    mid = -r + (np.arange(n) + 0.5) * 2 * r / n
    assert float(_pdf(fa, mid).sum() * 2 * r / n) == pytest.approx(1.0, abs=1e-12)
    # χ² of 64 bins (each a whole number of the table's bins) against the pdf
    edges = np.linspace(-r, r, 65)
    observed, _ = np.histogram(x, edges)
    fine = -r + (np.arange(64 * 64) + 0.5) * 2 * r / (64 * 64)
    expected = _pdf(fa, fine).reshape(64, 64).sum(axis=1) * (2 * r / (64 * 64)) * len(u)
    pval, _ = pooled_chi2_pvalue(observed, expected)
    assert pval > ALPHA
    # the weight is f / (p ∫f): its mean is 1 (the filter's normalisation), 4 sigma
    assert abs(w.mean() - 1.0) <= 4 * w.std(ddof=1) / math.sqrt(len(w)) + 1e-15


def test_the_chi_square_test_rejects_a_distorted_filter_sampler():
    """A test that cannot fail is a defect: u**1.05 instead of u must be rejected."""
    fa, full = _arrays("gaussian", {})
    r = full["radius"]
    u = np.random.default_rng(3).random(200_000) ** 1.05
    x, _, _ = _draw(fa, u)
    edges = np.linspace(-r, r, 65)
    observed, _ = np.histogram(x, edges)
    fine = -r + (np.arange(64 * 64) + 0.5) * 2 * r / (64 * 64)
    expected = _pdf(fa, fine).reshape(64, 64).sum(axis=1) * (2 * r / (64 * 64)) * len(u)
    assert pooled_chi2_pvalue(observed, expected)[0] < 1e-6


@pytest.mark.parametrize("spec,field", [
    ({"type": "cubic"}, "film.filter.type"), ({"type": "gaussian", "sigma": 0}, "film.filter.sigma"),
    ({"type": "box", "radius": 17}, "film.filter.radius"), ({"type": "lanczos", "B": 1}, "film.filter.B"),
])
def test_bad_filters_name_the_field(spec, field):
    with pytest.raises(SceneError, match=field.replace(".", r"\.")):
        F.resolve(spec)


# ----------------------------------------------------------------------------- renders

W, H = 16, 4
EDGE = 8.3          # film x of the emitter's left edge, pixels


def _scene(filt, emitter, environment=None, spp=128):
    """Orthographic camera, one world unit per pixel: film x = world x + 8."""
    doc = {"version": 1,
           "camera": {"projection": "orthographic", "position": [0, 0, 1], "look_at": [0, 0, 0],
                      "up": [0, 1, 0], "view_height": float(H)},
           "film": {"width": W, "height": H, "filter": filt},
           "objects": [], "lights": [],
           "render": {"spp": spp, "seed": 5, "max_bounces": 0}}
    if emitter:
        # emitter x from EDGE - 8 to far right, covering every row and the filter tails
        doc["objects"].append({"shape": "rectangle", "origin": [EDGE - 8.0, -40.0, 0.0],
                               "edge1": [60.0, 0.0, 0.0], "edge2": [0.0, 80.0, 0.0],
                               "emission": [1.0, 1.0, 1.0]})
    else:
        doc["objects"].append({"shape": "sphere", "center": [0, 0, 1000], "radius": 1.0})
    if environment is not None:
        doc["lights"].append({"type": "environment", "radiance": [environment] * 3})
    return refrender.load_scene(doc)


@pytest.mark.parametrize("name,params", ALL, ids=IDS)
def test_a_constant_scene_stays_constant(name, params):
    res = refrender.render(_scene({"type": name, **params}, False, environment=0.7, spp=256))
    mean, var = res.mean[..., 0], res.variance[..., 0]
    assert np.all(np.abs(mean - 0.7) <= 4 * np.sqrt(var) + 1e-12)
    if name == "box":       # weight 1 exactly: constant to the rounding of the sum
        np.testing.assert_allclose(mean, 0.7, rtol=1e-13)


def _edge_response(name, full, centre):
    """Expected pixel value: ∫_{EDGE - c}^{r} f1 / ∫ f1 (the y factor integrates out)."""
    r = full["radius"]
    a = EDGE - centre
    if name == "gaussian":
        s = full["sigma"] * math.sqrt(2.0)
        lo = min(max(a, -r), r)
        return (math.erf(r / s) - math.erf(lo / s)) / (2.0 * math.erf(r / s))
    g = _reference_profile(name, full)
    if a >= r:
        return 0.0
    return _quad(g, max(a, -r), r, r) / _quad(g, -r, r, r)


def _abs_mass(name, full, a):
    """Share of |f1| beyond offset a: ∫_a^r |f1| / ∫ |f1| (scipy quad)."""
    r = full["radius"]
    if a >= r:
        return 0.0
    f = _reference_profile(name, full)
    g = lambda x: abs(f(x))               # noqa: E731
    return _quad(g, max(a, -r), r, r) / _quad(g, -r, r, r)


@pytest.mark.parametrize("name,params", ALL, ids=IDS)
def test_a_sharp_edge_is_the_edge_convolved_with_the_filter(name, params):
    _, full = F.resolve({"type": name, **params})
    res = refrender.render(_scene({"type": name, **params}, True))
    # rows are independent estimates of the same column value: average them
    mean = res.mean[..., 0].mean(axis=0)
    se = np.sqrt(res.variance[..., 0].sum(axis=0)) / H
    expected = np.array([_edge_response(name, full, i + 0.5) for i in range(W)])
    ok = np.abs(mean - expected) <= 4 * se + 1e-12
    # a column whose samples never reached the emitter (or its end) has no spread:
    # accept it only if missing the rare region in all H * spp samples had a
    # probability of at least 1e-4 (q = mass of |f| beyond the edge, or before it)
    n = H * res.spp
    for i in np.nonzero(~ok & (se == 0))[0]:
        q = min(_abs_mass(name, full, EDGE - i - 0.5), 1.0 - _abs_mass(name, full, EDGE - i - 0.5))
        ok[i] = (1.0 - q) ** n >= 1e-4
    assert np.all(ok), (mean - expected) / np.maximum(se, 1e-300)
    # the test can fail: a box answer differs from a wide filter's by far more
    if name == "gaussian" and params:
        box = np.clip(np.arange(W) + 1.0 - EDGE, 0, 1)
        assert np.max(np.abs(mean - box) / np.maximum(se, 1e-300)) > 4


def test_the_variance_layer_matches_the_spread_of_independent_renders():
    """Each pixel's samples are independent (no splatting), so the reported
    variance of the mean equals the variance of the mean across independent
    seeds.  Pooled over P pixels and K renders, the ratio of empirical to
    reported variance has relative standard error sqrt(2 / ((K - 1) P))."""
    sc = _scene({"type": "mitchell_netravali"}, True, spp=32)
    K = 10
    means, vars_ = [], []
    for seed in range(K):
        r = refrender.render(sc, seed=100 + seed)
        means.append(r.mean[..., 0])
        vars_.append(r.variance[..., 0])
    means, vars_ = np.array(means), np.array(vars_)
    live = vars_.mean(axis=0) > 1e-12
    P = int(live.sum())
    assert P >= 24
    ratio = means.var(axis=0, ddof=1)[live].sum() / vars_.mean(axis=0)[live].sum()
    assert abs(ratio - 1.0) <= 4 * math.sqrt(2.0 / ((K - 1) * P))
