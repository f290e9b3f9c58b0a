#!/usr/bin/env python3
"""Worked example of ``diff --explain`` on our demo room.

A reference (256 spp) with light-transport layers, and an independent
"production frame" (64 spp, its own layers) from which the light that
scattered three or more times is dropped (a bounce limit of 2 set by
mistake).  The diff explains the difference by the reference's layers:

    python tools/explain_example.py [OUT_DIR]      (default: explain_example/)
"""
import json
import sys
from pathlib import Path

import refrender
from refrender.compare.cli import main as diff_main
from refrender.io import write_exr

ROOT = Path(__file__).resolve().parents[1]


def main(out="explain_example"):
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    doc = json.loads((ROOT / "scenes" / "reading_nook.json").read_text())
    doc["film"] = {"width": 160, "height": 120}
    scene = refrender.load_scene(doc, base_dir=ROOT / "scenes")
    layers = ["transport", "bounces", "light_groups"]
    refrender.render(scene, spp=256, seed=1, layers=layers).save(out / "reference.exr", state=False)
    frame = refrender.render(scene, spp=64, seed=2, layers=layers)
    lost = frame.layer_mean("bounce3plus")
    # variance of (beauty - bounce3plus): bounded by Cauchy-Schwarz (the two are correlated)
    v = frame.variance + frame.layer_variance("bounce3plus")
    v = v + 2 * (frame.variance * frame.layer_variance("bounce3plus")) ** 0.5
    write_exr(out / "frame_ok.exr", frame.mean, frame.variance, {})
    write_exr(out / "frame_2_bounces.exr", frame.mean - lost, v, {})
    print("== a correct frame ==")
    diff_main([str(out / "reference.exr"), str(out / "frame_ok.exr"), "--explain"])
    print("\n== a frame without bounces >= 3 ==")
    return diff_main([str(out / "reference.exr"), str(out / "frame_2_bounces.exr"), "--explain"])


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:2]))
