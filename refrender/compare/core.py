"""One comparison: metrics, significance and diagnosis of a test frame."""
from __future__ import annotations

import math
import operator
import re
import time

import numpy as np

from .diagnose import diagnose
from .inputs import CompareError, Frame
from .metrics import all_metrics
from .significance import DEFAULT_ALPHA, analyse

#: frame sources read from 8-bit sRGB pictures
EIGHT_BIT_SOURCES = ("PNG", "JPG", "JPEG")
#: diagnoses reported whatever the verdict (they are facts, not fits)
UNGATED_FAULTS = ("non_finite", "non_finite_reference", "clipped_reference")


def _spp(frame: Frame):
    v = frame.metadata.get("spp")
    if isinstance(v, str):
        try:
            v = int(v)
        except ValueError:
            return None
    return int(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and v >= 1 else None


def compare(reference: Frame, test: Frame, *, mask=None, crop=None, tolerance=None,
            eps: float = 1e-2, peak: float | None = None, exposure: float = 0.0,
            grid=(8, 8), alpha: float = DEFAULT_ALPHA, spp_ref=None, spp_test=None) -> dict:
    """Compare two frames; returns a plain, JSON-ready dict.

    ``crop`` (x0, y0, x1, y1) cuts both frames (and the mask) first; ``mask``
    (H, W) bool selects the compared pixels.  Keys: ``inputs``, ``metrics``
    (see :func:`metrics.all_metrics`), ``significance`` (see
    :func:`significance.analyse`), ``diagnoses`` (see :func:`diagnose.diagnose`),
    ``verdict``, ``seconds``.  ``alpha`` is the false-alarm level of the
    verdict; ``spp_ref`` / ``spp_test`` default to the frames' metadata.
    Diagnoses (except non-finite pixels and clipping) are reported only when
    the verdict is significant, so they share its false-alarm level.
    """
    t0 = time.perf_counter()
    r, t = reference.rgb, test.rgb
    vr, vt = reference.variance, test.variance
    if r.shape != t.shape:
        raise CompareError(f"size mismatch: reference is {r.shape[1]}x{r.shape[0]}, "
                           f"test is {t.shape[1]}x{t.shape[0]}")
    if crop is not None:
        x0, y0, x1, y1 = crop
        cut = (slice(y0, y1), slice(x0, x1))
        r, t = r[cut], t[cut]
        vr = None if vr is None else vr[cut]
        vt = None if vt is None else vt[cut]
        mask = None if mask is None else mask[cut]
    sel = np.ones(r.shape[:2], dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    finite = np.isfinite(r).all(axis=-1) & np.isfinite(t).all(axis=-1)
    msel = sel & finite
    if not msel.any():
        raise CompareError("no finite pixel to compare")
    metrics = all_metrics(r, t, mask=msel, eps=eps, peak=peak, exposure=exposure)
    notes = []
    if vr is None:
        notes.append("the reference has no variance layer: significance tests are unavailable")
        sig = {"significant": None, "verdict": "no reference variance: significance not assessed",
               "notes": notes[:]}
    else:
        sig = analyse(r, t, vr, vt, mask=sel, grid=grid, tolerance=tolerance, alpha=alpha,
                      spp_ref=_spp(reference) if spp_ref is None else spp_ref,
                      spp_test=_spp(test) if spp_test is None else spp_test)
    diags = diagnose(r, t, vr, vt, mask=sel, quantised_ref=reference.source in EIGHT_BIT_SOURCES)
    if sig.get("significant") is False:
        diags = [d for d in diags if d["fault"] in UNGATED_FAULTS]
    verdict = sig["verdict"]
    return {
        "inputs": {"reference": reference.path, "test": test.path, "reference_source": reference.source,
                   "test_source": test.source, "width": int(r.shape[1]), "height": int(r.shape[0]),
                   "crop": None if crop is None else list(crop), "masked": mask is not None,
                   "pixels_compared": int(msel.sum()),
                   "reference_variance": vr is not None, "test_variance": vt is not None},
        "metrics": metrics,
        "significance": sig,
        "diagnoses": diags,
        "verdict": verdict,
        "seconds": time.perf_counter() - t0,
    }


_OPS = {">": operator.gt, ">=": operator.ge, "<": operator.lt, "<=": operator.le}
_COND = re.compile(r"^\s*([a-z_]+)(?:\.([RGBY]))?\s*(>=|<=|>|<)\s*([-+0-9.eE]+|inf)\s*$")
#: quantities a condition may name beside the metrics
EXTRA_QUANTITIES = ("fraction_significant", "bias_z", "diagnoses")


def value_of(report: dict, name: str, channel: str = "Y") -> float:
    """The quantity named in a gating condition."""
    m = report["metrics"]
    if name in m and isinstance(m[name], dict):
        return float(m[name][channel])
    sig = report["significance"]
    if name == "fraction_significant":
        return float(sig.get("fraction_significant", math.nan))
    if name == "bias_z":
        g = sig.get("global_test") or {}
        return abs(float(g.get("t", math.nan)))
    if name == "diagnoses":
        return float(len(report["diagnoses"]))
    raise CompareError(f"--fail-if: unknown quantity {name!r} (metrics: "
                       f"{', '.join(k for k, v in m.items() if isinstance(v, dict))}; "
                       f"also {', '.join(EXTRA_QUANTITIES)}, 'significant')")


def parse_condition(text: str):
    """``"relmse>0.01"``, ``"psnr.R<30"``, ``"significant"`` -> (name, channel, op, value)."""
    if text.strip() == "significant":
        return ("significant", None, None, None)
    m = _COND.match(text)
    if not m:
        raise CompareError(f"--fail-if: cannot parse {text!r} (expected e.g. relmse>0.01, psnr.R<30, significant)")
    name, ch, op, val = m.groups()
    return name, ch or "Y", op, float(val)


def failed_conditions(report: dict, conditions) -> list:
    """The conditions (strings) that hold for this report (each one fails the check)."""
    failed = []
    for text in conditions:
        name, ch, op, val = parse_condition(text)
        if name == "significant":
            if report["significance"].get("significant"):
                failed.append(text)
            continue
        v = value_of(report, name, ch)
        if math.isnan(v) or _OPS[op](v, val):
            failed.append(f"{text} (value {v:.6g})")
    return failed
