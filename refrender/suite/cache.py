"""The reference cache: one refrender render per (scene, reference settings, kernel code).

Layout under the cache folder::

    <content key>/<kernel hash>.exr     the reference (mean + variance layer)
    <content key>/<kernel hash>.state   its float64 accumulators (resume, merge)
    <content key>/<kernel hash>.json    manifest, written last: the entry is complete

The *content key* is the SHA-256 of the canonical JSON of the scene's content
hash (``Scene.sha256``: the document and every file it references) and the
resolved reference settings (budgets, seed and the estimator settings); the
*kernel hash* is :func:`refrender.overnight.kernel_sha256` (the sources of
every numba kernel).  A change of any of them is a cache miss, so a scene edit
re-renders its reference, and so does new kernel code, unless the caller
accepts a reference made by other kernel code (``keep_other_kernels``, the
``--keep-references`` option), which is then reported as such.

Every file is written under a temporary name and renamed (refrender.io.atomic),
and the manifest only after the EXR and the state: an entry without its
manifest is an unfinished render, which the next run resumes from its state
file when it is a checkpoint of the same render, or starts over.
"""
from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass
from pathlib import Path

from ..errors import RefrenderError
from ..io import atomic_write
from ..io.state import state_path_for

#: seconds between checkpoints of a reference render
CHECKPOINT_SECONDS = 30.0
#: version of the key recipe (raise it when the recipe changes)
KEY_VERSION = 1


class Interrupted(RefrenderError):
    """A reference render was stopped by a signal; its checkpoint is saved."""

    def __init__(self, message, reason):
        super().__init__(message)
        self.reason = reason


def reference_settings(scene, budget: dict) -> dict:
    """The resolved settings that decide a reference image (its cache key)."""
    from ..overnight import DEFAULT_MIN_SPP
    from ..render import resolve_settings
    spp = budget.get("spp")
    if spp is None and "time_s" not in budget and "target_error" not in budget:
        spp = scene.render.spp
    st = resolve_settings(scene, spp=spp if spp is not None else 1, seed=budget.get("seed"))
    out = {"spp": spp, "time_s": budget.get("time_s"), "target_error": budget.get("target_error"),
           "min_spp": budget.get("min_spp", DEFAULT_MIN_SPP) if budget.get("target_error") is not None else None}
    out.update({k: st[k] for k in ("seed", "max_bounces", "rr_start", "strategy", "light_sampling")})
    return out


def content_key(scene, settings: dict) -> str:
    text = json.dumps({"key_version": KEY_VERSION, "scene_sha256": scene.sha256, "settings": settings},
                      sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass
class Reference:
    """A reference found in or put into the cache."""
    exr: Path
    key: str
    kernel_sha256: str
    status: str             # "hit", "rendered", "resumed", "other_kernel" (kept), "updated"
    spp: int
    seconds: float          # render seconds (of the original render for a hit)


class ReferenceCache:
    def __init__(self, folder):
        self.folder = Path(folder)

    def paths(self, key: str, kernel: str) -> tuple[Path, Path, Path]:
        d = self.folder / key
        return d / f"{kernel}.exr", state_path_for(d / f"{kernel}.exr"), d / f"{kernel}.json"

    def lookup(self, key: str, kernel: str, *, keep_other_kernels: bool = False):
        """(exr, manifest dict, kernel) of a complete entry, or None."""
        exr, _, man = self.paths(key, kernel)
        found = self._complete(exr, man)
        if found is not None:
            return exr, found, kernel
        if keep_other_kernels and (self.folder / key).is_dir():
            others = sorted((p for p in (self.folder / key).glob("*.json")), key=lambda p: p.stat().st_mtime,
                            reverse=True)
            for m in others:
                e = m.with_suffix(".exr")
                found = self._complete(e, m)
                if found is not None:
                    return e, found, m.stem
        return None

    @staticmethod
    def _complete(exr: Path, man: Path):
        if not (exr.is_file() and man.is_file()):
            return None
        try:
            return json.loads(man.read_text("utf-8"))
        except (OSError, ValueError):
            return None

    def get(self, scene, budget: dict, *, update: bool = False, keep_other_kernels: bool = False,
            client=None, log=None) -> Reference:
        """The reference of ``scene`` under ``budget``: from the cache, or rendered into it.

        ``update`` re-renders even when a complete entry exists; ``client`` (a
        Dask client) renders on a cluster (``spp`` budgets only).
        """
        from ..overnight import kernel_sha256
        settings = reference_settings(scene, budget)
        key = content_key(scene, settings)
        kernel = kernel_sha256()
        if not update:
            hit = self.lookup(key, kernel, keep_other_kernels=keep_other_kernels)
            if hit is not None:
                exr, man, k = hit
                return Reference(exr, key, k, "hit" if k == kernel else "other_kernel",
                                 int(man.get("spp", 0)), float(man.get("seconds", 0.0)))
        exr, state, man = self.paths(key, kernel)
        exr.parent.mkdir(parents=True, exist_ok=True)
        prev = None if update else self._checkpoint(state, scene, settings, farm=client is not None)
        if log is not None:
            log(f"{'resuming' if prev is not None else 'rendering'} reference {key[:12]} "
                f"({_budget_text(settings)})" + (f" from {prev.spp} spp" if prev is not None else ""))
        if update and man.exists():
            man.unlink()                  # the entry is incomplete until the new render finishes
        result = self._render(scene, settings, prev, exr, client)
        manifest = {"key": key, "key_version": KEY_VERSION, "scene_sha256": scene.sha256,
                    "scene_path": None if scene.source_path is None else str(scene.source_path),
                    "settings": settings, "kernel_sha256": kernel, "spp": result.spp,
                    "seconds": float(result.stats.get("seconds", 0.0)),
                    "stop_reason": result.run.get("stop_reason"), "created": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
        with atomic_write(man, "w") as fh:
            json.dump(manifest, fh, indent=1)
            fh.write("\n")
        status = "updated" if update else ("resumed" if prev is not None else "rendered")
        return Reference(exr, key, kernel, status, result.spp, manifest["seconds"])

    @staticmethod
    def _checkpoint(state: Path, scene, settings, farm: bool = False):
        """An unfinished render of this very reference to continue, or None.

        A local render continues a checkpoint of one sample range from 0 (its
        accumulators, bit-identically); a farm render also takes the several
        ranges of a farm checkpoint (``render_farm(done=...)`` renders the rest).
        """
        if not state.is_file():
            return None
        from ..overnight import check_resumable, kernel_sha256
        from ..result import ESTIMATOR_KEYS, Result
        try:
            prev = Result.from_state(state)
        except RefrenderError:
            return None
        want = {k: prev.meta.get(k) for k in ("width", "height", "window")}
        want.update(scene_sha256=scene.sha256, **{k: settings[k] for k in
                                                 ("seed", "strategy", "light_sampling", "max_bounces", "rr_start")})
        if prev.run.get("complete", False) or prev.run.get("budget", {}).get("spp") != settings["spp"]:
            return None
        if farm:
            ok = (all(prev.meta.get(k) == want.get(k) for k in ESTIMATOR_KEYS)
                  and prev.run.get("kernel_sha256") == kernel_sha256()
                  and all(0 <= a < b <= settings["spp"] for a, b in prev.sample_ranges))
            return prev if ok else None
        try:
            check_resumable(prev, want, 0)
        except RefrenderError:
            return None
        return prev

    @staticmethod
    def _render(scene, settings, prev, exr: Path, client):
        from ..overnight import EXIT_STATUS, StopOnSignal, kernel_sha256
        over = {k: settings[k] for k in ("seed", "max_bounces", "rr_start", "strategy", "light_sampling")}
        with StopOnSignal() as stop:
            if client is not None:
                from .. import farm
                last = [time.monotonic()]

                def on_task(partial):
                    if time.monotonic() - last[0] >= CHECKPOINT_SECONDS:
                        partial.run = dict(partial.run, stop_reason="checkpoint", complete=False,
                                           budget={"spp": settings["spp"]}, kernel_sha256=kernel_sha256())
                        partial.save(exr)
                        last[0] = time.monotonic()
                result = farm.render_farm(scene, client, spp=settings["spp"], done=prev, on_task=on_task,
                                          should_stop=stop, **over)
            else:
                from .. import render
                result = render(scene, spp=settings["spp"], time_limit=settings["time_s"],
                                target_error=settings["target_error"],
                                **({"min_spp": settings["min_spp"]} if settings["min_spp"] else {}),
                                resume=prev, checkpoint=lambda partial: partial.save(exr),
                                checkpoint_every=CHECKPOINT_SECONDS, should_stop=stop, **over)
        if result.spp:
            result.save(exr)
        reason = result.run.get("stop_reason")
        if reason in EXIT_STATUS:
            raise Interrupted(f"{reason}: reference render stopped after {result.spp} spp; its checkpoint "
                              f"{exr} is resumed by the next run", reason)
        return result


def _budget_text(settings: dict) -> str:
    parts = []
    if settings["spp"] is not None:
        parts.append(f"{settings['spp']} spp")
    if settings["target_error"] is not None:
        parts.append(f"target error {settings['target_error']:g}")
    if settings["time_s"] is not None:
        parts.append(f"{settings['time_s']:g} s")
    return ", ".join(parts) + f", seed {settings['seed']}"
