"""Cost of one checkpoint (state file + EXR, each temp file + fsync + rename) and of
loading it for --resume, at a given resolution.

    python tools/bench_checkpoint.py [--width 1920 --height 1080 --repeat 5 --folder DIR]

The accumulators are synthetic (random radiance at 64 spp): the cost depends on the
resolution and on how well the values compress (EXR ZIP), not on the scene.
"""
from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from refrender.io import state_path_for
from refrender.result import Result


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=1920)
    ap.add_argument("--height", type=int, default=1080)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--folder", help="where to write (default: a temporary folder)")
    a = ap.parse_args()
    h, w, spp = a.height, a.width, 64
    rng = np.random.default_rng(1)
    samples_mean = rng.gamma(2.0, 0.5, (h, w, 3))
    res = Result(sum=samples_mean * spp, sum_sq=samples_mean ** 2 * spp * 1.5,
                 count=np.full((h, w), spp, dtype=np.int64), sample_ranges=[(0, spp)],
                 meta=dict(scene_sha256="0" * 64, seed=0, strategy="mis", light_sampling="solid_angle",
                           max_bounces=None, rr_start=3, width=w, height=h, window=[0, 0, w, h]),
                 stats=dict(rays=0, seconds=1.0), run=dict(stop_reason="checkpoint", complete=False))
    with tempfile.TemporaryDirectory(dir=a.folder) as tmp:
        out = Path(tmp) / "bench.exr"
        saves, loads = [], []
        for _ in range(a.repeat):
            t = time.perf_counter()
            res.save(out)
            saves.append(time.perf_counter() - t)
            t = time.perf_counter()
            Result.from_state(state_path_for(out))
            loads.append(time.perf_counter() - t)
        state_mb = state_path_for(out).stat().st_size / 1e6
        exr_mb = out.stat().st_size / 1e6
    print(f"{w}x{h}: checkpoint (state {state_mb:.1f} MB + EXR {exr_mb:.1f} MB) "
          f"median {statistics.median(saves):.3f} s (min {min(saves):.3f}, max {max(saves):.3f}); "
          f"load for resume median {statistics.median(loads):.3f} s; {a.repeat} runs")


if __name__ == "__main__":
    main()
