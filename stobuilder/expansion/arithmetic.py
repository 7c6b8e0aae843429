"""The arithmetics the objective is assembled in (``assembly.assemble``): double precision
(numpy, batched LAPACK) and Arb ball arithmetic (python-flint; F. Johansson, IEEE Trans. Comput.
66, 1281, 2017). A backend supplies exp, sqrt, const, total, matmul and factor (a solver for the
Gram matrices and which of them pass the MIN_RCOND check); the ball one also log and lgamma.
Also here: the exact-argument exponential of the double prefactors (``exp_affine``) and the
process-wide lock on python-flint's global working precision (``ARB_LOCK``), which every user of
python-flint holds.
"""

from __future__ import annotations

import threading

import numpy as np

# √ of the smallest reciprocal condition number of the Gram matrix accepted: cond(G) ≤ 1e14
# (common practice, no source: beyond it the coefficients lose more than 2 of their 16 digits).
MIN_RCOND = 1e-7

BALL_BITS = 113  # working precision of the ball evaluation (34 decimal digits)
# python-flint's working precision (ctx.prec) is global to the process, threads included: every
# use of it holds this lock
ARB_LOCK = threading.RLock()


class DoubleArithmetic:
    """Double-precision backend of ``assembly.assemble``: numpy floats, batched LAPACK."""

    exp = staticmethod(np.exp)
    sqrt = staticmethod(np.sqrt)

    @staticmethod
    def const(v):
        return float(v)

    @staticmethod
    def checked(g):
        """(g', valid): which Gram matrices of g (S, N, N) are positive definite with the smallest
        Cholesky diagonal ≥ MIN_RCOND × the largest (that ratio bounds cond(G) from below by its
        inverse square: a cheap guard against near-dependent primitives); g' has the others
        replaced by the identity."""
        valid = np.ones(g.shape[0], dtype=bool)
        try:
            low = np.linalg.cholesky(g)
        except np.linalg.LinAlgError:
            low = np.empty_like(g)
            for k in range(g.shape[0]):
                try:
                    low[k] = np.linalg.cholesky(g[k])
                except np.linalg.LinAlgError:
                    valid[k] = False
                    low[k] = np.eye(g.shape[1])
        diag = np.diagonal(low, axis1=1, axis2=2)
        valid &= diag.min(axis=1) >= MIN_RCOND * diag.max(axis=1)
        if not valid.all():
            g = g.copy()
            g[~valid] = np.eye(g.shape[1])
        return g, valid

    @classmethod
    def factor(cls, g):
        """(solve, valid): a batched solver for the checked Gram matrices (see ``checked``)."""
        g, valid = cls.checked(g)

        def solve(b):
            return np.linalg.solve(g, b[..., None])[..., 0] if b.ndim == 2 else np.linalg.solve(g, b)

        return solve, valid

    @staticmethod
    def total(v):
        return v.sum(axis=-1)

    matmul = staticmethod(np.matmul)


class BallArithmetic:
    """python-flint (Arb ball arithmetic, C) backend of ``assembly.assemble``: numpy object arrays of
    arb at BALL_BITS bits, the matrix products and solves in arb_mat (midpoint algorithm); about
    five times faster than mpmath. The Gram matrices are checked for MIN_RCOND in double."""

    def __init__(self):
        from flint import arb, arb_mat

        self.arb, self.arb_mat = arb, arb_mat
        self.exp = np.frompyfunc(lambda v: v.exp(), 1, 1)
        self.sqrt = np.frompyfunc(lambda v: v.sqrt(), 1, 1)

    def const(self, v):
        return self.arb(v)

    @staticmethod
    def log(v):
        return v.log()

    @staticmethod
    def lgamma(v):
        return v.lgamma()

    def _mat(self, m):
        return self.arb_mat(m.tolist())

    def _back(self, m):
        out = np.empty((m.nrows(), m.ncols()), dtype=object)
        for i, row in enumerate(m.tolist()):
            out[i, :] = row
        return out

    def factor(self, g):
        mid = np.vectorize(lambda v: float(v.mid()), otypes=[float])(g)
        _, valid = DoubleArithmetic.factor(mid)
        mats = [self._mat(gk) for gk in g]

        def solve(b):
            out = []
            for m, bk, ok in zip(mats, b, valid):
                if not ok:
                    out.append(bk)
                    continue
                col = bk.ndim == 1
                rhs = self._mat(bk.reshape(bk.shape[0], -1))
                x = self._back(m.solve(rhs, algorithm="approx"))
                out.append(x[:, 0] if col else x)
            return np.array(out, dtype=object)

        return solve, valid

    def total(self, v):
        out = np.empty(v.shape[0], dtype=object)
        for k, row in enumerate(v):
            acc = self.arb(0)
            for item in row:
                acc += item
            out[k] = acc
        return out

    def matmul(self, a, b):
        return np.array([self._back(self._mat(ak) * self._mat(bk)) for ak, bk in zip(a, b)], dtype=object)


def exp_affine(x: np.ndarray, h, c_hi, c_lo) -> np.ndarray:
    """exp(h x + c) to a few ulp for |h x + c| up to ~100 (np.exp of the rounded argument would be
    off by |h x + c| ulp): h = p/2 has at most 4 significant bits, so h x is exact as the sum
    of the two halves of x (T. J. Dekker, Numer. Math. 18, 224, 1971), the sum with c = c_hi +
    c_lo is formed with its rounding error (Knuth's TwoSum), and exp(hi + lo) = exp(hi)(1 + lo)."""
    big = x * 134217729.0  # 2^27 + 1: Dekker's split
    x_hi = big - (big - x)
    prod = x * h
    err = (x_hi * h - prod) + (x - x_hi) * h
    total = prod + c_hi
    back = total - prod
    err = err + (prod - (total - back)) + (c_hi - back) + c_lo
    return np.exp(total) * (1.0 + err)


DOUBLE = DoubleArithmetic()  # the double backend (stateless)
