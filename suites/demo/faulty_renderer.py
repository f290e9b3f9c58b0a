#!/usr/bin/env python3
"""A stand-in "renderer under test" for the demo suite: refrender itself, with
a classic fault injected on request.

    python faulty_renderer.py SCENE FRAME.exr [--fault none|fewer_bounces|scaled_light|gamma]
                              [--spp N] [--seed S]

Faults: ``fewer_bounces`` ends every path after one scattering event (direct
light only), ``scaled_light`` multiplies every emission by 1.2, ``gamma``
writes the frame sRGB-encoded into a file that claims to be linear.
The frame is an independent render (its own seed) with its variance layer,
except for ``gamma`` (a display-encoded image has no meaningful one).
"""
import argparse
import json
import sys
from pathlib import Path


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("scene")
    p.add_argument("frame")
    p.add_argument("--fault", default="none", choices=["none", "fewer_bounces", "scaled_light", "gamma"])
    p.add_argument("--spp", type=int, default=32)
    p.add_argument("--seed", type=int, default=7)
    a = p.parse_args(argv)
    import refrender
    from refrender.io import srgb_encode, write_exr
    doc = json.loads(Path(a.scene).read_text())
    if a.fault == "scaled_light":
        for obj in doc["objects"]:
            if "emission" in obj:
                obj["emission"] = [1.2 * v for v in obj["emission"]]
    scene = refrender.load_scene(doc, base_dir=Path(a.scene).resolve().parent)
    kw = {"max_bounces": 1} if a.fault == "fewer_bounces" else {}
    res = refrender.render(scene, spp=a.spp, seed=a.seed, **kw)
    if a.fault == "gamma":
        write_exr(a.frame, srgb_encode(res.mean.clip(0, None)), None, {"renderer": "faulty_renderer.py"})
    else:
        write_exr(a.frame, res.mean, res.variance, {"renderer": "faulty_renderer.py", "spp": res.spp})
    return 0


if __name__ == "__main__":
    sys.exit(main())
