"""glTF 2.0 import: the reader, the translation, lights, absorbing glass, bad input.

Outside sources: the two Khronos sample files in ../shared/gltf-samples (their
README states the facts checked here), trimesh's own glTF loader as an
independent reader of positions, scipy's Rotation for quaternions, and closed
forms named beside each check.
"""
from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from refrender.scene.gltf_write import Gltf, box
from refrender.errors import SceneError
from refrender.scene.gltf import LUMINANCE, import_gltf, load_gltf_scene

SAMPLES = Path(__file__).resolve().parents[2] / "shared" / "gltf-samples"
needs_samples = pytest.mark.skipif(not (SAMPLES / "Cameras.gltf").is_file(),
                                   reason=f"the Khronos sample files are not in {SAMPLES}")


def _vertices(imp):
    """World-space triangle corners of an import, (n, 3, 3), sorted for comparison."""
    tris = np.concatenate([o.shape.positions[o.shape.indices] for o in imp.objects])
    return tris[np.lexsort(tris.reshape(len(tris), -1).T[::-1])]


# ----------------------------------------------------------------------------- sample files

@needs_samples
def test_cameras_sample_square_is_rotated_by_its_node_quaternion():
    """Cameras.gltf (README): unit square (0,0,0)-(1,1,0) on a node rotated by the
    quaternion (-0.383, 0, 0, 0.92375); expected corners from scipy's Rotation."""
    from scipy.spatial.transform import Rotation
    imp = import_gltf(SAMPLES / "Cameras.gltf")
    assert imp.counts["triangles"] == 2 and len(imp.objects) == 1
    rot = Rotation.from_quat([-0.383, 0.0, 0.0, 0.92375])       # normalises, as glTF readers must
    square = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [1, 1, 0]], float)
    got = imp.objects[0].shape.positions
    np.testing.assert_allclose(got, rot.apply(square), atol=1e-7)


@needs_samples
def test_cameras_sample_has_both_cameras():
    """Cameras.gltf (README): perspective yfov 0.7 rad, aspect 1, and orthographic
    xmag = ymag = 1, both at (0.5, 0.5, 3) looking down their local -Z (no rotation)."""
    imp = import_gltf(SAMPLES / "Cameras.gltf")
    assert len(imp.cameras) == 2
    persp, ortho = imp.cameras
    assert persp.camera.projection == "perspective"
    assert persp.camera.fov_y == pytest.approx(math.degrees(0.7), rel=1e-12)
    assert persp.aspect == 1.0
    assert ortho.camera.projection == "orthographic"
    assert ortho.camera.view_height == 2.0 and ortho.aspect == 1.0      # ymag is a half-height
    for c in imp.cameras:
        np.testing.assert_allclose(c.camera.camera_to_world, [[1, 0, 0, 0.5], [0, 1, 0, 0.5],
                                                       [0, 0, 1, 3.0], [0, 0, 0, 1]], atol=1e-12)


@needs_samples
def test_simple_meshes_sample_two_instances_of_one_triangle():
    """SimpleMeshes.gltf (README): one triangle (0,0,0),(1,0,0),(0,1,0) referenced by two
    nodes, the second translated by (1, 0, 0); trimesh's loader reads the same corners."""
    import trimesh
    imp = import_gltf(SAMPLES / "SimpleMeshes.gltf")
    assert imp.counts["meshes"] == 1 and imp.counts["instances"] == 2
    expected = np.array([[[0, 0, 0], [1, 0, 0], [0, 1, 0]], [[1, 0, 0], [2, 0, 0], [1, 1, 0]]], float)
    np.testing.assert_array_equal(_vertices(imp), expected)
    ref = trimesh.load(SAMPLES / "SimpleMeshes.gltf", force="scene").to_mesh()
    theirs = np.asarray(ref.vertices)[np.asarray(ref.faces)]
    theirs = theirs[np.lexsort(theirs.reshape(len(theirs), -1).T[::-1])]
    np.testing.assert_allclose(_vertices(imp), theirs, atol=1e-12)
    normal = np.cross(*(imp.objects[0].shape.positions[1:] - imp.objects[0].shape.positions[0]))
    assert normal[2] > 0            # counter-clockwise winding is the front (+Z, the file's normals)


# ----------------------------------------------------------------------------- the reader

def test_reader_interleaved_normalized_sparse_strip_fan_and_matrix(tmp_path):
    """byteStride, normalized integer components, a sparse accessor, strips, fans and a
    column-major node matrix, against values worked out by hand from the glTF 2.0 spec."""
    g = Gltf()
    # interleaved VEC3 float positions with a 4-byte pad per element (stride 16)
    pos = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [1, 1, 0]], np.float32)
    inter = np.zeros((4, 4), np.float32)
    inter[:, :3] = pos
    bv = g.view(inter.tobytes(), stride=16)
    g.doc["accessors"].append({"bufferView": bv, "componentType": 5126, "count": 4, "type": "VEC3"})
    strip = g.accessor([0, 1, 2, 3], np.uint16)
    g.doc["meshes"].append({"primitives": [{"attributes": {"POSITION": 0}, "indices": strip, "mode": 5}]})
    # fan over the same corners; a sparse accessor moves corner 3 to (2, 2, 0)
    sp_idx = g.view(np.array([3], np.uint8).tobytes())
    sp_val = g.view(np.array([[2, 2, 0]], np.float32).tobytes())
    g.doc["accessors"].append({"bufferView": bv, "componentType": 5126, "count": 4, "type": "VEC3",
                               "sparse": {"count": 1, "indices": {"bufferView": sp_idx,
                                                                  "componentType": 5121},
                                          "values": {"bufferView": sp_val}}})
    fan = g.accessor([0, 1, 3, 2], np.uint32)
    g.doc["meshes"].append({"primitives": [{"attributes": {"POSITION": 2}, "indices": fan, "mode": 6}]})
    g.node(mesh=0)
    # column-major matrix: translation (0, 0, 5) sits in elements 12..14
    g.node(mesh=1, matrix=[1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 5, 1])
    path = g.write_gltf(tmp_path / "r.gltf", external=True)
    imp = import_gltf(path)
    strip_mesh, fan_mesh = imp.objects
    # strip {v_i, v_(i+1+i%2), v_(i+2-i%2)}: (0,1,2), (1,3,2)
    np.testing.assert_array_equal(strip_mesh.shape.indices, [[0, 1, 2], [1, 3, 2]])
    # fan {v_(i+1), v_(i+2), v_0} over indices 0,1,3,2: (1,3,0), (3,2,0)
    np.testing.assert_array_equal(fan_mesh.shape.indices, [[1, 3, 0], [3, 2, 0]])
    np.testing.assert_array_equal(fan_mesh.shape.positions[3], [2, 2, 5])
    np.testing.assert_array_equal(fan_mesh.shape.positions[1], [1, 0, 5])
    # normalized components: uint8 255 -> 1, int16 -32768 -> -1 (clamped), int16 32767 -> 1
    from refrender.scene.gltf_read import GltfFile
    g2 = Gltf()
    a = g2.accessor([[255, 0, 51]], np.uint8, normalized=True)
    b = g2.accessor([[-32768, 32767, 0]], np.int16, normalized=True)
    g2.node()
    f = GltfFile(g2.write_glb(tmp_path / "n.glb"))
    np.testing.assert_allclose(f.accessor(a, ()), [[1.0, 0.0, 0.2]], rtol=1e-15)
    np.testing.assert_allclose(f.accessor(b, ()), [[-1.0, 1.0, 0.0]], rtol=1e-15)


def test_mirrored_node_keeps_front_faces_outside(tmp_path):
    """glTF 2.0 spec (from memory): a negative determinant reverses the winding."""
    g = Gltf()
    m = g.mesh([[0, 0, 0], [1, 0, 0], [0, 1, 0]])
    g.node(mesh=m, scale=[-1, 1, 1])
    imp = import_gltf(g.write_gltf(tmp_path / "m.gltf"))
    p = imp.objects[0].shape.positions[imp.objects[0].shape.indices[0]]
    assert np.cross(p[1] - p[0], p[2] - p[0])[2] > 0     # still facing +Z after the mirror


# ----------------------------------------------------------------------------- materials, lights

def test_materials_and_photometric_lights(tmp_path):
    g = Gltf()
    glass = g.material(pbrMetallicRoughness={"roughnessFactor": 0.0}, extensions={
        "KHR_materials_transmission": {"transmissionFactor": 1.0}, "KHR_materials_ior": {"ior": 1.33},
        "KHR_materials_volume": {"thicknessFactor": 1.0, "attenuationColor": [0.5, 0.25, 1.0],
                                 "attenuationDistance": 2.0}})
    paint = g.material(pbrMetallicRoughness={"baseColorFactor": [0.2, 0.4, 0.6, 1], "metallicFactor": 0.0,
                                             "roughnessFactor": 0.5},
                       emissiveFactor=[1, 0.5, 0], extensions={
                           "KHR_materials_emissive_strength": {"emissiveStrength": 4.0}})
    for ext in ("KHR_materials_transmission", "KHR_materials_ior", "KHR_materials_volume",
                "KHR_materials_emissive_strength", "EXT_something_new"):
        g.use(ext)
    g.node(mesh=g.mesh([[0, 0, 0], [1, 0, 0], [0, 1, 0]], material=glass))
    g.node(mesh=g.mesh([[0, 0, 1], [1, 0, 1], [0, 1, 1]], material=paint))
    colour = [1.0, 0.5, 0.25]
    g.node(translation=[0, 0, 3], extensions={"KHR_lights_punctual": {"light": g.light(
        type="spot", color=colour, intensity=683.0, spot={"innerConeAngle": 0.2, "outerConeAngle": 0.4})}})
    g.node(rotation=[0.0, 0.7071067811865476, 0.0, 0.7071067811865476],     # 90 deg about +Y
           extensions={"KHR_lights_punctual": {"light": g.light(type="directional", intensity=683.0 * 2)}})
    with pytest.warns(UserWarning, match="EXT_something_new"):
        imp = import_gltf(g.write_gltf(tmp_path / "m.gltf"))
    mats = list(imp.materials.values())
    assert mats[0].type == "glass" and mats[0].params["relative_ior"] == 1.33
    # KHR_materials_volume: sigma = -ln(attenuationColor) / attenuationDistance
    np.testing.assert_allclose(mats[0].params["absorption"], -np.log([0.5, 0.25, 1.0]) / 2.0)
    assert mats[1].type == "metallic_roughness"
    np.testing.assert_allclose(mats[1].params["emissive"], [4.0, 2.0, 0.0])
    assert mats[1].params["metallic"] == 0.0 and mats[1].params["roughness"] == 0.5
    spot, sun = imp.lights
    # 683 cd at 683 lm/W: the BT.709 luminance of the RGB is 1 W/sr, the chromaticity kept
    assert float(LUMINANCE @ spot.intensity) == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(spot.intensity / spot.intensity[0], colour)
    assert spot.cos_inner == pytest.approx(math.cos(0.2)) and spot.cos_outer == pytest.approx(math.cos(0.4))
    np.testing.assert_allclose(spot.direction, [0, 0, -1])       # the node's -Z
    # -Z rotated 90 degrees about +Y is -X; 2 * 683 lux -> 2 W/m^2
    np.testing.assert_allclose(sun.direction, [-1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(sun.irradiance, [2, 2, 2], rtol=1e-12)


def _spot_scene(tmp_path, light: dict, light_range: str = "honour"):
    """A spot or point light 1 above a Lambertian plane z = 0 (albedo 1), seen by an
    orthographic camera from above; radiance = E / pi (Lambert)."""
    g = Gltf()
    g.node(translation=[0, 0, 1], extensions={"KHR_lights_punctual": {"light": g.light(**light)}})
    g.write_gltf(tmp_path / "light.gltf")
    return {
        "version": 1,
        "camera": {"projection": "orthographic", "position": [0, 0, 5], "look_at": [0, 0, 0],
                   "up": [0, 1, 0], "view_height": 4.0},
        "film": {"width": 16, "height": 16},
        "materials": {"white": {"type": "lambertian", "albedo": [1, 1, 1]}},
        "objects": [{"shape": "rectangle", "origin": [-2, -2, 0], "edge1": [4, 0, 0], "edge2": [0, 4, 0],
                     "material": "white"},
                    {"shape": "gltf", "path": "light.gltf", "light_units": "radiometric",
                     "light_range": light_range}],
        "render": {"spp": 256, "max_bounces": 1, "seed": 7},
    }


def _expected_irradiance(intensity, cos_in, cos_out, rng, n=16, sub=32, half=2.0):
    """Mean of E = I att(theta) cos(theta) / d^2 over each pixel (midpoint rule, sub^2 points):
    KHR_lights_punctual falloff clamp(cos s + o, 0, 1)^2, window clamp(1 - (d/range)^4, 0, 1)."""
    step = 2 * half / (n * sub)
    c = -half + step * (np.arange(n * sub) + 0.5)
    x, y = np.meshgrid(c, -c)                 # image rows run from +y down
    d2 = x * x + y * y + 1.0
    cos = 1.0 / np.sqrt(d2)                   # angle to the axis = angle of incidence here
    if cos_in is None:
        att = np.ones_like(cos)
    else:
        s = 1.0 / max(0.001, cos_in - cos_out)
        att = np.clip(cos * s - cos_out * s, 0.0, 1.0) ** 2
    if rng is not None:
        att = att * np.clip(1.0 - (np.sqrt(d2) / rng) ** 4, 0.0, 1.0)
    e = (intensity * att * cos / d2).reshape(n, sub, n, sub)
    return e.mean(axis=(1, 3)), e.std(axis=(1, 3))


@pytest.mark.parametrize("light,cones,rng,mode", [
    ({"type": "spot", "intensity": 2.0, "spot": {"innerConeAngle": 0.3, "outerConeAngle": 0.8}},
     (math.cos(0.3), math.cos(0.8)), None, "honour"),
    ({"type": "point", "intensity": 2.0, "range": 2.0}, None, 2.0, "honour"),
    ({"type": "point", "intensity": 2.0, "range": 2.0}, None, None, "ignore"),
])
def test_spot_and_range_irradiance_on_a_plane(tmp_path, light, cones, rng, mode):
    """Irradiance I(theta) cos(theta) / d^2 (inverse-square and cosine laws) with the
    KHR_lights_punctual falloff and range window; every pixel within 4 standard errors."""
    from refrender import load_scene, render
    res = render(load_scene(_spot_scene(tmp_path, light, mode), base_dir=tmp_path))
    cos_in, cos_out = cones if cones else (None, None)
    mean_e, std_e = _expected_irradiance(2.0, cos_in, cos_out, rng)
    expected = mean_e / math.pi
    # each sample is E(x) / pi at a uniform point x of the pixel (a delta light, one bounce):
    # the standard error of a pixel is the spread of E over the pixel / sqrt(spp), known exactly
    se = std_e / math.pi / math.sqrt(res.spp)
    err = np.abs(res.mean[:, :, 0] - expected)
    assert np.all(err <= 4.5 * se + 1e-9 * expected.max()), float(np.max(err / np.maximum(se, 1e-300)))
    # and the renderer's own error estimate agrees with it
    np.testing.assert_allclose(np.sqrt(res.variance[:, :, 0]).sum(), se.sum(), rtol=0.1)
    assert (expected == 0).any() == (cones is not None or rng is not None)   # the test sees the edge


def test_absorbing_glass_slab_transmittance(tmp_path):
    """A glass slab (KHR_materials_volume) of thickness d in front of an emitter, seen at
    normal incidence: T = (1 - R)^2 e^(-sigma d) / (1 - R^2 e^(-2 sigma d)), the incoherent
    multiple-reflection transmittance of an absorbing slab (e.g. Born & Wolf, Principles of
    Optics, or any optics handbook on slab transmission), R = ((n - 1) / (n + 1))^2 (Fresnel,
    normal incidence), sigma = -ln(attenuationColor) / attenuationDistance."""
    from refrender import load_scene, render
    n, d, colour, dist = 1.5, 0.5, np.array([0.9, 0.5, 0.2]), 1.0
    g = Gltf()
    mat = g.material(pbrMetallicRoughness={"roughnessFactor": 0.0}, extensions={
        "KHR_materials_transmission": {"transmissionFactor": 1.0}, "KHR_materials_ior": {"ior": n},
        "KHR_materials_volume": {"thicknessFactor": d, "attenuationColor": colour.tolist(),
                                 "attenuationDistance": dist}})
    for ext in ("KHR_materials_transmission", "KHR_materials_ior", "KHR_materials_volume"):
        g.use(ext)
    corners, tris = box([-10, -10, 0], [10, 10, d])
    g.node(mesh=g.mesh(corners, tris, material=mat))
    g.write_glb(tmp_path / "slab.glb")
    scene = {
        "version": 1,
        "camera": {"projection": "orthographic", "position": [0, 0, 5], "look_at": [0, 0, 0],
                   "view_height": 0.5},
        "film": {"width": 2, "height": 2},
        "objects": [{"shape": "gltf", "path": "slab.glb"},
                    {"shape": "rectangle", "origin": [-20, -20, -1], "edge1": [40, 0, 0],
                     "edge2": [0, 40, 0], "emission": [1, 1, 1]}],
        "render": {"spp": 4096, "seed": 3},
    }
    res = render(load_scene(scene, base_dir=tmp_path))
    sigma = -np.log(colour) / dist
    R = ((n - 1) / (n + 1)) ** 2
    a = np.exp(-sigma * d)
    expected = (1 - R) ** 2 * a / (1 - R ** 2 * a * a)
    value = res.mean.reshape(-1, 3).mean(axis=0)
    se = np.sqrt(res.variance.reshape(-1, 3).sum(axis=0)) / 4
    assert np.all(np.abs(value - expected) <= 4 * se), (value, expected, se)
    assert np.all(se < 0.01 * expected)
    # the clear slab would transmit (1 - R) / (1 + R): the absorption is visible beyond the noise
    assert np.all((1 - R) / (1 + R) - value > 10 * se)


# ----------------------------------------------------------------------------- bad input

def _good(tmp_path) -> Gltf:
    g = Gltf()
    g.node(mesh=g.mesh([[0, 0, 0], [1, 0, 0], [0, 1, 0]], indices=[0, 1, 2]))
    g.node(translation=[0, 0, 3], camera=g.camera(type="perspective",
                                                  perspective={"yfov": 0.8, "znear": 0.1}), name="main")
    return g


def _bad_files(tmp_path):
    cases = {}
    g = _good(tmp_path)
    glb = g.write_glb(tmp_path / "t.glb")
    data = glb.read_bytes()
    glb.write_bytes(data[:-7])
    cases["truncated"] = (glb, "truncated GLB")
    g = _good(tmp_path)
    p = g.write_gltf(tmp_path / "missing.gltf", external=True)
    p.with_suffix(".bin").unlink()
    cases["missing buffer"] = (p, "buffers[0].uri: file not found")
    g = _good(tmp_path)
    g.doc["accessors"][0]["count"] = 1000
    cases["accessor range"] = (g.write_gltf(tmp_path / "range.gltf"), "accessors[0]")
    g = _good(tmp_path)
    g.doc["meshes"][0]["primitives"][0]["indices"] = g.accessor([0, 1, 7], np.uint32)
    cases["index"] = (g.write_gltf(tmp_path / "index.gltf"), "accessors[2]: index 7 out of range")
    g = Gltf()
    g.node(mesh=g.mesh([[0, 0, 0], [np.nan, 0, 0], [0, 1, 0]]))
    cases["nan"] = (g.write_gltf(tmp_path / "nan.gltf"), "accessors[0]: POSITION 1 is not finite")
    g = _good(tmp_path)
    g.doc["meshes"][0]["primitives"][0]["mode"] = 1
    cases["lines"] = (g.write_gltf(tmp_path / "lines.gltf"), "meshes[0].primitives[0].mode: lines")
    g = _good(tmp_path)
    g.doc["extensionsUsed"] = g.doc["extensionsRequired"] = ["KHR_draco_mesh_compression"]
    cases["required"] = (g.write_gltf(tmp_path / "draco.gltf"), "KHR_draco_mesh_compression")
    g = _good(tmp_path)       # the number limits of refrender/limits.py, as for JSON scenes
    g.doc["nodes"][0]["translation"] = [0, 1e31, 0]
    cases["far"] = (g.write_gltf(tmp_path / "far.gltf"), "nodes[0].mesh: mesh 0 placed by this node has positions "
                    "beyond 1e+30")
    g = _good(tmp_path)
    g.doc["materials"] = [{"emissiveFactor": [1, 1, 1],
                           "extensions": {"KHR_materials_emissive_strength": {"emissiveStrength": 1e300}}}]
    g.doc["extensionsUsed"] = ["KHR_materials_emissive_strength"]
    g.doc["meshes"][0]["primitives"][0]["material"] = 0
    cases["bright"] = (g.write_gltf(tmp_path / "bright.gltf"), "emissive times emissiveStrength exceeds 1e+30")
    return cases


BAD = ["truncated", "missing buffer", "accessor range", "index", "nan", "lines", "required", "far", "bright"]


@pytest.mark.parametrize("case", BAD)
def test_bad_files_name_the_file_and_the_json_path(tmp_path, case):
    path, message = _bad_files(tmp_path)[case]
    with pytest.raises(SceneError, match=r"^" + str(path).replace(".", r"\.") + ": ") as exc:
        load_gltf_scene(path)
    assert message in str(exc.value) and "\n" not in str(exc.value)


def _cli(*args, cwd):
    import os
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    return subprocess.run([sys.executable, "-m", "refrender", *args], capture_output=True, text=True,
                          cwd=cwd, env=env)


def test_cli_renders_a_gltf_and_refuses_bad_ones(tmp_path):
    good = _good(tmp_path).write_glb(tmp_path / "good.glb")
    run = _cli("render", str(good), "-o", "good.exr", "--spp", "2", "--film-height", "8", "--quiet",
               "--camera", "main", cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    assert (tmp_path / "good.exr").is_file()
    from refrender.io import read_exr
    assert read_exr(tmp_path / "good.exr").shape[:2] == (8, round(8 * 4 / 3))   # no aspectRatio: 4:3
    run = _cli("render", str(good), "-o", "cam.exr", "--camera", "nope", cwd=tmp_path)
    assert run.returncode == 2 and run.stderr.count("\n") == 1
    assert "no camera named 'nope'" in run.stderr and str(good) in run.stderr
    path, message = _bad_files(tmp_path)["index"]
    run = _cli("render", str(path), "-o", "bad.exr", cwd=tmp_path)
    assert run.returncode == 2 and run.stderr.count("\n") == 1 and message in run.stderr
    assert not (tmp_path / "bad.exr").exists() and not (tmp_path / "cam.exr").exists()
    run = _cli("info", str(good), "--json", cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    report = json.loads(run.stdout)
    assert report["triangles"] == 1 and report["cameras"] == ["main"]


def test_base_colour_texture_and_uvs(tmp_path):
    """glTF UV (0, 0) is the image's top-left (spec, from memory); refrender's v runs up from
    the bottom (materials/textures.py), so v is flipped, and KHR_texture_transform's
    scale/offset are rewritten for the flipped v: v' = sv v + (1 - sv - ov)."""
    import base64
    import io

    import imageio.v3 as iio
    png = io.BytesIO()
    iio.imwrite(png, np.array([[[255, 0, 0], [0, 255, 0]], [[0, 0, 255], [188, 188, 188]]], np.uint8),
                extension=".png")
    g = Gltf()
    g.doc["images"] = [{"uri": "data:image/png;base64," + base64.b64encode(png.getvalue()).decode()}]
    g.doc["textures"] = [{"source": 0}]
    g.use("KHR_texture_transform")
    mat = g.material(pbrMetallicRoughness={"baseColorTexture": {"index": 0, "extensions": {
        "KHR_texture_transform": {"scale": [2.0, 0.5], "offset": [0.25, 0.125]}}}, "metallicFactor": 0.0})
    uv = g.accessor([[0, 0], [1, 0], [0, 1]])
    g.node(mesh=g.mesh([[0, 1, 0], [1, 1, 0], [0, 0, 0]], material=mat, TEXCOORD_0=uv))
    imp = import_gltf(g.write_gltf(tmp_path / "t.gltf"))
    np.testing.assert_array_equal(imp.objects[0].shape.uvs, [[0, 1], [1, 1], [0, 0]])
    tex = list(imp.materials.values())[0].params["base_color_texture"]
    np.testing.assert_allclose(tex.data[0, 0], [1, 0, 0])              # first row = top of the image
    # sRGB 188 -> linear 0.5029 (IEC 61966-2-1)
    np.testing.assert_allclose(tex.data[1, 1], [((188 / 255 + 0.055) / 1.055) ** 2.4] * 3, rtol=1e-6)
    assert tex.scale == (2.0, 0.5) and tex.offset == (0.25, 1.0 - 0.5 - 0.125)
