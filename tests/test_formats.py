"""Every basis-file format, proven on whole multi-element files read by path, the way users read
them, by readers the project did not write:

- PySCF's own path loaders (PySCF 2.14): ``gto.M(basis=PATH)`` / ``gto.basis.load(PATH, symbol)``
  for the NWChem and CP2K files, ``parse_gaussian.load(PATH, symbol)`` for the Gaussian and Psi4
  .gbs files, ``runpy.run_path`` for the Python file;
- gbasis (PyPI ``qc-gbasis``, a Gaussian-integral library): ``gbasis.parsers.parse_nwchem(PATH)``
  for the NWChem file, ``parse_gbs(PATH)`` for the Gaussian and Psi4 files;
- cp2k-input-tools (PyPI, a CP2K input toolkit): ``BasisSetData.datafile_iter`` for the CP2K file;
- qcelemental's ``BasisSet`` model for the QCSchema JSON;
- for Dalton and OpenMolcas, which no package reads, the layout readers in tests/layout_readers.py
  (written from the codes' manuals, sharing nothing with the package).

Text from inputs that goes into a file's header (a rule name, a configuration, a note, a
structure's file name) passes through stobuilder.core.limits.one_line: it cannot end the comment and
become live content, and every reader above reads the file as if the text were plain.
"""

import os
import re
import runpy
import tempfile

import numpy as np
import pytest
from cp2k_input_tools.basissets import BasisSetData
from gbasis.parsers import parse_gbs, parse_nwchem
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from pyscf import gto, scf
from ase.build import molecule
from ase.io import write
from pyscf.gto.basis import parse_gaussian
from qcelemental.models import BasisSet

import stobuilder
import stobuilder.model.elements
from stobuilder.cli import main
from layout_readers import read_dalton, read_openmolcas
from stobuilder.core.errors import InputError
from stobuilder.pipeline.path import format_for_path

ALL = ("nwchem", "gaussian", "pyscf", "psi4", "cp2k", "qcschema", "dalton", "openmolcas")
EXTENSIONS = {
    "nwchem": ".nw", "gaussian": ".gbs", "pyscf": ".py", "psi4": ".psi4.gbs", "cp2k": ".cp2k.basis",
    "qcschema": ".qcschema.json", "dalton": ".dalton.basis", "openmolcas": ".openmolcas.basis",
}
# The non-PySCF reader of each format: the name is the package and function, as in the docstring.
SECOND_READER = {
    "nwchem": "gbasis.parsers.parse_nwchem",
    "gaussian": "gbasis.parsers.parse_gbs",
    "psi4": "gbasis.parsers.parse_gbs",
    "cp2k": "cp2k_input_tools.basissets.BasisSetData.datafile_iter",
    "qcschema": "qcelemental.models.BasisSet",
    "dalton": "tests/layout_readers.read_dalton",
    "openmolcas": "tests/layout_readers.read_openmolcas",
}


@pytest.fixture(scope="module")
def basis():
    # Zn brings a d shell with its own zeta; S brings 3s3p.
    return stobuilder.build_basis(["H", "C", "O", "S", "Zn"], rule="slater", gaussians=3)


@pytest.fixture(scope="module")
def gd():
    # Gd [Xe] 4f7 5d1 6s2 brings an f shell; with H and Cl, a multi-element file with s, p, d and f.
    return stobuilder.build_basis(["H", "Cl", "Gd"], rule="slater", gaussians=3)


def write_file(folder, basis, code, sp=False, stem="basis"):
    """The whole file of ``basis`` in the format of ``code``, written under ``folder``; its path."""
    path = os.path.join(str(folder), stem + stobuilder.formats()[code].extension)
    with open(path, "w", encoding="utf-8") as handle:
        handle.write(stobuilder.write_basis(basis, code, sp))
    return path


def _by_l(shells):
    """Shells in the order PySCF's parsers give them: by l, stable."""
    return sorted(shells, key=lambda s: s[0])


def _columns(l, exps, coefs):
    """One PySCF shell per column of a (general) contraction."""
    coefs = np.asarray(coefs, dtype=float)
    if coefs.ndim == 1:
        coefs = coefs[:, None]
    return [[l, *([float(a), float(c)] for a, c in zip(exps, coefs[:, j]))] for j in range(coefs.shape[1])]


def _qcschema_to_pyscf(text):
    model = BasisSet.parse_raw(text)  # qcelemental validates the document
    out = {}
    for key, center in model.center_data.items():
        shells = []
        for sh in center.electron_shells:
            rows = sh.coefficients
            pairs = zip(sh.angular_momentum, rows) if len(sh.angular_momentum) > 1 else [(sh.angular_momentum[0], r) for r in rows]
            shells += [[l, *([a, c] for a, c in zip(sh.exponents, row))] for l, row in pairs]
        out[key] = _by_l(shells)
    return out


def host_reader(code, path, symbols):
    """{symbol: PySCF-form shells} as the host code's own reader (PySCF's path loaders, or the
    format's reader of record for the formats PySCF cannot read) reads the whole file at ``path``."""
    if code in ("nwchem", "cp2k"):
        # what gto.M(basis=path) calls for each element (pyscf/gto/basis/__init__.py, load)
        return {s: gto.basis.load(path, s, optimize=False) for s in symbols}
    if code in ("gaussian", "psi4"):
        return {s: parse_gaussian.load(path, s, optimize=False) for s in symbols}
    if code == "pyscf":
        return runpy.run_path(path)["basis"]
    with open(path, encoding="utf-8") as handle:
        text = handle.read()
    if code == "qcschema":
        return _qcschema_to_pyscf(text)
    if code == "dalton":
        return read_dalton(text)
    if code == "openmolcas":
        return read_openmolcas(text)
    raise AssertionError(code)


def second_reader(code, path):
    """{symbol: PySCF-form shells} as the independent non-PySCF reader of ``code`` reads the whole
    file at ``path`` (SECOND_READER names it)."""
    if code == "nwchem":  # gbasis.parsers.parse_nwchem
        return {s: _by_l(sum((_columns(l, e, c) for l, e, c in shells), [])) for s, shells in parse_nwchem(path).items()}
    if code in ("gaussian", "psi4"):  # gbasis.parsers.parse_gbs
        return {s: _by_l(sum((_columns(l, e, c) for l, e, c in shells), [])) for s, shells in parse_gbs(path).items()}
    if code == "cp2k":  # cp2k_input_tools.basissets.BasisSetData
        out = {}
        with open(path, encoding="utf-8") as handle:
            entries = list(BasisSetData.datafile_iter(handle.read(), keep_going=False))
        for entry in entries:
            shells = []
            for block in entry.blocks:
                col = 1
                for l, count in block.l:
                    for _ in range(count):
                        shells.append([l, *([float(r[0]), float(r[col])] for r in block.coefficients)])
                        col += 1
            assert entry.element not in out
            out[entry.element] = _by_l(shells)
        return out
    return host_reader(code, path, None)


def _same(parsed, ours, rel=1e-10):
    """Same shells, same order by l; exponents and coefficients within ``rel``."""
    assert [s[0] for s in parsed] == [s[0] for s in ours]
    for a, b in zip(parsed, ours):
        pa, pb = np.array(a[1:], dtype=float), np.array(b[1:], dtype=float)
        assert pa.shape == pb.shape
        np.testing.assert_allclose(pa, pb, rtol=rel, atol=0)


def test_registry_lists_every_format_under_its_codes_name():
    table = stobuilder.formats()
    assert tuple(table) == ALL
    assert {k: f.extension for k, f in table.items()} == EXTENSIONS
    assert all(f.read and f.merge and f.description for f in table.values())


@pytest.mark.parametrize("code", ALL)
def test_every_extension_tells_its_format(code, tmp_path):
    # --merge-into tells the format by the longest extension that ends the path (.psi4.gbs, not .gbs)
    assert format_for_path(str(tmp_path / ("theirs" + EXTENSIONS[code]))) == code


@pytest.mark.parametrize("suffix", ["cp2k", "dalton", "openmolcas", "basis", "gaussian"])
def test_names_without_a_format_are_refused(suffix):
    # a bare code name is no extension of ours (CP2K, Dalton and OpenMolcas define none)
    with pytest.raises(InputError, match="cannot tell the format"):
        format_for_path("theirs." + suffix)


@pytest.mark.parametrize("sp", [False, True])
@pytest.mark.parametrize("code", ALL)
def test_host_reader_reads_the_whole_file_by_path(basis, gd, code, sp, tmp_path):
    for b in (basis, gd):
        path = write_file(tmp_path, b, code, sp)
        parsed = host_reader(code, path, b.symbols)
        assert set(parsed) == set(b.symbols)
        for e in b.elements:
            _same(parsed[e.symbol], e.to_pyscf())


@pytest.mark.parametrize("sp", [False, True])
@pytest.mark.parametrize("code", sorted(SECOND_READER))
def test_second_reader_reads_the_whole_file_to_the_same_shells(basis, gd, code, sp, tmp_path):
    # The reader named in SECOND_READER[code]; exponents and coefficients to 1e-12 relative.
    for b in (basis, gd):
        parsed = second_reader(code, write_file(tmp_path, b, code, sp))
        assert set(parsed) == set(b.symbols), SECOND_READER[code]
        for e in b.elements:
            _same(parsed[e.symbol], e.to_pyscf(), rel=1e-12)


@pytest.mark.parametrize("code", ["nwchem", "cp2k"])
def test_each_element_opens_with_the_separator_pyscf_splits_at(basis, code, tmp_path):
    # PySCF's loaders split at lines matching '# *BASIS SET.*\n' (pyscf/gto/basis/parse_nwchem.py,
    # parse_cp2k.py); the words after the prefix are ours: element, configuration, rule.
    text = stobuilder.write_basis(basis, code)
    found = re.findall(r"^# BASIS SET for (\w+): configuration (.+), screening rule (\w+)$", text, re.M)
    assert found == [(e.symbol, e.configuration_label, "slater") for e in basis.elements]
    # without them PySCF reads the whole file as every element's shells, silently: the failure
    # the separators prevent (this is what a file without them gives by path)
    bare = "".join(x for x in text.splitlines(keepends=True) if not x.startswith("# BASIS SET"))
    path = tmp_path / f"bare{EXTENSIONS[code]}"
    path.write_text(bare)
    wrong = gto.basis.load(str(path), "C", optimize=False)
    assert len(wrong) != len(basis["C"].shells)


@pytest.mark.parametrize("code", ALL)
def test_read_basis_round_trips(basis, gd, code):
    for b in (basis, gd):
        for sp in (False, True):
            back = stobuilder.read_basis(stobuilder.write_basis(b, code, sp), code)
            assert back.rule == "file" and back.symbols == b.symbols
            for e in b.elements:
                _same(back[e.symbol].to_pyscf(), e.to_pyscf(), rel=1e-15)  # 16 significant digits written


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k", "qcschema"])
def test_sp_shells_are_written_as_sp(basis, code):
    text = stobuilder.write_basis(basis, code, sp_shells=True)
    marker = {"nwchem": "O SP", "gaussian": "SP 3 1.0", "psi4": "SP 3 1.0", "cp2k": "2  0  1  3  1 1"}.get(code)
    if code == "qcschema":
        shells = BasisSet.parse_raw(text).center_data["O"].electron_shells
        assert [s.angular_momentum for s in shells] == [[0], [0, 1]]
    else:
        assert any(x.strip() == marker for x in text.splitlines())


def test_gaussian_lines_are_free_spaced_with_a_decimal_scale_factor(basis):
    # Gaussian's input is free format; PySCF's parse_gaussian.load wants the symbol before the first
    # space, gbasis' parse_gbs a scale factor written word.word (its regex \w+\.\w+).
    text = stobuilder.write_basis(basis, "gaussian", sp_shells=True)
    lines = text.splitlines()
    assert "Zn 0" in lines and "D 3 1.0" in lines
    assert all(re.fullmatch(r"(S|P|D|F|SP) \d+ 1\.0", x) for x in lines if x[:1].isalpha() and not x.endswith(" 0"))


# ---------------------------------------------------------------------------- SCF on whole files

# Made-up geometries from typical bond lengths and angles (common practice, no source); both sides
# of each comparison use the same geometry, so it is not part of the check.


def _caps(center, away, bond, count=3, twist=0.0):
    """``count`` atoms at ``bond`` Å from ``center``, 109.47° from the direction back along ``away``."""
    u = np.asarray(away, float) / np.linalg.norm(away)
    v = np.cross(u, [0.0, 0.0, 1.0] if abs(u[2]) < 0.9 else [1.0, 0.0, 0.0])
    v /= np.linalg.norm(v)
    w = np.cross(u, v)
    theta = np.radians(180.0 - 109.47)
    return [
        tuple(center + bond * (np.cos(theta) * u + np.sin(theta) * (np.cos(phi) * v + np.sin(phi) * w)))
        for phi in twist + np.arange(count) * 2 * np.pi / count
    ]


def zinc_chloride_hydrosulfide():
    """HS-Zn-Cl: H, S, Cl, Zn (s, p and d shells), 64 electrons. Zn-S 2.18, Zn-Cl 2.10, S-H 1.34 Å,
    Zn-S-H 95°."""
    s = np.array([2.18, 0.0, 0.0])
    h = s + 1.34 * np.array([np.cos(np.radians(85.0)), np.sin(np.radians(85.0)), 0.0])
    return [("Zn", (0.0, 0.0, 0.0)), ("S", tuple(s)), ("H", tuple(h)), ("Cl", (-2.10, 0.0, 0.0))]


def methylzinc_chloride():
    """CH3-Zn-Cl: H, C, Cl, Zn (s, p and d shells), 56 electrons. Zn-C 1.93, Zn-Cl 2.10, C-H 1.09 Å."""
    c = np.array([0.0, 0.0, 1.93])
    return [("Zn", (0.0, 0.0, 0.0)), ("C", tuple(c)), ("Cl", (0.0, 0.0, -2.10))] + [("H", x) for x in _caps(c, c, 1.09)]


MOLECULES = {"HSZnCl": zinc_chloride_hydrosulfide, "CH3ZnCl": methylzinc_chloride}


def _pyscf_basis_by_path(code, path, symbols):
    """The ``basis=`` a PySCF user passes for the file at ``path`` (README, "Loading the files")."""
    if code in ("nwchem", "cp2k"):
        return path  # gto.M(basis=path)
    if code in ("gaussian", "psi4"):
        return {s: parse_gaussian.load(path, s) for s in symbols}
    return host_reader(code, path, symbols)


@pytest.mark.parametrize("name", sorted(MOLECULES))
def test_whole_files_by_path_give_the_python_files_aos_and_rhf_energy(name, tmp_path):
    # Each file loaded the way README's "Loading the files in PySCF" says; RHF from the Python
    # file's converged density (a basis that differs moves the energy at the first iteration).
    atoms = MOLECULES[name]()
    symbols = sorted({s for s, _ in atoms})
    assert len(symbols) >= 4
    b = stobuilder.build_basis(symbols, rule="slater", gaussians=3)
    assert {s.l for e in b.elements for s in e.shells} == {0, 1, 2}

    def rhf(basis_arg, dm0=None):
        mol = gto.M(atom=[[s, p] for s, p in atoms], basis=basis_arg, unit="Angstrom", verbose=0)
        mf = scf.RHF(mol)
        mf.conv_tol = 1e-11
        energy = mf.kernel(dm0)
        assert mf.converged
        return mol, energy, mf.make_rdm1()

    ref_mol, ref, dm = rhf(runpy.run_path(write_file(tmp_path, b, "pyscf"))["basis"])
    # AOs counted from our basis: one per m of every shell
    assert ref_mol.nao == sum(2 * sh.l + 1 for s, _ in atoms for sh in b[s].shells)
    for code in ALL:
        if code == "pyscf":
            continue
        sp = code in ("nwchem", "gaussian", "psi4", "cp2k", "qcschema")  # SP blocks where the format has them
        path = write_file(tmp_path, b, code, sp, stem=code)
        mol, energy, _ = rhf(_pyscf_basis_by_path(code, path, symbols), dm)
        assert mol.nao == ref_mol.nao, code
        assert energy == pytest.approx(ref, abs=1e-9), code


def test_every_element_h_to_kr_and_gd_loads_by_path_with_its_own_aos(tmp_path):
    # A "molecule" of one atom of every element H-Kr and Gd (s, p, d, f shells) 4 Å apart: the AO
    # count of every file by path equals the Python file's, element by element.
    symbols = [stobuilder.model.elements.element_symbol(z) for z in range(1, 37)] + ["Gd"]
    b = stobuilder.build_basis(symbols, rule="slater", gaussians=3)
    atoms = [[s, (4.0 * k, 0.0, 0.0)] for k, s in enumerate(symbols)]
    nelec = sum(stobuilder.model.elements.atomic_number(s) for s in symbols)

    def nao(basis_arg):
        return gto.M(atom=atoms, basis=basis_arg, spin=nelec % 2, verbose=0).nao

    ref = nao(runpy.run_path(write_file(tmp_path, b, "pyscf"))["basis"])
    assert ref == sum(2 * sh.l + 1 for e in b.elements for sh in e.shells)
    for code in ALL:
        assert nao(_pyscf_basis_by_path(code, write_file(tmp_path, b, code, True, stem=code), symbols)) == ref, code


# ---------------------------------------------------------------------------- normalisation


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
    for symbol, tol in (("H", 1e-7), ("O", 1e-7), ("S", 5e-9), ("Zn", 5e-9)):
        for shell in gto.basis.load("sto3g", symbol):
            assert _norm(shell) == pytest.approx(1.0, abs=tol)


@pytest.mark.parametrize("code", ALL)
def test_contractions_read_back_are_normalised(basis, gd, code, tmp_path):
    # Read by the host reader with no renormalisation (PySCF's loaders with optimize=False return
    # the raw numbers); each contraction has norm 1.
    for b in (basis, gd):
        for shells in host_reader(code, write_file(tmp_path, b, code), b.symbols).values():
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
    symbols = draw(st.lists(st.sampled_from(_SYMBOLS), min_size=2, max_size=4, unique=True))
    return stobuilder.Basis(tuple(draw(_element(s)) for s in symbols), rule="random", gaussians=0)


def _gbasis_would_fuse(basis):
    """gbasis' parse_gbs takes two shells one after another with the same l and np.allclose
    exponents (rtol 1e-5, atol 1e-8) for one general contraction (its docstring): such a pair is
    outside what that reader can tell apart."""
    for e in basis.elements:
        for a, b in zip(e.shells, e.shells[1:]):
            if a.l == b.l and len(a.exponents) == len(b.exponents) and np.allclose(a.exponents, b.exponents):
                return True
    return False


@pytest.mark.parametrize("code", ALL)
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(b=random_basis(), sp=st.booleans())
def test_random_bases_survive_write_and_host_read_by_path(b, sp, code):
    with tempfile.TemporaryDirectory() as folder:
        parsed = host_reader(code, write_file(folder, b, code, sp), b.symbols)
    for e in b.elements:
        _same(parsed[e.symbol], e.to_pyscf())


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k"])
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(b=random_basis(), sp=st.booleans())
def test_random_bases_survive_write_and_second_read(b, sp, code):
    if code in ("gaussian", "psi4"):
        assume(not _gbasis_would_fuse(b))
    with tempfile.TemporaryDirectory() as folder:
        parsed = second_reader(code, write_file(folder, b, code, sp))
    assert set(parsed) == set(b.symbols)
    for e in b.elements:
        _same(parsed[e.symbol], e.to_pyscf(), rel=1e-12)


@pytest.mark.parametrize("code", ALL)
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(b=random_basis(), sp=st.booleans())
def test_random_bases_survive_our_reader(b, sp, code):
    back = stobuilder.read_basis(stobuilder.write_basis(b, code, sp), code)
    for e in b.elements:
        _same(back[e.symbol].to_pyscf(), e.to_pyscf(), rel=1e-15)


# ---------------------------------------------------------------------------- text from inputs in file headers


HOSTILE = "x\nEND\n****\nH S\n  1.0  1.0\r\nBASIS \"ao basis\"\u2028a 1\x85* Basis set\x1c$ \"q\"\\"


def _hostile_basis():
    from dataclasses import replace

    import stobuilder

    # the configuration is a parsed Configuration, its text made from subshell labels: no input text
    # reaches it; the rule's name and the notes are text
    clean = replace(stobuilder.build_basis(["H", "O"]), notes=("a plain note",))
    return clean, replace(clean, rule="slater" + HOSTILE, notes=(HOSTILE,))


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k", "pyscf", "dalton", "openmolcas", "qcschema"])
def test_header_text_from_inputs_cannot_break_out_of_its_comment(code):
    import stobuilder

    clean, hostile = _hostile_basis()
    text = stobuilder.write_basis(hostile, code)
    # every line of the file is either a line of the clean file or a comment line of it, with the
    # hostile text escaped inside (one line each: the same number of lines as the clean file)
    assert len(text.splitlines()) == len(stobuilder.write_basis(clean, code).splitlines())
    back = stobuilder.read_basis(text, code)
    assert [e.shells for e in back.elements] == [e.shells for e in stobuilder.read_basis(
        stobuilder.write_basis(clean, code), code).elements]


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k", "pyscf", "dalton", "openmolcas", "qcschema"])
def test_a_hostile_header_file_reads_the_same_in_the_host_and_second_readers(tmp_path, code):
    # the host code's reader (PySCF's path loaders where it has one) and the independent second
    # reader (above) read the whole file with the hostile header as the clean one
    clean, hostile = _hostile_basis()
    good, bad = write_file(tmp_path, clean, code, stem="clean"), write_file(tmp_path, hostile, code, stem="hostile")
    for reader in (lambda path: host_reader(code, path, ["H", "O"]), lambda path: second_reader(code, path)):
        want, got = reader(good), reader(bad)
        assert sorted(got) == sorted(want) == ["H", "O"]
        for symbol in want:
            _same(got[symbol], want[symbol], rel=0)


def test_a_structure_file_name_with_line_ends_and_terminators_builds_files_that_load(tmp_path, capsys):
    import shutil

    from pyscf import gto

    name = "w\nEND\n****\r.xyz"
    path = tmp_path / name
    write(path, molecule("H2O"), format="xyz")  # ASE G2 water
    out = tmp_path / "out"
    code = main(["build", str(path), "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    (written,) = os.listdir(out)
    assert written == "w\nEND\n****\r.nw"
    plain = tmp_path / "plain.nw"  # PySCF takes a text with line ends for basis text, not a path
    shutil.copy(out / written, plain)
    mol = gto.M(atom="O 0 0 0; H 0 0.76 0.59; H 0 -0.76 0.59", basis=str(plain), verbose=0)
    assert sorted(mol._basis) == ["H", "O"]

