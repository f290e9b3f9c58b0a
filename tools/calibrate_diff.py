#!/usr/bin/env python3
"""Calibration of the diff tool's verdicts: false-alarm rate on real null pairs, power on small faults.

    python tools/calibrate_diff.py [--pairs 200] [--film 24x18] [--alpha 0.002] [--json FILE] [--markdown FILE]

Each null pair is two independent renders (distinct seeds) of the same repo
scene: a reference of 64, 256, 1024 or 4096 spp and a test frame of 4, 16, 64
or 256 spp, all sixteen combinations in turn, over three scenes in turn.
Frames are rounded to float32 as an EXR stores them.  For every pair the
verdict components of :func:`refrender.compare.compare` are recorded; the
false-alarm rate of each (and of any diagnosis) is reported with its exact
(Clopper-Pearson) 95 % binomial interval (scipy.stats.binomtest).

Power: the same test frame with a fault, against the same reference:
global scale 1 %, 2 %, 5 % (mean x s, variance x s^2); a 5 % brighter 8 x 8
pixel block (at x 8-16, y 8-16); and a render of the test frame's spp with
``max_bounces = 2`` (light of three and more bounces dropped).  Power is the
fraction of pairs called significant, per test spp.

Every pair is independent of every other (its own two seeds), so counts are
binomial.  One run of 200 pairs at 24 x 18 took 53 minutes on the shared
2-core machine (the 4096-spp references dominate).
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
SCENES = ("scenes/reading_nook.json", "scenes/material_gallery.json", "scenes/analytic/closed_enclosure.json")
TEST_SPP = (4, 16, 64, 256)
REF_SPP = (64, 256, 1024, 4096)
FAULTS = ("scale 1%", "scale 2%", "scale 5%", "5% in an 8x8 block", "bounces >= 3 dropped")
COMPONENTS = ("global bias", "regional bias", "dispersion", "exact-pixel differences", "non-finite", "significant",
              "any diagnosis")


def _scene(path, film):
    import refrender
    doc = json.loads((ROOT / path).read_text())
    doc["film"] = {"width": film[0], "height": film[1]}
    return refrender.load_scene(doc, base_dir=(ROOT / path).parent)


def _frame(mean, var, spp, name):
    from refrender.compare import Frame
    f32 = lambda a: np.asarray(a, dtype=np.float32).astype(np.float64)  # noqa: E731 (EXR storage)
    return Frame(f32(mean), None if var is None else f32(var), name, "EXR", {"spp": int(spp)})


def _components(rep):
    sig = rep["significance"]
    tests = {t["test"]: t["significant"] for t in sig["tests"]}
    return {"global bias": tests.get("global bias", False), "regional bias": tests.get("regional bias", False),
            "dispersion": tests.get("dispersion", False),
            "exact-pixel differences": sig["exact_pixel_differences"] > 0,
            "non-finite": sig["nonfinite_pixels"] > 0, "significant": bool(sig["significant"]),
            "any diagnosis": len(rep["diagnoses"]) > 0}


def interval(k, n):
    """Exact 95 % binomial interval (Clopper-Pearson, scipy.stats.binomtest)."""
    from scipy.stats import binomtest
    ci = binomtest(k, n).proportion_ci(0.95, method="exact")
    return float(ci.low), float(ci.high)


def run(pairs, film, alpha, seed0=1000, log=sys.stderr):
    import refrender
    from refrender.compare import compare
    scenes = [_scene(p, film) for p in SCENES]
    rows = []
    t0 = time.perf_counter()
    for i in range(pairs):
        k = i % len(scenes)
        n_t = TEST_SPP[(i // len(scenes)) % 4]
        n_r = REF_SPP[(i // (4 * len(scenes))) % 4]
        sc = scenes[k]
        ref = refrender.render(sc, spp=n_r, seed=seed0 + 2 * i)
        tst = refrender.render(sc, spp=n_t, seed=seed0 + 2 * i + 1)
        R = _frame(ref.mean, ref.variance, n_r, "ref")
        row = {"pair": i, "scene": SCENES[k], "spp_ref": n_r, "spp_test": n_t}
        rep = compare(R, _frame(tst.mean, tst.variance, n_t, "test"), alpha=alpha)
        row["null"] = _components(rep)
        row["null_diagnoses"] = [d["fault"] for d in rep["diagnoses"]]
        row["global_t"] = rep["significance"]["global_test"]["t"]
        row["dispersion_z"] = (rep["significance"]["dispersion"] or {}).get("z")
        power = {}
        for s, name in ((1.01, "scale 1%"), (1.02, "scale 2%"), (1.05, "scale 5%")):
            f = _frame(tst.mean * s, tst.variance * s * s, n_t, name)
            power[name] = bool(compare(R, f, alpha=alpha)["significance"]["significant"])
        m, v = tst.mean.copy(), tst.variance.copy()
        m[8:16, 8:16] *= 1.05
        v[8:16, 8:16] *= 1.05 ** 2
        power["5% in an 8x8 block"] = bool(compare(R, _frame(m, v, n_t, "block"), alpha=alpha)
                                           ["significance"]["significant"])
        short = refrender.render(sc, spp=n_t, seed=seed0 + 2 * i + 1, max_bounces=2)
        power["bounces >= 3 dropped"] = bool(compare(R, _frame(short.mean, short.variance, n_t, "short"),
                                                     alpha=alpha)["significance"]["significant"])
        row["power"] = power
        rows.append(row)
        if log is not None and row["null"]["significant"]:
            what = ", ".join(c for c in COMPONENTS[:5] if row["null"][c])
            print(f"\nfalse alarm: pair {i} {SCENES[k]} {n_r}/{n_t} spp: {what}; {rep['verdict']}", file=log)
        if log is not None:
            alarms = sum(r["null"]["significant"] for r in rows)
            print(f"\rpair {i + 1}/{pairs}: {alarms} false alarm(s), {time.perf_counter() - t0:.0f} s",
                  end="", file=log, flush=True)
    if log is not None:
        print(file=log)
    return rows, time.perf_counter() - t0


def summary(rows, alpha, film, seconds):
    n = len(rows)
    fa = {}
    for c in COMPONENTS:
        k = sum(r["null"][c] for r in rows)
        lo, hi = interval(k, n)
        fa[c] = {"alarms": k, "pairs": n, "rate": k / n, "ci95": [lo, hi]}
    by_spp = {}
    for nt in TEST_SPP:
        sub = [r for r in rows if r["spp_test"] == nt]
        if not sub:
            continue
        entry = {"pairs": len(sub), "false_alarms": sum(r["null"]["significant"] for r in sub)}
        for f in FAULTS:
            entry[f] = sum(r["power"][f] for r in sub) / len(sub)
        by_spp[nt] = entry
    power_all = {f: sum(r["power"][f] for r in rows) / n for f in FAULTS}
    return {"pairs": n, "film": list(film), "alpha": alpha, "seconds": seconds, "scenes": list(SCENES),
            "false_alarms": fa, "power_by_test_spp": by_spp, "power": power_all}


def markdown(s) -> str:
    lines = [f"{s['pairs']} independent null pairs, {s['film'][0]}×{s['film'][1]} pixels, "
             f"default level α = {s['alpha']:g} (`python tools/calibrate_diff.py --pairs {s['pairs']}`, "
             f"{s['seconds'] / 60:.0f} min on 2 cores):", "",
             "| verdict | false alarms | rate | 95 % interval |", "| --- | ---: | ---: | --- |"]
    for c, v in s["false_alarms"].items():
        lines.append(f"| {c} | {v['alarms']} / {v['pairs']} | {v['rate']:.2%} | "
                     f"{v['ci95'][0]:.2%} – {v['ci95'][1]:.2%} |")
    lines += ["", "| test spp | pairs | false alarms | " + " | ".join(FAULTS) + " |",
              "| ---: | ---: | ---: | " + " | ".join("---:" for _ in FAULTS) + " |"]
    for nt, e in s["power_by_test_spp"].items():
        lines.append(f"| {nt} | {e['pairs']} | {e['false_alarms']} | "
                     + " | ".join(f"{e[f]:.0%}" for f in FAULTS) + " |")
    lines.append("| all | " + f"{s['pairs']} | {s['false_alarms']['significant']['alarms']} | "
                 + " | ".join(f"{s['power'][f]:.0%}" for f in FAULTS) + " |")
    return "\n".join(lines)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="calibrate_diff.py", description=__doc__.split("\n\n")[0])
    p.add_argument("--pairs", type=int, default=200, help="independent null pairs (default 200)")
    p.add_argument("--film", default="24x18", metavar="WxH", help="film of every render (default 24x18)")
    from refrender.compare.significance import DEFAULT_ALPHA
    p.add_argument("--alpha", type=float, default=DEFAULT_ALPHA, help=f"verdict level (default {DEFAULT_ALPHA})")
    p.add_argument("--seed", type=int, default=1000, help="first seed (pair i uses seed+2i and seed+2i+1)")
    p.add_argument("--json", metavar="FILE", help="write the summary and every pair as JSON")
    p.add_argument("--markdown", metavar="FILE", help="write the tables as Markdown")
    a = p.parse_args(argv)
    try:
        w, h = (int(v) for v in a.film.lower().split("x"))
    except ValueError:
        p.error(f"--film: expected WxH, got {a.film!r}")
    if w < 16 or h < 16:
        p.error("--film: at least 16x16 (the 8x8 block fault sits at x 8-16, y 8-16)")
    if a.pairs < 1:
        p.error("--pairs: must be >= 1")
    rows, seconds = run(a.pairs, (w, h), a.alpha, a.seed)
    s = summary(rows, a.alpha, (w, h), seconds)
    text = markdown(s)
    print(text)
    if a.json:
        Path(a.json).write_text(json.dumps(dict(s, rows=rows), indent=1))
    if a.markdown:
        Path(a.markdown).write_text(text + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
