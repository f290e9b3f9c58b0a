#!/usr/bin/env python3
"""Example convergence study: sampling strategies on the demo room.

Renders scenes/reading_nook.json at a reduced film (64 x 48), five
configurations, three seeds each, snapshots 1 ... 64 spp, against a reference
rendered on the fly at 256 spp, and writes the tables and the plot:

    python tools/convergence_example.py [OUT_DIR]      (default: convergence_example/)
"""
import json
import sys
from pathlib import Path

import refrender
from refrender import study

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = [
    {"name": "mis solid-angle", "strategy": "mis", "light_sampling": "solid_angle"},
    {"name": "nee solid-angle", "strategy": "nee", "light_sampling": "solid_angle"},
    {"name": "nee area", "strategy": "nee", "light_sampling": "area"},
    {"name": "bsdf only", "strategy": "bsdf"},
    {"name": "mis, max_bounces 1", "strategy": "mis", "max_bounces": 1},
]


def main(out="convergence_example"):
    doc = json.loads((ROOT / "scenes" / "reading_nook.json").read_text())
    doc["film"] = {"width": 64, "height": 48}
    scene = refrender.load_scene(doc, base_dir=ROOT / "scenes")
    rows = study.run(scene, CONFIGS, max_spp=64, seeds=[0, 1, 2], reference_factor=4,
                     progress=lambda name, seed, spp: spp == 64 and print(f"  {name}, seed {seed}: done"))
    summary = study.summarise(rows)
    study.write_outputs(out, rows, summary, title="reading nook, 64 x 48: strategies")
    print(study.summary_table(summary))
    for s in summary:
        if s.get("biased"):
            print(f"{s['config']}: {s['bias_note']}")
    print(f"wrote {out}/rows.csv, summary.csv, rows.json, summary.json, convergence.png")


if __name__ == "__main__":
    main(*sys.argv[1:2])
