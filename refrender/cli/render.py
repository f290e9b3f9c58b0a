"""``refrender render SCENE -o OUT.exr``."""
from __future__ import annotations

import math
import os
import sys
from pathlib import Path

from ..errors import RefrenderError, RenderError
from ..overnight import DEFAULT_MIN_SPP, parse_duration


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
                       "layer + metadata) and OUT.state (float64 accumulators for merging and "
                       "resuming).  Budgets --spp, --time and --target-error combine: the first "
                       "reached stops the render.  SIGINT/SIGTERM save a checkpoint and exit "
                       "130/143; --resume continues it bit-identically.")
    p.add_argument("scene", help="scene file (JSON) or an OpenUSD stage (.usd, .usda, .usdc, .usdz)")
    p.add_argument("-o", "--output", required=True, help="output EXR file")
    p.add_argument("--spp", type=int, help="samples per pixel in total, resumed ones included "
                   "(default: the scene's render.spp, unless --time or --target-error is given)")
    p.add_argument("--time", metavar="DURATION", help="render-time budget over all sessions, "
                   "e.g. 8h, 45m, 90s, 1h30m: stop at the last whole pass that fits")
    p.add_argument("--target-error", type=float, metavar="E",
                   help="stop when the 95th percentile over pixels of the relative standard "
                   "error of luminance falls below E (e.g. 0.01), tested at a fixed schedule "
                   "of sample counts")
    p.add_argument("--min-spp", type=int, default=DEFAULT_MIN_SPP,
                   help=f"first sample count at which --target-error is tested "
                   f"(default {DEFAULT_MIN_SPP})")
    p.add_argument("--checkpoint-every", metavar="DURATION", default="5m",
                   help="rewrite OUT.state and OUT.exr this often (default 5m; 'off' to disable)")
    p.add_argument("--resume", action="store_true",
                   help="continue the render saved in OUT.state (settings and budgets not given "
                   "are taken from it); starts from sample 0 if there is no OUT.state")
    p.add_argument("--force", action="store_true",
                   help="start over even if OUT.state holds an unfinished render")
    p.add_argument("--seed", type=int, help="seed of the counter-based random numbers")
    p.add_argument("--first-sample", type=int,
                   help="index of the first sample drawn per pixel (split renders; default 0)")
    p.add_argument("--max-bounces", help="scattering events per path: N or 'none' (unlimited)")
    p.add_argument("--rr-start", type=int, help="bounce from which Russian roulette may end a path")
    p.add_argument("--strategy", choices=["mis", "nee", "bsdf"])
    p.add_argument("--light-sampling", choices=["solid_angle", "area"])
    p.add_argument("--color-space", choices=["linear_rec709", "acescg", "linear_p3_d65", "cie_xyz"],
                   help="working colour space of the scene's RGB values and of the output "
                        "(default: render.color_space, else linear_rec709)")
    p.add_argument("--layers", metavar="LIST",
                   help="comma-separated layers beside the beauty: albedo, normal, depth, position, "
                        "object_id, material_id, transport, bounces[:N], light_groups")
    p.add_argument("--threads", type=int, help="worker threads (default: all cores)")
    p.add_argument("--film", metavar="WxH", help="film size, overriding the scene's (e.g. 160x120)")
    p.add_argument("--crop", metavar="X0,Y0,X1,Y1", help="render only this half-open pixel window of the film")
    p.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", dest="assignments",
                   help="override a scene value: dotted path, JSON value, e.g. camera.fov_y=40 or "
                   "'materials.wall.albedo=[0.5,0.5,0.5]' (repeatable; part of the scene hash)")
    farm = p.add_argument_group("farm renders (Dask distributed)")
    farm.add_argument("--cluster", metavar="ADDRESS",
                      help="render on an existing Dask scheduler, e.g. tcp://head:8786")
    farm.add_argument("--local-workers", type=int, metavar="N",
                      help="render on a local Dask cluster of N worker processes (127.0.0.1 only)")
    farm.add_argument("--task-spp", type=int, metavar="N",
                      help="samples per pixel of one farm task (default: about 8 tasks per worker)")
    gl = p.add_argument_group("imported scenes (SCENE is a glTF 2.0 .gltf/.glb file or an OpenUSD "
                              ".usd/.usda/.usdc/.usdz stage)")
    gl.add_argument("--camera", metavar="NAME|INDEX|PRIM_PATH",
                    help="glTF: a node or camera name, or an index in node order (default: the first "
                    "camera); USD: the camera prim, e.g. /World/ShotCam (default: the UsdRender "
                    "settings' camera, else the first camera of the stage)")
    gl.add_argument("--gltf-scene", type=int, metavar="INDEX",
                    help="the glTF scene to render (default: the file's scene)")
    gl.add_argument("--film-height", type=int, metavar="PIXELS",
                    help="film height; the width follows the camera's aspect ratio (default: glTF 480; "
                    "USD the render settings' resolution, else 360)")
    add_gltf_light_options(gl)
    p.add_argument("--preview", help="also write an sRGB PNG preview")
    p.add_argument("--exposure", type=float, default=0.0, help="preview exposure in stops")
    p.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    p.set_defaults(run=run)


def add_gltf_light_options(group) -> None:
    """--light-units and --light-range (glTF files: KHR_lights_punctual)."""
    group.add_argument("--light-units", choices=["photometric", "radiometric"], default="photometric",
                       help="photometric (default): candela and lux, converted at 683 lm/W; "
                       "radiometric: the numbers taken as W/sr and W/m^2")
    group.add_argument("--light-range", choices=["honour", "ignore"], default="honour",
                       help="honour (default): no light beyond a light's range, as the extension "
                       "requires; ignore: inverse-square falloff alone (physics)")


def is_gltf(path) -> bool:
    return Path(path).suffix.lower() in (".gltf", ".glb")


def load_any_scene(args):
    """The scene of args.scene: a JSON scene, a glTF file with the glTF options, or a USD
    stage with --camera and --film-height."""
    from .. import load_scene
    from ..scene.usd import is_usd, load_usd_scene
    if args.film_height is not None and not 1 <= args.film_height <= 2 ** 14:
        raise RenderError(f"--film-height: must be in 1..16384, got {args.film_height}")
    if is_usd(args.scene):
        if args.gltf_scene is not None:
            raise RenderError("--gltf-scene: applies only to a .gltf or .glb scene")
        return load_usd_scene(args.scene, camera=args.camera, film_height=args.film_height)
    if not is_gltf(args.scene):
        for opt in ("camera", "gltf_scene", "film_height"):
            if getattr(args, opt, None) is not None:
                raise RenderError(f"--{opt.replace('_', '-')}: applies only to a glTF or USD scene")
        return load_scene(args.scene)
    from ..scene.gltf import load_gltf_scene
    return load_gltf_scene(args.scene, camera=args.camera, gltf_scene=args.gltf_scene,
                           film_height=args.film_height, light_units=args.light_units,
                           light_range=args.light_range)


def _check_output(path: Path, suffix: str, what: str) -> None:
    if path.suffix.lower() != suffix:
        raise RenderError(f"{what}: expected a {suffix} file name, got {str(path)!r}")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise RenderError(f"{what}: folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK):
        raise RenderError(f"{what}: folder {str(folder)!r} is not writable")
    if path.is_dir():
        raise RenderError(f"{what}: {str(path)!r} is a folder")


def _previous(state: Path, args):
    """The checkpoint to resume (None to start at sample 0); refuses to overwrite
    an unfinished render without --resume or --force."""
    from ..result import Result
    if not state.exists():
        if args.resume and not args.quiet:
            print(f"refrender: no checkpoint {state} yet; starting from sample 0", file=sys.stderr)
        return None
    if args.resume:
        return Result.from_state(state)
    if args.force:
        return None
    try:
        prev = Result.from_state(state)
    except RefrenderError:
        return None                      # unreadable: nothing worth keeping
    if not prev.run.get("complete", True):
        raise RenderError(f"--output: {state} holds an unfinished render ({prev.spp} spp, "
                          f"stopped by {prev.run.get('stop_reason')}); add --resume to continue "
                          "it or --force to start over")
    return None


def _settings(args, prev):
    """Keyword overrides of render(): the options given, else (resuming) the checkpoint's."""
    overrides = dict(seed=args.seed, rr_start=args.rr_start, strategy=args.strategy,
                     light_sampling=args.light_sampling,
                     color_space=getattr(args, "color_space", None),
                     layers=getattr(args, "layers", None))
    if args.max_bounces is not None:
        overrides["max_bounces"] = _max_bounces(args.max_bounces)
    first = args.first_sample
    if prev is not None:
        for key in ("seed", "rr_start", "strategy", "light_sampling"):
            if overrides[key] is None:
                overrides[key] = prev.meta[key]
        overrides.setdefault("max_bounces", prev.meta["max_bounces"])
        if overrides["color_space"] is None:
            overrides["color_space"] = prev.meta.get("color_space", "linear_rec709")
        if overrides["layers"] is None:
            overrides["layers"] = list(prev.meta.get("layers", []))
        if first is None:
            first = prev.sample_ranges[0][0]
    budget = dict(spp=args.spp, time_limit=None, target_error=args.target_error,
                  min_spp=args.min_spp)
    if args.time is not None:
        budget["time_limit"] = parse_duration(args.time, "--time")
    if args.target_error is not None and not (math.isfinite(args.target_error)
                                              and args.target_error > 0):
        raise RenderError(f"--target-error: must be a positive relative error, "
                          f"got {args.target_error}")
    given = args.spp is not None or args.time is not None or args.target_error is not None
    if prev is not None and not given and prev.run.get("budget"):
        b = prev.run["budget"]
        budget.update(spp=b.get("spp"), time_limit=b.get("time_s"), target_error=b.get("target_error"))
        if b.get("min_spp"):
            budget["min_spp"] = b["min_spp"]
    return overrides, budget, (0 if first is None else first)


def run(args) -> int:
    """Own the output (OUT.lock, see refrender/io/lock.py) for the whole render."""
    from ..io.lock import OutputLock
    out = Path(args.output)
    _check_output(out, ".exr", "--output")
    with OutputLock(out):
        return _run(args)


def _run(args) -> int:
    from .. import render
    from ..io import state_path_for
    from ..overnight import EXIT_STATUS, StopOnSignal, check_disk, check_memory, format_duration
    out = Path(args.output)
    _check_output(out, ".exr", "--output")
    state = state_path_for(out)
    if state.is_dir():
        raise RenderError(f"--output: {str(state)!r} (the state file) is a folder")
    if args.preview is not None:        # an empty name too: it would fail only after the render
        _check_output(Path(args.preview), ".png", "--preview")
    if not math.isfinite(args.exposure):
        raise RenderError(f"--exposure: must be finite, got {args.exposure}")
    every = None
    if str(args.checkpoint_every).strip().lower() not in ("off", "none", "never", "0"):
        every = parse_duration(args.checkpoint_every, "--checkpoint-every")
    if args.assignments or args.film is not None or args.crop is not None:
        from ..scene.usd import is_usd, load_usd_scene
        if is_gltf(args.scene):
            raise RenderError("--set/--film/--crop: apply to a JSON scene or a USD stage (for glTF use "
                              "--film-height)")
        if is_usd(args.scene):
            scene = load_usd_scene(args.scene, camera=args.camera, film_height=args.film_height,
                                   assignments=args.assignments, film=args.film, crop=args.crop)
        else:
            from ..scene.overrides import load_with_overrides
            scene = load_with_overrides(args.scene, args.assignments, film=args.film, crop=args.crop)
    else:
        scene = load_any_scene(args)
    prev = _previous(state, args)
    if prev is not None and args.spp is not None and args.spp < prev.spp and not args.quiet:
        print(f"refrender: --spp {args.spp} is below the {prev.spp} spp that {state} already holds: "
              f"no samples are added and the render keeps its {prev.spp} spp", file=sys.stderr)
    overrides, budget, first = _settings(args, prev)
    from ..render import SPP_UNLIMITED, resolve_settings
    uncapped = budget["time_limit"] is not None or budget["target_error"] is not None
    st = resolve_settings(scene, **dict(overrides, spp=budget["spp"] if budget["spp"] is not None
                                        else SPP_UNLIMITED if uncapped else None))
    x0, y0, x1, y1 = scene.film.window
    if prev is None:
        check_memory(y1 - y0, x1 - x0)
    check_disk(out.parent, y1 - y0, x1 - x0, preview=bool(args.preview),
               existing=[out, state] + ([Path(args.preview)] if args.preview else []))
    capped = budget["spp"] is not None or not uncapped
    progress = None  # noqa: F811 (replaced by a closure when a bar is shown)
    show_bar = not args.quiet and sys.stderr.isatty()
    bars = []                           # the bar starts with the first pass (after compiling)
    if show_bar:
        from tqdm import tqdm

        def progress(done, total, rays, seconds):
            if not bars:
                bars.append(tqdm(total=st["spp"] if capped else None, initial=prev.spp if prev else 0,
                                 unit="spp", desc="render", file=sys.stderr, dynamic_ncols=True))
            b = bars[0]
            b.update(done - b.n)
            if seconds > 0:
                b.set_postfix_str(f"{rays / seconds / 1e6:.1f} Mrays/s", refresh=False)

    def on_compile(estimate):
        if not args.quiet:
            print(f"refrender: compiling kernels (first run only, about {estimate:.0f} s)",
                  file=sys.stderr, flush=True)

    def checkpoint(partial):
        partial.save(out, preview=args.preview, exposure=args.exposure)

    if args.cluster or args.local_workers is not None:
        return _run_farm(args, scene, prev, overrides, budget, first, out, state, every, show_bar)
    try:
        with StopOnSignal() as stop:
            result = render(scene, first_sample=first, threads=args.threads, progress=progress,
                            resume=prev, checkpoint=checkpoint, checkpoint_every=every,
                            should_stop=stop, on_compile=on_compile, **budget, **overrides)
            if result.spp:
                result.save(out, preview=args.preview, exposure=args.exposure)
    finally:
        for b in bars:
            b.close()
    reason = result.run["stop_reason"]
    if reason in EXIT_STATUS and result.spp == 0:
        print(f"refrender: {reason}: stopped before the first pass; nothing was written",
              file=sys.stderr)
        return EXIT_STATUS[reason]
    if reason in EXIT_STATUS:
        print(f"refrender: {reason}: stopped after {result.spp} spp "
              f"({format_duration(result.stats['seconds'])}); checkpoint saved to {out} and "
              f"{state}; continue with the same command and --resume", file=sys.stderr)
        return EXIT_STATUS[reason]
    if not args.quiet:
        s = result.stats
        noise = result.noise_summary()
        err = noise["rel_error_mean"]
        err = "n/a (< 2 spp)" if err is None else f"{100 * err:.3g}%"
        p95 = noise["rel_error_p95"]
        p95 = "" if p95 is None else f" (95th percentile {100 * p95:.3g}%)"
        comp = s.get("compile_seconds", 0.0)
        comp = f" (+ {comp:.1f} s compiling kernels)" if comp >= 2.0 else ""
        print(f"{out}: {result.spp} spp, {s['seconds']:.2f} s{comp}, {s['mrays_per_s']:.2f} Mrays/s, "
              f"mean relative standard error {err}{p95}, stopped by {reason}", file=sys.stderr)
    return 0


def _run_farm(args, scene, prev, overrides, budget, first, out, state, every, bar) -> int:
    """The same render cut into sample-range tasks on Dask workers (see refrender.farm)."""
    import time

    from .. import farm
    from ..overnight import EXIT_STATUS, StopOnSignal
    if args.cluster and args.local_workers is not None:
        raise RenderError("--cluster and --local-workers: give one of them")
    if budget["time_limit"] is not None or budget["target_error"] is not None:
        raise RenderError("--time/--target-error: not available for farm renders; give --spp")
    if args.task_spp is not None and args.task_spp < 1:
        raise RenderError(f"--task-spp: must be >= 1, got {args.task_spp}")
    try:
        import distributed
    except ImportError:
        raise RenderError("--cluster/--local-workers: Dask distributed is not installed "
                          "(pip install -e '.[farm]')") from None
    spp = budget["spp"]
    if prev is not None and spp is None:
        spp = prev.run.get("budget", {}).get("spp")
    if args.local_workers is not None:
        cluster = farm.local_cluster(args.local_workers)
        client = distributed.Client(cluster)
        threads = max(1, (os.cpu_count() or 1) // args.local_workers)
    else:
        cluster = None
        client = farm.connect(args.cluster)
        threads = args.threads
    last = [time.monotonic()]

    def on_task(partial):
        if every is not None and time.monotonic() - last[0] >= every:
            partial.save(out)
            last[0] = time.monotonic()

    tasks_bar = None
    progress = None
    if bar:
        from tqdm import tqdm
        tasks_bar = tqdm(unit="task", desc="farm", file=sys.stderr, dynamic_ncols=True)

        def progress(done, total, rays, seconds):
            tasks_bar.total = total
            tasks_bar.update(done - tasks_bar.n)
            if seconds > 0:
                tasks_bar.set_postfix_str(f"{rays / seconds / 1e6:.1f} Mrays/s", refresh=False)
    try:
        with StopOnSignal() as stop:
            result = farm.render_farm(scene, client, spp=spp, first_sample=first,
                                      task_spp=args.task_spp, threads_per_task=threads,
                                      done=prev, progress=progress, on_task=on_task,
                                      should_stop=stop, **overrides)
            result.save(out, preview=args.preview, exposure=args.exposure)
    finally:
        if tasks_bar is not None:
            tasks_bar.close()
        client.close()
        if cluster is not None:
            cluster.close()
    reason = result.run["stop_reason"]
    if reason in EXIT_STATUS:
        print(f"refrender: {reason}: stopped after {result.spp} spp; checkpoint saved to {out} "
              f"and {state}; continue with the same command and --resume", file=sys.stderr)
        return EXIT_STATUS[reason]
    if not args.quiet:
        s = result.stats
        print(f"{out}: {result.spp} spp on {result.run['farm']['workers']} worker(s) in "
              f"{s['tasks']} tasks, {s['seconds']:.2f} s, {s['mrays_per_s']:.2f} Mrays/s", file=sys.stderr)
    return 0
