"""Gaussian expansions of Slater-type orbitals (STO-nG), fitted at ζ = 1 and scaled by ζ².

fit_sto fits from scratch; lookup reads the shipped library (data/fits_l2.json) and fits on
demand what it lacks. Fit.scaled(zeta) gives the exponents for an STO of exponent zeta.
"""

from .fit import MAX_GAUSSIANS, Fit, fit_sto, normalise_subshells
from .library import library_families, lookup

__all__ = ["MAX_GAUSSIANS", "Fit", "fit_sto", "library_families", "lookup", "normalise_subshells"]
