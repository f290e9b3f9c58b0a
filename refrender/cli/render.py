"""``refrender render SCENE -o OUT.exr``."""
from __future__ import annotations

import os
import sys
from pathlib import Path

from ..errors import RenderError


def _max_bounces(text: str):
    if text.lower() in ("none", "null", "unlimited"):
        return None
    try:
        v = int(text)
    except ValueError:
        raise RenderError(f"--max-bounces: expected a non-negative integer or 'none', got {text!r}") from None
    if v < 0:
        raise RenderError(f"--max-bounces: must be >= 0, got {v}")
    return v


def add_parser(sub) -> None:
    p = sub.add_parser("render", help="render a scene to an EXR with a variance layer",
                       description="Render SCENE (JSON) to OUT.exr (mean radiance + variance "
                       "layer + metadata) and OUT.state (float64 accumulators for merging).")
    p.add_argument("scene", help="scene file (JSON)")
    p.add_argument("-o", "--output", required=True, help="output EXR file")
    p.add_argument("--spp", type=int, help="samples per pixel (default: scene's render.spp)")
    p.add_argument("--seed", type=int, help="seed of the counter-based random numbers")
    p.add_argument("--first-sample", type=int, default=0,
                   help="index of the first sample drawn per pixel (split renders)")
    p.add_argument("--max-bounces", help="scattering events per path: N or 'none' (unlimited)")
    p.add_argument("--rr-start", type=int, help="bounce from which Russian roulette may end a path")
    p.add_argument("--strategy", choices=["mis", "nee", "bsdf"])
    p.add_argument("--light-sampling", choices=["solid_angle", "area"])
    p.add_argument("--threads", type=int, help="worker threads (default: all cores)")
    p.add_argument("--preview", help="also write an sRGB PNG preview")
    p.add_argument("--exposure", type=float, default=0.0, help="preview exposure in stops")
    p.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    p.set_defaults(run=run)


def _check_output(path: Path, suffix: str, what: str) -> None:
    if path.suffix.lower() != suffix:
        raise RenderError(f"{what}: expected a {suffix} file name, got {str(path)!r}")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise RenderError(f"{what}: folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK):
        raise RenderError(f"{what}: folder {str(folder)!r} is not writable")


def run(args) -> int:
    import math

    from .. import load_scene, render
    out = Path(args.output)
    _check_output(out, ".exr", "--output")
    if args.preview:
        _check_output(Path(args.preview), ".png", "--preview")
    if not math.isfinite(args.exposure):
        raise RenderError(f"--exposure: must be finite, got {args.exposure}")
    scene = load_scene(args.scene)
    overrides = dict(spp=args.spp, seed=args.seed, rr_start=args.rr_start, strategy=args.strategy,
                     light_sampling=args.light_sampling)
    if args.max_bounces is not None:
        overrides["max_bounces"] = _max_bounces(args.max_bounces)
    from ..render import resolve_settings
    st = resolve_settings(scene, **overrides)       # validate before any work
    bar = None
    progress = None  # noqa: F811 (replaced by a closure when a bar is shown)
    if not args.quiet and sys.stderr.isatty():
        from tqdm import tqdm
        bar = tqdm(total=st["spp"], unit="spp", desc="render", file=sys.stderr, dynamic_ncols=True)

        def progress(done, total, rays, seconds):
            bar.update(done - bar.n)
            if seconds > 0:
                bar.set_postfix_str(f"{rays / seconds / 1e6:.1f} Mrays/s", refresh=False)
    try:
        result = render(scene, first_sample=args.first_sample, threads=args.threads,
                        progress=progress, **overrides)
    finally:
        if bar is not None:
            bar.close()
    result.save(out, preview=args.preview, exposure=args.exposure)
    if not args.quiet:
        s = result.stats
        noise = result.noise_summary()
        err = noise["rel_error_mean"]
        err = "n/a (< 2 spp)" if err is None else f"{100 * err:.3g}%"
        print(f"{out}: {result.spp} spp, {s['seconds']:.2f} s, {s['mrays_per_s']:.2f} Mrays/s, "
              f"mean relative standard error {err}", file=sys.stderr)
    return 0
