"""Determinism and exact bookkeeping: the counter-based RNG, seeds, thread counts,
sample-range merges, and the state/EXR round trips.

Expected values are invariants of the contract (shared/scene-format.md, "Python API":
each sample's random numbers depend only on (seed, pixel, sample index, dimension);
disjoint ranges merge to float64 rounding; the same render twice is bit-identical),
or statistics from scipy.stats (a reference library) for the RNG.
"""
from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import stats

import refrender
from refrender.errors import RenderError
from refrender.io import read_exr, state_path_for
from refrender.result import Result
from refrender.sampling.rng import path_key, uniform

ALPHA = 0.01


# ----------------------------------------------------------------------------- RNG

@numba.njit
def _draw(seed, pixel, sample, dim):
    """uniform(path_key(seed, pixel[i], sample[i]), dim[i]) for arrays of counters."""
    out = np.empty(pixel.shape[0])
    for i in range(pixel.shape[0]):
        out[i] = uniform(path_key(seed, pixel[i], sample[i]), dim[i])
    return out


def _u(seed=0, pixel=0, sample=0, dim=0, n=None):
    """Vectorised front end: scalars broadcast against the (optional) length n."""
    arrays = [np.asarray(v, dtype=np.uint64) for v in (pixel, sample, dim)]
    n = n or max(a.size for a in arrays)
    arrays = [np.broadcast_to(a, (n,)).copy() for a in arrays]
    return _draw(np.uint64(seed), arrays[0], arrays[1], arrays[2])


def test_rng_range_and_repeatability():
    n = 100_000
    idx = np.arange(n)
    a = _u(seed=7, pixel=idx % 977, sample=idx // 977, dim=idx % 13)
    assert a.min() >= 0.0 and a.max() < 1.0
    np.testing.assert_array_equal(a, _u(seed=7, pixel=idx % 977, sample=idx // 977, dim=idx % 13))
    # 53-bit values: exactly a multiple of 2**-53 (invariant of the construction)
    assert np.all(np.ldexp(a, 53) == np.floor(np.ldexp(a, 53)))


@pytest.mark.parametrize("which", ["seed", "pixel", "sample", "dim"])
def test_rng_depends_on_every_counter(which):
    """Changing one counter by 1 changes (almost) every value."""
    n = 10_000
    base = dict(seed=3, pixel=np.arange(n), sample=np.arange(n) % 7, dim=np.arange(n) % 5)
    moved = dict(base)
    moved[which] = base[which] + 1
    a, b = _u(**base), _u(**moved)
    assert np.mean(a == b) < 1e-3        # equal by chance with probability ~2**-53 each


@pytest.mark.parametrize("axis", ["sample", "dim", "pixel", "seed"])
def test_rng_uniformity_chi_square(axis):
    """Chi-square over 100 equal bins of 1e5 values along one counter
    (scipy.stats.chisquare, alpha = 0.01)."""
    n = 100_000
    idx = np.arange(n)
    if axis == "seed":
        vals = np.array([_u(seed=s, pixel=5, sample=9, dim=2, n=1)[0] for s in range(2000)])
        n = len(vals)
        bins = 20                       # >= 100 expected per bin
    else:
        kw = dict(seed=11, pixel=123, sample=42, dim=3)
        kw[axis] = idx
        vals = _u(**kw)
        bins = 100
    counts = np.bincount(np.minimum((vals * bins).astype(int), bins - 1), minlength=bins)
    p = stats.chisquare(counts).pvalue
    assert p > ALPHA, f"chi-square p = {p:.3g} along {axis}"


@pytest.mark.parametrize("lag_axis", ["dim", "sample"])
def test_rng_lag1_correlation(lag_axis):
    """Pearson correlation of consecutive dimensions (same path) and consecutive samples
    (same dimension): |r| < 4 / sqrt(n) (4 sigma of r under independence)."""
    n = 100_000
    idx = np.arange(n)
    if lag_axis == "dim":
        a = _u(seed=1, pixel=idx % 1000, sample=idx // 1000, dim=4)
        b = _u(seed=1, pixel=idx % 1000, sample=idx // 1000, dim=5)
    else:
        a = _u(seed=1, pixel=77, sample=idx, dim=4)
        b = _u(seed=1, pixel=77, sample=idx + 1, dim=4)
    r = np.corrcoef(a, b)[0, 1]
    assert abs(r) < 4 / math.sqrt(n), f"lag-1 correlation along {lag_axis}: r = {r:.4g}"


# ----------------------------------------------------------------------------- renders

def _box_scene(**render):
    """Demo-like: a closed diffuse box with a rectangle light, a sphere, a disk and a
    triangle block; unlimited bounces (Russian roulette) by default."""
    doc = {
        "version": 1,
        "camera": {"position": [0, 1, 2.6], "look_at": [0, 1, 0], "fov_y": 45},
        "film": {"width": 16, "height": 12},
        "materials": {
            "white": {"type": "lambertian", "albedo": [0.75, 0.75, 0.72]},
            "red": {"type": "lambertian", "albedo": [0.7, 0.15, 0.1]},
            "green": {"type": "lambertian", "albedo": [0.15, 0.6, 0.2]},
        },
        "objects": [
            {"shape": "rectangle", "origin": [-1, 0, -1], "edge1": [0, 0, 2], "edge2": [2, 0, 0],
             "material": "white"},                                              # floor
            {"shape": "rectangle", "origin": [-1, 2, -1], "edge1": [2, 0, 0], "edge2": [0, 0, 2],
             "material": "white"},                                              # ceiling
            {"shape": "rectangle", "origin": [-1, 0, -1], "edge1": [2, 0, 0], "edge2": [0, 2, 0],
             "material": "white"},                                              # back
            {"shape": "rectangle", "origin": [-1, 0, -1], "edge1": [0, 2, 0], "edge2": [0, 0, 2],
             "material": "red"},                                                # left
            {"shape": "rectangle", "origin": [1, 0, -1], "edge1": [0, 0, 2], "edge2": [0, 2, 0],
             "material": "green"},                                              # right
            {"shape": "rectangle", "origin": [-0.3, 1.99, -0.3], "edge1": [0.6, 0, 0],
             "edge2": [0, 0, 0.6], "material": "white", "emission": [12, 11, 9]},  # light, faces down
            {"shape": "sphere", "center": [-0.4, 0.35, -0.2], "radius": 0.35, "material": "white"},
            {"shape": "disk", "center": [0.45, 0.001, 0.4], "normal": [0, 1, 0], "radius": 0.25,
             "material": "red"},
            {"shape": "triangles",
             "positions": [[0.2, 0, -0.6], [0.8, 0, -0.6], [0.5, 0.9, -0.3], [0.5, 0, 0.0]],
             "indices": [[0, 1, 2], [1, 3, 2], [3, 0, 2]], "material": "white"},
        ],
        "lights": [{"type": "point", "position": [0.6, 1.6, 0.5], "intensity": [0.5, 0.5, 0.5]}],
    }
    if render:
        doc["render"] = render
    return refrender.load_scene(doc)


@pytest.fixture(scope="module")
def box():
    return _box_scene()


def test_same_seed_is_bit_identical_and_seeds_differ(box):
    a = refrender.render(box, spp=8, seed=5)
    b = refrender.render(box, spp=8, seed=5)
    assert np.array_equal(a.mean, b.mean) and np.array_equal(a.variance, b.variance)
    assert np.array_equal(a.sum_sq, b.sum_sq) and np.array_equal(a.count, b.count)
    c = refrender.render(box, spp=8, seed=6)
    lit = a.mean > 0
    assert lit.mean() > 0.9
    assert np.mean(a.mean[lit] != c.mean[lit]) > 0.9


def test_thread_count_does_not_change_the_image(box):
    assert numba.config.NUMBA_NUM_THREADS >= 2, "needs 2 threads to be meaningful"
    one = refrender.render(box, spp=16, seed=2, threads=1)
    two = refrender.render(box, spp=16, seed=2, threads=2)
    assert np.array_equal(one.sum, two.sum)
    assert np.array_equal(one.sum_sq, two.sum_sq)
    assert np.array_equal(one.mean, two.mean) and np.array_equal(one.variance, two.variance)
    assert one.stats["rays"] == two.stats["rays"]


@pytest.fixture(scope="module")
def split_and_whole(box):
    a = refrender.render(box, spp=16, seed=4, first_sample=0)
    b = refrender.render(box, spp=16, seed=4, first_sample=16)
    whole = refrender.render(box, spp=32, seed=4)
    return a, b, whole


def test_first_sample_ranges_merge_into_one_render(split_and_whole):
    """Accumulators and mean to relative 1e-12 (contract).  The variance is checked
    against the rounding bound of its formula (sum_sq - sum^2/n) / (n (n - 1)): relative
    perturbations delta of the sums move it by at most 3 delta sum_sq / (n (n - 1))."""
    a, b, whole = split_and_whole
    n = whole.count[..., None].astype(float)
    var_tol = 3e-12 * whole.sum_sq / (n * (n - 1))
    for parts in ([a, b], [b, a]):                 # input order does not matter
        m = refrender.merge(parts)
        assert m.spp == 32 and m.sample_ranges == [(0, 32)]
        np.testing.assert_array_equal(m.count, whole.count)
        np.testing.assert_allclose(m.sum, whole.sum, rtol=1e-12, atol=0)
        np.testing.assert_allclose(m.sum_sq, whole.sum_sq, rtol=1e-12, atol=0)
        np.testing.assert_allclose(m.mean, whole.mean, rtol=1e-12, atol=0)
        assert np.all(np.abs(m.variance - whole.variance) <= var_tol)
        assert m.stats["rays"] == whole.stats["rays"]
    # the halves are different samples, not copies
    assert not np.array_equal(a.sum, b.sum)


def test_traversal_share_is_a_fraction_and_merges_time_weighted(split_and_whole):
    """The render statistics carry the share of CPU time in traversal (from the cycle
    counter on one path in 16); a merge weights the parts' shares by their seconds."""
    a, b, whole = split_and_whole
    for r in (a, b, whole):
        assert 0.0 < r.stats["traversal_share"] < 1.0
    m = refrender.merge([a, b])
    sa, sb = a.stats["seconds"], b.stats["seconds"]
    want = (a.stats["traversal_share"] * sa + b.stats["traversal_share"] * sb) / (sa + sb)
    assert m.stats["traversal_share"] == pytest.approx(want, rel=1e-12)


def test_merge_refuses_overlaps_and_mismatches(box):
    a = refrender.render(box, spp=8, seed=4, first_sample=0)
    overlap = refrender.render(box, spp=8, seed=4, first_sample=4)
    with pytest.raises(RenderError, match="overlap"):
        refrender.merge([a, overlap])
    with pytest.raises(RenderError, match="overlap"):
        refrender.merge([a, a])
    with pytest.raises(RenderError, match="seed"):
        refrender.merge([a, refrender.render(box, spp=8, seed=5, first_sample=8)])
    other = _box_scene(rr_start=3, spp=64, seed=0, max_bounces=None)   # same geometry, other text
    assert other.sha256 != box.sha256
    with pytest.raises(RenderError, match="scene_sha256"):
        refrender.merge([a, refrender.render(other, spp=8, seed=4, first_sample=8)])
    with pytest.raises(RenderError, match="max_bounces"):
        refrender.merge([a, refrender.render(box, spp=8, seed=4, first_sample=8, max_bounces=2)])
    with pytest.raises(RenderError):
        refrender.merge([])


@pytest.fixture(scope="module")
def saved(box, tmp_path_factory):
    res = refrender.render(box, spp=8, seed=9, first_sample=3)
    path = tmp_path_factory.mktemp("out") / "frame.exr"
    res.save(path)
    return res, path


def test_state_round_trip_is_exact(saved):
    res, path = saved
    back = Result.from_state(state_path_for(path))
    for name in ("sum", "sum_sq", "count"):
        got, want = getattr(back, name), getattr(res, name)
        assert got.dtype == want.dtype and np.array_equal(got, want), name
    assert back.sample_ranges == res.sample_ranges == [(3, 11)]
    assert back.meta == res.meta
    assert back.stats == res.stats
    assert np.array_equal(back.mean, res.mean) and np.array_equal(back.variance, res.variance)


def test_exr_holds_float32_mean_variance_and_metadata(saved):
    res, path = saved
    img = read_exr(path)
    assert np.array_equal(img.rgb(), res.mean.astype(np.float32))
    assert np.array_equal(img.layer("variance"), res.variance.astype(np.float32))
    md = img.metadata
    assert md["scene_sha256"] == res.meta["scene_sha256"]
    assert md["seed"] == 9
    assert md["sample_ranges"] == [[3, 11]]
    assert md["spp"] == 8
    assert md["strategy"] == res.meta["strategy"] == "mis"
    assert md["light_sampling"] == res.meta["light_sampling"] == "solid_angle"
    assert "max_bounces" in md and md["max_bounces"] is None
    assert md["stats"]["seconds"] == res.stats["seconds"]          # float64 exact via JSON
    assert md["stats"]["rays"] == res.stats["rays"]
