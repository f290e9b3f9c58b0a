"""Diagnosis of the classic faults of a test frame against a reference.

Each hypothesis is a model M(reference) of the test frame (scaled, sRGB- or
gamma-encoded, flipped, channels permuted, shifted, clamped).  Its fit is
judged by the noise-weighted squared residual

    chi2(M) = sum (test - M)^2 / (var_ref + var_test + floor)

over the finite, selected values.  ``confidence`` is the fraction of the
identity's excess chi2 (above the noise expectation N when variances are
known) that the model removes, clipped to [0, 1].  A hypothesis is reported
when it removes more than 25 (a chi-square with one degree of freedom exceeds
25 with probability 6e-7), when its confidence is at least 0.5 and when its
parameter is not the identity; hypotheses far behind the best one are side
effects of it and are dropped (a model leaving more than twice the best
model's excess chi2, and 25 more, is not reported).  Two independent renders of one scene leave
nothing to remove, so they trigger no diagnosis.

Robustness: the global scale is fitted by iteratively reweighted least
squares with Huber's loss (Huber 1964, "Robust estimation of a location
parameter", Ann. Math. Statist. 35, 73-101; k = :data:`HUBER_K` standard
deviations, quadratic inside and linear outside), so a few extreme pixels
(fireflies, emitters whose variance is near zero) cannot set it.

Non-finite test pixels are reported (count, first positions) and excluded
from everything else.  A reference without a variance layer whose values
reach exactly 1.0 in many pixels (an 8-bit picture, e.g. a ``--preview`` PNG,
clipped at 1) is reported as clipped, and its clipped pixels are left out of
every fit.  8-bit references (``quantised_ref``) get the variance of their
rounding, (1/255)^2/12 per sRGB code value, carried to linear.
"""
from __future__ import annotations

import itertools
import math

import numpy as np

from ..io.images import srgb_encode
from .metrics import LUMINANCE

MIN_IMPROVEMENT = 25.0
MIN_CONFIDENCE = 0.5
#: Huber's k, in standard deviations of the residual
HUBER_K = 4.0
#: fewest values at exactly 1.0 (and fraction of the compared values) to call a reference clipped
CLIP_MIN_VALUES, CLIP_MIN_FRACTION = 4, 1e-3


def quantisation_variance(linear) -> np.ndarray:
    """Variance of 8-bit sRGB rounding carried to linear values: (1/255)^2 / 12
    times the square of d(linear)/d(code) of the IEC 61966-2-1 decoding."""
    x = np.clip(np.asarray(linear, dtype=np.float64), 0.0, 1.0)
    enc = np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1 / 2.4) - 0.055)
    slope = np.where(enc <= 0.04045, 1 / 12.92, 2.4 / 1.055 * np.power((enc + 0.055) / 1.055, 1.4))
    return (slope / 255.0) ** 2 / 12.0

#: named scale factors (a scale within 1 % or 3 standard errors is called by name)
_NAMED = [(math.pi, "π"), (1 / math.pi, "1/π"), (2 * math.pi, "2π"), (1 / (2 * math.pi), "1/(2π)"),
          (4 * math.pi, "4π"), (1 / (4 * math.pi), "1/(4π)")]
_NAMED += [(2.0 ** k, f"{2 ** k if k > 0 else '1/' + str(2 ** -k)} ({k:+d} stop{'s' if abs(k) > 1 else ''})")
           for k in range(-8, 9) if k != 0]


def _golden(f, lo, hi, iters=30):
    g = (math.sqrt(5) - 1) / 2
    a, b = lo, hi
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = f(c), f(d)
    for _ in range(iters):
        if fc < fd:
            b, d, fd = d, c, fc
            c = b - g * (b - a)
            fc = f(c)
        else:
            a, c, fc = c, d, fd
            d = a + g * (b - a)
            fd = f(d)
    return (a + b) / 2


def name_scale(s: float, se: float = 0.0):
    """Name of a classic factor near ``s`` (π, 1/π, 2, 0.5, whole stops), or None."""
    best = None
    for v, label in _NAMED:
        tol = max(0.01, 3 * se / v) if se > 0 else 0.01
        if abs(s / v - 1) < tol and (best is None or abs(s / v - 1) < abs(s / best[0] - 1)):
            best = (v, label)
    return None if best is None else best[1]


def shift_image(image, dx: float, dy: float, *, squared_weights: bool = False) -> np.ndarray:
    """``image`` moved by (dx, dy) pixels (right, down): out(x, y) = in(x - dx, y - dy)
    by bilinear interpolation, borders replicated (excluded from fits).

    ``squared_weights=True`` combines with the squared interpolation weights:
    applied to a variance image it gives the variance of the interpolated one
    (independent pixels)."""
    img = np.asarray(image, dtype=np.float64)
    h, w = img.shape[:2]
    ix, iy = math.floor(dx), math.floor(dy)
    fx, fy = dx - ix, dy - iy
    p = 1 if squared_weights else 0
    pad = ((abs(iy) + 2, abs(iy) + 2), (abs(ix) + 2, abs(ix) + 2)) + ((0, 0),) * (img.ndim - 2)
    big = np.pad(img, pad, mode="edge")
    oy, ox = abs(iy) + 2, abs(ix) + 2
    out = np.zeros_like(img)
    for ky, wy in ((0, 1 - fy), (1, fy)):
        for kx, wx in ((0, 1 - fx), (1, fx)):
            wgt = (wy * wx) ** (2 if p else 1)
            if wgt == 0:
                continue
            y0 = oy - iy - ky
            x0 = ox - ix - kx
            out += wgt * big[y0:y0 + h, x0:x0 + w]
    return out


def phase_shift(reference, test) -> tuple:
    """Translation (dx, dy) of ``test`` relative to ``reference`` by phase
    correlation of the tone-mapped luminance (Hann window), with its response."""
    import cv2
    def prep(x):
        y = np.nan_to_num(np.asarray(x, dtype=np.float64) @ LUMINANCE, nan=0.0, posinf=0.0, neginf=0.0)
        y = np.maximum(y, 0.0)
        return np.ascontiguousarray(y / (1.0 + y))
    a, b = prep(reference), prep(test)
    win = cv2.createHanningWindow(a.shape[::-1], cv2.CV_64F)
    (dx, dy), resp = cv2.phaseCorrelate(a, b, win)
    return float(dx), float(dy), float(resp)


class _Fit:
    """Weighted residuals of models of the test frame on the selected values."""

    def __init__(self, r, t, var_ref, var_test, sel):
        self.r, self.t, self.sel = r, t, sel
        self.vr = np.zeros_like(r) if var_ref is None else np.where(np.isfinite(var_ref), var_ref, 0.0)
        self.vt = np.zeros_like(r) if var_test is None else np.where(np.isfinite(var_test), var_test, 0.0)
        v = self.vr + self.vt
        self.has_var = var_ref is not None and bool((v[sel] > 0).any())
        scale = float(np.mean(np.abs(r[sel]))) if sel.any() else 1.0
        # floor: 0.1 % of the value (exactly known pixels, e.g. emitters seen directly,
        # still admit interpolation and storage rounding) and 1e-4 of the mean level
        self.floor = (1e-3 * r) ** 2 + (1e-4 * scale) ** 2 + 1e-300
        self.w = 1.0 / (v + self.floor)
        self.sel3 = np.broadcast_to(sel[..., None], r.shape)

    def chi2(self, model, region=None, var_model=None):
        """Weighted squared residual; ``var_model`` replaces var_ref when the
        model transforms the reference's noise (interpolation averages it)."""
        sel = self.sel if region is None else self.sel & region
        m = sel[..., None] if self.t.ndim == 3 else sel
        w = self.w if var_model is None else 1.0 / (self.vt + var_model + self.floor)
        d = self.t - model
        d *= d
        d *= w
        n = int(sel.sum()) * (self.t.shape[2] if self.t.ndim == 3 else 1)
        return float(np.sum(d, where=np.broadcast_to(m, d.shape))), n

    def explained(self, c_id, c_m, n):
        floor = n if self.has_var else 0.0
        excess = c_id - floor
        if excess <= 0:
            return 0.0
        return float(np.clip((c_id - c_m) / excess, 0.0, 1.0))


def _clipped_reference(r, var_ref, sel):
    """(H, W) pixels of a variance-less reference with a channel at exactly 1.0, if it looks clipped."""
    if var_ref is not None:
        return None
    at = (np.abs(r - 1.0) <= 1e-6).any(axis=-1) & sel
    n_at = int(at.sum())
    if n_at >= max(CLIP_MIN_VALUES, CLIP_MIN_FRACTION * int(sel.sum())) and float(r[sel].max()) <= 1.0 + 1e-6:
        return at
    return None


def diagnose(reference, test, var_ref=None, var_test=None, *, mask=None, quantised_ref: bool = False) -> list:
    """Detected faults, most confident first: dicts with ``fault``,
    ``parameter`` (its estimate), ``confidence`` (0–1), ``detail`` (a sentence)
    and ``chi2_removed``.  ``quantised_ref``: the reference is an 8-bit sRGB
    picture (its rounding is added to its variance)."""
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    h, w = r.shape[:2]
    sel = np.ones((h, w), dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    found = []
    bad_t = ~np.isfinite(t).all(axis=-1) & sel
    if bad_t.any():
        ys, xs = np.nonzero(bad_t)
        first = ", ".join(f"({x}, {y})" for x, y in list(zip(xs, ys))[:5])
        kinds = []
        if np.isnan(t[bad_t]).any():
            kinds.append("NaN")
        if np.isinf(t[bad_t]).any():
            kinds.append("inf")
        found.append({"fault": "non_finite", "parameter": int(bad_t.sum()), "confidence": 1.0,
                      "detail": f"{int(bad_t.sum())} test pixel(s) are {'/'.join(kinds)}, first at (x, y) {first}",
                      "chi2_removed": math.nan})
    bad_r = ~np.isfinite(r).all(axis=-1) & sel
    if bad_r.any():
        found.append({"fault": "non_finite_reference", "parameter": int(bad_r.sum()), "confidence": 1.0,
                      "detail": f"{int(bad_r.sum())} reference pixel(s) are not finite (excluded)",
                      "chi2_removed": math.nan})
    sel = sel & ~bad_t & ~bad_r
    clip = _clipped_reference(np.where(np.isfinite(r), r, 0.0), var_ref, sel)
    if clip is not None:
        n_c = int(clip.sum())
        found.append({"fault": "clipped_reference", "parameter": 1.0, "confidence": 1.0,
                      "detail": f"reference clipped at 1.0 in {n_c / max(1, int(sel.sum())):.1%} of pixels "
                                f"({n_c}; left out of the fits)", "chi2_removed": math.nan, "pixels": n_c})
        sel = sel & ~clip
    if sel.sum() < 16:
        return found
    r = np.where(np.isfinite(r), r, 0.0)
    t = np.where(np.isfinite(t), t, 0.0)
    if quantised_ref:
        var_ref = quantisation_variance(r) + (0.0 if var_ref is None else np.asarray(var_ref, dtype=np.float64))
    fit = _Fit(r, t, var_ref, var_test, sel)
    c_id, n = fit.chi2(r)
    cands = []

    def consider(fault, param, model, detail, region=None, nontrivial=True, var_model=None):
        if region is None:
            ci, nn = c_id, n
        else:
            ci, nn = fit.chi2(r, region)
        cm, _ = fit.chi2(model, region, var_model)
        removed = ci - cm
        conf = fit.explained(ci, cm, nn)
        if nontrivial and removed > MIN_IMPROVEMENT and conf >= MIN_CONFIDENCE:
            cands.append({"fault": fault, "parameter": param, "confidence": round(conf, 4),
                          "detail": detail, "chi2_removed": removed,
                          "_excess": cm - (nn if fit.has_var else 0.0)})
            return cands[-1]
        return None

    # --- global scale (weighted least squares)
    s_sel = fit.sel3
    sw = fit.w[s_sel]
    rs, ts = r[s_sel], t[s_sel]
    num = float(np.sum(sw * rs * ts))
    den = float(np.sum(sw * rs ** 2))
    if den > 0:
        s = num / den
        for _ in range(8):          # IRLS with Huber weights min(1, k / |z|)
            z = np.abs(ts - s * rs) * np.sqrt(sw)
            hw = sw * np.minimum(1.0, HUBER_K / np.maximum(z, 1e-300))
            den_h = float(np.sum(hw * rs ** 2))
            if not den_h > 0:
                break
            s_new = float(np.sum(hw * rs * ts)) / den_h
            if abs(s_new - s) <= 1e-10 * abs(s):
                s = s_new
                break
            s = s_new
        se = 1.0 / math.sqrt(den) if fit.has_var else 0.0
        label = name_scale(s, se)
        d = f"test ≈ {s:.4g} × reference" + (f" (near {label})" if label else "")
        if se:
            d += f", ± {se:.2g}"
        got = consider("scale", s, s * r, d, nontrivial=abs(s - 1) > max(0.005, 4 * se))
        if got is not None:
            got["named"] = label
    # --- encoding: sRGB or a power-law gamma
    rp = np.maximum(r, 0.0)
    enc = srgb_encode(rp)
    stride = max(2, int(math.ceil(math.sqrt(h * w / 250_000))))   # the gamma search uses <= ~250 k pixels

    sub_cut = (slice(None, None, stride), slice(None, None, stride))
    gfit = _Fit(r[sub_cut], t[sub_cut], fit.vr[sub_cut], fit.vt[sub_cut], sel[sub_cut])
    rp_sub = rp[sub_cut]

    def chi_gamma(g):
        return gfit.chi2(rp_sub ** (1.0 / g))[0]
    g = _golden(chi_gamma, 1.0, 3.5, iters=25)
    c_srgb, _ = fit.chi2(enc)
    c_gam, _ = fit.chi2(rp ** (1.0 / g))
    if c_srgb <= 1.05 * c_gam:
        consider("srgb_encoded", "sRGB", enc, "test looks sRGB-encoded (IEC 61966-2-1), not linear")
    else:
        consider("gamma_encoded", round(g, 3), rp ** (1.0 / g), f"test ≈ reference^(1/{g:.3g}) (gamma-encoded)",
                 nontrivial=abs(g - 1) > 0.05)
    # --- flips
    consider("flip_vertical", "rows reversed", r[::-1], "test is upside down (rows reversed)")
    consider("flip_horizontal", "columns reversed", r[:, ::-1], "test is mirrored left-right")
    consider("rotate_180", "rows and columns reversed", r[::-1, ::-1], "test is rotated by 180°")
    # --- channel permutations
    if r.shape[2] == 3:
        for perm in itertools.permutations(range(3)):
            if perm == (0, 1, 2):
                continue
            names = "".join("RGB"[i] for i in perm)
            consider("channel_swap", names, r[..., list(perm)],
                     f"test channels R, G, B hold the reference's {', '.join(names)}")
    # --- shift (phase correlation, refined by least squares)
    dx, dy, resp = phase_shift(r, t)
    if math.hypot(dx, dy) < max(h, w) / 4:
        def region_for(ax, ay):
            mx, my = int(math.ceil(abs(ax))) + 1, int(math.ceil(abs(ay))) + 1
            reg = np.zeros((h, w), dtype=bool)
            reg[my:h - my, mx:w - mx] = True
            return reg
        # refine on a central window of at most 384 x 384 pixels (the shift is global)
        wy, wx = min(h, 384), min(w, 384)
        cy, cx = (h - wy) // 2, (w - wx) // 2
        win = (slice(cy, cy + wy), slice(cx, cx + wx))
        sfit = _Fit(r[win], t[win], fit.vr[win], fit.vt[win], sel[win])
        mx, my = int(math.ceil(abs(dx))) + 2, int(math.ceil(abs(dy))) + 2
        reg0 = np.zeros((wy, wx), dtype=bool)
        reg0[my:wy - my, mx:wx - mx] = True
        rw, vw = r[win], fit.vr[win]

        def chi_shift(ax, ay):
            return sfit.chi2(shift_image(rw, ax, ay), reg0, shift_image(vw, ax, ay, squared_weights=True))[0]
        for _ in range(2):
            dx = _golden(lambda v: chi_shift(v, dy), dx - 0.75, dx + 0.75, iters=18)
            dy = _golden(lambda v: chi_shift(dx, v), dy - 0.75, dy + 0.75, iters=18)
        reg = region_for(dx, dy)
        consider("shift", [round(dx, 3), round(dy, 3)], shift_image(r, dx, dy),
                 f"test is shifted by ({dx:+.2f}, {dy:+.2f}) px (right, down) "
                 f"(phase-correlation response {resp:.2f})", region=reg,
                 nontrivial=math.hypot(dx, dy) > 0.1,
                 var_model=shift_image(fit.vr, dx, dy, squared_weights=True))
    # --- clamped highlights
    tv = t[fit.sel3]
    if tv.size:
        c = float(tv.max())
        at_c = np.abs(t - c) <= 1e-6 * max(abs(c), 1e-30)
        n_at = int((at_c & fit.sel3).sum())
        if c > 0 and n_at >= max(4, 1e-4 * tv.size) and float(r[fit.sel3].max()) > c:
            frac = n_at / tv.size
            consider("clamp", c, np.minimum(r, c),
                     f"test values are clipped at {c:.4g} ({n_at} values, {frac:.2%}); "
                     f"the reference goes up to {float(r[fit.sel3].max()):.4g}")
    # --- reconstruction filter wider than the reference's, and working colour space
    from .faults import consider_blur, consider_color_space
    consider_blur(consider, r, fit, sel)
    consider_color_space(consider, r, t, fit)
    # rank by the residual left (excess chi2 over the noise expectation); a model that
    # leaves more than twice the best one's residual (and 25 more) is a side effect of it
    cands.sort(key=lambda c: c["_excess"])
    if cands:
        best = max(cands[0]["_excess"], 0.0)
        cands = [c for c in cands if c["_excess"] <= max(2.0 * best, best + MIN_IMPROVEMENT)]
    for c in cands:
        del c["_excess"]
    # one entry per fault kind (the best channel permutation)
    seen, kept = set(), []
    for c in cands:
        if c["fault"] not in seen:
            seen.add(c["fault"])
            kept.append(c)
    return found + kept
