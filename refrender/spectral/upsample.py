"""RGB to smooth, bounded spectra: the sigmoid-polynomial model of W. Jakob and
J. Hanika, "A Low-Dimensional Function Space for Efficient Spectral
Upsampling", Computer Graphics Forum 38(2), 2019.

A reflectance is s(lambda) = S(c0 t^2 + c1 t + c2) with t = (lambda - 360 nm) /
470 nm and S(x) = 1/2 + x / (2 sqrt(1 + x^2)), so 0 < s < 1 at every
wavelength.  The three coefficients of an RGB colour are interpolated from a
table fitted once per working space and white (cached on disk): for each of the
three "largest channel" tables, a grid of brightness z (the largest channel,
spaced by smoothstep(smoothstep(k / (R - 1))) as in the paper) and the two other
channels' ratios x, y to it (uniform in [0, 1]).  Each cell is fitted by damped
Gauss-Newton on the CIELAB difference between the target and the spectrum's
colour under the white illuminant, warm-started from its neighbour in z (the
paper's continuation scheme), all cells of one z at once.
"""
from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from . import data

#: default table resolution R (cells per axis); see README "Spectral" for the fit error it gives
RESOLUTION = 32
_ITERATIONS = 40


def sigmoid_spectrum(coefficients: np.ndarray, wavelengths: np.ndarray = data.WAVELENGTHS) -> np.ndarray:
    """s(lambda) of coefficient triples (..., 3) at *wavelengths* (nm): shape (..., n)."""
    c = np.asarray(coefficients, dtype=np.float64)
    t = (np.asarray(wavelengths, dtype=np.float64) - data.LAMBDA_MIN) / (data.LAMBDA_MAX - data.LAMBDA_MIN)
    x = c[..., 0, None] * t * t + c[..., 1, None] * t + c[..., 2, None]
    with np.errstate(over="ignore", invalid="ignore"):
        s = 0.5 + x / (2.0 * np.sqrt(1.0 + x * x))
    # |x| so large that x*x overflows: S(x) is 0 or 1 to double precision
    return np.where(np.isfinite(s), s, (x > 0).astype(np.float64))


def _lab(xyz: np.ndarray, white_xyz: np.ndarray) -> np.ndarray:
    """CIE 1976 L*a*b* of XYZ (..., 3) relative to a white (CIE 015:2018)."""
    r = xyz / white_xyz
    d = 6.0 / 29.0
    f = np.where(r > d ** 3, np.cbrt(np.maximum(r, d ** 3)), r / (3 * d * d) + 4.0 / 29.0)
    return np.stack([116.0 * f[..., 1] - 16.0, 500.0 * (f[..., 0] - f[..., 1]), 200.0 * (f[..., 1] - f[..., 2])],
                    axis=-1)


#: wavelength step of the fit's colour integrals, nm (the CIE tables are smooth at
#: this scale; the round-trip test integrates on the 1 nm grid)
FIT_STEP = 5


class _Colorimeter:
    """XYZ and Lab of reflectance spectra under one white illuminant, with the
    analytic Jacobian of Lab with respect to the sigmoid coefficients."""

    def __init__(self, white: str, space: str, step: int = FIT_STEP):
        light = data.illuminant(white)[::step]
        cmf = data.cmfs()[::step]
        self.weights = light[:, None] * cmf / (light @ cmf[:, 1])      # (n, 3), Y(white) = 1
        self.white_xyz = self.weights.sum(axis=0)
        lam = data.WAVELENGTHS[::step]
        self.t = (lam - data.LAMBDA_MIN) / (data.LAMBDA_MAX - data.LAMBDA_MIN)
        self.rgb_to_xyz = np.linalg.inv(data.xyz_to_rgb_matrix(space))

    def _x(self, c):
        return c[..., 0, None] * self.t * self.t + c[..., 1, None] * self.t + c[..., 2, None]

    def lab_of_coefficients(self, c: np.ndarray) -> np.ndarray:
        return _lab(sigmoid_spectrum(c, data.LAMBDA_MIN + self.t * (data.LAMBDA_MAX - data.LAMBDA_MIN))
                    @ self.weights, self.white_xyz)

    def jacobian(self, c: np.ndarray) -> np.ndarray:
        """d Lab / d c, (m, 3, 3) [Lab component, coefficient]."""
        x = self._x(c)
        ds = 0.5 / (1.0 + x * x) ** 1.5                                  # S'(x)
        xyz = (0.5 + x / (2.0 * np.sqrt(1.0 + x * x))) @ self.weights
        r = xyz / self.white_xyz
        d = 6.0 / 29.0
        fprime = np.where(r > d ** 3, np.cbrt(np.maximum(r, d ** 3)) ** -2 / 3.0, 1.0 / (3 * d * d))
        jac = np.empty(c.shape[:-1] + (3, 3))
        for k, power in enumerate((2, 1, 0)):
            dxyz = (ds * self.t ** power) @ self.weights / self.white_xyz * fprime   # d f(r) / d c_k
            jac[..., 0, k] = 116.0 * dxyz[..., 1]
            jac[..., 1, k] = 500.0 * (dxyz[..., 0] - dxyz[..., 1])
            jac[..., 2, k] = 200.0 * (dxyz[..., 1] - dxyz[..., 2])
        return jac

    def lab_of_rgb(self, rgb: np.ndarray) -> np.ndarray:
        return _lab(rgb @ self.rgb_to_xyz.T, self.white_xyz)


@lru_cache(maxsize=None)
def _meter(white: str, space: str, step: int = FIT_STEP) -> "_Colorimeter":
    return _Colorimeter(white, space, step)


def _gauss_newton(meter: _Colorimeter, target_lab: np.ndarray, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Damped Gauss-Newton on r(c) = Lab(c) - target for a batch (m, 3); returns (c, |r|)."""
    c = c.copy()
    res = meter.lab_of_coefficients(c) - target_lab
    norm = np.linalg.norm(res, axis=-1)
    for _ in range(_ITERATIONS):
        active = norm > 1e-6
        if not active.any():
            break
        ca, ra, na = c[active], res[active], norm[active]
        jac = meter.jacobian(ca)
        # normal equations (the Jacobian may be near singular at saturated colours)
        jt = np.swapaxes(jac, -1, -2)
        delta = np.linalg.solve(jt @ jac + 1e-12 * np.eye(3), -(jt @ ra[..., None]))[..., 0]
        scale = np.ones(len(ca))
        best_c, best_r, best_n = ca.copy(), ra.copy(), na.copy()
        pending = np.ones(len(ca), dtype=bool)
        for _halving in range(12):          # backtracking: accept the first step that lowers |r|
            trial = ca + scale[:, None] * delta
            trial_r = meter.lab_of_coefficients(trial) - target_lab[active]
            trial_n = np.linalg.norm(trial_r, axis=-1)
            good = pending & np.isfinite(trial_n) & (trial_n < na)
            best_c[good], best_r[good], best_n[good] = trial[good], trial_r[good], trial_n[good]
            pending &= ~good
            if not pending.any():
                break
            scale[pending] *= 0.5
        c[active], res[active], norm[active] = best_c, best_r, best_n
        if pending.all():                    # no step lowers |r| anywhere: as far as it goes
            break
    return c, norm


def _z_grid(resolution: int) -> np.ndarray:
    def smoothstep(x):
        return x * x * (3.0 - 2.0 * x)
    return smoothstep(smoothstep(np.linspace(0.0, 1.0, resolution)))


def _rgb_of_cells(l: int, x: np.ndarray, y: np.ndarray, z: float) -> np.ndarray:
    rgb = np.empty(x.shape + (3,))
    rgb[..., l] = z
    rgb[..., (l + 1) % 3] = x * z
    rgb[..., (l + 2) % 3] = y * z
    return rgb


def fit_table(resolution: int = RESOLUTION, white: str = "D65", space: str = "ITU-R BT.709"):
    """Fit the coefficient table: (coefficients (3, R, R, R, 3) indexed [l, z, y, x],
    residual CIELAB Delta E (3, R, R, R), z grid (R,))."""
    meter = _meter(white, space)
    zs = _z_grid(resolution)
    ticks = np.linspace(0.0, 1.0, resolution)
    x, y = np.meshgrid(ticks, ticks)                        # [y, x]
    coeffs = np.zeros((3, resolution, resolution, resolution, 3))
    errors = np.zeros((3, resolution, resolution, resolution))
    start = resolution // 5
    for l in range(3):
        for order in (range(start, resolution), range(start - 1, 0, -1)):
            c = np.zeros((resolution * resolution, 3)) if order.start == start else coeffs[l, start].reshape(-1, 3)
            for k in order:
                target = meter.lab_of_rgb(_rgb_of_cells(l, x, y, zs[k]).reshape(-1, 3))
                c, err = _gauss_newton(meter, target, c)
                coeffs[l, k] = c.reshape(resolution, resolution, 3)
                errors[l, k] = err.reshape(resolution, resolution)
        # z = 0 is black, which no sigmoid reaches: keep the z_1 fit (its reflectance is below z_1)
        coeffs[l, 0], errors[l, 0] = coeffs[l, 1], errors[l, 1]
    return coeffs, errors, zs


@dataclass(frozen=True)
class SigmoidTable:
    """A fitted coefficient table and its lookup."""
    coefficients: np.ndarray    # (3, R, R, R, 3) [l, z, y, x]
    errors: np.ndarray          # (3, R, R, R) CIELAB Delta E of each cell's fit
    z_grid: np.ndarray          # (R,)
    white: str
    space: str

    @property
    def resolution(self) -> int:
        return self.z_grid.shape[0]

    def lookup(self, rgb: np.ndarray) -> np.ndarray:
        """Coefficients (..., 3) of linear RGB reflectances (..., 3) in [0, 1], by
        trilinear interpolation of the table.  RGB (0, 0, 0) maps to a coefficient
        triple whose spectrum is below the table's smallest brightness; use
        :meth:`spectrum`, which returns exact zeros there."""
        rgb = np.clip(np.asarray(rgb, dtype=np.float64), 0.0, 1.0)
        flat = rgb.reshape(-1, 3)
        l = np.argmax(flat, axis=1)
        idx = np.arange(len(flat))
        z = flat[idx, l]
        safe = np.where(z > 0, z, 1.0)
        x = flat[idx, (l + 1) % 3] / safe
        y = flat[idx, (l + 2) % 3] / safe
        r = self.resolution
        zi = np.clip(np.searchsorted(self.z_grid, z, side="right") - 1, 0, r - 2)
        tz = (z - self.z_grid[zi]) / (self.z_grid[zi + 1] - self.z_grid[zi])
        fx, fy = x * (r - 1), y * (r - 1)
        xi, yi = np.clip(fx.astype(int), 0, r - 2), np.clip(fy.astype(int), 0, r - 2)
        tx, ty = fx - xi, fy - yi
        out = np.zeros((len(flat), 3))
        for dz, wz in ((0, 1 - tz), (1, tz)):
            for dy, wy in ((0, 1 - ty), (1, ty)):
                for dx, wx in ((0, 1 - tx), (1, tx)):
                    out += (wz * wy * wx)[:, None] * self.coefficients[l, zi + dz, yi + dy, xi + dx]
        return out.reshape(rgb.shape)

    def fit(self, rgb: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Coefficients (..., 3) fitted to each colour itself, and their CIELAB error.

        The table's trilinear interpolation is the starting point of a few
        Gauss-Newton steps on that colour: the scene's colours and texels are
        all known when it is loaded, so each gets its own optimum instead of
        an interpolation between neighbouring cells."""
        rgb = np.clip(np.asarray(rgb, dtype=np.float64), 0.0, 1.0)
        flat = rgb.reshape(-1, 3)
        meter = _meter(self.white, self.space, 1)         # the 1 nm grid of the renderer's colour
        c, err = _gauss_newton(meter, meter.lab_of_rgb(flat), self.lookup(flat))
        return c.reshape(rgb.shape), err.reshape(rgb.shape[:-1])

    def spectrum(self, rgb: np.ndarray, wavelengths: np.ndarray = data.WAVELENGTHS) -> np.ndarray:
        """Upsampled reflectance spectra (..., n) of linear RGB (..., 3) in [0, 1]
        (each colour fitted by :meth:`fit`); black is exactly 0."""
        rgb = np.asarray(rgb, dtype=np.float64)
        s = sigmoid_spectrum(self.fit(rgb)[0], wavelengths)
        return np.where((np.max(rgb, axis=-1) > 0)[..., None], s, 0.0)


def _cache_file(resolution: int, white: str, space: str) -> Path:
    import colour
    h = hashlib.sha256()
    for part in (Path(__file__).read_bytes(), Path(data.__file__).read_bytes(),
                 colour.__version__.encode(), f"{resolution}/{white}/{space}".encode()):
        h.update(part)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "refrender" / f"spectral-upsampling-{h.hexdigest()[:16]}.npz"


@lru_cache(maxsize=None)
def coefficient_table(resolution: int = RESOLUTION, white: str = "D65", space: str = "ITU-R BT.709") -> SigmoidTable:
    """The fitted table, from the on-disk cache or fitted now (and cached, atomically)."""
    from ..io.atomic import atomic_path
    path = _cache_file(resolution, white, space)
    if path.exists():
        try:
            with np.load(path) as f:
                return SigmoidTable(f["coefficients"], f["errors"], f["z_grid"], white, space)
        except (OSError, ValueError, KeyError):
            pass                       # a damaged cache is refitted
    coeffs, errors, zs = fit_table(resolution, white, space)
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as f:
            np.savez(f, coefficients=coeffs, errors=errors, z_grid=zs)
    return SigmoidTable(coeffs, errors, zs, white, space)
