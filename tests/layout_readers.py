"""Readers of our own for the two formats with no reader on PyPI (Dalton, OpenMolcas), written
from the codes' documented layouts and NOT sharing code with stobuilder/formats: they are the
test's second opinion. They return PySCF's internal form {symbol: [[l, [α, c], ...], ...]}.

Dalton basis library (Dalton manual): "$"/"!" lines are comments; "a Z" opens element Z; then one
block per l = 0, 1, ...: "nprim ncontr 0" and nprim rows "exponent c_1 .. c_ncontr".
OpenMolcas inline basis (OpenMolcas manual, SEWARD "Basis set"): "*" lines are comments;
"Basis set", "Label / inline", "charge lmax", then per l "nprim ncontr", nprim exponents, an
nprim × ncontr coefficient matrix (row per primitive), centre lines, "End of basis".
"""

from ase.data import chemical_symbols


def _columns(l, exps, rows):
    """One shell per column, zero coefficients left out (a general contraction's padding)."""
    out = []
    for j in range(len(rows[0]) if rows else 0):
        prims = [[a, r[j]] for a, r in zip(exps, rows) if r[j] != 0.0]
        out.append([l, *prims])
    return out


def read_dalton(text):
    lines = [x.strip() for x in text.splitlines()]
    lines = [x for x in lines if x and x[0] not in "$!"]
    result, i = {}, 0
    while i < len(lines):
        head = lines[i].split()
        assert head[0].lower() == "a" and len(head) == 2, lines[i]
        symbol = chemical_symbols[int(head[1])]
        shells, l, i = [], 0, i + 1
        while i < len(lines) and lines[i].split()[0].lower() != "a":
            nprim, ncontr, zero = (int(x) for x in lines[i].split())
            assert zero == 0
            rows = [[float(x) for x in lines[i + 1 + k].split()] for k in range(nprim)]
            assert all(len(r) == 1 + ncontr for r in rows)
            shells += _columns(l, [r[0] for r in rows], [r[1:] for r in rows])
            i += 1 + nprim
            l += 1
        result[symbol] = shells
    return result


def read_openmolcas(text):
    lines = [x.strip() for x in text.splitlines()]
    lines = [x for x in lines if x and not x.startswith("*")]
    result, i = {}, 0
    while i < len(lines):
        assert lines[i].lower() == "basis set"
        label, source = lines[i + 1].split("/")
        assert source.strip().lower() == "inline"
        symbol = label.split(".")[0].strip()
        charge, lmax = lines[i + 2].split()
        assert float(charge) == chemical_symbols.index(symbol)
        i += 3
        shells = []
        for l in range(int(lmax) + 1):
            nprim, ncontr = (int(x) for x in lines[i].split())
            i += 1
            exps = []
            while len(exps) < nprim:
                exps += [float(x) for x in lines[i].split()]
                i += 1
            rows = [[float(x) for x in lines[i + k].split()] for k in range(nprim)]
            assert all(len(r) == ncontr for r in rows)
            i += nprim
            shells += _columns(l, exps, rows)
        while lines[i].lower() != "end of basis":
            i += 1
        i += 1
        result[symbol] = shells
    return result
