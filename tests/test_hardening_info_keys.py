"""The extxyz comment-line keys ``charge``, ``spin`` (2S) and ``multiplicity`` (2S + 1) under
fuzzing (issue 16, class 2): every value ends in a clean InputError naming the file and the key
(one line; from the command line: ``stobuilder: error: ...``, exit status 2, nothing written) or
in the structure with exactly the number the file gives.

The oracle is Python's decimal module (the exact value of the text written), independent of ASE's
own parsing. Water has 10 electrons (Z = 8 + 1 + 1): a charge may lie in −10 … 9 (1 … 20
electrons), spin in 0 … electrons with the parity of the electron count (PySCF's rule that
2S and N have the same parity: common practice, no source).
"""

import contextlib
import decimal
import io
import os
import tempfile

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import stobuilder
from stobuilder.cli import main

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
def test_issue_examples_name_the_file_and_the_key(key, token, tmp_path):
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
