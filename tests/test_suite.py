"""Regression suites (refrender.suite, ``refrender suite``): suite-file
validation, the reference cache (hit, miss, invalidation, resume), gating of a
deliberately faulty frame, JUnit XML, JSON, history and the HTML page (in
headless Chromium when installed).

Scenes are tiny (24 x 16 pixels, one bounce); references 32 spp, frames 16 spp,
fixed seeds.  Gates use the pooled bias test (|pooled z| > 4, i.e. 4 standard
errors, the project's threshold) so an unbiased frame passes.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

import refrender
from refrender.cli.main import main
from refrender.io import read_exr, write_exr

ROOT = Path(__file__).resolve().parents[1]

PLANE = {
    "version": 1, "camera": {"position": [0, 0, 1.5], "look_at": [0, 0, 0], "fov_y": 40},
    "film": {"width": 24, "height": 16},
    "materials": {"m": {"type": "lambertian", "albedo": [0.7, 0.5, 0.3]}},
    "objects": [{"shape": "rectangle", "origin": [-2, -2, 0], "edge1": [4, 0, 0], "edge2": [0, 4, 0],
                 "material": "m"},
                {"shape": "rectangle", "origin": [-1, -1, 2], "edge1": [0, 2, 0], "edge2": [2, 0, 0],
                 "emission": [2, 2, 2]}],
    "render": {"spp": 32, "seed": 0, "max_bounces": 1}}
GATES = ["bias_z>4"]


@pytest.fixture(autouse=True)
def _mpl(tmp_path, monkeypatch):
    monkeypatch.setenv("MPLCONFIGDIR", str(tmp_path / "mpl"))


def _frame(doc, path, *, scale_emission=1.0, seed=5, spp=16):
    d = json.loads(json.dumps(doc))
    for o in d["objects"]:
        if "emission" in o:
            o["emission"] = [scale_emission * v for v in o["emission"]]
    res = refrender.render(refrender.load_scene(d), spp=spp, seed=seed)
    write_exr(path, res.mean, res.variance, {"spp": res.spp})


@pytest.fixture(scope="module")
def frames(tmp_path_factory):
    """A scene file and two frames of it: correct, and with every emission scaled by 1.5."""
    d = tmp_path_factory.mktemp("frames")
    (d / "plane.json").write_text(json.dumps(PLANE))
    _frame(PLANE, d / "ok.exr")
    _frame(PLANE, d / "bright.exr", scale_emission=1.5)
    return d


def _suite(folder: Path, cases, **top) -> Path:
    doc = {"suite_version": 1, "name": "t", "defaults": {"reference": {"spp": 32}, "fail_if": GATES}}
    doc.update(top)
    doc["cases"] = cases
    path = folder / "suite.json"
    path.write_text(json.dumps(doc))
    return path


def _run(argv, capsys):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


# ----------------------------------------------------------------------------- suite file

def test_shipped_schema_is_valid_draft_2020_12():
    """The schema itself validates against the JSON Schema 2020-12 meta-schema (jsonschema's copy)."""
    import jsonschema
    from refrender.suite import schema
    jsonschema.Draft202012Validator.check_schema(schema())


def _bad(frames):
    ok = {"name": "a", "scene": str(frames / "plane.json"), "frame": str(frames / "ok.exr")}
    return [
        ({"suite_version": 2, "cases": [ok]}, "suite_version: must be 1"),
        ({"suite_version": 1, "cases": []}, "cases: must not be empty"),
        ({"suite_version": 1, "cases": [dict(ok, frmae="x.exr")]}, "cases[0].frmae: unknown key"),
        ({"suite_version": 1, "cases": [{"name": "a", "frame": "x.exr"}]}, "cases[0].scene: required key is missing"),
        ({"suite_version": 1, "cases": [dict(ok, name="a b")]}, "cases[0].name:"),
        ({"suite_version": 1, "cases": [ok, ok]}, "cases[1].name: duplicate case name 'a'"),
        ({"suite_version": 1, "cases": [dict(ok, frame_command=["x"])]}, "cases[0]: give either frame"),
        ({"suite_version": 1, "cases": [{"name": "a", "scene": ok["scene"]}]}, "cases[0]: give either frame"),
        ({"suite_version": 1, "cases": [dict(ok, fail_if=["relmse>>1"])]}, "cases[0].fail_if[0]: cannot parse"),
        ({"suite_version": 1, "cases": [dict(ok, fail_if=["sharpness>1"])]}, "cases[0].fail_if[0]: unknown quantity"),
        ({"suite_version": 1, "defaults": {"fail_if": ["psnr<"]}, "cases": [ok]}, "defaults.fail_if[0]: cannot parse"),
        ({"suite_version": 1, "cases": [dict(ok, crop=[0, 0, 25, 16])]}, "cases[0].crop: [0, 0, 25, 16] is not inside the 24x16"),
        ({"suite_version": 1, "cases": [dict(ok, crop=[0, 0, 5])]}, "cases[0].crop: must have exactly 4 items"),
        ({"suite_version": 1, "cases": [dict(ok, reference={"spp": 0})]}, "cases[0].reference.spp: must be >= 1"),
        ({"suite_version": 1, "cases": [dict(ok, reference={"time": "soon"})]}, "cases[0].reference.time:"),
        ({"suite_version": 1, "cases": [dict(ok, scene=str(frames / "nope.json"))]},
         "cases[0].scene: " + str(frames / "nope.json") + ": scene file not found"),
        ({"suite_version": 1, "cases": [dict(ok, mask=str(frames / "nope.png"))]}, "cases[0].mask: file not found"),
        ({"suite_version": 1, "cases": [{"name": "a", "scene": ok["scene"], "frame_command": ["r", "{out}"]}]},
         "cases[0].frame_command[1]: unknown placeholder {out}"),
    ]


def test_suite_file_errors_name_the_field(frames, tmp_path, capsys):
    """Each bad suite exits 2 with one line naming the field; no output file is written."""
    for i, (doc, want) in enumerate(_bad(frames)):
        path = tmp_path / f"bad{i}.json"
        path.write_text(json.dumps(doc))
        junit = tmp_path / f"bad{i}.xml"
        rc, out, err = _run(["suite", path, "--junit", junit, "--cache", tmp_path / "cache"], capsys)
        assert rc == 2, (doc, err)
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("refrender: error: " + want), (want, err)
        assert "Traceback" not in err and not junit.exists()
    assert not (tmp_path / "cache").exists()


def test_invalid_scene_and_json_errors(frames, tmp_path, capsys):
    """Errors inside a case's scene keep the scene loader's field path behind the case's; JSON
    syntax errors give line and column; a bad --only and a time budget on a cluster are input errors."""
    bad_scene = json.loads(json.dumps(PLANE))
    bad_scene["objects"][0]["material"] = "nope"
    (tmp_path / "bad_scene.json").write_text(json.dumps(bad_scene))
    p = _suite(tmp_path, [{"name": "a", "scene": "bad_scene.json", "frame": "f.exr"}])
    rc, _, err = _run(["suite", p], capsys)
    assert rc == 2 and err.startswith("refrender: error: cases[0].scene: objects[0].material:"), err
    (tmp_path / "syntax.json").write_text('{"suite_version": 1,\n "cases": [}')
    rc, _, err = _run(["suite", tmp_path / "syntax.json"], capsys)
    assert rc == 2 and "invalid JSON at line 2" in err, err
    p = _suite(tmp_path, [{"name": "a", "scene": str(frames / "plane.json"), "frame": str(frames / "ok.exr")}])
    rc, _, err = _run(["suite", p, "--only", "zzz*"], capsys)
    assert rc == 2 and "--only: no case matches zzz*" in err
    p = _suite(tmp_path, [{"name": "a", "scene": str(frames / "plane.json"), "frame": str(frames / "ok.exr"),
                           "reference": {"time": "5s"}}])
    rc, _, err = _run(["suite", p, "--local-workers", "1"], capsys)
    assert rc == 2 and "cases[0].reference.time: references rendered on a Dask cluster take an spp budget only" in err


# ----------------------------------------------------------------------------- cache

def _cache_status(json_path):
    return [c["reference"]["cache"] for c in json.loads(Path(json_path).read_text())["cases"]]


def test_reference_cache_hit_miss_and_invalidation(frames, tmp_path, capsys, monkeypatch):
    """First run renders, second hits (the EXR is not rewritten), a scene edit is a miss,
    --update-references re-renders, other kernel code re-renders unless --keep-references;
    the cached reference equals a direct render of the same settings bit for bit."""
    scene = tmp_path / "plane.json"
    scene.write_text(json.dumps(PLANE))
    p = _suite(tmp_path, [{"name": "a", "scene": "plane.json", "frame": str(frames / "ok.exr")}],
               cache="refs")
    js = tmp_path / "run.json"
    rc, _, err = _run(["suite", p, "--json", js, "--quiet"], capsys)
    assert rc == 0, err
    assert _cache_status(js) == ["rendered"]
    rec = json.loads(js.read_text())["cases"][0]
    exr = Path(rec["reference"]["path"])
    assert exr.parent.parent == tmp_path / "refs" and exr.with_suffix(".json").is_file()
    direct = refrender.render(refrender.load_scene(PLANE), spp=32, seed=0)
    assert np.array_equal(read_exr(exr).layer("variance"), direct.variance.astype(np.float32))
    stamp = exr.stat().st_mtime_ns
    rc, _, _ = _run(["suite", p, "--json", js, "--quiet"], capsys)
    assert rc == 0 and _cache_status(js) == ["hit"] and exr.stat().st_mtime_ns == stamp
    # a scene edit changes the content hash: a new key, rendered
    edited = json.loads(json.dumps(PLANE))
    edited["materials"]["m"]["albedo"] = [0.7, 0.5, 0.31]
    scene.write_text(json.dumps(edited))
    rc, _, _ = _run(["suite", p, "--json", js, "--quiet"], capsys)
    rec2 = json.loads(js.read_text())["cases"][0]
    assert _cache_status(js) == ["rendered"] and rec2["reference"]["key"] != rec["reference"]["key"]
    # so does a change of the reference settings (seed)
    p2 = _suite(tmp_path, [{"name": "a", "scene": "plane.json", "frame": str(frames / "ok.exr"),
                            "reference": {"seed": 3}}], cache="refs")
    rc, _, _ = _run(["suite", p2, "--json", js, "--quiet"], capsys)
    assert _cache_status(js) == ["rendered"]
    rc, _, _ = _run(["suite", p2, "--json", js, "--quiet", "--update-references"], capsys)
    assert _cache_status(js) == ["updated"]
    # other kernel code: re-rendered, or kept on request
    import refrender.overnight as ov
    monkeypatch.setattr(ov, "kernel_sha256", lambda: "0123456789abcdef")
    rc, _, _ = _run(["suite", p2, "--json", js, "--quiet", "--keep-references"], capsys)
    assert _cache_status(js) == ["other_kernel"]
    rc, _, _ = _run(["suite", p2, "--json", js, "--quiet"], capsys)
    assert _cache_status(js) == ["rendered"]
    assert json.loads(js.read_text())["cases"][0]["reference"]["kernel_sha256"] == "0123456789abcdef"


def test_interrupted_reference_resumes_bit_identically(frames, tmp_path, monkeypatch):
    """A reference render stopped by a signal leaves a checkpoint without a manifest; the next
    run resumes it, and the result equals an uninterrupted render (resume contract)."""
    import refrender.overnight as ov
    from refrender.suite import ReferenceCache
    from refrender.suite.cache import Interrupted
    scene = refrender.load_scene(PLANE)

    class StopSoon(ov.StopOnSignal):
        calls = 0

        def __call__(self):
            StopSoon.calls += 1
            return "SIGINT" if StopSoon.calls >= 3 else None

    cache = ReferenceCache(tmp_path / "refs")
    monkeypatch.setattr(ov, "StopOnSignal", StopSoon)
    with pytest.raises(Interrupted):
        cache.get(scene, {"spp": 32})
    monkeypatch.undo()
    (entry,) = (tmp_path / "refs").iterdir()
    assert list(entry.glob("*.state")) and not list(entry.glob("*.json"))
    ref = cache.get(scene, {"spp": 32})
    assert ref.status == "resumed" and ref.spp == 32
    whole = ReferenceCache(tmp_path / "whole").get(scene, {"spp": 32})
    assert whole.status == "rendered"
    a, b = read_exr(ref.exr), read_exr(whole.exr)
    for ch in ("R", "G", "B"):
        assert np.array_equal(a.channels[ch], b.channels[ch])
    assert np.array_equal(a.layer("variance"), b.layer("variance"))


# ----------------------------------------------------------------------------- gating and outputs

def _cases(frames, tmp_path):
    copy = [sys.executable, "-c", "import shutil, sys; shutil.copy(sys.argv[1], sys.argv[2])"]
    return [
        {"name": "ok", "scene": "plane.json", "frame": "ok.exr", "tags": ["plain"]},
        {"name": "scaled_emission", "scene": "plane.json", "frame": "bright.exr", "tags": ["fault"]},
        {"name": "by_command", "scene": "plane.json", "frame_command": copy + ["ok.exr", "{frame}"]},
        {"name": "crashing_renderer", "scene": "plane.json",
         "frame_command": ["{python}", "-c", "import sys; sys.exit('renderer crashed')"]},
        {"name": "missing_frame", "scene": "plane.json", "frame": "nope.exr", "tags": ["fault"]},
    ]


@pytest.fixture(scope="module")
def run_dir(frames, tmp_path_factory):
    """The suite of _cases run twice into one report folder (two history entries)."""
    d = tmp_path_factory.mktemp("run")
    _suite(frames, _cases(frames, d))
    for label in ("first", "second"):
        rc = main(["suite", str(frames / "suite.json"), "--cache", str(d / "refs"), "--report", str(d / "report"),
                   "--junit", str(d / "junit.xml"), "--json", str(d / "run.json"), "--label", label, "--quiet"])
    return d, rc


def test_faulty_case_fails_and_exit_status(run_dir, frames, capsys):
    """Scaled emission (x 1.5) fails its gate with the scale diagnosed; a crashing frame command and
    a missing frame are errors; the suite exits 1.  The correct cases pass, and --only them exits 0."""
    d, rc = run_dir
    assert rc == 1
    run = json.loads((d / "run.json").read_text())
    by = {c["name"]: c for c in run["cases"]}
    assert [c["name"] for c in run["cases"]] == ["ok", "scaled_emission", "by_command", "crashing_renderer",
                                                 "missing_frame"]
    assert by["ok"]["status"] == "pass" and by["by_command"]["status"] == "pass"
    bad = by["scaled_emission"]
    assert bad["status"] == "fail" and bad["failed"][0].startswith("bias_z>4")
    assert bad["verdict"].startswith("significant difference") and bad["metrics"]["relative_bias"] > 0.3
    assert any(x["fault"] == "scale" for x in bad["diagnoses"])
    assert by["crashing_renderer"]["status"] == "error"
    assert by["crashing_renderer"]["message"] == "frame command exited with status 1: renderer crashed"
    assert by["missing_frame"]["status"] == "error" and "frame not found" in by["missing_frame"]["message"]
    assert run["counts"] == {"pass": 2, "fail": 1, "error": 2, "total": 5}
    assert run["label"] == "second"
    rc, out, err = _run(["suite", frames / "suite.json", "--cache", d / "refs", "--only", "ok",
                         "--only", "by_*"], capsys)
    assert rc == 0 and "2 passed, 0 failed, 0 errors" in out, err
    rc, out, err = _run(["suite", frames / "suite.json", "--cache", d / "refs", "--only", "fault"], capsys)
    assert rc == 1 and "0 passed, 1 failed, 1 errors" in out


def test_frame_command_timeout(frames, tmp_path, capsys):
    p = _suite(tmp_path, [{"name": "slow", "scene": str(frames / "plane.json"), "frame_timeout": 0.5,
                           "frame_command": ["{python}", "-c", "import time; time.sleep(20)"]}])
    rc, out, err = _run(["suite", p, "--cache", tmp_path / "refs", "--json", tmp_path / "r.json"], capsys)
    rec = json.loads((tmp_path / "r.json").read_text())["cases"][0]
    assert rc == 1 and rec["status"] == "error" and rec["message"] == "frame command timed out after 0.5 s"


def test_junit_xml_counts(run_dir):
    """The JUnit file parses with xml.etree and carries the counts of the run (JUnit XML as read by CI
    servers: testsuites/testsuite/testcase with failure and error children)."""
    d, _ = run_dir
    root = ET.parse(d / "junit.xml").getroot()
    assert root.tag == "testsuites"
    (ts,) = root.findall("testsuite")
    assert (ts.get("tests"), ts.get("failures"), ts.get("errors"), ts.get("skipped")) == ("5", "1", "2", "0")
    cases = {tc.get("name"): tc for tc in ts.findall("testcase")}
    assert list(cases) == ["ok", "scaled_emission", "by_command", "crashing_renderer", "missing_frame"]
    assert all(tc.get("classname") == "refrender.suite.t" and float(tc.get("time")) >= 0 for tc in cases.values())
    fail = cases["scaled_emission"].find("failure")
    assert fail is not None and "bias_z>4" in fail.get("message") and "significant difference" in fail.get("message")
    assert "scale" in fail.text
    assert cases["crashing_renderer"].find("error").get("message").startswith("frame command exited")
    assert cases["ok"].find("failure") is None and cases["ok"].find("error") is None
    props = {p.get("name"): p.get("value") for p in ts.find("properties")}
    assert props["label"] == "second"


def test_history_appends_runs(run_dir):
    from refrender.suite.outputs import read_history, trend_svg
    d, _ = run_dir
    runs = read_history(d / "report" / "history.jsonl")
    assert [r["label"] for r in runs] == ["first", "second"]
    assert runs[-1]["cases"]["scaled_emission"]["status"] == "fail"
    assert runs[-1]["cases"]["ok"]["relmse"] == runs[0]["cases"]["ok"]["relmse"]      # same inputs, same numbers
    svg = trend_svg(runs, "ok")
    assert svg.count("<circle") == 2 and "<polyline" in svg


def _chromium():
    import shutil
    for name in ("chromium", "chromium-browser"):
        p = shutil.which(name) or (f"/usr/bin/{name}" if os.path.exists(f"/usr/bin/{name}") else None)
        if p:
            return p
    return None


def test_html_report_in_headless_browser(run_dir, tmp_path):
    """The page is self-contained (pictures embedded), links every compared case to its full
    comparison report; in headless Chromium it loads, sorts by a column and filters by result."""
    import re
    d, _ = run_dir
    page = (d / "report" / "index.html").read_text()
    assert 'src="file' not in page and 'src="http' not in page
    assert page.count("data:image/png;base64,") == 3 * 3          # 3 thumbnails for each compared case
    links = re.findall(r'<a class="case" href="([^"]+)"', page)
    assert links == ["cases/ok/index.html", "cases/scaled_emission/index.html", "cases/by_command/index.html"]
    assert all((d / "report" / link).is_file() for link in links)
    browser = _chromium()
    if browser is None:
        pytest.skip("no Chromium installed (.ci/run installs the Debian package 'chromium')")
    base = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={tmp_path / 'profile'}"]
    url = (d / "report" / "index.html").as_uri()

    def dom(u):
        res = subprocess.run(base + ["--dump-dom", u], capture_output=True, text=True, timeout=120)
        assert res.returncode == 0, res.stderr[-500:]
        return res.stdout
    run = json.loads((d / "run.json").read_text())
    rel = {c["name"]: c["metrics"].get("relmse") for c in run["cases"] if c["metrics"]}
    want = sorted(rel, key=lambda n: -rel[n]) + ["crashing_renderer", "missing_frame"]
    out = dom(url + "#sort=relmse&dir=desc")
    order = re.findall(r'<tr class="row [a-z]+" data-case="([^"]+)"', out)
    assert order[:3] == want[:3] and sorted(order[3:]) == sorted(want[3:]), order
    assert 'class="desc"' in out and "5 of 5 shown" in out
    out = dom(url + "#status=fail")
    shown = re.findall(r'<tr class="row [a-z]+" data-case="([^"]+)">', out)
    assert shown == ["scaled_emission"] and "1 of 5 shown" in out
    case_page = dom((d / "report" / links[1]).as_uri())
    assert 'id="verdict"' in case_page and "significant difference" in case_page


def test_demo_suite_validates_and_a_fault_is_caught(tmp_path, capsys):
    """The shipped demo suite is valid; its gamma-encoded frame fails and a cropped correct frame
    passes (the frame command runs suites/demo/faulty_renderer.py in a subprocess)."""
    from refrender.suite import load_suite
    suite = load_suite(ROOT / "suites" / "demo" / "suite.json")
    assert len(suite.cases) >= 5 and {"fault"} <= {t for c in suite.cases for t in c.tags}
    rc, out, err = _run(["suite", ROOT / "suites" / "demo" / "suite.json", "--cache", tmp_path / "refs",
                         "--only", "courtyard_gamma", "--only", "courtyard_spheres", "--json", tmp_path / "d.json"],
                        capsys)
    by = {c["name"]: c for c in json.loads((tmp_path / "d.json").read_text())["cases"]}
    assert rc == 1, err
    assert by["courtyard_gamma"]["status"] == "fail"
    assert any(x["fault"] == "srgb_encoded" for x in by["courtyard_gamma"]["diagnoses"])
    assert by["courtyard_spheres"]["status"] == "pass", by["courtyard_spheres"]


def test_crop_mask_and_wrong_size(frames, tmp_path, capsys):
    """A crop and a mask restrict the compared pixels (counted); a frame of another size is an error."""
    import imageio.v3 as iio
    mask = np.zeros((16, 24), dtype=np.uint8)
    mask[:, :10] = 255
    iio.imwrite(tmp_path / "left.png", mask)
    small = refrender.render(refrender.load_scene(dict(PLANE, film={"width": 12, "height": 8})), spp=4, seed=1)
    write_exr(tmp_path / "small.exr", small.mean, small.variance, {})
    scene, ok = str(frames / "plane.json"), str(frames / "ok.exr")
    p = _suite(tmp_path, [{"name": "cropped", "scene": scene, "frame": ok, "crop": [4, 2, 20, 14]},
                          {"name": "masked", "scene": scene, "frame": ok, "mask": "left.png"},
                          {"name": "both", "scene": scene, "frame": ok, "mask": "left.png", "crop": [5, 0, 24, 16]},
                          {"name": "small", "scene": scene, "frame": "small.exr"}])
    rc, _, err = _run(["suite", p, "--cache", tmp_path / "refs", "--json", tmp_path / "r.json"], capsys)
    by = {c["name"]: c for c in json.loads((tmp_path / "r.json").read_text())["cases"]}
    assert rc == 1
    assert by["cropped"]["pixels_compared"] == 16 * 12 and by["cropped"]["status"] == "pass"
    assert by["masked"]["pixels_compared"] == 10 * 16
    assert by["both"]["pixels_compared"] == 5 * 16
    assert by["small"]["status"] == "error" and "size mismatch" in by["small"]["message"]
