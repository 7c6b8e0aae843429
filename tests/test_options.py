"""The options of a build (BuildOptions) and zeta files: the options validate once, with one line
naming the Python argument, and round-trip through JSON; a zeta file cannot name one element
twice; a zeta file is a library: its elements apply where they occur in the structures, and a
file naming none of them is refused.
"""

import json

import pytest

import stobuilder
from stobuilder import InputError
from stobuilder.pipeline.options import BuildOptions, load_zeta_file
from support import zeta_file


# ---------------------------------------------------------------------------- BuildOptions


@pytest.mark.parametrize(
    "kwargs, words",
    [
        ({"gaussians": 3.0}, "gaussians must be a whole number"),
        ({"charge": 0.5}, "charge must be a whole number"),
        ({"spin": -2}, "spin must be >= 0"),
        ({"rule": "nope"}, "nope"),
        ({"norm": "l3"}, "norm 'l3'"),
        ({"method": "mp2"}, "unknown SCF method"),
        ({"codes": ("nope",)}, "nope"),
        ({"zeta": {"O": {"2p": float("nan")}}}, "zeta O:2p"),
        ({"zeta": {"Xx": {"1s": 1.0}}}, "Xx"),
        ({"max_check_frames": 0}, "max_check_frames must be >= 1"),
    ],
)
def test_build_options_validate_once_with_one_line(kwargs, words):
    # the Python door names the Python argument, never a command-line flag
    with pytest.raises(InputError, match=None) as info:
        BuildOptions(**kwargs)
    assert words in str(info.value) and "\n" not in str(info.value) and "--" not in str(info.value)


@pytest.mark.parametrize("kwargs, words", [
    ({"check": "yes"}, "check must be True or False"),
    ({"codes": (3,)}, "codes must be format names"),
    ({"sp_shells": 1}, "sp_shells must be True or False"),
    ({"rule": 5}, "rule must be one of"),
    ({"gaussians": True}, "gaussians must be a whole number"),
    ({"charge": "1"}, "charge must be a whole number"),
])
def test_a_wrong_type_is_a_type_error_naming_the_argument(kwargs, words):
    # wrong type → TypeError, wrong value → InputError (the one contract of the Python API)
    with pytest.raises(TypeError) as info:
        BuildOptions(**kwargs)
    assert words in str(info.value) and "--" not in str(info.value)


def test_build_options_round_trip_through_json():
    options = BuildOptions(rule="molecular", gaussians=6, codes=("all",), zeta={"fe": {"3d": 2.1}, "O": {"2p": 2.2}},
                           charge=-1, spin=1, check=True, method="uhf", sharing="shared")
    text = json.dumps(options.to_json(), allow_nan=False)
    back = BuildOptions.from_json(text)
    assert back == options and hash(back) == hash(options)
    assert back.basis.zeta.as_dict() == {"Fe": {"3d": 2.1}, "O": {"2p": 2.2}}
    assert len(back.output.codes) > 5  # "all" expanded once, when made
    with pytest.raises(InputError, match="unknown option colour"):
        BuildOptions.from_json({"colour": "red"})



# ---------------------------------------------------------------------------- zeta files


def test_zeta_file_naming_one_element_twice(tmp_path):
    zfile = tmp_path / "z.toml"
    zfile.write_text("[H]\n1s = 1.2\n[h]\n1s = 1.3\n")
    with pytest.raises(InputError, match=r"\[H\] and \[h\] are both element H"):
        load_zeta_file(zfile)



# ---------------------------------------------------------------------------- a zeta file is a library


def test_a_zeta_file_applies_its_elements_where_they_occur(water, tmp_path):
    # tune writes one file for its whole training set: C and N do not occur in water
    library = zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n[O]\n2p = 2.3\n[H]\n1s = 1.24\n")
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
    library = zeta_file(tmp_path, "[C]\n2p = 1.7\n[N]\n2p = 1.9\n")
    with pytest.raises(InputError) as info:
        stobuilder.build_structures([water], zeta_file=library, write=False)
    message = str(info.value)
    assert message.startswith(f"zeta_file {library}:") and "C, N" in message and "H, O" in message, message
    assert "\n" not in message and "--" not in message


def test_the_options_remember_which_zeta_came_from_a_file(tmp_path):
    library = zeta_file(tmp_path, "[C]\n2p = 1.7\n[H]\n1s = 1.24\n")
    options = stobuilder.BuildOptions(zeta_file=library, zeta={"H": {"1s": 1.3}})
    assert options.basis.zeta.as_dict() == {"H": {"1s": 1.3}}
    assert options.spec_for(["H"]).zeta.as_dict() == {"H": {"1s": 1.3}}
    assert options.spec_for(["C", "O"]).zeta.as_dict() == {"C": {"2p": 1.7}}
    back = stobuilder.BuildOptions.from_json(options.to_json())
    assert back == options and "zeta_file" not in options.to_json()  # the numbers, not the file's name

