"""Strategy study: every strategy x light_sampling on one scene at equal spp.

    python tools/strategy_study.py                      # both built-in scenes
    python tools/strategy_study.py --scene sphere --spp 256
    python tools/strategy_study.py --scene path/to/scene.json --json out.json

For each of the six combinations it renders the same scene, seed and spp
and reports the image mean (BT.709 luminance over all pixels), the mean
per-pixel variance of the pixel estimate (Result.variance), the render
seconds (kernels compiled beforehand) and the efficiency 1 / (variance x
seconds); the last column is each efficiency relative to area sampling with
the same strategy.

Built-in scenes (invented for this study):

- ``sphere``: a spherical lamp of radius 1 whose centre is 1.6 radii above a
  diffuse floor; the camera sees a small floor patch right under it, so
  every shading point sees the sphere from about 1.6 radii.
- ``rectangle``: a 4 x 4 ceiling panel 1 above a diffuse floor; the camera
  sees a floor patch under one edge of it.
"""
from __future__ import annotations

import argparse
import json
import math
import sys

import numpy as np

COMBOS = [(s, m) for s in ("mis", "nee", "bsdf") for m in ("solid_angle", "area")]


def _patch_camera(target, tilt_deg=60.0, view=0.2):
    """Orthographic camera looking at a floor patch from a tilted direction
    (so a lamp above the patch does not block the view)."""
    t = math.radians(tilt_deg)
    d = np.array([math.sin(t), math.cos(t), 0.0])
    pos = np.asarray(target, float) + 0.5 * d       # every ray starts above the floor
    return {"projection": "orthographic", "position": list(pos), "look_at": list(target),
            "up": [0.0, 1.0, 0.0], "view_height": view}


def builtin(name: str) -> dict:
    floor = {"shape": "rectangle", "origin": [-10.0, 0.0, 10.0], "edge1": [20.0, 0.0, 0.0],
             "edge2": [0.0, 0.0, -20.0], "material": "floor"}
    base = {"version": 1, "film": {"width": 32, "height": 32},
            "materials": {"floor": {"type": "lambertian", "albedo": [0.6, 0.6, 0.6]}},
            "render": {"spp": 64, "seed": 5}}
    if name == "sphere":
        lamp = {"shape": "sphere", "center": [0.0, 1.6, 0.0], "radius": 1.0, "emission": [5.0, 5.0, 5.0]}
        return {**base, "camera": _patch_camera([0.0, 0.0, 0.0]), "objects": [floor, lamp]}
    if name == "rectangle":
        panel = {"shape": "rectangle", "origin": [-2.0, 1.0, -2.0], "edge1": [4.0, 0.0, 0.0],
                 "edge2": [0.0, 0.0, 4.0], "emission": [2.0, 2.0, 2.0]}
        return {**base, "camera": _patch_camera([2.0, 0.0, 0.0], view=0.5), "objects": [floor, panel]}
    raise SystemExit(f"strategy_study: unknown built-in scene {name!r} (sphere, rectangle, or a .json path)")


def study(scene, spp: int, threads=None) -> list[dict]:
    import refrender
    from refrender.geometry.compile import LUMINANCE
    rows = []
    for s, m in COMBOS:          # compile and warm up every variant first
        refrender.render(scene, spp=1, strategy=s, light_sampling=m, threads=threads)
    for s, m in COMBOS:
        res = refrender.render(scene, spp=spp, strategy=s, light_sampling=m, threads=threads)
        y = res.mean @ LUMINANCE
        var = float((res.variance @ (LUMINANCE ** 2)).mean())   # channels combined as independent
        sec = float(res.stats["seconds"])
        rows.append(dict(strategy=s, light_sampling=m, mean=float(y.mean()), variance=var,
                         seconds=sec, efficiency=1.0 / (var * sec) if var > 0 and sec > 0 else math.inf,
                         spp=spp))
    for r in rows:
        ref = next(q for q in rows if q["strategy"] == r["strategy"] and q["light_sampling"] == "area")
        r["vs_area"] = r["efficiency"] / ref["efficiency"]
    return rows


def table(rows) -> str:
    out = ["| strategy | light_sampling | mean | variance | seconds | efficiency 1/(var·s) | vs area |",
           "| --- | --- | ---: | ---: | ---: | ---: | ---: |"]
    for r in rows:
        out.append(f"| {r['strategy']} | {r['light_sampling']} | {r['mean']:.5g} | {r['variance']:.3e} | "
                   f"{r['seconds']:.2f} | {r['efficiency']:.4g} | {r['vs_area']:.2f}× |")
    return "\n".join(out)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--scene", action="append", help="sphere, rectangle or a scene .json (repeatable)")
    ap.add_argument("--spp", type=int, default=256)
    ap.add_argument("--threads", type=int, default=None)
    ap.add_argument("--json", help="write all rows as JSON")
    args = ap.parse_args(argv)
    import refrender
    out = {}
    for name in args.scene or ["sphere", "rectangle"]:
        doc = refrender.load_scene(name) if name.endswith(".json") else refrender.load_scene(builtin(name))
        rows = study(doc, args.spp, args.threads)
        out[name] = rows
        print(f"### {name} ({args.spp} spp)\n")
        print(table(rows))
        print()
    if args.json:
        from refrender.io import atomic_write
        with atomic_write(args.json, "w") as f:
            json.dump(out, f, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
