"""STO-nG expansions (stobuilder.expansion) against published tables and exact results.

The objective of [HSP69] and [S70], which our fits minimise: Σ ∫(φ − χ)² over the subshells
sharing exponents, each contraction χ normalised, = Σ 2(1 − √q) with q = sᵀG⁻¹s; ε below is a
subshell's term of it.

References used below:
  [HSP69]  W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969)   (STO-3G, STO-nG)
  [S70]    R. F. Stewart, J. Chem. Phys. 52, 431 (1970)                              (STO-nG, n ≤ 6)
  [HDSP70] W. J. Hehre, R. Ditchfield, R. F. Stewart, J. A. Pople, J. Chem. Phys. 52, 2769 (1970) (Na–Ar)
  [P80/83] W. J. Pietro et al., J. Am. Chem. Soc. 102, 2225 (1980); J. Comput. Chem. 4, 241 (1983)
  [GR]     Gradshteyn & Ryzhik, Table of Integrals, 7th ed. (2007), 3.462.1
  [SO]     A. Szabo, N. S. Ostlund, Modern Quantum Chemistry (1982/1989), ch. 3
  PySCF's transcriptions pyscf/gto/basis/sto-3g.dat and sto-6g.dat, read with PySCF's own NWChem parser.

Conventions checked against PySCF's files: their coefficients refer to normalised primitives and
give a contraction of norm 1 (within 1e-7, the rounding of the printed digits), not the
unnormalised least-squares optimum (norm² q = 1 − ε + ε²/4); our stored coefficients follow the
same convention.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq
from scipy.special import gamma, hyperu

from stobuilder.core.errors import InputError
from scalar_integrals import radial_integrals
from stobuilder.expansion import Fit, fit_sto, library_families, lookup
from stored_tables import analyse, blocks, eps_of, label_of
from stobuilder.expansion.analytic import gaussian_overlap

EXP_TOL = 1e-5  # relative, exponents at ζ = 1 vs ours (task specification; the printed-precision test is tighter)
COEF_TOL = 1e-5  # absolute, coefficients vs ours (task specification; the printed-precision test is tighter)
EPS_TOL = 1e-7  # relative slack on "our ε ≤ stored ε" (task specification)


@pytest.fixture(scope="module")
def sto3g():
    return analyse("sto-3g.dat", 3)


@pytest.fixture(scope="module")
def sto6g():
    return analyse("sto-6g.dat", 6)


# Every block of sto-3g.dat that deviates from our fits by more than its printed precision
# (``allowed``), with the defect established by refitting (see the dedicated tests below for the
# evidence). Under the published objective (contractions normalised) every other number of the file
# is ours to its printed digits; two defects claimed under the unnormalised one are withdrawn
# (test_sto3g_2sp_is_the_normalised_optimum, test_sto3g_4s4p4d_is_the_normalised_optimum).
Y_CD = ("Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd")
IN_I = ("In", "Sn", "Sb", "Te", "I")
EXP3 = {"exp0", "exp1", "exp2"}
KNOWN_STO3G = {
    # O 1s: second exponent 23.8088610 for 23.8088660 (test_sto3g_oxygen_1s_exponent_digit)
    ("O", "1s", "s"): {"exp1"},
    # Y: exponents belong to other fits than the coefficients (test_sto3g_yttrium_mixed_fits)
    ("Y", "3s,3p,3d", "sp"): EXP3,
    ("Y", "4s,4p,4d", "sp"): EXP3 | {"c4s2"},
    ("Y", "3s,3p,3d", "d"): EXP3,
    ("Y", "4s,4p,4d", "d"): EXP3,
    # Zr: 5SP and valence-D exponent sets swapped (test_sto3g_zirconium_swapped_exponents)
    ("Zr", "5s,5p", "sp"): EXP3,
    ("Zr", "4s,4p,4d", "d"): EXP3,
    # Y–Cd 4SP: 4s coefficient 1.1557874500 for 1.1155787450 (test_sto3g_4s_coefficient_transposed)
    **{(s, "4s,4p,4d", "sp"): {"c4s2"} for s in Y_CD if s != "Y"},
}
SC_ZN = ("Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn")
GA_KR = ("Ga", "Ge", "As", "Se", "Br", "Kr")
K_KR = ("K", "Ca") + SC_ZN + GA_KR
ALL6 = {f"exp{k}" for k in range(6)}
SP6 = {f"c3{x}{k}" for x in "sp" for k in range(6)}
KNOWN_STO6G = {
    # 3SP coefficients of the [3s,3p] fit paired with exponents of the [3s,3p,3d] fit (test_sto6g_mixed_3sp)
    **{(s, "3s,3p", "sp"): ALL6 for s in SC_ZN},
    **{(s, "3s,3p,3d", "spd"): SP6 for s in GA_KR},
    # B: exponents scattered by up to 4.3e-6 around ζ² times ours (test_sto6g_matches_stewart_closely)
    ("B", "1s", "s"): ALL6,
    ("B", "2s,2p", "sp"): {"exp0", "exp2", "exp3", "exp5"},
}
# K–Kr 4SP: the published ζ = 1 [4s,4p] set itself is off the optimum by up to 1.5e-7 relative,
# the same for every element (test_sto6g_4sp_published_fit_not_converged); which of its exponents
# exceed their printed precision depends on the element's ζ², so these blocks are listed by family.
OFF_4SP_STO6G = {(s, "4s,4p", "sp") for s in K_KR}


def test_pyscf_contractions_are_normalised(sto3g):
    """PySCF's STO-3G coefficients give norm-1 contractions (as ours do), not the unnormalised L2
    optimum (norm² = q ≈ 1 − ε).

    Measured: |norm² − 1| ≤ 0.01 ε for every consistent STO-3G block, where the unnormalised
    least-squares optimum would be off by about ε. (STO-6G cannot discriminate: its 4sp coefficients are
    printed with 7 decimals, whose rounding alone moves norm² by ~2e-6 ≈ 2ε.)
    """
    for r in sto3g:
        if r["items"]:
            continue
        scaled = np.array(r["block"]["ex"]) / r["zeta2"]
        for l, c in r["block"]["c"].items():
            c = np.array(c)
            eps = r["fit"].error[label_of(r["fam"].split(","), l)]
            assert abs(c @ gaussian_overlap(l, scaled) @ c - 1.0) < 0.01 * eps, (r["symbol"], r["fam"], l)
    fit = fit_sto("1s", 3)
    c = np.array(fit.coefficients["1s"])
    assert abs(c @ gaussian_overlap(0, np.array(fit.exponents)) @ c - 1.0) < 1e-12


@pytest.mark.parametrize("which", ["sto3g", "sto6g"])
def test_reproduces_published_expansions(which, request):
    """Every block of PySCF's STO-3G / STO-6G is our fit scaled by one ζ², except the listed defects."""
    records = request.getfixturevalue(which)
    known = KNOWN_STO3G if which == "sto3g" else KNOWN_STO6G
    found = {(r["symbol"], r["fam"], r["ls"]): r["items"] for r in records if r["items"]}
    if which == "sto6g":
        off = {key: found.pop(key) for key in OFF_4SP_STO6G if key in found}
        assert all(items <= ALL6 for items in off.values()) and len(off) >= 16
    assert found == known
    families = {r["fam"] for r in records}
    # every shell family in the files is covered (check by coefficients, see classify)
    expected_families = {"1s", "2s,2p", "3s,3p", "3s,3p,3d", "4s,4p"}
    if which == "sto3g":
        expected_families |= {"4s,4p,4d", "5s,5p"}
    assert families == expected_families
    for r in records:
        if r["items"]:
            continue
        assert np.max(np.abs(r["exp_dev"])) <= EXP_TOL
        assert all(np.max(np.abs(d)) <= COEF_TOL for d in r["coef_dev"].values())


@pytest.mark.parametrize("which", ["sto3g", "sto6g"])
def test_our_error_never_larger_than_published(which, request):
    for r in request.getfixturevalue(which):
        assert r["eps_ours"] <= r["eps_stored"] * (1 + EPS_TOL), (r["symbol"], r["fam"], r["ls"])


def test_sto6g_matches_stewart_closely(sto6g):
    """Stewart's 1970 STO-6G [S70] is reproduced to < 2e-7 in exponents wherever it is consistent.
    Boron (KNOWN_STO6G) is the exception: its 1s and 2sp exponents scatter by up to 4.3e-6
    (measured) around ζ² times our fit, 100× worse than every other element, as if B were derived
    from a less precise ζ = 1 table (the B 1s ζ from the median primitive is 4.679999582, not 4.68);
    refitting cannot recover its digits (no other fit or ζ reproduces them), so it stays a defect."""
    for r in sto6g:
        dev = float(np.max(np.abs(r["exp_dev"])))
        if r["symbol"] == "B":
            assert 1e-6 < dev < EXP_TOL and r["items"]
        elif not r["items"]:
            assert dev < 2e-7, (r["symbol"], r["fam"])


def _quadrature_fit(n_gauss, start):
    """An independent fit of [2s, 2p] at ζ = 1 (a different method from the package's closed
    forms and Newton search): overlaps ⟨φ|g_k⟩ by Gauss–Legendre quadrature in r = t/(1 − t),
    the published objective Σ 2(1 − √q) with q = sᵀG⁻¹s ([HSP69]: ∫(φ − χ)² with ∫χ² = 1; G of
    normalised Gaussians (2√(αβ)/(α+β))^(l+3/2), [SO] ch. 3) minimised by scipy's Nelder–Mead."""
    from scipy.optimize import minimize

    t, w = np.polynomial.legendre.leggauss(400)
    t, w = (t + 1) / 2, w / 2
    r, dr = t / (1 - t), 1 / (1 - t) ** 2
    sto = r**2 * np.exp(-r) * 2**2.5 / math.sqrt(24)  # r·R(r) of the 2s and 2p STO, R = N r e^(−r)

    def objective(x):
        a = np.exp(x)
        total = 0.0
        for l in (0, 1):
            g = r[:, None] ** (l + 1) * np.exp(-np.outer(r * r, a)) * np.sqrt(2 * (2 * a) ** (l + 1.5) / gamma(l + 1.5))
            s = (w * dr * sto) @ g
            total += 2 * (1 - math.sqrt(s @ np.linalg.solve(gaussian_overlap(l, a), s)))
        return total

    res = minimize(objective, np.log(start), method="Nelder-Mead",
                   options={"xatol": 1e-11, "fatol": 1e-17, "maxiter": 4000})
    return np.exp(res.x), res.fun


def test_sto3g_2sp_is_the_normalised_optimum(sto3g):
    """[HSP69] 2sp (Li–I): the stored digits are the optimum of the published objective, with the
    contractions normalised. Withdrawn: the defect "first exponent 8.2e-6 off the optimum, not
    converged" claimed before, which came from our minimising Σ(1 − q) (the unnormalised
    least-squares errors) instead. Evidence: Li 2sp (ζ = 0.80 [HSP69]) divided by ζ² equals ours
    to the printed digits (stored 0.6362897, 0.1478601, 0.0480887), and an independent quadrature
    fit (``_quadrature_fit``, started from PySCF's stored digits ÷ ζ²) lands on our exponents to
    3e-7 relative; its objective 1.002649306e-3 is ours (another independent quadrature fit,
    measured once, gave 1.002649305984e-3)."""
    li = next(r for r in sto3g if r["symbol"] == "Li" and r["fam"] == "2s,2p")
    ours = lookup(["2s", "2p"], 3)
    assert not li["items"]
    assert np.allclose(np.array(li["block"]["ex"]), np.array(ours.exponents) * 0.64, rtol=0, atol=1e-7)  # printed to 1e-7
    alpha, value = _quadrature_fit(3, np.array(li["block"]["ex"]) / 0.64)
    # the optimum is flat: a double-precision objective (rounding ~1e-16) places it to ~1e-7 in
    # ln α (measured 1.2e-7; another independent quadrature fit: 0.99420288, 0.23103134, 0.07513856), far
    # closer than the optimum of Σ(1 − q), 0.9941928 (our library when it minimised Σ(1 − q), 1e-5 away)
    assert np.allclose(alpha, ours.exponents, rtol=3e-7)
    assert abs(alpha[0] / 0.9941928 - 1) > 5e-6
    assert value == pytest.approx(ours.total_error, rel=1e-10)
    assert ours.total_error == pytest.approx(1.002649305984e-3, rel=1e-11)  # the other independent quadrature fit (measured once)
    # PySCF's digits at ζ = 1 ([HSP69] 2sp of every element Li–I): 0.994203, 0.231031, 0.0751386
    # (read from sto-3g.dat); ours rounds to them
    assert [round(a, 6) for a in ours.exponents[:2]] == [0.994203, 0.231031] and round(ours.exponents[2], 7) == 0.0751386


def test_sto3g_oxygen_1s_exponent_digit(sto3g):
    """O 1s (sto-3g.dat): second exponent 23.8088610, where ζ² × the [HSP69] 1s set gives
    23.808866 (0.405771156 × 7.66² = 23.80886604, [HSP69] 1s at ζ = 1; ours 23.80886605); the other two O
    1s exponents and the 1s of every other element match to their printed digits, so this is one
    digit (6 → 1 in the sixth decimal) of the transcription. Effect: 2.1e-7 relative on one
    exponent."""
    o = next(r for r in sto3g if r["symbol"] == "O" and r["fam"] == "1s")
    assert o["block"]["ex"][1] == 23.808861  # PySCF sto-3g.dat as stored
    assert round(lookup("1s", 3).exponents[1] * 7.66**2, 6) == 23.808866  # ζ(O 1s) = 7.66 [HSP69]
    assert round(0.405771156 * 7.66**2, 6) == 23.808866  # [HSP69] 1s at ζ = 1
    assert o["items"] == {"exp1"}


def test_sto3g_4s4p4d_is_the_normalised_optimum(sto3g):
    """In–I [4s,4p,4d] (Pietro et al. [P80/83]): the stored 4s coefficients are ours to the 10
    printed decimals (4s c₁ = 0.0576109534 stored, ours 0.05761095337). Withdrawn: the defect
    "published fit not converged, c₁ = 0.0576109534 vs our 0.0576256" claimed before, which was
    the optimum of Σ(1 − q), not of the published objective."""
    r = next(r for r in sto3g if r["symbol"] == "In" and r["fam"] == "4s,4p,4d")
    assert not r["items"]
    assert abs(r["coef_dev"]["4s"][1]) < 1e-10
    for symbol in IN_I:
        assert not next(x for x in sto3g if x["symbol"] == symbol and x["fam"] == "4s,4p,4d")["items"]


def test_sto6g_4sp_published_fit_not_converged(sto6g):
    """K–Kr 4SP ([S70] as stored in sto-6g.dat): the exponents are ζ² × one ζ = 1 set that lies
    off the optimum of the published objective by up to 1.5e-7 relative (measured; beyond the 10
    printed digits). Not a transcription error: the deviations from ours are the same for every
    element (the same set scaled), and at that set the objective is higher than ours and its
    gradient is not zero (ball arithmetic, 34 digits): the published fit was converged to ~1e-7."""
    from stobuilder.expansion.analytic import Problem, Target

    ours = lookup(["4s", "4p"], 6)
    devs = []
    for r in sto6g:
        if (r["symbol"], r["fam"], r["ls"]) in OFF_4SP_STO6G:
            devs.append(r["exp_dev"])
    assert len(devs) == len(K_KR)
    devs = np.array(devs)
    assert np.max(np.abs(devs - devs[0])) < 2e-9  # one set for all (the printed digits' rounding)
    assert 1e-7 < np.max(np.abs(devs[0])) < 2e-7
    problem = Problem((Target(4.0, 0, 1.0), Target(4.0, 1, 1.0)), "l2")
    k = next(r for r in sto6g if r["symbol"] == "K" and r["fam"] == "4s,4p")
    stored = problem.evaluate_ball(np.log(np.array(k["block"]["ex"]) / 1.43**2), order=1)  # ζ(K 4sp) = 1.43
    mine = problem.evaluate_ball(np.log(np.array(ours.exponents)), order=1)
    assert sum(stored[0]) - sum(mine[0]) > 1e-17 and sum(mine[0]) == pytest.approx(ours.total_error, rel=1e-14)
    assert np.max(np.abs(stored[1])) > 1e-10 > 1e-16 > np.max(np.abs(mine[1]))


def test_sto6g_magnesium_is_a_copy_of_sodium(sto3g, sto6g):
    """PySCF's sto-6g.dat Mg: every block equals Na's (exponents and coefficients), so its ζ are
    Na's (1s 10.61, 2sp 3.48, 3sp 1.75) where Mg's are 11.59, 3.90, 1.70 (Hehre, Ditchfield, Stewart
    & Pople 1970, as in sto-3g.dat). Found by the --gaussians 6 energies: the Mg atom comes out
    1.6 hartree below the stored sto-6g (test_molecular_energies). Each block is a consistent fit,
    so the block comparison above cannot see it."""
    assert blocks("sto-6g.dat", "Mg") == blocks("sto-6g.dat", "Na")
    zeta6 = {r["fam"]: round(math.sqrt(r["zeta2"]), 2) for r in sto6g if r["symbol"] == "Mg"}
    zeta3 = {r["fam"]: round(math.sqrt(r["zeta2"]), 2) for r in sto3g if r["symbol"] == "Mg"}
    na3 = {r["fam"]: round(math.sqrt(r["zeta2"]), 2) for r in sto3g if r["symbol"] == "Na"}
    assert zeta6 == na3 == {"1s": 10.61, "2s,2p": 3.48, "3s,3p": 1.75}  # [HDSP70] Na
    assert zeta3 == {"1s": 11.59, "2s,2p": 3.90, "3s,3p": 1.70}  # [HDSP70] Mg


def test_sto3g_4s_coefficient_transposed(sto3g):
    """Y–Cd 4SP: third 4s coefficient 1.1557874500 is 1.1155787450 (In–I) with digits shifted.

    Evidence: with 1.15578745 the contraction norm² is 1.0796 (measured), not 1; with
    1.115578745 it is 1 to 1e-6, and our fit gives 1.1155706.
    """
    for r in sto3g:
        if r["fam"] == "4s,4p,4d" and r["ls"] in ("sp", "spd") and r["symbol"] != "Y":
            c = np.array(r["block"]["c"][0])
            scaled = np.array(r["block"]["ex"]) / r["zeta2"]
            norm = c @ gaussian_overlap(0, scaled) @ c
            if r["symbol"] in Y_CD:
                assert c[2] == 1.15578745  # PySCF sto-3g.dat as stored
                assert norm == pytest.approx(1.0796, abs=1e-4)  # measured
                c[2] = 1.115578745
                assert abs(c @ gaussian_overlap(0, scaled) @ c - 1) < 1e-6
            else:
                assert c[2] == 1.115578745 and abs(norm - 1) < 1e-6


def _proportional_to(ex, fam, n_gauss=3):
    r = np.array(ex) / np.array(lookup(fam, n_gauss).exponents)
    return float(np.sqrt(np.median(r))), float(r.max() / r.min() - 1)


def test_sto3g_yttrium_mixed_fits(sto3g):
    """Y: each block's exponents are those of another fit than its coefficients (found by refitting)."""
    y = {(r["fam"], r["ls"]): r["block"]["ex"] for r in sto3g if r["symbol"] == "Y"}
    cases = {
        ("3s,3p,3d", "sp"): (["3s", "3p"], 7.97),  # exponents of [3s,3p], coefficients of [3s,3p,3d]
        ("4s,4p,4d", "sp"): (["4s", "4p"], 3.29),
        ("3s,3p,3d", "d"): (["3d"], 3.29),  # the single-3d fit
        ("4s,4p,4d", "d"): (["4d"], 3.46),  # the single-4d fit
    }
    for key, (fam, zeta) in cases.items():
        z, spread = _proportional_to(y[key], fam)
        assert spread < 1e-5 and z == pytest.approx(zeta, abs=5e-5)


def test_sto3g_zirconium_swapped_exponents(sto3g):
    """Zr: the 5SP block carries the [4s,4p,4d] exponents (ζ 1.95), the valence D the [5s,5p] ones (ζ 1.90)."""
    zr = {(r["fam"], r["ls"]): r["block"]["ex"] for r in sto3g if r["symbol"] == "Zr"}
    z, spread = _proportional_to(zr[("5s,5p", "sp")], ["4s", "4p", "4d"])
    assert spread < 1e-5 and z == pytest.approx(1.95, abs=5e-5)
    z, spread = _proportional_to(zr[("4s,4p,4d", "d")], ["5s", "5p"])
    assert spread < 1e-5 and z == pytest.approx(1.90, abs=5e-5)


def test_sto3g_sr_ag_5sp_identical_is_not_a_defect(sto3g):
    """Sr and Ag 5SP have identical exponents because both use ζ(5sp) = 1.80 [P80/83]; the blocks fit."""
    r = {r["symbol"]: r for r in sto3g if r["fam"] == "5s,5p"}
    assert r["Sr"]["block"]["ex"] == r["Ag"]["block"]["ex"]
    for s in ("Sr", "Ag"):
        assert not r[s]["items"] and math.sqrt(r[s]["zeta2"]) == pytest.approx(1.80, abs=1e-5)


def test_sto6g_mixed_3sp(sto6g):
    """STO-6G Sc–Kr: 3SP coefficients are the [3s,3p] fit's, the exponents the [3s,3p,3d] fit's.

    For Ga–Kr the 3D block shares those exponents with [3s,3p,3d] d coefficients, so the sp
    coefficients are the inconsistent side; the stored 3SP contraction has a larger ε than the
    consistent [3s,3p,3d] one.
    """
    sp, spd = lookup(["3s", "3p"], 6), lookup(["3s", "3p", "3d"], 6)
    for r in sto6g:
        if (r["symbol"], r["fam"], r["ls"]) not in KNOWN_STO6G or r["symbol"] == "B":
            continue
        z, spread = _proportional_to(r["block"]["ex"], ["3s", "3p", "3d"], 6)
        assert spread < 1e-7
        for l, lab in ((0, "3s"), (1, "3p")):
            # the [3s,3p] fit's to the printed 10 digits (measured 3.7e-11)
            assert np.max(np.abs(np.array(r["block"]["c"][l]) - np.array(sp.coefficients[lab]))) < 1e-10
        scaled = np.array(r["block"]["ex"]) / z**2
        stored = sum(eps_of(scaled, 3, l, r["block"]["c"][l]) for l in (0, 1))
        assert stored > spd.error["3s"] + spd.error["3p"]


def test_max_deviation_figures(sto3g, sto6g):
    """The headline figures of the comparison (measured here; recorded in the report)."""
    dev3 = max(float(np.max(np.abs(r["exp_dev"]))) for r in sto3g if not r["items"])
    dev6 = max(float(np.max(np.abs(r["exp_dev"]))) for r in sto6g if not r["items"])
    assert dev3 < EXP_TOL and dev6 < EXP_TOL
    print(f"max relative exponent deviation: STO-3G {dev3:.2e}, STO-6G {dev6:.2e}")


# ---------------------------------------------------------------- exact results


def test_published_coefficients_sto3g():
    """STO-3G coefficients as printed in [HSP69] (also in PySCF's sto-3g.dat)."""
    f1, f2 = lookup("1s", 3), lookup(["2s", "2p"], 3)
    assert np.allclose(f1.coefficients["1s"], [0.15432897, 0.53532814, 0.44463454], atol=1e-8)  # [HSP69]
    assert np.allclose(f2.coefficients["2s"], [-0.09996723, 0.39951283, 0.70011547], atol=2e-6)  # [HSP69]
    assert np.allclose(f2.coefficients["2p"], [0.15591627, 0.60768372, 0.39195739], atol=2e-6)  # [HSP69]
    assert np.allclose(f1.exponents, [2.227660584, 0.405771156, 0.109817510], rtol=1e-8)  # [HSP69] 1s at ζ = 1


def test_sto1g_exact():
    """N = 1: the least-squares fit maximises the overlap, d ln s/dα = 0 ⇔ 3 I₃ = 4α I₅ (own derivation).

    The root is α = 0.270950 ([SO] ch. 3 list this STO-1G exponent; value from memory). The
    value 8/(9π) ≈ 0.2829 from the task brief is a different optimum: the variational energy of
    H with one Gaussian, E(α) = 3α/2 − 2√(2α/π), minimal at α = 8/(9π) ([SO] ch. 3, own check
    below) — it is not the least-squares fit.
    """
    def i(nu, a):
        return quad(lambda r: r ** (nu - 1) * math.exp(-a * r * r - r), 0, np.inf, epsabs=0, epsrel=1e-13)[0]

    root = brentq(lambda a: 3 * i(3, a) - 4 * a * i(5, a), 0.1, 1.0, xtol=1e-14)
    fit = fit_sto("1s", 1)
    assert fit.exponents[0] == pytest.approx(root, rel=1e-9)
    assert fit.exponents[0] == pytest.approx(0.270950, abs=1e-6)  # [SO], value from memory
    assert fit.coefficients["1s"][0] == pytest.approx(1.0, abs=1e-15)
    # s = N_sto N_g I_3 with N_sto = 2, N_g = (2^(7/2) α^(3/2) / Γ(3/2))^(1/2)
    s = 2.0 * math.sqrt(2 * (2 * root) ** 1.5 / gamma(1.5)) * i(3, root)
    assert fit.error["1s"] == pytest.approx(2 * (1 - s), rel=1e-9)  # ‖φ − g‖² of two unit functions
    energy_opt = brentq(lambda a: 1.5 - math.sqrt(2 / (math.pi * a)), 0.05, 1.0, xtol=1e-15)
    assert energy_opt == pytest.approx(8 / (9 * math.pi), rel=1e-12)
    assert abs(fit.exponents[0] - 8 / (9 * math.pi)) > 0.01


# ---------------------------------------------------------------- integrals, gradients, behaviour


@pytest.mark.parametrize("alpha", [1e-3, 0.02, 0.15, 0.29, 0.31, 2.0, 50.0, 3000.0])
def test_radial_integrals_vs_quadrature(alpha):
    """I_ν = ∫ r^(ν−1) e^(−αr² − r) dr against scipy quad (breakpoints at the Gaussian width)."""
    ints = radial_integrals(14, np.array([alpha]))[:, 0]
    w = 1 / math.sqrt(alpha)
    for nu in (1, 2, 3, 5, 8, 11, 14):
        f = lambda r: r ** (nu - 1) * math.exp(-alpha * r * r - r)  # noqa: E731
        ref = sum(quad(f, a, b, epsabs=0, epsrel=1e-13, limit=200)[0] for a, b in ((0, w), (w, 10 * w), (10 * w, np.inf)))
        assert ints[nu - 1] == pytest.approx(ref, rel=1e-11)


def test_closed_form_hyperu_agrees_but_is_coarse():
    """[GR] 3.462.1 form Γ(ν)(4α)^(−ν/2) U(ν/2, ½, 1/(4α)) agrees with our recurrences to ~1e-7;
    SciPy's hyperu is only ~3e-8 accurate for some arguments (measured), hence not used in fits."""
    worst = 0.0
    for alpha in (0.01, 0.02, 0.035, 0.3, 3.0):
        ints = radial_integrals(9, np.array([alpha]))[:, 0]
        for nu in (3, 5, 7, 9):
            u = gamma(nu) * (4 * alpha) ** (-nu / 2) * hyperu(nu / 2, 0.5, 1 / (4 * alpha))
            worst = max(worst, abs(u / ints[nu - 1] - 1))
    assert 1e-9 < worst < 1e-6


def objective(log_alpha: np.ndarray, nls, norm: str = "l2") -> tuple[float, np.ndarray]:
    """Σ ε over the subshells (n, l) at ζ = 1 and its gradient with respect to ln α_k (the
    package's double-precision evaluation)."""
    from stobuilder.expansion.analytic import Problem, Target

    targets = tuple(Target(float(n), l, 1.0) for n, l in nls)
    out = Problem(targets, norm).evaluate(np.asarray(log_alpha, dtype=float), order=1)
    assert out is not None
    return math.fsum(out[0]), out[1]


def test_gradient_matches_finite_differences():
    nls = ((3, 0), (3, 1), (3, 2))
    x = np.log(np.array([3.1, 0.9, 0.3, 0.1]))
    _, g = objective(x, nls)
    h = 1e-6
    for k in range(x.size):
        e = np.zeros_like(x)
        e[k] = h
        fd = (objective(x + e, nls)[0] - objective(x - e, nls)[0]) / (2 * h)
        assert g[k] == pytest.approx(fd, rel=1e-6, abs=1e-12)


def test_error_decreases_strictly_with_n():
    for fam in library_families():
        errors = [lookup(list(fam), n).total_error for n in range(1, 7)]
        assert all(b < a for a, b in zip(errors, errors[1:])), fam


def test_library_equals_fresh_fit():
    for fam, n in ((["2s", "2p"], 3), (["3s", "3p", "3d"], 6), (["4f"], 4)):
        a, b = lookup(fam, n), fit_sto(fam, n)
        assert a == b


def test_lookup_fits_missing_entries_on_demand():
    fit = lookup("2p", 7)  # the library stops at N = 6
    assert isinstance(fit, Fit) and fit.gaussians == 7 and len(fit.exponents) == 7
    assert fit.error["2p"] < lookup("2p", 6).error["2p"]
    assert lookup("2p", 7) is fit  # memoised


def test_order_normalised_and_scaled():
    f = fit_sto(["2p", "2s"], 2)
    assert f.subshells == ("2s", "2p")
    assert list(f.exponents) == sorted(f.exponents, reverse=True)
    assert f.scaled(2.0) == tuple(a * 4.0 for a in f.exponents)


@pytest.mark.parametrize(
    "args",
    [("1s", 0), ("1s", 13), ("1s", 2.5), ("1x", 3), ("2d", 3), ("7s", 3), ("5g", 3), (["2s", "2s"], 3), ([], 3), ("1s", 3, "l1")],
)
def test_bad_input_raises(args):
    with pytest.raises(InputError):
        fit_sto(*args)
    with pytest.raises(InputError):
        lookup(*args)


def test_scaled_rejects_bad_zeta():
    with pytest.raises(InputError):
        lookup("1s", 3).scaled(0.0)
