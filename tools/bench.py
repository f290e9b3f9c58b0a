"""Speed benchmark: closest-hit throughput, path tracing, BVH build, JIT compile.

    python tools/bench.py [--quick] [--json FILE] [--runs N]
    python tools/bench.py --against REV [--quick] [--runs N] [--startup N]

Each workload is timed after a warm-up run; the figure is the median of
``--runs`` runs.  When the optional ``embreex`` binding is installed
(``pip install -e ".[bench]"``) the same rays are also traced by Embree from
two Python threads (its ``run`` releases the GIL, so this uses both cores)
and the ratio refrender/Embree is printed.  The renderer never depends on
embreex.

``--against REV`` compares this working tree with an earlier commit in one
run: it checks REV out as a git worktree in a temporary folder, starts one
worker process per tree (each imports its own ``refrender``), warms both up,
then times the same path-tracing and closest-hit workloads on both,
alternating which goes first, and prints the median of ``--runs`` (default 5)
and the ratio this/REV for each, plus whether both gave the same image or
hits bit for bit.  ``--keep-tree`` keeps REV's checkout in the temporary
folder, so that the next run against it loads its compiled kernels.  ``--startup N`` adds N cold-cache and N warm-cache
start-ups per tree (alternating).  The load average is printed beside the
figures: the machine may be shared.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
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


# ----------------------------------------------------------------------------- --against REV

#: the workloads of --against: name -> description (see _Workloads)
AGAINST = {
    "pt_nook": "path tracing scenes/reading_nook.json, film size, {spp} spp",
    "pt_gallery": "path tracing scenes/material_gallery.json, film size, {spp} spp",
    "hit_incoherent": "closest hit, {tris} triangle icosphere, {rays} aimed incoherent rays",
    "hit_camera": "closest hit, same mesh, {res}x{res} pinhole camera rays",
    "trace_again": "a second refrender.trace(scene, ...) call, 327 680 triangles, 1000 rays",
}


class _Workloads:
    """Worker side of --against: set-up once, then timed runs (same code for both trees)."""

    def __init__(self, quick):
        self.quick = quick
        self.spp = 2 if quick else 8
        self.setup = {}

    def _scene_pt(self, name):
        import refrender
        if name not in self.setup:
            scene = refrender.load_scene(Path.cwd() / "scenes" / name)
            refrender.render(scene, spp=1)                 # compile / load the kernels
            self.setup[name] = scene
        return self.setup[name]

    def _rays(self, which):
        from refrender.geometry.compile import compile_scene
        if which not in self.setup:
            rng = np.random.default_rng(7)
            if which == "hit_incoherent":
                v, f, o, d = icosphere_rays(100_000 if self.quick else 500_000, rng, 6)
            elif which == "hit_camera":
                v, f, o, d = camera_rays(256 if self.quick else 512)
            else:
                v, f, o, d = icosphere_rays(1000, rng, 7)
            _, scene = _mesh_scene(v, f)
            self.setup[which] = (scene, compile_scene(scene), o, d)
        return self.setup[which]

    def run(self, name):
        import hashlib
        import refrender
        if name.startswith("pt_"):
            scene = self._scene_pt("reading_nook.json" if name == "pt_nook" else "material_gallery.json")
            r = refrender.render(scene, spp=self.spp)
            digest = hashlib.sha256(np.ascontiguousarray(r.mean).tobytes()
                                    + np.ascontiguousarray(r.variance).tobytes()).hexdigest()
            return {"seconds": r.stats["seconds"], "rays": r.stats["rays"], "digest": digest,
                    "traversal_share": r.stats.get("traversal_share")}
        scene, S, o, d = self._rays(name)
        if name == "trace_again":
            refrender.trace(scene, o, d)                   # the first call (may build)
            t = time.perf_counter()
            h = refrender.trace(scene, o, d)               # the timed second call
        else:
            refrender.trace(scene, o, d, arrays=S)         # warm
            t = time.perf_counter()
            h = refrender.trace(scene, o, d, arrays=S)
        sec = time.perf_counter() - t
        digest = hashlib.sha256(h.t.tobytes() + h.prim.tobytes() + h.object.tobytes()).hexdigest()
        return {"seconds": sec, "rays": len(o), "digest": digest}


def serve(quick):
    """Worker loop of --against: one JSON command per line in, one JSON result per line out."""
    import refrender
    here = Path.cwd().resolve()
    if Path(refrender.__file__).resolve().parent.parent != here:
        raise SystemExit(f"bench worker: imported {refrender.__file__}, expected the tree {here}")
    w = _Workloads(quick)
    print(json.dumps({"ready": refrender.__file__}), flush=True)
    for line in sys.stdin:
        cmd = json.loads(line)
        if cmd.get("quit"):
            break
        print(json.dumps(w.run(cmd["workload"])), flush=True)


class _Worker:
    def __init__(self, tree, quick):
        env = dict(os.environ, PYTHONPATH=str(tree))
        env.pop("NUMBA_CACHE_DIR", None)                   # each tree keys its own cache
        args = [sys.executable, str(Path(__file__).resolve()), "--serve"] + (["--quick"] if quick else [])
        self.proc = subprocess.Popen(args, cwd=tree, env=env, stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True)
        self.ready = self._read()

    def _read(self):
        line = self.proc.stdout.readline()
        if not line:
            raise RuntimeError(f"bench worker in {self.proc.args} stopped (exit {self.proc.wait()})")
        return json.loads(line)

    def run(self, workload):
        self.proc.stdin.write(json.dumps({"workload": workload}) + "\n")
        self.proc.stdin.flush()
        return self._read()

    def close(self):
        if self.proc.poll() is None:
            self.proc.stdin.write(json.dumps({"quit": True}) + "\n")
            self.proc.stdin.flush()
            self.proc.wait(timeout=60)


def startup_seconds(tree, cold):
    """Seconds from import to the end of 1 spp of the demo in a new process of ``tree``."""
    code = ("import time; t=time.perf_counter(); import refrender; "
            "s=refrender.load_scene('scenes/reading_nook.json'); "
            "refrender.render(s, spp=1); print(time.perf_counter()-t)")
    env = dict(os.environ, PYTHONPATH=str(tree))
    env.pop("NUMBA_CACHE_DIR", None)
    with tempfile.TemporaryDirectory() as tmp:
        if cold:
            env["NUMBA_CACHE_DIR"] = tmp
        out = subprocess.run([sys.executable, "-c", code], cwd=tree, env=env, check=True,
                             capture_output=True, text=True).stdout
    return float(out.split()[-1])


def _load():
    return "load %.1f %.1f %.1f" % os.getloadavg()


def against(rev, runs, quick, startup_runs, keep_tree=False):
    """Time the same workloads on REV and on this working tree, alternating; print ratios."""
    sha = subprocess.run(["git", "rev-parse", "--verify", rev + "^{commit}"], cwd=ROOT, check=True,
                         capture_output=True, text=True).stdout.strip()
    head = subprocess.run(["git", "describe", "--always", "--dirty"], cwd=ROOT,
                          capture_output=True, text=True).stdout.strip()
    # one folder per commit, kept with --keep-tree: numba's cache is keyed on the
    # source files' paths and modification times, so only a kept checkout lets
    # the next run against the same REV load REV's kernels instead of compiling
    tree = Path(tempfile.gettempdir()) / f"refrender-against-{sha[:12]}"
    kept = subprocess.run(["git", "-C", str(tree), "rev-parse", "HEAD"], capture_output=True,
                          text=True).stdout.strip() == sha if tree.exists() else False
    if not kept:
        subprocess.run(["git", "worktree", "remove", "--force", str(tree)], cwd=ROOT, capture_output=True)
        shutil.rmtree(tree, ignore_errors=True)
        subprocess.run(["git", "worktree", "prune"], cwd=ROOT, capture_output=True)
        subprocess.run(["git", "worktree", "add", "--detach", str(tree), sha], cwd=ROOT, check=True,
                       capture_output=True)
    workers = {}
    rows = []
    try:
        print(f"# {rev} = {sha[:10]} (in {tree}) against this tree ({head}); {_load()}", flush=True)
        workers["rev"] = _Worker(tree, quick)
        workers["this"] = _Worker(ROOT, quick)
        names = list(AGAINST)
        for name in names:                                # warm-up: compile, set up, one run each
            for side in ("rev", "this"):
                workers[side].run(name)
        print(f"# warmed up; {_load()}", flush=True)
        res = {(n, s): [] for n in names for s in ("rev", "this")}
        for i in range(runs):
            order = ("rev", "this") if i % 2 == 0 else ("this", "rev")
            for name in names:
                for side in order:
                    res[name, side].append(workers[side].run(name))
        load_after = _load()
        for name in names:
            a, b = res[name, "rev"], res[name, "this"]
            ta = statistics.median(r["seconds"] for r in a)
            tb = statistics.median(r["seconds"] for r in b)
            row = {"workload": name, "rev_seconds": ta, "this_seconds": tb, "speedup": ta / tb,
                   "rev_runs": [r["seconds"] for r in a], "this_runs": [r["seconds"] for r in b],
                   "identical": len({r["digest"] for r in a + b}) == 1,
                   "rev_mrays_s": a[0]["rays"] / ta / 1e6, "this_mrays_s": b[0]["rays"] / tb / 1e6}
            for side, rr in (("rev", a), ("this", b)):
                shares = [r["traversal_share"] for r in rr if r.get("traversal_share") is not None]
                if shares:
                    row[side + "_traversal_share"] = statistics.median(shares)
            rows.append(row)
        if startup_runs:
            for kind in ("cold", "warm"):
                times = {"rev": [], "this": []}
                for i in range(startup_runs):
                    for side in (("rev", "this") if i % 2 == 0 else ("this", "rev")):
                        times[side].append(startup_seconds(tree if side == "rev" else ROOT, kind == "cold"))
                rows.append({"workload": f"startup_{kind}", "rev_runs": times["rev"],
                             "this_runs": times["this"],
                             "rev_seconds": statistics.median(times["rev"]),
                             "this_seconds": statistics.median(times["this"]),
                             "speedup": statistics.median(times["rev"]) / statistics.median(times["this"])})
            load_after = _load()
    finally:
        for w in workers.values():
            w.close()
        if not keep_tree:
            subprocess.run(["git", "worktree", "remove", "--force", str(tree)], cwd=ROOT, capture_output=True)
            subprocess.run(["git", "worktree", "prune"], cwd=ROOT, capture_output=True)
            shutil.rmtree(tree, ignore_errors=True)
    print(f"# measured; {load_after}")
    print()
    print(against_table(rows, rev, sha, head, quick, runs))
    return rows


def against_table(rows, rev, sha, head, quick, runs):
    spp = 2 if quick else 8
    fill = dict(spp=spp, tris="81 920", rays="100 000" if quick else "500 000",
                res=256 if quick else 512)
    out = [f"Medians of {runs} alternating runs; ratio = {rev} ({sha[:10]}) time / this tree ({head}) time "
           "(> 1: this tree is faster).", "",
           f"| workload | {rev} | this tree | ratio | same result |", "| --- | --- | --- | --- | --- |"]
    for r in rows:
        name = r["workload"]
        if name.startswith("startup"):
            kind = name.split("_")[1]
            fmt = lambda v: f"median {statistics.median(v):.1f} s, worst {max(v):.1f} s"  # noqa: E731
            out.append(f"| start to first sample, {kind} cache ({len(r['rev_runs'])} runs) | "
                       f"{fmt(r['rev_runs'])} | {fmt(r['this_runs'])} | {r['speedup']:.2f} | |")
            continue
        desc = AGAINST[name].format(**fill)
        if name == "trace_again":
            cells = f"{1e3 * r['rev_seconds']:.1f} ms | {1e3 * r['this_seconds']:.1f} ms"
        else:
            cells = f"{r['rev_mrays_s']:.2f} Mrays/s | {r['this_mrays_s']:.2f} Mrays/s"
            if "this_traversal_share" in r:
                cells = (f"{r['rev_mrays_s']:.2f} Mrays/s, {100 * r['rev_traversal_share']:.0f} % traversal | "
                         f"{r['this_mrays_s']:.2f} Mrays/s, {100 * r['this_traversal_share']:.0f} % traversal")
        out.append(f"| {desc} | {cells} | {r['speedup']:.2f} | {'yes' if r['identical'] else 'NO'} |")
    return "\n".join(out)


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
    ap.add_argument("--runs", type=int, default=None, help="runs per figure (default 3; 5 with --against)")
    ap.add_argument("--json", help="write the rows as JSON")
    ap.add_argument("--against", metavar="REV", help="compare with git revision REV in one run")
    ap.add_argument("--startup", type=int, default=0, metavar="N",
                    help="with --against: N cold and N warm start-ups per tree")
    ap.add_argument("--keep-tree", action="store_true",
                    help="with --against: keep REV's checkout (and so its compiled kernels) for the next run")
    ap.add_argument("--serve", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.serve:
        serve(args.quick)
        return 0
    if args.against:
        rows = against(args.against, args.runs or 5, args.quick, args.startup, args.keep_tree)
        if args.json:
            Path(args.json).write_text(json.dumps(rows, indent=2))
        return 0
    args.runs = args.runs or 3
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
