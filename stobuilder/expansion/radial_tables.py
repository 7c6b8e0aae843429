"""The radial integrals I_ν(α, ζ) = ∫_0^∞ r^(ν−1) e^(−αr² − ζr) dr (dI_ν/dα = −I_(ν+2)) that every
STO–Gaussian overlap of the objective is made of, as tables shared by the process: in double
precision for the batched search (``RadialTable``, ``radial_table``) and in Arb ball arithmetic
for the finish (``BallTable``, ``ball_table``), both Chebyshev pieces in ln α of ln I_ν computed
in Arb from the closed forms, which the ball tables fall back to where their series has not
converged.

Closed forms: for integer ν, I_1 from erfc and the recurrence 2α I_(ν+2) = ν I_ν − ζ I_(ν+1);
for a non-integer n*, Γ(ν) (4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) (I. S. Gradshteyn, I. M. Ryzhik, Table
of Integrals, 7th ed., 2007, 3.462.1; Arb's hypgeom_u) and the recurrence downwards,
I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν, whose terms are all positive. No quadrature grid is used.
"""

from __future__ import annotations

import math

import numpy as np

from stobuilder.expansion.arithmetic import ARB_LOCK, BALL_BITS

_BALL_TOL = 2.0 ** -BALL_BITS


# Pieces of the tables of I_ν: unit width in ln α, Chebyshev degree (the error reaches the
# rounding level, ~1e-15 relative, from degree 12 on: measured; the tests check degree 14),
# working precision
TABLE_DEGREE = 14
TABLE_BITS = 128


class RadialTable:
    """I_ν(α) = ∫ r^(ν−1) e^(−αr² − ζr) dr in double precision for the batched evaluation.

    With m = n* + l + 2 for the highest l of a fit, ln I_(m+4) and ln I_(m+5) are Chebyshev
    polynomials of x = ln α on each piece [k, k + 1) (built on first use), every lower ν (down to
    the lowest l's m) follows by the downward recurrence I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν, whose
    terms are all positive. A piece costs TABLE_DEGREE + 1 evaluations in Arb (integer ν: I_1
    from erfc and the upward recurrence; otherwise the closed form with hypgeom_u, both at a
    working precision raised until Arb's error bound is below 2^-(TABLE_BITS − 40)), at Chebyshev
    nodes formed in ball arithmetic (nodes rounded to double would cost ~1e-14: ln I changes by
    ~(ν+1)/2 per unit of x); the coefficients come from the discrete cosine transform in Arb,
    rounded to double, and are stored as I = E · exp(p(t)) with E = e^(c₀), so |p| stays small.
    The double-precision recurrences this replaces lost up to 1.4e-12 relative at ν = 17 near
    α = ζ² (measured against Arb); the tables are within ~1e-15 everywhere (tests). Tables are
    shared by every fit of the process (``radial_table``)."""

    def __init__(self, n_eff: float, l: int, zeta: float):
        self.n_eff, self.l, self.zeta = n_eff, l, zeta
        self.pieces: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # k → (E (2,), coefficients (2, D+1))
        self._stacked = None  # (k_first, E, coefficients) of the pieces k_first … as arrays

    def _piece(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        from flint import arb, ctx

        with ARB_LOCK:
            saved = ctx.prec
            try:
                coefs = _chebyshev_piece(self.n_eff, self.l, self.zeta, k, TABLE_DEGREE, TABLE_BITS)
                big_e, rounded = [], []
                for c in coefs:
                    e = float(c[0].exp().mid())
                    c[0] -= arb(e).log()
                    big_e.append(e)
                    rounded.append([float(v.mid()) for v in c])
            finally:
                ctx.prec = saved
        return np.array(big_e), np.array(rounded)

    def columns(self, log_alpha: np.ndarray, alpha: np.ndarray, l_min: int | None = None) -> np.ndarray:
        """I_ν (rows) for ν = n* + l_min + 2 … n* + l + 7 at every ln α (and α = exp(ln α)); l_min
        defaults to the table's l (six rows)."""
        k = np.floor(log_alpha).astype(int)
        stacked = self._stacked
        if stacked is None or k.min() < stacked[0] or k.max() >= stacked[0] + len(stacked[1]):
            with ARB_LOCK:  # (other threads may be adding pieces)
                # every piece from the lowest to the highest k asked for so far, as arrays
                # indexed by k − k_first
                first = int(k.min()) if stacked is None else min(int(k.min()), stacked[0])
                last = int(k.max()) if stacked is None else max(int(k.max()), stacked[0] + len(stacked[1]) - 1)
                for key in range(first, last + 1):
                    if key not in self.pieces:
                        self.pieces[key] = self._piece(key)
                stacked = (first, np.array([self.pieces[key][0] for key in range(first, last + 1)]),
                           np.array([self.pieces[key][1] for key in range(first, last + 1)]))
                self._stacked = stacked
        where = k - stacked[0]
        big_e = stacked[1][where]  # (M, 2)
        coefs = stacked[2][where]  # (M, 2, D+1)
        t = (2.0 * (log_alpha - k) - 1.0)[:, None]
        b1 = np.zeros((len(k), 2))
        b2 = np.zeros((len(k), 2))
        for n in range(TABLE_DEGREE, 0, -1):  # Clenshaw
            b1, b2 = 2.0 * t * b1 - b2 + coefs[:, :, n], b1
        values = big_e * np.exp(t * b1 - b2 + coefs[:, :, 0])
        low = self.l if l_min is None else l_min
        return np.array(_downward(values[:, 0], values[:, 1], alpha, self.zeta, self.n_eff + low + 2, self.l - low + 6))


def _downward(second, top, alpha, zeta, m, count: int) -> list:
    """I_m … I_(m+count−1) from the two highest, I_(m+count−2) = ``second`` and I_(m+count−1) =
    ``top``, by I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν (all terms positive); numpy arrays or arb."""
    rows = [None] * (count - 2) + [second, top]
    for j in range(count - 3, -1, -1):
        rows[j] = (2 * alpha * rows[j + 2] + zeta * rows[j + 1]) / (m + j)
    return rows


_TABLES: dict[tuple[float, int, float], RadialTable] = {}


def radial_table(n_eff: float, l: int, zeta: float) -> RadialTable:
    """The process-wide table of I_ν for (n*, highest l, ζ) (created on first use)."""
    key = (float(n_eff), int(l), float(zeta))
    table = _TABLES.get(key)
    if table is None:
        with ARB_LOCK:
            table = _TABLES.setdefault(key, RadialTable(*key))
    return table


def _u_half(a, w):
    """U(a, ½, w) (Arb's hypgeom_u) for w > 0 with a radius: evaluated at w's midpoint, which
    Arb does up to ten times faster than on an interval (measured at w ~ 75, 128 bits), and
    widened by the propagated input error, |w U'/U| ≤ a + w times w's relative radius (U'(a, b, w)
    = −a U(a + 1, b + 1, w), and U(a + 1, 3/2, w) ≤ (1 + w/a) U(a, ½, w)/w for these arguments:
    a bound, not sharp)."""
    from flint import arb

    mid = arb(w.mid())
    u = mid.hypgeom_u(a, arb(0.5))
    spread = abs(u) * (a + w) * w.rad() / mid
    return u + arb(0, float(spread.upper()) * (1 + 2.0 ** -50)) if w.rad() > 0 else u


def _table_node(n_eff: float, l: int, zeta: float, k: int, angle_index: int, size: int, bits: int):
    """ln I_(m+4), ln I_(m+5) (m = n* + l + 2) as arb at the Chebyshev node x = k + (1 + cos θ)/2,
    θ = π(2j + 1)/(2 size), formed in ball arithmetic: integer ν from erfc and the upward
    recurrence, otherwise the closed form with hypgeom_u; the working precision is raised until
    Arb's error bound is below 2^-(bits − 40)."""
    from flint import arb, ctx

    prec = bits
    while True:
        ctx.prec = prec
        angle = arb.pi() * (2 * angle_index + 1) / (2 * size)
        a = (arb(k) + (1 + angle.cos()) / 2).exp()
        zb = arb(zeta)
        m = arb(n_eff) + (l + 2)
        if float(n_eff).is_integer():
            top = int(n_eff) + l + 7
            rows = [(arb.pi() / a).sqrt() / 2 * (zb / (2 * a.sqrt())).erfc() * (zb * zb / (4 * a)).exp()]
            rows.append((1 - zb * rows[0]) / (2 * a))
            for nu in range(1, top - 1):
                rows.append((rows[nu - 1] * nu - zb * rows[nu]) / (2 * a))
            values = [rows[top - 2], rows[top - 1]]
        else:
            four_a = 4 * a
            w = zb * zb / four_a
            values = [nu.gamma() * four_a ** (-nu / 2) * _u_half(nu / 2, w) for nu in (m + 4, m + 5)]
        if all(v.rad() < abs(v.mid()) * arb(2) ** (40 - bits) for v in values) or prec > 4000:
            return [v.log() for v in values]
        prec *= 2


def _chebyshev_piece(n_eff: float, l: int, zeta: float, k: int, degree: int, bits: int):
    """Chebyshev coefficients (arb, at ``bits``) of ln I_(m+4) and ln I_(m+5) on [k, k + 1] in
    t = 2(x − k) − 1, from the values at the degree + 1 nodes by the discrete cosine transform.
    The caller holds ARB_LOCK and restores ctx.prec."""
    from flint import arb, ctx

    size = degree + 1
    values = [_table_node(n_eff, l, zeta, k, j, size, bits) for j in range(size)]
    ctx.prec = bits
    # cos(n θ_j) = T_n(cos θ_j) by the Chebyshev recurrence (one cosine per node)
    nodes = [(arb.pi() * (2 * j + 1) / (2 * size)).cos() for j in range(size)]
    basis = [[arb(1)] * size, list(nodes)]
    for n in range(2, size):
        basis.append([2 * t * a - b for t, a, b in zip(nodes, basis[-1], basis[-2])])
    out = []
    for q in range(2):
        c = [sum((values[j][q] * basis[n][j] for j in range(size)), arb(0)) * 2 / size for n in range(size)]
        c[0] /= 2
        out.append(c)
    return out


# Pieces of the tables of I_ν used by the ball evaluation: Chebyshev degree and working
# precision (the last coefficients of ln I are ~1e-37 … 1e-56, measured; a piece whose last
# BALL_TAIL coefficients exceed 2^-BALL_TAIL_BITS, an absolute error of ln I and so a relative
# one of I, falls back to the closed forms)
BALL_TABLE_DEGREE = 36
BALL_TABLE_BITS = 192
BALL_TAIL, BALL_TAIL_BITS = 3, 118


class BallTable:
    """I_ν in Arb for ``Problem.evaluate_ball``: with m = n* + l + 2 for the highest l of a fit, ln I_(m+4)
    and ln I_(m+5) as polynomials in t = 2(x − k) − 1 on each piece [k, k + 1) of x = ln α (the
    Chebyshev series at BALL_TABLE_BITS, converted to the monomial basis and evaluated at that
    precision: the conversion's coefficients grow to ~2^43 at degree 36, below the 79 spare
    bits), every lower ν by the downward recurrence. Against the closed forms at 320 bits
    within ~3e-37 (tests); an exponent costs ~3 µs instead of ~90 µs for two hypgeom_u
    (non-integer n*) or ~13 µs for erfc and the recurrence at a raised precision (integer n*).
    Pieces whose series does not converge to 2^-BALL_TAIL_BITS use those closed forms."""

    def __init__(self, n_eff: float, l: int, zeta: float):
        self.n_eff, self.l, self.zeta = n_eff, l, zeta
        self.pieces: dict[int, tuple | None] = {}

    def _piece(self, k: int):
        from flint import arb, arb_poly

        coefs = _chebyshev_piece(self.n_eff, self.l, self.zeta, k, BALL_TABLE_DEGREE, BALL_TABLE_BITS)
        tol = arb(2) ** (-BALL_TAIL_BITS)
        if any(abs(v) > tol for c in coefs for v in c[-BALL_TAIL:]):
            return None
        t = arb_poly([0, 1])
        polys = []
        for c in coefs:
            low, high = arb_poly([1]), t
            poly = c[0] * low + c[1] * high
            for n in range(2, len(c)):
                low, high = high, 2 * t * high - low
                poly += c[n] * high
            polys.append(poly)
        return tuple(polys)

    def columns(self, log_a: float, l_min: int | None = None):
        """I_ν as arb for ν = n* + l_min + 2 … n* + l + 7 at α = e^log_a (l_min defaults to the
        table's l: six values); the caller holds ARB_LOCK and restores ctx.prec."""
        from flint import arb, ctx

        low = self.l if l_min is None else l_min
        k = math.floor(log_a)
        if k not in self.pieces:
            self.pieces[k] = self._piece(k)
        piece = self.pieces[k]
        if piece is None:  # the closed forms
            if float(self.n_eff).is_integer():
                m = int(self.n_eff) + low + 2
                return _integrals_ball(int(self.n_eff) + self.l + 7, log_a, self.zeta)[m - 1:]
            top = _nonint_arb(self.n_eff, self.l, log_a, self.zeta, BALL_BITS)
            if low == self.l:
                return top
            return _nonint_arb(self.n_eff, low, log_a, self.zeta, BALL_BITS)[: self.l - low] + top
        ctx.prec = BALL_TABLE_BITS
        xb = arb(log_a)
        t = 2 * (xb - k) - 1
        return _downward(piece[0](t).exp(), piece[1](t).exp(), xb.exp(), arb(self.zeta),
                         arb(self.n_eff) + (low + 2), self.l - low + 6)


_BALL_TABLES: dict[tuple[float, int, float], BallTable] = {}


def ball_table(n_eff: float, l: int, zeta: float) -> BallTable:
    """The process-wide ball table of I_ν for (n*, highest l, ζ) (created on first use); the
    caller holds ARB_LOCK."""
    key = (n_eff, l, zeta)
    table = _BALL_TABLES.get(key)
    if table is None:
        table = _BALL_TABLES[key] = BallTable(*key)
    return table


def _nonint_arb(n_eff: float, l: int, a: float, zeta: float, bits: int):
    """I_m … I_(m+5) for m = n* + l + 2 (n* not an integer) as arb, at α = e^a:
    the two highest from the closed form Γ(ν)(4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) (Gradshteyn & Ryzhik
    3.462.1; Arb's hypgeom_u), the others by the recurrence downwards,
    I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν, whose terms are all positive; ν is formed in ball
    arithmetic from n* and l. The working precision is raised until Arb's error bound on every
    value is below 2^-bits relative."""
    from flint import arb, ctx

    saved = ctx.prec
    prec = bits + 64
    try:
        while True:
            ctx.prec = prec
            ab = arb(a).exp()
            zb, m = arb(zeta), arb(n_eff) + (l + 2)
            four_a = 4 * ab
            w = zb * zb / four_a

            def closed(nu):
                return nu.gamma() * four_a ** (-nu / 2) * _u_half(nu / 2, w)

            rows = _downward(closed(m + 4), closed(m + 5), ab, zb, m, 6)
            tol = arb(2) ** (-bits)
            if all(v.rad() < abs(v.mid()) * tol for v in rows) or prec > 4000:
                return rows
            prec *= 2
    finally:
        ctx.prec = saved


def _integrals_ball(nu_max: int, log_a: float, zeta: float):
    """I_1 … I_nu_max at α = e^log_a as arb: I_1 from erfc, then the upward recurrence at a working
    precision doubled until the error bound of every I_ν is below 2^-BALL_BITS relative (the
    recurrence loses up to ~30 digits at α = 1e-3 ζ², measured)."""
    from flint import arb, ctx

    saved = ctx.prec
    prec = BALL_BITS + 96
    try:
        while True:
            ctx.prec = prec
            ab, zb = arb(log_a).exp(), arb(zeta)
            half_inv = 1 / (2 * ab)
            w = zb / (2 * ab.sqrt())
            rows = [(arb.pi() / ab).sqrt() / 2 * w.erfc() * (w * w).exp()]
            rows.append((1 - zb * rows[0]) * half_inv)
            for nu in range(1, nu_max - 1):
                rows.append((rows[nu - 1] * nu - zb * rows[nu]) * half_inv)
            rows = rows[:nu_max]
            # the recurrence's error bound grows with ν: the last row is the worst
            if rows[-1].rad() < abs(rows[-1].mid()) * _BALL_TOL or prec > 4000:
                return rows
            prec *= 2
    finally:
        ctx.prec = saved
