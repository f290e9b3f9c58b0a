"""``refrender merge A.state B.state … -o OUT.exr``: renders of disjoint sample ranges."""
from __future__ import annotations

import math
import sys
from pathlib import Path

from ..errors import RenderError


def add_parser(sub) -> None:
    p = sub.add_parser("merge", help="merge renders of disjoint sample ranges of one scene",
                       description="Merge state files of renders of the same scene and settings "
                       "(made anywhere, on any thread count) into OUT.exr and OUT.state, equal "
                       "to one render of the union of their samples.  Refuses overlapping sample "
                       "ranges and mismatched scenes or settings.  An EXR input stands for the "
                       ".state file beside it.")
    p.add_argument("inputs", nargs="+", metavar="STATE", help="state files (or their EXRs)")
    p.add_argument("-o", "--output", required=True, help="output EXR (OUT.state is written beside it)")
    p.add_argument("--preview", help="also write an sRGB PNG preview")
    p.add_argument("--exposure", type=float, default=0.0, help="preview exposure in stops")
    p.add_argument("--quiet", action="store_true", help="no summary line")
    p.set_defaults(run=run)


def run(args) -> int:
    from ..io import state_path_for
    from ..overnight import check_disk
    from ..result import Result, merge
    from .render import _check_output
    out = Path(args.output)
    _check_output(out, ".exr", "--output")
    if state_path_for(out).is_dir():
        raise RenderError(f"--output: {str(state_path_for(out))!r} (the state file) is a folder")
    if args.preview is not None:        # an empty name too: it would fail only after the render
        _check_output(Path(args.preview), ".png", "--preview")
    if not math.isfinite(args.exposure):
        raise RenderError(f"--exposure: must be finite, got {args.exposure}")
    paths = [state_path_for(p) if Path(p).suffix.lower() == ".exr" else Path(p) for p in args.inputs]
    seen = {}
    for p in paths:
        key = p.resolve()
        if key in seen:
            raise RenderError(f"merge: {p} is given twice (its samples would be counted twice)")
        seen[key] = p
    from ..io.lock import OutputLock
    with OutputLock(out):
        results = [Result.from_state(p) for p in paths]
        merged = merge(results, names=[str(p) for p in paths])
        x0, y0, x1, y1 = merged.window
        check_disk(out.parent, y1 - y0, x1 - x0, preview=bool(args.preview),
                   existing=(out, state_path_for(out)))
        merged.save(out, preview=args.preview, exposure=args.exposure)
    if not args.quiet:
        noise = merged.noise_summary()
        err = noise["rel_error_mean"]
        err = "n/a (< 2 spp)" if err is None else f"{100 * err:.3g}%"
        ranges = ", ".join(f"[{a}, {b})" for a, b in merged.sample_ranges)
        print(f"{out}: merged {len(results)} render{'s' if len(results) != 1 else ''}, {merged.spp} spp (samples {ranges}), "
              f"mean relative standard error {err}", file=sys.stderr)
    return 0
