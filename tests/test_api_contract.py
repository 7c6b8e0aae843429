"""The Python API's contract: every name ``stobuilder`` exports is the very object of the module
that defines it (no wrapper), loaded when first used, and every public function checks its own
arguments at its entry. A wrong type raises TypeError naming the argument; a value of the right
type that cannot be meant (a fractional charge, an unknown format) raises InputError naming it; a
string is never read as the sequence of its characters. Nothing is silently coerced or truncated,
and the messages name Python arguments, never command-line flags.
"""

import ast
import importlib
import json
import math
import os
import subprocess
import sys

import pytest

import stobuilder
from stobuilder import InputError
from support import ROOT, child_env


@pytest.fixture(scope="module")
def h_basis():
    return stobuilder.build_basis(["H"])


def test_a_string_is_one_element_never_its_letters():
    # "Co" is cobalt, Z = 27, ground state [Ar] 3d7 4s2 (NIST ASD ground levels; value from memory)
    basis = stobuilder.build_basis("Co")
    assert basis.symbols == ("Co",)
    assert basis.elements[0].configuration_label == "[Ar] 3d7 4s2"
    assert stobuilder.build_basis("co").symbols == ("Co",)  # symbols are case-insensitive
    assert stobuilder.build_basis("Fe: [Ar] 3d7 4s1").symbols == ("Fe",)  # a configuration string is one item
    with pytest.raises(InputError, match="unknown element symbol 'Xy'"):
        stobuilder.build_basis("Xy")
    assert stobuilder.build_basis(["C", "O"]).symbols == ("C", "O")  # a list is still several


@pytest.mark.parametrize("elements, word", [([26], "atomic numbers"), ([None], "None"), (None, "elements"),
                                             (26, "elements"), (b"Fe", "elements"), ({"Fe": 1}, "elements"),
                                             (["H", 1.0], "1.0")])
def test_elements_of_the_wrong_type_are_type_errors(elements, word):
    with pytest.raises(TypeError) as info:
        stobuilder.build_basis(elements)
    assert "elements" in str(info.value) and word in str(info.value)


@pytest.mark.parametrize("call, argument", [
    (lambda b: stobuilder.write_basis(None, "nwchem"), "basis"),
    (lambda b: stobuilder.write_basis("H", "nwchem"), "basis"),
    (lambda b: stobuilder.write_basis(b, None), "code"),
    (lambda b: stobuilder.write_basis(b, "nwchem", sp_shells="no"), "sp_shells"),
    (lambda b: stobuilder.read_basis(None, "nwchem"), "text"),
    (lambda b: stobuilder.read_basis(b"basis", "nwchem"), "text"),
    (lambda b: stobuilder.merge_basis(None, b, "nwchem"), "text"),
    (lambda b: stobuilder.merge_basis("", None, "nwchem"), "basis"),
    (lambda b: stobuilder.ground_state(0), "element"),
    (lambda b: stobuilder.ground_state(None), "element"),
    (lambda b: stobuilder.ground_state("Fe", "2"), "charge"),
    (lambda b: stobuilder.ground_state("Fe", True), "charge"),
    (lambda b: stobuilder.parse_configuration(None), "configuration"),
    (lambda b: stobuilder.parse_configuration(5), "configuration"),
    (lambda b: stobuilder.zeta_values(26), "element"),
    (lambda b: stobuilder.zeff(None), "element"),
    (lambda b: stobuilder.element_basis(None), "element"),
    (lambda b: stobuilder.atom_energy(1), "element"),
    (lambda b: stobuilder.optimize_zeta(None), "element"),
    (lambda b: stobuilder.read_structures(None), "path"),
    (lambda b: stobuilder.read_structures(5), "path"),
    (lambda b: stobuilder.build_structures(None), "paths"),
    (lambda b: stobuilder.build_structures([None]), "paths"),
    (lambda b: stobuilder.build_structures(7), "paths"),
    (lambda b: stobuilder.build_basis(["H"], zeta=5), "zeta"),
    (lambda b: stobuilder.build_basis(["H"], zeta={"H": 5}), "zeta['H']"),
    (lambda b: stobuilder.build_basis(["H"], charge="1"), "charge"),
    (lambda b: stobuilder.fit_sto(None, 3), "subshells"),
    (lambda b: stobuilder.fit_sto(["1s", 5], 3), "subshells"),
    (lambda b: stobuilder.parse_zeta_overrides([5]), "zeta"),
    (lambda b: stobuilder.load_zeta_file(None), "path"),
    (lambda b: stobuilder.atom_report("He", gaussians="3"), "gaussians"),
])
def test_wrong_types_name_the_argument(h_basis, call, argument):
    with pytest.raises(TypeError) as info:
        call(h_basis)
    assert argument in str(info.value), str(info.value)


@pytest.mark.parametrize("call, argument", [
    (lambda w: stobuilder.build_basis(["H"], charge=0.5), "charge"),
    (lambda w: stobuilder.build_basis(["H", "O"], charge={"O": 1.5}), "charge['O']"),
    (lambda w: stobuilder.ground_state("Fe", 1.5), "charge"),
    (lambda w: stobuilder.ground_state("Fe", float("nan")), "charge"),
    (lambda w: stobuilder.element_basis("O", charge=-0.25), "charge"),
    (lambda w: stobuilder.zeff("C", charge=0.5), "charge"),
    (lambda w: stobuilder.atom_energy("H", charge=0.5), "charge"),
    (lambda w: stobuilder.read_structures(w, charge=0.5), "charge"),
    (lambda w: stobuilder.read_structures(w, spin=2.5), "spin"),
    (lambda w: stobuilder.build_structures([w], charge=0.5, write=False), "charge"),
    (lambda w: stobuilder.build_structures([w], spin=1.5, write=False), "spin"),
    (lambda w: stobuilder.build_structures([w], spin=float("inf"), write=False), "spin"),
    (lambda w: stobuilder.fit_sto("1s", 2.5), "gaussians"),
    (lambda w: stobuilder.atom_report("He", gaussians=2.5), "Gaussians"),
])
def test_fractional_charges_and_spins_are_errors_not_truncated(water, call, argument):
    with pytest.raises(InputError) as info:
        call(water)
    assert argument in str(info.value) and "\n" not in str(info.value), str(info.value)


def test_a_float_is_never_a_whole_number_even_when_whole(water):
    # one rule for every whole-number argument (core.arguments.whole_number): an int (or numpy
    # integer) is taken, a float is a wrong value even when it is whole (1.0), a bool or a string
    # is a wrong type. O+ is [He] 2s2 2p3 (NIST ASD; value from memory)
    import numpy as np

    assert stobuilder.ground_state("O", np.int64(1)).label == "[He] 2s2 2p3"
    for call in (lambda: stobuilder.ground_state("O", 1.0),
                 lambda: stobuilder.build_basis(["O"], charge=1.0),
                 lambda: stobuilder.read_structures(water, charge=2.0),
                 lambda: stobuilder.build_structures(water, charge=1.0, write=False),
                 lambda: stobuilder.fit_sto("1s", 3.0)):
        with pytest.raises(InputError, match="must be a whole number, got"):
            call()
    (frame,) = stobuilder.read_structures(water, charge=2, spin=0)
    assert (frame.charge, frame.spin) == (2, 0) and isinstance(frame.charge, int)


def test_one_path_string_is_one_structure_file(water, tmp_path):
    out = tmp_path / "out"
    (report,) = stobuilder.build_structures(water, out_dir=str(out))
    assert report.path == water and report.basis.symbols == ("H", "O")
    assert os.listdir(out) == ["water.nw"]
    from pathlib import Path

    (report,) = stobuilder.build_structures(Path(water), write=False)  # a PathLike as well
    assert report.elements == ("H", "O")
    (report,) = stobuilder.build_structures([water], codes="gaussian", write=False)  # one code name
    assert list(report.files) == ["gaussian"]


def test_valid_calls_give_what_they_did_before(h_basis):
    from stobuilder.formats import write_basis as body

    assert stobuilder.write_basis(h_basis, "nwchem") == body(h_basis, "nwchem")
    assert stobuilder.read_basis(stobuilder.write_basis(h_basis, "nwchem"), "nwchem").symbols == ("H",)
    assert stobuilder.parse_zeta_overrides("1s=1.6875") == {"1s": 1.6875}  # one item, not its characters



# ---------------------------------------------------------------------------- the Python door speaks of Python arguments


@pytest.mark.parametrize("kwargs, words", [
    ({"charge": 0.5}, "charge must be a whole number, got 0.5"),
    ({"charge": 5000}, "charge must be <= 1000"),
    ({"spin": -1}, "spin must be >= 0"),
    ({"gaussians": 13}, "gaussians must be <= 12"),
    ({"gaussians": 2.5}, "gaussians must be a whole number"),
    ({"norm": "l3"}, "norm 'l3'"),
    ({"radial": "curly"}, "radial 'curly'"),
    ({"codes": ("nope",)}, "nope"),
    ({"zeta": {"H": {"1s": -1.0}}}, "zeta H:1s"),
    ({"zeta": {"C": {"2p": 1.0}}}, "zeta names elements in no structure: C"),
])
def test_python_errors_name_the_python_argument(water, tmp_path, kwargs, words):
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], out_dir=str(tmp_path / "out"), write=False, **kwargs)
    message = str(info.value)
    assert words in message and "--" not in message, message


def test_merge_errors_name_the_python_arguments(water, tmp_path):
    target = tmp_path / "b.nw"
    target.write_text('BASIS "ao basis" SPHERICAL\nEND\n')
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], merge_into=str(target), split_elements=True, write=False)
    assert str(info.value) == "merge_into and split_elements exclude each other"
    with pytest.raises(InputError, match="^merge_into .*: no such file$"):
        stobuilder.build_structures([water], merge_into=str(tmp_path / "none.nw"), write=False)




# ---------------------------------------------------------------------------- one object per name

# The public names (README "Python API"; the same list as before the names became lazy).
PUBLIC = {
    "AtomResult", "Basis", "BasisSpec", "BuildOptions", "CheckOptions", "Configuration", "ElementBasis", "Fit",
    "InputError", "OutputOptions", "Prepared", "Shell", "ShellExponent", "Structure", "ZetaTable", "atom_energy",
    "atom_report", "build_basis", "build_structures", "element_basis", "exponents", "fit_sto", "formats",
    "ground_state", "load_zeta_file", "merge_basis", "optimize_zeta", "parse_configuration", "parse_zeta_overrides",
    "prepare", "pyscf_mole", "read_basis", "read_structures", "rules", "write_basis", "zeff", "zeta_values",
}


def test_every_export_is_its_home_modules_own_object():
    assert set(stobuilder.__all__) == PUBLIC
    assert set(stobuilder.__all__) <= set(dir(stobuilder))
    for name in stobuilder.__all__:
        home = importlib.import_module(stobuilder._HOME[name])
        value = getattr(stobuilder, name)
        assert value is getattr(home, name), name
        assert getattr(value, "__module__", home.__name__) == home.__name__, (name, value.__module__)
    from stobuilder.expansion.fit import fit_sto
    from stobuilder.formats import merge_basis, read_basis, write_basis
    from stobuilder.pipeline.path import build_structures

    assert stobuilder.build_structures is build_structures and stobuilder.fit_sto is fit_sto
    assert (stobuilder.write_basis, stobuilder.read_basis, stobuilder.merge_basis) == (write_basis, read_basis, merge_basis)
    with pytest.raises(AttributeError, match="no attribute 'nothing_here'"):
        stobuilder.nothing_here  # noqa: B018


def test_the_formats_function_stays_the_export_after_the_subpackage_is_imported():
    # ``formats`` is a function and the subpackage that defines it; importing a format module
    # must not turn stobuilder.formats into the module
    import stobuilder.formats.cp2k  # noqa: F401

    assert callable(stobuilder.formats) and "nwchem" in stobuilder.formats()


_LIGHT_PROBE = """
import json, sys
import stobuilder
first = sorted(m for m in sys.modules if m.split('.')[0] in ('pyscf', 'scipy', 'ase'))
stobuilder.zeta_values("C"); stobuilder.formats(); stobuilder.ZetaTable; stobuilder.BasisSpec; stobuilder.InputError
from stobuilder.builder.construct import zeta_values
import stobuilder.expansion, stobuilder.screening, stobuilder.formats, stobuilder.model.structures
heavy = ('pyscf', 'scipy.optimize', 'ase.calculators', 'ase.io')
print(json.dumps({"first": first, "after": sorted(m for m in heavy if m in sys.modules)}))
"""


def test_import_stobuilder_is_light():
    """``import stobuilder`` loads none of PySCF, SciPy and ASE; the light public names and
    sub-packages (zeta values, the formats, the rules, the spec) load no PySCF, scipy.optimize,
    ASE calculators or ase.io either (a fresh interpreter)."""
    run = subprocess.run([sys.executable, "-c", _LIGHT_PROBE], capture_output=True, text=True, env=child_env(),
                         cwd=str(ROOT), timeout=120)
    assert run.returncode == 0, run.stderr
    doc = json.loads(run.stdout)
    assert doc == {"first": [], "after": []}, doc


# ---------------------------------------------------------------------------- each function's parameters


@pytest.fixture()
def nwchem_text(h_basis):
    return stobuilder.write_basis(h_basis, "nwchem")


# (call, exception, words in the message); every message must also be free of a CLI flag ("--")
def _structures_cases(w):
    build = stobuilder.build_structures
    return [
        (lambda: build(None, write=False), TypeError, "paths"),
        (lambda: build(7, write=False), TypeError, "paths"),
        (lambda: build(b"water.xyz", write=False), TypeError, "paths"),
        (lambda: build([w, None], write=False), TypeError, "paths"),
        (lambda: build([], write=False), InputError, "paths"),
        (lambda: build(w, options="slater", write=False), TypeError, "options"),
        (lambda: build(w, options=stobuilder.BuildOptions(), rule="slater", write=False), TypeError, "options"),
        (lambda: build(w, out_dir=5, write=False), TypeError, "out_dir"),
        (lambda: build(w, force="yes", write=False), TypeError, "force"),
        (lambda: build(w, write="yes"), TypeError, "write"),
        (lambda: build(w, split_elements="yes", write=False), TypeError, "split_elements"),
        (lambda: build(w, merge_into=5, write=False), TypeError, "merge_into"),
        (lambda: build(w, merge_into=w + ".missing.nw", write=False), InputError, "merge_into"),
        (lambda: build(w, colour="red", write=False), TypeError, "colour"),
        (lambda: build(w, check="yes", write=False), TypeError, "check"),
        (lambda: build(w, charge="1", write=False), TypeError, "charge"),
        (lambda: build(w, charge=True, write=False), TypeError, "charge"),
        (lambda: build(w, charge=0.5, write=False), InputError, "charge"),
        (lambda: build(w, charge=1.0, write=False), InputError, "charge"),
        (lambda: build(w, spin=math.nan, write=False), InputError, "spin"),
        (lambda: build(w, spin=-2, write=False), InputError, "spin"),
        (lambda: build(w, codes=5, write=False), TypeError, "codes"),
        (lambda: build(w, codes=[5], write=False), TypeError, "codes"),
        (lambda: build(w, codes="nope", write=False), InputError, "codes"),
        (lambda: build(w, rule=5, write=False), TypeError, "rule"),
        (lambda: build(w, rule="nope", write=False), InputError, "rule"),
        (lambda: build(w, gaussians="3", write=False), TypeError, "gaussians"),
        (lambda: build(w, gaussians=0, write=False), InputError, "gaussians"),
        (lambda: build(w, norm=5, write=False), TypeError, "norm"),
        (lambda: build(w, norm="l3", write=False), InputError, "norm"),
        (lambda: build(w, sharing=5, write=False), TypeError, "sharing"),
        (lambda: build(w, sharing="some", write=False), InputError, "sharing"),
        (lambda: build(w, radial=5, write=False), TypeError, "radial"),
        (lambda: build(w, radial="curly", write=False), InputError, "radial"),
        (lambda: build(w, zeta=5, write=False), TypeError, "zeta"),
        (lambda: build(w, zeta={"H": {"1s": "x"}}, write=False), InputError, "zeta"),
        (lambda: build(w, zeta={"C": {"2p": 1.0}}, write=False), InputError, "zeta"),
        (lambda: build(w, zeta_file=5, write=False), TypeError, "zeta_file"),
        (lambda: build(w, zeta_library=5, write=False), TypeError, "zeta_library"),
        (lambda: build(w, method=5, write=False), TypeError, "method"),
        (lambda: build(w, method="mp2", write=False), InputError, "method"),
        (lambda: build(w, sp_shells="yes", write=False), TypeError, "sp_shells"),
        (lambda: build(w, max_check_frames=0, write=False), InputError, "max_check_frames"),
    ]


def _fit_cases():
    fit = stobuilder.fit_sto
    return [
        (lambda: fit(None, 3), TypeError, "subshells"),
        (lambda: fit(b"1s", 3), TypeError, "subshells"),
        (lambda: fit(["1s", 5], 3), TypeError, "subshells"),
        (lambda: fit([], 3), InputError, "subshells"),
        (lambda: fit("1x", 3), InputError, "subshells"),
        (lambda: fit(["2s", "2s"], 3), InputError, "subshells"),
        (lambda: fit("1s", "3"), TypeError, "gaussians"),
        (lambda: fit("1s", True), TypeError, "gaussians"),
        (lambda: fit("1s", None), TypeError, "gaussians"),
        (lambda: fit("1s", 2.5), InputError, "gaussians"),
        (lambda: fit("1s", 0), InputError, "gaussians"),
        (lambda: fit("1s", 13), InputError, "gaussians"),
        (lambda: fit("1s", 3, norm=5), TypeError, "norm"),
        (lambda: fit("1s", 3, norm="l3"), InputError, "norm"),
        (lambda: fit("1s", 3, n_eff=5), TypeError, "n_eff"),
        (lambda: fit("1s", 3, n_eff={"1s": "x"}), TypeError, "n_eff"),
        (lambda: fit("1s", 3, n_eff={"1s": math.nan}), InputError, "n_eff"),
        (lambda: fit("1s", 3, n_eff={"2s": 2.0}), InputError, "n_eff"),
        (lambda: fit("1s", 3, n_eff={"1s": 9.0}), InputError, "n_eff"),
        (lambda: fit(["2s", "2p"], 3, zeta_ratio=[1.1]), TypeError, "zeta_ratio"),
        (lambda: fit(["2s", "2p"], 3, zeta_ratio={"2p": 9.0}), InputError, "zeta_ratio"),
        (lambda: fit(["2s", "2p"], 3, zeta_ratio={"2s": 2.0}), InputError, "zeta_ratio"),
    ]


def _text_cases(b, text):
    return [
        (lambda: stobuilder.write_basis(None, "nwchem"), TypeError, "basis"),
        (lambda: stobuilder.write_basis(text, "nwchem"), TypeError, "basis"),
        (lambda: stobuilder.write_basis(b, None), TypeError, "code"),
        (lambda: stobuilder.write_basis(b, "nope"), InputError, "code"),
        (lambda: stobuilder.write_basis(b, "nwchem", sp_shells="no"), TypeError, "sp_shells"),
        (lambda: stobuilder.write_basis(b, "nwchem", sp_shells=1), TypeError, "sp_shells"),
        (lambda: stobuilder.write_basis(b, "nwchem", colour="red"), TypeError, "colour"),
        (lambda: stobuilder.read_basis(None, "nwchem"), TypeError, "text"),
        (lambda: stobuilder.read_basis(text.encode(), "nwchem"), TypeError, "text"),
        (lambda: stobuilder.read_basis(text, 5), TypeError, "code"),
        (lambda: stobuilder.read_basis(text, "nope"), InputError, "code"),
        (lambda: stobuilder.read_basis("garbage\n", "nwchem"), InputError, "line 1"),
        (lambda: stobuilder.merge_basis(None, b, "nwchem"), TypeError, "text"),
        (lambda: stobuilder.merge_basis(text, None, "nwchem"), TypeError, "basis"),
        (lambda: stobuilder.merge_basis(text, b, None), TypeError, "code"),
        (lambda: stobuilder.merge_basis(text, b, "nope"), InputError, "code"),
        (lambda: stobuilder.merge_basis(text, b, "nwchem", sp_shells="yes"), TypeError, "sp_shells"),
    ]


def _assert_cases(cases):
    for call, kind, words in cases:
        with pytest.raises(Exception) as info:
            call()
        message = str(info.value)
        assert type(info.value) is kind or (kind is InputError and isinstance(info.value, InputError)), \
            (words, type(info.value).__name__, message)
        assert words in message and "--" not in message and "\n" not in message, (words, message)


def test_build_structures_checks_each_parameter(water):
    _assert_cases(_structures_cases(water))


def test_fit_sto_checks_each_parameter():
    _assert_cases(_fit_cases())


def test_write_read_merge_check_each_parameter(h_basis, nwchem_text):
    _assert_cases(_text_cases(h_basis, nwchem_text))


def test_a_bad_call_writes_nothing(water, tmp_path, monkeypatch):
    # every refused call above, run where its default out_dir ("basis") would land: nothing appears
    monkeypatch.chdir(tmp_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    for call, _, _ in _structures_cases(water):
        with pytest.raises((TypeError, InputError)):
            call()
    with pytest.raises(InputError):
        stobuilder.build_structures(water, charge=0.5)  # write=True: refused before any file
    assert sorted(p.name for p in tmp_path.iterdir()) == before == ["in"]


# ---------------------------------------------------------------------------- one name, one thing


def _package_modules():
    for path in sorted((ROOT / "stobuilder").rglob("*.py")):
        yield path, ast.parse(path.read_text(encoding="utf-8"))


def test_no_module_imports_another_modules_private_name():
    found = []
    for path, tree in _package_modules():
        imported = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("stobuilder") or (
                    isinstance(node, ast.ImportFrom) and node.level):
                for alias in node.names:
                    if alias.name.startswith("_") and not alias.name.startswith("__"):
                        found.append(f"{path.name}: from {node.module} import {alias.name}")
                    imported.add(alias.asname or alias.name)
            elif isinstance(node, ast.Import):
                imported.update(a.asname for a in node.names if a.name.startswith("stobuilder") and a.asname)
        for node in ast.walk(tree):
            if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in imported
                    and node.attr.startswith("_") and not node.attr.startswith("__")):
                found.append(f"{path.name}: {node.value.id}.{node.attr}")
    assert not found, found


def test_the_pickers_checkers_and_solvers_have_one_definition_each():
    # one whole_number (core.arguments), one pick_method (model.methods), and the SCF solvers by
    # distinct names: solve_scf (scf.run), solve_atom (exact.atoms), solve_sto_scf (exact.solver)
    defined = {}
    for path, tree in _package_modules():
        for node in tree.body:
            if isinstance(node, ast.FunctionDef) and (node.name.startswith(("solve", "pick_")) or node.name == "whole_number"):
                defined.setdefault(node.name, []).append(str(path.relative_to(ROOT)))
    assert defined.get("whole_number") == ["stobuilder/core/arguments.py"]
    assert defined.get("pick_method") == ["stobuilder/model/methods.py"]
    assert defined.get("solve_scf") == ["stobuilder/scf/run.py"]
    assert defined.get("solve_atom") == ["stobuilder/exact/atoms.py"]
    assert defined.get("solve_sto_scf") == ["stobuilder/exact/solver.py"]
    assert all(len(where) == 1 for where in defined.values()), defined
