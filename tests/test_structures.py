"""Reading structure files through ASE: formats, frames, charge/spin, ghosts, bad files; bad
geometry (atoms too close, coordinates not finite) is an error before any file; a free atom takes
its ground state's spin.

The extxyz comment-line keys ``charge``, ``spin`` (2S) and ``multiplicity`` (2S + 1) under
fuzzing: every value ends in a clean InputError naming the file and the key (one line; from the
command line: ``stobuilder: error: ...``, exit status 2, nothing written) or in the structure
with exactly the number the file gives. The oracle is Python's decimal module (the exact value of
the text written), independent of ASE's own parsing. Water has 10 electrons (Z = 8 + 1 + 1): a
charge may lie in −10 … 9 (1 … 20 electrons), spin in 0 … electrons with the parity of the
electron count (PySCF's rule that 2S and N have the same parity: common practice, no source).
"""

import contextlib
import decimal
import io
import os
import tempfile

import numpy as np
import pytest
from ase import Atoms
from ase.build import bulk, molecule
from ase.io import write
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import stobuilder
from stobuilder.cli import main
from stobuilder.core.errors import InputError
from stobuilder.model.structures import elements_of, read_structures
from support import assert_bad_input, run_cli, xyz


@pytest.mark.parametrize("fmt,name", [("xyz", "w.xyz"), ("extxyz", "w.extxyz"), ("proteindatabank", "w.pdb"), ("vasp", "POSCAR")])
def test_formats_ase_reads(tmp_path, fmt, name):
    water = molecule("H2O", vacuum=4.0)  # ASE's G2 geometry, in a box (POSCAR needs a cell)
    water.pbc = False
    path = tmp_path / name
    write(path, water, format=fmt)
    (st,) = read_structures(path)
    assert sorted(st.symbols) == ["H", "H", "O"]
    assert np.allclose(sorted(np.ravel(st.positions)), sorted(np.ravel(water.positions)), atol=1e-3)
    assert st.charge == 0 and st.spin == 0
    assert st.periodic == (fmt == "vasp")  # a POSCAR cell is always periodic  # 10 electrons: closed shell by default


def test_cif_is_periodic(tmp_path):
    path = tmp_path / "zns.cif"
    write(path, bulk("ZnS", "zincblende", a=5.41))
    (st,) = read_structures(path)
    assert st.periodic and st.elements == ("S", "Zn")


def test_extxyz_charge_spin_and_override(tmp_path):
    atoms = molecule("NH3")
    atoms.info = {"charge": -1, "multiplicity": 2}
    path = tmp_path / "nh3.extxyz"
    write(path, atoms, format="extxyz")
    (st,) = read_structures(path)
    assert (st.charge, st.spin) == (-1, 1)
    (st2,) = read_structures(path, charge=1, spin=1)
    assert (st2.charge, st2.spin) == (1, 1)


def test_frames_union_of_elements(tmp_path):
    path = tmp_path / "traj.extxyz"
    write(path, [molecule("H2O"), molecule("NH3"), molecule("CH4")], format="extxyz")
    frames = read_structures(path)
    assert len(frames) == 3 and elements_of(frames) == ("H", "C", "N", "O")


def test_ghost_atoms_are_skipped_with_a_note(tmp_path):
    atoms = Atoms("H2X", positions=[(0, 0, 0), (0, 0, 0.74), (0, 0, 3.0)])
    path = tmp_path / "ghost.extxyz"
    write(path, atoms, format="extxyz")
    (st,) = read_structures(path)
    assert st.symbols == ("H", "H") and "ghost" in st.notes[0]


def test_bad_files(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_structures(tmp_path / "missing.xyz")
    empty = tmp_path / "empty.xyz"
    empty.write_text("")
    with pytest.raises(InputError, match="empty"):
        read_structures(empty)
    garbage = tmp_path / "garbage.xyz"
    garbage.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(InputError, match="garbage.xyz"):
        read_structures(garbage)
    unknown = tmp_path / "unknown.xyz"
    unknown.write_text("1\n\nQq 0 0 0\n")
    with pytest.raises(InputError, match="unknown.xyz"):
        read_structures(unknown)


def test_impossible_charge_spin(tmp_path):
    path = tmp_path / "oh.xyz"
    write(path, molecule("OH"))  # 9 electrons
    with pytest.raises(InputError, match="cannot have spin 0"):
        read_structures(path, spin=0)
    with pytest.raises(InputError, match="leaves"):
        read_structures(path, charge=9)


def test_a_file_name_with_an_at_sign_is_read_as_that_file(tmp_path):
    """ASE reads "name@index" as a frame selection unless told not to; a file named "h2@0.xyz" or
    "@.xyz" is that file, every frame (found by the tune fuzz test; common practice, no source)."""
    from stobuilder.model.structures import read_structures

    for name in ("@.xyz", "h2@0.xyz", "two@1:.xyz"):
        path = tmp_path / name
        path.write_text("2\n\nH 0 0 0\nH 0 0 0.74\n2\n\nH 0 0 0\nH 0 0 0.75\n")
        frames = read_structures(str(path))
        assert [f.positions[1][2] for f in frames] == [0.74, 0.75], name


# ---------------------------------------------------------------------------- geometry and the free atom's spin


@pytest.mark.parametrize(
    "atoms, words",
    [
        (["H 0 0 0", "H 0 0 0"], ["0 Å apart"]),  # two atoms at one position
        (["H 0 0 0", "H 0.00001 0 0"], ["1e-05 Å apart"]),  # 1e-5 Å apart
        (["O 0 0 0", "H 0.05 0 0", "H 0 0.96 0"], ["atoms 1 (O) and 2 (H)", "0.05 Å apart"]),
        (["H 0 0 0", "H nan 0 0"], ["atom 2 (H)", "not a finite number"]),  # NaN coordinates
        (["H 0 0 0", "H 0 inf 0"], ["atom 2 (H)", "not a finite number"]),
        (["H 0 0 0", "H 0 0 1e300"], ["beyond 1e6"]),
    ],
)
def test_bad_geometry_is_an_error_before_any_file(tmp_path, capsys, atoms, words):
    src = xyz(tmp_path / "bad.xyz", atoms)
    out_dir = tmp_path / "o"
    for check in ([], ["--check"]):
        code, _, err = run_cli(["build", str(src), "--out", str(out_dir), *check], capsys)
        assert_bad_input(code, err, out_dir, str(src), *words)


def test_the_minimum_distance_is_0_1_angstrom(tmp_path, capsys):
    # just above the stated minimum (README) is accepted, just below is not
    ok = xyz(tmp_path / "ok.xyz", ["H 0 0 0", "H 0.1001 0 0"])
    assert run_cli(["build", str(ok), "--out", str(tmp_path / "a")], capsys)[0] == 0
    bad = xyz(tmp_path / "bad.xyz", ["H 0 0 0", "H 0.0999 0 0"])
    code, _, err = run_cli(["build", str(bad), "--out", str(tmp_path / "b")], capsys)
    assert_bad_input(code, err, tmp_path / "b", "closer than the 0.1 Å")


def test_a_free_atom_structure_defaults_to_the_ground_state_spin(tmp_path):
    # Hund's rule ground states (NIST Atomic Spectra Database, ground levels): O 3P (2S = 2),
    # Fe 5D (2S = 4), N 4S (2S = 3); a molecule keeps the lowest spin
    from stobuilder.model.structures import read_structures

    for symbol, spin in (("O", 2), ("Fe", 4), ("N", 3), ("He", 0)):
        (frame,) = read_structures(xyz(tmp_path / f"{symbol}.xyz", [f"{symbol} 0 0 0"]))
        assert frame.spin == spin
    (frame,) = read_structures(xyz(tmp_path / "o2.xyz", ["O 0 0 0", "O 0 0 1.21"]))
    assert frame.spin == 0



# ---------------------------------------------------------------------------- the extxyz keys charge, spin and multiplicity


NUCLEAR = 10  # water: O (8) + 2 H (1)


KEYS = ("charge", "spin", "multiplicity")


SPECIAL = ("nan", "NaN", "inf", "-inf", "Infinity", "1e400", "-1e400", "1e-400", "0.5", "-2.5", "1e30", "-1e30",
           "1.0", "10.0", "2.000000000001", "T", "F", "True", "abc", "0x10", "1e", "--1", "", "1_0",
           "99999999999999999999999999999999", "-99999999999999999999999999999999", "[1,2]", "{3}")


def _water(comment: str) -> str:
    return (f"3\n{comment} Properties=species:S:1:pos:R:3\n"
            "O 0.0 0.0 0.119\nH 0.0 0.763 -0.477\nH 0.0 -0.763 -0.477\n")  # ASE G2 water, Å


def _exact(token: str):
    """The exact whole number the text denotes, or None (not a number, not finite, fractional).
    A value may be wrapped in "", '', {} or [] (the extended XYZ convention: libAtoms/QUIP
    extended XYZ description, as ASE's ase.io.extxyz implements it)."""
    pairs = {'"': '"', "'": "'", "{": "}", "[": "]"}
    if len(token) >= 2 and pairs.get(token[0]) == token[-1]:
        token = token[1:-1]
    try:
        value = decimal.Decimal(token)
    except decimal.InvalidOperation:
        return None
    if not value.is_finite() or value != value.to_integral_value():
        return None
    return int(value)


def _expected(key: str, token: str):
    """(charge, spin) the structure must get, or None where an error is the only right outcome."""
    v = _exact(token)
    if v is None:
        return None
    if key == "charge":
        return (v, (NUCLEAR - v) % 2) if -NUCLEAR <= v <= NUCLEAR - 1 else None
    spin = v if key == "spin" else v - 1
    return (0, spin) if 0 <= spin <= NUCLEAR and spin % 2 == 0 else None


tokens = st.one_of(
    st.sampled_from(SPECIAL),
    st.integers(min_value=-(10**40), max_value=10**40).map(str),
    st.integers(min_value=-14, max_value=14).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(min_value=-12, max_value=12).map(lambda x: f"{x:.3f}"),
    st.text(alphabet="abcdefxyzTF0123456789.-+e", min_size=1, max_size=8),
)


def _read(key, token, folder):
    path = os.path.join(folder, "water.xyz")
    with open(path, "w") as handle:
        handle.write(_water(f"{key}={token}"))
    return path


@pytest.mark.slow
@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(key=st.sampled_from(KEYS), token=tokens)
def test_info_keys_give_the_exact_number_or_a_clean_error(key, token):
    with tempfile.TemporaryDirectory() as folder:
        path = _read(key, token, folder)
        expected = _expected(key, token)
        try:
            (frame,) = stobuilder.read_structures(path)
        except stobuilder.InputError as exc:
            message = str(exc)
            assert "\n" not in message and message.startswith(path), message
            assert key in message or "spin" in message, message
            assert expected is None, (token, message)
            return
        assert expected is not None, (key, token, frame.charge, frame.spin)
        assert (frame.charge, frame.spin) == expected


@pytest.mark.parametrize("key", KEYS)
@pytest.mark.parametrize("token", ["nan", "inf", "1e400", "-1e400", "1.5", "-30", "10**5", "99999999999999999999999",
                                   "T", "abc"])
def test_bad_values_name_the_file_and_the_key(key, token, tmp_path):
    path = _read(key, token, str(tmp_path))
    with pytest.raises(stobuilder.InputError) as info:
        stobuilder.read_structures(path)
    message = str(info.value)
    assert message.startswith(path) and f"{key}=" in message and "\n" not in message, message


def test_good_values_are_read_exactly(tmp_path):
    cases = {"charge=1": (1, 1), "charge=-10": (-10, 0), "charge=9": (9, 1), "charge=1.0": (1, 1),
             "spin=2": (0, 2), "multiplicity=3": (0, 2), "spin=10": (0, 10), "multiplicity=1": (0, 0),
             "charge=-1 spin=3": (-1, 3), "charge=1 multiplicity=2": (1, 1)}
    for comment, expected in cases.items():
        path = tmp_path / "w.xyz"
        path.write_text(_water(comment))
        (frame,) = stobuilder.read_structures(str(path))
        assert (frame.charge, frame.spin) == expected, comment


def test_parity_error_names_the_key_it_came_from(tmp_path):
    path = tmp_path / "w.xyz"
    path.write_text(_water("multiplicity=4"))
    with pytest.raises(stobuilder.InputError, match=r"multiplicity=4"):
        stobuilder.read_structures(str(path))


@pytest.mark.parametrize("comment", ["spin=2 multiplicity=1", "multiplicity=1 spin=2", "spin=0 multiplicity=3",
                                     "charge=1 spin=1 multiplicity=4"])
def test_spin_and_multiplicity_that_contradict_are_an_error_naming_both(tmp_path, comment):
    # multiplicity = 2S + 1 = spin + 1 (the definition of the spin multiplicity)
    path = tmp_path / "w.xyz"
    path.write_text(_water(comment))
    with pytest.raises(stobuilder.InputError) as info:
        stobuilder.read_structures(str(path))
    message = str(info.value)
    assert message.startswith(str(path)) and "spin=" in message and "multiplicity=" in message, message
    assert "\n" not in message


def test_spin_and_multiplicity_that_agree_are_read(tmp_path):
    path = tmp_path / "w.xyz"
    path.write_text(_water("spin=2 multiplicity=3"))
    (frame,) = stobuilder.read_structures(str(path))
    assert frame.spin == 2


def test_cli_contradicting_spin_and_multiplicity_exits_2_and_writes_nothing(tmp_path, capsys):
    path = tmp_path / "w.xyz"
    path.write_text(_water("spin=2 multiplicity=1"))
    code = main(["build", str(path), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "spin=2" in err and "multiplicity=1" in err and str(path) in err
    assert not (tmp_path / "out").exists()


def test_caller_values_override_a_bad_file_value_only_where_given(tmp_path):
    path = tmp_path / "w.xyz"
    path.write_text(_water("charge=nan spin=2"))
    (frame,) = stobuilder.read_structures(str(path), charge=0)
    assert (frame.charge, frame.spin) == (0, 2)


@pytest.mark.slow
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(key=st.sampled_from(KEYS), token=st.sampled_from(SPECIAL))
def test_cli_build_exits_2_with_one_line_and_writes_nothing(key, token):
    with tempfile.TemporaryDirectory() as folder:
        path = _read(key, token, folder)
        out = os.path.join(folder, "out")
        err, stdout = io.StringIO(), io.StringIO()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(stdout):
            code = main(["build", path, "--out", out])
        if _expected(key, token) is None:
            assert code == 2 and err.getvalue().count("\n") == 1, err.getvalue()
            assert err.getvalue().startswith(f"stobuilder: error: {path}") and "Traceback" not in err.getvalue()
            assert not os.path.exists(out)
        else:
            assert code == 0, err.getvalue()
            assert os.path.isfile(os.path.join(out, "water.nw"))

