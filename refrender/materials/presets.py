"""Named metal presets: complex refractive index n + ik per RGB channel.

Source data, as transcribed in the public-domain refractiveindex.info
database (files ``main/<metal>/nk/Johnson.yml`` and ``main/Al/nk/Rakic.yml``)
and as published (Johnson & Christy 1972; Rakić 1995):

* gold, silver, copper: P. B. Johnson and R. W. Christy, "Optical constants of
  the noble metals", Phys. Rev. B 6, 4370-4379 (1972);
* aluminium: A. D. Rakic, "Algorithm for the determination of intrinsic
  optical constants of metal films: application to aluminum", Appl. Opt. 34,
  4755-4767 (1995).

Wavelength convention: each RGB channel uses the *tabulated* wavelength of the
source nearest to 630 nm (R), 532 nm (G) and 465 nm (B), without
interpolation: 616.8 / 520.9 / 471.4 nm for Johnson & Christy and
619.93 / 516.60 / 476.87 nm for Rakic.  The values are relative to vacuum
(an outside index of 1).
"""
from __future__ import annotations

import numpy as np

#: wavelengths (nm) of the R, G, B values of each preset
WAVELENGTHS_NM = {
    "gold": (616.8, 520.9, 471.4),
    "silver": (616.8, 520.9, 471.4),
    "copper": (616.8, 520.9, 471.4),
    "aluminium": (619.93, 516.60, 476.87),
}

#: name -> (n (R, G, B), k (R, G, B))
METALS = {
    "gold": ((0.21, 0.62, 1.31), (3.272, 2.081, 1.849)),
    "silver": ((0.06, 0.05, 0.05), (4.152, 3.324, 2.869)),
    "copper": ((0.30, 1.18, 1.25), (3.205, 2.608, 2.483)),
    "aluminium": ((1.3660, 0.8734, 0.7278), (7.4052, 6.2418, 5.7781)),
}

SOURCES = {
    "gold": "Johnson & Christy 1972", "silver": "Johnson & Christy 1972",
    "copper": "Johnson & Christy 1972", "aluminium": "Rakic 1995",
}


def metal(name: str) -> tuple[np.ndarray, np.ndarray]:
    """(n, k) of a preset as (3,) float64 arrays."""
    n, k = METALS[name]
    return np.array(n, dtype=np.float64), np.array(k, dtype=np.float64)


def normal_reflectance(n, k) -> np.ndarray:
    """R0 = ((n - 1)^2 + k^2) / ((n + 1)^2 + k^2) (Born & Wolf, optics of metals)."""
    n = np.asarray(n, dtype=np.float64)
    k = np.asarray(k, dtype=np.float64)
    return ((n - 1) ** 2 + k ** 2) / ((n + 1) ** 2 + k ** 2)
