"""Hardened inputs (issue 15): the input classes that once raised, crashed or
overflowed, one test each, and the output lock and disk check.

Expected behaviour is refrender's own contract (README "Limits", one-line
errors with exit 2); the float64 limits are IEEE 754 binary64 facts
(largest finite double (2 - 2**-52) * 2**1023, about 1.798e308).
"""
from __future__ import annotations

import copy
import json
import os
import subprocess
import sys
import warnings

import numpy as np
import pytest

import refrender
from refrender.cli.main import main
from refrender.errors import ImageError, RenderError, SceneError
from refrender.io import load_state, save_state
from refrender.io.lock import OutputLock, lock_path_for
from refrender.limits import SAMPLE_MAX, SCENE_NUMBER_MAX, SPP_MAX
from refrender.materials.fresnel import fresnel_conductor
from refrender.overnight import check_disk, file_bytes, format_bytes, output_bytes
from refrender.result import Result

SCENE = {
    "version": 1,
    "camera": {"position": [0, 1, 3], "look_at": [0, 0.5, 0], "fov_y": 45},
    "film": {"width": 4, "height": 4},
    "materials": {"m": {"type": "lambertian", "albedo": [0.6, 0.5, 0.4]},
                  "zero": {"type": "metal", "n": [0, 0, 0], "k": [0, 0, 0]},
                  "rough_zero": {"type": "metal", "n": [0, 0, 0], "k": [0, 0, 0], "ggx_alpha": 0.3}},
    "objects": [
        {"shape": "rectangle", "origin": [-2, 0, -2], "edge1": [0, 0, 4], "edge2": [4, 0, 0],
         "material": "m"},
        {"shape": "sphere", "center": [-0.5, 0.5, 0], "radius": 0.4, "material": "zero"},
        {"shape": "sphere", "center": [0.5, 0.5, 0], "radius": 0.4, "material": "rough_zero"},
        {"shape": "disk", "center": [0, 2, 0], "normal": [0, -1, 0], "radius": 0.6,
         "emission": [3, 3, 3]},
    ],
    "render": {"spp": 2, "seed": 1, "max_bounces": 4},
}


def _doc(**changes):
    doc = copy.deepcopy(SCENE)
    for dotted, value in changes.items():
        node = doc
        parts = [int(p) if p.isdigit() else p for p in dotted.split("__")]
        for p in parts[:-1]:
            node = node[p]
        node[parts[-1]] = value
    return doc


def _render(doc, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return refrender.render(refrender.load_scene(doc), spp=2, threads=1, **kw)


# ----------------------------------------------------------------------------- limits

def test_the_limits_fit_float64():
    """SAMPLE_MAX**2 * SPP_MAX below the largest double; four-fold products of scene numbers too."""
    assert SAMPLE_MAX ** 2 * SPP_MAX < np.finfo(np.float64).max
    assert (2 * SCENE_NUMBER_MAX) ** 4 < np.finfo(np.float64).max
    # an emission at the limit leaves a wide margin below SAMPLE_MAX for geometric factors
    assert SAMPLE_MAX / SCENE_NUMBER_MAX > 1e100


@pytest.mark.parametrize("changes, pattern", [
    ({"objects__1__radius": 1e308}, r"objects\[1\]\.radius: must have magnitude at most 1e\+30"),
    ({"objects__3__emission": [1e154, 1, 1]}, r"objects\[3\]\.emission\[0\]: must have magnitude at most"),
    ({"objects__3__emission": [1e308, 1, 1]}, r"objects\[3\]\.emission\[0\]: must have magnitude at most"),
    ({"objects__0__edge1": [0, 0, 1e-31], "objects__0__edge2": [1e-31, 0, 0]},
     r"objects\[0\]: area .* is below 1e-60"),
    ({"objects__1__radius": 1e-40}, r"objects\[1\]\.radius: must be >= 1e-30"),
    ({"render__max_bounces": 10 ** 300}, r"render\.max_bounces: must have magnitude at most"),
    ({"render__rr_start": 2 ** 40}, r"render\.rr_start: must be <= 2147483647"),
    ({"objects__3": {"shape": "triangles", "positions": [[0, 0, 0], [1, 0, 0], [0, 1, 0]],
                     "indices": [[0, 1, 1e308]]}}, r"objects\[3\]\.indices\[0\]\[2\]: must have magnitude"),
    ({"objects__3": {"shape": "triangles", "positions": [[0, 0, 0], [1, 0, 0], [0, 1, 0]],
                     "indices": [[0, 1, 2 ** 40]]}}, r"objects\[3\]\.indices\[0\]\[2\]: must be <= 2147483647"),
    ({"objects__3": {"shape": "triangles", "positions": [[0, 0, 0], [1e-31, 0, 0], [0, 1e-31, 0]],
                     "indices": [[0, 1, 2]]}}, r"objects\[3\]\.indices\[0\]: triangle 0 has zero area"),
    ({"materials__g": {"type": "metallic_roughness", "emissive": [1e20, 0, 0], "emissive_strength": 1e20}},
     r"materials\.g\.emissive_strength: emissive \* emissive_strength exceeds 1e\+30"),
])
def test_values_beyond_the_limits_are_scene_errors(changes, pattern):
    with pytest.raises(SceneError, match=pattern) as info:
        refrender.load_scene(_doc(**changes))
    assert "\n" not in str(info.value)


def test_emission_at_the_limit_renders_a_finite_image_and_variance():
    """Emission 1e30 (the limit): sums of squares stay finite (1e154 once overflowed them)."""
    res = _render(_doc(objects__3__emission=[1e30, 1e30, 1e30]))
    assert np.isfinite(res.sum_sq).all() and np.isfinite(res.mean).all() and np.isfinite(res.variance).all()
    assert res.mean.max() > 1e28


def test_coordinates_at_the_limit_render_finite():
    """A sphere of radius 1e30 around the scene (1e308 once overflowed at render time)."""
    doc = _doc()
    doc["objects"].append({"shape": "sphere", "center": [0, 0, 0], "radius": 1e30, "material": "m"})
    res = _render(doc)
    assert np.isfinite(res.mean).all() and np.isfinite(res.variance).all()


# ----------------------------------------------------------------------------- kernels never raise

@pytest.mark.parametrize("cos_i", [1.0, 0.7, 0.0])
def test_conductor_of_index_zero_reflects_everything(cos_i):
    """n = k = 0: the Fresnel amplitudes r_s = (cos - w)/(cos + w), r_p = (eta^2 cos - w)/(eta^2 cos + w)
    with w = sqrt(eta^2 - sin^2) tend to modulus 1 as eta -> 0 (Born & Wolf, Principles of
    Optics, Fresnel formulae; the 0/0 cases at normal and grazing incidence take that limit).
    The compiled kernel raised ZeroDivisionError here."""
    assert fresnel_conductor(cos_i, 0.0, 0.0) == pytest.approx(1.0, abs=1e-12)
    # the limit is continuous: a tiny index gives nearly 1
    assert fresnel_conductor(cos_i, 1e-9, 1e-9) == pytest.approx(1.0, abs=1e-6)


def test_metal_of_index_zero_renders_finite():
    res = _render(_doc())
    assert np.isfinite(res.mean).all() and np.isfinite(res.variance).all()
    assert res.stats["nonfinite_samples"] == 0


def test_point_light_on_a_surface_gives_a_finite_image():
    """A point light exactly on the floor: 1/d^2 = inf for some shading points; such samples
    are excluded and counted, the image stays finite."""
    doc = _doc()
    doc["lights"] = [{"type": "point", "position": [0, 0, 0], "intensity": [1, 1, 1]}]
    res = _render(doc)
    assert np.isfinite(res.mean).all() and np.isfinite(res.variance).all()


# ----------------------------------------------------------------------------- scene and file paths

def test_scene_file_paths_that_os_calls_reject_are_scene_errors(tmp_path):
    loop = tmp_path / "loop.json"
    os.symlink(loop, loop)
    for source in ["x" * 5000 + ".json", "bad\x00name.json", loop]:
        with pytest.raises(SceneError) as info:
            refrender.load_scene(source)
        assert "\n" not in str(info.value)


@pytest.mark.parametrize("name", ["m" * 5000 + ".obj", "bad\x00.obj", "loop.obj"])
def test_mesh_paths_that_os_calls_reject_name_the_field(tmp_path, name):
    os.symlink(tmp_path / "loop.obj", tmp_path / "loop.obj")
    doc = _doc()
    doc["objects"].append({"shape": "mesh", "path": name})
    with pytest.raises(SceneError, match=r"^objects\[4\]\.path: cannot read") as info:
        refrender.load_scene(doc, base_dir=tmp_path)
    assert "\n" not in str(info.value)


# ----------------------------------------------------------------------------- state and EXR metadata

@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    d = tmp_path_factory.mktemp("saved")
    path = d / "scene.json"
    path.write_text(json.dumps(SCENE))
    _render(json.loads(path.read_text())).save(d / "a.exr")
    return d, path


def _damaged_copy(saved, tmp_path, dotted, value):
    d, _ = saved
    arrays, meta = load_state(d / "a.state")
    for key in ("format", "format_version", "sha256"):
        meta.pop(key)
    node = meta
    parts = dotted.split(".")
    for p in parts[:-1]:
        node = node[p]
    node[parts[-1]] = value
    out = tmp_path / "out.state"
    save_state(out, arrays, meta)        # valid CRC and SHA-256: only the field is wrong
    return out


@pytest.mark.parametrize("dotted, value, field", [
    ("stats.seconds", [1, 2], "stats.seconds"),
    ("run.sessions", "3", "run.sessions"),
    ("run", [1], "run"),
    ("run.budget.spp", 0, "run.budget.spp"),
    ("sample_ranges", [[0, "2"]], r"sample_ranges\[0\]\[1\]"),
    ("window", [0, 0, 4, 99999], r"window\[3\]"),
    ("seed", -1, "seed"),
])
def test_damaged_state_metadata_is_one_line_naming_the_field(saved, tmp_path, capsys, dotted, value, field):
    state = _damaged_copy(saved, tmp_path, dotted, value)
    with pytest.raises(ImageError, match=rf"corrupted refrender metadata \({field}: "):
        Result.from_state(state)
    d, scene = saved
    for argv in (["info", state], ["merge", state, "-o", tmp_path / "m.exr"],
                 ["render", scene, "-o", tmp_path / "out.exr", "--resume", "--spp", "3"]):
        before = state.read_bytes()
        assert main([str(a) for a in argv]) == 2
        err = capsys.readouterr().err
        assert len(err.splitlines()) == 1 and "Traceback" not in err, err
        assert state.read_bytes() == before
        assert not (tmp_path / "m.exr").exists()


def test_damaged_exr_metadata_is_one_line(saved, tmp_path, capsys):
    from refrender.io import read_exr, write_exr
    d, _ = saved
    img = read_exr(d / "a.exr")
    meta = dict(img.metadata, stats={"seconds": "soon"})
    write_exr(tmp_path / "x.exr", img.rgb(), img.layer("variance"), meta)
    assert main(["info", str(tmp_path / "x.exr")]) == 2
    err = capsys.readouterr().err
    assert err.splitlines() == [f"refrender: error: {tmp_path / 'x.exr'}: corrupted refrender metadata "
                                "(stats.seconds: expected a number, got \"soon\")"]


def test_corrupt_exr_gives_one_line_and_no_library_output(saved, tmp_path, capfd):
    """The OpenEXR library printed its own lines on stderr before ours."""
    d, _ = saved
    data = bytearray((d / "a.exr").read_bytes())
    data[len(data) // 2:] = bytes(len(data) - len(data) // 2)
    (tmp_path / "bad.exr").write_bytes(bytes(data[: len(data) * 3 // 4]))
    assert main(["info", str(tmp_path / "bad.exr")]) == 2
    err = capfd.readouterr().err
    assert len(err.splitlines()) == 1 and err.startswith("refrender: error:"), err


# ----------------------------------------------------------------------------- the output lock

def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_lock_refuses_a_second_writer_and_is_released(tmp_path):
    out = tmp_path / "o.exr"
    with OutputLock(out):
        assert lock_path_for(out).exists()
        with pytest.raises(RenderError, match=r"^--output: .* is being written by another render \(pid "):
            OutputLock(out).acquire()
    assert not lock_path_for(out).exists()
    with pytest.raises(ZeroDivisionError):
        with OutputLock(out):
            1 / 0
    assert not lock_path_for(out).exists()


def test_stale_lock_of_a_dead_process_is_taken_over(tmp_path):
    import socket
    out = tmp_path / "o.exr"
    lock_path_for(out).write_text(json.dumps({"pid": _dead_pid(), "host": socket.gethostname(),
                                              "started": "earlier"}))
    with OutputLock(out):
        assert json.loads(lock_path_for(out).read_text())["pid"] == os.getpid()
    assert not lock_path_for(out).exists()
    # a live process on another host is not judged: refused
    lock_path_for(out).write_text(json.dumps({"pid": 1, "host": "elsewhere", "started": "now"}))
    with pytest.raises(RenderError, match="pid 1 on elsewhere"):
        OutputLock(out).acquire()


def test_cli_render_refused_while_another_render_holds_the_output(saved, tmp_path, capsys):
    d, scene = saved
    out = tmp_path / "o.exr"
    (tmp_path / "o.state").write_bytes((d / "a.state").read_bytes())
    before = (tmp_path / "o.state").read_bytes()
    with OutputLock(out):
        assert main(["render", str(scene), "-o", str(out), "--spp", "2", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and "is being written by another render" in err
    assert (tmp_path / "o.state").read_bytes() == before and not out.exists()


def test_sigkilled_render_leaves_a_stale_lock_that_the_next_render_takes(saved, tmp_path):
    """SIGKILL cannot run a finally: the lock stays, naming a dead pid of this host."""
    import signal
    import time
    d, scene = saved
    out = tmp_path / "o.exr"
    env = dict(os.environ, PYTHONPATH=os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    proc = subprocess.Popen([sys.executable, "-m", "refrender", "render", str(scene), "-o", str(out),
                             "--spp", "100000000", "--checkpoint-every", "0.2s", "--quiet", "--threads", "1"],
                            env=env, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 240
    while not (tmp_path / "o.state").exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert lock_path_for(out).exists()
    assert main(["render", str(scene), "-o", str(out), "--resume", "--spp", "2", "--quiet"]) in (0, 2)
    assert not lock_path_for(out).exists()


# ----------------------------------------------------------------------------- disk check

def test_sizes_are_printed_in_units_that_fit():
    assert format_bytes(512) == "512 B"
    assert format_bytes(3 * 2 ** 10 + 512) == "3.5 KiB"
    assert format_bytes(8 * 2 ** 20) == "8 MiB"
    assert format_bytes(1.2 * 2 ** 30) == "1.2 GiB"


def test_disk_check_counts_the_temporary_copy_of_a_checkpoint(tmp_path, monkeypatch):
    """A checkpoint writes the new state beside the old one: the peak is every file plus
    a second copy of the largest (8 MiB once passed the check and failed at a checkpoint)."""
    sizes = file_bytes(512, 512)
    need = output_bytes(512, 512)
    assert need == sizes["state"] + sizes["exr"] + max(sizes.values())
    import shutil
    usage = shutil.disk_usage(tmp_path)
    monkeypatch.setattr(shutil, "disk_usage", lambda p: usage._replace(free=need - 1))
    with pytest.raises(RenderError, match=r"need about \d.* MiB, only \d.* MiB free"):
        check_disk(tmp_path, 512, 512)
    monkeypatch.setattr(shutil, "disk_usage", lambda p: usage._replace(free=need))
    check_disk(tmp_path, 512, 512)


def test_empty_preview_name_is_refused_before_the_render(saved, tmp_path, capsys):
    """Found by the long fuzz run: --preview '' skipped the option check, rendered, rewrote
    OUT.state and then failed writing the preview ('.'): a failing command modified a good state."""
    d, scene = saved
    out = tmp_path / "o.exr"
    (tmp_path / "o.state").write_bytes((d / "a.state").read_bytes())
    before = (tmp_path / "o.state").read_bytes()
    assert main(["render", str(scene), "-o", str(out), "--spp", "3", "--quiet", "--preview", ""]) == 2
    err = capsys.readouterr().err
    assert err.splitlines() == ["refrender: error: --preview: expected a .png file name, got '.'"]
    assert (tmp_path / "o.state").read_bytes() == before and not out.exists()
