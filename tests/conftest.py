"""Shared test set-up."""

import warnings

# PySCF warns and suggests installing a basis-set library package; the project never does.
warnings.filterwarnings("ignore", category=UserWarning, module=r"pyscf.*")

import pytest  # noqa: E402


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
