"""Layers beside the beauty: light-transport decomposition and first-hit values.

Expected values are invariants of the estimator (each contribution of a path
goes to exactly one layer of a kind, so the layers of a kind sum to the
beauty sample by sample; a light group's layer estimates the image the
group alone makes, and the ``direct`` layer the image with max_bounces = 1,
both checked within 4 standard errors of the difference), closed forms of
the geometry (orthographic distances and normals), and the cosine-weighted
Lambertian estimator f cos / pdf = albedo (common practice).
"""
from __future__ import annotations

import numpy as np
import pytest

import refrender
from refrender.io import read_exr
from refrender.result import Result, merge


def _doc(lamp=True, window=True, layers=("transport", "bounces", "light_groups"), spp=16, sky=True):
    objects = [
        {"shape": "rectangle", "origin": [-2, 0, 2], "edge1": [4, 0, 0], "edge2": [0, 0, -4],
         "material": "floor"},
        {"shape": "rectangle", "origin": [-2, 0, -2], "edge1": [4, 0, 0], "edge2": [0, 3, 0],
         "material": "wall"},
        {"shape": "sphere", "center": [0.4, 0.35, -0.6], "radius": 0.35, "material": "wall"},
    ]
    if window:
        objects.append({"shape": "rectangle", "origin": [-1.5, 1.0, -1.99], "edge1": [1.0, 0, 0],
                        "edge2": [0, 1.0, 0], "emission": [6.0, 5.0, 4.0], "group": "window"})
    lights = [{"type": "environment", "radiance": [0.02, 0.025, 0.03]}] if sky else []
    # without the lamp its sphere stays (black), so that the geometry is the same
    objects.append({"shape": "sphere", "center": [-0.6, 0.2, -0.3], "radius": 0.12,
                    "emission": [3.0, 3.0, 5.0] if lamp else [0, 0, 0], "group": "lamp"})
    if lamp:
        lights.append({"type": "point", "position": [0.8, 1.6, 0.5], "intensity": [2, 2, 2],
                       "group": "lamp"})
    return {"version": 1,
            "camera": {"projection": "perspective", "position": [0, 1.0, 3.0], "look_at": [0, 0.7, 0],
                       "up": [0, 1, 0], "fov_y": 50},
            "film": {"width": 10, "height": 8},
            "materials": {"floor": {"type": "lambertian", "albedo": [0.7, 0.6, 0.5]},
                          "wall": {"type": "lambertian", "albedo": [0.5, 0.6, 0.7]}},
            "objects": objects, "lights": lights,
            "render": {"spp": spp, "seed": 11, "layers": list(layers)}}


@pytest.fixture(scope="module")
def full():
    return refrender.render(refrender.load_scene(_doc(spp=32)))


def test_layer_slots(full):
    assert full.layer_slots == ["direct", "indirect", "bounce0", "bounce1", "bounce2", "bounce3plus",
                                "light.lamp", "light.window", "light.environment"]


@pytest.mark.parametrize("spp", [1, 16])
def test_each_kind_sums_to_the_beauty(spp):
    """spp = 1: every pixel holds one sample, so this is the per-sample identity."""
    res = refrender.render(refrender.load_scene(_doc(spp=spp)))
    slots = res.layer_slots
    kinds = {"transport": ["direct", "indirect"],
             "bounces": ["bounce0", "bounce1", "bounce2", "bounce3plus"],
             "light_groups": ["light.lamp", "light.window", "light.environment"]}
    scale = np.abs(res.sum).max()
    for names in kinds.values():
        total = sum(res.layer_sum[:, :, slots.index(n), :] for n in names)
        np.testing.assert_allclose(total, res.sum, rtol=1e-12, atol=1e-13 * scale)
    # the split is not trivial (the test can fail)
    assert res.layer_sum[:, :, slots.index("indirect")].sum() > 0.01 * res.sum.sum()


def test_layers_leave_the_beauty_bit_identical(full):
    plain = refrender.render(refrender.load_scene(_doc(layers=(), spp=32)))
    np.testing.assert_array_equal(plain.sum, full.sum)
    np.testing.assert_array_equal(plain.sum_sq, full.sum_sq)
    assert plain.layer_sum is None


def _agree(a_mean, a_var, b_mean, b_var):
    live = (a_var + b_var) > 0
    z = (a_mean - b_mean)[live] / np.sqrt(a_var + b_var)[live]
    assert live.sum() > 50
    assert np.all(np.abs(z) <= 4.0), np.abs(z).max()
    return z


def test_a_light_group_estimates_the_image_of_that_group_alone(full):
    alone = refrender.render(refrender.load_scene(_doc(lamp=False, sky=False, layers=())), spp=64, seed=3)
    _agree(full.layer_mean("light.window"), full.layer_variance("light.window"), alone.mean,
           alone.variance)


def test_the_direct_layer_estimates_the_single_scattering_image(full):
    single = refrender.render(refrender.load_scene(_doc(layers=())), spp=64, seed=4, max_bounces=1)
    _agree(full.layer_mean("direct"), full.layer_variance("direct"), single.mean, single.variance)
    # power: a layer that lacks part of the direct light (bounce0: emitters seen
    # directly, no direct lighting) must fail the same test
    var = full.layer_variance("bounce0") + single.variance
    live = var > 0
    z = (full.layer_mean("bounce0") - single.mean)[live] / np.sqrt(var[live])
    assert np.abs(z).max() > 4


def test_layers_merge_and_save_exactly(tmp_path, full):
    sc = refrender.load_scene(_doc())
    a = refrender.render(sc, spp=12)
    b = refrender.render(sc, spp=20, first_sample=12)
    m = merge([a, b])
    np.testing.assert_allclose(m.layer_sum, full.layer_sum, rtol=1e-14, atol=1e-300)
    np.testing.assert_allclose(m.layer_sq, full.layer_sq, rtol=1e-14, atol=1e-300)
    out = tmp_path / "f.exr"
    full.save(out)
    back = Result.from_state(out.with_suffix(".state"))
    np.testing.assert_array_equal(back.layer_sum, full.layer_sum)
    assert back.layer_slots == full.layer_slots
    img = read_exr(out)
    for name in full.layer_slots:
        np.testing.assert_array_equal(img.layer(name), full.layer_mean(name).astype(np.float32))
        np.testing.assert_array_equal(img.layer(f"{name}.variance"),
                                      full.layer_variance(name).astype(np.float32))


def test_resume_keeps_layers_exact(tmp_path, full):
    sc = refrender.load_scene(_doc())
    part = refrender.render(sc, spp=6)
    part.save(tmp_path / "p.exr")
    cont = refrender.render(sc, spp=32, resume=Result.from_state(tmp_path / "p.state"))
    np.testing.assert_array_equal(cont.layer_sum, full.layer_sum)
    np.testing.assert_array_equal(cont.sum, full.sum)


def test_merge_refuses_other_layers():
    from refrender.errors import RenderError
    a = refrender.render(refrender.load_scene(_doc(spp=2)))
    b = refrender.render(refrender.load_scene(_doc(spp=2)), first_sample=2, layers=["transport"])
    with pytest.raises(RenderError, match="layers"):
        merge([a, b])


def test_first_hit_layers_of_an_orthographic_view(tmp_path):
    """A plane z = 0 seen by an orthographic camera at z = 1.5 looking down -Z:
    depth 1.5, normal +Z, position (x, y, 0) at the pixel centres' mean, albedo
    = the Lambertian albedo (cosine sampling: f cos / pdf = albedo exactly)."""
    doc = {"version": 1,
           "camera": {"projection": "orthographic", "position": [0, 0, 1.5], "look_at": [0, 0, 0],
                      "up": [0, 1, 0], "view_height": 2.0},
           "film": {"width": 4, "height": 2},
           "materials": {"m": {"type": "lambertian", "albedo": [0.25, 0.5, 0.75]}},
           "objects": [{"shape": "rectangle", "origin": [-3, -3, 0], "edge1": [6, 0, 0],
                        "edge2": [0, 6, 0], "material": "m"}],
           "lights": [{"type": "environment", "radiance": [1, 1, 1]}],
           "render": {"spp": 64, "layers": ["albedo", "normal", "depth", "position", "object_id",
                                            "material_id"]}}
    res = refrender.render(refrender.load_scene(doc))
    np.testing.assert_allclose(res.layer_mean("depth")[..., 0], 1.5, rtol=1e-12)
    np.testing.assert_allclose(res.layer_mean("normal"), np.broadcast_to([0, 0, 1], (2, 4, 3)), atol=1e-12)
    np.testing.assert_allclose(res.layer_mean("albedo"), np.broadcast_to([0.25, 0.5, 0.75], (2, 4, 3)),
                               rtol=1e-12)
    # film x = (px / 4 * 2 - 1) * 1 * 2: pixel centres at -1.5, -0.5, 0.5, 1.5 (x) and 0.5, -0.5 (y)
    pos = res.layer_mean("position")
    se = np.sqrt(res.layer_variance("position"))
    cx = np.array([-1.5, -0.5, 0.5, 1.5])[None, :]
    cy = np.array([0.5, -0.5])[:, None]
    assert np.all(np.abs(pos[..., 0] - cx) <= 4 * se[..., 0])
    assert np.all(np.abs(pos[..., 1] - cy) <= 4 * se[..., 1])
    np.testing.assert_array_equal(res.ids["object_id"], 0)
    np.testing.assert_array_equal(res.ids["material_id"], 0)
    assert res.ids["names"]["material_id"] == ["m"]
    res.save(tmp_path / "a.exr")
    img = read_exr(tmp_path / "a.exr")
    for ch in ("depth.Z", "normal.X", "normal.Y", "normal.Z", "position.X", "albedo.R",
               "albedo.variance.G", "object_id.index", "material_id.index"):
        assert ch in img.channels, ch
    np.testing.assert_allclose(img.channels["depth.Z"], 1.5, rtol=1e-7)


@pytest.mark.parametrize("strategy", ["mis", "bsdf"])
def test_distant_disc_has_its_light_group(strategy):
    """A directional light with angular_diameter (a distant disc) found by escaping rays goes
    to its own group's layer, also under strategy bsdf where the light table omits it."""
    doc = _doc(spp=8, sky=False, window=False)
    doc["lights"].append({"type": "directional", "direction": [0.3, -1.0, -0.4], "irradiance": [3, 3, 3],
                          "angular_diameter": 30.0, "group": "sun"})
    res = refrender.render(refrender.load_scene(doc), strategy=strategy)
    slots = res.layer_slots
    groups = [n for n in slots if n.startswith("light.")]
    assert "light.sun" in groups
    total = sum(res.layer_sum[:, :, slots.index(n), :] for n in groups)
    np.testing.assert_allclose(total, res.sum, rtol=1e-12, atol=1e-13 * np.abs(res.sum).max())
    assert res.layer_sum[:, :, slots.index("light.sun")].sum() > 0.05 * res.sum.sum()
