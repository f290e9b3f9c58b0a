"""Image-difference metrics on linear radiance.

Every metric is a plain function ``metric(reference, test, *, mask=None, ...)``
with the same argument order everywhere in refrender (reference first), taking
arrays of any matching shape (a single channel (H, W), or (H, W, C) treated as
one set of values) and returning a Python float.  Values are accumulated in
float64.  No data range is ever inferred from a dtype: linear radiance has no
natural peak, so PSNR takes an explicit ``peak`` and SSIM an explicit tone map
with ``data_range=1``.

Definitions (r = reference, t = test, means over the selected values):

- ``mse`` = mean((t - r)^2); ``rmse`` = sqrt(mse)
- ``relmse`` = mean((t - r)^2 / (r^2 + eps)), eps = 1e-2 by default
  (the stabilising constant of common practice in rendering papers)
- ``mape`` = mean(|t - r| / (|r| + eps)), eps = 1e-2
- ``smape`` = mean(2 |t - r| / (|t| + |r| + eps)), eps = 1e-2 (range [0, 2])
- ``bias`` = mean(t - r) (mean signed error)
- ``max_abs`` = max |t - r|
- ``psnr`` = 10 log10(peak^2 / mse); the default peak is the maximum of the
  reference over the compared values (stated in every report)
- ``ssim``: structural similarity (Wang et al. 2004) of the tone-mapped images
  T(x) = srgb_encode(clip(x * 2**exposure / (1 + x * 2**exposure), 0, 1))
  (Reinhard et al. 2002 global operator, then the sRGB transfer function),
  Gaussian window sigma = 1.5 truncated at 3.5 sigma (11 x 11), K1 = 0.01,
  K2 = 0.03, population covariances, data_range = 1; the mean of the SSIM map
  over pixels at least 5 pixels from the border.
"""
from __future__ import annotations

import math

import numpy as np

#: ITU-R BT.709 luminance weights of linear R, G, B (the same as the renderer's)
LUMINANCE = np.array([0.2126, 0.7152, 0.0722])
#: default stabilising constant of relmse, mape and smape
EPS = 1e-2
#: metric names in report order
METRICS = ("mse", "rmse", "relmse", "mape", "smape", "bias", "max_abs", "psnr", "ssim")
#: metrics for which larger means better (for CI conditions and reports)
HIGHER_IS_BETTER = ("psnr", "ssim")


def luminance(image) -> np.ndarray:
    """(H, W) BT.709 luminance of a linear (H, W, 3) image, float64."""
    return np.asarray(image, dtype=np.float64) @ LUMINANCE


def _pair(reference, test, mask):
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    if r.shape != t.shape:
        raise ValueError(f"reference and test differ in shape: {r.shape} != {t.shape}")
    if mask is not None:
        m = np.asarray(mask, dtype=bool)
        if m.shape != r.shape[:m.ndim]:
            raise ValueError(f"mask shape {m.shape} does not fit image shape {r.shape}")
        r, t = r[m], t[m]
    return r.ravel(), t.ravel()


def mse(reference, test, *, mask=None) -> float:
    """Mean squared error."""
    r, t = _pair(reference, test, mask)
    return float(np.mean((t - r) ** 2))


def rmse(reference, test, *, mask=None) -> float:
    """Root mean squared error."""
    return math.sqrt(mse(reference, test, mask=mask))


def relmse(reference, test, *, mask=None, eps: float = EPS) -> float:
    """Relative MSE: mean((t - r)^2 / (r^2 + eps))."""
    r, t = _pair(reference, test, mask)
    return float(np.mean((t - r) ** 2 / (r * r + eps)))


def mape(reference, test, *, mask=None, eps: float = EPS) -> float:
    """Mean absolute percentage error as a fraction: mean(|t - r| / (|r| + eps))."""
    r, t = _pair(reference, test, mask)
    return float(np.mean(np.abs(t - r) / (np.abs(r) + eps)))


def smape(reference, test, *, mask=None, eps: float = EPS) -> float:
    """Symmetric MAPE: mean(2 |t - r| / (|t| + |r| + eps)), in [0, 2]."""
    r, t = _pair(reference, test, mask)
    return float(np.mean(2.0 * np.abs(t - r) / (np.abs(t) + np.abs(r) + eps)))


def bias(reference, test, *, mask=None) -> float:
    """Mean signed error mean(t - r) (positive: the test is brighter)."""
    r, t = _pair(reference, test, mask)
    return float(np.mean(t - r))


def max_abs(reference, test, *, mask=None) -> float:
    """Maximum absolute error."""
    r, t = _pair(reference, test, mask)
    return float(np.max(np.abs(t - r)))


def psnr(reference, test, *, mask=None, peak: float | None = None) -> float:
    """Peak signal-to-noise ratio in dB, 10 log10(peak^2 / mse).

    ``peak`` defaults to the maximum of the reference over the compared
    values (HDR radiance has no natural peak; say which one you use).
    Returns inf for identical images.
    """
    r, t = _pair(reference, test, mask)
    if peak is None:
        peak = float(np.max(r))
    if not peak > 0:
        raise ValueError(f"psnr: peak must be > 0, got {peak}")
    e = float(np.mean((t - r) ** 2))
    return math.inf if e == 0 else 10.0 * math.log10(peak * peak / e)


def tonemap(image, exposure: float = 0.0) -> np.ndarray:
    """The stated display mapping used by SSIM and the report pictures:
    Reinhard's global operator x / (1 + x) after ``2**exposure``, then sRGB
    encoding (IEC 61966-2-1), in [0, 1], float64."""
    from ..io.images import srgb_encode
    x = np.asarray(image, dtype=np.float64) * 2.0 ** float(exposure)
    x = np.where(np.isfinite(x), np.maximum(x, 0.0), 0.0)
    return np.clip(srgb_encode(x / (1.0 + x)), 0.0, 1.0)


def ssim_map(a, b, *, data_range: float = 1.0, sigma: float = 1.5, k1: float = 0.01,
             k2: float = 0.03) -> np.ndarray:
    """SSIM map of two single-channel float images (Wang et al. 2004) with a
    Gaussian window (sigma, truncated at 3.5 sigma) and population covariances;
    borders reflected.  ``data_range`` is required in spirit: never inferred."""
    import cv2
    a = np.ascontiguousarray(a, dtype=np.float64)
    b = np.ascontiguousarray(b, dtype=np.float64)
    radius = int(3.5 * sigma + 0.5)
    k = 2 * radius + 1

    def blur(x):
        return cv2.GaussianBlur(x, (k, k), sigma, sigmaY=sigma, borderType=cv2.BORDER_REFLECT)

    mu_a, mu_b = blur(a), blur(b)
    vaa = blur(a * a) - mu_a * mu_a
    vbb = blur(b * b) - mu_b * mu_b
    vab = blur(a * b) - mu_a * mu_b
    c1 = (k1 * data_range) ** 2
    c2 = (k2 * data_range) ** 2
    return ((2 * mu_a * mu_b + c1) * (2 * vab + c2)) / ((mu_a ** 2 + mu_b ** 2 + c1) * (vaa + vbb + c2))


def ssim(reference, test, *, mask=None, exposure: float = 0.0, tonemapped: bool = False) -> float:
    """SSIM of the tone-mapped images (see :func:`tonemap`); mean over channels
    for (H, W, C) input.  ``tonemapped=True`` takes inputs already in [0, 1].
    ``mask`` (H, W) restricts the average of the SSIM map (the window still
    sees the neighbours)."""
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    if r.shape != t.shape:
        raise ValueError(f"reference and test differ in shape: {r.shape} != {t.shape}")
    if not tonemapped:
        r, t = tonemap(r, exposure), tonemap(t, exposure)
    if r.ndim == 2:
        r, t = r[..., None], t[..., None]
    h, w = r.shape[:2]
    pad = int(3.5 * 1.5 + 0.5)
    valid = np.zeros((h, w), dtype=bool)
    valid[pad:h - pad, pad:w - pad] = True
    if mask is not None:
        valid &= np.asarray(mask, dtype=bool)
    if not valid.any():
        return math.nan
    vals = [float(ssim_map(r[..., c], t[..., c])[valid].mean()) for c in range(r.shape[2])]
    return float(np.mean(vals))


_SIMPLE = {"mse": mse, "rmse": rmse, "relmse": relmse, "mape": mape, "smape": smape,
           "bias": bias, "max_abs": max_abs}


def all_metrics(reference, test, *, mask=None, eps: float = EPS, peak: float | None = None,
                exposure: float = 0.0, with_ssim: bool = True) -> dict:
    """Every metric per channel (``R``, ``G``, ``B``) and on luminance (``Y``).

    ``reference`` and ``test`` are (H, W, 3) linear images; ``mask`` an (H, W)
    boolean selection.  Returns ``{metric: {"R": .., "G": .., "B": .., "Y": ..}}``
    plus ``"psnr_peak"`` (the peak used, from the reference luminance unless
    given) and ``"eps"``.
    """
    r = np.asarray(reference, dtype=np.float64)
    t = np.asarray(test, dtype=np.float64)
    planes = {c: (r[..., i], t[..., i]) for i, c in enumerate("RGB")}
    planes["Y"] = (luminance(r), luminance(t))
    m = None if mask is None else np.asarray(mask, dtype=bool)
    ry_sel = planes["Y"][0] if m is None else planes["Y"][0][m]
    pk = float(np.max(ry_sel)) if peak is None else float(peak)
    out: dict = {}
    for name, fn in _SIMPLE.items():
        kw = {"eps": eps} if name in ("relmse", "mape", "smape") else {}
        out[name] = {c: fn(a, b, mask=m, **kw) for c, (a, b) in planes.items()}
    out["psnr"] = {c: psnr(a, b, mask=m, peak=pk) if pk > 0 else math.nan for c, (a, b) in planes.items()}
    if with_ssim:
        tr, tt = tonemap(r, exposure), tonemap(t, exposure)
        out["ssim"] = {c: ssim(tr[..., i], tt[..., i], mask=m, tonemapped=True) for i, c in enumerate("RGB")}
        out["ssim"]["Y"] = ssim(tonemap(planes["Y"][0], exposure), tonemap(planes["Y"][1], exposure),
                                mask=m, tonemapped=True)
    out["psnr_peak"] = pk
    out["eps"] = eps
    out["ssim_tonemap"] = f"srgb_encode(x/(1+x)) with x = radiance * 2**{exposure:g}"
    return out
