"""Long renders: budgets, the target-error statistic, checkpoints, signals, safety.

The render loop itself is in :mod:`refrender.render`; this module holds what
it needs to run unattended for hours:

* :func:`parse_duration` for ``--time`` and ``--checkpoint-every``;
* :func:`target_statistic` and :func:`target_schedule`, which define exactly
  when ``--target-error`` stops a render;
* :class:`StopOnSignal`, which turns SIGINT/SIGTERM into a flag that the
  render loop reads between passes;
* :func:`check_fits`, which refuses up front a render whose accumulators do
  not fit in memory or whose state file and EXR do not fit on disk;
* :func:`check_resumable`, which refuses to resume from a checkpoint made
  with another scene, seed, estimator setting or kernel code.
"""
from __future__ import annotations

import math
import os
import re
import shutil
import signal
from pathlib import Path

import numpy as np

from .errors import RenderError

#: Default interval between checkpoints of ``refrender render`` (seconds).
DEFAULT_CHECKPOINT_EVERY = 300.0
#: ``--target-error`` is not tested before this many samples per pixel: below
#: it the variance estimate of a pixel is itself too noisy to stop on.
DEFAULT_MIN_SPP = 16
#: bytes per pixel of the state file (float64 sum and sum of squares, int64 count)
STATE_BYTES_PER_PIXEL = 8 * (3 + 3 + 1)
#: bytes per pixel of the EXR before compression (float32 mean and variance)
EXR_BYTES_PER_PIXEL = 4 * (3 + 3)
#: bytes of working memory per pixel during a render: the accumulators and the
#: float64 mean/variance images derived from them at a checkpoint
RENDER_BYTES_PER_PIXEL = STATE_BYTES_PER_PIXEL + 8 * (3 + 3) * 2 + 4 * (3 + 3)
#: exit statuses after a checkpoint on a signal (128 + signal number, as shells report)
EXIT_STATUS = {"SIGINT": 130, "SIGTERM": 143}

_UNITS = {"s": 1.0, "m": 60.0, "h": 3600.0, "d": 86400.0}
_DURATION = re.compile(r"(\d+(?:\.\d*)?|\.\d+)\s*([smhd])")


def parse_duration(text, field: str) -> float:
    """Seconds in a duration such as ``90s``, ``45m``, ``8h``, ``1h30m`` or ``2.5``.

    A bare number is seconds.  Units: ``s``, ``m``, ``h``, ``d``; several
    may be combined (``1h30m``).  Raises RenderError naming ``field``.
    """
    s = str(text).strip().lower()
    try:
        value = float(s)
    except ValueError:
        pos, value = 0, 0.0
        for m in _DURATION.finditer(s):
            if m.start() != pos:
                break
            value += float(m.group(1)) * _UNITS[m.group(2)]
            pos = m.end()
        if pos != len(s) or not s:
            raise RenderError(f"{field}: expected a duration such as 90s, 45m, 8h or 1h30m, "
                              f"got {text!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise RenderError(f"{field}: must be a positive duration, got {text!r}")
    return value


def format_duration(seconds: float) -> str:
    """``3725.2`` -> ``1h02m05s`` (for messages)."""
    s = int(round(seconds))
    if s < 60:
        return f"{seconds:.1f}s"
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h{m:02d}m{s:02d}s" if h else f"{m}m{s:02d}s"


# ----------------------------------------------------------------------------- target error

def target_statistic(mean, variance) -> float:
    """The statistic ``--target-error`` compares with its threshold.

    The 95th percentile, over all pixels of the window, of the relative
    standard error of each pixel's BT.709 luminance,
    ``sqrt(Var[Y]) / max(|Y|, 1e-3 * mean(|Y|))`` (see
    :func:`refrender.result.relative_error`; the floor keeps black pixels from
    dominating).  ``numpy.percentile`` with its default linear interpolation.
    Returns inf while any pixel has fewer than 2 samples.
    """
    from .result import relative_error
    rel = relative_error(mean, variance)
    if not np.all(np.isfinite(rel)):
        return math.inf
    return float(np.percentile(rel, 95))


def target_schedule(min_spp: int = DEFAULT_MIN_SPP):
    """Samples per pixel at which ``--target-error`` is tested, in order.

    ``min_spp``, then steps of ``max(1, 2**(floor(log2 k) - 3))``: about 1/8
    of the current count (16, 18, 20, … 32, 36, 40, … 64, 72, …).  The
    schedule does not depend on timing, so a target-error render stops at the
    same sample count on any machine, and the image is reproducible.
    """
    k = int(min_spp)
    while True:
        yield k
        k += max(1, 1 << max(0, k.bit_length() - 1 - 3))


def next_check(done: int, min_spp: int) -> int:
    """First sample count of :func:`target_schedule` that is > ``done``."""
    for k in target_schedule(min_spp):
        if k > done:
            return k
    raise AssertionError  # pragma: no cover


# ----------------------------------------------------------------------------- signals

class StopOnSignal:
    """Context manager: SIGINT and SIGTERM set a flag instead of killing.

    The render loop calls the instance between passes; it returns the signal's
    name (``"SIGINT"``/``"SIGTERM"``) once one has arrived, else None.  A
    second signal of the same kind restores the default behaviour and raises
    KeyboardInterrupt (SIGINT) or exits (SIGTERM) at once, without a new
    checkpoint.  Only the main thread can install handlers; elsewhere this
    is a no-op.
    """

    SIGNALS = ("SIGINT", "SIGTERM")

    def __init__(self):
        self.received = None
        self._old = {}

    def _handler(self, signum, frame):
        name = signal.Signals(signum).name
        if self.received is not None:
            signal.signal(signum, signal.SIG_DFL)
            if signum == signal.SIGINT:
                raise KeyboardInterrupt
            raise SystemExit(EXIT_STATUS.get(name, 128 + signum))
        self.received = name

    def __call__(self):
        return self.received

    def __enter__(self):
        try:
            for name in self.SIGNALS:
                sig = getattr(signal, name)
                self._old[sig] = signal.signal(sig, self._handler)
        except ValueError:      # not the main thread
            pass
        return self

    def __exit__(self, *exc):
        for sig, old in self._old.items():
            signal.signal(sig, old)
        self._old.clear()
        return False


# ----------------------------------------------------------------------------- safety

def available_memory() -> int | None:
    """Bytes of memory available to a new allocation (``MemAvailable``), or None."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def format_bytes(n: float) -> str:
    """A size in the binary unit that fits it: 512 B, 3.5 KiB, 8.00 MiB, 1.20 GiB, 2.00 TiB."""
    n = float(n)
    for unit, scale in (("TiB", 2 ** 40), ("GiB", 2 ** 30), ("MiB", 2 ** 20), ("KiB", 2 ** 10)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{int(n)} B"


_gib = format_bytes   # (the old name)


def check_memory(h: int, w: int) -> None:
    """Refuse a window whose render needs more memory than is available."""
    need = h * w * RENDER_BYTES_PER_PIXEL
    avail = available_memory()
    if avail is not None and need > avail:
        raise RenderError(f"film: {w}x{h} needs about {format_bytes(need)} of memory, "
                          f"only {format_bytes(avail)} available")


#: bytes of headers and metadata per file, an upper bound (JSON metadata, zip and EXR headers)
FILE_OVERHEAD = 2 ** 16


def file_bytes(h: int, w: int, preview: bool = False) -> dict:
    """Upper bounds of the bytes of each output file: ``state``, ``exr`` (uncompressed), ``preview``."""
    n = h * w
    sizes = {"state": n * STATE_BYTES_PER_PIXEL + FILE_OVERHEAD, "exr": n * EXR_BYTES_PER_PIXEL + FILE_OVERHEAD}
    if preview:
        sizes["preview"] = 4 * n + FILE_OVERHEAD
    return sizes


def output_bytes(h: int, w: int, preview: bool = False, existing: int = 0) -> int:
    """Free bytes that writing (and re-writing at every checkpoint) the outputs needs.

    A checkpoint writes each file under a temporary name beside the old one
    and then renames it (state first, then EXR, then preview), so at its peak
    the folder holds every output plus a second copy of the largest one.
    ``existing``: bytes of the outputs already on disk (they are replaced, so
    their space is reused).
    """
    sizes = file_bytes(h, w, preview)
    return max(sum(sizes.values()) - existing, 0) + max(sizes.values())


def check_disk(folder, h: int, w: int, what: str = "--output", preview: bool = False,
               existing=()) -> None:
    """Refuse a render whose outputs and checkpoints cannot fit in the free space of ``folder``.

    ``existing``: paths of outputs that may already exist (their sizes are reused).
    """
    folder = Path(folder) if str(folder) else Path(".")
    have = 0
    for p in existing:
        try:
            have += Path(p).stat().st_size
        except (OSError, ValueError):
            pass
    need = output_bytes(h, w, preview, existing=have)
    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return
    if need > free:
        raise RenderError(f"{what}: the state file and EXR of a {w}x{h} render and a checkpoint's "
                          f"temporary copy need about {format_bytes(need)}, only {format_bytes(free)} "
                          f"free in {str(folder)!r}")


def check_fits(h: int, w: int, folder=None, *, preview: bool = False) -> None:
    """Memory check, and the disk check when an output folder is given."""
    check_memory(h, w)
    if folder is not None:
        check_disk(folder, h, w, preview=preview)


# ----------------------------------------------------------------------------- resume

def kernel_sha256() -> str:
    """Hash of the kernel sources (the numba cache key): equal hashes give
    bit-identical samples."""
    from ._jit import _source_hash
    return _source_hash()


def check_resumable(prev, meta: dict, first_sample: int, where: str = "resume") -> int:
    """Check that ``prev`` (a Result from a state file) can be continued.

    ``meta`` are the estimator settings of the new render (ESTIMATOR_KEYS).
    Returns the number of samples per pixel already done.  Raises RenderError
    naming the first field that differs.
    """
    from .result import MERGE_KEYS
    for key in MERGE_KEYS:
        if prev.meta.get(key) != meta.get(key):
            what = "scene (content hash)" if key == "scene_sha256" else key
            raise RenderError(f"{where}: the checkpoint differs in {what}: "
                              f"{prev.meta.get(key)!r} in the checkpoint, {meta.get(key)!r} now")
    code = prev.run.get("kernel_sha256")
    if code is not None and code != kernel_sha256():
        raise RenderError(f"{where}: the checkpoint was made by other renderer code "
                          f"(kernels {code}, now {kernel_sha256()}); it would not continue "
                          "bit-identically: merge a new sample range instead")
    if len(prev.sample_ranges) != 1:
        raise RenderError(f"{where}: the checkpoint holds several sample ranges "
                          f"{prev.sample_ranges} (a merge); only a single render can be resumed")
    a, b = prev.sample_ranges[0]
    if a != first_sample:
        raise RenderError(f"{where}: the checkpoint starts at sample {a}, "
                          f"--first-sample is {first_sample}")
    return b - a
