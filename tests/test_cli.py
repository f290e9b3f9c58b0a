"""The command line (refrender.cli.main.main called in-process).

Expected behaviour is the CLI's documented contract (refrender/cli/main.py and
refrender/errors.py): success exits 0 and prints a one-line summary; every user error
exits 2 with exactly one line "refrender: error: ..." on stderr, no traceback and no
output file (writers are atomic: no temporary file is left either).
"""
from __future__ import annotations

import json
from pathlib import Path

import numba
import numpy as np
import pytest

from refrender.cli.main import main
from refrender.io import read_exr

TINY = {
    "version": 1,
    "camera": {"position": [0, 1, 3], "look_at": [0, 0.5, 0], "fov_y": 45},
    "film": {"width": 8, "height": 6},
    "materials": {"m": {"type": "lambertian", "albedo": [0.6, 0.5, 0.4]}},
    "objects": [
        {"shape": "rectangle", "origin": [-2, 0, -2], "edge1": [0, 0, 4], "edge2": [4, 0, 0],
         "material": "m"},
        {"shape": "sphere", "center": [0, 0.5, 0], "radius": 0.5, "material": "m"},
        {"shape": "disk", "center": [0, 2, 0], "normal": [0, -1, 0], "radius": 0.6,
         "emission": [3, 3, 3], "material": "m"},
    ],
    "render": {"spp": 4, "seed": 1},
}


def _write_scene(folder: Path, doc=None, text=None, name="scene.json") -> Path:
    path = folder / name
    path.write_text(text if text is not None else json.dumps(doc if doc is not None else TINY))
    return path


def _listing(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = err.splitlines()
    assert len(lines) == 1, f"expected exactly one line on stderr, got:\n{err}"
    assert lines[0].startswith("refrender: error:"), lines[0]
    assert "Traceback" not in err
    return lines[0]


# ----------------------------------------------------------------------------- render

def test_render_writes_exr_state_and_preview(tmp_path, capsys):
    scene = _write_scene(tmp_path)
    out = tmp_path / "out.exr"
    code = main(["render", str(scene), "-o", str(out), "--spp", "8",
                 "--preview", str(tmp_path / "out.png")])
    cap = capsys.readouterr()
    assert code == 0, cap.err
    assert _listing(tmp_path) == {"scene.json", "out.exr", "out.state", "out.png"}
    lines = [ln for ln in cap.err.splitlines() if "compiling kernels (first run only" not in ln]
    assert len(lines) == 1 and "8 spp" in lines[0] and "Mrays/s" in lines[0], cap.err
    img = read_exr(out)
    assert img.shape == (6, 8) and img.metadata["spp"] == 8 and img.metadata["seed"] == 1
    assert np.isfinite(img.rgb()).all() and (img.rgb() > 0).any()
    assert (tmp_path / "out.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def _folder(path: Path) -> Path:
    path.mkdir()
    return path


def _bad_cases(tmp_path: Path):
    """(argv, expected text in the message) of each user error."""
    good = _write_scene(tmp_path)
    typo = json.loads(json.dumps(TINY))
    typo["objects"][1]["raduis"] = typo["objects"][1].pop("radius")
    typo_path = _write_scene(tmp_path, typo, name="typo.json")
    nan_path = _write_scene(tmp_path, text=json.dumps(TINY).replace('"radius": 0.5', '"radius": NaN'),
                            name="nan.json")
    huge = json.loads(json.dumps(TINY))
    huge["film"] = {"width": 100000, "height": 100000}
    huge_path = _write_scene(tmp_path, huge, name="huge.json")
    out = str(tmp_path / "out.exr")
    return {
        "scene_typo": (["render", str(typo_path), "-o", out], "raduis"),
        "missing_scene": (["render", str(tmp_path / "nope.json"), "-o", out], "nope.json"),
        "nan_in_json": (["render", str(nan_path), "-o", out], "NaN"),
        "negative_spp": (["render", str(good), "-o", out, "--spp", "-4"], "spp"),
        "zero_spp": (["render", str(good), "-o", out, "--spp", "0"], "spp"),
        "bad_max_bounces_word": (["render", str(good), "-o", out, "--max-bounces", "lots"],
                                 "--max-bounces"),
        "bad_max_bounces_negative": (["render", str(good), "-o", out, "--max-bounces", "-1"],
                                     "--max-bounces"),
        "output_folder_missing": (["render", str(good), "-o", str(tmp_path / "no" / "out.exr")],
                                  "does not exist"),
        "output_is_a_folder": (["render", str(good), "-o", str(_folder(tmp_path / "dir.exr"))],
                               "dir.exr"),
        "output_not_exr": (["render", str(good), "-o", str(tmp_path / "out.png")], ".exr"),
        "huge_film": (["render", str(huge_path), "-o", out], "film"),
        "spp_not_a_number": (["render", str(good), "-o", out, "--spp", "abc"], "--spp"),
        "unknown_command": (["rendr", str(good)], "rendr"),
        "missing_output_option": (["render", str(good)], "-o/--output"),
        "too_many_threads": (["render", str(good), "-o", out,
                              "--threads", str(numba.config.NUMBA_NUM_THREADS + 1)], "threads"),
    }


BAD = ["scene_typo", "missing_scene", "nan_in_json", "negative_spp", "zero_spp",
       "bad_max_bounces_word", "bad_max_bounces_negative", "output_folder_missing",
       "output_is_a_folder", "output_not_exr", "huge_film", "too_many_threads",
       "spp_not_a_number", "unknown_command", "missing_output_option"]


@pytest.mark.parametrize("case", BAD)
def test_bad_input_exits_2_with_one_line_and_no_output(case, tmp_path, capsys):
    argv, needle = _bad_cases(tmp_path)[case]
    before = _listing(tmp_path)
    code = main(argv)
    line = _one_error_line(capsys)
    assert code == 2
    assert needle in line, line
    assert _listing(tmp_path) == before, "an output or temporary file was left behind"


def test_max_bounces_none_is_accepted(tmp_path, capsys):
    scene = _write_scene(tmp_path)
    out = tmp_path / "nb.exr"
    assert main(["render", str(scene), "-o", str(out), "--max-bounces", "none", "--quiet"]) == 0
    assert capsys.readouterr().err == ""            # --quiet prints nothing
    assert read_exr(out).metadata["max_bounces"] is None


def test_threads_1_and_2_give_identical_exr_pixels(tmp_path, capsys):
    """Pixels and estimator metadata are bit-identical; the files as a whole differ only
    in the timing statistics (stats.seconds, stats.mrays_per_s)."""
    scene = _write_scene(tmp_path)
    imgs = []
    for n in (1, 2):
        out = tmp_path / f"t{n}.exr"
        assert main(["render", str(scene), "-o", str(out), "--spp", "8", "--threads", str(n),
                     "--quiet"]) == 0
        imgs.append(read_exr(out))
    a, b = imgs
    assert set(a.channels) == set(b.channels) == {"R", "G", "B", "variance.R", "variance.G",
                                                  "variance.B"}
    for name in a.channels:
        assert a.channels[name].tobytes() == b.channels[name].tobytes(), name
    strip = lambda md: {k: v for k, v in md.items() if k != "stats"}  # noqa: E731
    assert strip(a.metadata) == strip(b.metadata)
    assert a.metadata["stats"]["rays"] == b.metadata["stats"]["rays"]


# ----------------------------------------------------------------------------- info

@pytest.fixture
def rendered(tmp_path, capsys):
    scene = _write_scene(tmp_path)
    out = tmp_path / "r.exr"
    assert main(["render", str(scene), "-o", str(out), "--spp", "6", "--seed", "12345",
                 "--quiet"]) == 0
    capsys.readouterr()
    return out


@pytest.mark.parametrize("which", ["exr", "state"])
def test_info_prints_the_essentials(rendered, which, capsys):
    path = rendered if which == "exr" else rendered.with_suffix(".state")
    sha = read_exr(rendered).metadata["scene_sha256"]
    assert main(["info", str(path)]) == 0
    out = capsys.readouterr().out
    fields = {line.split(":", 1)[0].strip(): line.split(":", 1)[1].strip()
              for line in out.splitlines() if ":" in line}
    assert fields["spp"] == "6"
    assert fields["seed"] == "12345"
    assert fields["scene_sha256"] == sha
    assert "relative standard error" in fields["noise"]


@pytest.mark.parametrize("which", ["exr", "state"])
def test_info_json_parses(rendered, which, capsys):
    path = rendered if which == "exr" else rendered.with_suffix(".state")
    assert main(["info", "--json", str(path)]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["spp"] == 6 and info["seed"] == 12345 and len(info["scene_sha256"]) == 64
    assert 0 < info["noise"]["rel_error_mean"] < float("inf")




@pytest.mark.parametrize("content", [None, b"not an image at all", b"\x76\x2f\x31\x01garbage"])
@pytest.mark.parametrize("suffix", [".exr", ".state"])
def test_info_on_missing_or_garbage_file(tmp_path, capsys, content, suffix):
    path = tmp_path / f"x{suffix}"
    if content is not None:
        path.write_bytes(content)
    assert main(["info", str(path)]) == 2
    line = _one_error_line(capsys)
    assert str(path) in line


def test_failed_state_write_leaves_no_exr(tmp_path, capsys):
    """Regression: when the state file cannot be written (here OUT.state is a folder)
    the command exits 2 and leaves no EXR without its accumulators.  Found while these
    tests were written (Result.save wrote the EXR first); fixed in the working tree at
    the same time by writing the state first."""
    scene = _write_scene(tmp_path)
    (tmp_path / "x.state").mkdir()
    before = _listing(tmp_path)
    assert main(["render", str(scene), "-o", str(tmp_path / "x.exr"), "--quiet"]) == 2
    _one_error_line(capsys)
    assert _listing(tmp_path) == before, "x.exr was left behind by a failed render"


# ----------------------------------------------------------------------------- overrides, timings, polish

def test_film_crop_and_set_override_the_scene(tmp_path, capsys):
    """--film, --crop and --set edit the scene document before validation:
    the EXR has the new size, and the scene hash is that of the edited
    document (refrender.load_scene of the same dict), not the file's."""
    import refrender
    scene = _write_scene(tmp_path)
    out = tmp_path / "o.exr"
    assert main(["render", str(scene), "-o", str(out), "--spp", "2", "--quiet", "--film", "12x10",
                 "--crop", "2,1,10,9", "--set", "camera.fov_y=30",
                 "--set", "materials.m.albedo=[0.5,0.5,0.5]", "--set", "objects[1].radius=0.4"]) == 0
    img = read_exr(out)
    assert img.shape[:2] == (8, 8)
    doc = json.loads(json.dumps(TINY))
    doc["film"] = {"width": 12, "height": 10, "crop": [2, 1, 10, 9]}
    doc["camera"]["fov_y"] = 30
    doc["materials"]["m"]["albedo"] = [0.5, 0.5, 0.5]
    doc["objects"][1]["radius"] = 0.4
    meta = img.metadata
    assert meta["scene_sha256"] == refrender.load_scene(doc).sha256
    assert meta["scene_sha256"] != refrender.load_scene(scene).sha256
    assert meta["scene_file"] == str(scene.resolve())
    assert meta["width"] == 12 and meta["window"] == [2, 1, 10, 9]


@pytest.mark.parametrize("argv, text", [
    (["--set", "objects[7].radius=1"], "objects is a list of 3"),
    (["--set", "camera.fov_y"], "expected KEY=VALUE"),
    (["--set", "camera.fov_y=[1,"], "not JSON"),
    (["--set", "camera.fov_y=-5"], "camera.fov_y"),
    (["--film", "12by10"], "--film"),
    (["--crop", "1,2,3"], "--crop"),
])
def test_bad_overrides_exit_2_with_one_line(tmp_path, capsys, argv, text):
    scene = _write_scene(tmp_path)
    before = _listing(tmp_path)
    assert main(["render", str(scene), "-o", str(tmp_path / "o.exr"), "--quiet"] + argv) == 2
    line = _one_error_line(capsys)
    assert text in line, line
    assert _listing(tmp_path) == before


def test_compile_time_is_announced_and_kept_out_of_the_render_time(tmp_path, capsys, monkeypatch):
    """A cold kernel cache is announced before the first pass; the render's
    seconds exclude compiling, which is recorded as stats.compile_seconds."""
    import importlib
    R = importlib.import_module("refrender.render")
    monkeypatch.setattr(R, "kernels_cold", lambda: True)
    scene = _write_scene(tmp_path)
    out = tmp_path / "c.exr"
    assert main(["render", str(scene), "-o", str(out), "--spp", "2"]) == 0
    err = capsys.readouterr().err
    assert f"compiling kernels (first run only, about {R.COLD_COMPILE_SECONDS} s)" in err
    stats = read_exr(out).metadata["stats"]
    assert stats["compile_seconds"] >= 0 and stats["seconds"] > 0
    assert "compile_seconds" in stats


def test_info_values_read_as_json_and_merge_counts_in_words(rendered, tmp_path, capsys):
    """info prints null/true and rounded floats; merge of one file says '1 render'."""
    assert main(["info", str(rendered)]) == 0
    out = capsys.readouterr().out
    fields = {line.split(":", 1)[0].strip(): line.split(":", 1)[1].strip()
              for line in out.splitlines() if ":" in line}
    assert fields["max_bounces"] == "null"
    assert fields["run.complete"] == "true"
    assert len(fields["stats.seconds"].replace(".", "").lstrip("0")) <= 7
    assert fields["scene_file"].endswith("scene.json")
    assert main(["merge", str(rendered.with_suffix(".state")), "-o", str(tmp_path / "m.exr")]) == 0
    assert "merged 1 render," in capsys.readouterr().err


def test_pickled_file_gives_no_pickle_advice(tmp_path, capsys):
    path = tmp_path / "obj.state"
    with open(path, "wb") as fh:
        np.save(fh, np.array([{"a": 1}], dtype=object), allow_pickle=True)
    assert main(["info", str(path)]) == 2
    line = _one_error_line(capsys)
    assert "allow_pickle" not in line and "Python objects" in line


def test_resume_with_fewer_spp_says_so(rendered, capsys):
    scene = rendered.parent / "scene.json"
    assert main(["render", str(scene), "-o", str(rendered), "--resume", "--spp", "3", "--seed", "12345"]) == 0
    err = capsys.readouterr().err
    assert "--spp 3 is below the 6 spp" in err
    assert read_exr(rendered).metadata["spp"] == 6
