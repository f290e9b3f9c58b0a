"""Overnight renders: budgets, checkpoints, bit-identical resume, merge, info, safety.

Sources of the expected values:
* invariant (refrender's sampling contract, README "The estimator"): each sample depends
  only on (seed, pixel, sample index, dimension) and each pixel's samples are added in
  index order, so the float64 accumulators after k samples per pixel do not depend on
  how the samples were split into passes or sessions: a resumed render must be
  *bit-identical* (np.array_equal) to an uninterrupted one;
* the documented stopping rules of refrender.render / refrender.overnight (budgets are
  asserted with sample counts, never with wall clock: a fake clock drives --time);
* common practice: exit status 128 + signal number after a signal (130 SIGINT, 143 SIGTERM).
"""
from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import refrender
from refrender import overnight as O
from refrender.cli.main import main
from refrender.errors import ImageError, RenderError
from refrender.io import load_state, read_exr, save_state, state_path_for
from refrender.result import Result

RENDER_MODULE = sys.modules["refrender.render"]
SCENES = Path(__file__).resolve().parent.parent / "scenes"


def _nook_doc(width=48, height=36, **render):
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": width, "height": height}
    for obj in doc["objects"]:
        if "path" in obj:       # usable from a scene file in any folder
            obj["path"] = str((SCENES / obj["path"]).resolve())
    doc.setdefault("render", {}).update(render)
    return doc


@pytest.fixture(scope="module")
def small():
    """A 12x9 film of the demo room: cheap enough to render many times."""
    return refrender.load_scene(_nook_doc(12, 9))


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err
    lines = err.splitlines()
    assert len(lines) == 1, f"expected exactly one line on stderr, got:\n{err}"
    assert lines[0].startswith("refrender: error:"), lines[0]
    return lines[0]


def _same_accumulators(a: Result, b: Result) -> None:
    assert a.sample_ranges == b.sample_ranges
    for name in ("sum", "sum_sq", "count"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name


# ----------------------------------------------------------------------------- durations

@pytest.mark.parametrize("text, seconds", [("90s", 90), ("45m", 2700), ("8h", 28800),
                                           ("1h30m", 5400), ("2.5", 2.5), ("1d", 86400),
                                           (" 0.5s ", 0.5), ("1m30s", 90)])
def test_parse_duration(text, seconds):
    assert O.parse_duration(text, "--time") == seconds


@pytest.mark.parametrize("text", ["", "abc", "5x", "-3s", "0", "h", "1h 30", "nan", "inf", "5s5"])
def test_parse_duration_rejects_with_the_field_name(text):
    with pytest.raises(RenderError, match="^--time: "):
        O.parse_duration(text, "--time")


# ----------------------------------------------------------------------------- target error

def test_target_schedule_is_the_documented_one():
    """Invariant (documented schedule): min_spp, then steps of 2**(floor(log2 k) - 3)."""
    gen = O.target_schedule(16)
    got = [next(gen) for _ in range(20)]
    assert got == [16, 18, 20, 22, 24, 26, 28, 30, 32, 36, 40, 44, 48, 52, 56, 60, 64, 72, 80, 88]
    gen = O.target_schedule(2)
    assert [next(gen) for _ in range(10)] == [2, 3, 4, 5, 6, 7, 8, 9, 10, 11]
    assert O.next_check(16, 16) == 18 and O.next_check(0, 16) == 16 and O.next_check(33, 16) == 36


def test_target_statistic_definition(small):
    """The statistic written out by hand from its documented definition: 95th percentile
    (numpy linear interpolation) of sqrt(Var Y) / max(|Y|, 1e-3 mean|Y|), Y = BT.709
    luminance (ITU-R BT.709-6 weights 0.2126, 0.7152, 0.0722)."""
    r = refrender.render(small, spp=8)
    w = np.array([0.2126, 0.7152, 0.0722])
    y = r.mean @ w
    sd = np.sqrt(r.variance @ (w * w))
    rel = sd / np.maximum(np.abs(y), 1e-3 * np.abs(y).mean())
    assert O.target_statistic(r.mean, r.variance) == pytest.approx(np.percentile(rel, 95), rel=1e-12)
    one = refrender.render(small, spp=1)
    assert O.target_statistic(one.mean, one.variance) == math.inf


def test_target_error_stops_at_the_first_schedule_point_below_it(small):
    target = 0.35
    res = refrender.render(small, target_error=target, min_spp=4)
    k = res.spp
    assert res.run["stop_reason"] == "target_error" and res.run["complete"]
    gen = O.target_schedule(4)
    schedule = []
    while (s := next(gen)) <= k:
        schedule.append(s)
    assert schedule[-1] == k, "stopped off the schedule"
    assert len(schedule) >= 4, "target too loose for a meaningful test"
    # independent renders at each schedule point (bit-identical to the passes of `res`)
    stats = [O.target_statistic(r.mean, r.variance)
             for r in (refrender.render(small, spp=s) for s in schedule)]
    assert stats[-1] < target
    assert all(v >= target for v in stats[:-1]), list(zip(schedule, stats))
    assert [c[0] for c in res.run["error_checks"]] == schedule
    assert np.allclose([c[1] for c in res.run["error_checks"]], stats, rtol=1e-12, atol=0)
    # a cap that comes first wins, and the record says so
    capped = refrender.render(small, target_error=target, min_spp=4, spp=schedule[-2])
    assert capped.run["stop_reason"] == "spp" and capped.spp == schedule[-2]


# ----------------------------------------------------------------------------- time budget

@pytest.fixture
def fake_clock(monkeypatch):
    """Render time becomes 0.125 s per sample per pixel, whatever the machine."""
    now = [0.0]
    real_pass = RENDER_MODULE.render_pass

    def timed_pass(*args):
        real_pass(*args)
        n_samples = args[14]
        now[0] += 0.125 * n_samples

    monkeypatch.setattr(RENDER_MODULE, "render_pass", timed_pass)
    monkeypatch.setattr(RENDER_MODULE, "_clock", lambda: now[0])
    return now


def test_time_budget_stops_at_the_last_whole_pass_that_fits(small, fake_clock):
    # 2.6 s at 0.125 s/spp: 20 spp take 2.5 s, a 21st would end at 2.625 s
    res = refrender.render(small, time_limit=2.6)
    assert res.spp == 20 and res.run["stop_reason"] == "time" and res.run["complete"]
    assert res.stats["seconds"] == 2.5
    _same_accumulators(res, refrender.render(small, spp=20))
    # combined budgets: the first reached wins
    assert refrender.render(small, time_limit=2.6, spp=12).run["stop_reason"] == "spp"
    r = refrender.render(small, time_limit=2.6, target_error=10.0, min_spp=4)
    assert r.run["stop_reason"] == "target_error" and r.spp == 4


def test_time_budget_counts_all_sessions(small, fake_clock):
    """--time is a budget of total render time: a resumed render gets what is left."""
    calls = []
    part = refrender.render(small, time_limit=2.6,
                            should_stop=lambda: "SIGINT" if len(calls.append(0) or calls) > 4 else None)
    assert part.run["stop_reason"] == "SIGINT" and not part.run["complete"] and 0 < part.spp < 20
    rest = refrender.render(small, time_limit=2.6, resume=part)
    assert rest.spp == 20 and rest.run["stop_reason"] == "time" and rest.run["sessions"] == 2
    _same_accumulators(rest, refrender.render(small, spp=20))


# ----------------------------------------------------------------------------- resume (in process)

def test_resume_in_process_is_bit_identical(small):
    whole = refrender.render(small, spp=150, seed=5)
    for stop_after in (1, 3, 6):
        calls = []
        part = refrender.render(small, spp=150, seed=5,
                                should_stop=lambda: "SIGTERM" if len(calls.append(0) or calls) > stop_after
                                else None)
        assert part.run["stop_reason"] == "SIGTERM" and 0 < part.spp < 150
        _same_accumulators(refrender.render(small, spp=150, seed=5, resume=part), whole)


def test_resume_refuses_a_different_render(small, tmp_path):
    part = refrender.render(small, spp=4, seed=5)
    other = refrender.load_scene(_nook_doc(12, 9, rr_start=4))
    cases = [(dict(scene=other), "scene"), (dict(seed=6), "seed"), (dict(strategy="nee"), "strategy"),
             (dict(light_sampling="area"), "light_sampling"), (dict(max_bounces=3), "max_bounces"),
             (dict(rr_start=5), "rr_start"), (dict(first_sample=4), "first-sample")]
    for kw, word in cases:
        scene = kw.pop("scene", small)
        kw.setdefault("seed", 5)
        with pytest.raises(RenderError, match=word):
            refrender.render(scene, spp=8, resume=part, **kw)
    code = Result(part.sum, part.sum_sq, part.count, part.sample_ranges, part.meta, part.stats,
                  dict(part.run, kernel_sha256="0" * 16))
    with pytest.raises(RenderError, match="other renderer code"):
        refrender.render(small, spp=8, seed=5, resume=code)
    later = refrender.render(small, spp=4, seed=5, first_sample=8)
    with pytest.raises(RenderError, match="several sample ranges"):
        refrender.render(small, spp=16, seed=5, resume=refrender.merge([part, later]))


# ----------------------------------------------------------------------------- CLI: merge

@pytest.fixture(scope="module")
def scene_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("scene") / "nook12.json"
    path.write_text(json.dumps(_nook_doc(12, 9, seed=3)))
    return path


def _cli_render(scene_file, out, *extra):
    code = main(["render", str(scene_file), "-o", str(out), "--quiet", *extra])
    assert code == 0
    return Result.from_state(state_path_for(out))


def test_merge_cli_equals_one_render_of_the_union(scene_file, tmp_path, capsys):
    a = _cli_render(scene_file, tmp_path / "a.exr", "--spp", "8")
    _cli_render(scene_file, tmp_path / "b.exr", "--spp", "5", "--first-sample", "8", "--threads", "1")
    _cli_render(scene_file, tmp_path / "c.exr", "--spp", "3", "--first-sample", "13")
    whole = _cli_render(scene_file, tmp_path / "whole.exr", "--spp", "16")
    capsys.readouterr()
    # inputs in any order, as state files or as their EXRs
    assert main(["merge", str(tmp_path / "c.state"), str(tmp_path / "a.exr"),
                 str(tmp_path / "b.state"), "-o", str(tmp_path / "m.exr")]) == 0
    line = capsys.readouterr().err.strip()
    assert "merged 3 renders, 16 spp" in line
    m = Result.from_state(tmp_path / "m.state")
    assert m.sample_ranges == [(0, 16)] and m.run["stop_reason"] == "merge"
    assert np.array_equal(m.count, whole.count)
    # float64 rounding of a different summation order (scene-format.md: relative 1e-12)
    np.testing.assert_allclose(m.sum, whole.sum, rtol=1e-12, atol=0)
    np.testing.assert_allclose(m.sum_sq, whole.sum_sq, rtol=1e-12, atol=0)
    img, ref = read_exr(tmp_path / "m.exr"), read_exr(tmp_path / "whole.exr")
    np.testing.assert_allclose(img.rgb(), ref.rgb(), rtol=1e-6, atol=0)   # float32 storage
    assert img.metadata["spp"] == 16 and a.spp == 8


def test_merge_cli_refusals(scene_file, tmp_path, capsys):
    _cli_render(scene_file, tmp_path / "a.exr", "--spp", "8")
    _cli_render(scene_file, tmp_path / "over.exr", "--spp", "8", "--first-sample", "4")
    _cli_render(scene_file, tmp_path / "seed.exr", "--spp", "8", "--first-sample", "8", "--seed", "9")
    other = tmp_path / "other.json"
    other.write_text(json.dumps(_nook_doc(12, 9, seed=3, rr_start=5)))
    _cli_render(other, tmp_path / "scene.exr", "--spp", "8", "--first-sample", "8")
    capsys.readouterr()
    before = sorted(p.name for p in tmp_path.iterdir())
    cases = [(["a.state", "over.state"], "overlap in samples [4, 8)"),
             (["a.state", "seed.state"], "seed"),
             (["a.state", "scene.state"], "scene content hash"),
             (["a.state", "a.exr"], "given twice"),
             (["a.state", "missing.state"], "no such file")]
    for inputs, word in cases:
        code = main(["merge", *[str(tmp_path / i) for i in inputs], "-o", str(tmp_path / "m.exr")])
        assert code == 2
        assert word in _one_error_line(capsys)
    assert sorted(p.name for p in tmp_path.iterdir()) == before, "a refused merge wrote a file"


# ----------------------------------------------------------------------------- corrupted state files

def _corruptions(good: Path, folder: Path):
    data = good.read_bytes()
    arrays, meta = load_state(good)
    meta = {k: v for k, v in meta.items() if k not in ("format", "format_version", "sha256")}
    out = {}

    def put(name, content):
        p = folder / f"{name}.state"
        p.write_bytes(content)
        out[name] = p

    put("empty", b"")
    put("truncated_half", data[: len(data) // 2])
    put("truncated_tail", data[:-10])
    put("garbage", os.urandom(4096))
    flipped = bytearray(data)
    flipped[len(data) // 3] ^= 0x40          # inside the first accumulator's bytes
    put("bit_flip", bytes(flipped))

    def saved(name, arrs, md):
        p = folder / f"{name}.state"
        save_state(p, arrs, md)
        out[name] = p

    saved("wrong_shape", dict(arrays, sum=arrays["sum"][:-1]), meta)
    saved("wrong_dtype", dict(arrays, count=arrays["count"].astype(np.float64)), meta)
    saved("missing_array", {k: v for k, v in arrays.items() if k != "sum_sq"}, meta)
    saved("missing_key", arrays, {k: v for k, v in meta.items() if k != "seed"})
    saved("bad_ranges", arrays, dict(meta, sample_ranges=[[8, 4]]))
    saved("count_above_spp", dict(arrays, count=arrays["count"] + 1), meta)
    nan = arrays["sum"].copy()
    nan[0, 0, 0] = np.nan
    saved("nan_sum", dict(arrays, sum=nan), meta)
    return out


def test_corrupted_state_files_give_one_line_errors(scene_file, tmp_path, capsys):
    good = tmp_path / "good.exr"
    _cli_render(scene_file, good, "--spp", "4")
    capsys.readouterr()
    bad = _corruptions(state_path_for(good), tmp_path)
    assert len(bad) == 12
    for name, path in bad.items():
        with pytest.raises(ImageError) as exc:
            Result.from_state(path)
        assert "\n" not in str(exc.value) and path.name in str(exc.value), name
        assert main(["info", str(path)]) == 2, name
        assert path.name in _one_error_line(capsys), name
        assert main(["merge", str(state_path_for(good)), str(path), "-o",
                     str(tmp_path / "m.exr")]) == 2, name
        _one_error_line(capsys)
        # resume from the damaged checkpoint: refused, the damaged file left as it was
        target = tmp_path / "resume.exr"
        content = path.read_bytes()
        state_path_for(target).write_bytes(content)
        assert main(["render", str(scene_file), "-o", str(target), "--quiet", "--resume"]) == 2, name
        _one_error_line(capsys)
        assert state_path_for(target).read_bytes() == content and not target.exists(), name
    assert not (tmp_path / "m.exr").exists()


# ----------------------------------------------------------------------------- safety

def test_available_memory_is_read():
    avail = O.available_memory()
    assert isinstance(avail, int) and avail > 0


def test_refuses_a_film_that_cannot_fit_in_memory(tmp_path, capsys, monkeypatch):
    # 16384 x 16384 = 2**28 pixels (the schema's maximum): ~44 GiB of accumulators,
    # refused on a machine with 16 GiB available
    monkeypatch.setattr(O, "available_memory", lambda: 16 * 2**30)
    doc = _nook_doc(16384, 16384)
    path = tmp_path / "huge.json"
    path.write_text(json.dumps(doc))
    assert main(["render", str(path), "-o", str(tmp_path / "out.exr")]) == 2
    line = _one_error_line(capsys)
    assert "film: 16384x16384 needs about" in line and "memory" in line
    assert sorted(p.name for p in tmp_path.iterdir()) == ["huge.json"]


def test_refuses_when_the_disk_is_too_full(scene_file, tmp_path, capsys, monkeypatch):
    import shutil
    real = shutil.disk_usage

    def nearly_full(path):
        u = real(path)
        return type(u)(u.total, u.total - 1000, 1000)

    monkeypatch.setattr(O.shutil, "disk_usage", nearly_full)
    assert O.output_bytes(9, 12) > 1000
    assert main(["render", str(scene_file), "-o", str(tmp_path / "out.exr")]) == 2
    assert "free in" in _one_error_line(capsys)
    assert list(tmp_path.iterdir()) == []


def test_unfinished_render_is_not_overwritten_without_resume(scene_file, tmp_path, capsys, small):
    out = tmp_path / "o.exr"
    calls = []
    part = refrender.render(refrender.load_scene(scene_file), spp=64,
                            should_stop=lambda: "SIGINT" if len(calls.append(0) or calls) > 2 else None)
    part.save(out)
    capsys.readouterr()
    assert main(["render", str(scene_file), "-o", str(out), "--quiet"]) == 2
    assert "unfinished render" in _one_error_line(capsys)
    assert main(["info", str(out)]) == 0
    text = capsys.readouterr().out
    assert "stopped by: SIGINT (unfinished" in text and "time spent" in text
    assert main(["render", str(scene_file), "-o", str(out), "--quiet", "--resume"]) == 0
    done = Result.from_state(state_path_for(out))
    assert done.spp == 64 and done.run["stop_reason"] == "spp" and done.run["sessions"] == 2
    _same_accumulators(done, refrender.render(refrender.load_scene(scene_file), spp=64))
    assert main(["render", str(scene_file), "-o", str(out), "--quiet", "--spp", "4"]) == 0  # complete: ok


# ----------------------------------------------------------------------------- real processes

def _spawn(scene, out, *extra):
    cmd = [sys.executable, "-m", "refrender", "render", str(scene), "-o", str(out), "--quiet",
           "--spp", "480", "--checkpoint-every", "0.3s", *extra]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for_checkpoint(proc, state: Path, more_than: int = 0, timeout: float = 600.0) -> int:
    """Poll the state file until it holds more than `more_than` spp; return its spp."""
    t_end = time.monotonic() + timeout
    while time.monotonic() < t_end:
        if proc.poll() is not None:
            pytest.fail(f"render ended early ({proc.returncode}): {proc.stderr.read()}")
        if state.exists():
            try:
                spp = Result.from_state(state).spp
            except ImageError:   # only the rename makes a file visible: never torn
                pytest.fail("a checkpoint was torn")
            if spp > more_than:
                return spp
        time.sleep(0.05)
    pytest.fail("no checkpoint appeared")


@pytest.fixture(scope="module")
def process_scene(tmp_path_factory):
    folder = tmp_path_factory.mktemp("proc")
    path = folder / "nook48.json"
    path.write_text(json.dumps(_nook_doc(48, 36, seed=11)))
    reference = refrender.render(refrender.load_scene(path), spp=480)   # also warms the cache
    return path, reference


def test_sigkill_at_several_moments_then_resume_is_bit_identical(process_scene, tmp_path):
    scene, reference = process_scene
    out = tmp_path / "k.exr"
    state = state_path_for(out)
    seen = []
    # 1) killed after its first checkpoint
    p = _spawn(scene, out)
    seen.append(_wait_for_checkpoint(p, state))
    p.kill()
    p.wait()
    # 2) resumed, killed after it has checkpointed further
    p = _spawn(scene, out, "--resume")
    seen.append(_wait_for_checkpoint(p, state, more_than=seen[-1]))
    p.kill()
    p.wait()
    # 3) resumed and killed at once, before it could add anything
    p = _spawn(scene, out, "--resume")
    time.sleep(0.2)
    p.kill()
    p.wait()
    assert Result.from_state(state).spp >= seen[-1]
    # 4) resumed to the end
    p = _spawn(scene, out, "--resume")
    _, err = p.communicate(timeout=600)
    assert p.returncode == 0, err
    assert 0 < seen[0] < seen[1] < 480, seen
    final = Result.from_state(state)
    assert final.spp == 480 and final.run["stop_reason"] == "spp" and final.run["sessions"] >= 3
    _same_accumulators(final, reference)
    assert np.array_equal(read_exr(out).rgb(), reference.mean.astype(np.float32))


@pytest.mark.parametrize("sig, status", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_signal_saves_a_checkpoint_and_exits(process_scene, tmp_path, sig, status):
    scene, reference = process_scene
    out = tmp_path / "s.exr"
    p = _spawn(scene, out)
    _wait_for_checkpoint(p, state_path_for(out))
    p.send_signal(sig)
    _, err = p.communicate(timeout=600)
    assert p.returncode == status, err
    name = signal.Signals(sig).name
    assert err.startswith(f"refrender: {name}: stopped after") and "--resume" in err, err
    part = Result.from_state(state_path_for(out))
    assert part.run["stop_reason"] == name and not part.run["complete"] and 0 < part.spp < 480
    assert read_exr(out).metadata["spp"] == part.spp      # the EXR is the same checkpoint
    if sig == signal.SIGINT:
        p = _spawn(scene, out, "--resume")
        _, err = p.communicate(timeout=600)
        assert p.returncode == 0, err
        _same_accumulators(Result.from_state(state_path_for(out)), reference)


def test_resume_without_a_checkpoint_starts_at_sample_0(scene_file, tmp_path, capsys):
    out = tmp_path / "fresh.exr"
    assert main(["render", str(scene_file), "-o", str(out), "--spp", "6", "--resume"]) == 0
    err = capsys.readouterr().err
    assert "no checkpoint" in err and "starting from sample 0" in err
    assert Result.from_state(state_path_for(out)).sample_ranges == [(0, 6)]


@pytest.mark.parametrize("argv, word", [(["--time", "soon"], "--time"),
                                        (["--checkpoint-every", "5y"], "--checkpoint-every"),
                                        (["--target-error", "0"], "--target-error"),
                                        (["--target-error", "nan"], "--target-error"),
                                        (["--target-error", "0.1", "--min-spp", "1"], "min_spp")])
def test_bad_budget_options(scene_file, tmp_path, capsys, argv, word):
    assert main(["render", str(scene_file), "-o", str(tmp_path / "o.exr"), *argv]) == 2
    assert word in _one_error_line(capsys)
    assert list(tmp_path.iterdir()) == []


def test_merge_warns_when_kernel_code_differs(small):
    """Each input is unbiased, so merging is allowed, but the user is told."""
    a = refrender.render(small, spp=2)
    b = refrender.render(small, spp=2, first_sample=2)
    b.run["kernel_sha256"] = "f" * 16
    with pytest.warns(RuntimeWarning, match="different renderer code"):
        m = refrender.merge([a, b])
    assert m.spp == 4 and m.run["kernel_sha256"] is None
