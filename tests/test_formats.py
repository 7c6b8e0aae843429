"""Every basis-file format, proven by a reader the project did not write: PySCF's parse_nwchem,
parse_gaussian (Gaussian 94 and the Psi4 layout) and parse_cp2k, qcelemental's BasisSet model for
QCSchema, runpy for the PySCF file, and for Dalton and OpenMolcas the layout readers in
tests/layout_readers.py (written from the codes' manuals, sharing nothing with the package)."""

import os
import runpy
import tempfile

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pyscf.gto.basis import parse_cp2k, parse_gaussian, parse_nwchem
from qcelemental.models import BasisSet

import stobuilder
from stobuilder.checks import make_mole, run_scf
from layout_readers import read_dalton, read_molcas

WATER = [("O", (0.0, 0.0, 0.119262)), ("H", (0.0, 0.763239, -0.477047)), ("H", (0.0, -0.763239, -0.477047))]
# Geometry: ASE G2 H2O (Curtiss et al., J. Chem. Phys. 106, 1063, 1997).
H2S = [("S", (0.0, 0.0, 0.102135)), ("H", (0.0, 0.974269, -0.817083)), ("H", (0.0, -0.974269, -0.817083))]
# Geometry: ASE G2 H2S (Curtiss et al., J. Chem. Phys. 106, 1063, 1997).

ALL = ("nwchem", "gaussian94", "pyscf", "psi4", "cp2k", "qcschema", "dalton", "molcas")


@pytest.fixture(scope="module")
def basis():
    # Zn brings a d shell with its own zeta; S brings 3s3p.
    return stobuilder.build_basis(["H", "C", "O", "S", "Zn"], rule="slater", gaussians=3)


@pytest.fixture(scope="module")
def gd():
    # Gd [Xe] 4f7 5d1 6s2 brings an f shell.
    return stobuilder.build_basis(["Gd"], rule="slater", gaussians=3)


def _single(basis, symbol):
    return stobuilder.Basis((basis[symbol],), rule=basis.rule, gaussians=basis.gaussians)


def _g94_chunks(text, symbols):
    """Element blocks between the **** lines; the first chunk is the header (comments, and for
    Psi4 the spherical line)."""
    chunks = text.split("****")[1:-1]
    assert len(chunks) == len(symbols)
    return dict(zip(symbols, chunks))


def _qcschema_to_pyscf(text):
    model = BasisSet.parse_raw(text)  # qcelemental validates the document
    out = {}
    for key, center in model.center_data.items():
        shells = []
        for sh in center.electron_shells:
            rows = sh.coefficients
            pairs = zip(sh.angular_momentum, rows) if len(sh.angular_momentum) > 1 else [(sh.angular_momentum[0], r) for r in rows]
            shells += [[l, *([a, c] for a, c in zip(sh.exponents, row))] for l, row in pairs]
        out[key] = sorted(shells, key=lambda s: s[0])
    return out


def independent(code, basis, sp=False):
    """{symbol: PySCF-form shells} as the independent reader of ``code`` sees our file."""
    symbols = basis.symbols
    if code == "nwchem":
        return {s: parse_nwchem.parse(stobuilder.write_basis(_single(basis, s), code, sp), optimize=False) for s in symbols}
    if code == "cp2k":
        return {s: parse_cp2k.parse(stobuilder.write_basis(_single(basis, s), code, sp), optimize=False) for s in symbols}
    text = stobuilder.write_basis(basis, code, sp)
    if code in ("gaussian94", "psi4"):
        if code == "psi4":
            assert text.splitlines()[0] == "spherical"  # Psi4 manual: the first line picks pure functions
        return {s: parse_gaussian.parse(c, optimize=False) for s, c in _g94_chunks(text, symbols).items()}
    if code == "pyscf":
        with tempfile.TemporaryDirectory() as d:
            path = os.path.join(d, "b.py")
            with open(path, "w") as f:
                f.write(text)
            return runpy.run_path(path)["basis"]
    if code == "qcschema":
        return _qcschema_to_pyscf(text)
    if code == "dalton":
        return read_dalton(text)
    if code == "molcas":
        return read_molcas(text)
    raise AssertionError(code)


def _same(parsed, ours, rel=1e-10):
    """Same shells, same order by l; exponents and coefficients within ``rel`` (the issue's 1e-10)."""
    assert [s[0] for s in parsed] == [s[0] for s in ours]
    for a, b in zip(parsed, ours):
        pa, pb = np.array(a[1:], dtype=float), np.array(b[1:], dtype=float)
        assert pa.shape == pb.shape
        np.testing.assert_allclose(pa, pb, rtol=rel, atol=0)


def test_registry_lists_every_format():
    table = stobuilder.formats()
    assert tuple(table) == ALL
    assert len({f.extension for f in table.values()}) == len(table)  # --code all never collides
    assert all(f.read and f.merge and f.description for f in table.values())


@pytest.mark.parametrize("sp", [False, True])
@pytest.mark.parametrize("code", ALL)
def test_independent_reader_reads_our_basis(basis, gd, code, sp):
    for b in (basis, gd):
        parsed = independent(code, b, sp)
        assert set(parsed) == set(b.symbols)
        for e in b.elements:
            _same(parsed[e.symbol], e.to_pyscf())


@pytest.mark.parametrize("code", ALL)
def test_read_basis_round_trips(basis, gd, code):
    for b in (basis, gd):
        for sp in (False, True):
            back = stobuilder.read_basis(stobuilder.write_basis(b, code, sp), code)
            assert back.rule == "file" and back.symbols == b.symbols
            for e in b.elements:
                _same(back[e.symbol].to_pyscf(), e.to_pyscf(), rel=1e-15)  # 16 significant digits written


@pytest.mark.parametrize("code", ["nwchem", "gaussian94", "psi4", "cp2k", "qcschema"])
def test_sp_shells_are_written_as_sp(basis, code):
    text = stobuilder.write_basis(_single(basis, "O"), code, sp_shells=True)
    marker = {"nwchem": "O    SP", "gaussian94": "SP   3", "psi4": "SP   3", "cp2k": "2  0  1  3  1 1"}.get(code)
    if code == "qcschema":
        shells = BasisSet.parse_raw(text).center_data["O"].electron_shells
        assert [s.angular_momentum for s in shells] == [[0], [0, 1]]
    else:
        assert marker in text


def test_same_scf_energy_from_every_format(basis):
    # RHF of water and H2S with our basis and with each format as its independent reader reads it.
    for geometry in (WATER, H2S):
        symbols = sorted({s for s, _ in geometry})
        ours = run_scf(make_mole(geometry, {s: basis[s].to_pyscf() for s in symbols}, 0, 0), "RHF").energy_hartree
        for code in ALL:
            parsed = independent(code, basis, sp=True)
            e = run_scf(make_mole(geometry, {s: parsed[s] for s in symbols}, 0, 0), "RHF").energy_hartree
            assert e == pytest.approx(ours, abs=1e-9), code


def _norm(shell):
    """<phi|phi> of the contraction sum_k c_k g_k of normalised primitives g_k = N_k r^l e^(-a_k r^2):
    <g_i|g_j> = (2 sqrt(a_i a_j) / (a_i + a_j))^(l + 3/2) (from the Gaussian normalisation integral,
    e.g. Helgaker, Jorgensen & Olsen, Molecular Electronic-Structure Theory, Wiley 2000, ch. 6)."""
    l = shell[0]
    a = np.array([p[0] for p in shell[1:]])
    c = np.array([p[1] for p in shell[1:]])
    s = (2 * np.sqrt(np.outer(a, a)) / np.add.outer(a, a)) ** (l + 1.5)
    return c @ s @ c


def test_published_sto3g_uses_the_same_convention():
    # PySCF's stored STO-3G (Hehre, Stewart & Pople 1969; Hehre, Ditchfield, Stewart & Pople 1970):
    # its coefficients, as printed, give normalised contractions. The tolerance follows the
    # printed digits: H and O carry 8 significant digits (norms off by up to 2.7e-8, measured),
    # S and Zn 10 (off by up to 7.7e-10). Unnormalised-primitive coefficients would be off by O(1).
    from pyscf import gto

    for symbol, tol in (("H", 1e-7), ("O", 1e-7), ("S", 5e-9), ("Zn", 5e-9)):
        for shell in gto.basis.load("sto3g", symbol):
            assert _norm(shell) == pytest.approx(1.0, abs=tol)


@pytest.mark.parametrize("code", ALL)
def test_contractions_read_back_are_normalised(basis, gd, code):
    # Read by the independent reader with no renormalisation (PySCF parsers with optimize=False
    # return the raw numbers); each contraction has norm 1.
    for b in (basis, gd):
        for shells in independent(code, b).values():
            for shell in shells:
                assert _norm(shell) == pytest.approx(1.0, abs=1e-8)


# ---------------------------------------------------------------------------- random bases

_SYMBOLS = ["H", "He", "Li", "C", "N", "O", "F", "Na", "Si", "P", "S", "Cl", "Fe", "Zn", "Br", "I", "Gd", "Au"]


@st.composite
def _shell(draw, l=None, exponents=None):
    l = draw(st.integers(0, 3)) if l is None else l
    if exponents is None:
        n = draw(st.integers(1, 12))
        # eight decades: 1e-3 .. 1e5 bohr^-2
        logs = draw(st.lists(st.floats(-3, 5, allow_nan=False), min_size=n, max_size=n, unique=True))
        exponents = tuple(sorted((10.0**x for x in logs), reverse=True))
        if len(set(exponents)) != len(exponents):
            exponents = tuple(sorted(set(exponents), reverse=True))
    mags = draw(st.lists(st.floats(-3, 1), min_size=len(exponents), max_size=len(exponents)))
    signs = draw(st.lists(st.sampled_from([-1.0, 1.0]), min_size=len(exponents), max_size=len(exponents)))
    coefs = tuple(s * 10.0**m for s, m in zip(signs, mags))
    return stobuilder.Shell(l, exponents, coefs)


@st.composite
def _element(draw, symbol):
    shells = []
    for _ in range(draw(st.integers(1, 5))):
        if draw(st.booleans()):
            s = draw(_shell(l=0))
            shells += [s, draw(_shell(l=1, exponents=s.exponents))]  # an s and p sharing exponents
        else:
            shells.append(draw(_shell()))
    return stobuilder.ElementBasis(symbol, tuple(shells))


@st.composite
def random_basis(draw):
    symbols = draw(st.lists(st.sampled_from(_SYMBOLS), min_size=1, max_size=3, unique=True))
    return stobuilder.Basis(tuple(draw(_element(s)) for s in symbols), rule="random", gaussians=0)


def _ours_as_read(element):
    """Our shells in the order the readers give them: by l, stable."""
    return element.to_pyscf()


@pytest.mark.parametrize("code", ALL)
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(b=random_basis(), sp=st.booleans())
def test_random_bases_survive_write_and_independent_read(b, sp, code):
    parsed = independent(code, b, sp)
    for e in b.elements:
        _same(parsed[e.symbol], _ours_as_read(e))


@pytest.mark.parametrize("code", ALL)
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(b=random_basis(), sp=st.booleans())
def test_random_bases_survive_our_reader(b, sp, code):
    back = stobuilder.read_basis(stobuilder.write_basis(b, code, sp), code)
    for e in b.elements:
        _same(back[e.symbol].to_pyscf(), e.to_pyscf(), rel=1e-15)
