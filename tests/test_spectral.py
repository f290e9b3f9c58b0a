"""Spectral data layer: RGB upsampling and glass dispersion.

Outside sources: colour-science (CIE 1931 2-degree observer, CIE illuminants,
the ITU-R BT.709 matrices, and its own implementation of Jakob & Hanika 2019,
``colour.recovery.find_coefficients_Jakob2019``); the SCHOTT N-BK7 data sheet
(n_d = 1.5168, V_d = 64.17); Malitson 1965 for fused silica (n_d = 1.4585,
V_d = 67.8, from memory).
"""
from __future__ import annotations

import numpy as np
import pytest

colour = pytest.importorskip("colour", reason="the spectral mode needs colour-science")

from refrender.spectral import coefficient_table, data, dispersion  # noqa: E402
from refrender.spectral.upsample import sigmoid_spectrum  # noqa: E402


@pytest.fixture(scope="module")
def table():
    return coefficient_table()


def _grid(n=11):
    g = np.linspace(0.0, 1.0, n)
    return np.stack(np.meshgrid(g, g, g, indexing="ij"), axis=-1).reshape(-1, 3)


def test_white_reflector_is_white():
    """A reflectance of 1 under D65 is RGB (1, 1, 1) in Rec. 709, whose white is D65
    (colour-science's tables; the small residue is the rounding of the xy white point)."""
    rgb = data.reflectance_to_rgb(np.ones(data.WAVELENGTHS.shape))
    np.testing.assert_allclose(rgb, 1.0, atol=2e-3)


def test_upsampling_round_trip_and_bounds(table):
    """RGB -> spectrum -> RGB under the working white within 1e-3 on an 11^3 grid of
    reflectances, and every spectrum within [0, 1] at every wavelength."""
    rgb = _grid()
    spectra = table.spectrum(rgb)
    assert spectra.min() >= 0.0 and spectra.max() <= 1.0
    back = data.reflectance_to_rgb(spectra)
    assert np.max(np.abs(back - rgb)) < 1e-3
    assert np.all(spectra[np.max(rgb, axis=1) == 0] == 0.0)          # black reflects nothing


def test_table_fit_error(table):
    """Every cell of the fitted table reaches its colour to a CIELAB Delta E below
    0.01, a hundredth of a just-noticeable difference (common practice: JND ~ 1)."""
    assert table.errors.max() < 1e-2


@pytest.mark.parametrize("rgb", [[0.5, 0.3, 0.2], [0.1, 0.6, 0.3], [0.8, 0.8, 0.1], [0.05, 0.05, 0.4]])
def test_spectrum_matches_colour_science_jakob2019(table, rgb):
    """The model's optimum is unique: our spectrum equals the one colour-science's
    independent implementation finds (to its stopping error of 1e-4 Delta E)."""
    from colour.recovery.jakob2019 import find_coefficients_Jakob2019, sd_Jakob2019
    shape = colour.SpectralShape(data.LAMBDA_MIN, data.LAMBDA_MAX, 1.0)
    cmfs = colour.MSDS_CMFS[data.OBSERVER].copy().align(shape)
    d65 = colour.SDS_ILLUMINANTS["D65"].copy().align(shape)
    xyz = np.linalg.inv(data.xyz_to_rgb_matrix()) @ np.array(rgb)
    coefficients, _ = find_coefficients_Jakob2019(xyz, cmfs, d65, max_error=1e-4)
    theirs = sd_Jakob2019(coefficients, shape).values
    assert np.max(np.abs(table.spectrum(np.array(rgb)) - theirs)) < 1e-4


def test_sigmoid_is_bounded_for_huge_coefficients():
    s = sigmoid_spectrum(np.array([[1e200, -1e200, 1e300], [0.0, 0.0, -1e308]]))
    assert np.all(np.isfinite(s)) and s.min() >= 0.0 and s.max() <= 1.0


def test_n_bk7_sellmeier_matches_the_data_sheet():
    """SCHOTT N-BK7: n_d = 1.5168, V_d = 64.17 (catalogue values)."""
    b, c = dispersion.SELLMEIER_PRESETS["N-BK7"]
    n = lambda lam: dispersion.sellmeier(lam, b, c)   # noqa: E731
    assert n(dispersion.LAMBDA_D) == pytest.approx(1.5168, abs=5e-5)
    assert dispersion.abbe_number(n) == pytest.approx(64.17, abs=0.01)


def test_fused_silica_sellmeier_matches_malitson():
    """Malitson 1965: n_d = 1.4585, V_d = 67.8 (from memory)."""
    b, c = dispersion.SELLMEIER_PRESETS["fused_silica"]
    n = lambda lam: dispersion.sellmeier(lam, b, c)   # noqa: E731
    assert n(dispersion.LAMBDA_D) == pytest.approx(1.4585, abs=5e-5)
    assert dispersion.abbe_number(n) == pytest.approx(67.8, abs=0.05)


def test_cauchy_through_n_d_and_abbe_number():
    a, b = dispersion.cauchy_from_abbe(1.5168, 64.17)
    n = lambda lam: dispersion.cauchy(lam, a, b)      # noqa: E731
    assert n(dispersion.LAMBDA_D) == pytest.approx(1.5168, rel=1e-12)
    assert dispersion.abbe_number(n) == pytest.approx(64.17, rel=1e-9)
