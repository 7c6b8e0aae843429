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
