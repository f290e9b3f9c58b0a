"""Significance of a difference against the reference's own noise.

Per pixel and channel, z = (test - reference) / sqrt(var_ref + var_test), with
var the variance of each pixel's mean (the EXR ``variance`` layer).  Under the
null hypothesis (both images unbiased estimates of the same picture, each pixel
estimated independently) z is approximately standard normal, so:

- the fraction of values with |z| > 3 should be near erfc(3/sqrt 2) = 0.27 %
  (two-sided normal tail, common practice);
- the bias test, globally and per cell of a coarse grid, is the pooled z =
  sum(test - reference) / sqrt(sum(var_ref + var_test)) on luminance: the mean
  difference in units of its standard error (the mean of the per-pixel z and
  its standard error are reported beside it);
- luminance z uses the conservative bound sd(Y) <= sum_c w_c sd_c (exact when
  the channels of a pixel are fully correlated, as paths through grey
  surfaces make them), so it never overstates significance.

Values whose combined variance is zero are excluded (a difference there is
reported separately as "exact-pixel differences").
"""
from __future__ import annotations

import math

import numpy as np

from .metrics import LUMINANCE

#: |z| beyond which a value is called significant
Z_PIXEL = 3.0
#: two-sided normal tail probability of |z| > 3 (expected fraction by chance)
CHANCE_FRACTION = math.erfc(Z_PIXEL / math.sqrt(2.0))
#: threshold (in standard errors) of the global, regional and excess tests
Z_TEST = 4.0
#: the per-pixel excess counts only beyond this multiple of the normal fraction:
#: Monte Carlo pixel means at modest sample counts are skewed, so studentized
#: differences have heavier tails than a normal (measured: 0.63 % beyond 3 sigma
#: between unbiased 64- and 256-spp renders of the demo room, 80 x 60 pixels)
EXCESS_FACTOR = 3.0
#: fewer samples per pixel than this make per-pixel variance estimates too rough
#: for the excess test (a t distribution with 15 degrees of freedom already has
#: 0.90 % beyond |t| > 3, computed with scipy.stats.t)
MIN_SPP_PER_PIXEL_TEST = 16


def z_map(reference, test, var_ref, var_test=None):
    """(H, W, 3) z per channel and (H, W) z of luminance; NaN where undefined."""
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    vr = np.asarray(var_ref, dtype=np.float64)
    vt = np.zeros_like(vr) if var_test is None else np.asarray(var_test, dtype=np.float64)
    v = vr + vt
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(v > 0, (t - r) / np.sqrt(v), np.nan)
        sd_y = np.sqrt((np.sqrt(vr) @ LUMINANCE) ** 2 + (np.sqrt(vt) @ LUMINANCE) ** 2)
        dy = (t - r) @ LUMINANCE
        zy = np.where(sd_y > 0, dy / sd_y, np.nan)
    bad = ~np.isfinite(v)
    z[bad] = np.nan
    return z, zy


def _mean_test(z, d, v):
    """Bias test over a set of pixels: z values, luminance differences d and
    their variances v.  ``mean_z`` and ``se`` describe the per-pixel z; the
    test statistic ``t`` is the pooled z = sum d / sqrt(sum v), i.e. the mean
    difference in units of its standard error, which stays normal when the
    per-pixel estimates are skewed (a rare bright path lowers a pixel's mean
    and its variance estimate together, so per-pixel z is skewed negative)."""
    ok = np.isfinite(z) & np.isfinite(d) & np.isfinite(v)
    z, d, v = z[ok], d[ok], v[ok]
    n = z.size
    if n < 2:
        return {"n": int(n), "mean_z": math.nan, "se": math.nan, "t": math.nan}
    m = float(z.mean())
    se = float(z.std(ddof=1) / math.sqrt(n))
    sv = float(v.sum())
    t = float(d.sum() / math.sqrt(sv)) if sv > 0 else math.nan
    return {"n": int(n), "mean_z": m, "se": se, "t": t,
            "mean_difference": float(d.mean()), "mean_difference_se": math.sqrt(sv) / n}


def analyse(reference, test, var_ref, var_test=None, *, mask=None, grid=(8, 8),
            tolerance: float | None = None, min_spp: int | None = None) -> dict:
    """Significance summary of ``test`` against ``reference`` (plain dict).

    Keys: ``fraction_significant`` (|z| > 3 over channel values),
    ``fraction_expected``, ``excess_z`` (binomial z of the excess),
    ``global`` (mean z test on luminance), ``regions`` (a ``grid`` of cells
    with their mean-z test; cells beyond 4 standard errors are ``flagged``),
    ``relative_bias`` (of the mean luminance, with its standard error),
    ``min_spp`` (the smaller sample count of the two, when known: below
    ``MIN_SPP_PER_PIXEL_TEST`` the per-pixel variance estimates are too rough
    for the excess test, which is then reported but not used in the verdict),
    ``verdict`` and ``significant`` (bool), ``notes``, and with a
    ``tolerance`` the resolution check ``resolution``.
    """
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    h, w = r.shape[:2]
    sel = np.ones((h, w), dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    finite = np.isfinite(t).all(axis=-1) & np.isfinite(r).all(axis=-1)
    n_nonfinite = int((sel & ~finite).sum())
    sel = sel & finite
    notes = []
    if n_nonfinite:
        notes.append(f"{n_nonfinite} pixel(s) are not finite and are excluded from the tests")
    if var_test is None:
        notes.append("test has no variance layer: its variance is taken as zero")
    z, zy = z_map(r, t, var_ref, var_test)
    zc = z[sel]
    defined = np.isfinite(zc)
    n_def = int(defined.sum())
    vr = np.asarray(var_ref, dtype=np.float64)
    vt = np.zeros_like(vr) if var_test is None else np.asarray(var_test, dtype=np.float64)
    zero_var = ((vr + vt) == 0)[sel]
    exact_diff = int((zero_var & (t[sel] != r[sel])).sum())
    if exact_diff:
        notes.append(f"{exact_diff} channel value(s) differ where both variances are zero")
    out = {"z_threshold": Z_PIXEL, "nonfinite_pixels": n_nonfinite, "fraction_expected": CHANCE_FRACTION, "n_values": n_def,
           "exact_pixel_differences": exact_diff}
    if n_def == 0:
        out.update(fraction_significant=math.nan, excess_z=math.nan, significant=exact_diff > 0,
                   global_test=None, regions=[], relative_bias=None,
                   verdict="no pixel has a variance: significance cannot be assessed"
                   if not exact_diff else "the images differ where both have zero variance",
                   notes=notes + ["the reference has no variance estimate (not a refrender EXR?)"])
        return out
    n_sig = int((np.abs(zc[defined]) > Z_PIXEL).sum())
    frac = n_sig / n_def
    p = CHANCE_FRACTION
    excess_z = (n_sig - n_def * p) / math.sqrt(n_def * p * (1 - p))
    sdy2_map = (np.sqrt(vr) @ LUMINANCE) ** 2 + (np.sqrt(vt) @ LUMINANCE) ** 2
    dy_map = (t - r) @ LUMINANCE
    glob = _mean_test(zy[sel], dy_map[sel], sdy2_map[sel])
    # relative bias of the mean luminance (sum of differences against the summed variance)
    yr = r[sel] @ LUMINANCE
    dy = (t[sel] - r[sel]) @ LUMINANCE
    sdy2 = (np.sqrt(vr[sel]) @ LUMINANCE) ** 2 + (np.sqrt(vt[sel]) @ LUMINANCE) ** 2
    my = float(yr.mean())
    rel_bias = {"value": float(dy.mean() / my) if my != 0 else math.nan,
                "se": float(math.sqrt(sdy2.sum()) / dy.size / abs(my)) if my != 0 else math.nan}
    gy, gx = grid
    regions = []
    ys = np.linspace(0, h, gy + 1).astype(int)
    xs = np.linspace(0, w, gx + 1).astype(int)
    for i in range(gy):
        for j in range(gx):
            win = (slice(ys[i], ys[i + 1]), slice(xs[j], xs[j + 1]))
            cs = sel[win]
            res = _mean_test(zy[win][cs], dy_map[win][cs], sdy2_map[win][cs])
            res.update(x0=int(xs[j]), y0=int(ys[i]), x1=int(xs[j + 1]), y1=int(ys[i + 1]))
            res["flagged"] = bool(res["n"] >= 16 and abs(res["t"]) > Z_TEST)
            regions.append(res)
    flagged = [c for c in regions if c["flagged"]]
    global_sig = bool(glob["n"] >= 2 and abs(glob["t"]) > Z_TEST)
    excess_sig = bool(excess_z > Z_TEST and frac > EXCESS_FACTOR * p)
    if excess_sig and min_spp is not None and min_spp < MIN_SPP_PER_PIXEL_TEST:
        excess_sig = False
        notes.append(f"{frac:.2%} of values beyond |z| > 3, but a frame has only {min_spp} samples per pixel: "
                     f"its per-pixel variance estimates are too rough for this test (the pooled tests decide)")
    significant = global_sig or excess_sig or bool(flagged) or exact_diff > 0 or n_nonfinite > 0
    if not significant:
        verdict = "differences are consistent with the reference's noise"
    else:
        where = []
        if global_sig:
            sign = "brighter" if glob["mean_z"] > 0 else "darker"
            where.append(f"globally (test {sign}: mean difference {glob['t']:+.1f} standard errors)")
        if flagged:
            worst = max(flagged, key=lambda c: abs(c["t"]))
            where.append(f"{len(flagged)} of {len(regions)} regions, worst x {worst['x0']}–{worst['x1']}, "
                         f"y {worst['y0']}–{worst['y1']} ({worst['t']:+.1f} standard errors)")
        if excess_sig:
            where.append(f"{frac:.2%} of values beyond |z| > 3 against {p:.2%} by chance")
        if exact_diff:
            where.append(f"{exact_diff} value(s) differ where neither image has noise")
        if n_nonfinite:
            where.append(f"{n_nonfinite} non-finite pixel(s)")
        verdict = "significant bias, here: " + "; ".join(where)
    out.update(fraction_significant=frac, n_significant=n_sig, excess_z=float(excess_z),
               significant=significant, global_test=glob, regions=regions,
               relative_bias=rel_bias, verdict=verdict, notes=notes)
    if tolerance is not None:
        out["resolution"] = resolution(r, vr, tolerance, mask=sel)
        if not out["resolution"]["resolved"]:
            notes.append(out["resolution"]["message"])
    return out


def resolution(reference, var_ref, tolerance: float, *, mask=None) -> dict:
    """Can the reference resolve a relative per-pixel difference of ``tolerance``?

    A difference d of a pixel is detectable at 3 sigma when d > 3 sd_ref; we
    compare 3 x the median relative standard error of the luminance with the
    tolerance and estimate the sample-count factor needed (error ~ 1/sqrt(n)).
    """
    yr = np.asarray(reference, dtype=np.float64) @ LUMINANCE
    sd = np.sqrt(np.asarray(var_ref, dtype=np.float64)) @ LUMINANCE
    sel = np.isfinite(yr) & np.isfinite(sd) & (yr > 0)
    if mask is not None:
        sel &= mask
    if not sel.any():
        return {"tolerance": tolerance, "resolved": False, "median_rel_3sigma": math.nan,
                "samples_factor": math.nan, "message": "reference has no lit pixels to judge resolution"}
    rel3 = float(np.median(3.0 * sd[sel] / yr[sel]))
    ok = rel3 <= tolerance
    factor = (rel3 / tolerance) ** 2
    msg = ("" if ok else f"the reference is too noisy to resolve per-pixel differences of {tolerance:.3g}: "
           f"3 standard errors are {rel3:.3g} (median relative); about {factor:.1f}x its samples are needed")
    return {"tolerance": tolerance, "resolved": ok, "median_rel_3sigma": rel3,
            "samples_factor": factor, "message": msg}
