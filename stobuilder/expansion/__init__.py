"""Gaussian expansions of Slater-type orbitals (STO-nG), fitted at ζ = 1 and scaled by ζ².

fit_sto fits from scratch (N ≤ 12; norm "l2" least squares or "h1" Sobolev; optional effective
n* and ζ ratios within one exponent set); lookup reads the shipped library (data/fits_l2.json,
data/fits_h1.json) and fits on demand what it lacks, caching those fits in the user's cache
folder (cache_dir). Fit.scaled(zeta) gives the exponents for an STO of exponent zeta.
"""

from stobuilder.expansion.fit import MAX_GAUSSIANS, NORMS, Fit, fit_sto, normalise_subshells
from stobuilder.expansion.library import cache_dir, library_families, lookup

__all__ = ["MAX_GAUSSIANS", "NORMS", "Fit", "cache_dir", "fit_sto", "library_families", "lookup", "normalise_subshells"]
