"""Loading valid scenes: camera frames, transforms, mesh files, defaults and the scene hash.

Expected values are hand-computed from the scene format contract
(shared/scene-format.md) unless another source is named beside the check.
"""
from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import trimesh

from refrender.scene import (
    DirectionalLight, EnvironmentLight, PointLight, Rectangle, Sphere, TriangleMesh, load_scene,
)
from refrender.scene._shapes import rotation_matrix

TRIANGLE = [[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]
TETRA_VERTICES = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], dtype=np.float64)
TETRA_FACES = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]], dtype=np.int64)


def scene_with(objects=None, camera=None, **top) -> dict:
    doc = {
        "version": 1,
        "camera": camera or {"position": [0, 0, 5], "look_at": [0, 0, 0]},
        "film": {"width": 8, "height": 6},
        "objects": objects if objects is not None else [],
    }
    doc.update(top)
    return doc


def triangles(transform=None) -> dict:
    spec = {"shape": "triangles", "positions": TRIANGLE, "indices": [[0, 1, 2]]}
    if transform is not None:
        spec["transform"] = transform
    return spec


def world_positions(transform) -> np.ndarray:
    return load_scene(scene_with([triangles(transform)])).objects[0].shape.positions


# ----------------------------------------------------------------------------- camera

def test_look_at_along_minus_z_is_the_identity_frame():
    """Camera at +5 z looking at the origin with up +y: camera axes equal world axes
    (camera looks down its -Z, +Y up, +X right: the glTF 2.0 camera convention)."""
    m = load_scene(scene_with()).camera.camera_to_world
    expected = np.eye(4)
    expected[:3, 3] = [0, 0, 5]
    np.testing.assert_array_equal(m, expected)
    assert not np.any(np.signbit(m[m == 0]))  # no negative zeros


def test_look_at_general_frame():
    """Columns: X right, Y up (re-orthogonalised), Z = -forward, position; right-handed
    (X x Y = Z, det = +1): common practice for a look-at frame."""
    position, target, up = np.array([1.0, 2, 3]), np.array([-2.0, 0.5, 1]), np.array([0.3, 1, 0.2])
    camera = load_scene(scene_with(camera={"position": position.tolist(), "look_at": target.tolist(),
                                           "up": up.tolist(), "fov_y": 55})).camera
    m = camera.camera_to_world
    x, y, z, p = m[:3, 0], m[:3, 1], m[:3, 2], m[:3, 3]
    forward = (target - position) / np.linalg.norm(target - position)
    np.testing.assert_allclose(z, -forward, atol=1e-15)
    np.testing.assert_array_equal(p, position)
    np.testing.assert_allclose(m[:3, :3].T @ m[:3, :3], np.eye(3), atol=1e-15)
    np.testing.assert_allclose(np.cross(x, y), z, atol=1e-15)
    assert np.linalg.det(m[:3, :3]) == pytest.approx(1.0, abs=1e-14)
    assert y @ up > 0 and abs(x @ up) < 1e-15  # up lies in the Y-Z plane, on the +Y side
    np.testing.assert_array_equal(m[3], [0, 0, 0, 1])
    assert camera.projection == "perspective" and camera.fov_y == 55.0


def test_given_camera_to_world_is_kept():
    """A camera turned 90 degrees about +y (looking down world -x) at (4, 1, 0)."""
    rows = [[0, 0, 1, 4], [0, 1, 0, 1], [-1, 0, 0, 0], [0, 0, 0, 1]]
    m = load_scene(scene_with(camera={"camera_to_world": rows})).camera.camera_to_world
    np.testing.assert_array_equal(m, np.array(rows, dtype=np.float64))
    np.testing.assert_array_equal(-m[:3, 2], [-1, 0, 0])  # view direction


def test_nearly_orthonormal_camera_to_world_is_re_orthonormalised():
    r = rotation_matrix(np.array([0.0, 0.0, 1.0]), 30.0) * (1 + 2e-5)
    rows = np.eye(4)
    rows[:3, :3] = r
    m = load_scene(scene_with(camera={"camera_to_world": rows.tolist()})).camera.camera_to_world
    np.testing.assert_allclose(m[:3, :3].T @ m[:3, :3], np.eye(3), atol=1e-15)
    np.testing.assert_allclose(m[:3, :3], r, atol=1e-4)


@pytest.mark.parametrize("camera, expected", [
    ({}, dict(projection="perspective", fov_y=40.0)),
    ({"projection": "orthographic"}, dict(projection="orthographic", view_height=1.0)),
    ({"projection": "orthographic", "view_height": 2.5}, dict(view_height=2.5)),
    ({"lens": {"f_number": 2.0, "focus_distance": 4}, "focal_length": 50},
     dict(projection="perspective", f_number=2.0, focus_distance=4.0, focal_length=50.0, sensor_height=24.0,
          lens_radius=0.5 * 0.050 / 2.0)),
    ({"focal_length": 35, "sensor_height": 15.6}, dict(f_number=None, lens_radius=0.0)),
])
def test_camera_projections_and_defaults(camera, expected):
    """Defaults from the contract: perspective, fov_y 40 degrees, view_height 1."""
    spec = {"position": [0, 0, 5], "look_at": [0, 0, 0], **camera}
    loaded = load_scene(scene_with(camera=spec)).camera
    for key, value in expected.items():
        assert getattr(loaded, key) == value


# ----------------------------------------------------------------------------- transforms

def test_rotation_90_degrees_about_z_maps_x_to_y():
    """Right-hand rule: +90 degrees about +z takes +x to +y and +y to -x (common practice)."""
    r = rotation_matrix(np.array([0.0, 0.0, 1.0]), 90.0)
    np.testing.assert_array_equal(r @ [1, 0, 0], [0, 1, 0])
    np.testing.assert_array_equal(r @ [0, 1, 0], [-1, 0, 0])


def test_rotation_about_a_general_axis():
    """120 degrees about (1, 1, 1) cycles the axes x -> y -> z (common practice)."""
    r = rotation_matrix(np.ones(3) / np.sqrt(3), 120.0)
    np.testing.assert_allclose(r @ [1, 0, 0], [0, 1, 0], atol=1e-15)
    np.testing.assert_allclose(r @ [0, 1, 0], [0, 0, 1], atol=1e-15)


def test_scale_then_rotate_then_translate():
    """Hand-computed: p' = T R S p with S = diag(2, 3, 1), R = 90 degrees about z, T = (1, 0, 5).
    (1,0,0) -> S (2,0,0) -> R (0,2,0) -> T (1,2,5); (0,1,0) -> (0,3,0) -> (-3,0,0) -> (-2,0,5).
    Another order would differ: R first sends (1,0,0) to (0,1,0), which S makes (0,3,0)."""
    positions = world_positions({"scale": [2, 3, 1], "rotate": {"axis": [0, 0, 7], "degrees": 90},
                                 "translate": [1, 0, 5]})
    np.testing.assert_array_equal(positions, [[1, 0, 5], [1, 2, 5], [-2, 0, 5]])


def test_matrix_transform_is_row_major():
    """Row-major: the translation is the last column of the rows as written."""
    rows = [[0, -2, 0, 1], [2, 0, 0, 0], [0, 0, 1, 5], [0, 0, 0, 1]]  # the T R S of the test above, S = 2
    np.testing.assert_array_equal(world_positions(rows), [[1, 0, 5], [1, 2, 5], [-1, 0, 5]])
    np.testing.assert_array_equal(
        world_positions({"scale": 2, "rotate": {"axis": [0, 0, 1], "degrees": 90}, "translate": [1, 0, 5]}),
        world_positions(rows))


def test_mirroring_transform_keeps_the_index_order():
    """Negative determinant: vertices move, indices do not, so (b-a)x(c-a) flips to -z."""
    scene = load_scene(scene_with([triangles({"scale": [-1, 1, 1]})]))
    mesh = scene.objects[0].shape
    np.testing.assert_array_equal(mesh.indices, [[0, 1, 2]])
    a, b, c = mesh.positions[mesh.indices[0]]
    np.testing.assert_array_equal(np.cross(b - a, c - a), [0, 0, -1])


# ----------------------------------------------------------------------------- shapes, lights, render

def test_all_core_shapes_and_lights():
    doc = scene_with(
        [{"shape": "sphere", "center": [1, 2, 3], "radius": 0.5, "material": "m", "emission": [1, 2, 3],
          "emits_both_sides": True},
         {"shape": "rectangle", "origin": [0, 0, 0], "edge1": [2, 0, 0], "edge2": [0, 0, -3]},
         {"shape": "disk", "center": [0, 1, 0], "normal": [0, -4, 0], "radius": 2},
         triangles()],
        materials={"m": {"type": "lambertian", "albedo": [0.25, 0.5, 1]}},
        lights=[{"type": "point", "position": [0, 5, 0], "intensity": [10, 10, 10]},
                {"type": "directional", "direction": [0, -3, 4], "irradiance": [1, 1, 1]},
                {"type": "environment", "radiance": [0.1, 0.2, 0.3]}])
    scene = load_scene(doc)
    sphere, rect, disk, tri = (o.shape for o in scene.objects)
    assert isinstance(sphere, Sphere) and sphere.radius == 0.5
    np.testing.assert_array_equal(sphere.center, [1, 2, 3])
    assert scene.objects[0].material == "m" and scene.objects[0].emits_both_sides
    np.testing.assert_array_equal(scene.objects[0].emission, [1, 2, 3])
    assert scene.objects[1].material is None and not scene.objects[1].emits_both_sides
    np.testing.assert_array_equal(scene.objects[1].emission, [0, 0, 0])
    assert isinstance(rect, Rectangle)
    np.testing.assert_array_equal(np.cross(rect.edge1, rect.edge2), [0, 6, 0])  # front normal +y
    np.testing.assert_array_equal(disk.normal, [0, -1, 0])
    assert isinstance(tri, TriangleMesh) and tri.source == "triangles"
    assert tri.positions.dtype == np.float64 and tri.indices.dtype == np.int64
    assert scene.materials["m"].type == "lambertian"
    np.testing.assert_array_equal(scene.materials["m"].params["albedo"], [0.25, 0.5, 1])
    point, directional, environment = scene.lights
    assert isinstance(point, PointLight) and isinstance(environment, EnvironmentLight)
    assert isinstance(directional, DirectionalLight)
    np.testing.assert_allclose(directional.direction, [0, -0.6, 0.8], atol=1e-16)  # 3-4-5 triangle
    np.testing.assert_array_equal(environment.radiance, [0.1, 0.2, 0.3])


def test_render_defaults_are_the_contract_table():
    render = load_scene(scene_with()).render
    assert (render.spp, render.seed, render.max_bounces, render.rr_start) == (64, 0, None, 3)
    assert (render.strategy, render.light_sampling) == ("mis", "solid_angle")


def test_render_settings_are_read():
    doc = scene_with(render={"spp": 2 ** 40, "seed": 2 ** 63 - 1, "max_bounces": 0, "rr_start": 0,
                             "strategy": "nee", "light_sampling": "area"})
    render = load_scene(doc).render
    assert (render.spp, render.seed, render.max_bounces, render.rr_start) == (2 ** 40, 2 ** 63 - 1, 0, 0)
    assert (render.strategy, render.light_sampling) == ("nee", "area")
    assert isinstance(render.max_bounces, int)


def test_film_and_crop():
    film = load_scene(scene_with(film={"width": 8, "height": 6, "crop": [2, 1, 8, 6]})).film
    assert (film.width, film.height, film.crop, film.window) == (8, 6, (2, 1, 8, 6), (2, 1, 8, 6))
    assert load_scene(scene_with()).film.window == (0, 0, 8, 6)


def test_largest_film_is_accepted():
    film = load_scene(scene_with(film={"width": 65536, "height": 4096})).film  # exactly 2**28 pixels
    assert film.width * film.height == 2 ** 28


def test_dict_form_accepts_tuples_and_numpy_values():
    doc = scene_with([{"shape": "sphere", "center": np.array([0.0, 1, 2]), "radius": np.float32(0.5)}],
                     film={"width": np.int64(8), "height": 6}, render={"spp": np.int32(4)})
    doc["camera"] = {"position": (0, 0, 5), "look_at": (0, 0, 0)}
    scene = load_scene(doc)
    assert scene.render.spp == 4 and scene.film.width == 8
    assert scene.document["objects"][0]["center"] == [0.0, 1.0, 2.0]
    json.dumps(scene.document)  # plain JSON values only


def test_document_is_a_deep_copy():
    doc = scene_with([{"shape": "sphere", "center": [0, 0, 0], "radius": 1}])
    scene = load_scene(doc)
    doc["objects"][0]["radius"] = 2
    assert scene.document["objects"][0]["radius"] == 1
    assert scene.source_path is None


# ----------------------------------------------------------------------------- mesh files

def tetra() -> trimesh.Trimesh:
    return trimesh.Trimesh(vertices=TETRA_VERTICES, faces=TETRA_FACES, process=False)


@pytest.mark.parametrize("name, options", [("tetra.obj", {}), ("tetra.ply", {}),
                                           ("ascii.ply", {"encoding": "ascii"})])
def test_mesh_file_loading(tmp_path, name, options):
    """Files written by trimesh's exporters read back to the same vertices and faces."""
    tetra().export(str(tmp_path / name), **options)
    spec = {"shape": "mesh", "path": name, "transform": {"translate": [0, 0, -2]}}
    scene = load_scene(scene_with([spec]), base_dir=tmp_path)
    mesh = scene.objects[0].shape
    np.testing.assert_array_equal(mesh.indices, TETRA_FACES)
    np.testing.assert_allclose(mesh.positions, TETRA_VERTICES + [0, 0, -2], atol=1e-6)  # OBJ text rounding
    assert mesh.source == str((tmp_path / name).resolve())


def test_obj_polygons_are_triangulated(tmp_path):
    (tmp_path / "quad.obj").write_text("v 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nf 1 2 3 4\n")
    mesh = load_scene(scene_with([{"shape": "mesh", "path": "quad.obj"}]), base_dir=tmp_path).objects[0].shape
    assert mesh.indices.shape == (2, 3)
    a, b, c = (mesh.positions[mesh.indices[:, k]] for k in range(3))
    assert np.all(np.cross(b - a, c - a)[:, 2] > 0)  # counter-clockwise OBJ face: front +z


def test_relative_mesh_path_resolves_against_the_scene_folder(tmp_path, monkeypatch):
    (tmp_path / "scenes" / "meshes").mkdir(parents=True)
    tetra().export(str(tmp_path / "scenes" / "meshes" / "t.ply"))
    scene_file = tmp_path / "scenes" / "s.json"
    scene_file.write_text(json.dumps(scene_with([{"shape": "mesh", "path": "meshes/t.ply"}])))
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    scene = load_scene(scene_file)
    assert scene.objects[0].shape.source == str((tmp_path / "scenes" / "meshes" / "t.ply").resolve())
    assert scene.source_path == scene_file.resolve()
    load_scene(scene_with([{"shape": "mesh", "path": "meshes/t.ply"}]), base_dir=tmp_path / "scenes")
    monkeypatch.chdir(tmp_path / "scenes")
    load_scene(scene_with([{"shape": "mesh", "path": "meshes/t.ply"}]))  # dict form: the working directory


# ----------------------------------------------------------------------------- hash, dict form = file form

def test_hash_is_canonical_json_then_file_digests(tmp_path):
    """The hash defined in load_scene's contract, recomputed here with hashlib."""
    tetra().export(str(tmp_path / "t.ply"))
    doc = scene_with([{"shape": "mesh", "path": "t.ply"}, {"shape": "sphere", "center": [0, 0, 0], "radius": 1}])
    expected = hashlib.sha256(json.dumps(doc, sort_keys=True, separators=(",", ":")).encode())
    expected.update(hashlib.sha256((tmp_path / "t.ply").read_bytes()).digest())
    assert load_scene(doc, base_dir=tmp_path).sha256 == expected.hexdigest()


def test_hash_changes_when_mesh_bytes_change(tmp_path):
    path = tmp_path / "t.obj"
    path.write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n")
    doc = scene_with([{"shape": "mesh", "path": "t.obj"}])
    first = load_scene(doc, base_dir=tmp_path).sha256
    assert load_scene(doc, base_dir=tmp_path).sha256 == first
    path.write_text("v 0 0 0\nv 1 0 0\nv 0 2 0\nf 1 2 3\n")
    assert load_scene(doc, base_dir=tmp_path).sha256 != first


def test_hash_ignores_formatting_but_not_content(tmp_path):
    doc = scene_with([{"shape": "sphere", "center": [0, 0, 0], "radius": 1}])
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    a.write_text(json.dumps(doc))
    b.write_text(json.dumps(dict(reversed(list(doc.items()))), indent=4))
    assert load_scene(a).sha256 == load_scene(b).sha256
    doc["objects"][0]["radius"] = 1.5
    assert load_scene(doc).sha256 != load_scene(a).sha256


def test_dict_form_equals_file_form(tmp_path):
    tetra().export(str(tmp_path / "t.obj"))
    doc = scene_with([{"shape": "mesh", "path": "t.obj", "transform": {"scale": 2}, "material": "m"},
                      {"shape": "disk", "center": [0, 0, 0], "normal": [0, 0, 1], "radius": 1}],
                     materials={"m": {"type": "lambertian", "albedo": [0.5, 0.5, 0.5]}},
                     lights=[{"type": "point", "position": [1, 1, 1], "intensity": [1, 1, 1]}],
                     render={"spp": 16, "seed": 3})
    (tmp_path / "s.json").write_text(json.dumps(doc))
    from_file = load_scene(tmp_path / "s.json")
    from_dict = load_scene(doc, base_dir=tmp_path)
    assert from_file.sha256 == from_dict.sha256
    assert from_file.document == from_dict.document == doc
    assert from_file.render == from_dict.render and from_file.film == from_dict.film
    np.testing.assert_array_equal(from_file.camera.camera_to_world, from_dict.camera.camera_to_world)
    for a, b in zip(from_file.objects, from_dict.objects):
        assert a.material == b.material
        for field in ("positions", "indices", "center", "normal"):
            if hasattr(a.shape, field):
                np.testing.assert_array_equal(getattr(a.shape, field), getattr(b.shape, field))


def test_long_triangle_lists_load_whole():
    """A 40 x 40 grid of vertices (3042 triangles): every vertex and index survives loading."""
    n = 40
    positions = [[float(x), float(y), 0.0] for y in range(n) for x in range(n)]
    indices = []
    for y in range(n - 1):
        for x in range(n - 1):
            v = y * n + x
            indices += [[v, v + 1, v + n + 1], [v, v + n + 1, v + n]]
    mesh = load_scene(scene_with([{"shape": "triangles", "positions": positions, "indices": indices}])).objects[0].shape
    np.testing.assert_array_equal(mesh.positions, positions)
    np.testing.assert_array_equal(mesh.indices, indices)
