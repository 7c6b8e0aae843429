"""The Python API's argument contract: every public function checks its arguments at its entry.
A wrong type raises TypeError naming the argument; a value of the right type that cannot be
meant (a fractional charge) raises InputError naming it; a string is never read as the sequence
of its characters. Nothing is silently coerced or truncated, and the Python door's errors name
Python arguments, never command-line flags.
"""

import os

import pytest

import stobuilder
from stobuilder import InputError


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


def test_whole_floats_are_the_whole_numbers_they_are(water):
    # O⁺ is [He] 2s2 2p3 (NIST ASD; value from memory); 1.0 is exactly 1
    assert stobuilder.ground_state("O", 1.0).label == "[He] 2s2 2p3"
    assert stobuilder.build_basis(["O"], charge=1.0).elements[0].configuration_label == "[He] 2s2 2p3"
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

