"""Farm renders on a local Dask cluster (loopback only)."""
import json
import os
import signal
import threading
from pathlib import Path

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")

import refrender  # noqa: E402
from refrender import farm  # noqa: E402

SCENES = Path(__file__).resolve().parent.parent / "scenes"


@pytest.fixture(scope="module")
def scene():
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 24, "height": 16}
    return refrender.load_scene(doc, base_dir=SCENES)


@pytest.fixture(scope="module")
def client(scene):
    refrender.render(scene, spp=1)          # compile in this process: workers load the cache
    cluster = farm.local_cluster(2)
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def test_split_and_missing_ranges():
    """Invariants of the task plan: the ranges tile the request exactly."""
    assert farm.split_range(3, 10, 4) == [(3, 7), (7, 11), (11, 13)]
    assert farm.missing_ranges([(0, 8), (8, 16)], [(0, 4), (10, 12)]) == [(4, 8), (8, 10), (12, 16)]
    assert farm.missing_ranges([(0, 8)], [(0, 8)]) == []
    assert farm.default_task_spp(64, 2) == 4


def test_local_cluster_binds_loopback_only(client):
    info = client.scheduler_info()
    assert client.scheduler.address.startswith("tcp://127.0.0.1:")
    assert all(addr.startswith("tcp://127.0.0.1:") for addr in info["workers"])


def test_farm_equals_single_machine(scene, client):
    """The merge of tasks equals one local render of the same samples (float64 rounding)."""
    local = refrender.render(scene, spp=12, seed=5)
    far = farm.render_farm(scene, client, spp=12, seed=5, task_spp=3)
    assert far.sample_ranges == [(0, 12)]
    assert np.array_equal(far.count, local.count)
    assert np.allclose(far.mean, local.mean, rtol=1e-12, atol=1e-300)
    assert np.allclose(far.variance, local.variance, rtol=1e-9, atol=1e-300)
    assert far.meta == local.meta


def test_payload_hash_is_checked(scene):
    payload, digest = farm.pack_scene(scene)
    bad = bytearray(payload)
    bad[len(bad) // 2] ^= 1
    with pytest.raises(refrender.RenderError, match="corrupted"):
        farm._render_task(bytes(bad), digest, {}, 0, 1, 1)


def test_resume_renders_only_missing_ranges(scene, client):
    """A partly done farm render continues without rendering a range twice."""
    first = farm.render_farm(scene, client, spp=6, seed=2, task_spp=3)
    seen = []
    full = farm.render_farm(scene, client, spp=12, seed=2, task_spp=3, done=first,
                            progress=lambda d, t, r, s: seen.append(t))
    assert seen and set(seen) == {2}            # only (6, 9) and (9, 12) were submitted
    local = refrender.render(scene, spp=12, seed=2)
    assert np.array_equal(full.count, local.count)
    assert np.allclose(full.mean, local.mean, rtol=1e-12, atol=1e-300)


def test_killed_worker_loses_no_range(scene, client):
    """SIGKILL one worker while tasks run: its task is re-run elsewhere, every
    sample range is counted exactly once."""
    pids = client.run(os.getpid)
    victim = sorted(pids.values())[0]
    killed = threading.Event()

    def kill_once(done, total, rays, seconds):
        if not killed.is_set():
            killed.set()
            os.kill(victim, signal.SIGKILL)

    spp = 24
    far = farm.render_farm(scene, client, spp=spp, seed=9, task_spp=1, progress=kill_once)
    assert killed.is_set()
    assert far.sample_ranges == [(0, spp)]
    local = refrender.render(scene, spp=spp, seed=9)
    assert np.array_equal(far.count, local.count)   # nothing lost or doubled
    assert np.allclose(far.mean, local.mean, rtol=1e-12, atol=1e-300)
    client.wait_for_workers(2, timeout=60)           # the nanny restarts the worker


def test_cli_farm_render_and_resume(tmp_path, scene):
    """`refrender render --local-workers 2` writes the same image as a local render, and
    --resume continues a farm checkpoint without re-rendering its ranges."""
    from refrender.cli.main import main
    from refrender.io import read_exr
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 24, "height": 16}
    (tmp_path / "meshes").mkdir()
    (tmp_path / "meshes" / "gem.obj").write_bytes((SCENES / "meshes" / "gem.obj").read_bytes())
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    out = tmp_path / "o.exr"
    assert main(["render", str(path), "-o", str(out), "--spp", "4", "--local-workers", "2",
                 "--task-spp", "2", "--quiet", "--seed", "3"]) == 0
    assert main(["render", str(path), "-o", str(out), "--spp", "8", "--local-workers", "2",
                 "--task-spp", "2", "--quiet", "--resume"]) == 0
    local = refrender.render(refrender.load_scene(path), spp=8, seed=3)
    img = read_exr(out)
    assert img.metadata["sample_ranges"] == [[0, 8]]
    assert np.allclose(img.rgb(), local.mean.astype(np.float32), rtol=1e-6, atol=0)
    again = refrender.Result.from_state(tmp_path / "o.state")
    assert np.allclose(again.mean, local.mean, rtol=1e-12, atol=1e-300)


def test_farm_checkpoints_are_unfinished_until_the_last_range(scene, client):
    """Every on_task checkpoint but the final result says complete = False, stop
    reason "checkpoint": after a SIGKILL the same command without --resume must
    refuse to start over (README: an unfinished state is never overwritten)."""
    seen = []
    far = farm.render_farm(scene, client, spp=6, seed=2, task_spp=2,
                           on_task=lambda partial: seen.append(dict(partial.run)))
    assert len(seen) == 3
    assert all(r["complete"] is False and r["stop_reason"] == "checkpoint" for r in seen)
    assert far.run["complete"] is True and far.run["stop_reason"] == "spp"


def test_ctrl_c_of_the_whole_process_group_checkpoints_and_exits_130(tmp_path):
    """SIGINT to the process group (what a terminal's Ctrl-C does) reaches the
    workers too: they ignore it, the client saves what finished, one line, 130."""
    import subprocess
    import sys
    import time
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 8, "height": 8}
    doc.pop("render", None)
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    for mesh in (SCENES / "meshes").iterdir():
        (tmp_path / "meshes").mkdir(exist_ok=True)
        (tmp_path / "meshes" / mesh.name).write_bytes(mesh.read_bytes())
    out = tmp_path / "o.exr"
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parent.parent))
    proc = subprocess.Popen([sys.executable, "-m", "refrender", "render", str(path), "-o", str(out),
                             "--spp", "40000", "--task-spp", "20", "--local-workers", "1",
                             "--checkpoint-every", "0.1s", "--quiet"],
                            env=env, start_new_session=True, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 300
        while not out.with_suffix(".state").exists() and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.1)
        assert out.with_suffix(".state").exists(), "no checkpoint was written"
        os.killpg(proc.pid, signal.SIGINT)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode == 130, err
    assert len(err.splitlines()) == 1 and err.startswith("refrender: SIGINT: stopped after"), err
    res = refrender.Result.from_state(out.with_suffix(".state"))
    assert res.run["stop_reason"] == "SIGINT" and res.run["complete"] is False
    assert not out.with_suffix(".lock").exists()
