"""The exact-STO atomic SCF on given exponents, and the variational optimisation of those exponents.

The engine under stobuilder.exact.atoms (which adds the screening rules and the ζ overrides); it
needs no screening rule, so the ``optimized`` rule can use it without a cycle.

The integrals are the exact one-centre STO integrals of :mod:`stobuilder.exact.sto`; the SCF uses
PySCF's RHF / ROHF / UHF drivers with those integrals in place of libcint's (the usual way to run
PySCF on a model Hamiltonian: overridden get_hcore, get_ovlp and _eri). The orbitals are kept
pure in (l, m): the Fock matrix is diagonalised block by block, and the occupations follow the
configuration — high spin, the open electrons of a subshell in distinct real m components in the
order m = 1, −1, 2, −2, …, 0 (p: x, y, z). Such a determinant is a pure LS term when every open
subshell has one electron or one hole in its partly filled spin set (all of p, d¹ d⁴ d⁵ d⁶ d⁹ …)
and at most one open subshell has L > 0; otherwise the state string says that it is not.

Exponent optimisation minimises the SCF energy over the ζ of every occupied subshell with
analytic gradients dE/dζ = Σ_σ Σ D^σ ∘ ∂F^σ − W ∘ ∂S (the Hellmann–Feynman/Pulay form for a
converged determinant, W = Σ_σ D^σ F^σ D^σ; Pulay, Mol. Phys. 17, 197, 1969), where
∂χ_n/∂ζ = (n + ½)/ζ χ_n − √((2n+2)(2n+1))/(2ζ) χ_{n+1} is again an STO. The exact optimum obeys
the virial theorem −V/T = 2 (scaling argument: Löwdin, J. Mol. Spectrosc. 3, 46, 1959).
The optimisation is over the occupied subshells only, in a basis of those subshells (the single-ζ
functions of Clementi & Raimondi 1963); an empty basis subshell such as Na 3p would otherwise act as
a second p function for 2p. The ``optimized`` rule gives empty subshells the ζ of the s of their n.
Reference values: E. Clementi and D. L. Raimondi, J. Chem. Phys. 38, 2686 (1963).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.optimize

from stobuilder.exact import sto
from stobuilder.model.elements import L_LETTERS, M_FILL_ORDER, Configuration, capacity
from stobuilder.model.shells import ShellExponent

TERM_LETTERS = "SPDFGHIK"
_M_NAMES = {
    0: {0: ""},
    1: {1: "x", -1: "y", 0: "z"},
    2: {-2: "xy", -1: "yz", 0: "z2", 1: "xz", 2: "x2-y2"},
    3: {m: f"(m={m:+d})" if m else "(m=0)" for m in range(-3, 4)},
}


@dataclass(frozen=True)
class OrbitalEnergy:
    """One SCF orbital: label (e.g. "2px"), spin ("alpha", "beta" or "both"), energy in hartree,
    occupation (electrons in it, 0–2)."""

    label: str
    spin: str
    energy: float
    occupation: float


@dataclass(frozen=True)
class AtomResult:
    """The exact-STO SCF of one atom or ion.

    energy, kinetic, potential : E, T and V = E − T in hartree; virial_ratio = −V/T.
    zeta : subshell label → ζ in bohr⁻¹ (basis order), a tuple of ζ for a subshell carried by
    several STOs; gradient : label → dE/dζ in hartree·bohr (likewise).
    stos : every STO of the basis (RadialSTO, basis order); sto_gradient : dE/dζ of each.
    expansions : (orbital, coefficients) of every occupied subshell's radial orbital over the
    normalised STOs of its l in basis order (largest coefficient positive).
    """

    element: str
    configuration: str
    state: str
    method: str
    zeta: dict[str, float] = field(hash=False)
    energy: float
    kinetic: float
    potential: float
    virial_ratio: float
    orbital_energies: tuple[OrbitalEnergy, ...]
    converged: bool
    iterations: int
    gradient: dict[str, float] = field(hash=False, default_factory=dict)
    optimized: bool = False
    stos: tuple = ()
    sto_gradient: tuple = ()
    expansions: tuple = ()
    notes: tuple = ()


@dataclass(frozen=True)
class RadialSTO:
    """One STO of an atomic basis: r^(n−1) e^(−ζ r) with all 2l + 1 real harmonics, ζ in bohr⁻¹,
    carried for the subshell ``subshell`` (its label, e.g. "2s"; n is the STO's own principal
    quantum number, the subshell's n or, for extra functions, n + 1)."""

    subshell: str
    n: int
    l: int
    zeta: float


def radial_stos(exps) -> tuple[RadialSTO, ...]:
    """``exps`` (ShellExponent or RadialSTO, in any mix) as RadialSTO in basis order: by l, then by
    the n of the subshell they carry, then as given."""
    out = []
    for e in exps:
        if isinstance(e, RadialSTO):
            out.append(e)
        else:
            out.append(RadialSTO(e.label, int(e.n), int(e.l), float(e.zeta)))
    return tuple(sorted(out, key=lambda f: (f.l, _subshell_n(f.subshell))))


def _subshell_n(label: str) -> int:
    return int(label[:-1])


# ---------------------------------------------------------------- occupations and state
@dataclass(frozen=True)
class _Plan:
    """Occupations per (l, m) block: alpha[(l, m)] / beta[(l, m)] list one 0/1 per orbital of the block
    in ascending energy (= ascending n of the basis subshells of that l)."""

    alpha: dict
    beta: dict
    nalpha: int
    nbeta: int


def _plan(conf: Configuration, functions: tuple[RadialSTO, ...]) -> _Plan:
    """Occupations by energy rank in each (l, m) block: the subshells the basis carries, in order of
    n, then empty orbitals for the functions beyond one per subshell."""
    alpha, beta = {}, {}
    for l in sorted({f.l for f in functions}):
        count = sum(1 for f in functions if f.l == l)
        ns = sorted({_subshell_n(f.subshell) for f in functions if f.l == l})
        for m in M_FILL_ORDER[l]:
            alpha[(l, m)] = [0] * count
            beta[(l, m)] = [0] * count
        for k, n in enumerate(ns):
            q = conf.occupation(n, l)
            na, nb = min(q, 2 * l + 1), max(0, q - (2 * l + 1))
            for i, m in enumerate(M_FILL_ORDER[l]):
                alpha[(l, m)][k] = int(i < na)
                beta[(l, m)][k] = int(i < nb)
    na = sum(sum(v) for v in alpha.values())
    nb = sum(sum(v) for v in beta.values())
    return _Plan(alpha, beta, na, nb)


def describe_state(conf: Configuration, method: str) -> str:
    """Text naming the determinant computed for ``conf``, e.g. "C [He] 2s2 2p2 (3P, high-spin ROHF determinant)"."""
    unpaired = conf.unpaired
    mult = unpaired + 1
    open_l = []
    pure = True
    for s in conf.subshells:
        q, half = s.occupation, 2 * s.l + 1
        if 0 < q < capacity(s.l):
            na, nb = min(q, half), max(0, q - half)
            partial = nb if na == half else na  # electrons in the partly filled spin set
            if partial == 0:
                open_l.append(0)  # half-filled: an S term
            elif partial in (1, 2 * s.l):
                open_l.append(s.l)  # one electron or one hole: a pure term of L = l
            else:
                pure = False
                open_l.append(s.l)
    nonzero = [l for l in open_l if l]
    if len(nonzero) > 1:
        pure = False
    kind = {"rhf": "closed-shell RHF", "rohf": "high-spin ROHF", "uhf": "high-spin UHF"}[method]
    if pure:
        term = f"{mult}{TERM_LETTERS[nonzero[0] if nonzero else 0]}"
        return f"{conf.symbol} {conf.label} ({term}, {kind} determinant)"
    return (
        f"{conf.symbol} {conf.label} (S = {unpaired / 2:g}, {kind} determinant in real orbitals; "
        "not a pure LS term)"
    )


# ---------------------------------------------------------------- integrals
@dataclass(frozen=True)
class _Integrals:
    basis: sto.OneCentreBasis
    s: np.ndarray
    t: np.ndarray
    v: np.ndarray
    eri: np.ndarray


def _basis(functions: tuple[RadialSTO, ...]) -> sto.OneCentreBasis:
    return sto.make_basis([(f.n, f.l, f.zeta) for f in functions])


def _integrals(basis: sto.OneCentreBasis, z: int) -> _Integrals:
    return _Integrals(basis, sto.overlap_matrix(basis), sto.kinetic_matrix(basis), sto.nuclear_matrix(basis, z),
                      sto.eri_tensor(basis))


# ---------------------------------------------------------------- SCF
def _blocks(basis: sto.OneCentreBasis) -> dict[tuple[int, int], np.ndarray]:
    ls = np.array([basis.shells[i].l for i in basis.function_shell])
    ms = basis.function_m
    out = {}
    for l, m in sorted(set(zip(ls.tolist(), ms.tolist()))):
        out[(l, m)] = np.flatnonzero((ls == l) & (ms == m))
    return out


DEPENDENCE = 1e-10  # smallest overlap eigenvalue kept in a block (canonical orthogonalisation below it)
DROPPED_ENERGY = 1e6  # orbital energy given to the dropped directions: never occupied


def _block_eigh(f: np.ndarray, s: np.ndarray):
    """Eigenvalues and S-orthonormal eigenvectors of one symmetry block. A well-conditioned block is
    solved directly; where the overlap has eigenvalues below DEPENDENCE (STOs of one l nearly or
    exactly alike) the canonical orthogonalisation of Löwdin (Adv. Quantum Chem. 5, 185, 1970)
    solves in the remaining space and the dropped directions come back as zero columns with energy
    DROPPED_ENERGY, so a singular overlap never stops the SCF."""
    ws, u = scipy.linalg.eigh(s)
    if ws[0] > DEPENDENCE:
        return scipy.linalg.eigh(f, s)
    keep = ws > DEPENDENCE
    x = u[:, keep] / np.sqrt(ws[keep])
    w, v = scipy.linalg.eigh(x.T @ f @ x)
    e = np.full(len(ws), DROPPED_ENERGY)
    c = np.zeros((len(ws), len(ws)))
    e[: len(w)] = w
    c[:, : len(w)] = x @ v
    return e, c


def _run_scf(ints: _Integrals, plan: _Plan, method: str, dm0=None, conv_tol: float = 1e-12):
    from pyscf import gto, scf

    from stobuilder.core.diis import use_robust_diis

    nao = ints.basis.nao
    blocks = _blocks(ints.basis)
    mol = gto.M(verbose=0)
    mol.nelectron = plan.nalpha + plan.nbeta
    mol.spin = plan.nalpha - plan.nbeta
    mol.incore_anyway = True
    mf = use_robust_diis({"rhf": scf.RHF, "rohf": scf.ROHF, "uhf": scf.UHF}[method](mol))
    mf.chkfile = None  # no checkpoint file per iteration (nothing on disk; the ζ search runs hundreds of SCFs)
    h = ints.t + ints.v
    mf.get_hcore = lambda *a, **k: h
    mf.get_ovlp = lambda *a, **k: ints.s
    mf._eri = ints.eri.reshape(nao * nao, nao * nao)
    mf.conv_tol = conv_tol
    mf.conv_tol_grad = 1e-9
    mf.max_cycle = 300
    mf.init_guess = "1e"

    def block_eigh(f, s, overwrite=False, x=None):
        e = np.zeros(nao)
        c = np.zeros((nao, nao))
        col = 0
        for idx in blocks.values():
            w, v = _block_eigh(f[np.ix_(idx, idx)], s[np.ix_(idx, idx)])
            for j in range(len(idx)):
                e[col] = w[j]
                c[idx, col] = v[:, j]
                col += 1
        return e, c

    def classify(c):
        """(block, rank in block) of every MO column, ranked by energy later."""
        weights = np.array([[np.sum(c[idx, j] ** 2) for idx in blocks.values()] for j in range(c.shape[1])])
        keys = list(blocks)
        return [keys[i] for i in np.argmax(weights, axis=1)]

    def occ_for(e, c, table):
        labels = classify(c)
        occ = np.zeros(len(e))
        for key in blocks:
            cols = [j for j, lab in enumerate(labels) if lab == key]
            cols.sort(key=lambda j: e[j])
            for rank, j in enumerate(cols):
                occ[j] = table[key][rank] if rank < len(table[key]) else 0
        return occ

    def get_occ(mo_energy=None, mo_coeff=None):
        if method == "uhf":
            return np.array([occ_for(mo_energy[0], mo_coeff[0], plan.alpha), occ_for(mo_energy[1], mo_coeff[1], plan.beta)])
        return occ_for(mo_energy, mo_coeff, plan.alpha) + occ_for(mo_energy, mo_coeff, plan.beta)

    mf._eigh = block_eigh  # RHF, ROHF and UHF all diagonalise through _eigh
    # Orbitals pure in (l, m): only the in-block part of the Fock matrix acts (exact for the energy,
    # tr(D P(V)) = tr(D V) for a block-diagonal D), and PySCF's orbital gradient and DIIS see the
    # constrained problem.
    mask = np.zeros((nao, nao))
    for idx in blocks.values():
        mask[np.ix_(idx, idx)] = 1.0
    plain_veff = mf.get_veff
    mf.get_veff = lambda *a, **k: plain_veff(*a, **k) * mask
    mf.get_occ = get_occ
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mf.kernel(dm0=dm0)
    return mf, classify


def _spin_densities(mf, method):
    dm = mf.make_rdm1()
    if method == "rhf":
        return dm / 2, dm / 2
    return dm[0], dm[1]


# ---------------------------------------------------------------- radial functions shared across m
# With several functions of one l, the fixed-occupation ROHF above lets the m components of one
# subshell relax apart when the subshell's electrons do not fill every m alike (O 2p⁴: px² py pz) or
# when an open subshell shares its l with a closed one (Al 2p⁶ 3p¹). The published restricted
# Hartree–Fock limits keep one radial function per subshell (Roothaan, Rev. Mod. Phys. 32, 179,
# 1960; Froese Fischer 1977). The SCF below holds that: one set of radial orbitals per l, the same in
# every m, minimised directly over unitary rotations C = C₀ exp(κ) with the analytic gradient
# ∂E/∂C_l = 2 Σ_m Σ_σ F^σ_lm C_l n^σ_lm (BFGS, then Newton steps; the exp derivative by scipy's
# Fréchet derivative).
SHARED_GRADIENT = 1e-10  # |∂E/∂κ| at which the shared-radial SCF stops (hartree)
NEWTON_FROM = 1e-5  # |∂E/∂κ| below which Newton steps replace the quasi-Newton search


@dataclass(frozen=True)
class _Shared:
    """The converged shared-radial determinant: spin densities, radial orbitals per l (columns in
    rank order, orthonormal in the block's overlap) and the occupation tables."""

    da: np.ndarray
    db: np.ndarray
    radial: dict
    energy: float
    fa: np.ndarray
    fb: np.ndarray
    converged: bool
    iterations: int


def _patterns(plan: _Plan, l: int, rank: int) -> tuple:
    keys = [k for k in plan.alpha if k[0] == l]
    return tuple((plan.alpha[k][rank], plan.beta[k][rank]) for k in keys)


def needs_shared_radial(plan: _Plan, method: str, counts: dict[int, int], subshells: dict[int, int]) -> bool:
    """Whether some l carried by more STOs than it has subshells (several STOs per subshell) holds an
    orbital whose electrons differ between its m components, so that the per-m ROHF would let them
    relax apart. A basis of one STO per subshell keeps the per-m determinant of the single-ζ table
    (where the two differ, Al 2p⁶ 3p¹, by about 1e-5 hartree)."""
    if method != "rohf":
        return False
    for l, count in counts.items():
        if count <= subshells.get(l, 0) or l == 0:
            continue
        for rank in range(count):
            pattern = _patterns(plan, l, rank)
            if len(set(pattern)) > 1:
                return True
    return False


def _shared_scf(ints: _Integrals, plan: _Plan, blocks, start: dict) -> _Shared:
    """Minimise the determinant's energy over radial orbitals shared by the m of each l, from the
    radial orbitals ``start`` {l: C₀ (functions × orbitals)}."""
    nao = ints.basis.nao
    h = ints.t + ints.v
    eri = ints.eri
    by_l = {}
    for key, idx in blocks.items():
        by_l.setdefault(key[0], []).append((key, idx))
    base = {l: np.array(c) for l, c in start.items()}
    pairs = {}
    for l, c in base.items():
        r = c.shape[1]
        pat = [_patterns(plan, l, k) for k in range(r)]
        pairs[l] = [(p, q) for p in range(r) for q in range(p + 1, r) if pat[p] != pat[q]]
    sizes = [len(pairs[l]) for l in sorted(base)]

    def unpack(x):
        out, start_ = {}, 0
        for l, size in zip(sorted(base), sizes):
            r = base[l].shape[1]
            kappa = np.zeros((r, r))
            for (p, q), v in zip(pairs[l], x[start_:start_ + size]):
                kappa[p, q] = v
                kappa[q, p] = -v
            out[l] = kappa
            start_ += size
        return out

    def state(x):
        kappas = unpack(x)
        radial, frechet = {}, {}
        for l, kappa in kappas.items():
            u = scipy.linalg.expm(kappa)
            radial[l] = base[l] @ u
            frechet[l] = kappa
        da = np.zeros((nao, nao))
        db = np.zeros((nao, nao))
        for l, entries in by_l.items():
            c = radial[l]
            for key, idx in entries:
                na = np.array(plan.alpha[key][: c.shape[1]], dtype=float)
                nb = np.array(plan.beta[key][: c.shape[1]], dtype=float)
                da[np.ix_(idx, idx)] = (c * na) @ c.T
                db[np.ix_(idx, idx)] = (c * nb) @ c.T
        j = np.einsum("pqrs,rs->pq", eri, da + db)
        fa = h + j - np.einsum("prqs,rs->pq", eri, da)
        fb = h + j - np.einsum("prqs,rs->pq", eri, db)
        energy = 0.5 * (np.sum(da * (h + fa)) + np.sum(db * (h + fb)))
        return radial, frechet, da, db, fa, fb, float(energy)

    def fun(x):
        radial, kappas, da, db, fa, fb, energy = state(x)
        grad = []
        for l in sorted(base):
            c = radial[l]
            g = np.zeros_like(c)
            for key, idx in by_l[l]:
                na = np.array(plan.alpha[key][: c.shape[1]], dtype=float)
                nb = np.array(plan.beta[key][: c.shape[1]], dtype=float)
                g += 2.0 * (fa[np.ix_(idx, idx)] @ c * na + fb[np.ix_(idx, idx)] @ c * nb)
            gu = base[l].T @ g
            gk = scipy.linalg.expm_frechet(kappas[l].T, gu, compute_expm=False)
            grad.extend(gk[p, q] - gk[q, p] for p, q in pairs[l])
        return energy, np.array(grad)

    x0 = np.zeros(sum(sizes))
    iterations, converged = 0, not len(x0)
    for _ in range(12):
        if converged:
            break
        g = fun(x0)[1]
        worst = float(np.max(np.abs(g)))
        if worst < SHARED_GRADIENT:
            converged = True
            break
        if worst > NEWTON_FROM:
            # far from the minimum: quasi-Newton (its line search needs energy differences, which
            # round-off blurs below about 1e-7 in the gradient)
            opt = scipy.optimize.minimize(fun, x0, jac=True, method="BFGS", options={"gtol": NEWTON_FROM, "maxiter": 400})
            step = opt.x
            iterations += int(opt.nit)
        else:
            # near it: Newton steps on the analytic gradient, Hessian by central differences
            hess = np.zeros((len(x0), len(x0)))
            for i in range(len(x0)):
                d = np.zeros(len(x0))
                d[i] = 1e-5
                hess[:, i] = (fun(d)[1] - fun(-d)[1]) / 2e-5
            hess = 0.5 * (hess + hess.T)
            step = -np.linalg.lstsq(hess, g, rcond=1e-12)[0]
            if np.max(np.abs(step)) > 0.1:
                step *= 0.1 / np.max(np.abs(step))
            iterations += 1
        radial = state(step)[0]
        base = {l: radial[l] for l in base}  # rebase: the next step starts from κ = 0
    radial, _, da, db, fa, fb, energy = state(np.zeros(sum(sizes)))
    return _Shared(da, db, radial, energy, fa, fb, converged, iterations)


def _start_radial(mf, method: str, blocks, classify, plan: _Plan) -> dict:
    """Radial orbitals per l from the per-m SCF: the columns of the m block with most electrons,
    in rank order (energy), functions the canonical orthogonalisation dropped left out."""
    coeff = mf.mo_coeff if method != "uhf" else mf.mo_coeff[0]
    energy = mf.mo_energy if method != "uhf" else mf.mo_energy[0]
    keys = classify(coeff)
    out = {}
    for l in sorted({k[0] for k in blocks}):
        ms = [k for k in blocks if k[0] == l]
        best = max(ms, key=lambda k: (sum(plan.alpha[k]) + sum(plan.beta[k]), -ms.index(k)))
        cols = sorted((j for j, k in enumerate(keys) if k == best and np.any(coeff[:, j])), key=lambda j: energy[j])
        out[l] = coeff[np.ix_(blocks[best], cols)]
    return out


# ---------------------------------------------------------------- energy and gradient
def _augmented(basis: sto.OneCentreBasis) -> sto.OneCentreBasis:
    return sto.OneCentreBasis(basis.shells + tuple(sto.STOShell(s.n + 1, s.l, s.zeta) for s in basis.shells))


def _gradient(basis: sto.OneCentreBasis, z: int, da: np.ndarray, db: np.ndarray, projector=None) -> np.ndarray:
    """dE/dζ of every STO of ``basis`` (hartree·bohr) at the converged spin densities da, db.

    The energy-weighted density is W = Σ_σ D^σ F^σ D^σ for a determinant stationary in every
    (l, m) block; with radial orbitals shared across m (``projector`` P = C Cᵀ of the complete
    orbital set) it is W = Σ_σ sym(P F^σ D^σ), the response −½ C (Cᵀ ∂S C) of the orthonormal
    orbitals (which keeps them shared) and stationarity in the shared rotations."""
    aug = _augmented(basis)
    nao = basis.nao
    s = sto.overlap_matrix(aug)[:, :nao]
    h = (sto.kinetic_matrix(aug) + sto.nuclear_matrix(aug, z))[:, :nao]
    eri = sto.eri_tensor(aug, first=nao)
    dt = da + db
    j = np.einsum("pqrs,rs->pq", eri, dt)
    fa = h + j - np.einsum("prqs,rs->pq", eri, da)
    fb = h + j - np.einsum("prqs,rs->pq", eri, db)
    if projector is None:
        w = da @ fa[:nao] @ da + db @ fb[:nao] @ db
    else:
        w = projector @ fa[:nao] @ da + projector @ fb[:nao] @ db
        w = 0.5 * (w + w.T)
    grad = np.zeros(len(basis.shells))
    start = 0
    for i, shell in enumerate(basis.shells):
        width = 2 * shell.l + 1
        rows = np.arange(start, start + width)
        plus = rows + nao
        a = (shell.n + 0.5) / shell.zeta
        c = math.sqrt((2 * shell.n + 2) * (2 * shell.n + 1)) / (2 * shell.zeta)
        total = 0.0
        for d, f in ((da, fa), (db, fb)):
            total += np.sum(d[rows] * (a * f[rows] - c * f[plus]))
        total -= np.sum(w[rows] * (a * s[rows] - c * s[plus]))
        grad[i] = 2.0 * total
        start += width
    return grad


@dataclass(frozen=True)
class _Solved:
    result: AtomResult
    dm: object
    radial: dict | None = None


def _by_subshell(functions: tuple[RadialSTO, ...], values) -> dict:
    """{subshell label: value} for one STO per subshell, {label: (values…)} for several; labels in
    order of (n, l), the values of one subshell in basis order."""
    grouped: dict[str, list] = {}
    for f, v in sorted(zip(functions, values), key=lambda fv: (_subshell_n(fv[0].subshell), fv[0].l)):
        grouped.setdefault(f.subshell, []).append(float(v))
    return {k: (v[0] if len(v) == 1 else tuple(v)) for k, v in grouped.items()}


def solve_sto_scf(conf: Configuration, exps, method: str, dm0=None, gradient=False, optimized=False,
                  radial0=None) -> _Solved:
    """The atomic SCF of ``conf`` over the exact STOs ``exps`` (ShellExponent, one per subshell, or
    RadialSTO, any number per subshell): its AtomResult and density (from ``dm0`` when given), with
    the analytic ζ gradient when ``gradient``. Radial orbitals are shared across m where the
    per-m ROHF would split them (``needs_shared_radial``), from ``radial0`` when given."""
    functions = radial_stos(exps)
    basis = _basis(functions)
    ints = _integrals(basis, conf.z)
    plan = _plan(conf, functions)
    counts, subshells = {}, {}
    for f in functions:
        counts[f.l] = counts.get(f.l, 0) + 1
    for label in {f.subshell for f in functions}:
        l = L_LETTERS.index(label[-1])
        subshells[l] = subshells.get(l, 0) + 1
    shared = None
    if radial0 is not None and needs_shared_radial(plan, method, counts, subshells):
        start = _orthonormal_start(radial0, ints, _blocks(basis))
        if start is not None:
            shared = _shared_scf(ints, plan, _blocks(basis), start)
            mf = classify = None
    if shared is None:
        mf, classify = _run_scf(ints, plan, method, dm0=dm0)
        if needs_shared_radial(plan, method, counts, subshells):
            shared = _shared_scf(ints, plan, _blocks(basis), _start_radial(mf, method, _blocks(basis), classify, plan))
    if shared is not None:
        da, db, energy = shared.da, shared.db, shared.energy
        converged, iterations = shared.converged, shared.iterations
        projector = _projector(shared.radial, _blocks(basis), basis.nao)
        orbitals, expansions = _shared_orbitals(shared, plan, _blocks(basis), functions)
        dm = np.array([da, db])
    else:
        da, db = _spin_densities(mf, method)
        energy = float(mf.e_tot)
        converged, iterations = bool(mf.converged), int(getattr(mf, "cycles", -1))
        projector = None
        orbitals = _orbitals(mf, method, functions, classify)
        expansions = _expansions(mf, method, functions, _blocks(basis), classify, plan)
        dm = mf.make_rdm1()
    kinetic = float(np.sum((da + db) * ints.t))
    potential = energy - kinetic
    grad = ()
    if gradient:
        grad = tuple(float(x) for x in _gradient(basis, conf.z, da, db, projector))
    result = AtomResult(
        element=conf.symbol, configuration=conf.label, state=describe_state(conf, method), method=method,
        zeta=_by_subshell(functions, [f.zeta for f in functions]), energy=energy, kinetic=kinetic,
        potential=potential, virial_ratio=-potential / kinetic, orbital_energies=orbitals, converged=converged,
        iterations=iterations, gradient=_by_subshell(functions, grad) if grad else {}, optimized=optimized,
        stos=functions, sto_gradient=grad, expansions=expansions,
    )
    return _Solved(result, dm, shared.radial if shared is not None else None)


def _orthonormal_start(radial0: dict, ints: _Integrals, blocks) -> dict | None:
    """Radial orbitals ``radial0`` (from a nearby basis) made orthonormal in this basis (Gram–Schmidt
    in rank order), or None when their shapes do not fit."""
    out = {}
    for l, c in radial0.items():
        key = next((k for k in blocks if k[0] == l), None)
        if key is None:
            return None
        idx = blocks[key]
        if c.shape[0] != len(idx):
            return None
        s = ints.s[np.ix_(idx, idx)]
        q = np.array(c, dtype=float)
        for k in range(q.shape[1]):
            v = q[:, k]
            for i in range(k):
                v = v - (q[:, i] @ s @ v) * q[:, i]
            nrm = math.sqrt(max(v @ s @ v, 0.0))
            if nrm < 1e-6:
                return None
            q[:, k] = v / nrm
        out[l] = q
    return out


def _projector(radial: dict, blocks, nao: int) -> np.ndarray:
    p = np.zeros((nao, nao))
    for key, idx in blocks.items():
        c = radial[key[0]]
        p[np.ix_(idx, idx)] = c @ c.T
    return p


def _orbital_name(functions, l: int, rank: int) -> str:
    ns = sorted({_subshell_n(f.subshell) for f in functions if f.l == l})
    n = ns[rank] if rank < len(ns) else ns[-1] + rank - len(ns) + 1
    return f"{n}{L_LETTERS[l]}"


def _shared_orbitals(shared: _Shared, plan: _Plan, blocks, functions):
    """Orbital energies (the diagonal Lagrange multipliers ε_i = c_iᵀ F_i c_i, F_i the Fock operator
    of orbital i averaged over its electrons; for an empty orbital the mean of F^α and F^β) and
    each radial orbital's coefficients."""
    out, expansions = [], []
    for key, idx in blocks.items():
        l, m = key
        c = shared.radial[l]
        fa = shared.fa[np.ix_(idx, idx)]
        fb = shared.fb[np.ix_(idx, idx)]
        for rank in range(c.shape[1]):
            v = c[:, rank]
            na, nb = plan.alpha[key][rank], plan.beta[key][rank]
            f = (na * fa + nb * fb) / (na + nb) if na + nb else 0.5 * (fa + fb)
            out.append(OrbitalEnergy(f"{_orbital_name(functions, l, rank)}{_M_NAMES[l][m]}", "both",
                                     float(v @ f @ v), float(na + nb)))
    for l in sorted(shared.radial):
        c = shared.radial[l]
        occupied = [r for r in range(c.shape[1]) if any(plan.alpha[k][r] + plan.beta[k][r] for k in blocks if k[0] == l)]
        for r in occupied:
            expansions.append((_orbital_name(functions, l, r), tuple(_signed(c[:, r]))))
    return tuple(sorted(out, key=lambda o: (o.energy, o.label))), tuple(expansions)


def _signed(v) -> list[float]:
    """Coefficients with the sign fixed: the largest in magnitude positive (an orbital's sign is free)."""
    v = np.asarray(v, dtype=float)
    if v[np.argmax(np.abs(v))] < 0:
        v = -v
    return [float(x) for x in v]


def _expansions(mf, method, functions, blocks, classify, plan):
    """(orbital, coefficients over the STOs of its l) of every occupied subshell, from the m block
    with most electrons (alpha orbitals for UHF)."""
    coeff = mf.mo_coeff if method != "uhf" else mf.mo_coeff[0]
    energy = mf.mo_energy if method != "uhf" else mf.mo_energy[0]
    keys = classify(coeff)
    out = []
    for l in sorted({k[0] for k in blocks}):
        ms = [k for k in blocks if k[0] == l]
        best = max(ms, key=lambda k: (sum(plan.alpha[k]) + sum(plan.beta[k]), -ms.index(k)))
        cols = sorted((j for j, k in enumerate(keys) if k == best), key=lambda j: energy[j])
        for rank, j in enumerate(cols):
            if rank < len(plan.alpha[best]) and plan.alpha[best][rank] + plan.beta[best][rank]:
                out.append((_orbital_name(functions, l, rank), tuple(_signed(coeff[blocks[best], j]))))
    return tuple(out)


def _orbitals(mf, method, functions, classify) -> tuple[OrbitalEnergy, ...]:
    def one(e, c, occ, spin):
        keys = classify(c)
        out = []
        for key in sorted(set(keys)):
            cols = sorted((j for j, k in enumerate(keys) if k == key and np.any(c[:, j])), key=lambda j: e[j])
            for rank, j in enumerate(cols):
                l, m = key
                label = f"{_orbital_name(functions, l, rank)}{_M_NAMES[l][m]}"
                out.append(OrbitalEnergy(label, spin, float(e[j]), float(occ[j])))
        return sorted(out, key=lambda o: (o.energy, o.label))

    if method == "uhf":
        return tuple(one(mf.mo_energy[0], mf.mo_coeff[0], mf.mo_occ[0], "alpha")
                     + one(mf.mo_energy[1], mf.mo_coeff[1], mf.mo_occ[1], "beta"))
    return tuple(one(mf.mo_energy, mf.mo_coeff, mf.mo_occ, "both"))


# ---------------------------------------------------------------- exponent optimisation
def optimize_exponents(conf: Configuration, exps: tuple[ShellExponent, ...], method: str, progress=None) -> AtomResult:
    """Variationally optimal single-ζ exponents of the subshells ``exps`` (the occupied ones of
    ``conf``, starting values), method "rhf", "rohf" or "uhf": BFGS in ln ζ with analytic
    gradients, then Newton steps on the analytic gradient until |ζ·dE/dζ| < 1e-10 hartree."""
    m = method
    exps = list(exps)

    def build(x):
        return tuple(ShellExponent(e.label, e.n, e.l, math.exp(xi) * e.n_eff, e.n_eff, math.exp(xi))
                     for e, xi in zip(exps, x))

    state = {"dm": None}
    cache = {}

    def evaluate(x):
        key = tuple(float(v) for v in x)
        if key not in cache:
            solved = solve_sto_scf(conf, build(x), m, dm0=state["dm"], gradient=True, optimized=True)
            state["dm"] = solved.dm
            g = np.array([solved.result.gradient[e.label] * math.exp(xi) for e, xi in zip(exps, x)])
            cache.clear()
            cache[key] = (solved.result, g)
        return cache[key]

    def fun(x):
        r, g = evaluate(x)
        return r.energy, g

    x = np.array([math.log(e.zeta) for e in exps])
    steps = [0]

    def report(stage, x):
        """One progress line for ``progress``; reads only what is already computed (no extra SCF, so
        the result is the same with and without ``progress``)."""
        steps[0] += 1
        known = cache.get(tuple(float(v) for v in x))
        if known is None:
            progress(f"{stage} step {steps[0]}")
        else:
            r, g = known
            progress(f"{stage} step {steps[0]}: E = {r.energy:.8f} hartree, max |ζ dE/dζ| = {np.max(np.abs(g)):.1e}")

    opt = scipy.optimize.minimize(fun, x, jac=True, method="BFGS", options={"gtol": 1e-7, "maxiter": 500},
                                  callback=(lambda xk: report("BFGS", xk)) if progress is not None else None)
    x = opt.x
    for _ in range(8):  # Newton polish on the analytic gradient (central-difference Hessian)
        r, g = evaluate(x)
        if progress is not None:
            report("Newton", x)
        if np.max(np.abs(g)) < 1e-10:
            break
        h = 1e-4
        hess = np.zeros((len(x), len(x)))
        for i in range(len(x)):
            d = np.zeros(len(x))
            d[i] = h
            hess[:, i] = (evaluate(x + d)[1] - evaluate(x - d)[1]) / (2 * h)
        hess = 0.5 * (hess + hess.T)
        step = -np.linalg.solve(hess, g)
        if np.max(np.abs(step)) > 0.1:
            step *= 0.1 / np.max(np.abs(step))
        x = x + step
    return evaluate(x)[0]
