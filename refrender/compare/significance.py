"""Significance of a difference against both frames' noise, with a stated false-alarm level.

Every pixel of a refrender frame is the mean of n independent samples and
carries the variance of that mean, v = s^2 / n (unbiased sample variance s^2).
Pixels are estimated independently of each other.  The null hypothesis is
that both frames are unbiased estimates of the same picture.  Under it, for
each pixel and channel, d = test - reference has E[d] = 0 and
E[d^2 - v_ref - v_test] = 0 *exactly*, whatever the distribution of the
samples (heavy tails, skew, fireflies): only independence and unbiasedness are
assumed.  The verdict is built on pooled statistics of these two identities,
which average over many pixels, instead of on per-pixel |z| counts, whose
tails depend on the (unknown, skewed) distribution of each pixel's samples:

- **bias, global and per region** (regions: the ``grid`` and every coarser
  grid halving it, down to 2 x 2): on BT.709 luminance,
  T = sum d / sqrt(sum v) with the Welch-Satterthwaite degrees of freedom
  (Satterthwaite 1946; Welch 1947) of the pooled variance,
  nu = (sum v)^2 / sum(v_ref^2 / (n_ref - 1) + v_test^2 / (n_test - 1)),
  two-sided Student-t p value.  Luminance standard deviations use the bound
  sd(Y) <= sum_c w_c sd_c (exact for fully correlated channels), so T is never
  overstated.
- **dispersion** (extra noise, shifts, blur, under-reported variance): per
  pixel q = sum_c (d_c^2 - v_ref,c - v_test,c), E[q] = 0 under the null;
  the self-normalised sum Z = sum q / sqrt(sum q^2) is tested one-sided with
  the normal tail.  A right-skewed q (the usual case: d^2 has a long upper
  tail) makes the upper tail of Z lighter than normal, i.e. the test
  conservative.  Needs both variance layers.

The family false-alarm level ``alpha`` (default :data:`DEFAULT_ALPHA`) is split
by Bonferroni: a third to the global bias test, a third shared by all tested
regions, a third to the dispersion test; so P(verdict "significant" | null)
<= alpha up to the normal/t approximation of the pooled sums.  The rate
measured on real null pairs (``tools/calibrate_diff.py``) is in the README.

Per-pixel Welch t values, t = d / sqrt(v_ref + v_test) with Satterthwaite
degrees of freedom from each frame's spp, are kept for the z map and the
descriptive ``fraction_significant`` (|t| > 3) with its expected fraction under
a t distribution; they do not enter the verdict (their tails depend on the
sample distribution: measured 0.63 % beyond 3 between unbiased 64- and 256-spp
renders of the demo room, where a t distribution predicts 0.28 %).

Values whose combined variance is zero are excluded; a difference there larger
than float32 storage rounding is reported separately ("exact-pixel
differences") and is significant.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import special as _sp

from .metrics import LUMINANCE

#: per-pixel |t| beyond which a value is counted in ``fraction_significant`` (descriptive)
Z_PIXEL = 3.0
#: two-sided normal tail probability of |z| > 3
CHANCE_FRACTION = math.erfc(Z_PIXEL / math.sqrt(2.0))
#: default family false-alarm level of the verdict (probability that two
#: unbiased frames of the same picture are called "significant")
DEFAULT_ALPHA = 0.002
#: fewest pixels for a region (or the whole frame) to be tested
MIN_PIXELS = 16
#: fewest effective samples (see _events) for a region (or the whole frame) to be tested
MIN_EVENTS = 100.0
#: relative difference below which two zero-variance values count as equal
#: (float32 storage of a mean rounds at 6e-8 relative; float16 at 5e-4)
EXACT_RTOL = 1e-6


def _t_sf(x, df):
    """Upper tail of Student's t (scipy.special.stdtr), the normal one for infinite df."""
    df = np.asarray(df, dtype=np.float64)
    fin = np.isfinite(df)
    out = np.where(fin, _sp.stdtr(np.where(fin, df, 1.0), -x), _sp.ndtr(-x))
    return out if out.ndim else float(out)


def _spp_term(n):
    """1 / (n - 1) for the Satterthwaite sum; 0 when n is unknown (normal limit)."""
    if n is None or not n > 1:
        return 0.0
    return 1.0 / (float(n) - 1.0)


def welch_t_map(reference, test, var_ref, var_test=None, *, spp_ref=None, spp_test=None):
    """Per-value Welch t and its Satterthwaite degrees of freedom.

    Returns ``(t, df, t_y, df_y)``: (H, W, 3) arrays per channel and (H, W)
    arrays of luminance (standard deviation bounded by sum_c w_c sd_c); NaN
    where the combined variance is zero or not finite; df is inf where neither
    spp is known.
    """
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    vr = np.asarray(var_ref, dtype=np.float64)
    vt = np.zeros_like(vr) if var_test is None else np.asarray(var_test, dtype=np.float64)
    kr, kt = _spp_term(spp_ref), _spp_term(spp_test if var_test is not None else None)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v = vr + vt
        tm = np.where(v > 0, (t - r) / np.sqrt(v), np.nan)
        den = vr * vr * kr + vt * vt * kt
        df = np.where(den > 0, v * v / den, np.inf)
        svr, svt = np.sqrt(vr) @ LUMINANCE, np.sqrt(vt) @ LUMINANCE
        vy = svr ** 2 + svt ** 2
        ty = np.where(vy > 0, ((t - r) @ LUMINANCE) / np.sqrt(vy), np.nan)
        dy = svr ** 4 * kr + svt ** 4 * kt
        dfy = np.where(dy > 0, vy * vy / dy, np.inf)
    tm[~np.isfinite(v)] = np.nan
    ty[~np.isfinite(vy)] = np.nan
    return tm, df, ty, dfy


def z_map(reference, test, var_ref, var_test=None):
    """(H, W, 3) t per channel and (H, W) t of luminance (see welch_t_map)."""
    t, _, ty, _ = welch_t_map(reference, test, var_ref, var_test)
    return t, ty


def pooled_bias(d, sd_ref, sd_test, *, spp_ref=None, spp_test=None) -> dict:
    """Bias test over a set of values: differences ``d`` and the standard
    deviations of the two means (1-D arrays).  T = sum d / sqrt(sum v), its
    Welch-Satterthwaite degrees of freedom and two-sided Student-t p value."""
    v = sd_ref ** 2 + sd_test ** 2
    ok = np.isfinite(d) & np.isfinite(v)
    d, v, sr, stt = d[ok], v[ok], sd_ref[ok], sd_test[ok]
    n = int(d.size)
    out = {"n": n, "t": math.nan, "df": math.nan, "p": math.nan}
    sv = float(v.sum())
    if n < 2 or not sv > 0:
        return out
    kr, kt = _spp_term(spp_ref), _spp_term(spp_test)
    den = float(np.sum(sr ** 4) * kr + np.sum(stt ** 4) * kt)
    df = sv * sv / den if den > 0 else math.inf
    t = float(d.sum() / math.sqrt(sv))
    p = float(2.0 * _t_sf(abs(t), df))
    out.update(t=t, df=df, p=p, mean_difference=float(d.mean()), mean_difference_se=math.sqrt(sv) / n)
    return out


def dispersion_test(q) -> dict:
    """One-sided test of E[q] = 0 against E[q] > 0 for independent per-pixel
    q = sum_c (d_c^2 - v_ref,c - v_test,c): Z = sum q / sqrt(sum q^2), normal tail."""
    q = q[np.isfinite(q)]
    n = int(q.size)
    s2 = float(np.sum(q * q))
    if n < MIN_PIXELS or not s2 > 0:
        return {"n": n, "z": math.nan, "p": math.nan, "ratio": math.nan}
    z = float(q.sum() / math.sqrt(s2))
    return {"n": n, "z": z, "p": float(_sp.ndtr(-z)), "ratio": math.nan}


def pooled_variances(var_ref, var_test, spp_ref, spp_test):
    """Variances of the two means for the pooled tests: with both spp known,
    sigma^2 = max(n_ref v_ref, n_test v_test) per value and v = sigma^2 / n for
    each frame (each at least its own estimate); otherwise the frames' own."""
    vr = np.asarray(var_ref, dtype=np.float64)
    vt = np.zeros_like(vr) if var_test is None else np.asarray(var_test, dtype=np.float64)
    if spp_ref is None or spp_test is None:
        return vr, vt
    s2 = np.maximum(vr * float(spp_ref), vt * float(spp_test))
    return s2 / float(spp_ref), s2 / float(spp_test)


def _events(ay_r, ay_t, sd_r, sd_t):
    """Effective number of independent samples behind the noisier frame's sum over a
    set of pixels: (sum |Y|)^2 / sum var(Y), the count of rare contributions the
    sum holds when its samples are mostly zero (a Poisson count has mean^2/var = mean).
    Below MIN_EVENTS the sum is too skewed for a normal approximation."""
    out = []
    for ay, sd in ((ay_r, sd_r), (ay_t, sd_t)):
        ok = np.isfinite(ay) & np.isfinite(sd)
        v = float(np.sum(sd[ok] ** 2))
        out.append(float(np.sum(ay[ok])) ** 2 / v if v > 0 else math.inf)
    return min(out)


def _region_tests(cells, sel, d, sd_r, sd_t, ay_r, ay_t, spp_ref, spp_test) -> list:
    """pooled_bias and _events of every cell at once (sums by cell with np.add.at)."""
    ok = sel & np.isfinite(d) & np.isfinite(sd_r) & np.isfinite(sd_t)
    vr, vt = np.where(ok, sd_r ** 2, 0.0), np.where(ok, sd_t ** 2, 0.0)
    planes = np.stack([ok.astype(np.float64), np.where(ok, d, 0.0), vr, vt, vr * vr, vt * vt,
                       np.where(ok, ay_r, 0.0), np.where(ok, ay_t, 0.0)])
    # summed-area table: the sum over any cell is four look-ups
    sat = np.zeros((planes.shape[0], planes.shape[1] + 1, planes.shape[2] + 1))
    sat[:, 1:, 1:] = planes.cumsum(axis=1).cumsum(axis=2)
    c = np.array([cell[2:] for cell in cells], dtype=np.int64)
    x0, y0, x1, y1 = c[:, 0], c[:, 1], c[:, 2], c[:, 3]
    S = sat[:, y1, x1] - sat[:, y0, x1] - sat[:, y1, x0] + sat[:, y0, x0]
    n, sd, svr, svt, s4r, s4t, sar, sat_ = S
    kr, kt = _spp_term(spp_ref), _spp_term(spp_test)
    v = svr + svt
    with np.errstate(divide="ignore", invalid="ignore"):
        tval = np.where(v > 0, sd / np.sqrt(v), np.nan)
        den = s4r * kr + s4t * kt
        df = np.where(den > 0, v * v / den, np.inf)
        ev = np.minimum(np.where(svr > 0, sar ** 2 / svr, np.inf), np.where(svt > 0, sat_ ** 2 / svt, np.inf))
    p = 2.0 * _t_sf(np.abs(np.nan_to_num(tval)), df)
    p = np.where(np.isfinite(tval), p, np.nan)
    out = []
    for i, (level, name, a, b, e, f) in enumerate(cells):
        nn = int(round(n[i]))
        res = {"n": nn, "t": float(tval[i]) if nn >= 2 else math.nan, "df": float(df[i]),
               "p": float(p[i]) if nn >= 2 else math.nan, "events": float(ev[i]),
               "mean_difference": float(sd[i] / nn) if nn else math.nan,
               "mean_difference_se": float(math.sqrt(v[i]) / nn) if nn else math.nan}
        res.update(grid=name, level=level, x0=a, y0=b, x1=e, y1=f)
        out.append(res)
    return out


def _cells(h, w, grid):
    """Regions: the grid (gy, gx) and every coarser grid halving it, down to 2 x 2."""
    gy, gx = grid
    levels, seen = [], set()
    while True:
        key = (min(gy, h), min(gx, w))
        if key not in seen:
            seen.add(key)
            levels.append(key)
        if gy <= 2 and gx <= 2:
            break
        gy, gx = max(2, (gy + 1) // 2), max(2, (gx + 1) // 2)
    out = []
    for level, (ny, nx) in enumerate(levels):
        ys = np.linspace(0, h, ny + 1).astype(int)
        xs = np.linspace(0, w, nx + 1).astype(int)
        for i in range(ny):
            for j in range(nx):
                if ys[i + 1] > ys[i] and xs[j + 1] > xs[j]:
                    out.append((level, f"{nx}x{ny}", int(xs[j]), int(ys[i]), int(xs[j + 1]), int(ys[i + 1])))
    return out


def analyse(reference, test, var_ref, var_test=None, *, mask=None, grid=(8, 8),
            tolerance: float | None = None, spp_ref: int | None = None, spp_test: int | None = None,
            alpha: float = DEFAULT_ALPHA, min_spp=None) -> dict:
    """Significance summary of ``test`` against ``reference`` (plain dict).

    ``spp_ref`` / ``spp_test``: samples per pixel of each frame (degrees of
    freedom of the variance estimates; unknown: the normal limit).  ``alpha``:
    the family false-alarm level of ``significant``.  Keys: ``tests`` (one
    dict per test with its statistic, p value, level and outcome),
    ``global_test``, ``regions`` (``flagged`` when p < the region level),
    ``dispersion``, ``relative_bias``, descriptive ``fraction_significant``
    (|t| > 3) and ``fraction_expected`` (its mean under t with each value's
    degrees of freedom), ``verdict``, ``significant``, ``notes`` and, with a
    ``tolerance``, ``resolution``.  ``min_spp`` is accepted for compatibility
    and ignored (the degrees of freedom take its place).
    """
    if not 0 < alpha < 1:
        raise ValueError(f"alpha: must be in (0, 1), got {alpha}")
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
    has_vt = var_test is not None
    if not has_vt:
        notes.append("test has no variance layer: its variance is taken as zero (the tests then "
                     "understate the noise and the false-alarm level does not hold)")
    if spp_ref is None or (has_vt and spp_test is None):
        notes.append("samples per pixel unknown for a frame: degrees of freedom in the normal limit")
    vr = np.where(np.isfinite(var_ref), np.asarray(var_ref, dtype=np.float64), np.inf)
    vt = np.zeros_like(vr) if not has_vt else np.where(np.isfinite(var_test),
                                                       np.asarray(var_test, dtype=np.float64), np.inf)
    ntest = spp_test if has_vt else None
    tm, df, ty, dfy = welch_t_map(r, t, vr, vt if has_vt else None, spp_ref=spp_ref, spp_test=ntest)
    # the variances of the pooled tests: each frame's per-sample variance taken as the larger of
    # the two frames' estimates (never smaller than its own, so only ever conservative); it keeps
    # a frame whose few samples all missed a rare contribution (variance estimate 0) honest
    vr_p, vt_p = pooled_variances(vr, vt if has_vt else None, spp_ref, spp_test)
    tc = tm[sel]
    defined = np.isfinite(tc)
    n_def = int(defined.sum())
    zero_var = ((vr + vt) == 0)[sel]
    dv = np.abs(t[sel] - r[sel])
    exact_diff = int((zero_var & (dv > EXACT_RTOL * np.maximum(np.abs(r[sel]), np.abs(t[sel])))).sum())
    if exact_diff:
        notes.append(f"{exact_diff} channel value(s) differ where both variances are zero")
    out = {"z_threshold": Z_PIXEL, "alpha": alpha, "nonfinite_pixels": n_nonfinite, "n_values": n_def,
           "exact_pixel_differences": exact_diff, "spp_ref": spp_ref, "spp_test": ntest}
    if n_def == 0:
        out.update(fraction_significant=math.nan, fraction_expected=math.nan, significant=exact_diff > 0,
                   global_test=None, regions=[], dispersion=None, relative_bias=None, tests=[],
                   verdict="no pixel has a variance: significance cannot be assessed"
                   if not exact_diff else "the images differ where both have zero variance",
                   notes=notes + ["the reference has no variance estimate (not a refrender EXR?)"])
        return out
    n_sig = int((np.abs(tc[defined]) > Z_PIXEL).sum())
    frac = n_sig / n_def
    dfc = df[sel][defined]
    expected = float(np.mean(2.0 * _t_sf(Z_PIXEL, dfc)))
    sr_y = np.sqrt(vr_p) @ LUMINANCE
    st_y = np.sqrt(vt_p) @ LUMINANCE
    ay_r, ay_t = np.abs(r @ LUMINANCE), np.abs(t @ LUMINANCE)
    dy_map = (t - r) @ LUMINANCE
    nt_for = ntest
    glob = pooled_bias(dy_map[sel], sr_y[sel], st_y[sel], spp_ref=spp_ref, spp_test=nt_for)
    yr = r[sel] @ LUMINANCE
    my = float(yr.mean())
    sv = float(np.sum(sr_y[sel] ** 2 + st_y[sel] ** 2))
    rel_bias = {"value": float(dy_map[sel].mean() / my) if my != 0 else math.nan,
                "se": float(math.sqrt(sv) / yr.size / abs(my)) if my != 0 and math.isfinite(sv) else math.nan}
    # regions at every level of the grid
    regions = _region_tests(_cells(h, w, grid), sel, dy_map, sr_y, st_y, ay_r, ay_t, spp_ref, nt_for)
    glob["events"] = _events(ay_r[sel], ay_t[sel], sr_y[sel], st_y[sel])
    tested = [c for c in regions if c["n"] >= MIN_PIXELS and math.isfinite(c["p"]) and c["events"] >= MIN_EVENTS]
    untested = sum(1 for c in regions if c["n"] >= MIN_PIXELS and c["events"] < MIN_EVENTS)
    if untested:
        notes.append(f"{untested} of {len(regions)} regions hold too few effective samples "
                     f"(< {MIN_EVENTS:g}) for a normal approximation and are not tested")
    a_glob = alpha / 3.0
    a_reg = alpha / 3.0 / max(1, len(tested))
    a_disp = alpha / 3.0
    for c in regions:
        c["flagged"] = bool(c in tested and c["p"] < a_reg)
    flagged = [c for c in regions if c["flagged"]]
    global_sig = bool(glob["n"] >= MIN_PIXELS and math.isfinite(glob["p"]) and glob["p"] < a_glob
                      and glob["events"] >= MIN_EVENTS)
    disp = None
    disp_sig = False
    if has_vt:
        q = np.sum((t - r) ** 2 - vr_p - vt_p, axis=-1)
        disp = dispersion_test(q[sel])
        with np.errstate(invalid="ignore", divide="ignore"):
            disp["ratio"] = float(np.sum(((t - r) ** 2)[sel]) / np.sum((vr_p + vt_p)[sel]))
        disp_sig = bool(math.isfinite(disp["p"]) and disp["p"] < a_disp)
    else:
        notes.append("dispersion test skipped: it needs the test frame's variance layer")
    tests = [
        {"test": "global bias", "statistic": glob["t"], "df": glob["df"], "p": glob["p"], "level": a_glob,
         "significant": global_sig},
        {"test": "regional bias", "regions": len(tested), "statistic": (max(tested, key=lambda c: abs(c["t"]))["t"]
                                                                      if tested else math.nan),
         "p": min((c["p"] for c in tested), default=math.nan), "level": a_reg, "significant": bool(flagged)},
        {"test": "dispersion", "statistic": disp["z"] if disp else math.nan, "p": disp["p"] if disp else math.nan,
         "level": a_disp, "significant": disp_sig},
    ]
    significant = global_sig or disp_sig or bool(flagged) or exact_diff > 0 or n_nonfinite > 0
    if not significant:
        verdict = "differences are consistent with the frames' noise"
    else:
        where = []
        if global_sig:
            sign = "brighter" if glob["t"] > 0 else "darker"
            where.append(f"globally (test {sign}: mean difference {glob['t']:+.1f} standard errors, "
                         f"p = {glob['p']:.2g})")
        if flagged:
            worst = min(flagged, key=lambda c: c["p"])
            where.append(f"{len(flagged)} of {len(tested)} regions, worst x {worst['x0']}–{worst['x1']}, "
                         f"y {worst['y0']}–{worst['y1']} ({worst['t']:+.1f} standard errors, p = {worst['p']:.2g})")
        if disp_sig:
            where.append(f"differences exceed the noise ({disp['ratio']:.3g} × the expected squared difference, "
                         f"z = {disp['z']:+.1f})")
        if exact_diff:
            where.append(f"{exact_diff} value(s) differ where neither image has noise")
        if n_nonfinite:
            where.append(f"{n_nonfinite} non-finite pixel(s)")
        verdict = "significant difference, here: " + "; ".join(where)
    out.update(fraction_significant=frac, n_significant=n_sig, fraction_expected=expected,
               significant=significant, global_test=glob, regions=regions, dispersion=disp, tests=tests,
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
