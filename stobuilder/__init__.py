"""stobuilder: Slater-type-orbital minimal basis sets, expanded in Gaussians, for open codes."""

__version__ = "0.1.0"

from .expansion import Fit, fit_sto  # noqa: E402
