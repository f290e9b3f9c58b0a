"""The render entry point: scene -> arrays -> kernel passes -> Result."""
from __future__ import annotations

import os
import time
from contextlib import contextmanager

import numba
import numpy as np

from .errors import RenderError
from .geometry.compile import build_lights, camera_array, compile_scene
from .integrator.path import STRATEGY_BSDF, STRATEGY_MIS, STRATEGY_NEE, render_pass
from .result import Result, warn_nonfinite
from .sampling.lights import MODE_AREA, MODE_SOLID_ANGLE
from .scene.model import Scene

_UNSET = object()
_STRATEGIES = {"bsdf": STRATEGY_BSDF, "nee": STRATEGY_NEE, "mis": STRATEGY_MIS}
_MODES = {"area": MODE_AREA, "solid_angle": MODE_SOLID_ANGLE}
#: bytes of working memory per pixel (accumulators and the derived images)
BYTES_PER_PIXEL = 8 * (3 + 3 + 1) + 8 * (3 + 3) * 2


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


def _row_order(h: int) -> np.ndarray:
    """Rows interleaved so that contiguous chunks of the parallel loop spread
    over the whole image (balanced work, any thread count)."""
    step = 16
    return np.concatenate([np.arange(k, h, step) for k in range(min(step, h))]).astype(np.int64)


def _check_memory(h: int, w: int) -> None:
    need = h * w * BYTES_PER_PIXEL
    try:
        avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return
    if need > avail:
        raise RenderError(f"film: {w}x{h} needs about {need / 2**30:.1f} GiB, "
                          f"only {avail / 2**30:.1f} GiB free")


class Settings(dict):
    """Resolved render settings (scene defaults with overrides applied)."""


def resolve_settings(scene: Scene, *, spp=None, seed=None, max_bounces=_UNSET, rr_start=None,
                     strategy=None, light_sampling=None) -> Settings:
    rs = scene.render
    st = Settings(spp=rs.spp if spp is None else spp,
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


def render(scene: Scene, *, spp=None, seed=None, first_sample: int = 0, max_bounces=_UNSET,
           rr_start=None, strategy=None, light_sampling=None, threads=None,
           progress=None) -> Result:
    """Render a scene.

    Keyword arguments override the scene's ``render`` block.  Samples
    ``first_sample .. first_sample + spp - 1`` of every pixel are drawn; each
    depends only on (seed, pixel, sample index, dimension), so results do not
    depend on ``threads`` and disjoint ranges merge exactly.

    Parameters
    ----------
    progress : callable, optional
        Called after every pass as ``progress(samples_done, spp, rays, seconds)``.

    Returns
    -------
    Result
    """
    if not isinstance(scene, Scene):
        raise RenderError("render: expected a Scene from refrender.load_scene")
    st = resolve_settings(scene, spp=spp, seed=seed, max_bounces=max_bounces, rr_start=rr_start,
                          strategy=strategy, light_sampling=light_sampling)
    _check_int("first_sample", first_sample, 0, 2 ** 62)
    x0, y0, x1, y1 = scene.film.window
    h, w = y1 - y0, x1 - x0
    _check_memory(h, w)
    S = compile_scene(scene)
    L = build_lights(scene, S, st["strategy"])
    cam = camera_array(scene)
    acc_sum = np.zeros((h, w, 3))
    acc_sq = np.zeros((h, w, 3))
    acc_n = np.zeros((h, w), dtype=np.int64)
    row_rays = np.zeros(h, dtype=np.int64)
    row_bad = np.zeros(h, dtype=np.int64)
    order = _row_order(h)
    mb = -1 if st["max_bounces"] is None else int(st["max_bounces"])
    args = (S, L, cam, np.uint64(st["seed"]), mb, int(st["rr_start"]), _STRATEGIES[st["strategy"]],
            _MODES[st["light_sampling"]], x0, y0, x1, y1, scene.film.width)
    total = int(st["spp"])
    done = 0
    batch = 1
    t0 = time.perf_counter()
    with _threads(threads):
        while done < total:
            n = min(batch, total - done)
            t = time.perf_counter()
            render_pass(*args, first_sample + done, n, order, acc_sum, acc_sq, acc_n,
                        row_rays, row_bad)
            dt = time.perf_counter() - t
            done += n
            if progress is not None:
                progress(done, total, int(row_rays.sum()), time.perf_counter() - t0)
            # aim at passes of about 0.25 s (results do not depend on the pass size)
            if dt < 0.125:
                batch = min(batch * 2, 1 << 20)
            elif dt > 0.5 and batch > 1:
                batch //= 2
    seconds = time.perf_counter() - t0
    rays = int(row_rays.sum())
    bad = int(row_bad.sum())
    warn_nonfinite(bad)
    meta = dict(scene_sha256=scene.sha256, seed=int(st["seed"]), strategy=st["strategy"],
                light_sampling=st["light_sampling"], max_bounces=st["max_bounces"],
                rr_start=int(st["rr_start"]), width=scene.film.width, height=scene.film.height,
                window=[x0, y0, x1, y1])
    stats = dict(rays=rays, seconds=seconds, mrays_per_s=rays / seconds / 1e6 if seconds > 0 else 0.0,
                 nonfinite_samples=bad)
    return Result(acc_sum, acc_sq, acc_n, [(first_sample, first_sample + total)], meta, stats)
