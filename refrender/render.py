"""The render entry point: scene -> arrays -> kernel passes -> Result."""
from __future__ import annotations

import dataclasses
import os
import time
from contextlib import contextmanager

import numba
import numpy as np

from .errors import RenderError
from .integrator.path import STRATEGY_BSDF, STRATEGY_MIS, STRATEGY_NEE, render_pass
from .sampling.filters import build_filter, is_pixel_square
from .overnight import (DEFAULT_MIN_SPP, check_memory, check_resumable, kernel_sha256, next_check,
                        target_statistic)
from .prepared import prepare
from .result import Result, warn_nonfinite
from .sampling.lights import MODE_AREA, MODE_SOLID_ANGLE
from .scene.model import Scene

_UNSET = object()
_STRATEGIES = {"bsdf": STRATEGY_BSDF, "nee": STRATEGY_NEE, "mis": STRATEGY_MIS}
_MODES = {"area": MODE_AREA, "solid_angle": MODE_SOLID_ANGLE}


@contextmanager
def _threads(n):
    if n is None:
        yield
        return
    old = numba.get_num_threads()
    if not 1 <= n <= numba.config.NUMBA_NUM_THREADS:
        raise RenderError(f"threads: must be in 1..{numba.config.NUMBA_NUM_THREADS}, got {n}")
    numba.set_num_threads(n)
    try:
        yield
    finally:
        numba.set_num_threads(old)


#: cold compile of the kernels, measured on the shared 2-core machine (demo room,
#: empty NUMBA_CACHE_DIR): what "compiling kernels (first run only, about N s)" says
COLD_COMPILE_SECONDS = 45


def kernels_cold() -> bool:
    """True when the kernel cache holds no compiled path tracer yet (the next
    render compiles for tens of seconds)."""
    try:
        return not os.path.exists(render_pass._cache._cache_file._index_path)
    except AttributeError:             # numba internals moved: assume warm
        return False


def _row_order(h: int) -> np.ndarray:
    """Rows interleaved so that contiguous chunks of the parallel loop spread
    over the whole image (balanced work, any thread count)."""
    step = 16
    return np.concatenate([np.arange(k, h, step) for k in range(min(step, h))]).astype(np.int64)


class Settings(dict):
    """Resolved render settings (scene defaults with overrides applied)."""


def resolve_settings(scene: Scene, *, spp=None, seed=None, max_bounces=_UNSET, rr_start=None,
                     strategy=None, light_sampling=None, color_space=None, layers=None) -> Settings:
    from .color import check_space
    from .layers import parse_requests
    rs = scene.render
    st = Settings(color_space=check_space(getattr(rs, "color_space", "linear_rec709")
                                          if color_space is None else color_space),
                  layers=parse_requests(getattr(rs, "layers", ()) if layers is None else layers),
                  spp=rs.spp if spp is None else spp,
                  seed=rs.seed if seed is None else seed,
                  max_bounces=rs.max_bounces if max_bounces is _UNSET else max_bounces,
                  rr_start=rs.rr_start if rr_start is None else rr_start,
                  strategy=rs.strategy if strategy is None else strategy,
                  light_sampling=rs.light_sampling if light_sampling is None else light_sampling)
    _check_int("spp", st["spp"], 1, 2 ** 40)
    _check_int("seed", st["seed"], 0, 2 ** 63 - 1)
    if st["max_bounces"] is not None:
        _check_int("max_bounces", st["max_bounces"], 0, 2 ** 31 - 1)
    _check_int("rr_start", st["rr_start"], 0, 2 ** 31 - 1)
    if st["strategy"] not in _STRATEGIES:
        raise RenderError(f"strategy: must be one of {', '.join(_STRATEGIES)}, got {st['strategy']!r}")
    if st["light_sampling"] not in _MODES:
        raise RenderError(f"light_sampling: must be one of {', '.join(_MODES)}, "
                          f"got {st['light_sampling']!r}")
    return st


def _check_int(name, v, lo, hi):
    if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not lo <= v <= hi:
        raise RenderError(f"{name}: must be an integer in [{lo}, {hi}], got {v!r}")


#: sample cap of a render budgeted only by time or target error
SPP_UNLIMITED = 2 ** 40
#: wall time aimed at per pass (results do not depend on the pass size)
PASS_SECONDS = 0.25
#: the clock of the render loop (tests replace it to assert budgets by sample counts)
_clock = time.perf_counter


def _check_budget(time_limit, target_error, min_spp, checkpoint_every):
    if time_limit is not None and not (isinstance(time_limit, (int, float)) and time_limit > 0
                                       and np.isfinite(time_limit)):
        raise RenderError(f"time: must be a positive number of seconds, got {time_limit!r}")
    if target_error is not None and not (isinstance(target_error, (int, float))
                                         and 0 < target_error < np.inf):
        raise RenderError(f"target_error: must be a positive relative error, got {target_error!r}")
    _check_int("min_spp", min_spp, 2, 2 ** 40)
    if checkpoint_every is not None and not (isinstance(checkpoint_every, (int, float))
                                             and checkpoint_every > 0):
        raise RenderError(f"checkpoint_every: must be a positive number of seconds, "
                          f"got {checkpoint_every!r}")


def render(scene: Scene, *, spp=None, seed=None, first_sample: int = 0, max_bounces=_UNSET,
           rr_start=None, strategy=None, light_sampling=None, threads=None,
           progress=None, time_limit=None, target_error=None, min_spp=DEFAULT_MIN_SPP,
           resume=None, checkpoint=None, checkpoint_every=None, should_stop=None,
           color_space=None, layers=None, on_compile=None) -> Result:
    """Render a scene.

    Keyword arguments override the scene's ``render`` block.  Samples
    ``first_sample .. first_sample + spp - 1`` of every pixel are drawn; each
    depends only on (seed, pixel, sample index, dimension), so results do not
    depend on ``threads`` and disjoint ranges merge exactly.

    Budgets (combinable; the first reached stops the render and is recorded in
    ``result.run["stop_reason"]``): ``spp`` (total samples per pixel, resumed
    ones included; without ``spp``, a render given ``time_limit`` or
    ``target_error`` is not capped by the scene's ``render.spp``),
    ``time_limit`` (seconds of render time over all sessions: the render stops
    at the last whole pass that fits, estimated from the previous pass; at
    least one pass is always made) and ``target_error`` (stop at the first
    count of :func:`refrender.overnight.target_schedule` from ``min_spp`` at
    which :func:`refrender.overnight.target_statistic` is below it).  All
    pixels always get the same number of samples.

    Parameters
    ----------
    progress : callable, optional
        Called after every pass as ``progress(samples_done, spp_cap, rays,
        seconds)``; ``spp_cap`` is None when only time or error budgets apply.
    color_space : str, optional
        Working colour space (refrender.color.SPACES): what the scene's RGB
        numbers and the output mean; default ``render.color_space``.
    layers : list of str or str, optional
        Layers beside the beauty (refrender.layers); default ``render.layers``.
    resume : Result, optional
        A checkpoint (``Result.from_state``) of this render: its accumulators
        are continued, so the outcome is bit-identical to a render that was
        never interrupted.  Refused (RenderError) if the scene, seed, an
        estimator setting, the kernel code or ``first_sample`` differ.
    checkpoint : callable, optional
        ``checkpoint(result)`` is called between passes every
        ``checkpoint_every`` seconds with the partial result (stop reason
        ``"checkpoint"``); it must not keep the arrays, which the render
        goes on updating.
    should_stop : callable, optional
        Called between passes; a non-empty string return (e.g. ``"SIGINT"``)
        ends the render after the completed passes with that stop reason.
    on_compile : callable, optional
        ``on_compile(estimated_seconds)`` is called before the kernels are
        compiled when the kernel cache is cold.  Compiling (or loading the
        cache) happens before the render clock starts: it is recorded as
        ``stats["compile_seconds"]`` and excluded from ``stats["seconds"]``
        and ``stats["mrays_per_s"]``.

    Returns
    -------
    Result
    """
    if not isinstance(scene, Scene):
        raise RenderError("render: expected a Scene from refrender.load_scene")
    uncapped = spp is None and (time_limit is not None or target_error is not None)
    st = resolve_settings(scene, spp=SPP_UNLIMITED if uncapped else spp, seed=seed,
                          max_bounces=max_bounces, rr_start=rr_start, strategy=strategy,
                          light_sampling=light_sampling, color_space=color_space, layers=layers)
    if st["color_space"] != getattr(scene.render, "color_space", "linear_rec709"):
        scene = dataclasses.replace(scene, render=dataclasses.replace(
            scene.render, color_space=st["color_space"]))
    _check_int("first_sample", first_sample, 0, 2 ** 62)
    _check_budget(time_limit, target_error, min_spp, checkpoint_every)
    x0, y0, x1, y1 = scene.film.window
    h, w = y1 - y0, x1 - x0
    meta = dict(scene_sha256=scene.sha256, seed=int(st["seed"]), strategy=st["strategy"],
                light_sampling=st["light_sampling"], max_bounces=st["max_bounces"],
                rr_start=int(st["rr_start"]), width=scene.film.width, height=scene.film.height,
                window=[x0, y0, x1, y1])
    film = scene.film
    fname, fparams = getattr(film, "filter", "box"), dict(getattr(film, "filter_params", {"radius": 0.5}))
    if not is_pixel_square(fname, fparams):
        meta["filter"] = dict(fparams, type=fname)
    if st["color_space"] != "linear_rec709":
        meta["color_space"] = st["color_space"]
    fa = build_filter(fname, fparams)
    prepared = prepare(scene)            # built once per Scene object (refrender.prepared)
    S = prepared.arrays
    from .layers import id_images, plan
    lp = plan(scene, S, st["strategy"], st["layers"])
    if st["layers"]:
        meta["layers"] = list(st["layers"])
        meta["layer_slots"] = list(lp.slots)
    n_slots = len(lp.slots)
    if scene.source_path is not None:
        meta["scene_file"] = str(scene.source_path)
    kernels = kernel_sha256()
    if resume is not None:
        done = check_resumable(resume, meta, first_sample)
        acc_sum = np.array(resume.sum, dtype=np.float64, order="C")
        acc_sq = np.array(resume.sum_sq, dtype=np.float64, order="C")
        acc_n = np.array(resume.count, dtype=np.int64, order="C")
        if n_slots:
            acc_lsum = np.array(resume.layer_sum, dtype=np.float64, order="C")
            acc_lsq = np.array(resume.layer_sq, dtype=np.float64, order="C")
        prev_stats, prev_run = dict(resume.stats), dict(resume.run)
    else:
        check_memory(h, w)
        done = 0
        acc_sum = np.zeros((h, w, 3))
        acc_sq = np.zeros((h, w, 3))
        acc_n = np.zeros((h, w), dtype=np.int64)
        prev_stats, prev_run = {}, {}
    if not (resume is not None and n_slots):
        acc_lsum = np.zeros((h, w, n_slots, 3))
        acc_lsq = np.zeros((h, w, n_slots, 3))
    ids = None
    if any(k in st["layers"] for k in ("object_id", "material_id")):
        ids = id_images(scene, S, (x0, y0, x1, y1))
    L = prepared.lights(st["strategy"])
    cam = prepared.camera
    row_rays = np.zeros(h, dtype=np.int64)
    row_bad = np.zeros(h, dtype=np.int64)
    row_time = np.zeros((h, 2), dtype=np.int64)   # cycles of timed paths, of their traversal
    order = _row_order(h)
    mb = -1 if st["max_bounces"] is None else int(st["max_bounces"])
    args = (S, L, cam, np.uint64(st["seed"]), mb, int(st["rr_start"]), _STRATEGIES[st["strategy"]],
            _MODES[st["light_sampling"]], x0, y0, x1, y1, scene.film.width)
    cap = int(st["spp"])
    prev_seconds = float(prev_stats.get("seconds", 0.0))
    checks = [list(c) for c in prev_run.get("error_checks", [])] if target_error is not None else []
    budget = dict(spp=None if uncapped else cap, time_s=time_limit, target_error=target_error,
                  min_spp=int(min_spp) if target_error is not None else None)
    # seconds per sample per pixel: from the checkpoint until this session has measured a pass
    per_spp = prev_seconds / done if done else None
    check_at = None
    stat = prev_run.get("target_statistic")
    reason = None
    if target_error is not None:
        check_at = next_check(done - 1, min_spp) if done else next_check(0, min_spp)

    def result(stop):
        seconds = prev_seconds + (_clock() - t0)
        rays = int(prev_stats.get("rays", 0)) + int(row_rays.sum())
        stats = dict(rays=rays, seconds=seconds,
                     mrays_per_s=rays / seconds / 1e6 if seconds > 0 else 0.0,
                     compile_seconds=float(prev_stats.get("compile_seconds", 0.0)) + compile_seconds,
                     nonfinite_samples=int(prev_stats.get("nonfinite_samples", 0)) + int(row_bad.sum()))
        if row_time[:, 0].sum() > 0:
            # share of the path tracer's CPU time spent in BVH traversal and
            # primitive tests (closest hits and shadow rays), this session
            stats["traversal_share"] = float(row_time[:, 1].sum() / row_time[:, 0].sum())
        run = dict(stop_reason=stop, complete=stop in ("spp", "time", "target_error"), budget=budget,
                   sessions=int(prev_run.get("sessions", 0)) + 1, kernel_sha256=kernels)
        if target_error is not None:
            run.update(target_statistic=stat, error_checks=[list(c) for c in checks])
        ranges = [(first_sample, first_sample + done)] if done else []
        return Result(acc_sum, acc_sq, acc_n, ranges, dict(meta), stats, run,
                      layer_sum=acc_lsum if n_slots else None, layer_sq=acc_lsq if n_slots else None,
                      ids=ids)

    def test_target():
        """At a schedule point: record the statistic; True when it is below the target."""
        nonlocal stat, check_at
        r = Result(acc_sum, acc_sq, acc_n, [(first_sample, first_sample + done)], meta)
        stat = target_statistic(r.mean, r.variance)
        if not checks or checks[-1][0] != done:
            checks.append([done, stat])
        check_at = next_check(done, min_spp)
        return stat < target_error

    if on_compile is not None and kernels_cold():
        on_compile(COLD_COMPILE_SECONDS)
    tc = time.perf_counter()
    render_pass(*args, first_sample, 0, np.zeros(0, dtype=np.int64), acc_sum, acc_sq, acc_n,
                row_rays, row_bad, row_time, fa.filt, fa.cdf, fa.pdf, lp.lay_depth,
                lp.lay_obj, lp.lay_light, lp.lay_misc, acc_lsum, acc_lsq)   # compiles or loads, no samples
    compile_seconds = time.perf_counter() - tc
    batch = 1
    t0 = _clock()
    last_checkpoint = t0
    with _threads(threads):
        if check_at == done and done and test_target():
            reason = "target_error"
        while reason is None:
            if done >= cap:
                reason = "spp"
                break
            if should_stop is not None:
                sig = should_stop()
                if sig:
                    reason = str(sig)
                    break
            n = min(batch, cap - done)
            if check_at is not None:
                n = min(n, check_at - done)
            if time_limit is not None and per_spp is not None:
                left = time_limit - prev_seconds - (_clock() - t0)
                fit = int(left // per_spp) if per_spp > 0 else n
                if fit < 1 and done > 0:
                    reason = "time"
                    break
                n = max(1, min(n, fit))
            t = _clock()
            render_pass(*args, first_sample + done, n, order, acc_sum, acc_sq, acc_n,
                        row_rays, row_bad, row_time, fa.filt, fa.cdf, fa.pdf, lp.lay_depth,
                        lp.lay_obj, lp.lay_light, lp.lay_misc, acc_lsum, acc_lsq)
            dt = _clock() - t
            done += n
            per_spp = dt / n
            if progress is not None:
                progress(done, None if uncapped else cap, int(prev_stats.get("rays", 0))
                         + int(row_rays.sum()), prev_seconds + _clock() - t0)
            if check_at is not None and done == check_at and test_target():
                reason = "target_error"
                break
            if time_limit is not None and prev_seconds + _clock() - t0 >= time_limit:
                reason = "time"
                break
            # aim at passes of about PASS_SECONDS, growing at most 2x per pass
            ideal = int(PASS_SECONDS / per_spp) if per_spp > 0 else 2 * batch
            batch = max(1, min(ideal, 2 * max(batch, n), 1 << 20))
            if (checkpoint is not None and checkpoint_every is not None and done < cap
                    and _clock() - last_checkpoint >= checkpoint_every):
                checkpoint(result("checkpoint"))
                last_checkpoint = _clock()
    warn_nonfinite(int(row_bad.sum()))
    return result(reason)
