"""The basis specification: one frozen value, validated once, that is the key of the one basis cache.

What is promised: every field of ``BasisSpec`` decides the basis and is part of the cache key
with no further edit (the key is the value itself); ζ of elements a structure lacks do not change
its basis; bad values are refused when the value is made (TypeError for a type, InputError
naming the field for a value); the names of earlier versions still work, with a warning; the
exact-STO check takes the very STOs the basis expands.
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import pytest

import stobuilder
from stobuilder.builder.construct import basis_of, build_basis
from stobuilder.builder.spec import DEFAULTS, BasisSpec, ZetaTable
from stobuilder.core.errors import InputError, OptionError
from stobuilder.pipeline.options import BuildOptions

# One value other than the default for every field (common practice, no source). A field added
# to BasisSpec without a line here fails test_every_field_has_an_alternative: whoever adds it
# then shows that it reaches the basis.
ALTERNATIVES = {
    "rule": "clementi",
    "gaussians": 4,
    "norm": "h1",
    "sharing": "separate",
    "radial": "effective-n",
    "zeta": {"Cl": {"3p": 2.0}},
}


def test_every_field_has_an_alternative():
    assert {f.name for f in dataclasses.fields(BasisSpec)} == set(ALTERNATIVES)


@pytest.mark.parametrize("name", sorted(ALTERNATIVES))
def test_every_field_changes_the_basis_and_the_cache_key(name):
    # the caches of earlier versions listed the fields by hand; now the key is the spec itself.
    # Cl (a 3s3p family with n* = 3 and a ζ that the overrides can change) shows every field.
    base = BasisSpec()
    other = BasisSpec(**{name: ALTERNATIVES[name]})
    assert base != other and hash(base) != hash(other)
    basis_of.cache_clear()
    a = basis_of(["Cl"], base)
    b = basis_of(["Cl"], other)
    assert basis_of.cache_info().misses == 2  # two keys, two builds
    assert a.to_pyscf() != b.to_pyscf() or (a.rule, a.norm, a.radial) != (b.rule, b.norm, b.radial)
    assert basis_of(["Cl"], BasisSpec(**{name: ALTERNATIVES[name]})) is b  # an equal value hits


def test_a_cached_basis_equals_a_new_build():
    spec = BasisSpec(rule="molecular", gaussians=6)
    assert basis_of(["O", "H"], spec) == build_basis(["O", "H"], spec)


def test_zeta_of_an_absent_element_does_not_change_the_key():
    # a zeta file is a library: its Fe entry must not make a new water basis
    options = BuildOptions(zeta_library={"Fe": {"3d": 2.1}})
    assert options.spec_for(("H", "O")) == BuildOptions().spec_for(("H", "O"))
    assert options.spec_for(("Fe",)).zeta.as_dict() == {"Fe": {"3d": 2.1}}


def test_own_zeta_go_on_top_of_the_library():
    options = BuildOptions(zeta={"O": {"2p": 2.3}}, zeta_library={"O": {"2s": 2.1, "2p": 2.0}})
    assert options.spec_for(("O", "H")).zeta.as_dict() == {"O": {"2p": 2.3, "2s": 2.1}}


def test_defaults_live_in_one_place():
    spec = BasisSpec()
    assert {k: getattr(spec, k) for k in DEFAULTS} == DEFAULTS
    options = BuildOptions()
    assert options.basis == spec


@pytest.mark.parametrize(
    "fields, error, names",
    [
        ({"rule": 3}, TypeError, "rule"),
        ({"rule": "slatr"}, InputError, "rule"),
        ({"gaussians": 0}, InputError, "gaussians"),
        ({"gaussians": 13}, InputError, "gaussians"),
        ({"gaussians": 2.5}, InputError, "gaussians"),
        ({"norm": "l3"}, InputError, "norm"),
        ({"norm": None}, TypeError, "norm"),
        ({"sharing": "family "}, InputError, "sharing"),
        ({"radial": "n*"}, InputError, "radial"),
        ({"zeta": [("O", 1.0)]}, TypeError, "zeta"),
        ({"zeta": {"O": 2.0}}, TypeError, "zeta"),
        ({"zeta": {"Xx": {"1s": 1.0}}}, InputError, "zeta"),
        ({"zeta": {"O": {"1q": 1.0}}}, InputError, "zeta"),
        ({"zeta": {"O": {"1s": -1.0}}}, InputError, "zeta"),
        ({"zeta": {"O": {"1s": math.nan}}}, InputError, "zeta"),
    ],
)
def test_bad_values_are_refused_when_the_spec_is_made(fields, error, names):
    with pytest.raises(error) as info:
        BasisSpec(**fields)
    message = str(info.value)
    assert names in message and "--" not in message  # Python names in Python
    assert "\n" not in message


def test_an_option_error_names_the_field():
    with pytest.raises(OptionError) as info:
        BasisSpec(norm="l3")
    assert info.value.option == "norm"


def test_zeta_table_grammar():
    assert ZetaTable.parse(["Fe:3d=2.1", "o:2p=2.2"]).as_dict() == {"Fe": {"3d": 2.1}, "O": {"2p": 2.2}}
    assert ZetaTable.parse(["1s=1.6875"], element="He").as_dict() == {"He": {"1s": 1.6875}}
    with pytest.raises(OptionError, match="ELEMENT:LABEL=VALUE"):
        ZetaTable.parse(["1s=1.6875"])  # no element where the command has several
    with pytest.raises(OptionError, match="given twice"):
        ZetaTable.parse(["O:2p=2", "O:2p=3"])
    with pytest.raises(OptionError, match="not the element"):
        ZetaTable.parse(["C:1s=5"], element="He")


def test_with_zeta_keeps_the_rest_without_validating_again(monkeypatch):
    spec = BasisSpec(rule="molecular", gaussians=6)
    import stobuilder.screening as rules

    monkeypatch.setattr(rules, "rules", lambda: (_ for _ in ()).throw(AssertionError("validated again")))
    out = spec.with_zeta(ZetaTable.of({"O": {"2p": 2.0}}))
    assert (out.rule, out.gaussians, out.zeta.as_dict()) == ("molecular", 6, {"O": {"2p": 2.0}})


def test_the_deprecated_keyword_exponents_still_works():
    with pytest.warns(DeprecationWarning, match="sharing"):
        old = build_basis(["N"], exponents="shared")
    assert old == build_basis(["N"], sharing="shared")
    with pytest.warns(DeprecationWarning):
        assert BuildOptions(exponents="separate").basis.sharing == "separate"
    with pytest.warns(DeprecationWarning, match="zeta_values"):
        assert stobuilder.exponents("N") == stobuilder.zeta_values("N")


def test_spec_or_fields_not_both():
    with pytest.raises(TypeError, match="not both"):
        build_basis(["H"], BasisSpec(), gaussians=6)
    with pytest.raises(TypeError, match="BasisSpec"):
        build_basis(["H"], {"rule": "slater"})


def test_manifest_records_of_the_earlier_layout_are_read():
    doc = BuildOptions(sharing="shared").to_json()
    doc["exponents"] = doc.pop("sharing")
    assert BuildOptions.from_json(doc) == BuildOptions(sharing="shared")


def test_the_exact_sto_check_takes_the_basis_stos_and_runs_no_rule(monkeypatch):
    # H with ζ = 1: E = ζ²/2 − ζ = −1/2 hartree exactly (the hydrogen ground state; any textbook,
    # e.g. Szabo & Ostlund, Modern Quantum Chemistry, 1982, ch. 3). The rule must not run again:
    # the check holds the basis's own STOs.
    from stobuilder.checks.structure import exact_sto_atoms

    basis = build_basis(["H"], zeta={"H": {"1s": 1.0}}, gaussians=6)
    import stobuilder.screening as rules

    def refuse(*args, **kwargs):
        raise AssertionError("the screening rule ran again")

    import stobuilder.builder.construct as construct

    monkeypatch.setattr(rules, "shell_exponents", refuse)
    monkeypatch.setattr(construct, "shell_exponents", refuse)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        (atom,) = exact_sto_atoms(basis, ["H"])
    assert atom.energy_exact_hartree == pytest.approx(-0.5, abs=1e-12)
    # the Gaussian expansion lies above the exact STO (variational principle) and close to it
    # (STO-6G in L²: 1.7e-4 hartree measured here; below 1e-3 is common practice, no source)
    assert 0 < atom.expansion_error_hartree < 1e-3
