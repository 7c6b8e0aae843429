"""Assembly of the fit objective by variable projection: per target the normalised objective
f = 2(1 − √q), Σf, its gradient and its exact Hessian in x = ln α from the Gram matrices G, the
overlaps s = ⟨φ|g_k⟩ and their derivatives, in any backend of ``arithmetic`` (``assemble``;
batched over exponent sets) or, in double precision, with every target and every angular momentum
in one array (``assemble_double``).

The residual first (``residuals``): with c = G⁻¹s optimal, ε = ‖φ‖² − sᵀc and ∂ε/∂x_k =
−2 c_k ∂s_k/∂x_k + 2 c_k Σ_j c_j ∂G_kj/∂x_k (the partial derivative taken in the first index
only; G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10, 413, 1973); its Hessian is derived in
``assemble``. Then the objective (``normalised``): q = sᵀG⁻¹s/‖φ‖² = 1 − ε/‖φ‖² is the squared
cosine between φ and the Gaussian span in the norm, and f = ‖φ/‖φ‖ − χ/‖χ‖‖² = 2(1 − √q) the
squared distance between φ and the best contraction χ, both normalised (Hehre, Stewart & Pople
1969; Stewart 1970: Σᵢ ∫(φᵢ − χᵢ)² with ‖χᵢ‖ = 1). Formed as f = 2e/(1 + √(1 − e)), e = ε/‖φ‖²,
it keeps the relative accuracy of ε; ∂f = −∂q/√q and ∂²f = −∂²q/√q + ∂q∂qᵀ/(2q^(3/2)) with
∂q = −∂ε/‖φ‖². The radial integrals I_ν the overlaps are made of come from ``radial_tables``; the
problem (targets, norm, ‖φ‖², prefactors) from ``analytic.Problem``.
"""

from __future__ import annotations

from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from stobuilder.expansion.arithmetic import DOUBLE, DoubleArithmetic, exp_affine

if TYPE_CHECKING:
    from stobuilder.expansion.analytic import Problem, Target


@lru_cache(maxsize=None)
def _pairs(size: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column indices above the diagonal of an N × N matrix (``np.triu_indices`` order)."""
    return np.triu_indices(size, 1)


def _symmetric(ops, upper, diagonal, size: int, lower=None):
    """(S, N, N) from the values above the diagonal (S, N(N−1)/2, ``_pairs`` order), ``lower``
    below it (default the same: a symmetric matrix) and a constant diagonal."""
    iu, ju = _pairs(size)
    out = np.empty((upper.shape[0], size, size), dtype=upper.dtype)
    out[:, iu, ju] = upper
    out[:, ju, iu] = upper if lower is None else lower
    out[:, np.arange(size), np.arange(size)] = ops.const(diagonal)
    return out


def _gram_shared(ops, x, alpha):
    """The l-independent parts of the Gram matrices, from α = e^x (no exponential per pair, each
    pair formed once): q = α/(α+β), its complement q̄ = β/(α+β) (the transpose of q, not 1 − q,
    which loses digits where q is near 1), T = q − q̄, and sech((x − y)/2) = 2√(αβ)/(α+β) above
    the diagonal (S, N(N−1)/2)."""
    size = x.shape[1]
    iu, ju = _pairs(size)
    a_i, a_j = alpha[:, iu], alpha[:, ju]
    total = a_i + a_j
    q = _symmetric(ops, a_i / total, 0.5, size, a_j / total)
    qc = np.swapaxes(q, 1, 2)
    root = ops.sqrt(alpha)
    sech_upper = root[:, iu] * root[:, ju] * 2 / total
    return q, qc, q - qc, sech_upper


def _gram_parts(ops, x, alpha, p, h1: bool, scale, order: int, shared=None):
    """G and its partial derivatives in x = ln α for normalised Gaussians of angular momentum l
    (batched: x has shape (S, N), the results (S, N, N)).

    L²: G(x, y) = sech((x − y)/2)^p, p = l + 3/2; with q = α/(α+β), q̄ = 1 − q and T = tanh((x−y)/2) = q − q̄:
    ∂₁G = −(p/2) T G, ∂₁²G = [(p²/4) T² − (p/4)(1 − T²)] G, ∂₁∂₂G = −∂₁²G.
    H¹ multiplies by 1 + κh, h = αβ/(α+β), κ = 4p/ζ₁² (∂₁h = h(1−q), ∂₂h = hq,
    ∂₁²h = h(1−q)(1−2q), ∂₁∂₂h = 2hq(1−q); 1 − q is q̄ and 1 − 2q is −T).
    Returns (G, A = ∂₁G, B = ∂₁²G, C = ∂₁∂₂G), the last three None below the ``order`` asked.
    ``p`` = l + 3/2 (exact in binary, as are p/2, p²/4), or an array of shape (L, 1, 1, 1) for
    several l at once (the results then (L, S, N, N)). (Arrays stand left of extended-precision
    scalars: mpmath's own operators would first try, slowly, to convert the array.)
    """
    q, qc, t, sech_upper = shared if shared is not None else _gram_shared(ops, x, alpha)
    # G = sech^p = sech^(l+1) √sech (no power with a fractional exponent)
    if isinstance(p, float):  # one l: formed above the diagonal only
        g = _symmetric(ops, sech_upper ** int(p - 0.5) * ops.sqrt(sech_upper), 1, x.shape[1])
    else:  # double precision, several l at once (p of shape (L, 1, 1, 1))
        sech = _symmetric(ops, sech_upper, 1, x.shape[1])
        g = sech ** (p - 0.5) * np.sqrt(sech)
    a = t * g * (-p / 2) if order >= 1 else None
    b = (t * t * (p * p / 4) - (1 - t * t) * (p / 4)) * g if order >= 2 else None
    c = -b if order >= 2 else None
    if h1:
        kh = alpha[:, :, None] * qc * (4 * p) / (scale * scale)  # κ h
        f = kh + 1
        if order >= 2:
            b = b * f + a * kh * qc * 2 - g * kh * qc * t
            c = c * f + a * kh * q - a * kh * qc + g * kh * q * qc * 2
        if order >= 1:
            a = a * f + g * kh * qc
        g = g * f
    return g, a, b, c


def _overlap_parts(t: Target, alpha, ints, h1: bool, scale, zeta, a_, order: int, pre):
    """s_k = ⟨φ|g_k⟩ in the norm and its first two derivatives in x_k = ln α_k.

    s = P I_m with P ∝ α^(p/2) (``pre``), dI_ν/d ln α = −α I_(ν+2):
    s' = (p/2) s − α P I_(m+2),  s'' = P [(p²/4) I_m − (p+1) α I_(m+2) + α² I_(m+4)].
    H¹ adds h = −(2/ζ₁²) P α K with K_j = a I_(m+j) − ζ I_(m+j+1), a = n* − 1 − l:
    h' = f [(p/2+1) K₀ − α K₂],  h'' = f [(p/2+1)² K₀ − (p+3) α K₂ + α² K₄], f = −(2/ζ₁²) P α.
    """
    p = t.l + 1.5
    i0, i1, i2, i3, i4, i5 = ints
    s = pre * i0
    s1 = s * (p / 2) - alpha * pre * i2 if order >= 1 else None
    s2 = pre * (i0 * (p * p / 4) - alpha * i2 * (p + 1) + alpha * alpha * i4) if order >= 2 else None
    if h1:
        k0, k2, k4 = i0 * a_ - i1 * zeta, i2 * a_ - i3 * zeta, i4 * a_ - i5 * zeta
        f = pre * alpha * (-2) / (scale * scale)
        s = s + f * k0
        if order >= 1:
            s1 = s1 + f * (k0 * (p / 2 + 1) - alpha * k2)
        if order >= 2:
            s2 = s2 + f * (k0 * (p / 2 + 1) ** 2 - alpha * k2 * (p + 3) + alpha * alpha * k4)
    return s, s1, s2


def _matvec(ops, m, v):
    return ops.matmul(m, v[..., None])[..., 0]


def normalised(ops, eps, grad, hess, norm2):
    """The objective f = 2(1 − √q) of one target, q = 1 − ε/‖φ‖², its gradient and Hessian in
    ln α from ε's (module docstring; batched: eps (S,), grad (S, N), hess (S, N, N), either of
    the last two may be None). Arrays stand left of the backend's scalars (see ``_gram_parts``)."""
    e = eps / norm2
    root = ops.sqrt(e * -1 + 1)  # √q
    f = e * 2 / (root + 1)
    g = h = None
    if grad is not None:
        w1 = 1 / (root * norm2)  # 1/(‖φ‖² √q)
        g = grad * w1[:, None]
        if hess is not None:
            w2 = w1 * w1 * w1 * (norm2 / 2)  # 1/(2 ‖φ‖⁴ q^(3/2))
            h = hess * w1[:, None, None] + grad[:, :, None] * grad[:, None, :] * w2[:, None, None]
    return f, g, h


def residuals(ops, problem: Problem, x, ints_per_target, order: int):
    """Per target the residual ε = ‖φ‖² − sᵀc of the optimum c = G⁻¹s, its gradient and its exact
    Hessian in ln α (None below ``order``), and c; batched over the rows of x (S, N). Also
    whether every Gram matrix passed the MIN_RCOND check (valid, (S,)).

    With u = s' − A c (A_kj = ∂₁G_kj; u_k = ⟨∂g_k/∂x_k, φ − χ⟩): ∂ε/∂x_k = −2 c_k u_k.  With
    W = diag(u) − Aᵀ diag(c), ∂c/∂x = G⁻¹ W =: D, and
    ∂²ε/∂x_m∂x_n = −2 u_m D_mn − 2 δ_mn c_m (s''_m − (B c)_m) + 2 c_m C_mn c_n + 2 c_m (A D)_mn
    (B = ∂₁²G, C = ∂₁∂₂G; derived by differentiating G c = s; checked against finite
    differences in the tests). Returns ([(ε, ∇ε, ∇²ε, c) per target], valid).
    """
    size = x.shape[1]
    diag = np.arange(size)
    alpha = ops.exp(x)
    grams: dict[int, tuple] = {}
    shared = _gram_shared(ops, x, alpha)
    out = []
    valid = np.ones(x.shape[0], dtype=bool)
    scale = ops.const(problem.scale)
    for t, norm2, ints in zip(problem.targets, problem.norm2_of(ops), ints_per_target):
        if t.l not in grams:
            g, a, b, c = _gram_parts(ops, x, alpha, t.l + 1.5, problem.h1, scale, order, shared)
            solve, ok = ops.factor(g)
            valid &= ok
            grams[t.l] = (a, b, c, solve)
        a, b, c, solve = grams[t.l]
        pre = problem.prefactor(ops, t, x)
        s, s1, s2 = _overlap_parts(t, alpha, ints, problem.h1, scale, ops.const(t.zeta),
                                   ops.const(t.n_eff) - 1 - t.l, order, pre)
        coef = solve(s)
        eps = -ops.total(s * coef) + norm2
        g_t = h_t = None
        if order >= 1:
            u = s1 - _matvec(ops, a, coef)
            g_t = coef * u * -2
        if order >= 2:
            w = -(np.swapaxes(a, 1, 2) * coef[:, None, :])
            w[:, diag, diag] += u
            d = solve(w)
            h_t = u[:, :, None] * d * -2 + coef[:, :, None] * c * coef[:, None, :] * 2 + coef[:, :, None] * ops.matmul(a, d) * 2
            h_t[:, diag, diag] -= coef * (s2 - _matvec(ops, b, coef)) * 2
            h_t = (h_t + np.swapaxes(h_t, 1, 2)) / 2
        out.append((eps, g_t, h_t, coef))
    return out, valid


def assemble(ops, problem: Problem, x, ints_per_target, order: int):
    """f = 2(1 − √q) per target, Σf, ∇Σf and the exact Hessian of Σf in ln α (``residuals``, then
    ``normalised``), batched over the rows of x (S, N). Returns (f list of (S,), total (S,),
    grad, hess, coefs, valid); the coefficients are the optimum c = G⁻¹s of the norm (not
    normalised: χ = Σ c_k g_k has ‖χ‖² = sᵀc = q ‖φ‖²)."""
    parts, valid = residuals(ops, problem, x, ints_per_target, order)
    objectives, coefs = [], []
    grad = hess = None
    for (eps, g_t, h_t, coef), norm2 in zip(parts, problem.norm2_of(ops)):
        f, g_t, h_t = normalised(ops, eps, g_t, h_t, norm2)
        objectives.append(f)
        coefs.append(coef)
        if g_t is not None:
            grad = g_t if grad is None else grad + g_t
        if h_t is not None:
            hess = h_t if hess is None else hess + h_t
    total = objectives[0]
    for f in objectives[1:]:
        total = total + f
    return objectives, total, grad, hess, coefs, valid


def assemble_double(problem: Problem, x: np.ndarray, ints: np.ndarray, order: int):
    """``assemble`` in double precision with every target and every angular momentum in one
    array (fewer, larger numpy calls: the same formulas, checked against ``assemble`` in the
    tests). ``ints`` has shape (T, 6, S, N)."""
    size = x.shape[1]
    diag = np.arange(size)
    alpha = np.exp(x)
    k = problem.arrays
    shared = _gram_shared(DOUBLE, x, alpha)
    g, a, b, c = _gram_parts(DOUBLE, x, alpha, k["p_l"][:, None, None, None], problem.h1, problem.scale, order,
                             shared)
    n_l, n_s = g.shape[0], g.shape[1]
    gm, ok = DoubleArithmetic.checked(g.reshape(n_l * n_s, size, size))
    valid = ok.reshape(n_l, n_s).all(axis=0)
    gl = np.linalg.solve
    li = k["l_index"]  # target → its l group
    gt = gm.reshape(n_l, n_s, size, size)[li]  # (T, S, N, N), identity where not valid
    pt = k["p_t"][:, None, None]  # (T, 1, 1)
    pre = exp_affine(x[None], pt / 2, k["pre_hi"][:, None, None], k["pre_lo"][:, None, None])
    i0, i1, i2, i3, i4, i5 = (ints[:, j] for j in range(6))
    s = pre * i0
    s1 = s * (pt / 2) - alpha[None] * pre * i2 if order >= 1 else None
    s2 = pre * (i0 * (pt * pt / 4) - alpha[None] * i2 * (pt + 1) + alpha[None] ** 2 * i4) if order >= 2 else None
    if problem.h1:
        a_, zeta = k["a_t"][:, None, None], k["zeta_t"][:, None, None]
        k0, k2, k4 = i0 * a_ - i1 * zeta, i2 * a_ - i3 * zeta, i4 * a_ - i5 * zeta
        fh = pre * alpha[None] * (-2) / (problem.scale * problem.scale)
        s = s + fh * k0
        if order >= 1:
            s1 = s1 + fh * (k0 * (pt / 2 + 1) - alpha[None] * k2)
        if order >= 2:
            s2 = s2 + fh * (k0 * (pt / 2 + 1) ** 2 - alpha[None] * k2 * (pt + 3) + alpha[None] ** 2 * k4)
    coef = gl(gt, s[..., None])[..., 0]  # (T, S, N)
    eps = k["norm2"][:, None] - np.einsum("tsk,tsk->ts", s, coef)
    grad_t = hess_t = None
    if order >= 1:
        at = a[li]
        u = s1 - np.einsum("tsij,tsj->tsi", at, coef)
        grad_t = coef * u * -2
    if order >= 2:
        w = -(np.swapaxes(at, 2, 3) * coef[:, :, None, :])
        w[:, :, diag, diag] += u
        d = gl(gt, w)
        hess_t = (u[..., None] * d * -2 + coef[..., :, None] * c[li] * coef[..., None, :] * 2
                  + coef[..., :, None] * (at @ d) * 2)
        hess_t[:, :, diag, diag] -= coef * (s2 - np.einsum("tsij,tsj->tsi", b[li], coef)) * 2
        hess_t = (hess_t + np.swapaxes(hess_t, 2, 3)) / 2
    # the normalised objective of every target at once (``normalised``, with a target axis)
    norm2 = k["norm2"][:, None]
    e = eps / norm2
    root = np.sqrt(1.0 - e)
    f = e * 2 / (root + 1)
    total = f.sum(axis=0)
    grad = hess = None
    if grad_t is not None:
        w1 = 1.0 / (root * norm2)
        grad = (grad_t * w1[..., None]).sum(axis=0)
        if hess_t is not None:
            w2 = w1 * w1 * w1 * (norm2 / 2)
            hess = (hess_t * w1[..., None, None]
                    + grad_t[..., :, None] * grad_t[..., None, :] * w2[..., None, None]).sum(axis=0)
    return list(f), total, grad, hess, list(coef), valid
