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
    zeta : subshell label → ζ in bohr⁻¹ (basis order); gradient : label → dE/dζ in hartree·bohr.
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


# ---------------------------------------------------------------- occupations and state
@dataclass(frozen=True)
class _Plan:
    """Occupations per (l, m) block: alpha[(l, m)] / beta[(l, m)] list one 0/1 per orbital of the block
    in ascending energy (= ascending n of the basis subshells of that l)."""

    alpha: dict
    beta: dict
    nalpha: int
    nbeta: int


def _plan(conf: Configuration, labels: list[tuple[int, int]]) -> _Plan:
    alpha, beta = {}, {}
    for l in sorted({l for _, l in labels}):
        ns = sorted(n for n, ll in labels if ll == l)
        for m in M_FILL_ORDER[l]:
            alpha[(l, m)] = [0] * len(ns)
            beta[(l, m)] = [0] * len(ns)
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


def _shells(exps: tuple[ShellExponent, ...]) -> tuple[list[str], sto.OneCentreBasis]:
    order = sorted(exps, key=lambda e: (e.l, e.n))
    return [e.label for e in order], sto.make_basis([(e.n, e.l, e.zeta) for e in order])


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
            w, v = scipy.linalg.eigh(f[np.ix_(idx, idx)], s[np.ix_(idx, idx)])
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


# ---------------------------------------------------------------- energy and gradient
def _augmented(basis: sto.OneCentreBasis) -> sto.OneCentreBasis:
    return sto.OneCentreBasis(basis.shells + tuple(sto.STOShell(s.n + 1, s.l, s.zeta) for s in basis.shells))


def _gradient(basis: sto.OneCentreBasis, z: int, da: np.ndarray, db: np.ndarray) -> np.ndarray:
    """dE/dζ of every subshell of ``basis`` (hartree·bohr) at the converged spin densities da, db."""
    aug = _augmented(basis)
    nao = basis.nao
    s = sto.overlap_matrix(aug)[:, :nao]
    h = (sto.kinetic_matrix(aug) + sto.nuclear_matrix(aug, z))[:, :nao]
    eri = sto.eri_tensor(aug, first=nao)
    dt = da + db
    j = np.einsum("pqrs,rs->pq", eri, dt)
    fa = h + j - np.einsum("prqs,rs->pq", eri, da)
    fb = h + j - np.einsum("prqs,rs->pq", eri, db)
    w = da @ fa[:nao] @ da + db @ fb[:nao] @ db
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


def solve_sto_scf(conf: Configuration, exps: tuple[ShellExponent, ...], method: str, dm0=None, gradient=False,
                  optimized=False) -> _Solved:
    """The atomic SCF of ``conf`` over the exact STOs ``exps``: its AtomResult and density (from
    ``dm0`` when given), with the analytic ζ gradient when ``gradient``."""
    labels, basis = _shells(exps)
    ints = _integrals(basis, conf.z)
    plan = _plan(conf, [(s.n, s.l) for s in basis.shells])
    mf, classify = _run_scf(ints, plan, method, dm0=dm0)
    da, db = _spin_densities(mf, method)
    kinetic = float(np.sum((da + db) * ints.t))
    energy = float(mf.e_tot)
    potential = energy - kinetic
    grad = {}
    if gradient:
        g = _gradient(basis, conf.z, da, db)
        grad = dict(zip(labels, (float(x) for x in g)))
    orbitals = _orbitals(mf, method, basis, classify)
    zeta = {e.label: float(e.zeta) for e in sorted(exps, key=lambda e: (e.n, e.l))}
    result = AtomResult(
        element=conf.symbol, configuration=conf.label, state=describe_state(conf, method), method=method,
        zeta=zeta, energy=energy, kinetic=kinetic, potential=potential, virial_ratio=-potential / kinetic,
        orbital_energies=orbitals, converged=bool(mf.converged), iterations=int(getattr(mf, "cycles", -1)),
        gradient=grad, optimized=optimized,
    )
    return _Solved(result, mf.make_rdm1())


def _orbitals(mf, method, basis, classify) -> tuple[OrbitalEnergy, ...]:
    ns_by_l = {}
    for s in basis.shells:
        ns_by_l.setdefault(s.l, []).append(s.n)

    def one(e, c, occ, spin):
        keys = classify(c)
        out = []
        for key in sorted(set(keys)):
            cols = sorted((j for j, k in enumerate(keys) if k == key), key=lambda j: e[j])
            for rank, j in enumerate(cols):
                l, m = key
                label = f"{ns_by_l[l][rank]}{L_LETTERS[l]}{_M_NAMES[l][m]}"
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
