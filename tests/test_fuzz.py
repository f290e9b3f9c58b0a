"""Property-based fuzzing of every input kind (hypothesis).

Properties (the input contract of README "Limits" and refrender/cli/main.py):

* ``load_scene`` on a mutated scene document either returns a Scene or raises
  ``SceneError`` (one line); never another exception.
* A loaded scene renders a finite image (mean and variance) at 2 spp in a
  4 x 4 film, or is refused before rendering with a ``RefrenderError``.
* The command line given bad input (scene, state file, EXR, mesh file,
  options) exits 2 with exactly one stderr line, no traceback and no output
  file; it never modifies a good ``OUT.state``.
* Damaged state files and EXRs (bytes flipped, cut, or a metadata field of the
  wrong type re-saved with valid checksums) are read or refused with one line
  by ``Result.from_state``, ``read_exr``, ``info``, ``merge`` and ``--resume``.

The examples are derandomised (a fixed seed) and their number bounded so that
the suite stays fast; ``REFRENDER_FUZZ_EXAMPLES=N`` runs N examples per
property instead (the long run of issue 15), and ``REFRENDER_FUZZ_REPORT=FILE``
appends the outcome counts of each property to FILE as JSON lines.
These are tests of our own contract, not of an outside reference.
"""
from __future__ import annotations

import collections
import copy
import json
import os
import warnings
from pathlib import Path

import numpy as np
import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

import refrender  # noqa: E402
from refrender.cli.main import main  # noqa: E402
from refrender.errors import RefrenderError, SceneError  # noqa: E402
from refrender.io import load_state, read_exr, save_state, write_exr  # noqa: E402
from refrender.result import Result  # noqa: E402

_LONG = int(os.environ.get("REFRENDER_FUZZ_EXAMPLES", "0") or 0)


def _settings(default: int):
    return settings(max_examples=_LONG or default, derandomize=True, database=None, deadline=None,
                    suppress_health_check=list(HealthCheck), print_blob=False)


_COUNTS: dict[str, collections.Counter] = collections.defaultdict(collections.Counter)


@pytest.fixture(scope="module", autouse=True)
def _report():
    yield
    target = os.environ.get("REFRENDER_FUZZ_REPORT")
    if target:
        with open(target, "a", encoding="utf-8") as fh:
            for name, counter in sorted(_COUNTS.items()):
                fh.write(json.dumps({"property": name, **counter}) + "\n")


# ----------------------------------------------------------------------------- inputs

OBJ = b"v 0 0 0\nv 1 0 0\nv 0 1 0\nv 1 1 0\nf 1 2 3\nf 2 4 3\n"

BASE = {
    "version": 1,
    "camera": {"position": [0, 1, 4], "look_at": [0, 0.5, 0], "fov_y": 50},
    "film": {"width": 4, "height": 4},
    "materials": {
        "white": {"type": "lambertian", "albedo": [0.7, 0.7, 0.7]},
        "mirror": {"type": "mirror", "reflectance": [0.9, 0.9, 0.9]},
        "glass": {"type": "glass", "ior": 1.5, "ggx_alpha": 0.2},
        "gold": {"type": "metal", "n": [0.2, 0.4, 1.4], "k": [3.6, 2.3, 1.9], "ggx_alpha": 0.3},
        "tin": {"type": "metal", "f0": [0.8, 0.8, 0.8]},
        "glow": {"type": "metallic_roughness", "base_color": [0.5, 0.2, 0.2], "metallic": 0.5,
                 "roughness": 0.5, "emissive": [1, 1, 1], "emissive_strength": 2},
    },
    "objects": [
        {"shape": "rectangle", "origin": [-2, 0, -2], "edge1": [0, 0, 4], "edge2": [4, 0, 0],
         "material": "white"},
        {"shape": "sphere", "center": [-0.6, 0.5, 0], "radius": 0.4, "material": "glass"},
        {"shape": "sphere", "center": [0.6, 0.5, 0], "radius": 0.4, "material": "gold"},
        {"shape": "disk", "center": [0, 2, 0], "normal": [0, -1, 0], "radius": 0.5,
         "emission": [4, 4, 4]},
        {"shape": "triangles", "positions": [[-1, 0, -1], [1, 0, -1], [0, 1, -1]],
         "indices": [[0, 1, 2]], "material": "tin"},
        {"shape": "mesh", "path": "good.obj", "material": "glow",
         "transform": {"scale": 0.5, "translate": [0, 0, -1.5]}},
    ],
    "lights": [
        {"type": "point", "position": [1, 2, 1], "intensity": [2, 2, 2]},
        {"type": "directional", "direction": [0, -1, -0.2], "irradiance": [0.5, 0.5, 0.5]},
        {"type": "environment", "radiance": [0.1, 0.1, 0.2]},
    ],
    "render": {"spp": 2, "seed": 7, "max_bounces": 4},
}

#: values that broke or nearly broke a loader or a kernel (from issue 15 and this fuzz)
NASTY = [
    0, -1, 1, 2, 0.5, -0.0, 1e-300, 5e-324, 1e-31, 1e-30, 1e29, 1e30, 1.0000001e30, 1e31, 1e154, 1e308,
    -1e308, 2 ** 31, 2 ** 63, 2 ** 64, -(2 ** 63), 10 ** 300, 1.5, 3.0, True, False, None, "", "x",
    "a\x00b", "lambertian", "metal", "sphere", "environment", "perspective", "orthographic",
    [], [0], [0, 0, 0], [1, 1, 1], [1e308, 1e308, 1e308], [1e30, -1e30, 1e30], [0, 0, 0, 0],
    [[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]], {}, {"factor": 1},
]
#: mesh and image paths: missing, too long, NUL byte, symlink loop, folder, damaged, huge
PATHS = ["good.obj", "missing.obj", "a" * 300 + ".obj", "bad\x00.obj", "loop.obj", "folder.obj",
         "garbage.obj", "huge.obj", "empty.obj", "tiny.obj", "good.ply", "garbage.exr", "", "."]

_number = st.one_of(st.floats(allow_nan=False, allow_infinity=False),
                    st.integers(min_value=-(10 ** 40), max_value=10 ** 40))
_value = st.one_of(st.sampled_from(NASTY), _number, st.text(max_size=4), st.sampled_from(PATHS),
                   st.lists(_number, min_size=3, max_size=3))


def _paths(doc, prefix=()):
    """Every field path of a document (containers and leaves)."""
    out = [prefix] if prefix else []
    if isinstance(doc, dict):
        for key, value in doc.items():
            out += _paths(value, prefix + (key,))
    elif isinstance(doc, list):
        for i, value in enumerate(doc):
            out += _paths(value, prefix + (i,))
    return out


def _get_parent(doc, path):
    node = doc
    for part in path[:-1]:
        node = node[part]
    return node


_NASTY_NUMBERS = [v for v in NASTY if isinstance(v, (int, float)) and not isinstance(v, bool)]


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


@st.composite
def mutated_scenes(draw):
    """BASE with 1-3 mutations: mostly a number changed (type kept, so that many
    mutants pass the schema and reach the renderer), else any field replaced,
    deleted or a key added."""
    doc = copy.deepcopy(BASE)
    for _ in range(draw(st.sampled_from([1, 1, 1, 2, 2, 3]))):
        paths = _paths(doc)
        numeric = [p for p in paths if _is_number(_get_parent(doc, p)[p[-1]])]
        op = draw(st.sampled_from(["number"] * 5 + ["scaled"] * 2 + ["replace", "replace", "delete", "add"]))
        if op in ("number", "scaled") and numeric:
            path = draw(st.sampled_from(numeric))
            parent = _get_parent(doc, path)
            if op == "number":
                parent[path[-1]] = draw(st.one_of(st.sampled_from(_NASTY_NUMBERS),
                                                  st.floats(-1e31, 1e31, allow_nan=False)))
            else:
                old = parent[path[-1]]
                exponent = draw(st.sampled_from([-300, -200, -100, -40, -30, -12, -6, 6, 12, 28, 29, 30, 31]))
                parent[path[-1]] = (old or 1) * 10.0 ** exponent * draw(st.sampled_from([1, -1]))
            continue
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = _get_parent(doc, path)
        if op == "delete":
            del parent[path[-1]]
        elif op == "add" and isinstance(parent, dict):
            parent[draw(st.sampled_from(["zzz", "scale", "emission", "lens", "crop", "up", "image",
                                         "ggx_alpha", "exterior_ior", "uvs", "transform"]))] = draw(_value)
        else:
            parent[path[-1]] = draw(_value)
    return doc


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    """Scene folder with good and bad referenced files."""
    d = tmp_path_factory.mktemp("fuzz")
    (d / "good.obj").write_bytes(OBJ)
    (d / "garbage.obj").write_bytes(bytes(range(256)) * 3)
    (d / "huge.obj").write_bytes(b"v 1e308 0 0\nv 0 1e308 0\nv 0 0 1e308\nf 1 2 3\n")
    (d / "tiny.obj").write_bytes(b"v 0 0 0\nv 1e-200 0 0\nv 0 1e-200 0\nf 1 2 3\n")
    (d / "empty.obj").write_bytes(b"")
    (d / "good.ply").write_bytes(b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\n"
                                 b"property float y\nproperty float z\nelement face 1\n"
                                 b"property list uchar int vertex_indices\nend_header\n"
                                 b"0 0 0\n1 0 0\n0 1 0\n3 0 1 2\n")
    (d / "garbage.exr").write_bytes(b"\x76\x2f\x31\x01" + bytes(200))
    (d / "folder.obj").mkdir()
    os.symlink(d / "loop.obj", d / "loop.obj")
    return d


def _render_checked(scene, counter):
    """Render 2 spp in a small film; a refusal is fine, a non-finite pixel is not."""
    x0, y0, x1, y1 = scene.film.window
    if (x1 - x0) * (y1 - y0) > 64:
        counter["loaded, film too large to render here"] += 1
        return
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = refrender.render(scene, spp=2, threads=1)
    except RefrenderError as exc:
        assert "\n" not in str(exc)
        counter["refused before rendering"] += 1
        return
    assert np.isfinite(res.mean).all(), "non-finite mean"
    assert np.isfinite(res.variance).all(), "non-finite variance"
    counter["rendered finite"] += 1
    if res.stats["nonfinite_samples"]:
        counter["rendered, samples excluded"] += 1


def _load(doc, base):
    try:
        return refrender.load_scene(doc, base_dir=base)
    except SceneError as exc:
        message = str(exc)
        assert message and "\n" not in message, repr(message)
        return None


@_settings(150)
@given(doc=mutated_scenes())
def test_mutated_scenes_load_or_raise_scene_error_and_render_finite(doc, folder):
    counter = _COUNTS["scene documents"]
    counter["tried"] += 1
    scene = _load(doc, folder)
    if scene is None:
        counter["SceneError"] += 1
        return
    _render_checked(scene, counter)


@_settings(40)
@given(data=st.one_of(st.binary(max_size=300),
                      st.builds(lambda cut, flips: (OBJ, cut, flips), st.integers(0, len(OBJ)),
                                st.lists(st.tuples(st.integers(0, len(OBJ) - 1), st.integers(0, 255)),
                                         max_size=4))),
       suffix=st.sampled_from([".obj", ".ply", ".stl", ".off"]))
def test_damaged_mesh_files_load_or_raise_scene_error(data, suffix, folder):
    counter = _COUNTS["mesh files"]
    counter["tried"] += 1
    if isinstance(data, tuple):
        raw, cut, flips = data
        buf = bytearray(raw[:max(cut, 1)] if cut else raw)
        for pos, byte in flips:
            if pos < len(buf):
                buf[pos] = byte
        data = bytes(buf)
    path = folder / f"damaged{suffix}"
    path.write_bytes(data)
    doc = copy.deepcopy(BASE)
    doc["objects"][5]["path"] = path.name
    scene = _load(doc, folder)
    if scene is None:
        counter["SceneError"] += 1
        return
    _render_checked(scene, counter)


# ----------------------------------------------------------------------------- command line

def _one_line(capfd) -> str:
    err = capfd.readouterr().err
    lines = err.splitlines()
    assert len(lines) == 1, f"expected one stderr line, got:\n{err}"
    assert lines[0].startswith("refrender: error:"), lines[0]
    assert "Traceback" not in err
    return lines[0]


@pytest.fixture(scope="module")
def good(tmp_path_factory, folder):
    """A finished render of BASE: its scene file, EXR, state and a disjoint second state."""
    d = tmp_path_factory.mktemp("good")
    scene_path = folder / "base.json"
    scene_path.write_text(json.dumps(BASE))
    scene = refrender.load_scene(scene_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        refrender.render(scene, spp=2, threads=1).save(d / "a.exr")
        refrender.render(scene, spp=2, first_sample=2, threads=1).save(d / "b.exr")
    return {"scene": scene_path, "exr": (d / "a.exr").read_bytes(), "state": (d / "a.state").read_bytes(),
            "b_state": d / "b.state"}


def _cli(argv, capfd, counter, outputs=()):
    """Run the CLI in-process; exit 0, or 2 with one line and no new output files."""
    before = {p: (p.read_bytes() if p.exists() else None) for p in outputs}
    code = main([str(a) for a in argv])
    if code == 0:
        capfd.readouterr()
        counter["exit 0"] += 1
        return 0
    assert code == 2, f"exit status {code}"
    _one_line(capfd)
    counter["exit 2, one line"] += 1
    for p, content in before.items():
        now = p.read_bytes() if p.exists() else None
        assert now == content, f"{p} was modified by a failing command"
    return code


@_settings(60)
@given(doc=mutated_scenes())
def test_cli_bad_scene_exits_2_and_keeps_a_good_state(doc, good, folder, tmp_path_factory, capfd):
    counter = _COUNTS["CLI scene files"]
    counter["tried"] += 1
    d = tmp_path_factory.mktemp("cli")
    scene_path = folder / "mutated.json"
    scene_path.write_text(json.dumps(doc))
    out = d / "out.exr"
    (d / "out.state").write_bytes(good["state"])
    code = _cli(["render", scene_path, "-o", out, "--spp", "1", "--threads", "1", "--quiet"],
                capfd, counter, outputs=[d / "out.state"])
    if code:
        assert not out.exists()
        assert {p.name for p in d.iterdir()} == {"out.state"}


_OPTIONS = ["--spp", "--time", "--target-error", "--min-spp", "--checkpoint-every", "--seed",
            "--first-sample", "--max-bounces", "--rr-start", "--strategy", "--light-sampling",
            "--threads", "--exposure", "--task-spp", "--preview", "--local-workers"]
_OPTION_VALUES = ["0", "-1", "1", "2", "nan", "inf", "-inf", "1e400", "2" * 30, "x", "", "1h", "0s",
                  "none", "mis", "area", "a.png", "missing/a.png", "out.exr", "9223372036854775808"]


@_settings(60)
@given(pairs=st.lists(st.tuples(st.sampled_from(_OPTIONS), st.sampled_from(_OPTION_VALUES)),
                      min_size=1, max_size=3),
       resume=st.booleans())
def test_cli_bad_options_exit_2_and_keep_a_good_state(pairs, resume, good, tmp_path_factory, capfd):
    counter = _COUNTS["CLI options"]
    counter["tried"] += 1
    if any(o in ("--local-workers", "--task-spp") for o, _ in pairs) and not any(
            v in ("0", "-1", "x", "", "nan", "inf", "-inf", "1e400") for _, v in pairs):
        pairs = [(o, "0") if o == "--local-workers" else (o, v) for o, v in pairs]  # no farm here
    d = tmp_path_factory.mktemp("opts")
    out = d / "out.exr"
    (d / "out.state").write_bytes(good["state"])
    argv = ["render", good["scene"], "-o", out, "--quiet", "--threads", "1"]
    argv += [x for pair in pairs for x in pair]
    if not any(o in ("--spp", "--time", "--target-error") for o, _ in pairs):
        argv += ["--spp", "3"]
    if resume:
        argv.append("--resume")
    # a successful run may render for a while: budgets are bounded by the tiny scene
    if any(o == "--time" for o, _ in pairs) or any(o == "--target-error" for o, _ in pairs):
        argv += ["--spp", "4"]
    _cli(argv, capfd, counter, outputs=[d / "out.state"])


# ----------------------------------------------------------------------------- state files and EXRs

_META_PATHS = ["run", "stats", "sample_ranges", "window", "seed", "spp", "width", "height", "noise",
               "stop_reason", "scene_sha256", "max_bounces", "strategy", "run.sessions", "run.complete",
               "run.budget", "run.budget.spp", "run.budget.time_s", "run.budget.target_error",
               "run.budget.min_spp", "run.error_checks", "run.kernel_sha256", "run.stop_reason",
               "stats.seconds", "stats.rays", "stats.nonfinite_samples", "stats.traversal_share",
               "noise.rel_error_mean", "sample_ranges.0", "sample_ranges.0.1", "window.2"]


def _set(meta, dotted, value):
    parts = [int(p) if p.isdigit() else p for p in dotted.split(".")]
    node = meta
    for part in parts[:-1]:
        try:
            node = node[part]
        except (KeyError, IndexError, TypeError):
            return
    try:
        if value is _DELETE:
            del node[parts[-1]]
        else:
            node[parts[-1]] = value
    except (KeyError, IndexError, TypeError):
        pass


_DELETE = object()
_field_damage = st.lists(st.tuples(st.sampled_from(_META_PATHS),
                                   st.one_of(_value, st.just(_DELETE), st.just([[0, 2]]),
                                             st.just(float("nan")), st.just(float("inf")))),
                         min_size=1, max_size=3)
_byte_damage = st.tuples(st.floats(0, 1), st.lists(st.tuples(st.floats(0, 1), st.integers(0, 255)),
                                                   max_size=6))
_array_damage = st.sampled_from(["sum float32", "count float64", "sum transposed", "sum nan",
                                 "sum_sq negative", "count huge", "drop count", "sum 1e308"])


def _damage_bytes(data: bytes, cut: float, flips) -> bytes:
    buf = bytearray(data[: max(1, int(len(data) * cut))] if cut < 0.999 else data)
    for where, byte in flips:
        buf[min(len(buf) - 1, int(where * len(buf)))] = byte
    return bytes(buf)


def _damaged_state(path: Path, good_state: bytes, kind, damage) -> None:
    path.write_bytes(good_state)
    if kind == "bytes":
        path.write_bytes(_damage_bytes(good_state, *damage))
        return
    arrays, meta = load_state(path)
    for key in ("format", "format_version", "sha256"):
        meta.pop(key)
    if kind == "fields":
        for dotted, value in damage:
            _set(meta, dotted, value)
    else:
        a = {k: np.array(v) for k, v in arrays.items()}
        if damage == "sum float32":
            a["sum"] = a["sum"].astype(np.float32)
        elif damage == "count float64":
            a["count"] = a["count"].astype(np.float64)
        elif damage == "sum transposed":
            a["sum"] = np.ascontiguousarray(a["sum"].transpose(1, 0, 2)[:, :3])
        elif damage == "sum nan":
            a["sum"][0, 0, 0] = np.nan
        elif damage == "sum_sq negative":
            a["sum_sq"][0, 0, 0] = -1.0
        elif damage == "count huge":
            a["count"][0, 0] = 2 ** 62
        elif damage == "drop count":
            del a["count"]
        elif damage == "sum 1e308":
            a["sum"][:] = 1e308
        arrays = a
    try:
        save_state(path, arrays, meta)
    except RefrenderError:
        path.write_bytes(good_state[: len(good_state) // 2])   # not even writable: a cut file


@_settings(120)
@given(kind_damage=st.one_of(st.tuples(st.just("bytes"), _byte_damage),
                             st.tuples(st.just("fields"), _field_damage),
                             st.tuples(st.just("arrays"), _array_damage)),
       command=st.sampled_from(["from_state", "info", "info --json", "merge", "resume"]))
def test_damaged_state_files_are_read_or_refused_with_one_line(kind_damage, command, good,
                                                               tmp_path_factory, capfd):
    kind, damage = kind_damage
    counter = _COUNTS[f"state files ({kind})"]
    counter["tried"] += 1
    d = tmp_path_factory.mktemp("state")
    state = d / "out.state"
    _damaged_state(state, good["state"], kind, damage)
    if command == "from_state":
        try:
            Result.from_state(state)
            counter["read"] += 1
        except RefrenderError as exc:
            assert "\n" not in str(exc)
            counter["refused, one line"] += 1
        return
    if command.startswith("info"):
        _cli(["info", state] + (["--json"] if "json" in command else []), capfd, counter)
    elif command == "merge":
        _cli(["merge", state, good["b_state"], "-o", d / "merged.exr", "--quiet"], capfd, counter,
             outputs=[d / "merged.exr", d / "merged.state"])
    else:
        (d / "out.exr").write_bytes(good["exr"])
        _cli(["render", good["scene"], "-o", d / "out.exr", "--resume", "--spp", "3", "--threads", "1",
              "--quiet"], capfd, counter)


@_settings(80)
@given(kind_damage=st.one_of(st.tuples(st.just("bytes"), _byte_damage),
                             st.tuples(st.just("fields"), _field_damage)),
       command=st.sampled_from(["read_exr", "read_image", "info", "merge"]))
def test_damaged_exrs_are_read_or_refused_with_one_line(kind_damage, command, good, tmp_path_factory,
                                                        capfd):
    kind, damage = kind_damage
    counter = _COUNTS[f"EXR files ({kind})"]
    counter["tried"] += 1
    d = tmp_path_factory.mktemp("exr")
    exr = d / "out.exr"
    exr.write_bytes(good["exr"])
    if kind == "bytes":
        exr.write_bytes(_damage_bytes(good["exr"], *damage))
    else:
        img = read_exr(exr)
        meta = dict(img.metadata)
        for dotted, value in damage:
            _set(meta, dotted, value)
        try:
            write_exr(exr, img.rgb(), img.layer("variance"), meta)
        except RefrenderError:
            return
    if command in ("read_exr", "read_image"):
        reader = read_exr if command == "read_exr" else refrender.io.read_image
        try:
            reader(exr)
            counter["read"] += 1
        except RefrenderError as exc:
            assert "\n" not in str(exc)
            counter["refused, one line"] += 1
        err = capfd.readouterr().err
        assert err == "", f"a library printed on stderr:\n{err}"
    elif command == "info":
        _cli(["info", exr], capfd, counter)
    else:   # an EXR input stands for the state beside it: there is none
        _cli(["merge", exr, good["b_state"], "-o", d / "merged.exr", "--quiet"], capfd, counter,
             outputs=[d / "merged.exr"])
