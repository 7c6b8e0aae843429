"""Shared test set-up."""

import warnings

# PySCF warns and suggests installing a basis-set library package; the project never does.
warnings.filterwarnings("ignore", category=UserWarning, module=r"pyscf.*")
