"""Speed-up of farm renders versus the number of local Dask workers.

    python tools/farm_bench.py [--spp 256] [--workers 1 2] [--width 160 --height 120]

Renders the demo scene once locally and then on local clusters of each size
(one numba thread per worker), and prints seconds, speed-up over one worker and
the largest difference from the local image.  On a 2-core machine expect at
most 2x.
"""
from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--spp", type=int, default=256)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--width", type=int, default=160)
    ap.add_argument("--height", type=int, default=120)
    args = ap.parse_args(argv)
    import distributed

    import refrender
    from refrender import farm
    doc = json.loads((ROOT / "scenes" / "reading_nook.json").read_text())
    doc["film"] = {"width": args.width, "height": args.height}
    scene = refrender.load_scene(doc, base_dir=ROOT / "scenes")
    refrender.render(scene, spp=1)
    t = time.perf_counter()
    local = refrender.render(scene, spp=args.spp, threads=1)
    t_local = time.perf_counter() - t
    print(f"local, 1 thread: {t_local:.2f} s")
    base = None
    for n in args.workers:
        with farm.local_cluster(n) as cluster, distributed.Client(cluster) as client:
            farm.render_farm(scene, client, spp=n, threads_per_task=1, task_spp=1)   # warm the workers
            t = time.perf_counter()
            res = farm.render_farm(scene, client, spp=args.spp, threads_per_task=1)
            sec = time.perf_counter() - t
        base = base or sec
        diff = float(np.max(np.abs(res.mean - local.mean)))
        print(f"{n} worker(s): {sec:.2f} s, speed-up {base / sec:.2f}x over 1 worker, "
              f"{t_local / sec:.2f}x over local; max |farm - local| = {diff:.3g}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
