"""stobuilder bench: agreement with PySCF's stored STO-3G, the experimental column, strict JSON,
the report files, resume after a kill, failed SCFs, bad input; manifest records validated field
by field and recomputed when bad, a manifest that is a symbolic link refused and an output that
is one replaced, never written through; zeta files as libraries; structures given twice; a
molecule or reference basis too big for the memory limit refused before any SCF. The published
outputs themselves: test_bench_report.py.

Outside references: PySCF's stored 'sto-3g' basis (Hehre, Stewart & Pople, J. Chem. Phys. 51,
2657 (1969); PySCF: Sun et al., J. Chem. Phys. 153, 024109 (2020)) run here with PySCF's own
gto.M and SCF drivers, and the G2-1 atomization energies of ase.data.g2_1 (Curtiss,
Raghavachari, Redfern & Pople, J. Chem. Phys. 94, 7221 (1991), as ASE ships them).
A small subset of G2-1 runs here; the whole set is tests/benchmarks/bench_bench.py.
"""

from __future__ import annotations

import concurrent.futures as cf
import csv
import functools
import json
import os
import re
from html.parser import HTMLParser

import pytest
from ase.collections import g2
from ase.build import molecule
from ase.data import g2_1
from ase.io import write

from stobuilder.bench import run as bench
from support import assert_bad_input, assert_one_line_error, child_env, kill_when_done, run_cli, strict_json
from stobuilder.scf import run as scf_run

# Open and closed shells, first and second row, RHF and ROHF (spins from ASE's magnetic moments)
SUBSET = ["CH4", "NH3", "H2O", "HF", "OH", "NH", "O2", "HCl", "SiH3", "PH2", "LiH", "CO"]

# The row layout of --json
ROW_KEYS = ["structure", "formula", "variant", "rule", "gaussians", "norm", "zeta_file", "spin", "energy_hartree",
            "converged", "atomization_kcal_mol", "experiment_atomization_kcal_mol", "reference_energy_hartree",
            "wall_seconds"]

# Ground-state configurations of the free atoms beyond their closed core (Aufbau/Hund's rule, any
# textbook of atomic structure; value from memory): (core s shells, core p shells, valence s, valence p)
ATOMS = {"H": (0, 0, 1, 0), "Li": (1, 0, 1, 0), "C": (1, 0, 2, 2), "N": (1, 0, 2, 3), "O": (1, 0, 2, 4),
         "F": (1, 0, 2, 5), "Si": (2, 1, 2, 2), "P": (2, 1, 2, 3), "Cl": (2, 1, 2, 5)}

HARTREE_KCAL_MOL = 627.509474  # kcal/mol per hartree, CODATA 2018 (value from memory)


@functools.lru_cache(maxsize=None)
def _pyscf_molecule(name):
    """PySCF's own SCF of a G2-1 molecule in its stored STO-3G: RHF closed, ROHF open shell."""
    from pyscf import gto, scf

    atoms = g2[name]
    spin = round(sum(g2_1.data[name]["magmoms"] or [0]))
    mol = gto.M(atom=[[s, tuple(p)] for s, p in zip(atoms.get_chemical_symbols(), atoms.get_positions())],
                basis="sto-3g", spin=spin, unit="Angstrom", verbose=0)
    mf = (scf.RHF if spin == 0 else scf.ROHF)(mol)
    mf.kernel()
    assert mf.converged
    return mf.e_tot


@functools.lru_cache(maxsize=None)
def _pyscf_atom(symbol):
    """PySCF's own ROHF of the free atom in STO-3G, the high-spin determinant of its ground state
    held by atomic symmetry (electrons per real harmonic; any choice of the open p functions gives
    the same energy by rotational symmetry)."""
    from pyscf import gto, scf

    core_s, core_p, val_s, val_p = ATOMS[symbol]
    alpha_p, beta_p = min(val_p, 3), max(val_p - 3, 0)
    s_alpha = core_s + (1 if val_s >= 1 else 0)
    s_beta = core_s + (1 if val_s == 2 else 0)
    occ = {"s+0": (s_alpha, s_beta)}
    for i, m in enumerate(("p+1", "p-1", "p+0")):
        occ[m] = (core_p + (i < alpha_p), core_p + (i < beta_p))
    spin = sum(a - b for a, b in occ.values())  # every atom of ATOMS is an open shell
    mol = gto.M(atom=[[symbol, (0, 0, 0)]], basis="sto-3g", spin=spin, symmetry=True, verbose=0)
    mf = scf.ROHF(mol)
    mf.irrep_nelec = {k: v for k, v in occ.items() if k in mol.irrep_name and sum(v)}
    mf.kernel()
    assert mf.converged
    return mf.e_tot


@pytest.fixture(scope="module")
def sto3g_run(tmp_path_factory):
    """One bench of the subset: --rule molecular --gaussians 3 --reference sto-3g, 2 workers."""
    import contextlib
    import io

    from stobuilder.cli import main

    out = tmp_path_factory.mktemp("bench") / "sto3g"
    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(["bench", "--set", "g2-1", *SUBSET, "--rule", "molecular", "--gaussians", "3",
                     "--reference", "sto-3g", "--out", str(out), "--workers", "2", "--json", "--progress", "off"])
    assert code == 0, stderr.getvalue()
    return out, strict_json(stdout.getvalue())


def test_molecular_sto3g_equals_pyscf_stored_sto3g(sto3g_run):
    # our fits are the exact least-squares optimum of the STO-3G exponents; PySCF's stored
    # STO-3G (Hehre et al. 1969) differs slightly: energies within 5e-5 hartree
    _, doc = sto3g_run
    rows = {r["structure"]: r for r in doc["rows"]}
    assert sorted(rows) == sorted(SUBSET)
    for name in SUBSET:
        row = rows[name]
        assert row["converged"], name
        e_pyscf = _pyscf_molecule(name)
        assert abs(row["energy_hartree"] - e_pyscf) <= 5e-5, (name, row["energy_hartree"] - e_pyscf)
        # the reference column is the same PySCF calculation (default conv_tol 1e-9)
        assert abs(row["reference_energy_hartree"] - e_pyscf) <= 1e-7, name


def test_molecular_sto3g_atomization_equals_pyscf_stored_sto3g(sto3g_run):
    _, doc = sto3g_run
    atoms = {s: _pyscf_atom(s) for s in ATOMS}
    for row in doc["rows"]:
        symbols = g2[row["structure"]].get_chemical_symbols()
        expected = (sum(atoms[s] for s in symbols) - _pyscf_molecule(row["structure"])) * HARTREE_KCAL_MOL
        assert abs(row["atomization_kcal_mol"] - expected) <= 0.05, (row["structure"], row["atomization_kcal_mol"], expected)


def test_experiment_column_is_ase_g2_1(sto3g_run):
    # Curtiss et al. 1991 as ase.data.g2_1 ships them
    _, doc = sto3g_run
    for row in doc["rows"]:
        assert row["experiment_atomization_kcal_mol"] == g2_1.get_atomization_energy(row["structure"])
    assert all(b.experiment_kcal_mol == g2_1.get_atomization_energy(b.name) for b in bench.set_structures("g2-1"))
    assert len(bench.set_structures("g2-1")) == 55  # the 55 molecules of G2-1 (Curtiss et al. 1991)


def test_spins_from_the_set():
    # O2 and NH are triplets, OH a doublet, CH2 in the singlet and triplet named states (ASE's G2-1 data)
    spins = {b.name: b.structure.spin for b in bench.set_structures("g2-1")}
    assert (spins["O2"], spins["NH"], spins["OH"], spins["CH4"]) == (2, 2, 1, 0)
    assert (spins["CH2_s1A1d"], spins["CH2_s3B1d"]) == (0, 2)


def test_json_layout_and_files(sto3g_run):
    out, doc = sto3g_run
    assert list(doc) == ["variants", "rows", "summary", "free_atoms", "hartree_to_kcal_mol", "files"]
    for row in doc["rows"]:
        assert list(row) == ROW_KEYS
    assert [v["label"] for v in doc["variants"]] == ["molecular N=3 l2"]
    (summary,) = doc["summary"]
    assert summary["failed"] == 0 and summary["structures"] == len(SUBSET)
    # the summary means are means of the rows (common practice, no source)
    errors = [abs(r["atomization_kcal_mol"] - r["experiment_atomization_kcal_mol"]) for r in doc["rows"]]
    assert summary["mean_abs_atomization_error_kcal_mol"] == pytest.approx(sum(errors) / len(errors), rel=1e-12)
    # minimal-basis HF atomization energies are far from experiment (tens of kcal/mol on average)
    assert summary["mean_abs_atomization_error_kcal_mol"] > 10
    assert strict_json((out / "bench.json").read_text()) == doc
    for name in ("bench.tsv", "free_atoms.tsv", "bench.json", "report.html", "energy_error.png", "atomization.png"):
        assert (out / name).is_file(), name
    assert set(doc["files"]) == {"tsv", "atoms_tsv", "json", "report", "energy_plot", "atomization_plot"}


def test_tsv_one_row_per_structure_and_variant(sto3g_run):
    out, doc = sto3g_run
    with open(out / "bench.tsv", newline="") as handle:
        table = list(csv.DictReader(handle, delimiter="\t"))
    assert [r["structure"] for r in table] == [r["structure"] for r in doc["rows"]]
    for t, r in zip(table, doc["rows"]):
        assert float(t["energy_hartree"]) == r["energy_hartree"]
        assert float(t["experiment_atomization_kcal_mol"]) == r["experiment_atomization_kcal_mol"]
        assert t["converged"] == "yes" and t["error"] == ""
        assert t["method"] == ("RHF" if r["spin"] == 0 else "ROHF")


class _Images(HTMLParser):
    def __init__(self):
        super().__init__()
        self.sources = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.sources.append(dict(attrs)["src"])


def _embedded(page):
    """The PNG bytes of the page's images, which must all be data: URIs (RFC 2397)."""
    import base64

    parser = _Images()
    parser.feed(page)
    out = []
    for src in parser.sources:
        assert src.startswith("data:image/png;base64,"), src[:60]
        out.append(base64.b64decode(src.split(",", 1)[1], validate=True))
    return out


def test_report_is_self_contained_and_embeds_the_pngs(sto3g_run):
    # the page alone shows its plots: each image is the PNG file beside it, embedded
    out, _ = sto3g_run
    page = (out / "report.html").read_text(encoding="utf-8")
    images = _embedded(page)
    assert images == [(out / "energy_error.png").read_bytes(), (out / "atomization.png").read_bytes()]
    for png in images:
        assert png[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, W3C 2003)
    assert "tens to hundreds of kcal/mol" in page and "does not validate" in page  # the cautions
    assert "<script" not in page and "http" not in page.replace("https://", "")  # nothing fetched
    assert "src=\"energy_error.png\"" not in page


def _manifest(out):
    return (out / bench.MANIFEST_NAME).read_text().splitlines()


def _counts(stdout):
    m = re.search(r"(\d+) calculations: (\d+) computed, (\d+) taken from the manifest, (\d+) failed", stdout)
    return tuple(int(x) for x in m.groups())


def test_resume_after_a_kill(tmp_path, capsys):
    out = tmp_path / "run"
    argv = ["bench", "--set", "g2-1", "CH4", "H2O", "OH", "--rule", "molecular", "--rule", "slater",
            "--out", str(out), "--workers", "2", "--progress", "off"]
    code, stdout, err = run_cli(argv, capsys)
    assert code == 0, err
    # 3 elements × 2 variants free atoms (once per element and variant, never per molecule) + 3 × 2 molecules
    assert _counts(stdout) == (12, 12, 0, 0)
    lines = _manifest(out)
    assert sum(json.loads(x)["task"].startswith("atom|") for x in lines) == 6
    first = {name: (out / name).read_bytes() for name in ("bench.tsv", "free_atoms.tsv", "bench.json", "report.html",
                                                          "energy_error.png", "atomization.png")}
    # nothing to do: every calculation comes from the manifest, every file byte for byte the same
    code, stdout, err = run_cli(argv, capsys)
    assert code == 0 and _counts(stdout) == (12, 0, 12, 0)
    assert all((out / name).read_bytes() == data for name, data in first.items())
    # a kill: five records survived, the sixth was cut while being appended, the outputs never written
    (out / bench.MANIFEST_NAME).write_text("\n".join(lines[:5]) + "\n" + lines[5][:40])
    for name in first:
        (out / name).unlink()
    code, stdout, err = run_cli(argv, capsys)
    assert code == 0, err
    assert _counts(stdout) == (12, 7, 5, 0)
    again = strict_json((out / "bench.json").read_text())
    before = strict_json(first["bench.json"].decode())
    for a, b in zip(again["rows"], before["rows"]):
        assert a["structure"] == b["structure"] and a["variant"] == b["variant"]
        assert a["energy_hartree"] == pytest.approx(b["energy_hartree"], abs=1e-9)
    # --force recomputes everything
    code, stdout, err = run_cli(argv + ["--force"], capsys)
    assert code == 0 and _counts(stdout)[1] == 12


def test_failed_scf_is_a_failed_row_and_exit_1(tmp_path, capsys, monkeypatch, threads):
    # the calculations run in this process (a one-thread pool), so the fault can be injected
    from stobuilder.checks import structure as checks

    real = scf_run.solve_scf

    def failing(mol, method, *args, **kwargs):
        mf, iterations = real(mol, method, *args, **kwargs)
        if mol.natm == 3:  # water
            mf.converged = False
        return mf, iterations

    monkeypatch.setattr(scf_run, "solve_scf", failing)
    out = tmp_path / "run"
    argv = ["bench", "--set", "g2-1", "CH4", "H2O", "--rule", "molecular", "--out", str(out), "--progress", "off"]
    code, stdout, err = run_cli(argv + ["--json"], capsys)
    assert code == 1, err
    doc = strict_json(stdout)
    rows = {r["structure"]: r for r in doc["rows"]}
    assert rows["H2O"]["converged"] is False and rows["H2O"]["atomization_kcal_mol"] is None
    assert rows["CH4"]["converged"] is True and rows["CH4"]["atomization_kcal_mol"] is not None
    assert doc["summary"][0]["failed"] == 1
    page = (out / "report.html").read_text()
    assert "H2O (molecular N=3 l2): SCF not converged" in page
    # the next run recomputes only the failed calculation
    monkeypatch.setattr(scf_run, "solve_scf", real)
    code, stdout, err = run_cli(argv, capsys)
    assert code == 0, err
    assert _counts(stdout) == (5, 1, 4, 0)


def test_list_sets(capsys):
    code, stdout, _ = run_cli(["bench", "--list-sets"], capsys)
    assert code == 0 and stdout.startswith("g2-1") and "55 molecules" in stdout


def test_variants_product_and_zeta_files(tmp_path):
    zeta = tmp_path / "h.toml"
    zeta.write_text("[H]\n1s = 1.2\n")
    variants = bench.make_variants(["molecular", "slater"], [3, 6], ["l2"], [str(zeta)])
    assert [v.label for v in variants] == [
        "molecular N=3 l2", "molecular N=6 l2", "slater N=3 l2", "slater N=6 l2",
        "molecular N=3 l2 +h.toml", "molecular N=6 l2 +h.toml", "slater N=3 l2 +h.toml", "slater N=6 l2 +h.toml"]
    last = variants[-1].options
    assert last.spec_for(["H"]).zeta.as_dict() == {"H": {"1s": 1.2}} and not last.basis.zeta  # a library


def _bad_zeta(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text("[C]\n3d = 1.0\n")
    return str(path)


@pytest.mark.parametrize("args, words", [
    (["--set", "nope"], "unknown set"),
    (["--set", "g2-1", "XYZ"], "not a molecule of set g2-1"),
    (["--set", "g2-1", "CH4", "--reference", "cc-pcvdz"], "no such basis for H"),  # PySCF's cc-pCVDZ has no H
    (["--set", "g2-1", "CH4", "--reference", "no-such-basis"], "no such basis"),
    (["--set", "g2-1", "CH4", "--gaussians", "13"], "--gaussians"),
    (["--set", "g2-1", "CH4", "--rule", "nosuch"], "nosuch"),
    (["missing.xyz"], "missing.xyz"),
    (["--set", "g2-1", "CH4", "--zeta-file", "BAD"], "3d"),
    (["--set", "g2-1", "CH4", "--scheduler", "not an address"], "--scheduler"),
])
def test_bad_input_one_line_nothing_written(tmp_path, capsys, args, words):
    out = tmp_path / "out"
    args = [_bad_zeta(tmp_path) if a == "BAD" else a for a in args]
    code, stdout, err = run_cli(["bench", *args, "--out", str(out)], capsys)
    assert_one_line_error(code, err)
    assert words in err
    assert not out.exists()


def test_no_out_is_an_error(capsys):
    code, _, err = run_cli(["bench", "--set", "g2-1", "CH4"], capsys)
    assert_one_line_error(code, err)
    assert "--out" in err


def test_set_geometries_are_ase_collections_g2():
    # the bench reads the G2-1 geometries from ase.data.g2_1; they are those of ase.collections.g2
    import numpy as np

    for b in bench.set_structures("g2-1"):
        atoms = g2[b.name]
        assert b.structure.symbols == tuple(atoms.get_chemical_symbols())
        assert np.array_equal(np.array(b.structure.positions), atoms.get_positions())


def test_structure_files_on_a_callers_executor(tmp_path):
    # structure files (no experiment, no reference): the energy plot only; any
    # concurrent.futures Executor runs the calculations (here threads of this process)
    from ase.io import write

    path = tmp_path / "water.xyz"
    write(path, g2["H2O"], format="xyz")
    structures = bench.select_structures([str(path)], None)
    assert [b.name for b in structures] == [str(path)] and structures[0].experiment_kcal_mol is None
    plan = bench.plan(structures, bench.make_variants(["molecular"], [3], ["l2"]))
    with cf.ThreadPoolExecutor(1) as pool:
        result = bench.run_bench(plan, str(tmp_path / "out"), executor=pool)
    assert (result.computed, result.resumed, result.exit_status) == (3, 0, 0)  # H, O, water
    (row,) = result.rows
    assert row.experiment_atomization_kcal_mol is None and row.atomization_kcal_mol is not None
    # the same water as in the set: the same energy (same geometry, same basis, same SCF)
    with cf.ThreadPoolExecutor(1) as pool:
        (set_row,) = bench.run_bench(bench.plan(bench.set_structures("g2-1", ["H2O"]), plan.variants),
                                     str(tmp_path / "set"), executor=pool).rows
    assert row.energy_hartree == pytest.approx(set_row.energy_hartree, abs=1e-9)
    # one variant, no reference, no experiment: neither plot (an energy panel would be zero
    # everywhere), and the page says why
    page = (tmp_path / "out" / "report.html").read_text()
    assert _embedded(page) == []
    assert "No energy plot" in page and "No atomization plot" in page
    assert not (tmp_path / "out" / "atomization.png").exists() and not (tmp_path / "out" / "energy_error.png").exists()
    files = strict_json((tmp_path / "out" / "bench.json").read_text())["files"]
    assert "atomization_plot" not in files and "energy_plot" not in files


@pytest.mark.slow
def test_dask_executor_and_resume_across_engines(tmp_path):
    # the same bench on a Dask cluster (in-process workers, distributed's own scheduler), then
    # resumed on a thread pool: nothing is computed twice
    distributed = pytest.importorskip("distributed")
    plan = bench.plan(bench.set_structures("g2-1", ["HF", "LiH"]), bench.make_variants(["slater"], [3], ["l2"]))
    out = str(tmp_path / "out")
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=None) as client:
        first = bench.run_bench(plan, out, executor=client.get_executor(pure=False))
    assert (first.computed, first.resumed, first.exit_status) == (5, 0, 0)  # H, Li, F, HF, LiH
    with cf.ThreadPoolExecutor(1) as pool:
        again = bench.run_bench(plan, out, executor=pool)
    assert (again.computed, again.resumed) == (0, 5)
    assert [r.energy_hartree for r in again.rows] == [r.energy_hartree for r in first.rows]


@pytest.mark.slow
def test_a_killed_bench_resumes_without_recomputing(tmp_path):
    # A real kill (SIGKILL of the bench and its worker at once, mid-run): the calculations the
    # manifest recorded are not computed again, the rest are, and the outputs come out whole.
    # (common practice, no source)
    import subprocess
    import sys

    env = child_env()
    out = tmp_path / "run"
    manifest = out / bench.MANIFEST_NAME
    names = list(g2_1.molecule_names)[:30]
    command = [sys.executable, "-m", "stobuilder.cli", "bench", "--set", "g2-1", *names, "--rule", "molecular",
               "--gaussians", "6", "--out", str(out), "--workers", "1", "--progress", "off"]
    kill_when_done(command, tmp_path, env, manifest, 5)
    assert not (out / "bench.json").exists()  # killed before the end: no report yet
    survived = sum(1 for line in manifest.read_text().splitlines() if '"status": "done"' in line and line.endswith("}"))
    rerun = subprocess.run(command, cwd=str(tmp_path), env=env, capture_output=True, text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    total, computed, taken, failed = _counts(rerun.stdout)
    assert failed == 0 and taken >= 5
    assert taken == survived and computed == total - survived
    doc = strict_json((out / "bench.json").read_text())
    assert len(doc["rows"]) == len(names) and all(r["converged"] for r in doc["rows"])


# ---------------------------------------------------------------------------- the size guard


def test_bench_refuses_a_molecule_too_big_for_memory_before_any_scf(big, tmp_path, capsys, no_scf, threads,
                                                                     monkeypatch):
    # the bug: bench tried to allocate 60 GiB; the same estimate as relax and tune (test_checks.py)
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    out = tmp_path / "out"
    code, _, err = run_cli(["bench", str(big), "--out", str(out), "--progress", "off"], capsys)
    assert_bad_input(code, err, out, str(big), "5000 basis functions", "8,250 MB", "4,000 MB", "STOBUILDER_MAX_MEMORY")


def test_bench_refuses_a_reference_basis_too_big_for_memory_before_any_scf(tmp_path, capsys, no_scf, threads,
                                                                           monkeypatch):
    # CH4 in cc-pVTZ: C 4s3p2d1f = 30 and H 3s2p1d = 14 spherical functions (Dunning, J. Chem. Phys. 90,
    # 1007 (1989); value from memory), 86 in all: its integrals, 86⁴/1e6 = 54.7 MB, do not fit in
    # 0.95 × 20 MB, so direct SCF, 250 MB of buffers + 40·8·86² bytes (stobuilder.checks.structure.scf_size);
    # the minimal basis, 9 functions, fits (about 0.03 MB)
    from stobuilder.scf.size import scf_size

    monkeypatch.setenv("STOBUILDER_MAX_MEMORY", "20")
    expected = scf_size(86, "RHF", 20.0)
    assert not expected.incore
    out = tmp_path / "out"
    code, _, err = run_cli(["bench", "--set", "g2-1", "CH4", "--reference", "cc-pvtz", "--out", str(out), "--progress", "off"],
                       capsys)
    assert_bad_input(code, err, out, "CH4 in cc-pvtz", "86 basis functions", f"about {expected.memory_mb:,.0f} MB",
                     "limit of 20 MB", "STOBUILDER_MAX_MEMORY")
    assert scf_size(9, "RHF", 20.0).fits



# ---------------------------------------------------------------------------- manifest records


def _bench(tmp_path, capsys, *args, out="out"):
    return run_cli(["bench", *args, "--out", str(tmp_path / out), "--progress", "off"], capsys)


def _nan(record):
    record["result"]["energy_hartree"] = float("nan")


def _true_energy(record):
    record["result"]["energy_hartree"] = True  # would be used as 1.0 hartree


def _set(key, value):
    def change(record):
        record["result"][key] = value

    return change


def _top(key, value):
    def change(record):
        record[key] = value

    return change


def _not_converged_but_done(record):
    record["result"]["converged"] = False


FAULTS = {
    "energy NaN": ("molecule", _nan),
    "energy true": ("molecule", _true_energy),
    "atom energy true": ("atom", _true_energy),
    "converged 'yes'": ("molecule", _set("converged", "yes")),
    "wall_seconds 'abc'": ("molecule", _set("wall_seconds", "abc")),
    "wall_seconds negative": ("molecule", _set("wall_seconds", -1.0)),
    "iterations 2.5": ("molecule", _set("iterations", 2.5)),
    "iterations true": ("molecule", _set("iterations", True)),
    "method 3": ("molecule", _set("method", 3)),
    "error 5": ("molecule", _set("error", 5)),
    "unknown result key": ("molecule", _set("surprise", 1)),
    "unknown record key": ("molecule", _top("surprise", 1)),
    "no finished_utc": ("molecule", lambda r: r.pop("finished_utc")),
    "done but not converged": ("molecule", _not_converged_but_done),
}


@pytest.mark.parametrize("fault", list(FAULTS))
def test_a_record_with_bad_values_is_reported_and_recomputed(tmp_path, capsys, threads, fault):
    # LiH: free atoms H and Li, the molecule: 3 calculations
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    first = strict_json((tmp_path / "out" / "bench.json").read_text())
    path = tmp_path / "out" / bench.MANIFEST_NAME
    lines = path.read_text().splitlines()
    kind, change = FAULTS[fault]
    (number, record), = [(i, json.loads(x)) for i, x in enumerate(lines) if json.loads(x)["task"].startswith(kind + "|")
                         and json.loads(x)["task"].endswith("|Li" if kind == "atom" else "|LiH")]
    change(record)
    lines[number] = json.dumps(record)  # NaN written as NaN, as a tampered or foreign line could hold
    path.write_text("\n".join(lines) + "\n")
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    assert _counts(stdout) == (3, 1, 2, 0)  # only the bad record's calculation again
    notes = [x for x in err.splitlines() if "unusable" in x]
    assert len(notes) == 1 and f"line {number + 1}:" in notes[0], err
    again = strict_json((tmp_path / "out" / "bench.json").read_text())
    assert again["rows"][0]["energy_hartree"] == pytest.approx(first["rows"][0]["energy_hartree"], abs=1e-9)
    assert again["rows"][0]["atomization_kcal_mol"] == pytest.approx(first["rows"][0]["atomization_kcal_mol"], abs=1e-6)
    # and the run after that computes nothing (the bad line stays in the file and is noted again,
    # as any unusable line is, until --force starts a fresh manifest)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0 and _counts(stdout) == (3, 0, 3, 0)



# ---------------------------------------------------------------------------- symbolic links


def test_a_bench_manifest_that_is_a_symbolic_link_is_refused(tmp_path, capsys, threads):
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / bench.MANIFEST_NAME).symlink_to(outside)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert_one_line_error(code, err)
    assert "symbolic link" in err and bench.MANIFEST_NAME in err
    assert outside.read_text() == "not yours\n"
    assert sorted(os.listdir(out)) == [bench.MANIFEST_NAME]  # nothing computed, nothing written


def test_an_output_that_is_a_symbolic_link_is_replaced_not_written_through(tmp_path, capsys, threads):
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    tsv = tmp_path / "out" / "bench.tsv"
    text = tsv.read_text()
    tsv.unlink()
    tsv.symlink_to(outside)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    assert outside.read_text() == "not yours\n"
    assert not tsv.is_symlink() and tsv.read_text() == text



# ---------------------------------------------------------------------------- zeta files


def test_a_zeta_file_naming_no_element_of_the_structures_is_refused(tmp_path, capsys, threads):
    zeta = tmp_path / "helium.toml"
    zeta.write_text("[He]\n1s = 1.6875\n")  # 27/16, He's variational ζ (Zener 1930; value from memory)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert str(zeta) in err and "names none of the structures' elements" in err and "He" in err
    assert not (tmp_path / "out").exists()


def test_a_bench_zeta_file_takes_the_rule_and_words_of_every_door(tmp_path, capsys):
    # the rule of build, relax, tune and batch (pipeline.check_zeta_elements): the command line
    # names the flag, the Python door its argument; a file with no ζ in it is refused as well
    from stobuilder.pipeline.options import OptionError

    zeta = tmp_path / "helium.toml"
    zeta.write_text("[He]\n1s = 1.6875\n")  # 27/16, He's variational ζ (Zener 1930; value from memory)
    code, _, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert err.startswith(f"stobuilder: error: --zeta-file {zeta}: it names none of the structures' elements"), err
    structures = bench.set_structures("g2-1", ["LiH"])
    with pytest.raises(OptionError, match=f"^zeta_file {re.escape(str(zeta))}: it names none"):
        bench.plan(structures, bench.make_variants(["slater"], [3], ["l2"], [str(zeta)]))
    zeta.write_text("[H]\n")
    code, _, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert f"--zeta-file {zeta}: it gives no ζ" in err
    assert not (tmp_path / "out").exists()


def test_a_zeta_file_is_a_library(tmp_path, capsys, threads):
    # [H] applies to LiH's H; [He] is unused, and editing it changes nothing: nothing recomputed
    zeta = tmp_path / "lib.toml"
    zeta.write_text("[H]\n1s = 1.24\n[He]\n1s = 1.6875\n")
    args = ["--set", "g2-1", "LiH", "--zeta-file", str(zeta), "--json"]
    code, stdout, err = _bench(tmp_path, capsys, *args)
    assert code == 0, err
    rows = {r["variant"]: r for r in strict_json(stdout[:stdout.rindex("}") + 1])["rows"]}
    assert rows["slater N=3 l2"]["energy_hartree"] != rows["slater N=3 l2 +lib.toml"]["energy_hartree"]
    zeta.write_text("[H]\n1s = 1.24\n[He]\n1s = 1.7\n")
    code, stdout, err = _bench(tmp_path, capsys, *args[:-1])
    assert code == 0 and _counts(stdout) == (6, 0, 6, 0), stdout



# ---------------------------------------------------------------------------- given twice


def test_a_structure_file_given_twice_is_refused(tmp_path, capsys, threads, monkeypatch):
    write(tmp_path / "lih.xyz", molecule("LiH"))
    monkeypatch.chdir(tmp_path)
    for twice in (["lih.xyz", "lih.xyz"], ["lih.xyz", "./lih.xyz"], ["lih.xyz", str(tmp_path / "lih.xyz")]):
        code, stdout, err = _bench(tmp_path, capsys, *twice)
        assert_one_line_error(code, err)
        assert "given twice" in err
    assert not (tmp_path / "out").exists()


def test_a_set_molecule_given_twice_is_refused(tmp_path, capsys, threads):
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "CH4", "LiH")
    assert_one_line_error(code, err)
    assert "'LiH'" in err and "given twice" in err
    assert not (tmp_path / "out").exists()

