"""Fuzzing the command line's numeric options (issue 16): --gaussians, --charge, --spin and
--zeta values, on a molecule and a free atom, with and without --check, through build and batch.

Every run ends in the contract: exit 0 with every file written and readable by PySCF's own
NWChem-format parser (pyscf.gto.basis.parse_nwchem, an independent reader), or exit 2 with one
line ``stobuilder: error: ...`` and nothing written; never a traceback (main() lets any other
exception through, which fails the test).
"""

import concurrent.futures as cf
import contextlib
import io
import os
import tempfile
from unittest import mock

import pytest
from ase.build import molecule
from ase.io import write
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from stobuilder.jobs import executors
from stobuilder.cli import main

EXAMPLES = 150

numbers = st.one_of(
    st.integers(-30, 30).map(str),
    st.integers(-(10**30), 10**30).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["1e400", "-0", "0x10", "", " 3", "٣", "1_0", "nan", "+inf"]),
)
def mostly(valid, junk, percent=75):
    """``valid`` about ``percent`` % of the time, else ``junk``."""
    return st.integers(0, 99).flatmap(lambda k: valid if k < percent else junk)


good_zetas = st.floats(min_value=0.2, max_value=20).map(repr)
zetas = st.one_of(
    st.floats(min_value=1e-6, max_value=1e4).map(repr),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["1e-160", "1e300", "1e-400", "5e-324", "abc", "", "1.0.0"]),
)


def _structures(folder):
    water = os.path.join(folder, "water.xyz")
    write(water, molecule("H2O"))  # ASE G2 geometry
    oxygen = os.path.join(folder, "o.xyz")
    with open(oxygen, "w") as handle:
        handle.write("1\n\nO 0 0 0\n")
    return {"water": water, "o": oxygen}


def _run(argv):
    """(exit status, stderr) of ``stobuilder ARGV`` in this process; the batch engine's process
    pool is not under test here: threads keep each example fast."""
    err, out = io.StringIO(), io.StringIO()
    threads = mock.patch.object(executors, "local_executor", lambda workers: cf.ThreadPoolExecutor(workers))
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out), threads:
        code = main(argv)
    return code, err.getvalue()


def _element_blocks(text):
    """{symbol: the shell lines of that element} of an NWChem basis block, for PySCF's parser."""
    blocks, symbol = {}, None
    for line in text.splitlines():
        words = line.split()
        if not words or line.startswith("#") or words[0] in ("BASIS", "END"):
            continue
        if words[0].isalpha():
            symbol = words[0]
        blocks.setdefault(symbol, []).append(line)
    return {k: "\n".join(v) for k, v in blocks.items()}


@settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    command=st.sampled_from(["build", "build", "batch"]),
    structure=st.sampled_from(["water", "o"]),
    gaussians=mostly(st.one_of(st.none(), st.integers(1, 12).map(str)), st.one_of(st.integers(-2, 14).map(str), numbers)),
    charge=mostly(st.one_of(st.none(), st.integers(-1, 1).map(str)), st.one_of(st.integers(-12, 12).map(str), numbers)),
    spin=mostly(st.none(), st.one_of(st.integers(-2, 8).map(str), numbers)),
    zeta=st.lists(st.tuples(st.sampled_from(["O:1s", "O:2p", "O:2s", "H:1s", "O:3d"]), mostly(good_zetas, zetas)),
                  max_size=2, unique_by=lambda kv: kv[0]),
    check=st.booleans(),
)
def test_numeric_options_end_in_the_contract(command, structure, gaussians, charge, spin, zeta, check):
    from pyscf.gto.basis import parse_nwchem

    with tempfile.TemporaryDirectory() as folder:
        paths = _structures(folder)
        out_dir = os.path.join(folder, "out")
        argv = [command, paths[structure], "--out", out_dir]
        for option, value in (("--gaussians", gaussians), ("--charge", charge), ("--spin", spin)):
            if value is not None:
                argv.append(f"{option}={value}")
        for key, value in zeta:
            argv.append(f"--zeta={key}={value}")
        if check:
            argv.append("--check")
        if command == "batch":
            argv += ["--workers", "1", "--progress", "off"]
        code, message = _run(argv)
        event(f"{command} exit {code}{' --check' if check else ''}")
        written = sorted(os.listdir(out_dir)) if os.path.isdir(out_dir) else []
        if code == 0:
            assert message == ""
            nw = os.path.join(out_dir, f"{structure}.nw")
            with open(nw) as handle:
                blocks = _element_blocks(handle.read())
            assert set(blocks) == ({"O", "H"} if structure == "water" else {"O"})
            for text in blocks.values():
                shells = parse_nwchem.parse(text, optimize=False)
                assert shells and all(0 < p[0] < float("inf") for s in shells for p in s[1:])
        elif command == "batch" and code == 1:
            # an item that failed (e.g. its SCF did not converge): recorded, none of its files written
            assert written == ["stobuilder-batch.jsonl"]
        else:
            assert code == 2, (argv, message)
            assert message.startswith("stobuilder: error: ") and message.count("\n") == 1, message
            assert [f for f in written if f != "stobuilder-batch.jsonl"] == []


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    element=st.sampled_from(["He", "C", "O"]),
    charge=mostly(st.one_of(st.none(), st.integers(-1, 2).map(str)), st.one_of(st.integers(-12, 12).map(str), numbers)),
    gaussians=st.lists(mostly(st.integers(1, 6).map(str), st.one_of(st.integers(-2, 14).map(str), numbers)),
                       max_size=2),
    zeta=st.lists(st.tuples(st.sampled_from(["1s", "2s", "2p", "3d"]), mostly(good_zetas, zetas)),
                  max_size=2, unique_by=lambda kv: kv[0]),
)
def test_atom_numeric_options_end_in_the_contract(element, charge, gaussians, zeta):
    """The same contract for ``atom``: strict JSON with finite energies (exit 0), or one line
    and exit 2; the exact-STO SCF on far-off ζ fails as an error naming the atom, never a
    traceback."""
    import json
    import math

    argv = ["atom", element, "--json"]
    if charge is not None:
        argv.append(f"--charge={charge}")
    if gaussians:
        argv += ["--gaussians", *gaussians]
    for key, value in zeta:
        argv.append(f"--zeta={key}={value}")
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = main(argv)
    event(f"atom exit {code}")
    if code == 0:
        doc = json.loads(out.getvalue(), parse_constant=lambda name: pytest.fail(f"not strict JSON: {name}"))
        assert math.isfinite(doc["energy_exact_hartree"])
        assert all(math.isfinite(row["energy_hartree"]) for row in doc["gaussian"])
    else:
        assert code == 2, (argv, err.getvalue())
        message = err.getvalue()
        assert message.startswith("stobuilder: error: ") and message.count("\n") == 1, message


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    command=st.sampled_from(["relax", "tune", "bench"]),
    gaussians=mostly(st.one_of(st.none(), st.integers(1, 6).map(str)), st.one_of(st.integers(-2, 14).map(str), numbers), percent=90),
    charge=mostly(st.none(), st.one_of(st.integers(-3, 3).map(str), numbers), percent=90),
    spin=mostly(st.none(), st.one_of(st.integers(-2, 4).map(str), numbers), percent=90),
    fmax=mostly(st.one_of(st.none(), st.floats(min_value=0.01, max_value=1.0).map(repr)), numbers, percent=90),
    steps=mostly(st.one_of(st.none(), st.integers(1, 30).map(str)), numbers, percent=90),
    zeta=mostly(st.none(), zetas, percent=90),
)
def test_relax_tune_bench_numeric_options_end_in_the_contract(command, gaussians, charge, spin, fmax, steps, zeta):
    """The same contract for the commands built on the SCF: exit 0 (or 1: a relaxation out of
    steps, a search or calculation that did not finish) with its outputs written; or exit 2 with
    one error line, no traceback and nothing in the output folder. (common practice, no source)"""
    with tempfile.TemporaryDirectory() as folder:
        h2 = os.path.join(folder, "h2.xyz")
        with open(h2, "w") as handle:
            handle.write("2\n\nH 0 0 0\nH 0 0 0.80\n")  # near the H2 bond length (value from memory: 0.74 Å)
        out_dir = os.path.join(folder, "out")
        target = {"relax": out_dir, "tune": os.path.join(out_dir, "h.toml"), "bench": out_dir}[command]
        argv = [command, h2, "--out", target]
        if command == "tune":
            os.mkdir(out_dir)
        if command == "bench":
            argv += ["--rule", "molecular", "--workers", "1", "--progress", "off"]
        numeric = (("--gaussians", gaussians),) + ((("--charge", charge), ("--spin", spin)) if command != "bench" else ())
        for option, value in numeric:  # bench takes spins from its set or files, no --charge/--spin
            if value is not None:
                argv.append(f"{option}={value}")
        if command == "relax":
            argv += [f"--fmax={fmax}"] if fmax is not None else []
            argv += [f"--steps={steps}"] if steps is not None else []
        if zeta is not None and command != "bench":
            argv.append(f"--zeta=H:1s={zeta}")
        code, message = _run(argv)
        event(f"{command} exit {code}")
        assert "Traceback" not in message
        written = sorted(os.listdir(out_dir)) if os.path.isdir(out_dir) else []
        if code in (0, 1):
            expected = {"relax": "h2.relaxed.extxyz", "tune": "h.toml", "bench": "bench.json"}[command]
            assert expected in written, (argv, message, written)
        else:
            assert code == 2, (argv, message)
            errors = [line for line in message.splitlines() if line.startswith("stobuilder: error: ")]
            assert len(errors) == 1 and message.endswith(errors[0] + "\n"), message
            assert [f for f in written if not f.startswith("stobuilder-")] == [], (argv, written)


# ---------------------------------------------------------------------------- tune's edges (issue 21)

_TUNE_H2 = "2\n\nH 0 0 0\nH 0 0 0.7408\n"  # R = 1.4 bohr (0.7408 Å; value from memory)


def _toml_key(text):
    """``text`` as a TOML basic-string key: every character TOML forbids raw (controls, DEL) and
    the quote and backslash as \\uXXXX (TOML 1.0, basic strings)."""
    return '"' + "".join(f"\\u{ord(c):04x}" if ord(c) < 0x20 or c in '\x7f"\\' else c for c in text) + '"'


def _tune_reference_zeta():
    """H2's tuned ζ with unit weights, the rule's start and a plain file name (computed once)."""
    import tomllib

    if not hasattr(_tune_reference_zeta, "value"):
        with tempfile.TemporaryDirectory() as folder:
            path = os.path.join(folder, "h2.xyz")
            with open(path, "w") as handle:
                handle.write(_TUNE_H2)
            out = os.path.join(folder, "z.toml")
            code, message = _run(["tune", path, "--gaussians", "1", "--threads", "1", "--out", out])
            assert code == 0, message
            with open(out, "rb") as handle:
                _tune_reference_zeta.value = tomllib.load(handle)["H"]["1s"]
    return _tune_reference_zeta.value


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    name=st.text(st.characters(blacklist_characters="/\x00", blacklist_categories=("Cs",)), min_size=1, max_size=16),
    scale=st.one_of(st.just(None), st.integers(-300, 300).map(lambda k: 10.0**k)),
    start=st.one_of(st.just(None), st.floats(min_value=0.002, max_value=900)),
    where=st.sampled_from(["plain"] * 4 + ["missing-folder", "file-as-folder", "existing", "twice"]),
)
def test_tune_hostile_names_weights_starts_and_targets_end_in_the_contract(name, scale, start, where):
    """tune on H2 under a hostile file name, a common factor of the weights from 1e-300 to
    1e300, a start ζ anywhere in the allowed range and bad --out targets: exit 0 with a zeta file
    that holds H only (no name becomes an entry) and the ζ of the plain run (argmin c·f = argmin f;
    the search re-centres until the optimum is reached), or exit 2 with one error line, no SCF
    run and nothing written. (common practice, no source)"""
    import tomllib

    from stobuilder.scf import run as scf_run

    reference = _tune_reference_zeta()
    with tempfile.TemporaryDirectory() as folder:
        inputs = os.path.join(folder, "in")
        os.mkdir(inputs)
        path = os.path.join(inputs, name + ".xyz")
        try:
            with open(path, "w") as handle:
                handle.write(_TUNE_H2)
        except OSError:  # a name the file system refuses (too long in bytes)
            return
        out_dir = os.path.join(folder, "out")
        os.mkdir(out_dir)
        out = {"missing-folder": os.path.join(out_dir, "no", "z.toml"),
               "file-as-folder": os.path.join(inputs, name + ".xyz", "z.toml")}.get(where, os.path.join(out_dir, "z.toml"))
        if where == "existing":
            with open(out, "w") as handle:
                handle.write("# mine\n")
        argv = ["tune", path] + ([path] if where == "twice" else []) + ["--gaussians", "1", "--threads", "1", "--out", out]
        if scale is not None:
            weights = os.path.join(folder, "w.toml")
            with open(weights, "w", encoding="utf-8") as handle:
                handle.write(f"{_toml_key(name + '.xyz')} = {scale!r}\n")
            argv += ["--weights", weights]
        if start is not None:
            argv.append(f"--zeta=H:1s={start!r}")
        scf_runs = {"n": 0}
        real_solve = scf_run.solve_scf

        def counting_solve(*args, **kwargs):
            scf_runs["n"] += 1
            return real_solve(*args, **kwargs)

        with mock.patch.object(scf_run, "solve_scf", counting_solve):
            code, message = _run(argv)
        event(f"tune {where} exit {code}")
        assert "Traceback" not in message
        if where == "plain":
            assert code == 0, (argv, message)
            with open(out, "rb") as handle:
                doc = tomllib.load(handle)
            assert set(doc) == {"H"} and set(doc["H"]) == {"1s"}, doc
            # each search stops within ~1e-4 of the optimum in ln ζ (tests/test_tune_edges.py)
            assert abs(doc["H"]["1s"] - reference) <= 1e-4 * reference, (argv, doc)
        else:
            assert code == 2 and scf_runs["n"] == 0, (argv, message)
            errors = [line for line in message.splitlines() if line.startswith("stobuilder: error: ")]
            assert len(errors) == 1 and message.endswith(errors[0] + "\n"), message
            assert os.listdir(out_dir) == (["z.toml"] if where == "existing" else []), os.listdir(out_dir)


# ---------------------------------------------------------------------------- the calculator's info (issue 21)

info_values = st.one_of(
    st.none(), st.integers(-3, 4), st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
    st.sampled_from(["1", "two", "", "1.0", 10**40]),
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(charge=info_values, spin=info_values, multiplicity=info_values)
def test_calculator_info_changes_give_a_fresh_calculators_answer(charge, spin, multiplicity):
    """issue 21: after a first energy, any change of atoms.info charge/spin/multiplicity gives
    what a new calculator gives for the same atoms: the same energy, or the same InputError;
    never the earlier molecule's energy. (common practice, no source)"""
    from stobuilder import InputError
    from stobuilder.calculator import STOCalculator

    def answer(atoms, calc):
        atoms.calc = calc
        try:
            return atoms.get_potential_energy()
        except InputError as exc:
            assert "\n" not in str(exc)
            return "InputError"

    h2 = molecule("H2")
    calc = STOCalculator(gaussians=2)
    answer(h2, calc)
    for key, value in (("charge", charge), ("spin", spin), ("multiplicity", multiplicity)):
        if value is not None:
            h2.info[key] = value
    got = answer(h2, calc)
    event(f"calculator info {'error' if got == 'InputError' else 'energy'}")
    fresh = answer(h2.copy(), STOCalculator(gaussians=2))
    if "InputError" in (got, fresh):
        assert got == fresh
    else:  # eV; two SCFs converged to 1e-10 hartree agree far closer than this
        assert abs(got - fresh) <= 1e-6
