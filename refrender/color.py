"""Working colour spaces: primaries, white points and conversion matrices.

A render is spectrally an RGB computation; the working space says what its
three numbers mean.  Every RGB input of a scene (albedos, emission, light
intensities, checker colours, linear textures, environment maps) is taken
to be in the working space; 8-bit sRGB-encoded textures (PNG, JPEG) are
decoded to linear Rec. 709 (IEC 61966-2-1) and converted.  Every EXR carries
the standard OpenEXR ``chromaticities`` attribute of its space.

Spaces (CIE 1931 xy of R, G, B and white):

* ``linear_rec709``: ITU-R BT.709-6 primaries, D65 white (0.3127, 0.3290).
* ``acescg``: ACES AP1 primaries and the ACES white (0.32168, 0.33767)
  (Academy S-2014-004, "ACEScg"; the white of SMPTE ST 2065-1).
* ``linear_p3_d65``: the P3 primaries of SMPTE EG 432-1 with D65.
* ``cie_xyz``: CIE 1931 XYZ as the OpenEXR chromaticities express it
  (red (1, 0), green (0, 1), blue (0, 0), white E (1/3, 1/3)).

Conversion A -> B: ``M_B^-1 · CAT(w_A -> w_B) · M_A``, where M is the
normalised primary matrix (RGB -> XYZ with white (1, 1, 1) -> Y = 1; SMPTE RP
177-1993) and CAT the von Kries-type Bradford transform (Lam 1985, as given
by Lindbloom and CIE 159:2004's predecessor): ``B^-1 diag(B w_B / B w_A) B``.
Checked against colour-science in tests/test_color.py.
"""
from __future__ import annotations

import numpy as np

from .errors import RenderError

#: name -> (xR, yR, xG, yG, xB, yB, xW, yW)
SPACES = {
    "linear_rec709": (0.64, 0.33, 0.30, 0.60, 0.15, 0.06, 0.3127, 0.3290),
    "acescg": (0.713, 0.293, 0.165, 0.830, 0.128, 0.044, 0.32168, 0.33767),
    "linear_p3_d65": (0.680, 0.320, 0.265, 0.690, 0.150, 0.060, 0.3127, 0.3290),
    "cie_xyz": (1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0 / 3.0, 1.0 / 3.0),
}
DEFAULT = "linear_rec709"
#: Bradford cone response matrix (Lam 1985)
BRADFORD = np.array([[0.8951, 0.2664, -0.1614],
                     [-0.7502, 1.7135, 0.0367],
                     [0.0389, -0.0685, 1.0296]])


def check_space(name, where: str = "color_space") -> str:
    if name not in SPACES:
        raise RenderError(f"{where}: must be one of {', '.join(SPACES)}, got {name!r}")
    return name


def chromaticities(name: str) -> tuple:
    return SPACES[check_space(name)]


def _xyz(x, y):
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


def rgb_to_xyz(chroma) -> np.ndarray:
    """Normalised primary matrix of 8 chromaticities (RGB -> XYZ, white Y = 1)."""
    c = np.asarray(chroma, dtype=np.float64)
    prim = np.array([[c[0], c[2], c[4]], [c[1], c[3], c[5]],
                     [1.0 - c[0] - c[1], 1.0 - c[2] - c[3], 1.0 - c[4] - c[5]]])
    w = _xyz(c[6], c[7])
    s = np.linalg.solve(prim, w)
    return prim * s[None, :]


def white_xyz(chroma) -> np.ndarray:
    return _xyz(chroma[6], chroma[7])


def bradford(src_white_xyz, dst_white_xyz) -> np.ndarray:
    """Bradford chromatic adaptation matrix (XYZ -> XYZ) between two whites."""
    a = BRADFORD @ np.asarray(src_white_xyz, float)
    b = BRADFORD @ np.asarray(dst_white_xyz, float)
    return np.linalg.solve(BRADFORD, np.diag(b / a) @ BRADFORD)


def conversion(src, dst) -> np.ndarray:
    """3x3 matrix taking linear RGB in ``src`` to ``dst`` (names or 8 chromaticities)."""
    cs = SPACES[src] if isinstance(src, str) else tuple(src)
    cd = SPACES[dst] if isinstance(dst, str) else tuple(dst)
    m_src = rgb_to_xyz(cs)
    m_dst = rgb_to_xyz(cd)
    cat = bradford(white_xyz(cs), white_xyz(cd))
    return np.linalg.solve(m_dst, cat @ m_src)


def convert(rgb, src, dst) -> np.ndarray:
    """Convert an (..., 3) linear RGB array between spaces."""
    m = conversion(src, dst)
    return np.asarray(rgb, dtype=np.float64) @ m.T


def luminance_weights(name: str) -> np.ndarray:
    """Y row of the space's RGB -> XYZ matrix (after adaptation to D65 is not applied)."""
    return rgb_to_xyz(chromaticities(name))[1]


def space_of(chroma, tol: float = 1e-5):
    """Name of the space whose chromaticities match (float32 header values), or None."""
    if chroma is None:
        return DEFAULT
    c = np.asarray(chroma, dtype=np.float64)
    for name, ref in SPACES.items():
        if np.all(np.abs(c - np.asarray(ref)) <= tol):
            return name
    return None


def same_space(a, b, tol: float = 1e-5) -> bool:
    a = np.asarray(SPACES[DEFAULT] if a is None else a, dtype=np.float64)
    b = np.asarray(SPACES[DEFAULT] if b is None else b, dtype=np.float64)
    return bool(np.all(np.abs(a - b) <= tol))
