"""Render results: float64 accumulators, derived mean and variance, merge, save."""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ImageError, RenderError
from .limits import SAMPLE_MAX, SPP_MAX

#: metadata keys that must agree for two results to be merged
ESTIMATOR_KEYS = ("scene_sha256", "seed", "strategy", "light_sampling", "max_bounces",
                  "rr_start", "width", "height", "window")
#: estimator keys present only when not at their default (box filter, linear
#: Rec. 709, no layers), so results without them read and merge as before
OPTIONAL_KEYS = ("filter", "color_space", "layers", "layer_slots")
MERGE_KEYS = ESTIMATOR_KEYS + OPTIONAL_KEYS
#: metadata kept when present that need not agree (the scene file a render was made from)
OPTIONAL_META_KEYS = ("scene_file",)


@dataclass
class Result:
    """The outcome of a render (or a merge of renders).

    Attributes
    ----------
    sum, sum_sq : (H, W, 3) float64
        Sums of the sample values and of their squares per pixel and channel.
    count : (H, W) int64
        Finite samples per pixel (non-finite ones are excluded and counted in
        ``stats["nonfinite_samples"]``).
    sample_ranges : list of (start, stop)
        Half-open ranges of sample indices contained, sorted, disjoint.
    meta : dict
        Estimator settings and scene identity (see ``ESTIMATOR_KEYS``).
    stats : dict
        ``rays``, ``seconds``, ``mrays_per_s``, ``nonfinite_samples``.
    run : dict
        How the render ran and ended: ``stop_reason`` (``spp``, ``time``,
        ``target_error``, ``SIGINT``, ``SIGTERM``, ``checkpoint`` while still
        running, ``merge``), ``complete``, ``budget``, ``target_statistic``,
        ``error_checks``, ``sessions`` (runs that added samples),
        ``kernel_sha256`` (hash of the kernel sources).
    """
    sum: np.ndarray
    sum_sq: np.ndarray
    count: np.ndarray
    sample_ranges: list
    meta: dict
    stats: dict = field(default_factory=dict)
    run: dict = field(default_factory=dict)
    #: (H, W, slots, 3) float64 sums and sums of squares of the layer slots
    #: (names: ``meta["layer_slots"]``), or None without layers
    layer_sum: np.ndarray | None = None
    layer_sq: np.ndarray | None = None
    #: pixel-centre id images ``object_id``/``material_id`` (H, W) and ``names``
    ids: dict | None = None

    @property
    def layer_slots(self) -> list:
        return list(self.meta.get("layer_slots") or [])

    def layer_mean(self, name: str) -> np.ndarray:
        """(H, W, 3) mean of one layer slot (e.g. ``"indirect"``, ``"light.window"``)."""
        i = self._slot(name)
        n = np.maximum(self.count, 1)[..., None]
        return self.layer_sum[:, :, i, :] / n

    def layer_variance(self, name: str) -> np.ndarray:
        """(H, W, 3) variance of the mean of one layer slot (inf below 2 samples)."""
        i = self._slot(name)
        return _variance(self.layer_sum[:, :, i, :], self.layer_sq[:, :, i, :], self.count)

    def _slot(self, name):
        slots = self.layer_slots
        if name not in slots or self.layer_sum is None:
            raise RenderError(f"no layer {name!r} in this result (has {', '.join(slots) or 'none'})")
        return slots.index(name)

    @property
    def spp(self) -> int:
        """Samples per pixel in this result."""
        return int(sum(b - a for a, b in self.sample_ranges))

    @property
    def mean(self) -> np.ndarray:
        """(H, W, 3) float64 mean radiance of each pixel (W m^-2 sr^-1)."""
        n = np.maximum(self.count, 1)[..., None]
        return self.sum / n

    @property
    def variance(self) -> np.ndarray:
        """(H, W, 3) float64 variance of each pixel's mean (standard error squared).

        Unbiased sample variance divided by n; inf where a pixel has < 2 samples.
        """
        return _variance(self.sum, self.sum_sq, self.count)

    @property
    def window(self) -> tuple:
        return tuple(self.meta["window"])

    def relative_error(self, floor: float = 1e-3) -> np.ndarray:
        """(H, W) relative standard error of each pixel's luminance (see relative_error)."""
        return relative_error(self.mean, self.variance, floor)

    def noise_summary(self) -> dict:
        """Mean and 95th percentile of the per-pixel relative standard error."""
        return noise_summary(self.mean, self.variance)

    def save(self, path, *, preview=None, exposure: float = 0.0, state: bool = True) -> None:
        """Write the EXR (mean + variance layer + metadata) and its state file.

        The state file (``out.state`` beside ``out.exr``) holds the float64
        accumulators that ``merge`` and resume read.  Every file is written
        under a temporary name and renamed.
        """
        from .io import save_state, state_path_for, write_exr, write_png_preview
        path = Path(path)
        mean, variance = self.mean, self.variance       # computed once (a checkpoint's cost)
        meta = self.metadata(noise=noise_summary(mean, variance))
        # the state first: it is what resume and merge need, and a failed state
        # write then leaves no EXR without its accumulators
        if state:
            arrays = {"sum": self.sum, "sum_sq": self.sum_sq, "count": self.count}
            if self.layer_sum is not None:
                arrays.update(layer_sum=self.layer_sum, layer_sq=self.layer_sq)
            if self.ids is not None:
                arrays.update(object_id=self.ids["object_id"], material_id=self.ids["material_id"])
            save_state(state_path_for(path), arrays, meta)
        layers, channels = self.exr_layers()
        write_exr(path, mean, variance, meta, layers=layers, channels=channels,
                  chromaticities=chromaticities_of(self.meta.get("color_space")))
        if preview is not None:
            write_png_preview(preview, self.mean, exposure=exposure)

    def exr_layers(self) -> tuple[dict, dict]:
        """EXR layers (name -> (H, W, 3)) and single channels (name -> (H, W)) of
        the layer slots and id images (see refrender.layers)."""
        layers, channels = {}, {}
        for name in self.layer_slots:
            if name in ("normal", "position", "depth"):
                if name not in self.meta.get("layers", ()):
                    continue
                m = self.layer_mean(name)
                if name == "depth":
                    channels["depth.Z"] = m[..., 0]
                else:
                    for i, c in enumerate("XYZ"):
                        channels[f"{name}.{c}"] = m[..., i]
                continue
            if name == "albedo" and name not in self.meta.get("layers", ()):
                continue
            layers[name] = self.layer_mean(name)
            layers[f"{name}.variance"] = self.layer_variance(name)
        if self.ids is not None:
            for key in ("object_id", "material_id"):
                if key in self.meta.get("layers", ()):
                    channels[f"{key}.index"] = self.ids[key]
        return layers, channels

    def metadata(self, noise=None) -> dict:
        """Settings, sample ranges, stats, run record and noise summary (as written
        to the EXR header and the state file).  ``noise`` skips recomputing it."""
        from . import __version__
        meta = dict(self.meta)
        meta.update(program="refrender", version=__version__, spp=self.spp,
                    sample_ranges=[list(r) for r in self.sample_ranges],
                    stats=dict(self.stats), run=dict(self.run),
                    noise=self.noise_summary() if noise is None else noise,
                    stop_reason=self.run.get("stop_reason"))
        if self.ids is not None:
            meta["ids"] = self.ids["names"]
        return meta

    @classmethod
    def from_state(cls, path) -> "Result":
        """Load a result from its state file.

        Besides the file's own checks (zip CRC, SHA-256 of the arrays), the
        content must be self-consistent: array shapes and dtypes match the
        window, sample ranges are sorted and disjoint, counts lie in
        [0, spp], sums are finite and sums of squares non-negative.  Anything
        else is a one-line ImageError naming the file.
        """
        from .io import load_state
        from .io.metadata import STATE_REQUIRED, check_metadata
        arrays, meta = load_state(path)
        check_metadata(meta, path, STATE_REQUIRED)
        try:
            est = {k: meta[k] for k in ESTIMATOR_KEYS}
            est.update({k: meta[k] for k in OPTIONAL_KEYS + OPTIONAL_META_KEYS if k in meta})
            ids = None
            if "object_id" in arrays:
                ids = {"object_id": arrays["object_id"], "material_id": arrays["material_id"],
                       "names": meta["ids"]}
            res = cls(sum=arrays["sum"], sum_sq=arrays["sum_sq"], count=arrays["count"],
                      sample_ranges=[tuple(r) for r in meta["sample_ranges"]],
                      meta=est, stats=dict(meta.get("stats") or {}),
                      run=dict(meta.get("run") or {}), layer_sum=arrays.get("layer_sum"),
                      layer_sq=arrays.get("layer_sq"), ids=ids)
        except KeyError as exc:
            raise ImageError(f"{path}: state file lacks {exc.args[0]!r}") from None
        except (TypeError, ValueError):
            raise ImageError(f"{path}: corrupted (malformed sample_ranges, stats or run)") from None
        problem = _state_problem(res)
        if problem:
            raise ImageError(f"{path}: inconsistent state file ({problem})")
        return res


def _variance(total, total_sq, count):
    n = count[..., None].astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = (total_sq - total * total / n) / (n - 1.0)
        var = np.maximum(s2, 0.0) / n
    return np.where(n >= 2, var, np.inf)


def _is_int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _state_problem(res: "Result"):
    """Why a Result read from a file cannot be trusted, or None."""
    win = res.meta["window"]
    if not (isinstance(win, list) and len(win) == 4 and all(_is_int(v) for v in win)
            and 0 <= win[0] < win[2] and 0 <= win[1] < win[3]):
        return f"window {win!r}"
    if win[2] > res.meta["width"] or win[3] > res.meta["height"]:
        return f"window {win!r} exceeds the film {res.meta['width']} x {res.meta['height']}"
    h, w = win[3] - win[1], win[2] - win[0]
    for name, arr, shape, kind in (("sum", res.sum, (h, w, 3), "f"), ("sum_sq", res.sum_sq, (h, w, 3), "f"),
                                   ("count", res.count, (h, w), "i")):
        if arr.shape != shape or arr.dtype.kind != kind or arr.dtype.itemsize != 8:
            return (f"array {name!r} is {arr.dtype}{list(arr.shape)}, expected "
                    f"{'float64' if kind == 'f' else 'int64'}{list(shape)} for window {win}")
    ranges = res.sample_ranges
    if not ranges or not all(len(r) == 2 and _is_int(r[0]) and _is_int(r[1]) and 0 <= r[0] < r[1]
                             for r in ranges):
        return f"sample_ranges {ranges!r}"
    if sorted(ranges) != ranges or _ranges_overlap(ranges):
        return f"sample_ranges {ranges!r} are not sorted and disjoint"
    spp = res.spp
    if spp > SPP_MAX:
        return f"{spp} samples per pixel, more than {SPP_MAX} (2**40)"
    if res.count.size and (int(res.count.min()) < 0 or int(res.count.max()) > spp):
        return f"sample counts outside [0, {spp}]"
    slots = res.meta.get("layer_slots") or []
    if (res.layer_sum is None) != (not slots) or (res.layer_sq is None) != (not slots):
        return f"layer arrays do not match layer_slots {slots!r}"
    if slots:
        for name, arr in (("layer_sum", res.layer_sum), ("layer_sq", res.layer_sq)):
            if arr.shape != (h, w, len(slots), 3) or arr.dtype != np.float64:
                return f"array {name!r} is {arr.dtype}{list(arr.shape)}, expected float64{[h, w, len(slots), 3]}"
        if not (np.all(np.isfinite(res.layer_sum)) and np.all(np.isfinite(res.layer_sq))):
            return "non-finite layer sums"
    if not (np.all(np.isfinite(res.sum)) and np.all(np.isfinite(res.sum_sq))):
        return "non-finite sums"
    if np.any(res.sum_sq < 0):
        return "negative sums of squares"
    return None


def relative_error(mean, variance, floor: float = 1e-3) -> np.ndarray:
    """(H, W) relative standard error of the BT.709 luminance of each pixel.

    Pixels darker than ``floor`` times the image's mean luminance use that
    floor as the denominator, so that black pixels do not dominate summaries.
    """
    from .geometry.compile import LUMINANCE
    y = np.asarray(mean, dtype=np.float64) @ LUMINANCE
    vy = np.asarray(variance, dtype=np.float64) @ (LUMINANCE ** 2)
    ref = max(float(np.mean(np.abs(y))) * floor, 1e-300)
    return np.sqrt(vy) / np.maximum(np.abs(y), ref)


def noise_summary(mean, variance) -> dict:
    """Mean and 95th percentile of the per-pixel relative standard error
    (floor: 1e-3 of the mean luminance); None when no pixel has an estimate
    (fewer than 2 samples per pixel)."""
    rel = relative_error(mean, variance)
    rel = rel[np.isfinite(rel)]
    if rel.size == 0:
        return {"rel_error_mean": None, "rel_error_p95": None}
    return {"rel_error_mean": float(rel.mean()), "rel_error_p95": float(np.percentile(rel, 95))}


def _ranges_overlap(ranges) -> bool:
    ranges = sorted(ranges)
    return any(b0 > a1 for (_, b0), (a1, _) in zip(ranges, ranges[1:]))


def merge(results, names=None) -> Result:
    """Merge renders of disjoint sample ranges of the same scene and settings.

    The result equals one render of the union of the samples to float64
    rounding.  Raises RenderError on mismatched scenes or settings, or on
    overlapping sample ranges (which would count samples twice).  ``names``
    (e.g. file names) label the inputs in error messages.
    """
    results = list(results)
    if not results:
        raise RenderError("merge: nothing to merge")
    names = [f"input {i}" for i in range(len(results))] if names is None else [str(n) for n in names]
    first = results[0]
    for i, r in enumerate(results[1:], start=1):
        for key in MERGE_KEYS:
            if r.meta.get(key) != first.meta.get(key):
                what = "scene_sha256 (scene content hash)" if key == "scene_sha256" else key
                raise RenderError(f"merge: {names[i]} differs from {names[0]} in {what}: "
                                  f"{r.meta.get(key)!r} != {first.meta.get(key)!r}")
    owners = sorted((tuple(x), i) for i, r in enumerate(results) for x in r.sample_ranges)
    for ((a0, b0), i0), ((a1, b1), i1) in zip(owners, owners[1:]):
        if a1 < b0:
            who = names[i0] if i0 == i1 else f"{names[i0]} and {names[i1]}"
            raise RenderError(f"merge: {who} overlap in samples [{a1}, {min(b0, b1)}) "
                              "(they would be counted twice)")
    ranges = [r for r, _ in owners]
    total = sum(b - a for a, b in ranges)
    if total > SPP_MAX:
        raise RenderError(f"merge: {total} samples per pixel in all, more than {SPP_MAX} (2**40, the "
                          "most the float64 sums of squares can carry, see README 'Limits')")
    order = sorted(range(len(results)), key=lambda i: min(results[i].sample_ranges))
    s = np.zeros_like(first.sum)
    sq = np.zeros_like(first.sum_sq)
    n = np.zeros_like(first.count)
    ls = None if first.layer_sum is None else np.zeros_like(first.layer_sum)
    lq = None if first.layer_sq is None else np.zeros_like(first.layer_sq)
    for i in order:
        s += results[i].sum
        sq += results[i].sum_sq
        n += results[i].count
        if ls is not None:
            ls += results[i].layer_sum
            lq += results[i].layer_sq
    stats = {"rays": sum(int(r.stats.get("rays", 0)) for r in results),
             "seconds": sum(float(r.stats.get("seconds", 0.0)) for r in results),
             "nonfinite_samples": sum(int(r.stats.get("nonfinite_samples", 0)) for r in results),
             "compile_seconds": sum(float(r.stats.get("compile_seconds", 0.0)) for r in results)}
    stats["mrays_per_s"] = stats["rays"] / stats["seconds"] / 1e6 if stats["seconds"] > 0 else 0.0
    timed = [r for r in results if "traversal_share" in r.stats]
    weight = sum(float(r.stats.get("seconds", 0.0)) for r in timed)
    if timed and len(timed) == len(results) and weight > 0:
        # time-weighted, like the share of one render of all the samples
        stats["traversal_share"] = sum(float(r.stats["traversal_share"]) * float(r.stats.get("seconds", 0.0))
                                       for r in timed) / weight
    codes = sorted({r.run.get("kernel_sha256") for r in results} - {None})
    if len(codes) > 1:
        warnings.warn(f"merge: the inputs were rendered by different renderer code (kernels "
                      f"{', '.join(codes)}); each is unbiased, but they are not one render",
                      RuntimeWarning, stacklevel=2)
    run = {"stop_reason": "merge", "complete": all(r.run.get("complete", True) for r in results),
           "inputs": len(results), "kernel_sha256": codes[0] if len(codes) == 1 else None}
    merged = [list(ranges[0])]
    for a, b in ranges[1:]:
        if a == merged[-1][1]:
            merged[-1][1] = b
        else:
            merged.append([a, b])
    return Result(s, sq, n, [tuple(r) for r in merged], dict(first.meta), stats, run,
                  layer_sum=ls, layer_sq=lq, ids=first.ids)


def chromaticities_of(space):
    """OpenEXR chromaticities of a working space name (None: linear Rec. 709)."""
    from .color import chromaticities
    return chromaticities(space or "linear_rec709")


def warn_nonfinite(count: int) -> None:
    if count:
        warnings.warn(f"{count} samples were not finite or beyond {SAMPLE_MAX:.3g} (the largest "
                      "sample value whose square the float64 sums can carry) and were excluded from "
                      "the estimate; please report the scene", RuntimeWarning,
                      stacklevel=3)
