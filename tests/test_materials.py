"""Materials: the BSDF battery, Fresnel and GGX against published values, and
rendered furnace / Fresnel / slab checks.

Sources (published sources, named per check): Fresnel tables 4a/4b (Born & Wolf,
Principles of Optics; Hecht, Optics), metal constants 4c (Johnson & Christy
1972; Rakic 1995), GGX 3b (Walter et al. 2007; Heitz 2014), the chi-square
set-up 5d (common practice), furnace facts 3a (common practice).  Statistical
tolerances are 4 standard errors of the estimate; seeds are fixed.
"""
import math

import numpy as np
import pytest
from _stats import pooled_chi2_pvalue
from scipy import integrate

from refrender.materials import bsdf as B
from refrender.materials import batch
from refrender.materials.presets import METALS, metal, normal_reflectance
from refrender.materials.table import MAT_PARAMS

Z = np.array([0.0, 0.0, 1.0])


def _unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


def _wo(theta_deg, phi_deg=30.0):
    t, p = math.radians(theta_deg), math.radians(phi_deg)
    return np.array([math.sin(t) * math.cos(p), math.sin(t) * math.sin(p), math.cos(t)])


def _row(values):
    p = np.zeros(MAT_PARAMS)
    for k, v in values.items():
        p[k] = v
    return p


def _cond(alpha, n=(0.21, 0.62, 1.31), k=(3.272, 2.081, 1.849)):
    return _row({0: n[0], 1: n[1], 2: n[2], 3: k[0], 4: k[1], 5: k[2], 8: alpha[0], 9: alpha[1]})


def _unit_f(alpha):
    return _row({0: 1.0, 1: 1.0, 2: 1.0, 6: 1.0, 8: alpha, 9: alpha})


def _diel(eta, alpha):
    return _row({0: eta, 8: alpha[0], 9: alpha[1]})


def _mr(base, metallic, rough):
    return _row({0: base[0], 1: base[1], 2: base[2], 3: metallic, 4: rough})


#: (name, kind, params, front, wo) of every non-delta BSDF configuration
CASES = [
    ("lambertian", B.MAT_LAMBERTIAN, _row({0: 0.7, 1: 0.5, 2: 0.3}), True, _wo(40)),
    ("rough gold a=0.3 theta=30", B.MAT_ROUGH_METAL, _cond((0.3, 0.3)), True, _wo(30)),
    ("rough gold a=0.6 theta=75", B.MAT_ROUGH_METAL, _cond((0.6, 0.6)), True, _wo(75)),
    ("rough conductor aniso (0.15, 0.5)", B.MAT_ROUGH_METAL, _cond((0.15, 0.5)), True, _wo(50, 70)),
    ("rough dielectric 1.5 a=0.3 outside", B.MAT_ROUGH_GLASS, _diel(1.5, (0.3, 0.3)), True, _wo(35)),
    ("rough dielectric 1.5 a=0.5 inside", B.MAT_ROUGH_GLASS, _diel(1.5, (0.5, 0.5)), False, _wo(30)),
    ("rough dielectric 1.33 aniso inside grazing", B.MAT_ROUGH_GLASS, _diel(1.33, (0.2, 0.6)), False,
     _wo(70, 10)),
    ("metallic_roughness dielectric r=0.5", B.MAT_METALLIC_ROUGHNESS, _mr((0.8, 0.6, 0.4), 0.0, 0.5), True,
     _wo(45)),
    ("metallic_roughness metal r=0.6", B.MAT_METALLIC_ROUGHNESS, _mr((0.95, 0.64, 0.54), 1.0, 0.6), True,
     _wo(20)),
    ("metallic_roughness half r=0.9", B.MAT_METALLIC_ROUGHNESS, _mr((0.5, 0.9, 0.2), 0.5, 0.9), True,
     _wo(80)),
]
IDS = [c[0] for c in CASES]
ALPHA = 0.01
ALPHA_SIDAK = 1.0 - (1.0 - ALPHA) ** (1.0 / len(CASES))
N_THETA, N_PHI, SUB = 16, 24, 24
N_SAMPLES = 300_000


def _sample(case, n, seed):
    _, kind, p, front, wo = case
    u = np.random.default_rng(seed).random((n, 3))
    return batch.sample_many(kind, p, front, Z, wo, u)


def _pdf(case, dirs):
    _, kind, p, front, wo = case
    return batch.eval_many(kind, p, front, Z, wo, np.ascontiguousarray(dirs))


def _dirs(c, phi):
    s = np.sqrt(np.clip(1 - c * c, 0, 1))
    return np.stack([s * np.cos(phi), s * np.sin(phi), c], axis=1)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_pdf_integrates_to_the_fraction_of_valid_samples(case):
    """The pdf integrates over the sphere to the probability that the sampler
    returns a direction (samples falling below the surface are dropped):
    Monte Carlo with uniform sphere directions (4 sigma) against the
    binomial fraction of valid samples (4 sigma)."""
    rng = np.random.default_rng(3)
    n = 400_000
    u = rng.random((n, 2))
    d = _dirs(1.0 - 2.0 * u[:, 0], 2 * math.pi * u[:, 1])
    vals = 4 * math.pi * _pdf(case, d)[1]
    est, se = vals.mean(), vals.std(ddof=1) / math.sqrt(n)
    _, _, pdf, _ = _sample(case, 200_000, 4)
    frac = (pdf > 0).mean()
    se_f = math.sqrt(max(frac * (1 - frac), 1e-12) / 200_000)
    assert frac > 0.8
    assert abs(est - frac) <= 4.0 * math.hypot(se, se_f) + 1e-9, (
        f"{case[0]}: integral {est:.6f} +- {se:.2g}, valid fraction {frac:.6f}")


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_sampled_pdf_and_value_equal_the_functions(case):
    wi, f, pdf, delta = _sample(case, 50_000, 5)
    ok = pdf > 0
    assert not delta.any()
    assert np.allclose(np.linalg.norm(wi[ok], axis=1), 1.0, atol=1e-12)
    f2, p2 = _pdf(case, wi[ok])
    np.testing.assert_allclose(p2, pdf[ok], rtol=1e-9, err_msg=case[0])
    np.testing.assert_allclose(f2, f[ok], rtol=1e-9, atol=1e-300, err_msg=case[0])


def _expected_fractions(case):
    nc, nphi = N_THETA * SUB, N_PHI * SUB
    dc, dphi = 2.0 / nc, 2 * math.pi / nphi
    c = -1.0 + (np.arange(nc) + 0.5) * dc
    phi = (np.arange(nphi) + 0.5) * dphi
    C, P = np.meshgrid(c, phi, indexing="ij")
    p = _pdf(case, _dirs(C.ravel(), P.ravel()))[1].reshape(nc, nphi)
    return p.reshape(N_THETA, SUB, N_PHI, SUB).sum(axis=(1, 3)) * dc * dphi


def chi2_pvalue(case, distort=1.0, seed=11):
    """Pearson chi-square over (cos theta, phi) bins of the whole sphere,
    expected counts from the pdf function (24 x 24 midpoint sub-grid per bin),
    pooled to E >= 5 (Pearson's chi-square with expected counts >= 5, common practice); scipy.stats.chi2 as reference."""
    _, kind, p, front, wo = case
    u = np.random.default_rng(seed).random((N_SAMPLES, 3))
    u[:, 0] **= distort
    wi, _, pdf, _ = batch.sample_many(kind, p, front, Z, wo, u)
    wi = wi[pdf > 0]
    c = np.clip(wi[:, 2], -1, 1)
    phi = np.mod(np.arctan2(wi[:, 1], wi[:, 0]), 2 * math.pi)
    ic = np.minimum(((c + 1) / 2 * N_THETA).astype(int), N_THETA - 1)
    ip = np.minimum((phi / (2 * math.pi) * N_PHI).astype(int), N_PHI - 1)
    obs = np.zeros((N_THETA, N_PHI))
    np.add.at(obs, (ic, ip), 1)
    exp = (_expected_fractions(case) * N_SAMPLES).ravel()
    obs = obs.ravel()
    assert not (obs[exp == 0] > 0).any(), f"{case[0]}: samples where the pdf integrates to 0"
    return pooled_chi2_pvalue(obs, exp)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_chi_square(case):
    p, bins = chi2_pvalue(case)
    assert bins >= 20, f"{case[0]}: only {bins} pooled bins"
    assert p >= ALPHA_SIDAK, f"{case[0]}: chi-square p = {p:.3g} < {ALPHA_SIDAK:.3g}"


@pytest.mark.parametrize("name", ["rough gold a=0.3 theta=30", "rough dielectric 1.5 a=0.3 outside",
                                  "metallic_roughness dielectric r=0.5"])
def test_chi_square_has_power(name):
    """Testing the test: u1 -> u1**1.1 with the pdf unchanged must be rejected."""
    case = next(c for c in CASES if c[0] == name)
    assert chi2_pvalue(case, distort=1.1)[0] < ALPHA_SIDAK


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_reciprocity(case):
    """f(wo, wi) = f(wi, wo) for reflection; for refraction the generalised form
    f(wo, wi) / n_o^2 = f(wi, wo) / n_i^2 of radiance BTDFs (Veach 1997 thesis, ch. 5, from memory)."""
    _, kind, p, front, _ = case
    rng = np.random.default_rng(8)
    a = _dirs(rng.uniform(0.02, 1, 300), rng.uniform(0, 2 * math.pi, 300))
    b = _dirs(rng.uniform(0.02, 1, 300), rng.uniform(0, 2 * math.pi, 300))
    fab = np.array([batch.eval_many(kind, p, front, Z, a[j], b[j:j + 1])[0][0] for j in range(300)])
    fba = np.array([batch.eval_many(kind, p, front, Z, b[j], a[j:j + 1])[0][0] for j in range(300)])
    assert fab.max() > 0
    np.testing.assert_allclose(fab, fba, rtol=1e-10, atol=1e-300)
    if kind == B.MAT_ROUGH_GLASS:
        eta_o_side = p[0] if front else 1.0 / p[0]      # n_other / n_wo
        below = b * [1, 1, -1]
        # wo = a on this side, wi = below on the other; reversed: wo = -below seen from the
        # other side (its normal points the other way: flip z of both)
        f1 = np.array([batch.eval_many(kind, p, front, Z, a[j], below[j:j + 1])[0][0, 0]
                       for j in range(300)])
        f2 = np.array([batch.eval_many(kind, p, not front, Z, b[j], (a[j:j + 1] * [1, 1, -1]))[0][0, 0]
                       for j in range(300)])
        assert f1.max() > 0
        np.testing.assert_allclose(f1 * eta_o_side ** 2, f2, rtol=1e-9, atol=1e-300)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_directional_albedo_at_most_one(case):
    """E(o) = integral of f |cos| <= 1 for every outgoing angle (energy); for
    refraction the flux form (radiance weight times eta^2) is bounded."""
    _, kind, p, front, _ = case
    for theta in (0.0, 20.0, 45.0, 65.0, 80.0, 88.0):
        wo = _wo(theta, 17.0)
        u = np.random.default_rng(int(theta) + 1).random((100_000, 3))
        wi, f, pdf, _ = batch.sample_many(kind, p, front, Z, wo, u)
        w = np.zeros_like(f)
        ok = pdf > 0
        w[ok] = f[ok] * np.abs(wi[ok, 2:3]) / pdf[ok, None]
        if kind == B.MAT_ROUGH_GLASS:
            eta = p[0] if front else 1.0 / p[0]
            w[wi[:, 2] < 0] *= eta * eta
        est = w.mean(axis=0)
        se = w.std(axis=0, ddof=1) / math.sqrt(len(w))
        assert (est <= 1.0 + 4.0 * se + 1e-12).all(), f"{case[0]} theta={theta}: albedo {est} +- {se}"


def test_delta_lobes_have_zero_eval_and_pdf():
    wo = _wo(30)
    u = np.random.default_rng(0).random((1000, 3))
    for kind, p in ((B.MAT_MIRROR, _row({0: 0.9, 1: 0.8, 2: 0.7})),
                    (B.MAT_SMOOTH_METAL, _cond((0, 0))), (B.MAT_SMOOTH_GLASS, _row({0: 1.5}))):
        wi, f, pdf, delta = batch.sample_many(kind, p, True, Z, wo, u)
        assert delta.all() and (pdf > 0).all()
        f2, p2 = batch.eval_many(kind, p, True, Z, wo, wi)
        assert (f2 == 0).all() and (p2 == 0).all()
        assert B.bsdf_is_delta(kind)


def test_smooth_dielectric_sampling_weights():
    """Reflection with probability R(theta), weight 1; refraction weight 1/eta^2
    (radiance), direction by Snell's law; total internal reflection from inside
    beyond the critical angle 41.8103 deg (Born & Wolf, Principles of Optics, Fresnel formulae; Hecht, Optics)."""
    p = _row({0: 1.5})
    wo = _wo(45, 0)
    u = np.random.default_rng(1).random((200_000, 3))
    wi, f, pdf, _ = batch.sample_many(B.MAT_SMOOTH_GLASS, p, True, Z, wo, u)
    refl = wi[:, 2] > 0
    frac = refl.mean()
    assert abs(frac - 0.0502399) <= 4 * math.sqrt(0.05 * 0.95 / len(u))
    weight = f[:, 0] * np.abs(wi[:, 2]) / pdf
    np.testing.assert_allclose(weight[refl], 1.0, rtol=1e-12)
    np.testing.assert_allclose(weight[~refl], 1 / 1.5 ** 2, rtol=1e-12)
    sin_t = np.hypot(wi[~refl, 0], wi[~refl, 1])
    np.testing.assert_allclose(sin_t, math.sin(math.radians(45)) / 1.5, rtol=1e-12)
    for theta, tir in ((41.7, False), (41.9, True)):
        wi, *_ = batch.sample_many(B.MAT_SMOOTH_GLASS, p, False, Z, _wo(theta, 0), u[:2000])
        assert (wi[:, 2] > 0).all() == tir


# --- Fresnel against the tables ------------------------------------------------

def _R(theta_deg, eta, k=0.0, conductor=False):
    c = np.array([math.cos(math.radians(theta_deg))])
    return float(batch.fresnel_many(c, eta, k, conductor)[0])


@pytest.mark.parametrize("theta,expected", [
    (0, 0.0400000), (30, 0.0415226), (45, 0.0502399), (60, 0.0891867), (80, 0.387704),
    (89, 0.904185), (56.3099, 0.0739645)])   # Born & Wolf, Principles of Optics, Fresnel formulae; Hecht, Optics (Born & Wolf; Hecht), n = 1.5
def test_fresnel_dielectric_table(theta, expected):
    assert _R(theta, 1.5) == pytest.approx(expected, abs=6e-7)
    assert _R(theta, 1.5, 0.0, True) == pytest.approx(_R(theta, 1.5), rel=1e-12)   # k = 0 conductor


@pytest.mark.parametrize("theta,expected", [(20, 0.0417285), (30, 0.0551902), (40, 0.245291)])
def test_fresnel_from_inside_table(theta, expected):
    """Born & Wolf, Principles of Optics, Fresnel formulae; Hecht, Optics: glass -> air, and TIR beyond 41.8103 deg."""
    assert _R(theta, 1 / 1.5) == pytest.approx(expected, abs=6e-7)
    assert _R(41.82, 1 / 1.5) == 1.0


def test_slab_transmittance_formula():
    """Incoherent slab at normal incidence: T = (1 - R)/(1 + R) = 0.923077 (4a)."""
    R = _R(0, 1.5)
    assert (1 - R) / (1 + R) == pytest.approx(0.923077, abs=6e-7)


@pytest.mark.parametrize("name,n,k,table", [
    ("Au", 0.21, 3.272, (0.928806, 0.925018, 0.939008, 0.991875)),
    ("Ag", 0.06, 4.152, (0.986348, 0.985007, 0.984781, 0.997756)),
    ("Al", 1.366, 7.4052, (0.905260, 0.893059, 0.840596, 0.954034))])
def test_fresnel_conductor_oblique_table(name, n, k, table):
    """Born & Wolf, Principles of Optics, optics of metals; Johnson & Christy, Phys. Rev. B 6, 4370 (1972); Rakić, Appl. Opt. 34, 4755 (1995): exact conductor Fresnel at 45, 60, 80, 89 deg."""
    for theta, expected in zip((45, 60, 80, 89), table):
        assert _R(theta, n, k, True) == pytest.approx(expected, abs=6e-7), (name, theta)


R0_TABLE = {   # Johnson & Christy, Phys. Rev. B 6, 4370 (1972); Rakić, Appl. Opt. 34, 4755 (1995), tabulated wavelengths nearest 630 / 532 / 465 nm
    "gold": (0.930978, 0.643420, 0.401478), "silver": (0.986930, 0.983541, 0.978572),
    "copper": (0.899683, 0.591486, 0.554676), "aluminium": (0.909589, 0.917739, 0.919960)}


@pytest.mark.parametrize("name", sorted(METALS))
def test_metal_presets_reproduce_published_r0(name):
    n, k = metal(name)
    np.testing.assert_allclose(normal_reflectance(n, k), R0_TABLE[name], atol=6e-7)
    for c in range(3):
        assert _R(0, n[c], k[c], True) == pytest.approx(R0_TABLE[name][c], abs=6e-7)


# --- GGX against section 3b ----------------------------------------------------------

def _ggx(m, o, i, a, ay=None):
    ay = a if ay is None else ay
    f = lambda v: np.ascontiguousarray(np.atleast_2d(v), dtype=float)
    return batch.ggx_many(f(m), f(o), f(i), a, ay)


@pytest.mark.parametrize("alpha,theta,lam,g1", [
    (0.1, 30, 8.32640e-4, 0.999168), (0.1, 80, 0.0748118, 0.930395), (0.5, 60, 0.161438, 0.861002),
    (0.5, 80, 1.00340, 0.499151), (1.0, 60, 0.5, 0.666667), (1.0, 89, 28.1493, 0.0343061)])
def test_ggx_lambda_and_g1_table(alpha, theta, lam, g1):
    """Walter, Marschner, Li & Torrance 2007, Microfacet Models for Refraction through Rough Surfaces; Heitz 2014, Understanding the Masking-Shadowing Function in Microfacet-Based BRDFs, JCGT 3(2) (Heitz 2014): Lambda and G1 = 1/(1 + Lambda)."""
    o = _wo(theta, 0)
    out = _ggx(Z, o, Z, alpha)[0]
    assert out[1] == pytest.approx(g1, rel=2e-6)
    assert 1.0 / out[1] - 1.0 == pytest.approx(lam, rel=2e-5)
    assert out[2] == pytest.approx(1.0 / (1.0 + lam), rel=2e-5)      # G2(o, n): Lambda(n) = 0


@pytest.mark.parametrize("alpha,peak", [(0.1, 31.8310), (0.5, 1.27324), (1.0, 0.318310)])
def test_ggx_peak_and_projected_area(alpha, peak):
    """D(n) = 1/(pi alpha^2) and the integral of D cos over the hemisphere is 1 (3b; scipy quad)."""
    assert _ggx(Z, Z, Z, alpha)[0, 0] == pytest.approx(peak, rel=2e-6)

    def integrand(t):
        return float(_ggx([math.sin(t), 0, math.cos(t)], Z, Z, alpha)[0, 0]) * math.cos(t) * math.sin(t)
    val = 2 * math.pi * integrate.quad(integrand, 0, math.pi / 2, epsabs=1e-12, limit=200,
                                       points=[math.atan(alpha)])[0]
    assert val == pytest.approx(1.0, abs=1e-8)


@pytest.mark.parametrize("ax,ay,theta", [(0.5, 0.5, 60), (1.0, 1.0, 0), (0.2, 0.7, 45)])
def test_weak_white_furnace(ax, ay, theta):
    """Heitz 2014: integral of G1(o) max(0, o.m) D(m) dm = cos(theta_o) (3b), by
    scipy dblquad over microfacet normals; the visible-normal pdf D_o integrates to 1."""
    o = _wo(theta, 25)

    def f(phi, t):
        m = [math.sin(t) * math.cos(phi), math.sin(t) * math.sin(phi), math.cos(t)]
        return float(_ggx(m, o, Z, ax, ay)[0, 3]) * math.sin(t)
    val, err = integrate.dblquad(f, 0, math.pi / 2, 0, 2 * math.pi, epsabs=1e-9, epsrel=1e-9)
    assert val == pytest.approx(1.0, abs=1e-6)


# --- rendered checks ---------------------------------------------------------------

def _render(scene, **kw):
    """Render; returns (mean over pixels per channel, its standard error per channel)."""
    from refrender import load_scene, render
    res = render(load_scene(scene), **kw)
    assert res.stats["nonfinite_samples"] == 0
    n = res.mean.shape[0] * res.mean.shape[1]
    mean = res.mean.reshape(-1, 3).mean(axis=0)
    se = np.sqrt(res.variance.reshape(-1, 3).sum(axis=0)) / n
    return mean, se


def _ortho_at(theta_deg, target=(0.0, 0.0, 0.0), dist=2.0, view=0.01):
    t = math.radians(theta_deg)
    pos = np.asarray(target) + dist * np.array([math.sin(t), 0.0, math.cos(t)])
    return {"projection": "orthographic", "position": list(pos), "look_at": list(target),
            "up": [0.0, 1.0, 0.0], "view_height": view}


def _plane(material, z=0.0, half=100.0, up=True):
    e1, e2 = ([2 * half, 0, 0], [0, 2 * half, 0]) if up else ([0, 2 * half, 0], [2 * half, 0, 0])
    o = [-half, -half, z]
    d = {"shape": "rectangle", "origin": o, "edge1": e1, "edge2": e2}
    if material:
        d["material"] = material
    return d


def _doc(camera, materials, objects, env=1.0, spp=1024, **render):
    doc = {"version": 1, "camera": camera, "film": {"width": 4, "height": 4},
           "materials": materials, "objects": objects, "render": {"spp": spp, "seed": 3, **render}}
    if env is not None:
        doc["lights"] = [{"type": "environment", "radiance": [env] * 3}]
    return doc


def _assert_close(mean, se, expected, what):
    expected = np.broadcast_to(np.asarray(expected, float), mean.shape)
    tol = 4.0 * se + 1e-9
    assert (np.abs(mean - expected) <= tol).all(), (
        f"{what}: measured {mean} +- {se}, expected {expected}")


@pytest.mark.parametrize("strategy", ["mis", "nee", "bsdf"])
@pytest.mark.parametrize("material", [
    {"type": "glass", "ior": 1.5}, {"type": "glass", "ior": 2.4, "exterior_ior": 1.1},
    {"type": "lambertian", "albedo": [1, 1, 1]}], ids=["glass 1.5", "dense glass in a medium", "white diffuse"])
def test_objects_invisible_in_the_furnace(material, strategy):
    """A smooth dielectric sphere (any index) and a white diffuse sphere in a uniform
    environment of radiance 1: every pixel equals 1 (diffuse white furnace, common practice)."""
    cam = {"projection": "orthographic", "position": [0, 0, 3], "look_at": [0, 0, 0], "view_height": 1.4}
    doc = _doc(cam, {"m": material}, [{"shape": "sphere", "center": [0, 0, 0], "radius": 1.0,
                                       "material": "m"}], spp=512)
    from refrender import load_scene, render
    res = render(load_scene(doc), strategy=strategy)
    se = np.sqrt(res.variance)
    assert (np.abs(res.mean - 1.0) <= 4.0 * se + 1e-12).all(), (res.mean.min(), res.mean.max())
    assert res.stats["rays"] >= 2 * res.spp * 16      # every path did scatter on the sphere


E_HC = {(0.1, 0): 0.988304, (0.1, 45): 0.981685, (0.1, 80): 0.895519, (0.5, 0): 0.687849,
        (0.5, 45): 0.682774, (0.5, 80): 0.805323, (1.0, 0): 0.306853, (1.0, 45): 0.376775,
        (1.0, 80): 0.668186}
E_SEP = {(0.5, 45): 0.678451, (0.5, 80): 0.746902, (1.0, 45): 0.359500, (1.0, 80): 0.522904}


@pytest.mark.parametrize("alpha,theta", sorted(E_HC))
def test_strong_furnace_rough_conductor(alpha, theta):
    """Unit-Fresnel rough conductor (height-correlated G2) in a furnace of radiance 1,
    seen at theta_o by an orthographic camera: the pixel is the single-scattering
    directional albedo E(o) of Walter, Marschner, Li & Torrance 2007, Microfacet Models for Refraction through Rough Surfaces; Heitz 2014, Understanding the Masking-Shadowing Function in Microfacet-Based BRDFs, JCGT 3(2)."""
    doc = _doc(_ortho_at(theta), {"m": {"type": "metal", "f0": [1, 1, 1],
                                        "ggx_alpha": alpha}}, [_plane("m")], spp=4096)
    mean, se = _render(doc)
    assert se[0] <= 0.01 * E_HC[alpha, theta]
    _assert_close(mean, se, E_HC[alpha, theta], f"alpha={alpha} theta={theta}")


@pytest.mark.parametrize("alpha,theta", sorted(E_SEP))
def test_strong_furnace_metallic_roughness_white_metal(alpha, theta):
    """glTF metallic-roughness with metallic 1 and base colour 1 has F = 1 and the
    specification's separable Smith G: its furnace pixel is the separable E(o) of
    Walter, Marschner, Li & Torrance 2007, Microfacet Models for Refraction through Rough Surfaces; Heitz 2014, Understanding the Masking-Shadowing Function in Microfacet-Based BRDFs, JCGT 3(2) (roughness = sqrt(alpha))."""
    doc = _doc(_ortho_at(theta), {"m": {"type": "metallic_roughness", "base_color": [1, 1, 1],
                                        "metallic": 1.0, "roughness": math.sqrt(alpha)}},
               [_plane("m")], spp=4096)
    mean, se = _render(doc)
    _assert_close(mean, se, E_SEP[alpha, theta], f"alpha={alpha} theta={theta}")


@pytest.mark.parametrize("theta,expected", [(0.0, 0.04), (45.0, 0.0502399), (56.3099, 0.0739645)])
def test_rendered_fresnel_of_glass(theta, expected):
    """A glass surface (n = 1.5) over a black absorber, furnace of radiance 1 above:
    the pixel is R(theta) at 0 deg, 45 deg and Brewster's angle (Born & Wolf; Hecht;
    Born & Wolf, Principles of Optics, Fresnel formulae; Hecht, Optics)."""
    doc = _doc(_ortho_at(theta), {"g": {"type": "glass", "ior": 1.5}},
               [_plane("g"), _plane(None, z=-0.01)], spp=16384)
    mean, se = _render(doc)
    assert se[0] < 0.03 * expected
    _assert_close(mean, se, expected, f"R({theta})")


def test_rendered_slab_transmittance():
    """Glass slab (n = 1.5) between a camera and an emitter of radiance 1 at normal
    incidence: the pixel is (1 - R)/(1 + R) = 0.923077 (incoherent multiple
    reflections; Born & Wolf, Principles of Optics, Fresnel formulae; Hecht, Optics)."""
    cam = {"projection": "orthographic", "position": [0, 0, 1], "look_at": [0, 0, 0],
           "view_height": 0.01}
    emitter = _plane(None, z=-0.5)
    emitter["emission"] = [1.0, 1.0, 1.0]
    doc = _doc(cam, {"g": {"type": "glass", "ior": 1.5}},
               [_plane("g", z=0.0), _plane("g", z=-0.1, up=False), emitter], env=None, spp=16384)
    mean, se = _render(doc)
    assert se[0] < 0.002
    _assert_close(mean, se, 0.923077, "slab T")


@pytest.mark.parametrize("name", sorted(R0_TABLE))
def test_rendered_metal_presets_show_r0(name):
    """A smooth preset conductor seen at normal incidence in a furnace of radiance 1
    shows R0 per channel (Johnson & Christy, Phys. Rev. B 6, 4370 (1972); Rakić, Appl. Opt. 34, 4755 (1995))."""
    doc = _doc(_ortho_at(0.0), {"m": {"type": "metal", "preset": name}}, [_plane("m")], spp=4)
    mean, se = _render(doc)
    np.testing.assert_allclose(mean, R0_TABLE[name], atol=6e-7)


def test_metallic_roughness_emissive_is_emission():
    """glTF emissiveFactor (times emissive_strength) is the emitted radiance."""
    doc = _doc(_ortho_at(0.0), {"m": {"type": "metallic_roughness", "base_color": [0, 0, 0],
                                      "metallic": 0.0, "emissive": [0.5, 0.25, 1.0],
                                      "emissive_strength": 2.0}},
               [_plane("m")], env=None, spp=64)
    mean, se = _render(doc, max_bounces=0)
    np.testing.assert_allclose(mean, [1.0, 0.5, 2.0], rtol=1e-12)


def test_rough_dielectric_strategies_agree():
    """Light reaching the camera through a rough glass sheet from an emitter behind it:
    light sampling through the transmission lobe, BSDF sampling and MIS estimate the
    same integral (each pair within 4 combined sigma)."""
    cam = {"projection": "perspective", "position": [0, 0, 2], "look_at": [0, 0, 0], "fov_y": 30}
    disk = {"shape": "disk", "center": [0.2, 0, -0.6], "normal": [0, 0, 1], "radius": 0.3,
            "emission": [4.0, 4.0, 4.0]}
    sheet = {"shape": "rectangle", "origin": [-1, -1, 0], "edge1": [2, 0, 0], "edge2": [0, 2, 0],
             "material": "g"}
    doc = _doc(cam, {"g": {"type": "glass", "ior": 1.5, "ggx_alpha": 0.3}}, [sheet, disk],
               env=None, spp=4096, max_bounces=1)
    vals = [_render(doc, strategy=s) for s in ("mis", "nee", "bsdf")]
    for a in range(3):
        for b in range(a):
            (ma, sa), (mb, sb) = vals[a], vals[b]
            assert (np.abs(ma - mb) <= 4.0 * np.hypot(sa, sb)).all(), (ma, mb, sa, sb)
    assert vals[0][0][0] > 10 * vals[0][1][0]       # a real signal, not zero = zero
