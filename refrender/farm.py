"""Farm renders on Dask distributed: sample ranges as tasks, merged in a fixed order.

A farm render cuts the sample range ``first_sample … first_sample + spp − 1``
into tasks of ``task_spp`` samples per pixel (default: about eight tasks per
worker, see :func:`default_task_spp`).  Each task renders its range with the
same counter-based random numbers as a local render and returns its float64
accumulators; the client merges the tasks in order of their first sample, so
the image equals the single-machine render of the same samples to float64
rounding, whichever worker ran which task, and in whatever order they finished.

The scene travels to the workers as one pickled payload (meshes, textures and
environment maps are already loaded into arrays by ``load_scene``, so no
shared file system is needed), scattered once to every worker, and its
SHA-256 is checked on arrival before a task starts.  Tasks are pure: when a
worker dies, Dask re-runs its task elsewhere, and a range is accepted once.
"""
from __future__ import annotations

import hashlib
import logging
import math
import os
import pickle
import tempfile
import time

from .errors import RenderError
from .render import _UNSET, render, resolve_settings
from .result import Result, merge

#: default number of tasks per worker: enough to balance and to lose little
#: when a worker dies, few enough that the per-task overhead (~2 ms) vanishes
TASKS_PER_WORKER = 8


def split_range(first: int, spp: int, task_spp: int) -> list[tuple[int, int]]:
    """Cut [first, first + spp) into consecutive half-open ranges of task_spp."""
    if task_spp < 1:
        raise RenderError(f"task_spp: must be >= 1, got {task_spp}")
    return [(a, min(a + task_spp, first + spp)) for a in range(first, first + spp, task_spp)]


def missing_ranges(ranges, done) -> list[tuple[int, int]]:
    """The parts of ``ranges`` not covered by the sorted, disjoint ``done`` ranges."""
    out = []
    for a, b in ranges:
        cur = a
        for da, db in sorted(done):
            if db <= cur or da >= b:
                continue
            if da > cur:
                out.append((cur, da))
            cur = max(cur, db)
            if cur >= b:
                break
        if cur < b:
            out.append((cur, b))
    return out


def default_task_spp(spp: int, n_workers: int) -> int:
    """ceil(spp / (TASKS_PER_WORKER * workers)), at least 1."""
    return max(1, math.ceil(spp / (TASKS_PER_WORKER * max(1, n_workers))))


def pack_scene(scene) -> tuple[bytes, str]:
    """The scene as one payload and its SHA-256 (hex)."""
    payload = pickle.dumps(scene, protocol=pickle.HIGHEST_PROTOCOL)
    return payload, hashlib.sha256(payload).hexdigest()


#: worker side: the scenes of the last few payloads by their SHA-256, so that
#: every task of a render uses one Scene object and its compiled form
#: (refrender.prepared) is built once per worker, not once per task
_WORKER_SCENES: dict[str, object] = {}
_WORKER_SCENES_KEPT = 2


def _worker_scene(payload: bytes, digest: str):
    if hashlib.sha256(payload).hexdigest() != digest:
        raise RenderError(f"scene payload arrived corrupted (SHA-256 mismatch, expected {digest[:12]}…)")
    scene = _WORKER_SCENES.get(digest)
    if scene is None:
        scene = pickle.loads(payload)
        while len(_WORKER_SCENES) >= _WORKER_SCENES_KEPT:
            _WORKER_SCENES.pop(next(iter(_WORKER_SCENES)))
        _WORKER_SCENES[digest] = scene
    return scene


def _render_task(payload: bytes, digest: str, settings: dict, start: int, stop: int, threads):
    """Worker side: check the payload, render samples [start, stop), return accumulators."""
    scene = _worker_scene(payload, digest)
    res = render(scene, spp=stop - start, first_sample=start, threads=threads, **settings)
    return {"range": (start, stop), "sum": res.sum, "sum_sq": res.sum_sq, "count": res.count,
            "meta": res.meta, "stats": res.stats, "pid": os.getpid(),
            "layer_sum": res.layer_sum, "layer_sq": res.layer_sq, "ids": res.ids}


def local_cluster(n_workers: int, *, threads_per_worker: int = 1):
    """A Dask LocalCluster that keeps every socket on 127.0.0.1.

    Workers are separate processes started with ``spawn`` (numba's default
    OpenMP layer kills a process forked after a parallel call); the dashboard
    binds to a random loopback port; scratch files go to a temporary folder.
    """
    import dask
    from distributed import LocalCluster
    if n_workers < 1:
        raise RenderError(f"--local-workers: must be >= 1, got {n_workers}")
    tmp = tempfile.mkdtemp(prefix="refrender-dask-")
    # Ctrl-C in a terminal sends SIGINT to the whole process group, workers
    # included: they are started with SIGINT ignored (the disposition survives
    # exec, and Python then installs no KeyboardInterrupt handler), so only
    # the client reacts, checkpoints what finished and shuts the cluster down.
    previous = _ignore_sigint()
    try:
        with dask.config.set({"distributed.worker.multiprocessing-method": "spawn",
                              "temporary-directory": tmp}):
            return LocalCluster(n_workers=n_workers, threads_per_worker=threads_per_worker,
                                processes=True, host="127.0.0.1", scheduler_port=0,
                                dashboard_address="127.0.0.1:0", silence_logs=logging.ERROR)
    finally:
        _restore_sigint(previous)


def _ignore_sigint():
    import signal
    import threading
    if threading.current_thread() is not threading.main_thread():
        return None
    return signal.signal(signal.SIGINT, signal.SIG_IGN)


def _restore_sigint(previous) -> None:
    import signal
    if previous is not None:
        signal.signal(signal.SIGINT, previous)


def connect(address: str):
    """A Dask client for an existing scheduler (``tcp://host:port``)."""
    from distributed import Client
    try:
        return Client(address, timeout="20s")
    except (OSError, TimeoutError) as exc:
        raise RenderError(f"--cluster: cannot reach the scheduler at {address}: {exc}") from None


def render_farm(scene, client, *, spp=None, seed=None, first_sample: int = 0,
                max_bounces=_UNSET, rr_start=None, strategy=None, light_sampling=None,
                color_space=None, layers=None, task_spp: int | None = None, threads_per_task: int | None = None,
                done: Result | None = None, progress=None, on_task=None,
                should_stop=None, retries: int = 3) -> Result:
    """Render on the workers of ``client``; returns the merged Result.

    Parameters
    ----------
    task_spp : int, optional
        Samples per pixel of one task (default: :func:`default_task_spp`).
    threads_per_task : int, optional
        numba threads used by each task (default: all cores of its worker).
    done : Result, optional
        Work already finished (e.g. a checkpoint); its sample ranges are not
        rendered again and it is merged into the result.
    progress : callable, optional
        ``progress(tasks_done, tasks_total, rays, seconds)`` after each task.
    on_task : callable, optional
        ``on_task(result_so_far)`` after each task with the merge of ``done``
        and all tasks finished so far (use it to checkpoint).
    should_stop : callable, optional
        Checked after each task; when it returns a reason (e.g. ``"SIGINT"``)
        the remaining tasks are cancelled and the partial result is returned
        with that stop reason.

    The result's ``run`` record has ``stop_reason`` ``spp`` (all ranges done)
    or the reason from ``should_stop``, and ``complete``.
    """
    from distributed import as_completed
    over = dict(seed=seed, rr_start=rr_start, strategy=strategy, light_sampling=light_sampling,
                color_space=color_space, layers=layers)
    if max_bounces is not _UNSET:
        over["max_bounces"] = max_bounces
    st = resolve_settings(scene, spp=spp, **over)
    settings = {k: st[k] for k in ("seed", "max_bounces", "rr_start", "strategy", "light_sampling")}
    extra = {"color_space": st["color_space"], "layers": list(st["layers"])}
    n_workers = max(1, len(client.scheduler_info().get("workers", {})))
    task_spp = task_spp or default_task_spp(st["spp"], n_workers)
    ranges = split_range(first_sample, st["spp"], task_spp)
    if done is not None:
        if done.meta["scene_sha256"] != scene.sha256:
            raise RenderError("resume: the checkpoint belongs to a different scene")
        for key, want in settings.items():
            if done.meta.get(key) != want:
                raise RenderError(f"resume: the checkpoint has {key} = {done.meta.get(key)!r}, "
                                  f"this render {want!r}")
        ranges = missing_ranges(ranges, done.sample_ranges)
    payload, digest = pack_scene(scene)
    t0 = time.perf_counter()
    parts: dict[tuple[int, int], Result] = {}
    if ranges:
        # hash=False: a fresh key per render.  With the content-hash key, a
        # second render of the same scene right after the first could scatter
        # while the scheduler still released the first copy, and its tasks were
        # cancelled for "lost dependencies" (seen in the resume test)
        remote = client.scatter(payload, broadcast=True, hash=False)
        futures = [client.submit(_render_task, remote, digest, dict(settings, **extra), a, b,
                                 threads_per_task,
                                 key=f"refrender-{digest[:16]}-{st['seed']}-{a}-{b}",
                                 pure=False, retries=retries) for a, b in ranges]
        rays = 0
        pending = as_completed(futures)
        for fut in pending:
            r = fut.result()
            key = tuple(r["range"])
            if key in parts:           # a re-run of a range that already arrived
                continue
            parts[key] = Result(r["sum"], r["sum_sq"], r["count"], [key], r["meta"], r["stats"],
                                layer_sum=r.get("layer_sum"), layer_sq=r.get("layer_sq"),
                                ids=r.get("ids"))
            rays += int(r["stats"]["rays"])
            if progress is not None:
                progress(len(parts), len(ranges), rays, time.perf_counter() - t0)
            if on_task is not None:
                # a checkpoint: unfinished until the last range is merged, so that
                # the same command without --resume refuses to start over
                partial = _merge_ordered(done, parts)
                partial.run = dict(partial.run, stop_reason="checkpoint", complete=False,
                                   budget={"spp": int(st["spp"])},
                                   farm={"task_spp": task_spp, "workers": n_workers})
                on_task(partial)
            stop = should_stop() if should_stop is not None else None
            if stop:
                for f in futures:
                    f.cancel()
                break
    else:
        stop = None
    if not parts and done is None:
        raise RenderError(f"farm: stopped by {stop} before the first task finished; nothing was rendered")
    result = _merge_ordered(done, parts)
    result.stats["task_seconds"] = sum(float(p.stats.get("seconds", 0.0)) for p in parts.values())
    result.stats["seconds"] = time.perf_counter() - t0 + (float(done.stats.get("seconds", 0.0)) if done else 0.0)
    result.stats["mrays_per_s"] = result.stats["rays"] / result.stats["seconds"] / 1e6 if result.stats["seconds"] > 0 else 0.0
    result.stats["tasks"] = len(parts)
    complete = not stop and len(parts) == len(ranges)
    result.run = dict(result.run, stop_reason=stop or "spp", complete=complete,
                      budget={"spp": int(st["spp"])}, farm={"task_spp": task_spp, "workers": n_workers})
    return result


def _merge_ordered(done, parts) -> Result:
    items = ([done] if done is not None else []) + [parts[k] for k in sorted(parts)]
    if not items:
        raise RenderError("farm: nothing was rendered")
    return merge(items) if len(items) > 1 else items[0]
