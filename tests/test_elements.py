"""Electron configurations: Madelung filling, the measured exceptions, ions, explicit strings."""

import pytest
from hypothesis import given
from hypothesis import strategies as st

from stobuilder.model.elements import MAX_Z, element_symbol, ground_state, parse_configuration, resolve
from stobuilder.core.errors import InputError

# Ground-state configurations of neutral atoms, NIST Atomic Spectra Database ground levels
# (value from memory).
NIST_GROUND_STATES = {
    "H": "1s1",
    "C": "[He] 2s2 2p2",
    "Ne": "[He] 2s2 2p6",
    "K": "[Ar] 4s1",
    "Sc": "[Ar] 3d1 4s2",
    "Cr": "[Ar] 3d5 4s1",
    "Fe": "[Ar] 3d6 4s2",
    "Cu": "[Ar] 3d10 4s1",
    "Zn": "[Ar] 3d10 4s2",
    "Nb": "[Kr] 4d4 5s1",
    "Mo": "[Kr] 4d5 5s1",
    "Tc": "[Kr] 4d5 5s2",
    "Ru": "[Kr] 4d7 5s1",
    "Rh": "[Kr] 4d8 5s1",
    "Pd": "[Kr] 4d10",
    "Ag": "[Kr] 4d10 5s1",
    "La": "[Xe] 5d1 6s2",
    "Ce": "[Xe] 4f1 5d1 6s2",
    "Eu": "[Xe] 4f7 6s2",
    "Gd": "[Xe] 4f7 5d1 6s2",
    "Lu": "[Xe] 4f14 5d1 6s2",
    "W": "[Xe] 4f14 5d4 6s2",
    "Pt": "[Xe] 4f14 5d9 6s1",
    "Au": "[Xe] 4f14 5d10 6s1",
    "Hg": "[Xe] 4f14 5d10 6s2",
    "Rn": "[Xe] 4f14 5d10 6s2 6p6",
}

# Unpaired electrons of the ground terms (NIST ASD: Cr 7S, Mn 6S, Fe 5D, Gd 9D, N 4S, O 3P;
# value from memory).
UNPAIRED = {"H": 1, "He": 0, "N": 3, "O": 2, "Cr": 6, "Mn": 5, "Fe": 4, "Cu": 1, "Gd": 8, "Pd": 0}


@pytest.mark.parametrize("symbol,expected", sorted(NIST_GROUND_STATES.items()))
def test_ground_states_match_nist(symbol, expected):
    assert ground_state(symbol).label == expected


@pytest.mark.parametrize("symbol,unpaired", sorted(UNPAIRED.items()))
def test_hund_unpaired_electrons(symbol, unpaired):
    assert ground_state(symbol).unpaired == unpaired


def test_every_neutral_atom_has_z_electrons():
    # Neutrality, a law: Z electrons for every element H–Rn.
    for z in range(1, MAX_Z + 1):
        conf = ground_state(element_symbol(z))
        assert conf.electrons == z and conf.charge == 0


@pytest.mark.parametrize(
    "symbol,charge,expected",
    [
        # Transition-metal cations lose 4s before 3d (common textbook rule, e.g. Atkins, Physical Chemistry).
        ("Fe", 2, "[Ar] 3d6"),
        ("Fe", 3, "[Ar] 3d5"),
        ("Cu", 1, "[Ar] 3d10"),
        ("Zn", 2, "[Ar] 3d10"),
        ("Ga", 1, "[Ar] 3d10 4s2"),
        # Anions gain electrons in Madelung order (common practice, no source).
        ("Cl", -1, "[Ne] 3s2 3p6"),
        ("O", -2, "[He] 2s2 2p6"),
        ("H", -1, "1s2"),
    ],
)
def test_ions(symbol, charge, expected):
    conf = ground_state(symbol, charge)
    assert conf.label == expected and conf.charge == charge


def test_explicit_configuration_strings():
    conf = parse_configuration("[Ar] 3d7 4s1")  # 26 electrons: neutral Fe
    assert conf.symbol == "Fe" and conf.label == "[Ar] 3d7 4s1"
    ion = parse_configuration("Fe: [Ar] 3d5")
    assert ion.symbol == "Fe" and ion.charge == 3
    assert resolve("C", configuration="1s2 2s1 2p3").label == "[He] 2s1 2p3"


@pytest.mark.parametrize(
    "text",
    ["[Ar] 3d11", "[Ar] 2d1", "[Xx] 1s2", "1s2 banana", "", "Qq: 1s2", "[Rn] 5f14 6d10 7s2 7p6"],
)
def test_bad_configurations_are_input_errors(text):
    with pytest.raises(InputError):
        parse_configuration(text)


def test_bad_element_and_charge():
    with pytest.raises(InputError, match="unknown element"):
        ground_state("Qq")
    with pytest.raises(InputError, match="beyond Rn"):
        ground_state("Fr")
    with pytest.raises(InputError, match="no electrons"):
        ground_state("He", 2)


@given(st.integers(1, MAX_Z), st.integers(-2, 6))
def test_ions_conserve_electrons_and_capacity(z, charge):
    # Property: an ion holds Z − q electrons and no subshell exceeds 2(2l + 1) (Pauli principle).
    if z - charge < 1:
        return
    conf = ground_state(element_symbol(z), charge)
    assert conf.electrons == z - charge
    assert all(0 < s.occupation <= 2 * (2 * s.l + 1) for s in conf.subshells)
