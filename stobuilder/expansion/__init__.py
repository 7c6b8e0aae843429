"""Gaussian expansions of Slater-type orbitals (STO-nG), fitted at ζ = 1 and scaled by ζ²."""

from .fit import MAX_GAUSSIANS, Fit, fit_sto, normalise_subshells

__all__ = ["MAX_GAUSSIANS", "Fit", "fit_sto", "normalise_subshells"]
