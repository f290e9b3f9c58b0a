"""Camera model and the scene vocabulary: lens optics, focal length, and images
unchanged by the renaming of the scene format.

Outside sources: the thin-lens equation 1/f = 1/s + 1/v and the circle of
confusion of a thin lens, c = A f |z - s| / (z (s - f)) for aperture diameter A
and focal length f (e.g. E. Hecht, *Optics*, 5th ed., ch. 5, and S. F. Ray,
*Applied Photographic Optics*, 3rd ed., ch. "Depth of field"; the formula is
common practice, written here from memory); the relation between focal
length, sensor height h and vertical angle of view, 2 atan(h / 2f) (common
practice); the edge-spread function of a uniform disk (its area to one side of
a chord, elementary geometry).
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

import refrender

HERE = Path(__file__).resolve().parent
SCENES = HERE.parent / "scenes"
DATA = HERE / "data"


# ----------------------------------------------------------------------------- images unchanged by the rename

def _vocabulary_cases():
    files = [SCENES / "reading_nook.json", SCENES / "material_gallery.json",
             *sorted((SCENES / "analytic").glob("*.json"))]
    cases = [(p.relative_to(SCENES).as_posix(), json.loads(p.read_text()), SCENES / p.relative_to(SCENES).parent)
             for p in files]
    features = json.loads((DATA / "vocabulary_feature_scenes.json").read_text())
    return cases + [(name, doc, SCENES) for name, doc in features.items()]


@pytest.mark.parametrize("name, doc, base", _vocabulary_cases(), ids=lambda v: v if isinstance(v, str) else "")
def test_images_identical_to_before_the_vocabulary_change(name, doc, base):
    """Invariant: renaming the scene vocabulary changed no sample value.

    tests/data/images_before_vocabulary.npz holds mean and variance of every
    demo and analytic scene and of two scenes using every material, camera
    and emitter option (24 x 18 pixels, 4 spp, seed 11), rendered with the
    former names before the change; the same scenes in the new names must
    render bit for bit the same."""
    saved = np.load(DATA / "images_before_vocabulary.npz")
    doc = json.loads(json.dumps(doc))
    doc["film"] = {"width": 24, "height": 18}
    result = refrender.render(refrender.load_scene(doc, base_dir=base), spp=4, seed=11)
    assert np.array_equal(result.mean, saved[name + ":mean"])
    assert np.array_equal(result.variance, saved[name + ":variance"])


# ----------------------------------------------------------------------------- focal length, field of view

def _camera(**keys):
    doc = {"version": 1, "camera": {"position": [0, 0, 0], "look_at": [0, 0, -1], **keys},
           "film": {"width": 4, "height": 4},
           "objects": [{"shape": "sphere", "center": [0, 0, -5], "radius": 1}]}
    return refrender.load_scene(doc).camera


def test_focal_length_sets_the_field_of_view():
    """A 50 mm lens on a 24 mm high sensor: vertical angle of view
    2 atan(12 / 50) = 26.99 degrees (common practice)."""
    cam = _camera(focal_length=50)
    assert cam.fov_y == pytest.approx(math.degrees(2 * math.atan(12 / 50)), rel=1e-12)
    assert cam.fov_y == pytest.approx(26.99, abs=0.005)
    cam = _camera(focal_length=35, sensor_height=15.6)    # an APS-C height
    assert cam.fov_y == pytest.approx(math.degrees(2 * math.atan(7.8 / 35)), rel=1e-12)


def test_aperture_diameter_is_focal_length_over_f_number():
    """A = f / N; with only fov_y, f is the one fov_y implies on the sensor."""
    cam = _camera(focal_length=50, lens={"f_number": 2.0, "focus_distance": 3})
    assert 2 * cam.lens_radius == pytest.approx(0.050 / 2.0, rel=1e-12)     # 25 mm, in metres
    cam = _camera(fov_y=30, lens={"f_number": 4.0, "focus_distance": 3})
    implied = 12 / math.tan(math.radians(15))                                 # mm
    assert cam.focal_length == pytest.approx(implied, rel=1e-12)
    assert 2 * cam.lens_radius == pytest.approx(implied * 1e-3 / 4.0, rel=1e-12)


def test_lens_of_infinite_f_number_is_the_pinhole():
    """As N grows the aperture closes: at N = 1e30 (the largest scene number, README
    "Limits") every ray is the pinhole's, bit for bit (the lens sample offsets fall
    below half an ulp)."""
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 32, "height": 24}
    pinhole = refrender.render(refrender.load_scene(doc, base_dir=SCENES), spp=4, seed=5)
    doc["camera"]["lens"] = {"f_number": 1e30, "focus_distance": 2.0}
    closed = refrender.render(refrender.load_scene(doc, base_dir=SCENES), spp=4, seed=5)
    assert np.array_equal(closed.mean, pinhole.mean)
    assert np.array_equal(closed.variance, pinhole.variance)
    doc["camera"]["lens"] = {"f_number": 8.0, "focus_distance": 2.0}     # an open lens does blur
    open_ = refrender.render(refrender.load_scene(doc, base_dir=SCENES), spp=4, seed=5)
    assert not np.array_equal(open_.mean, pinhole.mean)


# ----------------------------------------------------------------------------- circle of confusion

def _disk_edge_spread(x, rho):
    """Fraction of a uniform disk of radius rho lying at abscissa < x."""
    x = np.clip(x / rho, -1.0, 1.0)
    return 0.5 + (x * np.sqrt(1.0 - x * x) + np.arcsin(x)) / math.pi


def _expected_columns(width, height, tan_half, s, coc):
    """Box-filtered pixel values across a vertical edge on the focus plane whose
    image is blurred by a disk of diameter *coc* (scene units, focus plane)."""
    aspect = width / height
    edges = (2.0 * np.arange(width + 1) / width - 1.0) * s * tan_half * aspect
    out = np.empty(width)
    for i in range(width):
        x = np.linspace(edges[i], edges[i + 1], 2001)
        out[i] = np.trapezoid(_disk_edge_spread(x, coc / 2), x) / (edges[i + 1] - edges[i])
    return out


def test_circle_of_confusion_has_the_thin_lens_diameter():
    """A 343.6 mm f/4 lens (fov_y 4 degrees on a 24 mm sensor) focused at 1 m
    looks at a self-luminous half-plane (radiance 1) 3 m away.  Its edge is
    blurred by the circle of confusion: on the sensor c = A f |z - s| / (z (s - f))
    (thin-lens equation), which is A |z - s| / z on the focus plane, magnified
    by f / (s - f).  Each column of the image, averaged over the rows, must
    match the disk's edge-spread function of that diameter within its
    standard error (chi-square over the blurred columns), and must reject a
    circle 10 % larger."""
    width, height, spp, fov, n_stop, s, z = 48, 8, 256, 4.0, 4.0, 1.0, 3.0
    doc = {"version": 1,
           "camera": {"position": [0, 0, 0], "look_at": [0, 0, -1], "fov_y": fov,
                      "lens": {"f_number": n_stop, "focus_distance": s}},
           "film": {"width": width, "height": height},
           "objects": [{"shape": "rectangle", "origin": [0, -10, -z], "edge1": [10, 0, 0], "edge2": [0, 20, 0],
                        "emission": [1, 1, 1]}],
           "render": {"spp": spp, "seed": 2}}
    scene = refrender.load_scene(doc)
    f = scene.camera.focal_length * 1e-3                     # metres
    aperture = f / n_stop
    c_sensor = aperture * f * abs(z - s) / (z * (s - f))     # thin-lens circle of confusion
    coc = c_sensor * (s - f) / f                             # the same circle on the focus plane
    assert coc == pytest.approx(aperture * abs(z - s) / z, rel=1e-12)
    result = refrender.render(scene)
    col = result.mean[..., 0].mean(axis=0)
    se = np.sqrt(result.variance[..., 0].sum(axis=0)) / height
    tan_half = math.tan(math.radians(fov / 2))
    pixel = 2 * s * tan_half / height
    assert 5 < coc / pixel < 8                               # the blur spans several pixels

    def chi2_p(diameter):
        expected = _expected_columns(width, height, tan_half, s, diameter)
        blurred = (expected > 1e-9) & (expected < 1 - 1e-9)
        assert np.array_equal(col[~blurred], np.round(expected[~blurred]))   # fully dark or lit
        z2 = ((col[blurred] - expected[blurred]) / se[blurred]) ** 2
        return stats.chi2.sf(z2.sum(), blurred.sum())

    assert chi2_p(coc) > 1e-3
    assert chi2_p(1.1 * coc) < 1e-6
