"""Spectral data and models: colour-matching functions, illuminants, RGB
upsampling to smooth bounded spectra (Jakob & Hanika 2019) and dispersion
formulas for glass.

Colorimetric data come from colour-science (the observer and illuminant
tables of the CIE); nothing here is typed by hand except the published glass
coefficients in :mod:`.dispersion`, each with its source.
"""
from .data import LAMBDA_MAX, LAMBDA_MIN, WAVELENGTHS, cmfs, illuminant, xyz_to_rgb_matrix
from .upsample import SigmoidTable, coefficient_table, sigmoid_spectrum

__all__ = ["LAMBDA_MIN", "LAMBDA_MAX", "WAVELENGTHS", "cmfs", "illuminant", "xyz_to_rgb_matrix",
           "SigmoidTable", "coefficient_table", "sigmoid_spectrum"]
