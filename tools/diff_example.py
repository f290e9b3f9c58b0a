#!/usr/bin/env python3
"""Worked example of the diff tool on our demo room.

A reference (256 spp) and a "production frame" rendered independently (64 spp)
in which a classic mistake is injected: the frame is scaled by π (a radiance
written as irradiance/π the wrong way round).  Then the diff runs with a report:

    python tools/diff_example.py [OUT_DIR]      (default: diff_example/)
"""
import json
import math
import sys
from pathlib import Path

import refrender
from refrender.compare.cli import main as diff_main
from refrender.io import write_exr

ROOT = Path(__file__).resolve().parents[1]


def main(out="diff_example"):
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    doc = json.loads((ROOT / "scenes" / "reading_nook.json").read_text())
    doc["film"] = {"width": 160, "height": 120}
    scene = refrender.load_scene(doc, base_dir=ROOT / "scenes")
    refrender.render(scene, spp=256, seed=1).save(out / "reference.exr", state=False)
    frame = refrender.render(scene, spp=64, seed=2)
    write_exr(out / "frame_ok.exr", frame.mean, frame.variance, {"spp": 64})
    write_exr(out / "frame_pi.exr", frame.mean * math.pi, frame.variance * math.pi ** 2, {"spp": 64})
    print("== a correct frame ==")
    diff_main([str(out / "reference.exr"), str(out / "frame_ok.exr"), "--fail-if", "significant"])
    print("\n== the faulty frame ==")
    return diff_main([str(out / "reference.exr"), str(out / "frame_pi.exr"), "--report", str(out / "report"),
                      "--json", str(out / "report.json"), "--fail-if", "relmse>0.01"])


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:2]))
