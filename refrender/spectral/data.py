"""CIE colorimetric data on one wavelength grid, read from colour-science.

The visible range of the spectral mode is 360-830 nm, the domain of the CIE
1931 2-degree colour-matching functions (CIE 015:2018), sampled every 1 nm as
colour-science tabulates them.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from ..errors import RefrenderError

LAMBDA_MIN = 360.0
LAMBDA_MAX = 830.0
#: the integration grid, nm (1 nm steps)
WAVELENGTHS = np.arange(LAMBDA_MIN, LAMBDA_MAX + 0.5, 1.0)

#: scene-format illuminant names -> colour-science's keys
ILLUMINANTS = {"A": "A", "D50": "D50", "D65": "D65", "F2": "FL2", "F11": "FL11"}
OBSERVER = "CIE 1931 2 Degree Standard Observer"


def _colour():
    try:
        import colour
    except ImportError as exc:  # pragma: no cover - colour-science is a dependency of the spectral mode
        raise RefrenderError("spectral mode needs colour-science: pip install colour-science") from exc
    return colour


@lru_cache(maxsize=1)
def cmfs() -> np.ndarray:
    """(n, 3) CIE 1931 2-degree x-bar, y-bar, z-bar on :data:`WAVELENGTHS`."""
    colour = _colour()
    table = colour.MSDS_CMFS[OBSERVER].copy().align(colour.SpectralShape(LAMBDA_MIN, LAMBDA_MAX, 1.0))
    out = np.ascontiguousarray(table.values, dtype=np.float64)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=None)
def illuminant(name: str) -> np.ndarray:
    """(n,) relative spectral power of a CIE illuminant on :data:`WAVELENGTHS` (as tabulated, not normalised)."""
    colour = _colour()
    sd = colour.SDS_ILLUMINANTS[ILLUMINANTS[name]].copy()
    sd = sd.align(colour.SpectralShape(LAMBDA_MIN, LAMBDA_MAX, 1.0))
    out = np.ascontiguousarray(sd.values, dtype=np.float64)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=None)
def xyz_to_rgb_matrix(space: str = "ITU-R BT.709") -> np.ndarray:
    """3x3 matrix from CIE XYZ to the linear RGB of a colour space (colour-science's)."""
    m = np.array(_colour().RGB_COLOURSPACES[space].matrix_XYZ_to_RGB, dtype=np.float64)
    m.setflags(write=False)
    return m


def reflectance_to_rgb(spectra: np.ndarray, white: str = "D65", space: str = "ITU-R BT.709") -> np.ndarray:
    """Linear RGB of reflectance spectra (..., n) lit by illuminant *white*,
    normalised so that a perfect white reflector has Y = 1."""
    light = illuminant(white)
    weights = light[:, None] * cmfs()
    xyz = spectra @ weights / (light @ cmfs()[:, 1])
    return xyz @ xyz_to_rgb_matrix(space).T
