"""``diff --explain`` and the filter / colour-space diagnoses, with synthetic faults.

Each fault is made from an independent render of the same scene (its own
layers), so the expected parameter is known exactly: a light group scaled by
1.3, the bounces >= 3 dropped, a light removed, a Gaussian blur of 0.8 px
(the test's variance blurred with the squared kernel), an ACEScg frame (the
Rec. 709 -> ACEScg matrix of refrender.color, itself checked against
colour-science in tests/test_color.py).  Every estimate must lie within 4 of
its standard errors of the truth; a null pair (two renders) must diagnose
nothing.  The weighted least-squares standard errors follow e.g. Press et al.,
"Numerical Recipes" 3rd ed., §15.4 (normal equations) and §15.6 (Δχ² = 1).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import refrender
from refrender.color import conversion
from refrender.compare import cli as diff_cli
from refrender.compare.diagnose import diagnose
from refrender.compare.explain import explain, kinds_of
from refrender.compare.faults import blur

LAYERS = ["transport", "bounces", "light_groups"]


def _room(spp, seed):
    """A closed room (albedo 0.75) lit by a window panel and a lamp: much multiple scattering."""
    wall = {"type": "lambertian", "albedo": [0.75, 0.72, 0.7]}
    red = {"type": "lambertian", "albedo": [0.7, 0.2, 0.15]}
    objs = [
        {"shape": "rectangle", "origin": [-1, 0, 1], "edge1": [2, 0, 0], "edge2": [0, 0, -2], "material": "wall"},
        {"shape": "rectangle", "origin": [-1, 2, -1], "edge1": [2, 0, 0], "edge2": [0, 0, 2], "material": "wall"},
        {"shape": "rectangle", "origin": [-1, 0, -1], "edge1": [2, 0, 0], "edge2": [0, 2, 0], "material": "wall"},
        {"shape": "rectangle", "origin": [-1, 0, 1], "edge1": [0, 0, -2], "edge2": [0, 2, 0], "material": "red"},
        {"shape": "rectangle", "origin": [1, 0, -1], "edge1": [0, 0, 2], "edge2": [0, 2, 0], "material": "wall"},
        {"shape": "rectangle", "origin": [1, 0, 1], "edge1": [-2, 0, 0], "edge2": [0, 2, 0], "material": "wall"},
        {"shape": "sphere", "center": [0.3, 0.4, -0.2], "radius": 0.4, "material": "wall"},
        {"shape": "rectangle", "origin": [-0.4, 1.99, -0.4], "edge1": [0.8, 0, 0], "edge2": [0, 0, 0.8],
         "emission": [4.0, 3.8, 3.4], "group": "window"},
        {"shape": "sphere", "center": [-0.6, 0.25, 0.3], "radius": 0.1, "emission": [6, 6, 9],
         "group": "lamp"},
    ]
    doc = {"version": 1,
           "camera": {"projection": "perspective", "position": [0, 1.0, 0.95], "look_at": [0, 0.9, 0],
                      "up": [0, 1, 0], "fov_y": 80},
           "film": {"width": 64, "height": 48},
           "materials": {"wall": wall, "red": red}, "objects": objs,
           "render": {"spp": spp, "seed": seed, "layers": LAYERS}}
    return refrender.render(refrender.load_scene(doc))


@pytest.fixture(scope="module")
def pair():
    return _room(64, 1), _room(64, 2)


def _layers(res):
    return {n: (res.layer_mean(n), res.layer_variance(n)) for n in res.layer_slots}


def _kinds(res):
    return kinds_of(res.metadata(), res.layer_slots)


def _weights(ex, kind):
    k = ex["kinds"][kind]
    return dict(zip(k["layers"], zip(k["weights"], k["standard_errors"])))


def _bound(v1, v2, a):
    """Variance bound of x + a y for correlated x, y (Cauchy-Schwarz)."""
    return v1 + a * a * v2 + 2 * abs(a) * np.sqrt(v1 * v2)


def test_null_pair_explains_nothing(pair):
    ref, test = pair
    ex = explain(_layers(ref), test.mean, test.variance, var_ref=ref.variance, kinds=_kinds(ref))
    assert ex["verdict"][0].startswith("no part of the light transport differs")
    for kind in ex["kinds"].values():
        for w, se in zip(kind["weights"], kind["standard_errors"]):
            assert abs(w - 1) <= 4 * se


def test_a_light_group_scaled_by_1_3(pair):
    ref, test = pair
    t = test.mean + 0.3 * test.layer_mean("light.window")
    v = _bound(test.variance, test.layer_variance("light.window"), 0.3)
    ex = explain(_layers(ref), t, v, var_ref=ref.variance, kinds=_kinds(ref))
    w = _weights(ex, "light_groups")
    assert abs(w["light.window"][0] - 1.3) <= 4 * w["light.window"][1]
    assert abs(w["light.lamp"][0] - 1.0) <= 4 * w["light.lamp"][1]
    assert ex["best"] == "light_groups"
    assert any("light group 'window'" in line and "too bright" in line for line in ex["verdict"]), ex["verdict"]


def test_bounces_from_three_on_dropped(pair):
    ref, test = pair
    t = test.mean - test.layer_mean("bounce3plus")
    v = _bound(test.variance, test.layer_variance("bounce3plus"), 1.0)
    ex = explain(_layers(ref), t, v, var_ref=ref.variance, kinds=_kinds(ref))
    w = _weights(ex, "bounces")
    assert abs(w["bounce3plus"][0]) <= 4 * w["bounce3plus"][1]
    for n in ("bounce0", "bounce1", "bounce2"):
        assert abs(w[n][0] - 1) <= 4 * w[n][1]
    assert ex["best"] == "bounces"
    assert any(line.startswith("the frame lacks bounces ≥ 3") for line in ex["verdict"]), ex["verdict"]


def test_one_light_removed(pair):
    ref, test = pair
    t = test.mean - test.layer_mean("light.lamp")
    v = _bound(test.variance, test.layer_variance("light.lamp"), 1.0)
    ex = explain(_layers(ref), t, v, var_ref=ref.variance, kinds=_kinds(ref))
    w = _weights(ex, "light_groups")
    assert abs(w["light.lamp"][0]) <= 4 * w["light.lamp"][1]
    assert abs(w["light.window"][0] - 1) <= 4 * w["light.window"][1]
    assert any("lacks light group 'lamp'" in line for line in ex["verdict"]), ex["verdict"]


def test_a_wider_filter_is_diagnosed_as_a_blur(pair):
    ref, test = pair
    t = blur(test.mean, 0.8)
    v = blur(test.variance, 0.8, squared_weights=True)
    found = {d["fault"]: d for d in diagnose(ref.mean, t, ref.variance, v)}
    assert "blur" in found, found
    d = found["blur"]
    assert abs(d["parameter"] - 0.8) <= 4 * d["standard_error"], d
    assert list(found)[0] == "blur"


def test_an_acescg_frame_against_a_rec709_reference(pair):
    ref, test = pair
    m = conversion("linear_rec709", "acescg")
    t = test.mean @ m.T
    v = test.variance @ (m * m).T
    found = {d["fault"]: d for d in diagnose(ref.mean, t, ref.variance, v)}
    assert "color_space" in found, found
    d = found["color_space"]
    assert d["parameter"] == {"reference": "linear_rec709", "test": "acescg"}
    assert "colour space mismatch (e.g. ACEScg frame against a Rec. 709 reference)" in d["detail"]
    fitted, se = np.array(d["matrix"]), np.array(d["matrix_standard_error"])
    assert np.all(np.abs(fitted - m) <= 4 * se + 1e-6)


def test_null_pair_diagnoses_no_blur_nor_colour_space(pair):
    ref, test = pair
    faults = {d["fault"] for d in diagnose(ref.mean, test.mean, ref.variance, test.variance)}
    assert not faults & {"blur", "color_space"}, faults


def test_diff_refuses_or_converts_other_chromaticities(tmp_path, pair, capsys):
    ref, test = pair
    ref.save(tmp_path / "ref.exr")
    from refrender.io import write_exr
    from refrender.color import chromaticities
    m = conversion("linear_rec709", "acescg")
    write_exr(tmp_path / "aces.exr", test.mean @ m.T, test.variance @ (m * m).T, {},
              chromaticities=chromaticities("acescg"))
    assert diff_cli.main([str(tmp_path / "ref.exr"), str(tmp_path / "aces.exr")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "colour spaces differ" in err[0] and "ACEScg" in err[0]
    assert diff_cli.main([str(tmp_path / "ref.exr"), str(tmp_path / "aces.exr"), "--convert",
                          "--json", str(tmp_path / "r.json")]) == 0
    import json
    rep = json.loads((tmp_path / "r.json").read_text())
    assert "converted ACEScg → Rec. 709" in rep["inputs"]["test_source"]
    # converted back, the frame is the original test frame (float32 storage rounding)
    test.save(tmp_path / "orig.exr")
    # the two renders' scene documents differ in render.seed, so their scene_sha256 differ
    assert diff_cli.main([str(tmp_path / "ref.exr"), str(tmp_path / "orig.exr"), "--allow-other-scene",
                          "--json", str(tmp_path / "o.json")]) == 0
    orig = json.loads((tmp_path / "o.json").read_text())
    assert rep["metrics"]["relmse"]["Y"] == pytest.approx(orig["metrics"]["relmse"]["Y"], rel=1e-4)
    assert not {d["fault"] for d in rep["diagnoses"]} & {"color_space", "scale"}


def test_diff_explain_on_the_command_line(tmp_path, pair, capsys):
    ref, test = pair
    ref.save(tmp_path / "ref.exr")
    from refrender.io import write_exr
    t = test.mean + 0.3 * test.layer_mean("light.window")
    write_exr(tmp_path / "t.exr", t, _bound(test.variance, test.layer_variance("light.window"), 0.3), {})
    assert diff_cli.main([str(tmp_path / "ref.exr"), str(tmp_path / "t.exr"), "--explain"]) == 0
    out = capsys.readouterr().out
    assert "light group 'window'" in out and "too bright" in out
    assert math.isfinite(float(out.split("light.window")[1].split("w = ")[1].split()[0]))
