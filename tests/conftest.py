"""Shared test set-up."""

import warnings

# PySCF warns and suggests installing a basis-set library package; the project never does.
warnings.filterwarnings("ignore", category=UserWarning, module=r"pyscf.*")

import pytest  # noqa: E402
from stobuilder.jobs import executors


@pytest.fixture(autouse=True, scope="session")
def _fit_cache_in_tmp(tmp_path_factory):
    """Fits computed on demand go to a temporary cache folder, never to the user's (STOBUILDER_CACHE_DIR)."""
    import os

    folder = tmp_path_factory.mktemp("stobuilder-cache")
    old = os.environ.get("STOBUILDER_CACHE_DIR")
    os.environ["STOBUILDER_CACHE_DIR"] = str(folder)
    yield folder
    if old is None:
        os.environ.pop("STOBUILDER_CACHE_DIR", None)
    else:
        os.environ["STOBUILDER_CACHE_DIR"] = old


@pytest.fixture(autouse=True)
def _fresh_basis_cache():
    """Every test starts with an empty basis cache (``builder.basis_of``): a test that patches what a
    basis is made from must see a new build, not a basis an earlier test left behind."""
    from stobuilder.builder.construct import basis_of

    basis_of.cache_clear()
    yield


@pytest.fixture()
def no_scf(monkeypatch):
    """Any SCF fails the test if it starts (stobuilder's driver and PySCF's own kernel): for the
    checks that must refuse a bad input or output location before the first SCF."""
    from pyscf.scf import hf

    from stobuilder.scf import run as scf_run

    def refuse(*args, **kwargs):
        pytest.fail("an SCF ran before the input and output checks refused")

    monkeypatch.setattr(scf_run, "solve_scf", refuse)
    monkeypatch.setattr(hf.SCF, "kernel", refuse)
    monkeypatch.setattr(hf.SCF, "scf", refuse)


@pytest.fixture()
def threads(monkeypatch):
    """The batch engine's local pool (bench's calculations, batch items) as one thread of this
    process: fast, no spawned interpreter, and within reach of ``no_scf`` and monkeypatch."""
    import concurrent.futures as cf

    from stobuilder import batch

    monkeypatch.setattr(executors, "local_executor", lambda workers: cf.ThreadPoolExecutor(1))


@pytest.fixture()
def water(tmp_path):
    """ASE's G2 water (ase.build.molecule) as tmp_path/in/water.xyz, a str path."""
    from ase.build import molecule
    from ase.io import write

    path = tmp_path / "in" / "water.xyz"
    path.parent.mkdir()
    write(path, molecule("H2O"))  # ASE G2 geometry
    return str(path)


@pytest.fixture()
def hydrogen(tmp_path):
    """One H atom at the origin as tmp_path/h.xyz, a str path."""
    path = tmp_path / "h.xyz"
    path.write_text("1\n\nH 0.0 0.0 0.0\n")
    return str(path)


@pytest.fixture()
def two(tmp_path):
    """Two structure files, tmp_path/a.xyz (ASE G2 water) and tmp_path/b.xyz (ASE G2 ammonia), as Paths."""
    from ase.build import molecule
    from ase.io import write

    a, b = tmp_path / "a.xyz", tmp_path / "b.xyz"
    write(a, molecule("H2O"))  # ASE G2 geometries
    write(b, molecule("NH3"))
    return a, b


@pytest.fixture()
def big(tmp_path):
    """5000 H atoms on a simple cubic lattice 1.5 Å apart (tmp_path/h5000.xyz, a Path): too big for
    an SCF within the default memory limit."""
    from support import h_lattice

    return h_lattice(tmp_path / "h5000.xyz", 5000)
