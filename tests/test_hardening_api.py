"""The Python API's arguments (issue 16, class 6): every public function checks them at its entry.
A wrong type raises TypeError naming the argument; a value of the right type that cannot be
meant (a fractional charge) raises InputError naming it; a string is never read as the sequence
of its characters. Nothing is silently coerced or truncated.
"""

import os

import pytest
from ase.build import molecule
from ase.io import write

import stobuilder
from stobuilder import InputError


@pytest.fixture()
def water(tmp_path):
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    return str(path)


@pytest.fixture(scope="module")
def h_basis():
    return stobuilder.build_basis(["H"])


def test_a_string_is_one_element_never_its_letters():
    # "Co" is cobalt, Z = 27, ground state [Ar] 3d7 4s2 (NIST ASD ground levels; value from memory)
    basis = stobuilder.build_basis("Co")
    assert basis.symbols == ("Co",)
    assert basis.elements[0].configuration == "[Ar] 3d7 4s2"
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


def test_whole_floats_are_the_whole_numbers_they_are(water):
    # O⁺ is [He] 2s2 2p3 (NIST ASD; value from memory); 1.0 is exactly 1
    assert stobuilder.ground_state("O", 1.0).label == "[He] 2s2 2p3"
    assert stobuilder.build_basis(["O"], charge=1.0).elements[0].configuration == "[He] 2s2 2p3"
    (frame,) = stobuilder.read_structures(water, charge=2.0, spin=0.0)
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


def test_the_doors_keep_the_bodies_signatures_and_docs():
    import inspect

    from stobuilder import formats as formats_package  # noqa: F401  (the subpackage is imported)
    from stobuilder.pipeline.path import build_structures as body

    assert inspect.signature(stobuilder.build_structures) == inspect.signature(body)
    assert stobuilder.build_structures.__doc__ == body.__doc__
    with pytest.raises(TypeError, match="unexpected keyword"):
        stobuilder.write_basis(stobuilder.build_basis(["H"]), "nwchem", colour="red")


def test_valid_calls_give_what_they_did_before(h_basis):
    from stobuilder.formats import write_basis as body

    assert stobuilder.write_basis(h_basis, "nwchem") == body(h_basis, "nwchem")
    assert stobuilder.read_basis(stobuilder.write_basis(h_basis, "nwchem"), "nwchem").symbols == ("H",)
    assert stobuilder.parse_zeta_overrides("1s=1.6875") == {"1s": 1.6875}  # one item, not its characters


# ---------------------------------------------------------------------------- each door speaks its own language (issue 21)


@pytest.mark.parametrize("kwargs, words", [
    ({"charge": 0.5}, "charge must be a whole number, got 0.5"),
    ({"charge": 5000}, "charge must be <= 1000"),
    ({"spin": -1}, "spin must be >= 0"),
    ({"gaussians": 13}, "gaussians must be <= 12"),
    ({"gaussians": 2.5}, "gaussians must be a whole number"),
    ({"norm": "l3"}, "norm 'l3'"),
    ({"radial": "curly"}, "radial 'curly'"),
    ({"codes": (3,)}, "codes must be format names"),
    ({"zeta": {"H": {"1s": -1.0}}}, "zeta H:1s"),
    ({"zeta": {"C": {"2p": 1.0}}}, "zeta names elements in no structure: C"),
])
def test_python_errors_name_the_python_argument(water, tmp_path, kwargs, words):
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], out_dir=str(tmp_path / "out"), write=False, **kwargs)
    message = str(info.value)
    assert words in message and "--" not in message, message


# ---------------------------------------------------------------------------- a zeta file is a library (issue 21)


def _zeta_file(tmp_path, text, name="lib.toml"):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def test_a_zeta_file_applies_its_elements_where_they_occur(water, tmp_path):
    # tune writes one file for its whole training set: C and N do not occur in water
    library = _zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n[O]\n2p = 2.3\n[H]\n1s = 1.24\n")
    (report,) = stobuilder.build_structures([water], zeta_file=library, write=False)
    assert {s.label: s.zeta for s in report.basis["O"].stos}["2p"] == 2.3
    assert {s.label: s.zeta for s in report.basis["H"].stos}["1s"] == 1.24
    assert report.basis.symbols == ("H", "O")
    # zeta= goes on top of the file, and stays a typo guard
    (report,) = stobuilder.build_structures([water], zeta_file=library, zeta={"O": {"2p": 2.0}}, write=False)
    assert {s.label: s.zeta for s in report.basis["O"].stos}["2p"] == 2.0
    with pytest.raises(InputError, match="zeta names elements in no structure: C"):
        stobuilder.build_structures([water], zeta_file=library, zeta={"C": {"2p": 1.0}}, write=False)


def test_a_zeta_file_naming_none_of_the_elements_is_refused(water, tmp_path):
    library = _zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n")
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], zeta_file=library, write=False)
    message = str(info.value)
    assert message.startswith(f"zeta_file {library}:") and "C, N" in message and "H, O" in message, message
    assert "\n" not in message and "--" not in message


def test_the_options_remember_which_zeta_came_from_a_file(tmp_path):
    library = _zeta_file(tmp_path, "[C]\n2p = 1.7\n[H]\n1s = 1.24\n")
    options = stobuilder.BuildOptions(zeta_file=library, zeta={"H": {"1s": 1.3}})
    assert options.zeta_map == {"H": {"1s": 1.3}}
    assert options.zeta_for(["H"]) == {"H": {"1s": 1.3}} and options.zeta_for(["C", "O"]) == {"C": {"2p": 1.7}}
    back = stobuilder.BuildOptions.from_json(options.to_json())
    assert back == options and "zeta_file" not in options.to_json()  # the numbers, not the file's name


def test_merge_errors_name_the_python_arguments(water, tmp_path):
    target = tmp_path / "b.nw"
    target.write_text('BASIS "ao basis" SPHERICAL\nEND\n')
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], merge_into=str(target), split_elements=True, write=False)
    assert str(info.value) == "merge_into and split_elements exclude each other"
    with pytest.raises(InputError, match="^merge_into .*: no such file$"):
        stobuilder.build_structures([water], merge_into=str(tmp_path / "none.nw"), write=False)


# ---------------------------------------------------------------------------- the calculator's door (issue 21)


def test_the_calculator_takes_a_zeta_file_as_a_library(tmp_path):
    from stobuilder.calculator import STOCalculator

    library = _zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n[H]\n1s = 1.24\n")  # C and N: not in H2O
    atoms = molecule("H2O")  # ASE G2 geometry
    atoms.calc = STOCalculator(zeta_file=library, zeta={"O": {"2p": 2.3}})
    atoms.get_potential_energy()
    stos = {(e.symbol, s.label): s.zeta for e in atoms.calc.basis.elements for s in e.stos}
    assert stos[("H", "1s")] == 1.24 and stos[("O", "2p")] == 2.3 and atoms.calc.basis.symbols == ("H", "O")
    mol = stobuilder.pyscf_mole(molecule("H2"), zeta_file=library)
    assert mol._basis["H"] == stobuilder.build_basis(["H"], zeta={"H": {"1s": 1.24}})["H"].to_pyscf()


def test_the_calculator_refuses_zeta_that_applies_to_nothing(tmp_path):
    from stobuilder.calculator import STOCalculator

    library = _zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n")
    for calc, words in ((STOCalculator(zeta_file=library), f"H2O: zeta_file {library}: it names none of the "
                                                           "structures' elements (it names C, N; the structures have H, O)"),
                        (STOCalculator(zeta={"C": {"2p": 1.7}}), "H2O: zeta names elements in no structure: C")):
        atoms = molecule("H2O")
        atoms.calc = calc
        with pytest.raises(InputError) as info:
            atoms.get_potential_energy()
        assert str(info.value) == words
    with pytest.raises(InputError) as info:
        stobuilder.pyscf_mole(molecule("H2O"), zeta_file=library)
    assert "it names none of the structures' elements" in str(info.value)


@pytest.mark.parametrize("kwargs, words", [
    ({"fit": "l3"}, "fit 'l3': unknown fitting norm"),
    ({"gaussians": 13}, "gaussians must be <= 12"),
    ({"zeta": {"H": {"1s": -1.0}}}, "zeta H:1s"),
])
def test_calculator_errors_name_the_calculator_parameters(kwargs, words):
    from stobuilder.calculator import STOCalculator

    with pytest.raises(InputError) as info:
        STOCalculator(**kwargs)
    assert str(info.value).startswith(words) and "--" not in str(info.value)
    with pytest.raises(InputError) as info:
        stobuilder.pyscf_mole(molecule("H2"), **kwargs)
    assert str(info.value).startswith(words)
