"""Textures: filtering and wrap modes against scipy.ndimage, sRGB decoding
against IEC 61966-2-1 (IEC 61966-2-1:1999), default parameterisations,
mesh UVs, and rendered furnace checks of colour and roughness textures."""
import math

import numpy as np
import pytest
from scipy import ndimage

from refrender.errors import SceneError
from refrender.geometry.intersect import DISK, RECTANGLE, SPHERE, TRIANGLE
from refrender.materials import batch
from refrender.materials.texture_load import Texture, pack_textures

RNG = np.random.default_rng(42)
IMG = RNG.random((5, 7, 3)).astype(np.float32)


def _lookup(tex, uv, scalar=False):
    info, data = pack_textures([tex])
    return batch.texture_many(info, data, 0, np.ascontiguousarray(uv, dtype=float), scalar)


@pytest.mark.parametrize("wrap,mode", [("repeat", "grid-wrap"), ("clamp", "nearest"), ("mirror", "reflect")])
def test_bilinear_matches_scipy(wrap, mode):
    """Bilinear filtering equals scipy.ndimage.map_coordinates(order=1) with the
    matching boundary mode, texel centres at half-integers, v = 0 at the bottom."""
    uv = RNG.uniform(-2.0, 3.0, size=(2000, 2))
    got = _lookup(Texture("image", IMG, wrap=wrap), uv)
    h, w = IMG.shape[:2]
    x = uv[:, 0] * w - 0.5
    y = (1.0 - uv[:, 1]) * h - 0.5
    for c in range(3):
        ref = ndimage.map_coordinates(IMG[:, :, c].astype(float), [y, x], order=1, mode=mode)
        np.testing.assert_allclose(got[:, c], ref, rtol=1e-6, atol=1e-6)


def test_nearest_filter_and_scalar_channel():
    uv = RNG.uniform(0.0, 1.0, size=(500, 2))
    got = _lookup(Texture("image", IMG, filter="nearest", channel=1), uv, scalar=True)
    h, w = IMG.shape[:2]
    xi = np.clip(np.floor(uv[:, 0] * w).astype(int), 0, w - 1)
    yi = np.clip(np.floor((1 - uv[:, 1]) * h).astype(int), 0, h - 1)
    np.testing.assert_allclose(got[:, 0], IMG[yi, xi, 1], rtol=1e-7)


def test_checker_and_uv_transform():
    """Colour 0 where floor(u') + floor(v') is even, u' = su u + ou."""
    cols = np.array([[0.1, 0.2, 0.3], [0.9, 0.8, 0.7]], dtype=np.float32)
    tex = Texture("checker", cols, scale=(4.0, 3.0), offset=(0.25, 0.0))
    uv = RNG.uniform(-1.0, 2.0, size=(1000, 2))
    got = _lookup(tex, uv)
    k = (np.floor(4 * uv[:, 0] + 0.25) + np.floor(3 * uv[:, 1])).astype(int) % 2
    np.testing.assert_allclose(got, cols[k], rtol=1e-7)


def test_default_parameterisations():
    """Sphere lat-long, disk polar, rectangle edge fractions, triangle barycentrics or UVs."""
    g = np.zeros(9)
    g[:4] = [1.0, 2.0, 3.0, 2.0]
    d = RNG.normal(size=(200, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    pts = g[:3] + g[3] * d
    uv = batch.uv_many(SPHERE, g, np.zeros(7), pts, np.zeros((200, 2)))
    np.testing.assert_allclose(uv[:, 0], np.mod(np.arctan2(-d[:, 2], d[:, 0]), 2 * math.pi) / (2 * math.pi),
                               atol=1e-12)
    np.testing.assert_allclose(uv[:, 1], 1 - np.arccos(d[:, 1]) / math.pi, atol=1e-12)
    gd = np.zeros(9)
    gd[:3], gd[3:6], gd[6] = [0, 0, 1.0], [0, 0, 1.0], 2.0
    r = RNG.uniform(0, 2, 100)
    a = RNG.uniform(0, 2 * math.pi, 100)
    pts = np.stack([r * np.cos(a), r * np.sin(a), np.ones(100)], axis=1)
    uv = batch.uv_many(DISK, gd, np.zeros(7), pts, np.zeros((100, 2)))
    np.testing.assert_allclose(uv[:, 1], r / 2.0, atol=1e-12)
    # the angle is measured in the disk's own basis: it advances with the polar angle
    np.testing.assert_allclose(np.mod(np.diff(uv[:, 0]) - np.diff(a) / (2 * math.pi) + 0.5, 1.0) - 0.5, 0,
                               atol=1e-12)
    bary = RNG.random((50, 2)) * 0.5
    np.testing.assert_array_equal(batch.uv_many(RECTANGLE, g, np.zeros(7), pts[:50], bary), bary)
    np.testing.assert_array_equal(batch.uv_many(TRIANGLE, g, np.zeros(7), pts[:50], bary), bary)
    row = np.array([1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0])
    np.testing.assert_allclose(batch.uv_many(TRIANGLE, g, row, pts[:50], bary), bary, atol=1e-15)


def _scene(materials, objects, tmp_path=None, env=1.0, spp=64, view=2.0):
    return {"version": 1,
            "camera": {"projection": "orthographic", "position": [0, 0, 1], "look_at": [0, 0, 0],
                       "view_height": view},
            "film": {"width": 4, "height": 4}, "materials": materials, "objects": objects,
            "lights": [{"type": "environment", "radiance": [env] * 3}],
            "render": {"spp": spp, "seed": 2}}


SQUARE = {"shape": "rectangle", "origin": [-1, -1, 0], "edge1": [2, 0, 0], "edge2": [0, 2, 0],
          "material": "m"}


def _load(doc, base=None):
    from refrender import load_scene
    return load_scene(doc, base_dir=base) if base is not None else load_scene(doc)


def test_png_texture_is_decoded_from_srgb(tmp_path):
    """8-bit 188 -> 0.502886 and 128 -> 0.215861 (IEC 61966-2-1; IEC 61966-2-1:1999)."""
    import imageio.v3 as iio
    img = np.array([[[188, 128, 0], [255, 188, 128]]], dtype=np.uint8)
    iio.imwrite(tmp_path / "t.png", img)
    doc = _scene({"m": {"type": "lambertian", "albedo": {"texture": "t.png"}}}, [SQUARE])
    tex = _load(doc, tmp_path).materials["m"].params["albedo_texture"]
    np.testing.assert_allclose(tex.data[0, 0], [0.502886, 0.215861, 0.0], atol=1e-6)
    np.testing.assert_allclose(tex.data[0, 1], [1.0, 0.502886, 0.215861], atol=1e-6)


def test_exr_texture_is_linear(tmp_path):
    from refrender.io import write_exr
    img = RNG.random((3, 4, 3)).astype(np.float32)
    write_exr(tmp_path / "r.exr", img)
    doc = _scene({"m": {"type": "metal", "f0": [1, 1, 1],
                        "ggx_alpha": {"texture": "r.exr", "channel": 2}}}, [SQUARE])
    tex = _load(doc, tmp_path).materials["m"].params["ggx_alpha_texture"]
    np.testing.assert_array_equal(tex.data, img)


def _render(doc, base=None, **kw):
    from refrender import render
    res = render(_load(doc, base), **kw)
    assert res.stats["nonfinite_samples"] == 0
    return res.mean, np.sqrt(res.variance)


@pytest.mark.parametrize("strategy", ["mis", "bsdf"])
def test_rendered_checker_albedo(strategy):
    """A flat diffuse square under a uniform environment of radiance 1 shows its albedo
    (diffuse white furnace, common practice); with a 2 x 2 checker every pixel shows its square's colour."""
    cols = [[0.2, 0.4, 0.6], [0.9, 0.5, 0.1]]
    doc = _scene({"m": {"type": "lambertian", "albedo": {"checker": cols, "scale": [2, 2]}}}, [SQUARE])
    mean, se = _render(doc, strategy=strategy)
    for py in range(4):
        for px in range(4):
            i, j = px // 2, 1 - py // 2                 # square index along u (x) and v (y up)
            want = cols[(i + j) % 2]
            # texels are stored as float32: 1e-7 covers their rounding
            assert (np.abs(mean[py, px] - want) <= 4 * se[py, px] + 1e-7).all(), (py, px, mean[py, px])


def test_rendered_mesh_uvs_and_image_texture(tmp_path):
    """UVs from an OBJ file (trimesh) address an image texture: a quad whose UVs cover
    the right half of a 2 x 2 image shows that half's colours (nearest filter)."""
    import imageio.v3 as iio
    img = np.array([[[255, 0, 0], [0, 255, 0]], [[0, 0, 255], [255, 255, 255]]], dtype=np.uint8)
    iio.imwrite(tmp_path / "t.png", img)
    (tmp_path / "q.obj").write_text(
        "v -1 -1 0\nv 1 -1 0\nv 1 1 0\nv -1 1 0\n"
        "vt 0.5 0\nvt 1 0\nvt 1 1\nvt 0.5 1\n"
        "f 1/1 2/2 3/3\nf 1/1 3/3 4/4\n")
    doc = _scene({"m": {"type": "lambertian", "albedo": {"texture": "t.png", "filter": "nearest"}}},
                 [{"shape": "mesh", "path": "q.obj", "material": "m"}])
    scene = _load(doc, tmp_path)
    assert scene.objects[0].shape.uvs is not None
    mean, se = _render(doc, tmp_path, strategy="bsdf")
    # top rows of the image see v > 0.5: texel row 0 (green on the right half)
    np.testing.assert_allclose(mean[0, 0], [0, 1, 0], atol=1e-7)
    np.testing.assert_allclose(mean[3, 3], [1, 1, 1], atol=1e-7)


def test_rendered_roughness_texture():
    """A checker of GGX alpha 0.1 / 1.0 on a unit-Fresnel rough conductor, seen at normal
    incidence in the furnace: each square shows E(o) of its alpha (Walter, Marschner, Li & Torrance 2007, Microfacet Models for Refraction through Rough Surfaces; Heitz 2014, Understanding the Masking-Shadowing Function in Microfacet-Based BRDFs, JCGT 3(2))."""
    doc = _scene({"m": {"type": "metal", "f0": [1, 1, 1],
                        "ggx_alpha": {"checker": [[0.1] * 3, [1.0] * 3], "scale": [2, 2]}}}, [SQUARE],
                 spp=4096, view=0.02)
    doc["objects"][0] = {**SQUARE, "origin": [-0.01, -0.01, 0], "edge1": [0.02, 0, 0], "edge2": [0, 0.02, 0]}
    mean, se = _render(doc)
    ref = {0: 0.988304, 1: 0.306853}
    for py in range(4):
        for px in range(4):
            k = (px // 2 + 1 - py // 2) % 2
            assert abs(mean[py, px, 0] - ref[k]) <= 4 * se[py, px, 0] + 1e-9, (py, px, mean[py, px, 0])


@pytest.mark.parametrize("material,message", [
    ({"type": "lambertian", "albedo": {"texture": "missing.png"}}, "materials.m.albedo.texture: file not found"),
    ({"type": "metal", "preset": "gold", "n": [1, 1, 1], "k": [1, 1, 1]}, "materials.m: give exactly one"),
    ({"type": "metal", "n": [1, 1, 1]}, "materials.m.k: required"),
    ({"type": "metal", "preset": "unobtainium"}, "materials.m"),
    ({"type": "glass", "ggx_alpha": 1.5}, "materials.m.ggx_alpha: must be <= 1"),
    ({"type": "metallic_roughness", "roughness": 1.5}, "materials.m"),
])
def test_material_errors_name_the_field(material, message):
    with pytest.raises(SceneError) as err:
        _load(_scene({"m": material}, [SQUARE]))
    assert message in str(err.value)
    assert "\n" not in str(err.value)


def test_out_of_range_reflectance_texture_is_an_error(tmp_path):
    from refrender.io import write_exr
    write_exr(tmp_path / "hot.exr", np.full((2, 2, 3), 1.5, dtype=np.float32))
    with pytest.raises(SceneError, match=r"materials\.m\.albedo\.texture: a reflectance texture must lie in"):
        _load(_scene({"m": {"type": "lambertian", "albedo": {"texture": "hot.exr"}}}, [SQUARE]), tmp_path)


def test_channel_out_of_range_is_an_error(tmp_path):
    import imageio.v3 as iio
    iio.imwrite(tmp_path / "g.png", np.zeros((2, 2), dtype=np.uint8))
    with pytest.raises(SceneError, match=r"materials\.m\.ggx_alpha\.channel: 1 is out of range"):
        _load(_scene({"m": {"type": "metal", "preset": "gold",
                            "ggx_alpha": {"texture": "g.png", "channel": 1}}}, [SQUARE]), tmp_path)


def test_triangles_uvs_render_and_count_check():
    """Inline `triangles` with `uvs`: the UVs address the checker; a wrong count is an error."""
    cols = [[0.2, 0.2, 0.2], [0.8, 0.8, 0.8]]
    tri = {"shape": "triangles", "positions": [[-1, -1, 0], [1, -1, 0], [1, 1, 0], [-1, 1, 0]],
           "indices": [[0, 1, 2], [0, 2, 3]], "uvs": [[0, 0], [0.49, 0], [0.49, 0.49], [0, 0.49]],
           "material": "m"}
    doc = _scene({"m": {"type": "lambertian", "albedo": {"checker": cols, "scale": [1, 1]}}}, [tri])
    mean, _ = _render(doc, strategy="bsdf")
    np.testing.assert_allclose(mean, 0.2, atol=1e-7)          # every uv in square (0, 0)
    tri["uvs"] = tri["uvs"][:3]
    with pytest.raises(SceneError, match=r"objects\[0\]\.uvs: needs one \[u, v\] per position"):
        _load(doc)


def test_bad_wrap_mode_names_the_field():
    doc = _scene({"m": {"type": "lambertian", "albedo": {"checker": [[0, 0, 0], [1, 1, 1]], "wrap": "tile"}}},
                 [SQUARE])
    with pytest.raises(SceneError, match=r"^materials\.m\.albedo"):
        _load(doc)
