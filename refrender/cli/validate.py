"""``refrender validate``: render the analytic cases and compare them with their closed forms."""
from __future__ import annotations

import json
import sys
import time
from pathlib import Path

from ..errors import RenderError


def add_parser(sub) -> None:
    p = sub.add_parser("validate", help="render analytic cases with known answers and check them "
                       "(exit status 1 if any fails)")
    lvl = p.add_mutually_exclusive_group()
    lvl.add_argument("--quick", dest="level", action="store_const", const="quick",
                     help="one strategy per case, 0.5%% standard error (default; under a minute)")
    lvl.add_argument("--full", dest="level", action="store_const", const="full",
                     help="all strategy x light-sampling combinations, 0.3%% standard error")
    p.add_argument("--json", metavar="FILE", help="also write the results as JSON")
    p.add_argument("--threads", type=int, default=None, help="render threads (default: all)")
    p.add_argument("--quiet", action="store_true", help="print only the summary line")
    p.set_defaults(run=run, level="quick")


def _fmt(v):
    return f"{v:.6g}"


def format_table(rows) -> str:
    """Plain-text table: case, strategy, expected, measured, std err, z, result, ref."""
    refs = []
    for r in rows:
        if r["source"] not in refs:
            refs.append(r["source"])
    head = ["case", "strategy", "expected", "measured", "std err", "z", "result", "ref"]
    body = [[r["case"], f"{r['strategy']}/{r['light_sampling']}", _fmt(r["expected"]),
             _fmt(r["measured"]), f"{r['std_error']:.2g}", f"{r['z']:+.2f}",
             "pass" if r["passed"] else "FAIL", f"[{refs.index(r['source']) + 1}]"] for r in rows]
    widths = [max(len(h), *(len(b[i]) for b in body)) for i, h in enumerate(head)]
    right = {2, 3, 4, 5}
    line = lambda cells: "  ".join(c.rjust(w) if i in right else c.ljust(w)
                                   for i, (c, w) in enumerate(zip(cells, widths))).rstrip()
    out = [line(head), line(["-" * w for w in widths])] + [line(b) for b in body]
    out.append("")
    out += [f"[{i + 1}] {s}" for i, s in enumerate(refs)]
    return "\n".join(out)


def run(args) -> int:
    from .. import validation as V
    from ..io import atomic_write
    if args.json is not None and not Path(args.json).resolve().parent.is_dir():
        raise RenderError(f"--json: folder does not exist: {Path(args.json).resolve().parent}")
    rows_in = V.suite(args.level)
    bar = None
    if not args.quiet and sys.stderr.isatty():
        from tqdm import tqdm
        bar = tqdm(total=len(rows_in), unit="case", file=sys.stderr, leave=False)
    t0 = time.perf_counter()
    results = []
    for case, strategy, mode, target in rows_in:
        if bar is not None:
            bar.set_description(case.name[:32])
        results.append(V.run_case(case, strategy, mode, target, threads=args.threads))
        if bar is not None:
            bar.update(1)
    if bar is not None:
        bar.close()
    seconds = time.perf_counter() - t0
    failed = [r for r in results if not r["passed"]]
    if not args.quiet:
        print(format_table(results))
        print()
    print(f"refrender validate --{args.level}: {len(results) - len(failed)}/{len(results)} passed "
          f"(|z| <= {V.Z_MAX:g}) in {seconds:.1f} s")
    if args.json is not None:
        doc = {"level": args.level, "seconds": seconds, "passed": not failed, "z_max": V.Z_MAX,
               "cases": results}
        with atomic_write(args.json, "w") as f:
            json.dump(doc, f, indent=1)
            f.write("\n")
    return 1 if failed else 0
