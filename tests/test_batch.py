"""Batch runs: discovery, the manifest, resume, failures, a local process pool against a Dask
LocalCluster (loopback), a killed Dask worker, a killed batch process, the Snakemake workflow.

Real engines throughout: ASE reads the files, PySCF runs the checks, Dask and Snakemake run the
jobs. Structures are made from ASE's G2 collection (ase.collections.g2: Curtiss et al., J. Chem.
Phys. 106, 1063, 1997, as ASE ships them), perturbed by a seeded random displacement.
Budget: about 60-90 s on 2 cores, most of it Dask and Snakemake start-up.

Robustness: only regular files are inputs, the manifest reader skips and reports bad lines and
checks every field of a record, a manifest that is a symbolic link is refused, ``--force`` starts
a fresh manifest and keeps the old one, our own outputs are never inputs, workers are capped at
the cores and die with their parent, scheduler addresses are checked before anything starts, and
a zeta file applies where its elements occur. Facts relied on: opening a FIFO for reading blocks
until a writer opens it (POSIX open(2)); an orphaned process is re-parented, so its getppid()
changes (POSIX _exit(2)); a SIGKILLed process runs no clean-up code (signal(7)): common practice,
no source.
"""

from __future__ import annotations

import concurrent.futures as cf
import csv
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from ase.build import molecule
from ase.collections import g2
from ase.io import write

from stobuilder import batch
from stobuilder.batch import discover, read_manifest, run_batch
from stobuilder.cli import main
from stobuilder.core.errors import InputError
from stobuilder.pipeline.options import BuildOptions
from stobuilder.core.files import sha256_text
from stobuilder.core.limits import one_line
from stobuilder.pipeline.path import build_structures
from support import ROOT, assert_one_line_error, child_env, kill_when_done, run_cli
from stobuilder.jobs import executors
from stobuilder.jobs import progress as jobs_progress
from stobuilder.jobs import manifest as jobs_manifest

EXAMPLES = ROOT / "examples" / "structures"
# Closed-shell G2 molecules of 7 or more atoms: their SCF checks take a noticeable fraction of a
# second each, which the interrupt test needs to stop a batch part-way.
SLOW_CHECKS = ["C2H6", "C3H8", "C3H9N", "C4H4O", "C4H4S", "C5H5N", "C6H6", "CH3CH2OH", "CH3CH2SH",
               "CH2SCH2", "C3H7Cl", "C2H6SO"]


def make_library(folder: Path, names, seed: int = 20240601, split: bool = True) -> list[Path]:
    """Perturbed G2 molecules as xyz files; with ``split``, half in set_a/ and half in set_b/,
    with the same file names in both folders (the output names must stay apart)."""
    rng = np.random.default_rng(seed)
    paths = []
    for i, name in enumerate(names):
        atoms = g2[name].copy()
        atoms.positions = atoms.positions + rng.normal(scale=0.02, size=atoms.positions.shape)
        sub = folder / (("set_a" if i % 2 == 0 else "set_b") if split else "")
        sub.mkdir(parents=True, exist_ok=True)
        path = sub / f"mol_{i // 2 if split else i:02d}.xyz"
        write(path, atoms, format="xyz")
        paths.append(path)
    return paths


def comparable(record: dict) -> dict:
    """A manifest record without what legitimately differs between runs: timings, the worker,
    and the wall time of each SCF."""
    out = {k: v for k, v in record.items() if k not in ("timings", "worker")}
    out["checks"] = [_no_wall(c) for c in record["checks"]]
    return out


def _no_wall(check: dict) -> dict:
    check = {k: v for k, v in check.items() if k != "wall_seconds"}
    if "atoms" in check:
        check["atoms"] = [{k: v for k, v in a.items() if k != "wall_seconds"} for a in check["atoms"]]
    return check


def records(out_dir) -> list[dict]:
    """Every record of the manifest, in order (a torn last line of a killed run left out)."""
    text = (Path(out_dir) / batch.MANIFEST_NAME).read_text()
    complete = text[: text.rfind("\n") + 1]
    return [json.loads(line) for line in complete.splitlines() if line.strip()]


def output_files(out_dir) -> dict[str, bytes]:
    out_dir = Path(out_dir)
    return {
        str(p.relative_to(out_dir)): p.read_bytes()
        for p in sorted(out_dir.rglob("*"))
        if p.is_file() and p.name != batch.MANIFEST_NAME
    }


# ---------------------------------------------------------------------------- discovery


def test_discovery_by_ase_extensions_lists_and_mirrored_names(tmp_path):
    lib = tmp_path / "lib"
    make_library(lib, ["H2O", "NH3", "CH4", "HCl"])
    (lib / "README.md").write_text("# notes\n")  # Markdown is skipped in folders
    (lib / ".hidden.xyz").write_text("1\n\nH 0 0 0\n")
    (lib / "notes.txt").write_text("not a structure\n")
    vasp = lib / "set_b" / "deep"
    vasp.mkdir()
    water = g2["H2O"].copy()
    water.set_cell([10.0, 10.0, 10.0])
    write(vasp / "POSCAR", water, format="vasp")  # ASE's file-name pattern, no extension
    items = discover([str(lib)])
    assert [i.name for i in items] == [
        "set_a/mol_00", "set_a/mol_01", "set_b/deep/POSCAR", "set_b/mol_00", "set_b/mol_01"
    ]
    assert all(os.path.isabs(i.path) for i in items)
    # the same files through a list file (relative to the list's folder), one listed twice
    listing = tmp_path / "inputs.list"
    listing.write_text("# my structures\nlib/set_a/mol_00.xyz\n\nlib/set_b/mol_00.xyz\nlib/set_a/mol_00.xyz\n")
    listed = discover([f"@{listing}"])
    assert [i.name for i in listed] == ["set_a/mol_00", "set_b/mol_00"]
    # a file given directly is read whatever its extension, and named by its stem
    assert [i.name for i in discover([str(lib / "notes.txt")])] == ["notes"]
    assert "xyz" in batch.structure_extensions() and "extxyz" in batch.structure_extensions()
    assert "cif" in batch.structure_extensions() and "md" not in batch.structure_extensions()


def test_discovery_errors(tmp_path):
    write(tmp_path / "a.xyz", g2["H2O"])
    write(tmp_path / "a.cif", g2["H2O"], format="cif")
    with pytest.raises(InputError, match="would both be named 'a'"):
        discover([str(tmp_path)])
    with pytest.raises(InputError, match="no such file or folder"):
        discover([str(tmp_path / "missing")])
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputError, match="no structure files found"):
        discover([str(empty)])
    with pytest.raises(InputError, match="cannot read the list file"):
        discover([f"@{tmp_path / 'nolist.txt'}"])


def test_output_folder_is_skipped_when_inside_the_input(tmp_path):
    make_library(tmp_path, ["H2O", "NH3"], split=False)
    out = tmp_path / "out"
    summary = run_batch(discover([str(tmp_path)], exclude=str(out)), BuildOptions(codes=("nwchem", "pyscf")),
                        str(out), executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed) == (2, 0)
    # the written .py files (pyscf format) in out/ are not taken as inputs on the re-run
    assert [i.name for i in discover([str(tmp_path)], exclude=str(out))] == ["mol_00", "mol_01"]


# ---------------------------------------------------------------------------- results and resume


def test_batch_files_equal_build_output_byte_for_byte(tmp_path):
    """The batch writes exactly what `build` writes (same names at the top level, same bytes);
    a single-atom ion gets its ion basis, not the neutral atom's."""
    src = tmp_path / "src"
    shutil.copytree(EXAMPLES, src)
    (src / "sodium_ion.extxyz").write_text('1\ncharge=1 pbc="F F F"\nNa 0.0 0.0 0.0\n')
    (src / "sodium_atom.xyz").write_text("1\n\nNa 0.0 0.0 0.0\n")
    codes = ("nwchem", "gaussian", "pyscf")
    summary = run_batch(discover([str(src)]), BuildOptions(codes=codes), str(tmp_path / "batch"),
                        executor=cf.ThreadPoolExecutor(2))
    assert (summary.total, summary.done, summary.failed) == (10, 10, 0)
    build_structures(sorted(str(p) for p in src.iterdir()), codes=codes, out_dir=str(tmp_path / "build"))
    assert output_files(tmp_path / "batch") == output_files(tmp_path / "build")
    ion = (tmp_path / "batch" / "sodium_ion.nw").read_text()
    atom = (tmp_path / "batch" / "sodium_atom.nw").read_text()
    assert ion != atom  # Na+ has no 3s shell (Slater 1930: the ion's configuration [Ne])
    for record in records(tmp_path / "batch"):
        for code, entry in record["files"].items():
            text = (tmp_path / "batch" / entry["path"]).read_text()
            assert sha256_text(text) == entry["sha256"]


def test_one_basis_construction_per_element_set(tmp_path, monkeypatch):
    """Items with the same element set and options share one basis (``builder.basis_of``, the one
    basis cache) and one text (the worker's cache)."""
    import stobuilder.builder.construct as construct

    calls = []
    real = construct.build_basis
    monkeypatch.setattr(construct, "build_basis", lambda *a, **k: calls.append(a[0]) or real(*a, **k))
    monkeypatch.setattr(batch, "_PREPARE_CACHE", {})
    paths = make_library(tmp_path, ["C2H6", "C3H8", "CH4", "H2O", "C2H6"], split=False)
    options = BuildOptions()
    outcomes = [batch.run_item(batch.Task(batch.BatchItem(str(p), p.stem), options)) for p in paths]
    assert all(o.error is None for o in outcomes)
    assert calls == [("H", "C"), ("H", "O")]  # C2H6, C3H8, CH4 and C2H6 share H+C
    assert outcomes[0].texts[0][2] == outcomes[1].texts[0][2]  # one text for C2H6 and C3H8
    assert outcomes[0].texts[0][2] is outcomes[4].texts[0][2]  # the same object: made once


def test_resume_redoes_exactly_what_changed(tmp_path):
    paths = make_library(tmp_path / "in", ["H2O", "NH3", "CH4", "HCl", "CO"], split=False)
    out = tmp_path / "out"
    items = discover([str(tmp_path / "in")])
    pool = cf.ThreadPoolExecutor(2)
    first = run_batch(items, BuildOptions(), str(out), executor=pool)
    assert (first.done, first.skipped) == (5, 0)
    again = run_batch(items, BuildOptions(), str(out), executor=pool)
    assert (again.done, again.skipped) == (0, 5)
    # change one input, delete one output, tamper with another
    write(paths[0], g2["H2O"], format="xyz")
    (out / "mol_01.nw").unlink()
    (out / "mol_02.nw").write_text("edited by hand\n")
    third = run_batch(items, BuildOptions(), str(out), executor=pool)
    assert (third.done, third.skipped, third.failed) == (3, 2, 0)
    last = read_manifest(str(out / batch.MANIFEST_NAME))
    assert {Path(p).name: r["status"] for p, r in last.items()} == {
        "mol_00.xyz": "done", "mol_01.xyz": "done", "mol_02.xyz": "done", "mol_03.xyz": "skipped", "mol_04.xyz": "skipped"
    }
    # other options: everything again; a torn last line (a killed append) is ignored
    with open(out / batch.MANIFEST_NAME, "a") as handle:
        handle.write('{"input": "/x", "sta')
    fourth = run_batch(items, BuildOptions(gaussians=4), str(out), executor=pool)
    assert (fourth.done, fourth.skipped) == (5, 0)
    assert len(records(out)) == 5 + 5 + 5 + 5
    assert run_batch(items, BuildOptions(gaussians=4), str(out), executor=pool).skipped == 5


def test_a_folder_of_foreign_files_is_not_overwritten_without_force(tmp_path):
    make_library(tmp_path / "in", ["H2O"], split=False)
    out = tmp_path / "out"
    out.mkdir()
    (out / "mine.txt").write_text("keep me\n")
    items = discover([str(tmp_path / "in")])
    with pytest.raises(InputError, match="no batch manifest; use --force"):
        run_batch(items, BuildOptions(), str(out), executor=cf.ThreadPoolExecutor(1))
    assert run_batch(items, BuildOptions(), str(out), executor=cf.ThreadPoolExecutor(1), force=True).done == 1


def test_mixed_bad_input_fails_item_by_item_with_exit_status_1(tmp_path, capsys):
    src = tmp_path / "src"
    make_library(src, ["CH4", "C2H6", "C2H2"], split=False)  # H and C: in the molecular rule
    (src / "empty.xyz").write_text("")
    (src / "garbage.xyz").write_text("this is not\na structure file\n")
    (src / "xenon.xyz").write_text("1\n\nXe 0.0 0.0 0.0\n")  # Xe is beyond the molecular rule (H–I)
    status = main(["batch", str(src), "--out", str(tmp_path / "out"), "--rule", "molecular",
                   "--workers", "1", "--progress", "off"])
    assert status == 1
    last = read_manifest(str(tmp_path / "out" / batch.MANIFEST_NAME))
    by_name = {Path(p).name: r for p, r in last.items()}
    assert len(by_name) == 6
    assert {n for n, r in by_name.items() if r["status"] == "done"} == {"mol_00.xyz", "mol_01.xyz", "mol_02.xyz"}
    assert "the file is empty" in by_name["empty.xyz"]["error"]
    assert "not a structure file ASE can read" in by_name["garbage.xyz"]["error"]
    assert "molecular rule has no exponents for Xe" in by_name["xenon.xyz"]["error"]
    for name in ("empty.xyz", "garbage.xyz", "xenon.xyz"):
        record = by_name[name]
        assert record["status"] == "failed" and record["files"] == {}
        assert record["error"].startswith(str(src / name))
        assert "\n" not in record["error"]
    out = capsys.readouterr().out
    assert "6 structures: 3 done, 0 skipped (up to date), 3 failed" in out
    assert out.count("failed: ") == 3
    assert not (tmp_path / "out" / "xenon.nw").exists()


def test_an_unconverged_scf_fails_the_item_and_writes_nothing(tmp_path, monkeypatch):
    """SCF not converged is a failed item (recorded with its check), not a stopped batch, and its
    files are not written (checks run before files are written: the contract of build and batch).
    The non-convergence is injected: PySCF converges these small molecules."""
    import stobuilder.checks.structure as checks

    real = checks.check_structure

    def unconverged_for_water(structure, basis, method="auto"):
        result = real(structure, basis, method=method)
        if structure.formula != "H2O":
            return result
        (scf,) = result.results
        return checks.Check(result.target, result.reason, (replace(scf, converged=False),))

    monkeypatch.setattr(checks, "check_structure", unconverged_for_water)
    make_library(tmp_path / "in", ["H2O", "NH3"], split=False)
    summary = run_batch(discover([str(tmp_path / "in")]), BuildOptions(check=True), str(tmp_path / "out"),
                        executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed, summary.exit_status) == (1, 1, 1)
    last = {Path(p).name: r for p, r in read_manifest(str(tmp_path / "out" / batch.MANIFEST_NAME)).items()}
    water = last["mol_00.xyz"]
    assert water["status"] == "failed" and water["error"].endswith("mol_00.xyz: SCF not converged; no files written")
    assert water["checks"][0]["converged"] is False and not (tmp_path / "out" / "mol_00.nw").exists()
    assert water["files"] == {} and (tmp_path / "out" / "mol_01.nw").exists()
    assert last["mol_01.xyz"]["status"] == "done"
    # a failed item is redone on the next run (here it fails again)
    assert run_batch(discover([str(tmp_path / "in")]), BuildOptions(check=True), str(tmp_path / "out"),
                     executor=cf.ThreadPoolExecutor(1)).skipped == 1


def test_bad_usage_exits_2(tmp_path, capsys):
    make_library(tmp_path / "in", ["H2O"], split=False)
    out = str(tmp_path / "out")
    assert main(["batch", str(tmp_path / "in"), "--out", out, "--code", "nope"]) == 2
    assert main(["batch", str(tmp_path / "in"), "--out", out, "--workers", "2", "--scheduler", "tcp://127.0.0.1:1"]) == 2
    assert main(["batch", str(tmp_path / "nothing"), "--out", out]) == 2
    assert main(["batch", str(tmp_path / "in"), "--out", out, "--workers", "0"]) == 2
    err = capsys.readouterr().err
    assert "unknown basis format 'nope'" in err and "no such file or folder" in err
    assert not os.path.exists(out)


def test_progress_lines_count_rate_and_estimate():
    """Plain lines at most once per interval (a fake clock), with counts, rate and estimate."""
    import io

    now = [0.0]
    stream = io.StringIO()
    progress = jobs_progress.LineProgress(10, stream, interval=5.0, clock=lambda: now[0])
    for i, status in enumerate(["skipped", "done", "done", "failed", "done"]):
        now[0] = 2.0 * (i + 1)
        progress.update(status)
    progress.close()
    lines = stream.getvalue().splitlines()
    # arithmetic of the fake timeline (no source needed): at t = 6 s, 3 of 10 finished, 2 computed
    # (the skipped one is not work) → 2/6 = 0.33 items/s, 7 left → 21 s; at t = 10 s, 4 computed
    # → 0.4 items/s, 5 left → 12.5 s, printed "12" (round half to even).
    # updates at t = 2, 4, 6, 8, 10 s: lines at 6 and 10 (5 s apart at least), and one at close
    assert lines[0] == "stobuilder batch: 3/10 (done 2, skipped 1, failed 0), 0.3 items/s, about 21 s left"
    assert lines[1] == "stobuilder batch: 5/10 (done 3, skipped 1, failed 1), 0.4 items/s, about 12 s left"
    assert len(lines) == 2
    assert jobs_progress.make_progress(3, "auto", io.StringIO()).__class__ is jobs_progress.LineProgress  # not a terminal


# ---------------------------------------------------------------------------- Dask


@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("distributed")
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=None)
    client = distributed.Client(cluster)
    try:
        import stobuilder

        where = client.run(lambda: __import__("stobuilder").__file__)
        assert set(where.values()) == {stobuilder.__file__}  # the workers run this checkout
        yield client
    finally:
        client.close()
        cluster.close()


@pytest.fixture(scope="module")
def library_50(tmp_path_factory):
    folder = tmp_path_factory.mktemp("library")
    make_library(folder, sorted(g2.names)[:50])
    return folder


@pytest.mark.slow
def test_dask_cluster_equals_local_pool_byte_for_byte(tmp_path, library_50, dask_client):
    items = discover([str(library_50)])
    assert len(items) == 50
    options = BuildOptions(codes=("nwchem", "gaussian"))
    local = run_batch(items, options, str(tmp_path / "local"), workers=2)
    dask = run_batch(items, options, str(tmp_path / "dask"), executor=dask_client.get_executor(pure=False))
    assert (local.done, local.failed, dask.done, dask.failed) == (50, 0, 50, 0)
    assert len(output_files(tmp_path / "local")) == 100
    assert output_files(tmp_path / "local") == output_files(tmp_path / "dask")
    local_records = {r["input"]: comparable(r) for r in records(tmp_path / "local")}
    dask_records = {r["input"]: comparable(r) for r in records(tmp_path / "dask")}
    assert local_records == dask_records
    assert len({r["worker"] for r in records(tmp_path / "dask")}) == 2  # both worker processes worked


@pytest.mark.slow
def test_dask_cluster_equals_local_pool_with_checks(tmp_path, dask_client):
    """A few structures with SCF checks: the same energies, bit for bit, on both."""
    make_library(tmp_path / "in", ["H2O", "NH3", "CH3CH2OH", "C2H6", "HCl", "CO"], split=False)
    items = discover([str(tmp_path / "in")])
    options = BuildOptions(check=True)
    assert run_batch(items, options, str(tmp_path / "local"), workers=2).done == 6
    assert run_batch(items, options, str(tmp_path / "dask"), executor=dask_client.get_executor(pure=False)).done == 6
    local_records = {r["input"]: comparable(r) for r in records(tmp_path / "local")}
    dask_records = {r["input"]: comparable(r) for r in records(tmp_path / "dask")}
    assert local_records == dask_records
    assert all(r["checks"][0]["converged"] for r in local_records.values())


class KillOneWorker(cf.Executor):
    """Wraps an executor; the task of one item kills its own worker process the first time it
    runs (a marker file remembers), as a lost cluster node would."""

    def __init__(self, inner, victim: str, marker: str):
        self.inner, self.victim, self.marker = inner, victim, marker

    def submit(self, fn, task):
        if task.item.name == self.victim:
            return self.inner.submit(_kill_worker_first_time, self.marker, fn, task)
        return self.inner.submit(fn, task)


def _kill_worker_first_time(marker, fn, task):
    if not os.path.exists(marker):
        with open(marker, "w") as handle:
            handle.write(str(os.getpid()))
        os.kill(os.getpid(), signal.SIGKILL)
    return fn(task)


@pytest.mark.slow
def test_a_killed_dask_worker_loses_no_item(tmp_path, library_50, dask_client):
    import cloudpickle

    items = discover([str(library_50)])
    before = set(dask_client.run(os.getpid).values())
    assert len(before) == 2
    marker = tmp_path / "killed"
    victim = items[20].name  # mid-batch in submission order
    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    try:
        executor = KillOneWorker(dask_client.get_executor(pure=False), victim, str(marker))
        summary = run_batch(items, BuildOptions(), str(tmp_path / "out"), executor=executor)
    finally:
        cloudpickle.unregister_pickle_by_value(sys.modules[__name__])
    killed_pid = int(marker.read_text())
    assert killed_pid in before  # a real worker process of the cluster died
    assert (summary.done, summary.failed) == (50, 0)
    written = records(tmp_path / "out")
    assert sorted(r["input"] for r in written) == sorted(i.path for i in items)  # each exactly once
    assert all(r["status"] == "done" for r in written)
    victim_record = next(r for r in written if r["name"] == victim)
    assert not victim_record["worker"].endswith(f":{killed_pid}")
    dask_client.wait_for_workers(2, timeout=30)  # the nanny restarted the killed worker
    after = set(dask_client.run(os.getpid).values())
    assert killed_pid not in after and len(after) == 2


# ---------------------------------------------------------------------------- a killed batch


@pytest.mark.slow
def test_a_killed_batch_resumes_without_recomputing_finished_items(tmp_path):
    src = tmp_path / "src"
    make_library(src, SLOW_CHECKS, split=False)
    out = tmp_path / "out"
    manifest = out / batch.MANIFEST_NAME
    command = [sys.executable, "-m", "stobuilder.cli", "batch", str(src), "--out", str(out), "--check",
               "--workers", "1", "--progress", "lines"]
    kill_when_done(command, tmp_path, child_env(), manifest, 3, timeout=60)
    finished = {r["input"]: r for r in records(out) if r["status"] == "done"}
    assert 3 <= len(finished) < len(SLOW_CHECKS)
    mtimes = {p: {c: os.stat(out / e["path"]).st_mtime_ns for c, e in r["files"].items()} for p, r in finished.items()}
    rerun = subprocess.run(command, cwd=str(tmp_path), env=child_env(), capture_output=True, text=True, timeout=120)
    assert rerun.returncode == 0, rerun.stderr
    assert f"{len(SLOW_CHECKS)} structures: {len(SLOW_CHECKS) - len(finished)} done, {len(finished)} skipped" in rerun.stdout
    last = read_manifest(str(manifest))
    assert len(last) == len(SLOW_CHECKS)
    for path, record in last.items():
        if path in finished:
            assert record["status"] == "skipped"
            assert {c: os.stat(out / e["path"]).st_mtime_ns for c, e in record["files"].items()} == mtimes[path]
        else:
            assert record["status"] == "done"
    done_counts = {}
    for r in records(out):
        if r["status"] == "done":
            done_counts[r["input"]] = done_counts.get(r["input"], 0) + 1
    assert all(done_counts[p] == 1 for p in finished)  # none recomputed
    # no half-written file: every output matches its recorded hash, no temporary file is left
    for record in last.values():
        for entry in record["files"].values():
            assert sha256_text((out / entry["path"]).read_text()) == entry["sha256"]
    assert not [p for p in out.rglob(".stobuilder-*")]


# ---------------------------------------------------------------------------- Snakemake


@pytest.mark.slow
def test_snakemake_workflow_end_to_end(tmp_path):
    pytest.importorskip("snakemake")
    out = tmp_path / "out"
    command = [sys.executable, "-m", "snakemake", "-s", str(ROOT / "workflows" / "Snakefile"), "--cores", "2",
               "--directory", str(tmp_path), "--config", f"structures={EXAMPLES}", f"out={out}",
               f"command={sys.executable} -m stobuilder.cli"]
    run = subprocess.run(command, cwd=str(tmp_path), env=child_env(), capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr[-3000:]
    stems = sorted(p.stem for p in EXAMPLES.iterdir())
    assert len(stems) == 8
    for stem in stems:
        for ext in (".nw", ".gbs"):
            assert (out / f"{stem}{ext}").is_file()
    # the files are those `build` writes
    build_structures([str(p) for p in EXAMPLES.iterdir()], codes=("nwchem", "gaussian"), out_dir=str(tmp_path / "b"))
    for p in (tmp_path / "b").iterdir():
        assert (out / p.name).read_bytes() == p.read_bytes()
    with open(out / "check_summary.tsv") as handle:
        rows = list(csv.DictReader(handle, delimiter="\t"))
    assert sorted(r["structure"] for r in rows) == stems
    assert all(r["converged"] == "True" for r in rows)
    by_name = {r["structure"]: r for r in rows}
    assert by_name["zinc_sulfide"]["target"] == "free atoms"  # periodic: checked on its free atoms
    assert by_name["nitrogen_dioxide"]["method"] == "ROHF"  # multiplicity 2 in the file
    assert float(by_name["ammonia"]["energy_hartree"]) < 0


# ---------------------------------------------------------------------------- inputs: only regular files


def _cli(args, timeout=120):
    """The command line in a fresh process (a hang fails the test instead of stalling it)."""
    return subprocess.run([sys.executable, "-m", "stobuilder.cli", *args], capture_output=True, text=True,
                          env=child_env(), timeout=timeout)


def _one_line_error(run):
    assert run.returncode == 2, (run.returncode, run.stderr)
    assert run.stderr.startswith("stobuilder: error: ") and run.stderr.count("\n") == 1, run.stderr
    assert "Traceback" not in run.stderr


@pytest.fixture()
def library(tmp_path):
    folder = tmp_path / "src"
    folder.mkdir()
    for name in ("H2O", "NH3", "CH4"):
        write(folder / f"{name}.xyz", molecule(name))
    return folder


def _threads():
    return cf.ThreadPoolExecutor(2)


def test_fifo_and_dangling_link_in_a_folder_are_skipped_with_a_note(library, tmp_path):
    os.mkfifo(library / "stuck.xyz")
    (library / "gone.xyz").symlink_to(tmp_path / "nowhere.xyz")
    notes = []
    items = discover([str(library)], notes=notes)
    assert sorted(i.name for i in items) == ["CH4", "H2O", "NH3"]
    assert any("stuck.xyz" in n and "FIFO" in n for n in notes)
    assert any("gone.xyz" in n and "dangling" in n for n in notes)
    run = _cli(["batch", str(library), "--out", str(tmp_path / "out"), "--workers", "1"])
    assert run.returncode == 0, run.stderr
    assert "3 structures: 3 done" in run.stdout
    assert "note:" in run.stderr and "stuck.xyz" in run.stderr


@pytest.mark.parametrize("kind", ["fifo", "device", "listed-fifo", "listed-device"])
def test_an_explicit_input_that_is_not_a_regular_file_is_an_error(library, tmp_path, kind):
    fifo = tmp_path / "pipe.xyz"
    os.mkfifo(fifo)
    target = str(fifo) if "fifo" in kind else os.devnull
    arg = target
    if kind.startswith("listed"):
        listing = tmp_path / "inputs.txt"
        listing.write_text(f"{library / 'H2O.xyz'}\n{target}\n")
        arg = f"@{listing}"
    run = _cli(["batch", arg, "--out", str(tmp_path / "out")])
    _one_line_error(run)
    assert target in run.stderr and "not a regular file" in run.stderr
    assert not (tmp_path / "out").exists()


def test_build_of_a_fifo_or_device_is_an_error_not_a_hang(tmp_path):
    fifo = tmp_path / "pipe.xyz"
    os.mkfifo(fifo)
    for target in (str(fifo), os.devnull):
        run = _cli(["build", target, "--out", str(tmp_path / "out")])
        _one_line_error(run)
        assert "not a regular file" in run.stderr
    assert not (tmp_path / "out").exists()


def test_a_manifest_that_is_a_fifo_is_an_error_not_a_hang(library, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    os.mkfifo(out / batch.MANIFEST_NAME)
    run = _cli(["batch", str(library), "--out", str(out)])
    _one_line_error(run)
    assert "not a regular file" in run.stderr



# ---------------------------------------------------------------------------- the manifest


def _records(out):
    with open(out / batch.MANIFEST_NAME, "rb") as handle:
        return handle.read().split(b"\n")


BAD_LINES = [
    b"\xff\xfe not utf-8 \x80",
    b"{not json",
    b"[1, 2, 3]",
    b'{"status": "done"}',
    b'{"input": 5, "status": "done"}',
    b'{"input": "/x.xyz", "status": "finished"}',
    b'{"input": "/x.xyz", "status": "done", "files": ["a.nw"]}',
    b'{"input": "/x.xyz", "status": "done", "files": {"nwchem": {"path": 3}}}',
    b'{"input": "/x.xyz", "status": "done", "options": "slater"}',
    b"[" * 100000 + b"]" * 100000,
]


def test_bad_manifest_lines_are_skipped_and_reported_and_later_runs_work(library, tmp_path):
    out = tmp_path / "out"
    items = discover([str(library)])
    first = run_batch(items, BuildOptions(), str(out), executor=_threads())
    assert first.done == 3
    lines = _records(out)
    good = [line for line in lines if line]
    # corrupt the middle: the second record becomes garbage, bad lines in between
    corrupted = [good[0], *BAD_LINES, good[2], b""]
    (out / batch.MANIFEST_NAME).write_bytes(b"\n".join(corrupted))
    notes = []
    previous = read_manifest(str(out / batch.MANIFEST_NAME), notes)
    assert len(previous) == 2 and len(notes) == 1
    assert f"skipped {len(BAD_LINES)} unusable line(s)" in notes[0] and "line 2: not UTF-8" in notes[0]
    second = run_batch(items, BuildOptions(), str(out), executor=_threads())
    assert (second.done, second.skipped, second.failed) == (1, 2, 0)  # only the lost record is recomputed
    assert second.notes and "unusable" in second.notes[0]
    # and through the command line, twice: exit 0 each time, the note on stderr, no traceback
    for _ in range(2):
        run = _cli(["batch", str(library), "--out", str(out), "--workers", "1"])
        assert run.returncode == 0, run.stderr
        assert "3 skipped" in run.stdout and "unusable line" in run.stderr and "Traceback" not in run.stderr


def test_force_starts_a_fresh_manifest_and_keeps_the_old_one(library, tmp_path):
    out = tmp_path / "out"
    items = discover([str(library)])
    run_batch(items, BuildOptions(), str(out), executor=_threads())
    path = out / batch.MANIFEST_NAME
    with open(path, "ab") as handle:
        handle.write(b"\xff garbage line\n")
    old = path.read_bytes()
    summary = run_batch(items, BuildOptions(), str(out), executor=_threads(), force=True)
    assert summary.done == 3
    assert (out / (batch.MANIFEST_NAME + ".bak")).read_bytes() == old
    fresh = [json.loads(line) for line in path.read_text().splitlines()]
    assert len(fresh) == 3 and all(r["status"] == "done" for r in fresh)
    assert any("kept as" in n for n in summary.notes)
    before = path.read_bytes()
    run = _cli(["batch", str(library), "--out", str(out), "--force", "--workers", "1"])
    assert run.returncode == 0, run.stderr
    assert "kept as" in run.stderr
    assert (out / (batch.MANIFEST_NAME + ".bak2")).read_bytes() == before  # a second backup, the first kept
    assert (out / (batch.MANIFEST_NAME + ".bak")).read_bytes() == old



def test_batch_records_with_bad_values_are_reported_and_recomputed(tmp_path):
    # the batch's manifest reader checks every field the same way (batch.BATCH_RECORD)
    src = tmp_path / "src"
    src.mkdir()
    for name in ("H2O", "NH3", "CH4"):
        write(src / f"{name}.xyz", molecule(name))
    items = batch.discover([str(src)])
    out = tmp_path / "out"
    with cf.ThreadPoolExecutor(2) as pool:
        assert batch.run_batch(items, batch.BuildOptions(), str(out), executor=pool).done == 3
    path = out / batch.MANIFEST_NAME
    records = [json.loads(x) for x in path.read_text().splitlines()]
    records[0]["frames"] = "1"
    records[1]["timings"]["total_s"] = float("nan")
    records[2]["spin"] = True
    path.write_text("".join(json.dumps(r) + "\n" for r in records))
    notes = []
    assert batch.read_manifest(str(path), notes) == {}
    assert "line 1: frames is not" in notes[0] and "line 2: timings" in notes[0] and "line 3: spin" in notes[0]
    with cf.ThreadPoolExecutor(2) as pool:
        again = batch.run_batch(items, batch.BuildOptions(), str(out), executor=pool)
    assert (again.done, again.skipped) == (3, 0) and "unusable" in again.notes[0]


def test_batch_record_layout_names_the_field():
    assert "no name" in batch._record_problem({"input": "/x.xyz", "status": "done"})
    assert "name is not" in batch._record_problem({**dict.fromkeys(batch.BATCH_RECORD, None), "input": "/x"})


def test_a_batch_manifest_that_is_a_symbolic_link_is_refused(tmp_path, capsys):
    src = tmp_path / "h2o.xyz"
    write(src, molecule("H2O"))
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / batch.MANIFEST_NAME).symlink_to(outside)
    code, stdout, err = run_cli(["batch", str(src), "--out", str(out), "--progress", "off"], capsys)
    assert_one_line_error(code, err)
    assert "symbolic link" in err
    assert outside.read_text() == "not yours\n"
    assert sorted(os.listdir(out)) == [batch.MANIFEST_NAME]
    with pytest.raises(batch.InputError, match="symbolic link"):
        jobs_manifest.Manifest(str(out / batch.MANIFEST_NAME))



# ---------------------------------------------------------------------------- our own outputs


def test_our_own_outputs_are_never_inputs(library, tmp_path):
    out = library / "previous"  # an earlier run's folder inside the inputs
    run = _cli(["build", str(library / "H2O.xyz"), "--code", "all", "--out", str(out)])
    assert run.returncode == 0, run.stderr
    first = _cli(["batch", str(library / "NH3.xyz"), "--out", str(library / "batch1"), "--code", "qcschema"])
    assert first.returncode == 0, first.stderr
    (library / "lib.nw.bak2").write_text("backup of a merge\n")
    (library / "lib.qcschema.json.bak").write_text("{}\n")
    names = sorted(i.name for i in discover([str(library)]))
    assert names == ["CH4", "H2O", "NH3"], names
    assert batch.own_output_name("x.qcschema.json") and batch.own_output_name(batch.MANIFEST_NAME + ".bak3")
    assert not batch.own_output_name("water.xyz") and not batch.own_output_name("structure.json")
    # named explicitly, a file is read whatever its name (the user means it)
    assert len(discover([str(library / "previous" / "H2O.qcschema.json")])) == 1



# ---------------------------------------------------------------------------- failures


def test_batch_item_whose_check_raises_fails_and_writes_nothing(tmp_path, capsys, monkeypatch):
    import concurrent.futures as cf

    import stobuilder.checks.structure as checks
    from stobuilder.batch import discover, run_batch
    from stobuilder.pipeline.options import BuildOptions

    def failing(*args, **kwargs):
        raise np.linalg.LinAlgError("singular")

    monkeypatch.setattr(checks, "check_structure", failing)
    (tmp_path / "in").mkdir()
    write(tmp_path / "in" / "w.xyz", molecule("H2O"))
    out = tmp_path / "out"
    summary = run_batch(discover([str(tmp_path / "in")]), BuildOptions(check=True), str(out),
                        executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed) == (0, 1)
    assert "the SCF check failed (LinAlgError: singular)" in summary.failures[0][1]
    assert not (out / "w.nw").exists()



def test_batch_prints_a_failure_from_a_hostile_file_name_on_one_line(tmp_path, capsys, threads):
    src = tmp_path / "src"
    src.mkdir()
    bad = src / "bad\nname.xyz"
    bad.write_text("")  # an empty structure file: the item fails
    write(src / "h2o.xyz", molecule("H2O"))
    code, stdout, err = run_cli(["batch", str(src), "--out", str(tmp_path / "out"), "--progress", "off"], capsys)
    assert code == 1, err
    failed = [x for x in stdout.splitlines() if x.startswith("failed: ")]
    assert len(failed) == 1 and one_line(str(bad)) in failed[0]
    assert "name.xyz" not in stdout.replace(failed[0], "")  # no stray line holding the rest of the name



# ---------------------------------------------------------------------------- workers


def test_workers_are_capped_at_the_usable_cores_with_a_note(library, tmp_path):
    cores = executors.default_workers()
    assert executors.worker_count(None) == (cores, None)
    assert executors.worker_count(1) == (1, None)
    count, note = executors.worker_count(1000)
    assert count == cores and "1000" in note
    with pytest.raises(InputError):
        executors.worker_count(0)
    run = _cli(["batch", str(library), "--out", str(tmp_path / "out"), "--workers", "1000"])
    assert run.returncode == 0, run.stderr
    assert f"using {cores}" in run.stderr
    workers = {json.loads(line)["worker"] for line in (tmp_path / "out" / batch.MANIFEST_NAME).read_text().splitlines()}
    assert 1 <= len(workers) <= cores
    run = _cli(["batch", str(library), "--out", str(tmp_path / "o2"), "--workers", "0"])
    _one_line_error(run)


def _children(pid: int) -> set[int]:
    out = set()
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                with open(f"/proc/{entry}/stat") as handle:
                    fields = handle.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                out.add(int(entry))
    return out


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as handle:
            state = handle.read().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")  # a zombie runs no code


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_workers_exit_when_the_batch_process_is_killed(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    for i, name in enumerate(["C6H6", "C5H5N", "C4H4O", "C4H4S", "C3H9N", "C2H6SO"] * 2):
        write(src / f"m{i:02d}.xyz", molecule(name))
    command = [sys.executable, "-m", "stobuilder.cli", "batch", str(src), "--out", str(tmp_path / "out"),
               "--check", "--gaussians", "6", "--workers", "2", "--progress", "off"]
    proc = subprocess.Popen(command, env=child_env(), start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    workers: set[int] = set()
    try:
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline and proc.poll() is None:
            workers = {c for c in _children(proc.pid) if "spawn_main" in Path(f"/proc/{c}/cmdline").read_text()}
            if len(workers) >= 1 and (tmp_path / "out" / batch.MANIFEST_NAME).exists():
                break
            time.sleep(0.05)
        assert proc.poll() is None and workers, "the batch ended before its workers could be seen"
        time.sleep(0.5)
        workers |= {c for c in _children(proc.pid) if "spawn_main" in Path(f"/proc/{c}/cmdline").read_text()}
        os.kill(proc.pid, signal.SIGKILL)  # the main process only: its workers must notice by themselves
        proc.wait(timeout=30)
        # an item takes seconds here (benzene, STO-6G, SCF checks); without the watch a busy
        # worker would finish its item first. The watch polls every PARENT_POLL_SECONDS.
        deadline = time.monotonic() + 4 * executors.PARENT_POLL_SECONDS + 1.0
        while time.monotonic() < deadline and any(_alive(w) for w in workers):
            time.sleep(0.1)
        survivors = [w for w in workers if _alive(w)]
    finally:
        for w in workers:
            if _alive(w):
                os.kill(w, signal.SIGKILL)
    assert not survivors, f"workers {survivors} outlived the batch"



# ---------------------------------------------------------------------------- the scheduler


@pytest.mark.parametrize("address", ["not a url", "", "http://host:8786", "tcp://host", "tcp://:8786",
                                     "tcp://host:99999", "tcp://host:port", "tcp://host:8786/path", "host"])
def test_bad_scheduler_addresses_are_errors_before_anything_starts(library, tmp_path, address, capsys):
    code = main(["batch", str(library), "--out", str(tmp_path / "out"), "--scheduler", address])
    err = capsys.readouterr().err
    _one_line_error(subprocess.CompletedProcess([], code, "", err))
    assert "--scheduler" in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:8786", "127.0.0.1:8786", "tls://scheduler.example:8786",
                                     "tcp://[::1]:8786", "ws://h:1", "inproc://10.0.0.1/1/2"])
def test_scheduler_addresses_of_dask_form_pass_the_check(address):
    # forms of distributed's comm addresses (distributed docs, "Communications"; value from memory)
    assert executors.check_scheduler_address(address) == address



# ---------------------------------------------------------------------------- zeta files


@pytest.mark.parametrize("argv, words", [
    (["--zeta-file", "LIB"], "--zeta-file LIB: it names none of the structures' elements (it names Fe, Co; the "
                             "structures have H, C, N, O)"),
    (["--zeta-file", "EMPTY"], "--zeta-file EMPTY: it gives no ζ"),
    (["--zeta", "Fe:3d=2.1"], "--zeta names elements in no structure: Fe"),
])
def test_zeta_that_applies_to_no_item_is_refused_before_any_work(library, tmp_path, capsys, monkeypatch, argv, words):
    """The rule of build, relax, tune and bench (``pipeline.check_zeta_elements``) over all the
    batch's items: a zeta file naming none of their elements would be a silent no-op. An item
    that cannot be read (here an empty file) does not hide the others' elements."""
    (library / "empty.xyz").write_text("")
    lib = tmp_path / "lib.toml"
    lib.write_text("[Fe]\n3d = 2.1\n[Co]\n3d = 2.2\n")
    empty = tmp_path / "empty.toml"
    empty.write_text("[Fe]\n")
    names = {"LIB": str(lib), "EMPTY": str(empty)}
    argv = [names.get(a, a) for a in argv]
    monkeypatch.setattr(batch, "run_tasks", lambda *a, **k: pytest.fail("the batch started"))
    code = main(["batch", str(library), "--out", str(tmp_path / "out"), *argv, "--progress", "off"])
    err = capsys.readouterr().err
    _one_line_error(subprocess.CompletedProcess([], code, "", err))
    for key, value in names.items():
        words = words.replace(key, value)
    assert words in err, err
    assert not (tmp_path / "out").exists()


def test_a_zeta_file_applies_where_its_elements_occur_in_a_batch(library, tmp_path):
    lib = tmp_path / "lib.toml"
    lib.write_text("[C]\n2p = 1.7\n[Fe]\n3d = 2.1\n")  # C occurs in CH4 only, Fe nowhere
    with _threads() as pool:
        summary = run_batch(discover([str(library)]), BuildOptions(zeta_file=str(lib)), str(tmp_path / "out"),
                            executor=pool)
    assert summary.done == 3 and summary.failed == 0
    plain = BuildOptions()
    with _threads() as pool:
        run_batch(discover([str(library)]), plain, str(tmp_path / "plain"), executor=pool)
    same = {n: (tmp_path / "out" / n).read_bytes() == (tmp_path / "plain" / n).read_bytes()
            for n in ("CH4.nw", "H2O.nw", "NH3.nw")}
    assert same == {"CH4.nw": False, "H2O.nw": True, "NH3.nw": True}

