"""Speed benchmark: closest-hit throughput, path tracing, BVH build, JIT compile.

    python tools/bench.py [--quick] [--json FILE] [--runs N]

Each workload is timed after a warm-up run; the figure is the median of
``--runs`` runs.  When the optional ``embreex`` binding is installed
(``pip install -e ".[bench]"``) the same rays are also traced by Embree from
two Python threads (its ``run`` releases the GIL, so this uses both cores)
and the ratio refrender/Embree is printed.  The renderer never depends on
embreex.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent


def _median_time(fn, runs):
    fn()                                  # warm-up (and JIT)
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _mesh_scene(vertices, faces):
    import refrender
    from refrender.scene.model import Camera, Film, Object, RenderSettings, Scene, TriangleMesh
    cam = Camera("perspective", np.eye(4))
    obj = Object(TriangleMesh(np.asarray(vertices, float), np.asarray(faces, np.int64)), None, np.zeros(3))
    return refrender, Scene(cam, Film(4, 4), {}, [obj], [], RenderSettings(), sha256="bench")


def _embree(vertices, faces):
    try:
        from embreex import rtcore_scene as rtcs
        from embreex.mesh_construction import TriangleMesh
    except ImportError:
        return None
    sc = rtcs.EmbreeScene()
    TriangleMesh(sc, np.ascontiguousarray(vertices[faces], dtype=np.float32))

    def run(o, d):
        o32 = np.ascontiguousarray(o, np.float32)
        d32 = np.ascontiguousarray(d, np.float32)
        half = len(o32) // 2
        with ThreadPoolExecutor(2) as ex:
            parts = list(ex.map(lambda s: sc.run(o32[s], d32[s], output=1),
                                [slice(0, half), slice(half, None)]))
        return np.concatenate([p["tfar"] for p in parts]), np.concatenate([p["primID"] for p in parts])
    return run


def ray_workload(name, vertices, faces, origins, directions, runs):
    import refrender.query as q
    from refrender.geometry.compile import compile_scene
    _, scene = _mesh_scene(vertices, faces)
    S = compile_scene(scene)
    kernel = "sequential" if q.is_coherent(origins, directions, S.radius) else "interleaved"
    ours = _median_time(lambda: q.trace(scene, origins, directions, arrays=S), runs)
    row = {"workload": name, "rays": len(origins), "triangles": len(faces), "kernel": kernel,
           "refrender_mrays_s": len(origins) / ours / 1e6}
    emb = _embree(np.asarray(vertices), np.asarray(faces))
    if emb is not None:
        theirs = _median_time(lambda: emb(origins, directions), runs)
        row["embree_2threads_mrays_s"] = len(origins) / theirs / 1e6
        row["ratio"] = theirs / ours
        h = q.trace(scene, origins, directions, arrays=S)
        t_e, p_e = emb(origins, directions)
        both = np.isfinite(h.t) & (p_e >= 0)
        row["hit_agreement"] = float(np.mean(np.isfinite(h.t) == (p_e >= 0)))
        row["t_max_rel_diff"] = float(np.max(np.abs(h.t[both] - t_e[both]) / h.t[both])) if both.any() else 0.0
    return row


def icosphere_rays(n, rng, subdiv):
    import trimesh
    m = trimesh.creation.icosphere(subdivisions=subdiv)
    p = rng.normal(size=(n, 3))
    p *= 3.0 / np.linalg.norm(p, axis=1)[:, None]
    q = rng.normal(size=(n, 3))
    q *= (rng.uniform(size=(n, 1)) ** (1 / 3)) / np.linalg.norm(q, axis=1)[:, None]
    return m.vertices, m.faces, p, q - p


def camera_rays(res):
    import trimesh
    m = trimesh.creation.icosphere(subdivisions=7)
    ys, xs = np.mgrid[0:res, 0:res]
    t = np.tan(np.radians(40.0) / 2)
    d = np.stack([(2 * (xs + 0.5) / res - 1) * t, (1 - 2 * (ys + 0.5) / res) * t,
                  -np.ones_like(xs, float)], axis=-1).reshape(-1, 3)
    o = np.tile([0.0, 0.0, 3.5], (len(d), 1))
    return m.vertices, m.faces, o, d


def random_triangles(n, rng, size=0.02):
    c = rng.uniform(size=(n, 1, 3))
    v = (c + rng.normal(scale=size / 2, size=(n, 3, 3))).reshape(-1, 3)
    return v, np.arange(3 * n).reshape(n, 3)


def path_tracing(runs):
    import refrender
    scene = refrender.load_scene(ROOT / "scenes" / "reading_nook.json")
    refrender.render(scene, spp=1)
    times, rays = [], 0
    for _ in range(runs):
        r = refrender.render(scene, spp=16)
        times.append(r.stats["seconds"])
        rays = r.stats["rays"]
    sec = statistics.median(times)
    row = {"workload": "(d) path tracing reading_nook 320x240 16 spp", "rays": rays,
           "refrender_mrays_s": rays / sec / 1e6, "seconds": sec}
    if "traversal_share" in r.stats:
        row["traversal_share"] = r.stats["traversal_share"]
    return row


def bvh_build(n, rng):
    from refrender.geometry.compile import compile_scene
    v, f = random_triangles(n, rng)
    _, scene = _mesh_scene(v, f)
    t = time.perf_counter()
    S = compile_scene(scene)
    sec = time.perf_counter() - t
    # everything the renderer keeps per scene for geometry: primitives, their
    # tables and the 8-wide BVH (the per-emitter light tables come on top)
    nbytes = sum(a.nbytes for a in S if isinstance(a, np.ndarray))
    return {"workload": f"(e) BVH build {n} triangles", "triangles": n, "seconds": sec,
            "bytes_per_triangle": nbytes / n, "bvh_bytes_per_triangle": S.nodes.nbytes / n}


def compile_times():
    code = ("import time; t=time.perf_counter(); import refrender; "
            "s=refrender.load_scene('scenes/reading_nook.json'); "
            "refrender.render(s, spp=1); print(time.perf_counter()-t)")
    with tempfile.TemporaryDirectory() as tmp:
        env = dict(os.environ, NUMBA_CACHE_DIR=tmp)
        cold = float(subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, check=True,
                                    capture_output=True, text=True).stdout.split()[-1])
        warm = float(subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, check=True,
                                    capture_output=True, text=True).stdout.split()[-1])
    return {"workload": "(f) start to first sample (1 spp of the demo)", "cold_s": cold, "warm_s": warm}


#: the targets each workload is measured against (ratios: refrender / Embree on 2 threads)
RATIO_TARGET = {"(a)": 1.5, "(b)": 1.0, "(c)": 1.5}


def markdown_table(rows):
    """The rows as the README's performance table (figures, ratio, target)."""
    out = ["| workload | refrender | Embree, 2 threads | ratio | target |",
           "| --- | --- | --- | --- | --- |"]
    builds = [r for r in rows if r["workload"].startswith("(e)")]
    for r in rows:
        key = r["workload"][:3]
        if key in RATIO_TARGET:
            emb = r.get("embree_2threads_mrays_s")
            ratio = r.get("ratio")
            target = RATIO_TARGET[key]
            verdict = "" if ratio is None else (" (met)" if ratio >= target else " (not met)")
            out.append(f"| {r['workload']} ({r['kernel']} kernel) | {r['refrender_mrays_s']:.2f} Mrays/s | "
                       + (f"{emb:.2f} Mrays/s | {ratio:.2f} |" if emb else "not installed | |")
                       + f" >= {target}{verdict} |")
        elif key == "(d)":
            share = r.get("traversal_share")
            cell = f"{r['refrender_mrays_s']:.2f} Mrays/s (all rays)"
            if share is not None:
                cell += f", {100 * share:.0f} % of the time in traversal"
                verdict = " (met)" if 1 - share <= 0.40 else " (not met)"
            else:
                verdict = ""
            out.append(f"| {r['workload']} | {cell} | | | <= 40 % outside traversal{verdict} |")
        elif key == "(f)":
            ok = r["cold_s"] < 30 and r["warm_s"] < 2
            out.append(f"| {r['workload']}, cold / warm cache | {r['cold_s']:.1f} s / {r['warm_s']:.1f} s | | | "
                       f"< 30 s / < 2 s ({'met' if ok else 'not met'}) |")
    if builds:
        secs = " / ".join(f"{b['seconds']:.1f} s" for b in builds)
        sizes = " / ".join(f"{b['bytes_per_triangle']:.0f}" for b in builds)
        names = " / ".join(f"{b['triangles'] / 1e6:g} M" for b in builds)
        first = builds[0]
        ok = first["seconds"] < 5 and all(b["bytes_per_triangle"] <= 150 for b in builds)
        out.append(f"| (e) BVH build, {names} triangles | {secs}, {sizes} B per triangle | | | "
                   f"1 M < 5 s at <= 150 B ({'met' if ok else 'not met'}) |")
    return "\n".join(out)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="smaller workloads (a smoke run)")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--json", help="write the rows as JSON")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(7)
    n_rays = 100_000 if args.quick else 1_000_000
    rows = []
    v, f, o, d = icosphere_rays(n_rays, rng, 5 if args.quick else 7)
    rows.append(ray_workload("(a) icosphere, aimed incoherent rays", v, f, o, d, args.runs))
    v, f, o, d = camera_rays(256 if args.quick else 1024)
    rows.append(ray_workload("(b) icosphere, pinhole camera rays", v, f, o, d, args.runs))
    v, f = random_triangles(50_000 if args.quick else 500_000, rng)
    o = rng.uniform(-1, 2, size=(n_rays, 3))
    d = rng.uniform(0, 1, size=(n_rays, 3)) - o
    rows.append(ray_workload("(c) random triangles 0.02 wide, aimed rays", v, f, o, d, args.runs))
    rows.append(path_tracing(1 if args.quick else args.runs))
    for n in ((100_000,) if args.quick else (1_000_000, 5_000_000)):
        rows.append(bvh_build(n, rng))
    rows.append(compile_times())
    for r in rows:
        print("  ".join(f"{k}={v:.4g}" if isinstance(v, float) else f"{k}={v}" for k, v in r.items()))
    print()
    print(markdown_table(rows))
    if args.json:
        Path(args.json).write_text(json.dumps(rows, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
