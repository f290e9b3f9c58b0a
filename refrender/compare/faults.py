"""Two more classic faults for :mod:`refrender.compare.diagnose`: a wider
reconstruction filter (the test looks like the reference blurred by a
Gaussian of sigma pixels) and a working colour space mismatch (a 3x3
primaries matrix maps the reference to the test).

Both are models fitted by weighted least squares with the diagnosis'
weights; their parameters carry standard errors from the curvature of the
chi-square (Δχ² = 1; e.g. Press et al., "Numerical Recipes", 3rd ed.,
§15.6) or from the normal equations.
"""
from __future__ import annotations

import math

import numpy as np

from ..color import SPACES, conversion
from .diagnose import _golden

#: readable names of the working spaces
SPACE_NAMES = {"linear_rec709": "Rec. 709", "acescg": "ACEScg", "linear_p3_d65": "P3-D65",
               "cie_xyz": "CIE XYZ"}
#: largest blur searched, pixels
MAX_SIGMA = 4.0


def gaussian_kernel(sigma: float) -> np.ndarray:
    """Normalised 1-D Gaussian of standard deviation sigma (pixels), radius ceil(4 sigma)."""
    r = max(1, int(math.ceil(4.0 * sigma)))
    x = np.arange(-r, r + 1, dtype=np.float64)
    k = np.exp(-0.5 * (x / sigma) ** 2)
    return k / k.sum()


def blur(image, sigma: float, *, squared_weights: bool = False) -> np.ndarray:
    """Separable Gaussian blur (borders replicated).  ``squared_weights``
    applies the squared kernel: on a variance image, the variance of the
    blurred one (independent pixels)."""
    import cv2
    k = gaussian_kernel(sigma)
    if squared_weights:
        k = k * k
    img = np.ascontiguousarray(image, dtype=np.float64)
    return cv2.sepFilter2D(img, cv2.CV_64F, k, k, borderType=cv2.BORDER_REPLICATE)


def fit_blur(r, fit, sel):
    """(sigma, its standard error, region) of the best Gaussian blur model."""
    h, w = r.shape[:2]
    smax = min(MAX_SIGMA, (min(h, w) - 12) / 8.0)
    if smax < 0.5:
        return None
    m = int(math.ceil(4 * smax)) + 1
    region = np.zeros((h, w), dtype=bool)
    region[m:h - m, m:w - m] = True

    def chi(s):
        return fit.chi2(blur(r, s), region, blur(fit.vr, s, squared_weights=True))[0]
    s = _golden(chi, 0.05, smax, iters=28)
    step = max(0.02 * s, 0.005)
    c0, cp, cm = chi(s), chi(s + step), chi(max(s - step, 1e-3))
    curv = (cp - 2 * c0 + cm) / (step * step)
    se = math.sqrt(2.0 / curv) if curv > 0 else math.inf
    return s, se, region


def consider_blur(consider, r, fit, sel):
    got = fit_blur(r, fit, sel)
    if got is None:
        return None
    s, se, region = got
    res = consider("blur", round(s, 4), blur(r, s),
                   f"test ≈ reference blurred by a Gaussian of σ = {s:.3g} ± {se:.2g} px "
                   "(a wider pixel reconstruction filter)", region=region,
                   nontrivial=s > max(0.15, 4 * se), var_model=blur(fit.vr, s, squared_weights=True))
    if res is not None:
        res["standard_error"] = se
    return res


def fit_matrix(r, t, fit):
    """3x3 M minimising the weighted residual of t ≈ M r (per output channel),
    with the standard errors of its entries."""
    sel = fit.sel
    R = r[sel]
    M = np.zeros((3, 3))
    SE = np.zeros((3, 3))
    for c in range(3):
        wc = fit.w[..., c][sel]
        A = R * np.sqrt(wc)[:, None]
        b = t[..., c][sel] * np.sqrt(wc)
        ata = A.T @ A
        try:
            cov = np.linalg.inv(ata)
        except np.linalg.LinAlgError:
            return None
        M[c] = cov @ (A.T @ b)
        SE[c] = np.sqrt(np.maximum(np.diag(cov), 0.0))
    return M, SE


def consider_color_space(consider, r, t, fit):
    """Working space mismatch: the test equals conversion(a -> b) applied to
    the reference for two of our working spaces (the test rendered in b
    with the reference's numbers as its inputs, or converted wrongly)."""
    if r.ndim != 3 or r.shape[2] != 3:
        return None
    got = fit_matrix(r, t, fit)
    if got is None:
        return None
    M, SE = got
    best = None
    for a in SPACES:
        for b in SPACES:
            if a == b:
                continue
            C = conversion(a, b)
            c2, _ = fit.chi2(r @ C.T)
            if best is None or c2 < best[0]:
                best = (c2, a, b, C)
    _, a, b, C = best
    # the fitted matrix must be that conversion (within 4 standard errors or 1 %
    # of an entry, the rounding of the published primaries) and not a plain scale
    close = np.all(np.abs(M - C) <= np.maximum(4 * SE, 0.01 * np.abs(C).max()))
    scalar = np.allclose(M, np.eye(3) * np.trace(M) / 3, atol=max(0.01, 4 * float(SE.max())))
    res = consider("color_space", {"reference": a, "test": b},
                   r @ C.T, f"colour space mismatch (e.g. {SPACE_NAMES[b]} frame against a "
                   f"{SPACE_NAMES[a]} reference): test ≈ M · reference with M the {SPACE_NAMES[a]} → "
                   f"{SPACE_NAMES[b]} primaries matrix (Bradford adaptation)",
                   nontrivial=bool(close and not scalar))
    if res is not None:
        res["matrix"] = M.round(6).tolist()
        res["matrix_standard_error"] = SE.tolist()
    return res


def reconcile_spaces(reference, test, *, convert: bool = False):
    """The test frame in the reference's colour space.

    Frames whose OpenEXR ``chromaticities`` differ (absent = Rec. 709 with
    D65, the OpenEXR default) are refused with one line, or with ``convert``
    converted by the primaries matrix (Bradford adaptation; the variance by
    the squared matrix, channels taken as independent)."""
    from ..color import same_space, space_of
    from .inputs import CompareError
    a, b = reference.chromaticities, test.chromaticities
    if same_space(a, b):
        return test
    name_a = SPACE_NAMES.get(space_of(a), "custom chromaticities")
    name_b = SPACE_NAMES.get(space_of(b), "custom chromaticities")
    if not convert:
        raise CompareError(f"colour spaces differ: reference {reference.path} is {name_a}, test "
                           f"{test.path} is {name_b} (OpenEXR chromaticities); add --convert to "
                           "convert the test frame")
    from ..color import SPACES as _S
    ca = _S["linear_rec709"] if a is None else a
    cb = _S["linear_rec709"] if b is None else b
    m = conversion(cb, ca)
    rgb = test.rgb @ m.T
    var = None if test.variance is None else test.variance @ (m * m).T
    from dataclasses import replace
    return replace(test, rgb=rgb, variance=var, chromaticities=tuple(ca),
                   source=f"{test.source}, converted {name_b} → {name_a}")
