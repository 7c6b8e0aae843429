"""Batch runs: discovery, the manifest, resume, failures, a local process pool against a Dask
LocalCluster (loopback), a killed Dask worker, a killed batch process, the Snakemake workflow.

Real engines throughout: ASE reads the files, PySCF runs the checks, Dask and Snakemake run the
jobs. Structures are made from ASE's G2 collection (ase.collections.g2: Curtiss et al., J. Chem.
Phys. 106, 1063, 1997, as ASE ships them), perturbed by a seeded random displacement.
Budget: about 60-90 s on 2 cores, most of it Dask and Snakemake start-up.
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
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from ase.collections import g2
from ase.io import write

from cli_run import kill_when_done
from stobuilder import batch
from stobuilder.batch import discover, read_manifest, run_batch
from stobuilder.cli import main
from stobuilder.core.errors import InputError
from stobuilder.pipeline.options import BuildOptions
from stobuilder.core.files import sha256_text
from stobuilder.jobs import progress as jobs_progress
from stobuilder.pipeline.path import build_structures

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples" / "structures"
# Closed-shell G2 molecules of 7 or more atoms: their SCF checks take a noticeable fraction of a
# second each, which the interrupt test needs to stop a batch part-way.
SLOW_CHECKS = ["C2H6", "C3H8", "C3H9N", "C4H4O", "C4H4S", "C5H5N", "C6H6", "CH3CH2OH", "CH3CH2SH",
               "CH2SCH2", "C3H7Cl", "C2H6SO"]


def child_env() -> dict:
    """Environment for subprocesses: import stobuilder from this worktree, one OpenMP thread."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["OMP_NUM_THREADS"] = "1"
    return env


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
    """Items with the same element set and options share one basis (the worker's cache)."""
    import stobuilder.pipeline.path as pipeline

    calls = []
    real = pipeline.basis_for
    monkeypatch.setattr(pipeline, "basis_for", lambda *a, **k: calls.append(a[0][0].elements) or real(*a, **k))
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
