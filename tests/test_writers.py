"""Writers, proven by PySCF's own loaders on whole files by path: what we write reads back to the
same basis and the same SCF energy."""

import runpy

import pytest
from pyscf import gto
from pyscf.gto.basis import parse_gaussian

import stobuilder
from stobuilder.scf.mole import make_mole
from stobuilder.scf.run import run_scf

WATER = [("O", (0.0, 0.0, 0.119262)), ("H", (0.0, 0.763239, -0.477047)), ("H", (0.0, -0.763239, -0.477047))]
# Geometry: ASE G2 H2O (Curtiss et al., J. Chem. Phys. 106, 1063, 1997).


@pytest.fixture(scope="module")
def basis():
    # Zn brings a d shell with its own ζ; S brings 3s3p.
    return stobuilder.build_basis(["H", "O", "S", "Zn"], rule="slater", gaussians=3)


def _same(parsed, ours, rel=1e-14):
    assert len(parsed) == len(ours)
    for a, b in zip(parsed, ours):
        assert a[0] == b[0] and len(a) == len(b)
        for (ea, ca), (eb, cb) in zip(a[1:], b[1:]):
            assert ea == pytest.approx(eb, rel=rel) and ca == pytest.approx(cb, rel=rel, abs=1e-15)


def _file(tmp_path, basis, code, sp=False):
    path = tmp_path / ("b" + stobuilder.formats()[code].extension)
    path.write_text(stobuilder.write_basis(basis, code, sp_shells=sp))
    return str(path)


@pytest.mark.parametrize("sp", [False, True])
def test_nwchem_file_loads_back_by_path(basis, sp, tmp_path):
    # the whole file, element by element, through PySCF's path loader (what gto.M(basis=path) calls)
    path = _file(tmp_path, basis, "nwchem", sp)
    for el in basis.elements:
        _same(gto.basis.load(path, el.symbol, optimize=False), el.to_pyscf())


@pytest.mark.parametrize("sp", [False, True])
def test_gaussian_file_loads_back_by_path(basis, sp, tmp_path):
    path = _file(tmp_path, basis, "gaussian", sp)
    for el in basis.elements:
        _same(parse_gaussian.load(path, el.symbol, optimize=False), el.to_pyscf())


def test_pyscf_file_loads_bit_for_bit(basis, tmp_path):
    path = tmp_path / "b.py"
    path.write_text(stobuilder.write_basis(basis, "pyscf"))
    assert runpy.run_path(str(path))["basis"] == basis.to_pyscf()


def test_same_scf_energy_from_every_file(basis, tmp_path):
    # Water with the basis as we hold it, and with each whole file as PySCF loads it: same energy.
    ours = run_scf(make_mole(WATER, {s: basis[s].to_pyscf() for s in ("H", "O")}, 0, 0), "RHF").energy_hartree
    gbs = _file(tmp_path, basis, "gaussian", sp=True)
    readers = {
        "nwchem": _file(tmp_path, basis, "nwchem", sp=True),  # gto.M(basis=path)
        "gaussian": {s: parse_gaussian.load(gbs, s) for s in ("H", "O")},
    }
    for name, parsed in readers.items():
        e = run_scf(make_mole(WATER, parsed, 0, 0), "RHF").energy_hartree
        assert e == pytest.approx(ours, abs=1e-9), name


def test_output_is_deterministic(basis):
    again = stobuilder.build_basis(["Zn", "S", "O", "H"], rule="slater", gaussians=3)
    for code in stobuilder.formats():
        assert stobuilder.write_basis(basis, code) == stobuilder.write_basis(again, code)


def test_dalton_block_comments_state_each_block_in_our_words(basis):
    # each "$" comment line above a block states its l and the block's own counts; the Dalton
    # manual's layout makes every "$" line a comment
    lines = stobuilder.write_basis(basis, "dalton").splitlines()
    blocks = 0
    for comment, block in zip(lines, lines[1:]):
        if comment.startswith("$ l="):
            blocks += 1
            nprim, ncontr, _ = (int(x) for x in block.split())
            letter = "spdf"[int(comment.split("=")[1].split()[0])]
            expected = f"({letter}): none" if nprim == 0 else (
                f"({letter}): {nprim} primitive{'' if nprim == 1 else 's'}, {ncontr} contraction{'' if ncontr == 1 else 's'}")
            assert comment.endswith(expected), comment
    assert blocks == sum(max(s.l for s in e.shells) + 1 for e in basis.elements)  # a block per l = 0 … lmax
    assert not any("type functions" in line for line in lines)
