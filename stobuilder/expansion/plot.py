"""A figure of one fit: the STO against its Gaussian expansion, the residual, and ε against N.

Needs matplotlib (``pip install stobuilder[plot]``); drawn with the non-interactive Agg backend.
Panels: (a) radial functions R(r), (b) r²-weighted densities r²R(r)², (c) the residual
R_STO − R_Gauss on its own axis, (d) ε of the family against the number of Gaussians N for both
norms (log scale), the plotted fit marked.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from stobuilder.core.errors import InputError
from stobuilder.expansion.fit import MAX_GAUSSIANS, NORMS, Fit
from stobuilder.expansion.report import NORM_TITLES, expansion_radial, n_effective, sto_radial, subshell_zetas


def _matplotlib():
    try:
        import matplotlib
    except ImportError:
        raise InputError("--plot needs matplotlib: pip install 'stobuilder[plot]'") from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def plot_fit(fit: Fit, path: str, zeta: float = 1.0, family_fits: Callable[[str, int], Fit] | None = None) -> str:
    """Draw ``fit`` at first-subshell exponent ``zeta`` (bohr⁻¹) into the PNG file ``path`` (atomically).

    ``family_fits(norm, N)`` returns the fit of the same subshells with N Gaussians in ``norm``
    (default: the library look-up); it feeds panel (d).
    """
    if not str(path).lower().endswith(".png"):
        raise InputError(f"--plot {path}: give a file name ending in .png")
    plt = _matplotlib()
    if family_fits is None:
        from stobuilder.expansion.library import lookup

        def family_fits(norm, n):
            return lookup(list(fit.subshells), n, norm, n_eff=fit.n_eff or None, zeta_ratio=fit.zeta_ratio or None)

    zetas = subshell_zetas(fit, zeta)
    r_max = max((2.0 * n_effective(fit, k) + 6.0) / zetas[k] for k in fit.subshells)
    r = np.linspace(0.0, r_max, 1500)
    r_log = np.geomspace(1e-3 * r_max, r_max, 1500)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    fig, axes = plt.subplots(2, 2, figsize=(11.0, 8.0))
    (ax_r, ax_d), (ax_res, ax_eps) = axes
    # subshells with the same radial STO (same n*, same ζ) are drawn once
    groups: dict[tuple[float, float], list[str]] = {}
    for label in fit.subshells:
        groups.setdefault((n_effective(fit, label), zetas[label]), []).append(label)
    for (n, z), labels in groups.items():
        sto = sto_radial(fit, labels[0], zeta, r)
        name = "/".join(labels)
        ax_r.plot(r, sto, color="0.6", lw=4.0, label=f"{name} STO, ζ = {z:.4g} bohr$^{{-1}}$")
        ax_d.plot(r, r * r * sto * sto, color="0.6", lw=4.0, label=f"{name} STO")
    for i, label in enumerate(fit.subshells):
        col = colours[i % len(colours)]
        gau = expansion_radial(fit, label, zeta, r)
        ax_r.plot(r, gau, color=col, lw=1.4, ls="--", label=f"{label} STO-{fit.gaussians}G")
        ax_d.plot(r, r * r * gau * gau, color=col, lw=1.4, ls="--", label=f"{label} STO-{fit.gaussians}G")
        res = sto_radial(fit, label, zeta, r_log) - expansion_radial(fit, label, zeta, r_log)
        ax_res.plot(r_log, res, color=col, lw=1.3, label=f"{label}: ε = {fit.error[label]:.3e}")
    ax_r.set(xlabel="r / bohr", ylabel="R(r) / bohr$^{-3/2}$", title="(a) radial function")
    ax_d.set(xlabel="r / bohr", ylabel="r$^2$R(r)$^2$ / bohr$^{-1}$", title="(b) radial density")
    ax_res.set(xlabel="r / bohr (log scale)", ylabel="R$_{STO}$ − R$_{Gauss}$ / bohr$^{-3/2}$",
               title=f"(c) residual (ε in the {fit.norm.upper()} norm)", xscale="log")
    ax_res.axhline(0.0, color="grey", lw=0.6)
    ax_res.set_xlim(r_log[0], r_max)
    for ax in (ax_r, ax_d):
        ax.set_xlim(0.0, r_max)
    for ax in (ax_r, ax_d, ax_res):
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
    ns = np.arange(1, MAX_GAUSSIANS + 1)
    markers = {"l2": "o", "h1": "s"}
    for norm in NORMS:
        fits = [family_fits(norm, int(n)) for n in ns]
        for i, label in enumerate(fit.subshells):
            col = colours[i % len(colours)]
            ax_eps.semilogy(ns, [f.error[label] for f in fits], marker=markers[norm], ms=4, color=col,
                            ls="-" if norm == "l2" else ":", label=f"{label}, {norm.upper()} norm")
    for label in fit.subshells:
        ax_eps.semilogy([fit.gaussians], [fit.error[label]], marker="*", ms=14, color="black", ls="none")
    ax_eps.semilogy([], [], marker="*", ms=10, color="black", ls="none", label="this fit")
    ax_eps.set(xlabel="number of Gaussians N", ylabel="ε (squared residual norm)", title="(d) ε against N",
               xticks=ns)
    ax_eps.grid(alpha=0.3, which="both")
    ax_eps.legend(fontsize=8, ncol=2 if len(fit.subshells) > 2 else 1)
    title = (f"STO-{fit.gaussians}G expansion of {', '.join(fit.subshells)}: {NORM_TITLES[fit.norm]} fit"
             + (", effective n* " + ", ".join(f"{k} {v:g}" for k, v in fit.n_eff.items()) if fit.n_eff else ""))
    fig.suptitle(title)
    fig.tight_layout()
    from stobuilder.core.files import atomic_write

    try:
        atomic_write(path, lambda tmp: fig.savefig(tmp, dpi=110, metadata={"Software": None}, format="png"))
    finally:
        plt.close(fig)
    return path


__all__ = ["plot_fit"]
