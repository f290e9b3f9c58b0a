"""Interrupt a real render (SIGKILL, then SIGINT), resume it, and compare it with an
uninterrupted render of the same scene: the maximum absolute difference must be 0.

    python tools/check_resume.py SCENE [--spp 64] [--checkpoint-every 2s] [--folder DIR]

Runs `python -m refrender render` in subprocesses; prints the sample counts at which
each interruption happened and the differences of the EXR means and the float64
accumulators.
"""
from __future__ import annotations

import argparse
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from refrender.io import read_exr, state_path_for
from refrender.result import Result


def _render(scene, out, spp, every, *extra):
    cmd = [sys.executable, "-m", "refrender", "render", str(scene), "-o", str(out), "--quiet",
           "--spp", str(spp), "--checkpoint-every", every, *extra]
    return subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True)


def _wait_for(proc, state, more_than):
    while proc.poll() is None:
        if state.exists():
            spp = Result.from_state(state).spp
            if spp > more_than:
                return spp
        time.sleep(0.05)
    raise SystemExit(f"render ended before a new checkpoint: {proc.stderr.read()}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scene")
    ap.add_argument("--spp", type=int, default=64)
    ap.add_argument("--checkpoint-every", default="2s")
    ap.add_argument("--folder")
    a = ap.parse_args()
    with tempfile.TemporaryDirectory(dir=a.folder) as tmp:
        tmp = Path(tmp)
        whole, cut = tmp / "whole.exr", tmp / "cut.exr"
        t = time.perf_counter()
        p = _render(a.scene, whole, a.spp, "off")
        if p.wait() != 0:
            raise SystemExit(p.stderr.read())
        t_whole = time.perf_counter() - t
        state = state_path_for(cut)
        t = time.perf_counter()
        p = _render(a.scene, cut, a.spp, a.checkpoint_every)
        k1 = _wait_for(p, state, 0)
        p.kill()
        p.wait()
        p = _render(a.scene, cut, a.spp, a.checkpoint_every, "--resume")
        k2 = _wait_for(p, state, k1)
        p.send_signal(signal.SIGINT)
        code = p.wait()
        k3 = Result.from_state(state).spp
        p = _render(a.scene, cut, a.spp, a.checkpoint_every, "--resume")
        if p.wait() != 0:
            raise SystemExit(p.stderr.read())
        t_cut = time.perf_counter() - t
        A, B = read_exr(whole), read_exr(cut)
        ra, rb = Result.from_state(state_path_for(whole)), Result.from_state(state)
        d_exr = float(np.max(np.abs(A.rgb().astype(np.float64) - B.rgb())))
        d_var = float(np.max(np.abs(A.layer("variance").astype(np.float64) - B.layer("variance"))))
        d_acc = max(float(np.max(np.abs(ra.sum - rb.sum))), float(np.max(np.abs(ra.sum_sq - rb.sum_sq))))
        print(f"{a.scene}: {A.shape[1]}x{A.shape[0]}, {a.spp} spp; SIGKILL after the checkpoint at "
              f"{k1} spp; resumed, SIGINT (exit {code}) after the checkpoint at {k2} spp "
              f"saved {k3} spp, resumed to {rb.spp} spp in {rb.run.get('sessions')} sessions")
        print(f"max |difference|: EXR mean {d_exr:g}, EXR variance {d_var:g}, float64 accumulators "
              f"{d_acc:g}, counts equal: {bool(np.array_equal(ra.count, rb.count))}; "
              f"wall time {t_whole:.1f} s uninterrupted, {t_cut:.1f} s with interruptions")


if __name__ == "__main__":
    main()
