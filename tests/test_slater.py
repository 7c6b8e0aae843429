"""Slater's rules (J. C. Slater, Phys. Rev. 36, 57, 1930) against textbook worked examples."""

import pytest
from hypothesis import given
from hypothesis import strategies as st

import stobuilder
from stobuilder.model.elements import MAX_Z, element_symbol


@pytest.mark.parametrize(
    "element,label,expected",
    [
        ("N", "2p", 3.90),  # common textbook example of Slater 1930: N 2p Zeff = 3.90
        ("Zn", "4s", 4.35),  # common textbook example: Zn 4s Zeff = 4.35
        ("Zn", "3d", 8.85),  # common textbook example: Zn 3d Zeff = 8.85
        ("K", "4s", 2.20),  # common textbook example: K 4s Zeff = 2.20
        ("O", "2p", 4.55),  # common textbook example: O 2p Zeff = 4.55
        ("Fe", "3d", 6.25),  # common textbook example: Fe 3d Zeff = 6.25
        ("Fe", "4s", 3.75),  # common textbook example: Fe 4s Zeff = 3.75
        ("He", "1s", 1.70),  # Slater 1930: 1s screening 0.30, He Zeff = 1.70
    ],
)
def test_textbook_zeff(element, label, expected):
    assert stobuilder.zeff(element)[label] == pytest.approx(expected, abs=1e-12)


def test_zeta_uses_effective_n():
    # Slater 1930: n* = 3.7 for n = 4, ζ = Zeff / n*; K 4s: 2.20 / 3.7.
    assert stobuilder.zeta_values("K")["4s"] == pytest.approx(2.20 / 3.7, abs=1e-12)
    # n* = 4.0 for n = 5 and 4.2 for n = 6 (Slater 1930).
    rb = stobuilder.zeff("Rb")["5s"]
    assert stobuilder.zeta_values("Rb")["5s"] == pytest.approx(rb / 4.0, abs=1e-12)
    cs = stobuilder.zeff("Cs")["6s"]
    assert stobuilder.zeta_values("Cs")["6s"] == pytest.approx(cs / 4.2, abs=1e-12)


def test_empty_p_partner_shares_the_s_group():
    # Slater 1930 puts ns and np in one group: the empty Li 2p gets the 2s value (1.30).
    z = stobuilder.zeff("Li")
    assert z["2p"] == z["2s"] == pytest.approx(1.30, abs=1e-12)  # common textbook example: Li 2s 1.30


def test_ions_and_configurations():
    # Fe2+ [Ar] 3d6: 3d Zeff = 26 − (5 × 0.35 + 18) = 6.25 (Slater 1930 arithmetic, by hand).
    assert stobuilder.zeff("Fe", charge=2)["3d"] == pytest.approx(6.25, abs=1e-12)
    assert "4s" not in stobuilder.zeff("Fe", charge=2)
    # [Ar] 3d7 4s1: 3d Zeff = 26 − (6 × 0.35 + 18) = 5.90 (by hand from Slater 1930).
    assert stobuilder.zeff("Fe", configuration="[Ar] 3d7 4s1")["3d"] == pytest.approx(5.90, abs=1e-12)


@given(st.integers(1, MAX_Z))
def test_zeff_is_between_zero_and_z(z):
    # Screening never exceeds Z − 1 nor goes negative (property of Slater's constants ≤ 1).
    values = stobuilder.zeff(element_symbol(z))
    assert all(0 < v <= z for v in values.values())
