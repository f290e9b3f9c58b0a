"""The sampler test battery, plus thresholds, alias tables and environment maps.

Every sampler of the renderer is registered once in
refrender/sampling/registry.py and goes through the same three tests
(Pearson's chi-square with expected counts >= 5, common practice, common practice):

1. normalisation: the pdf function integrates to 1 over its domain
   (Monte Carlo over the support cap with uniform directions; tolerance
   4 standard errors of that estimate);
2. consistency: the pdf a sampler returns equals the pdf function at the
   sampled direction (up to recomputation rounding, 1e-9 relative: a wrong
   pdf is off by O(1));
3. goodness of fit: Pearson chi-square over (cos theta, phi) bins about the
   sampler's axis (scipy.stats.chi2 as the reference), expected counts from
   the pdf function by a 128 x 128 midpoint sub-grid per bin (48 x 48 left a
   quadrature error above the counting noise for the peaked environment map), no sample where
   the pdf function is 0 (support), bins pooled to
   E >= 5 (Cochran's rule, from memory), Sidak-corrected alpha = 0.01 over
   the whole battery, fixed seeds.

A deliberately broken sampler (u1 -> u1**1.1, pdf unchanged) must fail (3).
"""
import math

import numpy as np
import pytest
from scipy import stats

from _stats import pooled_chi2_pvalue

from refrender.sampling import registry as R

CASES = R.registry()
IDS = [c.name for c in CASES]
ALPHA = 0.01
#: chi-square tests in this file: the battery, plus the alias-table test
N_CHI2 = len(CASES) + 1
ALPHA_SIDAK = 1.0 - (1.0 - ALPHA) ** (1.0 / N_CHI2)
N_THETA, N_PHI, SUB = 10, 20, 128
N_SAMPLES = 200_000


def _frame(axis):
    a = np.asarray(axis, float)
    t = np.cross(a, [1.0, 0, 0] if abs(a[0]) < 0.9 else [0, 1.0, 0])
    t /= np.linalg.norm(t)
    return t, np.cross(a, t), a


def _coords(case, d):
    t, b, a = _frame(case.axis)
    c = np.clip(d @ a, -1.0, 1.0)
    phi = np.mod(np.arctan2(d @ b, d @ t), 2 * math.pi)
    return c, phi


def _dirs(case, c, phi):
    t, b, a = _frame(case.axis)
    s = np.sqrt(np.clip(1 - c * c, 0, 1))
    return (s * np.cos(phi))[:, None] * t + (s * np.sin(phi))[:, None] * b + c[:, None] * a


def expected_fractions(case):
    """Integral of the pdf function over each (cos theta, phi) bin (midpoint sub-grid)."""
    c0 = case.cos_min
    nc, nphi = N_THETA * SUB, N_PHI * SUB
    dc = (1.0 - c0) / nc
    dphi = 2 * math.pi / nphi
    c = c0 + (np.arange(nc) + 0.5) * dc
    phi = (np.arange(nphi) + 0.5) * dphi
    C, P = np.meshgrid(c, phi, indexing="ij")
    p = case.pdf(_dirs(case, C.ravel(), P.ravel())).reshape(nc, nphi)
    return p.reshape(N_THETA, SUB, N_PHI, SUB).sum(axis=(1, 3)) * dc * dphi


def chi2_pvalue(case, distort=1.0, seed=11):
    """p-value of the chi-square test; raises AssertionError on a support violation."""
    rng = np.random.default_rng(seed)
    d, pdf = case.sample(rng.random((N_SAMPLES, 3)), distort)
    ok = pdf > 0
    d = d[ok]
    c, phi = _coords(case, d)
    assert (c >= case.cos_min).all(), f"{case.name}: sample outside the declared support"
    ic = np.minimum(((c - case.cos_min) / (1 - case.cos_min) * N_THETA).astype(int), N_THETA - 1)
    ip = np.minimum((phi / (2 * math.pi) * N_PHI).astype(int), N_PHI - 1)
    obs = np.zeros((N_THETA, N_PHI))
    np.add.at(obs, (ic, ip), 1)
    frac = expected_fractions(case)
    exp = frac * ok.sum()
    obs, exp = obs.ravel(), exp.ravel()
    # support: no sample where the pdf function is 0 (a bin whose sub-grid misses a thin
    # sliver of the support can have E = 0 and still rightly hold samples; pooling absorbs it)
    assert (case.pdf(d) > 0).all(), f"{case.name}: samples where the pdf is 0"
    return pooled_chi2_pvalue(obs, exp)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_pdf_integrates_to_one(case):
    """Monte Carlo over the support cap {cos >= cos_min} with uniform directions."""
    rng = np.random.default_rng(3)
    n = 400_000
    u = rng.random((n, 2))
    c = 1.0 - u[:, 0] * (1.0 - case.cos_min)
    phi = 2 * math.pi * u[:, 1]
    cap = 2 * math.pi * (1.0 - case.cos_min)
    vals = cap * case.pdf(_dirs(case, c, phi))
    est = vals.mean()
    se = vals.std(ddof=1) / math.sqrt(n)
    assert abs(est - 1.0) <= 4.0 * se + 1e-9, f"{case.name}: integral {est:.6f} +- {se:.2g}"


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_sampler_pdf_equals_pdf_function(case):
    rng = np.random.default_rng(5)
    d, p = case.sample(rng.random((50_000, 3)))
    assert np.isfinite(d).all() and np.isfinite(p).all()
    assert np.allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-12)
    assert (p > 0).mean() > 0.999, f"{case.name}: too many failed samples"
    q = case.pdf(d[p > 0])
    np.testing.assert_allclose(q, p[p > 0], rtol=1e-9, err_msg=case.name)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_chi_square(case):
    p, bins = chi2_pvalue(case)
    assert bins >= 20, f"{case.name}: only {bins} pooled bins; the test would have no power"
    assert p >= ALPHA_SIDAK, f"{case.name}: chi-square p = {p:.3g} < {ALPHA_SIDAK:.3g}"


@pytest.mark.parametrize("name", ["triangle solid_angle", "rectangle solid_angle",
                                  "sphere solid_angle", "environment image", "diffuse BSDF",
                                  "distant disc 40 deg"])
def test_broken_sampler_fails_the_battery(name):
    """Testing the test: u1 -> u1**1.1 with the pdf unchanged must be rejected
    (Arvo 1995, Stratified Sampling of Spherical Triangles, SIGGRAPH '95 reports p ~ 1e-299 for the triangle)."""
    case = next(c for c in CASES if c.name == name)
    p, _ = chi2_pvalue(case, distort=1.1)
    assert p < ALPHA_SIDAK


def test_chi_square_rejects_a_wrong_pdf():
    """The same samples judged against another pdf (Pearson's chi-square with expected counts >= 5, common practice: cosine samples
    against the uniform hemisphere) are rejected."""
    diffuse = next(c for c in CASES if c.name == "diffuse BSDF")
    wrong = R.SamplerCase("wrong", diffuse.sample_fn,
                          lambda dirs, pp: pp.__setitem__(slice(None), (dirs @ diffuse.axis > 0) / (2 * math.pi)),
                          diffuse.axis, -1.0)
    p, _ = chi2_pvalue(wrong)
    assert p < ALPHA_SIDAK


# --- solid angles against the published table (Ureña, Fajardo & King 2013, An Area-Preserving Parametrization for Spherical Rectangles; van Oosterom & Strackee 1983, IEEE Trans. Biomed. Eng. 30(2)) -----------------

def _tri_g(a, b, c):
    a, b, c = (np.asarray(v, float) for v in (a, b, c))
    return np.concatenate([a, b - a, c - a])


@pytest.mark.parametrize("verts,omega", [
    (((1, 0, 0), (0, 1, 0), (0, 0, 1)), 1.57080),
    (((0, 0, 1), (1, 0, 1), (0, 1, 1)), 0.339837),
    (((1, -1, 2), (2, 1, 2.5), (-1, 0.5, 1.5)), 0.513482),
    (((0.2, 0.1, 1), (3, 0, 1), (0, 4, 1)), 0.810470),
])
def test_triangle_solid_angle_table(verts, omega):
    """van Oosterom & Strackee 1983 values tabulated in Ureña, Fajardo & King 2013, An Area-Preserving Parametrization for Spherical Rectangles; van Oosterom & Strackee 1983, IEEE Trans. Biomed. Eng. 30(2)."""
    from refrender.sampling.lights import _tri_setup
    res = _tri_setup(_tri_g(*verts), 0.0, 0.0, 0.0)
    assert res[0] and res[1] == pytest.approx(omega, rel=5e-6)


@pytest.mark.parametrize("rect,c,omega", [
    ((0, 1, 0, 1), 1.0, 0.523599), ((0, 2, 0, 1), 1.0, 0.684719),
    ((-0.5, 0.5, -0.5, 0.5), 1.0, 0.805432), ((-0.5, 0.5, -0.5, 0.5), 0.5, 2.09440),
    ((-1, 1, -0.5, 0.5), 0.5, 2.73888), ((-0.3, 0.7, -0.2, 0.8), 1.0, 0.715951),
    ((1, 2, 1, 3), 1.0, 0.116763),
])
def test_rectangle_solid_angle_table(rect, c, omega):
    """Urena et al. 2013 spherical excess against Ureña, Fajardo & King 2013, An Area-Preserving Parametrization for Spherical Rectangles; van Oosterom & Strackee 1983, IEEE Trans. Biomed. Eng. 30(2)."""
    from refrender.sampling.lights import _rect_setup
    x1, x2, y1, y2 = rect
    g = np.array([x1, y1, c, x2 - x1, 0, 0, 0, y2 - y1, 0], float)
    res = _rect_setup(g, 0.0, 0.0, 0.0)
    assert res[0] and res[1] == pytest.approx(omega, rel=5e-6)


# --- fallback thresholds: both sides of each ------------------------------------------------

def _pdf_pair(kind, g, area, x, seed=0):
    """(sampler pdf, pdf function, area-converted pdf) at one sample."""
    from refrender.sampling.lights import (MODE_SOLID_ANGLE, area_to_solid_angle, pdf_emitter,
                                           sample_emitter)
    u1, u2 = np.random.default_rng(seed).random(2)
    yx, yy, yz, nx, ny, nz, p = sample_emitter(kind, g, area, MODE_SOLID_ANGLE, *x, u1, u2)
    q = pdf_emitter(kind, g, area, MODE_SOLID_ANGLE, *x, yx, yy, yz, nx, ny, nz)
    a = area_to_solid_angle(1.0 / area, *x, yx, yy, yz, nx, ny, nz)
    return p, q, a


def test_sphere_inside_threshold():
    """Cone sampling needs |x - c|^2 > r^2 (1 + 1e-6); at or inside: area sampling."""
    from refrender.geometry.intersect import SPHERE
    from refrender.sampling.lights import SPHERE_INSIDE_MARGIN, uses_solid_angle
    g = np.array([0, 0, 0, 1.0, 0, 0, 0, 0, 0])
    out = math.sqrt(1 + 2 * SPHERE_INSIDE_MARGIN)
    ins = math.sqrt(1 + 0.5 * SPHERE_INSIDE_MARGIN)
    assert uses_solid_angle(SPHERE, g, 1, out, 0.0, 0.0)
    assert not uses_solid_angle(SPHERE, g, 1, ins, 0.0, 0.0)
    assert not uses_solid_angle(SPHERE, g, 1, 0.2, 0.0, 0.0)
    p, q, a = _pdf_pair(SPHERE, g, 4 * math.pi, (ins, 0.0, 0.0))
    assert p == q == a


@pytest.mark.parametrize("kind_name", ["rectangle", "triangle"])
def test_min_solid_angle_threshold(kind_name):
    """Below 1e-6 sr the planar solid-angle samplers fall back to area sampling."""
    from refrender.geometry.intersect import RECTANGLE, TRIANGLE
    from refrender.sampling import lights as Lm
    kind = RECTANGLE if kind_name == "rectangle" else TRIANGLE
    limit = Lm.RECT_MIN_SOLID_ANGLE if kind == RECTANGLE else Lm.TRI_MIN_SOLID_ANGLE
    side = 1e-3
    area = side * side * (1.0 if kind == RECTANGLE else 0.5)
    g = np.array([0, 0, 0, side, 0, 0, 0, side, 0], float)
    omega_at = lambda z: (Lm._rect_setup if kind == RECTANGLE else Lm._tri_setup)(g, 0.0, 0.0, z)[1]
    # solid angle ~ area / z^2: distances giving 2x and 0.5x the threshold
    z_hi = math.sqrt(area / (2 * limit))
    z_lo = math.sqrt(area / (0.5 * limit))
    assert omega_at(z_hi) > limit > omega_at(z_lo)
    assert Lm.uses_solid_angle(kind, g, 1, 0.0, 0.0, z_hi)
    assert not Lm.uses_solid_angle(kind, g, 1, 0.0, 0.0, z_lo)
    p, q, a = _pdf_pair(kind, g, area, (0.0, 0.0, z_hi))
    assert p == q == pytest.approx(1.0 / omega_at(z_hi), rel=1e-12)
    p, q, a = _pdf_pair(kind, g, area, (0.0, 0.0, z_lo))
    assert p == q == a


@pytest.mark.parametrize("kind_name", ["rectangle", "triangle"])
def test_grazing_threshold(kind_name):
    """Within 1e-7 (longest) edge lengths of the plane: area sampling."""
    from refrender.geometry.intersect import RECTANGLE, TRIANGLE
    from refrender.sampling import lights as Lm
    kind = RECTANGLE if kind_name == "rectangle" else TRIANGLE
    g = np.array([0, 0, 0, 1.0, 0, 0, 0, 1.0, 0], float)
    lmax = 1.0 if kind == RECTANGLE else math.sqrt(2.0)
    h = Lm.RECT_MIN_HEIGHT if kind == RECTANGLE else Lm.TRI_MIN_HEIGHT
    # just above the emitter's interior, where it fills almost a hemisphere, so the
    # solid-angle threshold is far away
    x_hi = (0.3, 0.2, 2.0 * h * lmax)
    x_lo = (0.3, 0.2, 0.5 * h * lmax)
    assert Lm.uses_solid_angle(kind, g, 1, *x_hi)
    assert not Lm.uses_solid_angle(kind, g, 1, *x_lo)
    p, q, a = _pdf_pair(kind, g, 1.0 if kind == RECTANGLE else 0.5, x_lo)
    assert p == q == a


def test_disk_uses_area_sampling_in_both_modes():
    from refrender.geometry.intersect import DISK
    from refrender.sampling.lights import uses_solid_angle
    g = np.array([0, 0, 1.0, 0, 0, -1.0, 0.5, 0, 0])
    assert not uses_solid_angle(DISK, g, 1, 0.0, 0.0, 0.0)


# --- alias table ----------------------------------------------------------------------------

def test_alias_table_reproduces_the_pmf():
    from refrender.sampling.alias import alias_pmf, build_alias
    rng = np.random.default_rng(2)
    for n in (1, 2, 7, 1000):
        pmf = rng.gamma(0.3, size=n)
        pmf[rng.random(n) < 0.2] = 0.0
        if pmf.sum() == 0:
            pmf[0] = 1.0
        pmf /= pmf.sum()
        prob, alias = build_alias(pmf)
        np.testing.assert_allclose(alias_pmf(prob, alias), pmf, rtol=0, atol=1e-14)
        assert ((pmf[alias] > 0) | (prob >= 1.0)).all()      # never aliases to a zero entry


def test_alias_select_chi_square():
    """alias_select with uniform u follows the pmf (Pearson chi-square, scipy)."""
    from refrender.sampling.alias import alias_select, build_alias
    pmf = np.array([0.5, 0.25, 0.125, 0.0, 0.0625, 0.0625])
    prob, alias = build_alias(pmf)
    u = np.random.default_rng(9).random(200_000)
    idx = np.array([alias_select(prob, alias, x) for x in u[:20000]] +
                   [alias_select(prob, alias, x) for x in u[20000:]])
    obs = np.bincount(idx, minlength=len(pmf))
    assert obs[3] == 0
    keep = pmf > 0
    p = stats.chisquare(obs[keep], pmf[keep] * len(u)).pvalue
    assert p >= ALPHA_SIDAK


def test_mesh_emitter_light_table():
    """Every triangle of an emissive mesh is a light with pmf proportional to its power
    (pi A Y(L)); prim_light_pmf matches light_pmf; mixed with other emitters."""
    import refrender
    from refrender.geometry.compile import build_lights, compile_scene
    from refrender.sampling.alias import alias_pmf
    pos = [[0, 0, 0], [1, 0, 0], [0, 2, 0], [3, 3, 0]]
    doc = {"version": 1, "camera": {"position": [0, 0, 5], "look_at": [0, 0, 0]},
           "film": {"width": 4, "height": 4},
           "objects": [{"shape": "triangles", "positions": pos, "indices": [[0, 1, 2], [1, 3, 2]],
                        "emission": [1, 1, 1]},
                       {"shape": "sphere", "center": [0, 0, 3], "radius": 0.5, "emission": [4, 4, 4]}],
           "lights": [{"type": "point", "position": [0, 1, 1], "intensity": [2, 2, 2]}]}
    sc = refrender.load_scene(doc)
    S = compile_scene(sc)
    L = build_lights(sc, S, "mis")
    assert len(L.light_pmf) == 4
    np.testing.assert_allclose(alias_pmf(L.alias_prob, L.alias_index), L.light_pmf, atol=1e-15)
    a1, a2 = 1.0, 0.5 * abs(np.cross([2, 3, 0], [-1, 2, 0])[2])
    power = np.array([math.pi * a1, math.pi * a2, math.pi * 4 * math.pi * 0.25 * 4, 4 * math.pi * 2])
    got = {}
    for i, (t, p) in enumerate(zip(L.light_type, L.light_prim)):
        key = ("point",) if t == 1 else ("prim", int(S.prim_type[p]), round(float(S.prim_area[p]), 9))
        got[key] = L.light_pmf[i]
        if t == 0:
            assert L.prim_light_pmf[p] == L.light_pmf[i]
    ref = power / power.sum()
    assert got[("point",)] == pytest.approx(ref[3], rel=1e-12)
    assert got[("prim", 3, 1.0)] == pytest.approx(ref[0], rel=1e-12)
    assert got[("prim", 3, round(a2, 9))] == pytest.approx(ref[1], rel=1e-12)


# --- environment maps -----------------------------------------------------------------------

def _env_scene(tmp_path, img, look, spp=4, rotate=0.0, objects=None, camera=None, **env):
    from refrender.io import write_exr
    path = tmp_path / "env.exr"
    write_exr(path, np.asarray(img, np.float32))
    light = {"type": "environment", "image": "env.exr", "rotate_degrees": rotate, **env}
    cam = camera or {"position": [0, 0, 0], "look_at": look, "fov_y": 1.0,
                     "up": [0, 1, 0] if abs(look[1]) < 0.9 else [1, 0, 0]}
    doc = {"version": 1, "camera": cam, "film": {"width": 2, "height": 2},
           "materials": {"m": {"type": "lambertian", "albedo": [0.5, 0.5, 0.5]}},
           "objects": objects if objects is not None else
           [{"shape": "sphere", "center": [0, -100, 0], "radius": 1.0, "material": "m"}],
           "lights": [light], "render": {"spp": spp, "seed": 3}}
    import refrender
    return refrender.load_scene(doc, base_dir=tmp_path)


def _one_bright(h, w, row, col, value=100.0, floor=0.0):
    img = np.full((h, w, 3), floor)
    img[row, col] = value
    return img


@pytest.mark.parametrize("look,rotate,expect", [
    ([0, 0, -1], 0.0, 100.0),     # the image centre faces -Z
    ([1, 0, 0], 0.0, 0.0),
    ([-1, 0, 0], 90.0, 100.0),    # +90 degrees about +Y: the centre moves to -X
    ([0, 0, -1], 90.0, 0.0),
])
def test_environment_centre_faces_minus_z(tmp_path, look, rotate, expect):
    """One bright pixel at the image centre (row 4 of 9, column 8 of 17) is what a
    camera looking along -Z sees (convention documented in sampling/envmap.py)."""
    import refrender
    sc = _env_scene(tmp_path, _one_bright(9, 17, 4, 8), look, rotate=rotate)
    res = refrender.render(sc, strategy="bsdf")
    np.testing.assert_allclose(res.mean, expect, rtol=1e-6)


def test_environment_quarter_faces_plus_x_and_row0_is_up(tmp_path):
    import refrender
    img = _one_bright(9, 17, 4, 12)          # u in [12/17, 13/17) contains 3/4
    img[0, 3] = 7.0                          # row 0 is the zenith (any column)
    res = refrender.render(_env_scene(tmp_path, img, [1, 0, 0]), strategy="bsdf")
    np.testing.assert_allclose(res.mean, 100.0, rtol=1e-6)
    img = np.zeros((9, 17, 3))
    img[0, :] = 7.0
    res = refrender.render(_env_scene(tmp_path, img, [0, 1, 0]), strategy="bsdf")
    np.testing.assert_allclose(res.mean, 7.0, rtol=1e-6)


def test_environment_sampler_hits_the_bright_pixel():
    """With one non-zero pixel every sample lies inside that pixel's solid angle,
    around the documented direction (centre pixel -> -Z)."""
    from refrender.sampling.registry import env_case
    case = env_case("one pixel", _one_bright(9, 17, 4, 8), rotate_degrees=0.0)
    d, p = case.sample(np.random.default_rng(0).random((20000, 3)))
    assert (p > 0).all()
    theta = np.arccos(d[:, 1])
    phi = np.arctan2(d[:, 0], -d[:, 2])
    assert (np.abs(theta - math.pi / 2) <= math.pi / 18 + 1e-12).all()
    assert (np.abs(phi) <= math.pi / 17 + 1e-12).all()


def _upward_irradiance(img, scale=1.0):
    """Exact E on a surface facing +Y (the zenith, row 0) from a piecewise-constant
    lat-long map with an even number of rows: sum over the upper-half pixels of
    L * (2 pi / W) * (sin^2 theta_b - sin^2 theta_t) / 2 (calculus, common practice)."""
    h, w = img.shape[:2]
    edges = np.arange(h + 1) / h * math.pi
    ring = (np.sin(edges[1:]) ** 2 - np.sin(edges[:-1]) ** 2) / 2 * (2 * math.pi / w)
    ring[edges[1:] > math.pi / 2 + 1e-12] = 0.0
    from refrender.geometry.compile import LUMINANCE
    return float(((img * scale) @ LUMINANCE * ring[:, None]).sum())


@pytest.mark.parametrize("strategy,light_sampling",
                         [(s, m) for s in ("mis", "nee", "bsdf") for m in ("solid_angle", "area")])
def test_environment_map_irradiance_all_strategies(tmp_path, strategy, light_sampling):
    """A diffuse receiver facing +Y under a map with a bright pixel and a gradient:
    L_o = rho E / pi with E from the exact integral above; 4 standard errors."""
    import refrender
    rng = np.random.default_rng(4)
    img = rng.random((8, 16, 3)) * np.linspace(1, 0.2, 8)[:, None, None]
    img[1, 5] = [60.0, 50.0, 40.0]
    img = np.repeat(img.mean(axis=2, keepdims=True), 3, axis=2)   # grey: luminance = channel
    rho = 0.5
    expected = rho * _upward_irradiance(img, 2.0) / math.pi
    objects = [{"shape": "disk", "center": [0, 0, 0], "normal": [0, 1, 0], "radius": 0.05,
                "material": "m"}]
    cam = {"projection": "orthographic", "position": [0, 1e-3, 0], "look_at": [0, 0, 0],
           "up": [1, 0, 0], "view_height": 1e-4}
    spp = 16384 if strategy == "bsdf" else 512      # BSDF sampling rarely finds the bright pixel
    sc = _env_scene(tmp_path, img, None, spp=spp, objects=objects, camera=cam, scale=2.0)
    res = refrender.render(sc, strategy=strategy, light_sampling=light_sampling, max_bounces=1)
    y = res.mean[..., 1]
    se = math.sqrt(res.variance[..., 1].sum()) / y.size
    assert se < 0.02 * expected
    assert abs(y.mean() - expected) <= 4 * se, (y.mean(), expected, se)


def test_constant_image_equals_uniform_environment(tmp_path):
    """A constant map is a uniform environment: the furnace sphere shows its albedo
    (diffuse white furnace, common practice)."""
    import refrender
    objects = [{"shape": "sphere", "center": [0, 0, 0], "radius": 1.0, "material": "m"}]
    cam = {"projection": "orthographic", "position": [0, 0, 3], "look_at": [0, 0, 0],
           "view_height": 0.2}
    sc = _env_scene(tmp_path, np.ones((6, 12, 3)), None, spp=256, objects=objects, camera=cam)
    res = refrender.render(sc)
    y = res.mean[..., 0]
    se = math.sqrt(res.variance[..., 0].sum()) / y.size
    assert abs(y.mean() - 0.5) <= 4 * se + 1e-12


def test_environment_image_errors_and_hash(tmp_path):
    import refrender
    from refrender.errors import SceneError
    img = np.ones((4, 8, 3))
    sc1 = _env_scene(tmp_path, img, [0, 0, -1])
    img[0, 0] = 2.0
    sc2 = _env_scene(tmp_path, img, [0, 0, -1])
    assert sc1.sha256 != sc2.sha256          # the image bytes enter the scene hash
    base = {"version": 1, "camera": {"position": [0, 0, 1], "look_at": [0, 0, 0]},
            "film": {"width": 2, "height": 2}, "objects": []}
    for light, field in [({"type": "environment", "image": "missing.exr"}, "lights[0].image"),
                         ({"type": "environment", "radiance": [1, 1, 1], "image": "env.exr"}, "lights[0]"),
                         ({"type": "environment"}, "lights[0]"),
                         ({"type": "environment", "radiance": [1, 1, 1], "scale": 2}, "lights[0].scale")]:
        with pytest.raises(SceneError) as e:
            refrender.load_scene({**base, "lights": [light]}, base_dir=tmp_path)
        assert str(e.value).startswith(field), str(e.value)
    bad = np.ones((4, 8, 3), np.float32)
    bad[1, 1] = -1
    from refrender.io import write_exr
    write_exr(tmp_path / "neg.exr", bad)
    with pytest.raises(SceneError, match="negative"):
        refrender.load_scene({**base, "lights": [{"type": "environment", "image": "neg.exr"}]},
                             base_dir=tmp_path)


def test_environment_from_pfm_keeps_row0_at_the_zenith(tmp_path):
    """The same orientation through another reader (PFM stores rows bottom-up)."""
    import refrender
    from refrender.io.images import write_pfm
    img = np.zeros((9, 17, 3), np.float32)
    img[0, :] = 5.0                           # zenith row
    img[4, 8] = 100.0                         # centre pixel: -Z
    write_pfm(tmp_path / "env.pfm", img)
    for look, expect in (([0, 0, -1], 100.0), ([0, 1, 0], 5.0), ([0, -1, 0], 0.0)):
        doc = {"version": 1, "camera": {"position": [0, 0, 0], "look_at": look, "fov_y": 1.0,
                                        "up": [0, 1, 0] if look[1] == 0 else [1, 0, 0]},
               "film": {"width": 2, "height": 2}, "objects": [],
               "lights": [{"type": "environment", "image": "env.pfm"}], "render": {"spp": 2}}
        res = refrender.render(refrender.load_scene(doc, base_dir=tmp_path), strategy="bsdf")
        np.testing.assert_allclose(res.mean, expect, rtol=1e-6)
