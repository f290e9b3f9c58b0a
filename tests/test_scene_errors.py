"""Bad scenes: every error is one SceneError line that starts with the field path.

The rules checked come from the scene format contract (shared/scene-format.md)
and the project's validation rules; each table row names the rule it breaks.
"""
from __future__ import annotations

import json
import re
import warnings

import numpy as np
import pytest
import trimesh
from jsonschema import Draft202012Validator

from refrender.errors import SceneError
from refrender.scene import load_scene
from refrender.scene._schema_check import schema

TRIANGLE = [[0, 0, 0], [1, 0, 0], [0, 1, 0]]


def minimal() -> dict:
    """A small valid scene (one lit sphere) that each case breaks in one place."""
    return {
        "version": 1,
        "camera": {"position": [0, 0, 5], "look_at": [0, 0, 0]},
        "film": {"width": 8, "height": 6},
        "materials": {"white": {"type": "lambertian", "albedo": [0.8, 0.8, 0.8]}},
        "objects": [{"shape": "sphere", "center": [0, 0, 0], "radius": 1, "material": "white"}],
        "lights": [{"type": "point", "position": [0, 3, 3], "intensity": [1, 1, 1]}],
    }


def changed(*edits):
    """A minimal scene with edits applied; an edit is (path tuple, value) or (path tuple,) to delete."""
    doc = minimal()
    for edit in edits:
        *parents, last = edit[0]
        node = doc
        for key in parents:
            node = node[key]
        if len(edit) == 1:
            del node[last]
        else:
            node[last] = edit[1]
    return doc


def shape(spec: dict) -> dict:
    return changed((("objects",), [spec]))


def tris(**kw) -> dict:
    return shape({"shape": "triangles", "positions": TRIANGLE, "indices": [[0, 1, 2]], **kw})


def rect(e1, e2) -> dict:
    return shape({"shape": "rectangle", "origin": [0, 0, 0], "edge1": e1, "edge2": e2})


ERROR_CASES = [
    # (id, scene dict, regex matched at the start of the message)
    ("typo key", changed((("objects", 0, "raduis"), 1), (("objects", 0, "radius"),)),
     r'objects\[0\]\.raduis: unknown key; did you mean "radius"\? \(expected one of: shape, center, radius,'),
    ("typo top-level key", changed((("render_settings",), {})), r"render_settings: unknown key"),
    ("wrong type", changed((("objects", 0, "radius"), "1")), r'objects\[0\]\.radius: expected a number, got "1"'),
    ("negative radius", changed((("objects", 0, "radius"), -1)), r"objects\[0\]\.radius: must be >= 1e-30, got -1$"),
    ("zero radius", changed((("objects", 0, "radius"), 0)), r"objects\[0\]\.radius: must be >= 1e-30, got 0$"),
    ("zero-area rectangle", rect([1, 0, 0], [0, 0, 0]), r"objects\[0\]\.edge2: must be non-zero"),
    ("non-perpendicular edges", rect([1, 0, 0], [1, 1, 0]), r"objects\[0\]\.edge2: edges must be perpendicular"),
    ("zero-length normal", shape({"shape": "disk", "center": [0, 0, 0], "normal": [0, 0, 0], "radius": 1}),
     r"objects\[0\]\.normal: must be a non-zero vector"),
    ("empty triangles", tris(positions=[], indices=[]), r"objects\[0\]\.positions: must not be empty"),
    ("empty indices", tris(indices=[]), r"objects\[0\]\.indices: must not be empty"),
    ("index out of range", tris(indices=[[0, 1, 3]]), r"objects\[0\]\.indices\[0\]\[2\]: index 3 out of range"),
    ("negative index", tris(indices=[[0, -1, 2]]), r"objects\[0\]\.indices\[0\]\[1\]: must be >= 0, got -1"),
    ("zero-area triangle", tris(positions=TRIANGLE + [[2, 0, 0]], indices=[[0, 1, 2], [0, 1, 3]]),
     r"objects\[0\]\.indices\[1\]: triangle 1 has zero area"),
    ("repeated vertex", tris(indices=[[0, 1, 1]]), r"objects\[0\]\.indices\[0\]: triangle 0 has zero area"),
    ("NaN in dict", changed((("objects", 0, "center", 1), float("nan"))),
     r"objects\[0\]\.center\[1\]: must be a finite number, got nan"),
    ("inf in dict", changed((("film", "width"), float("inf"))), r"film\.width: must be a finite number, got inf"),
    ("unknown material", changed((("objects", 0, "material"), "whte")),
     r'objects\[0\]\.material: unknown material "whte" \(known: "white"\)'),
    ("material without materials", changed((("materials",),)),
     r'objects\[0\]\.material: unknown material "white" \(known: none are defined\)'),
    ("crop outside frame", changed((("film", "crop"), [0, 0, 9, 6])), r"film\.crop: x1 = 9 exceeds film\.width = 8"),
    ("crop empty", changed((("film", "crop"), [4, 0, 4, 6])), r"film\.crop: must have x0 < x1 and y0 < y1"),
    ("crop length", changed((("film", "crop"), [0, 0, 4])), r"film\.crop: must have exactly 4 items, got 3"),
    ("crop float", changed((("film", "crop"), [0, 0, 4.5, 6])), r"film\.crop\[2\]: expected an integer, got 4\.5"),
    ("huge film", changed((("film", "width"), 65536), (("film", "height"), 8192)),
     r"film: too large: 65536 x 8192 = 536870912 pixels, at most 268435456"),
    ("film side over 65536", changed((("film", "width"), 65537)), r"film\.width: must be <= 65536, got 65537"),
    ("bool for int", changed((("render",), {"spp": True})), r"render\.spp: expected an integer, got true"),
    ("bool for number", changed((("objects", 0, "radius"), False)), r"objects\[0\]\.radius: expected a number"),
    ("spp zero", changed((("render",), {"spp": 0})), r"render\.spp: must be >= 1, got 0"),
    ("spp over 2**40", changed((("render",), {"spp": 2 ** 40 + 1})), r"render\.spp: must be <= 1099511627776"),
    ("seed over 2**63-1", changed((("render",), {"seed": 2 ** 63})), r"render\.seed: must be <= 9223372036854775807"),
    ("negative max_bounces", changed((("render",), {"max_bounces": -1})), r"render\.max_bounces: must be >= 0"),
    ("max_bounces string", changed((("render",), {"max_bounces": "inf"})),
     r'render\.max_bounces: expected an integer or null, got "inf"'),
    ("bad strategy", changed((("render",), {"strategy": "path"})),
     r'render\.strategy: must be one of "mis", "nee", "bsdf"; got "path"'),
    ("bad light_sampling", changed((("render",), {"light_sampling": "uniform"})), r"render\.light_sampling: must be"),
    ("version 2", changed((("version",), 2)), r"version: must be 1, got 2"),
    ("version missing", changed((("version",),)), r"version: required key is missing"),
    ("objects missing", changed((("objects",),)), r"objects: required key is missing"),
    ("vector too short", changed((("camera", "position"), [0, 5])),
     r"camera\.position: must have exactly 3 items, got 2"),
    ("vector of strings", changed((("camera", "position"), ["0", 0, 5])), r"camera\.position\[0\]: expected a number"),
    ("albedo above 1", changed((("materials", "white", "albedo"), [1.2, 0.5, 0.5])),
     r"materials\.white\.albedo\[0\]: must be <= 1, got 1\.2"),
    ("quoted material name", changed((("materials",), {"my mat": {"type": "lambertian", "albedo": [2, 0, 0]}}),
                                     (("objects", 0, "material"), "my mat")),
     r'materials\["my mat"\]\.albedo\[0\]: must be <= 1'),
    ("unknown material type", changed((("materials", "white", "type"), "chrome")),
     r'materials\.white\.type: must be one of "lambertian"'),
    ("misspelt material type", changed((("materials", "white", "type"), "lambertan")),
     r'materials\.white\.type: must be one of .*; got "lambertan"; did you mean "lambertian"\?$'),
    ("misspelt material key", changed((("materials", "white"), {"type": "metal", "preset": "gold", "ggx_alpa": 0.1})),
     r'materials\.white\.ggx_alpa: unknown key; did you mean "ggx_alpha"\? \(expected one of: type, preset, '
     r'n, k, f0, exterior_ior, ggx_alpha\)$'),
    ("metal without optics", changed((("materials", "white"), {"type": "metal"})),
     r'materials\.white: give exactly one of "preset", "n" with "k".*got none$'),
    ("albedo missing", changed((("materials", "white", "albedo"),)), r"materials\.white\.albedo: required key"),
    ("negative emission", changed((("objects", 0, "emission"), [1, -1, 1])),
     r"objects\[0\]\.emission\[1\]: must be >= 0, got -1"),
    ("emits_both_sides not bool", changed((("objects", 0, "emits_both_sides"), 1)),
     r"objects\[0\]\.emits_both_sides: expected true or false, got 1"),
    ("unknown shape", changed((("objects", 0, "shape"), "cube")), r'objects\[0\]\.shape: must be one of "sphere"'),
    ("shape missing", changed((("objects", 0, "shape"),)), r"objects\[0\]\.shape: required key is missing"),
    ("key of another shape", changed((("objects", 0, "normal"), [0, 0, 1])), r"objects\[0\]\.normal: unknown key"),
    ("camera look_at = position", changed((("camera", "look_at"), [0, 0, 5])),
     r"camera\.look_at: must differ from camera\.position"),
    ("camera up parallel", changed((("camera", "up"), [0, 0, -2])),
     r"camera\.up: \[0, 0, -2\] is parallel to the view direction"),
    ("camera up zero", changed((("camera", "up"), [0, 0, 0])), r"camera\.up: must be a non-zero vector"),
    ("camera both forms", changed((("camera", "camera_to_world"), np.eye(4).tolist())),
     r"camera\.position: not allowed: position cannot be combined with camera_to_world"),
    ("camera no frame", changed((("camera",), {})), r"camera\.position: required key is missing \(give position"),
    ("camera singular camera_to_world", changed((("camera",), {"camera_to_world": [[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 0],
                                                                      [0, 0, 0, 1]]})),
     r"camera\.camera_to_world: singular matrix"),
    ("camera scaled camera_to_world", changed((("camera",), {"camera_to_world": (np.diag([2.0, 2, 2, 1])).tolist()})),
     r"camera\.camera_to_world: the 3x3 part must be a rotation"),
    ("camera mirrored camera_to_world", changed((("camera",), {"camera_to_world": np.diag([-1.0, 1, 1, 1]).tolist()})),
     r"camera\.camera_to_world: the 3x3 part must have determinant \+1"),
    ("camera projective camera_to_world", changed((("camera",), {"camera_to_world": [[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0],
                                                                        [0, 0, 1, 1]]})),
     r"camera\.camera_to_world\[3\]: bottom row must be \[0, 0, 0, 1\]"),
    ("camera camera_to_world 3x4", changed((("camera",), {"camera_to_world": np.eye(4)[:3].tolist()})),
     r"camera\.camera_to_world: must have exactly 4 items, got 3"),
    ("fov_y 180", changed((("camera", "fov_y"), 180)), r"camera\.fov_y: must be < 180, got 180"),
    ("fov_y 0", changed((("camera", "fov_y"), 0)), r"camera\.fov_y: must be > 0, got 0"),
    ("view_height for perspective", changed((("camera", "view_height"), 2)),
     r"camera\.view_height: not allowed: view_height is used only by the orthographic projection"),
    ("fov_y for orthographic", changed((("camera", "projection"), "orthographic"), (("camera", "fov_y"), 30)),
     r"camera\.fov_y: not allowed: fov_y is not used by the orthographic projection"),
    ("lens for orthographic", changed((("camera", "projection"), "orthographic"),
                                      (("camera", "lens"), {"f_number": 2.8, "focus_distance": 3})),
     r"camera\.lens: not allowed: lens is used only by the perspective projection"),
    ("lens without focus", changed((("camera", "lens"), {"f_number": 2.8})),
     r"camera\.lens\.focus_distance: required key is missing$"),
    ("zero f-number", changed((("camera", "lens"), {"f_number": 0, "focus_distance": 5})),
     r"camera\.lens\.f_number: must be > 0, got 0"),
    ("lens typo", changed((("camera", "lens"), {"f_stop": 2, "focus_distance": 5})),
     r"camera\.lens\.f_stop: unknown key \(expected one of: f_number, focus_distance\)"),
    ("fov_y and focal_length", changed((("camera", "fov_y"), 30), (("camera", "focal_length"), 50)),
     r"camera\.focal_length: give fov_y or focal_length \(with sensor_height\), not both"),
    ("negative focal length", changed((("camera", "focal_length"), -50)),
     r"camera\.focal_length: must be > 0, got -50"),
    ("sensor for orthographic", changed((("camera", "projection"), "orthographic"), (("camera", "sensor_height"), 24)),
     r"camera\.sensor_height: not allowed: sensor_height is used only by the perspective projection"),
    ("zero view_height", changed((("camera", "projection"), "orthographic"), (("camera", "view_height"), 0)),
     r"camera\.view_height: must be > 0, got 0"),
    ("bad projection", changed((("camera", "projection"), "fisheye")),
     r'camera\.projection: must be one of "perspective", "orthographic"; got "fisheye"'),
    ("zero scale", tris(transform={"scale": [1, 0, 1]}), r"objects\[0\]\.transform\.scale: must be non-zero"),
    ("zero rotation axis", tris(transform={"rotate": {"axis": [0, 0, 0], "degrees": 90}}),
     r"objects\[0\]\.transform\.rotate\.axis: must be a non-zero vector"),
    ("rotate without degrees", tris(transform={"rotate": {"axis": [0, 0, 1]}}),
     r"objects\[0\]\.transform\.rotate\.degrees: required key is missing"),
    ("transform typo", tris(transform={"translation": [1, 0, 0]}),
     r'objects\[0\]\.transform\.translation: unknown key; did you mean "translate"\? \(expected one of: scale, rotate, translate\)'),
    ("singular transform matrix", tris(transform=np.diag([1.0, 1, 0, 1]).tolist()),
     r"objects\[0\]\.transform: singular matrix"),
    ("transform on a sphere", changed((("objects", 0, "transform"), {"scale": 2})),
     r"objects\[0\]\.transform: unknown key"),
    ("transform overflow", tris(transform={"scale": 1e29, "translate": [1e30, 0, 0]}),
     r"objects\[0\]\.positions: transformed positions exceed 1e\+30 in magnitude"),
    ("zero light direction", changed((("lights",), [{"type": "directional", "direction": [0, 0, 0],
                                                     "irradiance": [1, 1, 1]}])),
     r"lights\[0\]\.direction: must be a non-zero vector"),
    ("negative intensity", changed((("lights", 0, "intensity"), [1, 1, -1])),
     r"lights\[0\]\.intensity\[2\]: must be >= 0, got -1"),
    ("two environment lights", changed((("lights",), [{"type": "environment", "radiance": [1, 1, 1]}] * 2)),
     r"lights\[1\]: at most one environment light \(lights\[0\] is one already\)"),
    ("unknown light type", changed((("lights", 0, "type"), "spot")), r'lights\[0\]\.type: must be one of "point"'),
    ("mesh path empty", shape({"shape": "mesh", "path": ""}), r"objects\[0\]\.path: must not be empty"),
    ("non-string key", changed((("objects", 0, 7), 1)), r"objects\[0\]: keys must be strings, got 7"),
    ("non-JSON value", changed((("objects", 0, "radius"), {1.0})), r"objects\[0\]\.radius: not a JSON value"),
    ("huge integer", changed((("objects", 0, "radius"), 10 ** 400)), r"objects\[0\]\.radius: must have magnitude at most 1e\+30 .*an integer of 401 digits$"),
]


def assert_one_line_error(excinfo, pattern: str) -> None:
    message = str(excinfo.value)
    assert "\n" not in message and "\r" not in message, message
    assert re.match(pattern, message), f"{message!r} does not match {pattern!r}"


@pytest.mark.parametrize("doc, pattern", [c[1:] for c in ERROR_CASES], ids=[c[0] for c in ERROR_CASES])
def test_bad_scene_dict(doc, pattern, tmp_path):
    with pytest.raises(SceneError) as excinfo:
        load_scene(doc, base_dir=tmp_path)
    assert_one_line_error(excinfo, pattern)


def test_the_minimal_scene_is_valid():
    """Guards the table: each case must fail because of its edit, not the base scene."""
    scene = load_scene(minimal())
    assert len(scene.objects) == 1 and len(scene.lights) == 1


@pytest.mark.parametrize("key, bad, pattern", [
    ("positions", [1, 2], r"objects\[0\]\.positions\[1500\]: must have exactly 3 items, got 2$"),
    ("positions", [1, "2", 3], r'objects\[0\]\.positions\[1500\]\[1\]: expected a number, got "2"$'),
    ("indices", [1, 2, -3], r"objects\[0\]\.indices\[1500\]\[2\]: must be >= 0, got -3$"),
    ("indices", [1, 2, True], r"objects\[0\]\.indices\[1500\]\[2\]: expected an integer, got true$"),
])
def test_bad_item_deep_in_a_long_triangle_list(key, bad, pattern):
    """Long lists skip jsonschema when well formed; a bad item must still be found and named."""
    n = 3000
    positions = [[float(i), float(i % 7), 0.5 * i] for i in range(n)]
    indices = [[i, (i + 1) % n, (i + 5) % n] for i in range(n)]
    spec = {"shape": "triangles", "positions": positions, "indices": indices}
    spec[key][1500] = bad
    with pytest.raises(SceneError) as excinfo:
        load_scene(shape(spec))
    assert_one_line_error(excinfo, pattern)


def test_the_message_is_the_first_problem_in_document_order():
    doc = changed((("objects", 0, "radius"), -1), (("lights", 0, "intensity"), [-1, 0, 0]))
    with pytest.raises(SceneError, match=r"^objects\[0\]\.radius"):
        load_scene(doc)


# ----------------------------------------------------------------------------- JSON text

def write_text(tmp_path, text: str):
    path = tmp_path / "scene.json"
    path.write_text(text, encoding="utf-8")
    return path


JSON_TEXT_CASES = [
    ("NaN literal", json.dumps(minimal()).replace('"radius": 1', '"radius": NaN'),
     r"objects\[0\]\.radius: NaN is not allowed \(every number must be finite\)"),
    ("Infinity literal", json.dumps(minimal()).replace('"radius": 1', '"radius": Infinity'),
     r"objects\[0\]\.radius: Infinity is not allowed"),
    ("-Infinity literal", json.dumps(minimal()).replace('"radius": 1', '"radius": -Infinity'),
     r"objects\[0\]\.radius: -Infinity is not allowed"),
    ("overflowing exponent", json.dumps(minimal()).replace('"radius": 1', '"radius": 1e400'),
     r"objects\[0\]\.radius: must be a finite number, got inf"),
    ("duplicate key", json.dumps(minimal()).replace('"radius": 1', '"radius": 1, "radius": 2'),
     r"objects\[0\]\.radius: duplicate key"),
    ("syntax error", '{\n  "version": 1,\n  "camera": {,}\n}',
     r".*scene\.json: invalid JSON at line 3, column 14: Expecting property name"),
    ("trailing comma", '{"version": 1,}', r".*scene\.json: invalid JSON at line 1, column 15"),
    ("empty file", "", r".*scene\.json: invalid JSON at line 1, column 1"),
    ("not an object", "[1, 2]", r"scene: expected an object, got \[1, 2\]$"),
]


@pytest.mark.parametrize("text, pattern", [c[1:] for c in JSON_TEXT_CASES], ids=[c[0] for c in JSON_TEXT_CASES])
def test_bad_scene_text(text, pattern, tmp_path):
    with pytest.raises(SceneError) as excinfo:
        load_scene(write_text(tmp_path, text))
    assert_one_line_error(excinfo, pattern)


def test_missing_scene_file(tmp_path):
    with pytest.raises(SceneError) as excinfo:
        load_scene(tmp_path / "absent.json")
    assert_one_line_error(excinfo, r".*absent\.json: scene file not found$")


def test_scene_path_is_a_folder(tmp_path):
    with pytest.raises(SceneError) as excinfo:
        load_scene(str(tmp_path))
    assert_one_line_error(excinfo, r".*: not a file$")


def test_scene_file_not_utf8(tmp_path):
    path = tmp_path / "scene.json"
    path.write_bytes(b'{"version": 1, "x": "\xff"}')
    with pytest.raises(SceneError) as excinfo:
        load_scene(path)
    assert_one_line_error(excinfo, r".*scene\.json: not UTF-8 text")


@pytest.mark.parametrize("source", [42, [1, 2]])
def test_source_of_wrong_type(source):
    with pytest.raises(SceneError) as excinfo:
        load_scene(source)
    assert_one_line_error(excinfo, r"scene: expected a path to a JSON file or a dict, got a (int|list)$")


# ----------------------------------------------------------------------------- mesh files

def mesh_scene(path: str) -> dict:
    return shape({"shape": "mesh", "path": path})


def export(mesh: trimesh.Trimesh, path) -> None:
    mesh.export(str(path))


def test_missing_mesh_file(tmp_path):
    with pytest.raises(SceneError) as excinfo:
        load_scene(mesh_scene("meshes/absent.obj"), base_dir=tmp_path)
    assert_one_line_error(excinfo, r"objects\[0\]\.path: file not found: .*absent\.obj$")


@pytest.mark.parametrize("name, content, pattern", [
    ("garbage.ply", b"not a ply file at all", r"objects\[0\]\.path: cannot read mesh file .*garbage\.ply: "),
    ("garbage.obj", b"v a b c\nf 1 2 3\n", r"objects\[0\]\.path: cannot read mesh file .*garbage\.obj: "),
    ("mesh.unknownext", b"v 0 0 0\n", r"objects\[0\]\.path: cannot read mesh file .*mesh\.unknownext: "),
    ("empty.obj", b"# no faces\n", r"objects\[0\]\.path: mesh file has no triangles"),
    ("points.obj", b"v 0 0 0\nv 1 0 0\nv 0 1 0\n", r"objects\[0\]\.path: mesh file has no triangles"),
    ("nan.obj", b"v nan 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n", r"objects\[0\]\.path: mesh file has non-finite"),
    ("flat.obj", b"v 0 0 0\nv 1 0 0\nv 2 0 0\nf 1 2 3\n", r"objects\[0\]\.path: every triangle of the mesh has zero"),
])
def test_bad_mesh_file(tmp_path, name, content, pattern):
    (tmp_path / name).write_bytes(content)
    with pytest.raises(SceneError) as excinfo:
        load_scene(mesh_scene(name), base_dir=tmp_path)
    assert_one_line_error(excinfo, pattern)


def test_mesh_path_is_a_folder(tmp_path):
    (tmp_path / "dir.obj").mkdir()
    with pytest.raises(SceneError) as excinfo:
        load_scene(mesh_scene("dir.obj"), base_dir=tmp_path)
    assert_one_line_error(excinfo, r"objects\[0\]\.path: not a file: ")


def test_zero_area_mesh_faces_are_dropped_with_a_warning(tmp_path):
    text = "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 2 0 0\nf 1 2 3\nf 1 2 4\nf 2 2 3\n"
    (tmp_path / "m.obj").write_text(text)
    with pytest.warns(UserWarning, match=r"objects\[0\]\.path: dropped 2 zero-area triangles of 3"):
        scene = load_scene(mesh_scene("m.obj"), base_dir=tmp_path)
    np.testing.assert_array_equal(scene.objects[0].shape.indices, [[0, 1, 2]])


def test_valid_mesh_gives_no_warning(tmp_path):
    export(trimesh.Trimesh(vertices=TRIANGLE, faces=[[0, 1, 2]], process=False), tmp_path / "t.ply")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        load_scene(mesh_scene("t.ply"), base_dir=tmp_path)


# ----------------------------------------------------------------------------- the schema itself

def iter_schemas(node, where="$"):
    if isinstance(node, dict):
        yield where, node
        for key, child in node.items():
            yield from iter_schemas(child, f"{where}.{key}")
    elif isinstance(node, list):
        for i, child in enumerate(node):
            yield from iter_schemas(child, f"{where}[{i}]")


def test_schema_is_a_valid_draft_2020_12_schema():
    """Checked with jsonschema's own meta-schema validation (JSON Schema 2020-12)."""
    Draft202012Validator.check_schema(schema())
    assert schema()["$schema"] == "https://json-schema.org/draft/2020-12/schema"


def is_condition(where: str) -> bool:
    """Sub-schemas under "if"/"then"/"else" constrain keys declared elsewhere."""
    return any(part in ("if", "then", "else") for part in where.split("."))


def test_every_schema_key_has_a_description():
    missing = [f"{where}.properties.{key}" for where, node in iter_schemas(schema())
               if isinstance(node.get("properties"), dict) and not is_condition(where)
               for key, sub in node["properties"].items() if not sub.get("description")]
    assert missing == []


def test_every_object_schema_rejects_unknown_keys():
    """Every schema declaring keys is closed, except the dispatchers on "shape"/"type",
    whose if/then branches are closed instead."""
    open_ = [where for where, node in iter_schemas(schema())
             if "properties" in node and node.get("additionalProperties") is not False
             and not is_condition(where) and "allOf" not in node]
    assert open_ == []


def test_schema_accepts_what_the_loader_accepts_for_the_minimal_scene():
    assert list(Draft202012Validator(schema()).iter_errors(minimal())) == []


# The former vocabulary of the scene format, spelt in pieces so that a search of
# the tree for those names finds real uses only.  None of them is an alias.
_FORMER = [
    (("materials", "white", "type"), "dif" + "fuse", r"materials\.white\.type: must be one of \"lambertian\""),
    (("materials", "white", "type"), "dielec" + "tric", r"materials\.white\.type: must be one of"),
    (("materials", "white", "type"), "rough" + "_conductor", r"materials\.white\.type: must be one of"),
    (("materials", "white"), {"type": "glass", "e" + "ta": 1.5}, r"materials\.white\.eta: unknown key"),
    (("materials", "white"), {"type": "glass", "outside" + "_ior": 1.2}, r"materials\.white\.outside.ior: unknown"),
    (("materials", "white"), {"type": "metal", "metal": "gold"}, r"materials\.white\.metal: unknown key"),
    (("materials", "white"), {"type": "metal", "preset": "gold", "alpha": 0.1},
     r'materials\.white\.alpha: unknown key; did you mean "ggx_alpha"\?'),
    (("objects", 0, "two" + "_sided"), True, r"objects\[0\]\.two.sided: unknown key"),
    (("camera", "projection"), "thin" + "_lens", r'camera\.projection: must be one of "perspective", "orthographic"'),
    (("camera", "aperture" + "_radius"), 0.1, r"camera\.aperture.radius: unknown key"),
    (("camera", "to" + "_world"), np.eye(4).tolist(), r'camera\.to.world: unknown key; did you mean "camera_to_world"\?'),
]


@pytest.mark.parametrize("where, value, pattern", _FORMER, ids=lambda v: str(v)[:24])
def test_former_vocabulary_is_an_error(where, value, pattern):
    """No aliases: every former name is an unknown type or key, named in one line."""
    with pytest.raises(SceneError) as excinfo:
        load_scene(changed((where, value)))
    assert_one_line_error(excinfo, pattern)
