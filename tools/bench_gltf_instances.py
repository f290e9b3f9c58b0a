"""Instancing benchmark of the glTF import: K instances of one N-triangle mesh.

Writes a .glb with one grid mesh of about N triangles and K nodes that place it,
then, in a fresh process per case, measures the seconds to import, to build the
scene arrays and BVH, and to reach the first sample (a 1-spp render of a
64x48 film), and the peak resident memory (ru_maxrss).  The issue's target is
K = 1000, N = 100000 in < 60 s and < 2 GiB; the importer flattens instances
into world-space copies today, so memory grows with K * N.

    python tools/bench_gltf_instances.py --triangles 100000 --instances 1 10 30
"""
from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np


def write_asset(path: Path, triangles: int, instances: int) -> None:
    from refrender.scene.gltf_write import Gltf
    side = max(1, int(math.sqrt(triangles / 2)))
    u = np.linspace(0, 1, side + 1)
    x, y = np.meshgrid(u, u)
    z = 0.05 * np.sin(8 * x) * np.cos(8 * y)
    pos = np.stack([x.ravel(), y.ravel(), z.ravel()], axis=1)
    i = np.arange(side)[:, None] * (side + 1) + np.arange(side)[None, :]
    a, b, c, d = i.ravel(), i.ravel() + 1, i.ravel() + side + 1, i.ravel() + side + 2
    tris = np.concatenate([np.stack([a, b, d], 1), np.stack([a, d, c], 1)])
    g = Gltf()
    mesh = g.mesh(pos, tris, material=g.material(pbrMetallicRoughness={"metallicFactor": 0.0}))
    n = math.ceil(math.sqrt(instances))
    for k in range(instances):
        g.node(mesh=mesh, translation=[1.1 * (k % n), 1.1 * (k // n), 0.0])
    cam = g.camera(type="perspective", perspective={"yfov": 0.9, "aspectRatio": 4 / 3})
    g.node(camera=cam, translation=[0.55 * n, 0.55 * n, 1.5 * n])
    g.light(type="directional", intensity=683.0)
    g.node(extensions={"KHR_lights_punctual": {"light": 0}})
    g.write_glb(path)


def measure(path: str) -> dict:
    import resource
    import time
    t0 = time.perf_counter()
    from refrender.scene.gltf import load_gltf_scene
    scene = load_gltf_scene(path, film_height=48)
    t1 = time.perf_counter()
    from refrender.geometry.compile import compile_scene
    compile_scene(scene)
    t2 = time.perf_counter()
    from refrender import render
    render(scene, spp=1)
    t3 = time.perf_counter()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2 ** 20
    return {"import_s": t1 - t0, "arrays_bvh_s": t2 - t1, "first_sample_s": t3 - t0,
            "peak_rss_gib": rss}


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--triangles", type=int, default=100_000)
    p.add_argument("--instances", type=int, nargs="+", default=[1, 10])
    p.add_argument("--measure", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.measure:
        print(json.dumps(measure(args.measure)))
        return
    with tempfile.TemporaryDirectory() as tmp:
        for k in args.instances:
            path = Path(tmp) / f"asset_{k}.glb"
            write_asset(path, args.triangles, k)
            out = subprocess.run([sys.executable, __file__, "--measure", str(path)], capture_output=True,
                                 text=True, check=True)
            r = json.loads(out.stdout.strip().splitlines()[-1])
            print(f"{k:5d} instances x {args.triangles} triangles: import {r['import_s']:.1f} s, "
                  f"arrays+BVH {r['arrays_bvh_s']:.1f} s, first sample after {r['first_sample_s']:.1f} s "
                  f"(render() builds the arrays again), peak RSS {r['peak_rss_gib']:.2f} GiB")


if __name__ == "__main__":
    main()
