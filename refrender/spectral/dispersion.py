"""Refractive index of glass as a function of wavelength.

Sellmeier's formula n^2(lambda) = 1 + sum_i B_i lambda^2 / (lambda^2 - C_i),
lambda in micrometres and C_i in square micrometres (common practice), and a
two-term Cauchy model n(lambda) = A + B / lambda^2 through a given n_d and Abbe
number V_d = (n_d - 1) / (n_F - n_C) at the Fraunhofer d (587.56 nm), F
(486.13 nm) and C (656.27 nm) lines (common practice).
"""
from __future__ import annotations

import numpy as np

#: Fraunhofer lines, nm (helium d, hydrogen F and C; common practice)
LAMBDA_D, LAMBDA_F, LAMBDA_C = 587.5618, 486.1327, 656.2725

#: Sellmeier coefficients (B1, B2, B3), (C1, C2, C3) [um^2] of the presets.
SELLMEIER_PRESETS = {
    # SCHOTT optical glass data sheet of N-BK7 (coefficients as the glass maker
    # publishes them; transcribed from memory and checked in the tests against
    # the same data sheet's n_d = 1.5168 and V_d = 64.17)
    "N-BK7": ((1.03961212, 0.231792344, 1.01046945), (0.00600069867, 0.0200179144, 103.560653)),
    # I. H. Malitson, "Interspecimen comparison of the refractive index of fused
    # silica", J. Opt. Soc. Am. 55, 1205 (1965): resonances 0.0684043,
    # 0.1162414, 9.896161 um (squared here); transcribed from memory
    "fused_silica": ((0.6961663, 0.4079426, 0.8974794), (0.0684043 ** 2, 0.1162414 ** 2, 9.896161 ** 2)),
}


def sellmeier(wavelength_nm, b, c) -> np.ndarray:
    """n at *wavelength_nm* of Sellmeier coefficients B (3,), C (3,) [um^2]."""
    l2 = (np.asarray(wavelength_nm, dtype=np.float64) * 1e-3) ** 2
    n2 = 1.0 + sum(bi * l2 / (l2 - ci) for bi, ci in zip(b, c))
    return np.sqrt(n2)


def cauchy_from_abbe(n_d: float, v_d: float) -> tuple[float, float]:
    """(A, B [nm^2]) of n = A + B / lambda^2 with index n_d at the d line and Abbe number V_d."""
    b = (n_d - 1.0) / (v_d * (LAMBDA_F ** -2 - LAMBDA_C ** -2))
    return n_d - b / LAMBDA_D ** 2, b


def cauchy(wavelength_nm, a: float, b: float) -> np.ndarray:
    return a + b / np.asarray(wavelength_nm, dtype=np.float64) ** 2


def abbe_number(index) -> float:
    """V_d of a function n(lambda_nm)."""
    nd, nf, nc = index(LAMBDA_D), index(LAMBDA_F), index(LAMBDA_C)
    return float((nd - 1.0) / (nf - nc))
