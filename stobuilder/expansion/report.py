"""What the ``fit`` command shows: a fit's numbers as a table or a JSON document, and the radial
functions of an STO and of its Gaussian expansion (for the plot and for checks).

Units: r in bohr, ζ in bohr⁻¹, exponents in bohr⁻², radial functions in bohr^(−3/2).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import gammaln

from stobuilder.model.elements import parse_subshell_label
from stobuilder.expansion.fit import Fit
from stobuilder.expansion.analytic import sto_norm

NORM_TITLES = {"l2": "least squares (L2)", "h1": "Sobolev H1 (value and gradient)"}


def subshell_zetas(fit: Fit, zeta: float) -> dict[str, float]:
    """ζ (bohr⁻¹) of every subshell of ``fit`` when its first subshell has ``zeta``."""
    return {label: zeta * fit.zeta_ratio.get(label, 1.0) for label in fit.subshells}


def n_effective(fit: Fit, label: str) -> float:
    return fit.n_eff.get(label, float(parse_subshell_label(label)[0]))


def sto_radial(fit: Fit, label: str, zeta: float, r: np.ndarray) -> np.ndarray:
    """Normalised STO radial function N r^(n*−1) e^(−ζ' r) of ``label`` (ζ' = ζ × its ratio)."""
    n = n_effective(fit, label)
    z = subshell_zetas(fit, zeta)[label]
    return sto_norm(n, z) * np.power(r, n - 1.0) * np.exp(-z * r)


def expansion_radial(fit: Fit, label: str, zeta: float, r: np.ndarray) -> np.ndarray:
    """Σ_k c_k N_k r^l e^(−α_k ζ² r²): the contraction of ``label`` at first-subshell exponent ζ."""
    l = parse_subshell_label(label)[1]
    alpha = np.array(fit.scaled(zeta))
    p = l + 1.5
    norms = np.exp(0.5 * (math.log(2.0) + p * np.log(2.0 * alpha) - gammaln(p)))
    c = np.array(fit.coefficients[label])
    return np.power(r, l) * (np.exp(-np.outer(r * r, alpha)) @ (c * norms))


def fit_document(fit: Fit, zeta: float = 1.0) -> dict:
    """The fit as a JSON-ready dict, exponents scaled to ``zeta`` (bohr⁻¹ of the first subshell)."""
    doc = {
        "subshells": list(fit.subshells),
        "gaussians": fit.gaussians,
        "norm": fit.norm,
        "zeta": {k: v for k, v in subshell_zetas(fit, zeta).items()},
        "exponents": list(fit.scaled(zeta)),
        "coefficients": {k: list(v) for k, v in fit.coefficients.items()},
        "error": dict(fit.error),
        "constrained": fit.constrained,
        "units": "zeta in bohr^-1, exponents in bohr^-2; coefficients for normalised primitives, "
        "normalised contraction; error: squared residual norm of the optimum in the fitted norm",
    }
    if fit.n_eff:
        doc["n_eff"] = dict(fit.n_eff)
    return doc


def fit_table(fit: Fit, zeta: float = 1.0) -> str:
    """A plain-text table: exponents, one coefficient column per subshell, ε per subshell."""
    zetas = subshell_zetas(fit, zeta)
    head = ", ".join(f"{k} zeta {v:.6g}" for k, v in zetas.items())
    lines = [
        f"STO-{fit.gaussians}G fit of {','.join(fit.subshells)} ({head} bohr^-1), norm {fit.norm}: "
        f"{NORM_TITLES[fit.norm]}" + (" [constrained: exponent ratios >= 1.1]" if fit.constrained else "")
    ]
    if fit.n_eff:
        lines.append("  effective n*: " + ", ".join(f"{k} {v:g}" for k, v in fit.n_eff.items()))
    lines.append(f"  {'exponent/bohr^-2':>22}" + "".join(f"{'c(' + k + ')':>22}" for k in fit.subshells))
    for i, a in enumerate(fit.scaled(zeta)):
        lines.append(f"  {a:>22.14e}" + "".join(f"{fit.coefficients[k][i]:>22.14f}" for k in fit.subshells))
    lines.append(f"  {'epsilon':>22}" + "".join(f"{fit.error[k]:>22.6e}" for k in fit.subshells))
    return "\n".join(lines)


__all__ = ["expansion_radial", "fit_document", "fit_table", "sto_radial", "subshell_zetas"]
