"""The shipped data tables against their regeneration on another machine: equal within stated
tolerances, never required bit for bit (the last bits of double-precision results differ between
CPUs and numpy builds). Each table's --check must pass for one-ulp noise in every shipped number
and fail for a change of 1e-9 relative (common practice, no source: a check that tells noise
from change must do both).
"""

from __future__ import annotations

import copy
import json
import math

import mpmath as mp
import numpy as np
import pytest

from stobuilder.expansion.library import library_path
from stobuilder.maintainer.fits import check_texts, compare_library, contraction_distance
from stobuilder.maintainer import molecular as regenerate_molecular, optimized as regenerate_optimized
from stobuilder.maintainer.tablecheck import SquaredDistance, Tolerance, compare


def _load(path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def _map_numbers(doc, change, select=lambda path: True, path=()):
    """A copy of ``doc`` with every float at a selected path replaced by change(value)."""
    if isinstance(doc, dict):
        return {k: _map_numbers(v, change, select, path + (str(k),)) for k, v in doc.items()}
    if isinstance(doc, list):
        return [_map_numbers(v, change, select, path + (str(i),)) for i, v in enumerate(doc)]
    if isinstance(doc, float) and select(path):
        return change(doc)
    return doc


def one_ulp(x: float) -> float:
    return float(np.nextafter(x, math.inf))


def relative(r: float):
    return lambda x: x * (1 + r)


def _fits(kind):
    return lambda path: len(path) >= 4 and path[0] == "fits" and path[3] == kind


@pytest.fixture(scope="module", params=["l2", "h1"])
def library(request):
    return _load(library_path(request.param))


# ---------------------------------------------------------------------------- fit libraries


def test_library_one_ulp_everywhere_is_equal(library):
    result = compare_library(library, _map_numbers(library, one_ulp))
    assert result.equal, result.summary("")
    assert "equal within" in result.summary("the tolerances")


@pytest.mark.parametrize("kind", ["exponents", "coefficients"])
def test_library_1e9_in_exponents_or_coefficients_differs(library, kind):
    result = compare_library(library, _map_numbers(library, relative(1e-9), _fits(kind)))
    assert not result.equal
    assert result.summary("").startswith("differs: fits/")


def test_library_1e9_everywhere_differs(library):
    assert not compare_library(library, _map_numbers(library, relative(1e-9))).equal


def test_library_1e9_in_a_large_error_differs(library):
    """ε ≥ 1e-6 changed by 1e-9 relative moves more than a contraction within 1e-12 allows."""
    big = _map_numbers(library, lambda e: e * (1 + 1e-9) if e >= 1e-6 else e, _fits("error"))
    assert not compare_library(library, big).equal


def test_library_single_exponent_change_is_found_and_named(library):
    changed = copy.deepcopy(library)
    entry = changed["fits"]["3s,3p,3d"]["6"]
    entry["exponents"][2] *= 1 + 1e-9
    result = compare_library(library, changed)
    assert not result.equal
    assert "fits/3s,3p,3d/6/3s" in result.summary("")


def test_library_structure_changes_differ(library):
    missing = copy.deepcopy(library)
    del missing["fits"]["1s"]["12"]
    assert not compare_library(library, missing).equal
    method = copy.deepcopy(library)
    method["provenance"]["algorithm"] += "-other"
    assert not compare_library(library, method).equal
    nan = copy.deepcopy(library)
    nan["fits"]["1s"]["3"]["error"]["1s"] = float("nan")
    assert not compare_library(library, nan).equal


def test_contraction_distance_against_multiprecision_overlaps():
    """The first-order distance of two nearby contractions equals the exact
    √(‖χa‖² + ‖χb‖² − 2⟨χa, χb⟩) formed at 60 digits from the closed-form overlaps of normalised
    Gaussians, S_ij = (2√(αi αj)/(αi + αj))^(l + 3/2) (a textbook Gaussian integral)."""
    lib = _load(library_path("l2"))
    rng = np.random.default_rng(7)
    for family, n, label, l in (("1s", "6", "1s", 0), ("3s,3p,3d", "9", "3d", 2), ("4f", "12", "4f", 3)):
        e = np.array(lib["fits"][family][n]["exponents"])
        c = np.array(lib["fits"][family][n]["coefficients"][label])
        e2 = e * (1 + 1e-8 * rng.standard_normal(e.size))
        c2 = c * (1 + 1e-8 * rng.standard_normal(c.size))
        with mp.workdps(60):
            def gram(x, y):
                return sum(mp.mpf(ci) * mp.mpf(cj) * (2 * mp.sqrt(mp.mpf(ai) * aj) / (mp.mpf(ai) + aj)) ** (l + mp.mpf(3) / 2)
                           for ai, ci in zip(*x) for aj, cj in zip(*y))
            exact = float(mp.sqrt(gram((e, c), (e, c)) + gram((e2, c2), (e2, c2)) - 2 * gram((e, c), (e2, c2))))
        assert contraction_distance(l, e, c, e2, c2) == pytest.approx(exact, rel=1e-6)


def test_library_check_lines_name_the_file_and_status():
    """check_texts on the shipped texts themselves: equal, status 0; one coefficient moved: status 1."""
    texts = {norm: library_path(norm).read_text(encoding="ascii") for norm in ("l2", "h1")}
    lines, status = check_texts(texts)
    assert status == 0 and all("equal within" in line and "fits_" in line for line in lines)
    doc = json.loads(texts["l2"])
    doc["fits"]["2s,2p"]["3"]["coefficients"]["2p"][0] *= 1 + 1e-9
    lines, status = check_texts({"l2": json.dumps(doc)})
    assert status == 1 and "differs: fits/2s,2p/3/2p" in lines[0]


# ---------------------------------------------------------------------------- optimised ζ table


def test_optimized_one_ulp_is_equal_and_1e9_differs():
    table = _load(regenerate_optimized.table_path())
    assert regenerate_optimized.compare_table(table, _map_numbers(table, one_ulp)).equal
    for key in ("zeta", "energy_hartree", "virial_ratio"):
        changed = _map_numbers(table, relative(1e-9), lambda path, key=key: key in path)
        assert not regenerate_optimized.compare_table(table, changed).equal, key


# ---------------------------------------------------------------------------- molecular STO-3G ζ table


def test_molecular_one_ulp_is_equal_and_1e9_differs():
    table = _load(regenerate_molecular.OUTPUT)
    assert regenerate_molecular.compare_table(table, _map_numbers(table, one_ulp)).equal
    assert not regenerate_molecular.compare_table(table, _map_numbers(table, relative(1e-9))).equal


def test_molecular_check_command_passes_here(capsys):
    """The derivation from PySCF's sto-3g.dat on this machine equals the shipped table within tolerance."""
    assert regenerate_molecular.main(["--check"]) == 0
    assert "equal within" in capsys.readouterr().out


# ---------------------------------------------------------------------------- the comparison itself


def test_tolerances():
    assert Tolerance(1e-12).allows(1.0, 1.0 + 0.9e-12) and not Tolerance(1e-12).allows(1.0, 1.0 + 3e-12)
    assert Tolerance(0, 1e-20).allows(0.0, 1e-20)
    # ε = ‖φ − χ‖²: χ within δ gives |Δε| ≤ 2δ√ε + δ² (triangle inequality)
    assert SquaredDistance(1e-12).allows(1e-4, 1e-4 + 1.5e-14) and not SquaredDistance(1e-12).allows(1e-4, 1e-4 + 3e-14)


def test_compare_reports_largest_difference_and_entry():
    a = {"x": [1.0, 2.0], "name": "t"}
    b = {"x": [1.0, 2.0 * (1 + 5e-13)], "name": "t"}
    result = compare(a, b, lambda path: Tolerance(1e-12))
    assert result.equal
    assert "at x/1" in result.summary("1e-12") and "largest relative difference 5.0" in result.summary("1e-12")
    result = compare(a, {"x": [1.0], "name": "u"}, lambda path: Tolerance(1e-12))
    assert not result.equal and "x has 2 items" in result.summary("") and "name 't' shipped, 'u'" in result.summary("")


def test_optimized_regeneration_keeps_and_reuses_entries(tmp_path, monkeypatch):
    # An interrupted regeneration goes on where it stopped: the entries kept in the folder are
    # reused as they are, the table text is the one a full run gives (common practice, no source)
    keep = tmp_path / "entries"
    full = regenerate_optimized.build_text("Be", workers=1)
    first = regenerate_optimized.build_text("Li", workers=1, keep=str(keep))
    assert sorted(p.name for p in keep.iterdir()) == ["H.json", "He.json", "Li.json"]
    computed = []
    real = regenerate_optimized.optimise_entry
    monkeypatch.setattr(regenerate_optimized, "optimise_entry", lambda s: computed.append(s) or real(s))
    again = regenerate_optimized.build_text("Be", workers=1, keep=str(keep))
    assert computed == ["Be"]
    assert again == full
    assert json.loads(first)["elements"] == {k: v for k, v in json.loads(full)["elements"].items() if k != "Be"}
