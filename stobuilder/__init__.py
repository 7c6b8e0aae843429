"""stobuilder: Slater-type-orbital minimal basis sets, expanded in Gaussians, for open codes.

The public API; every name here is a plain function or a frozen dataclass, and it is the very
object of the module that defines it (``stobuilder.build_structures is
stobuilder.pipeline.path.build_structures``), which checks its own arguments. The names are
loaded when first used (PEP 562), so ``import stobuilder`` loads neither PySCF nor SciPy nor ASE.
"""

from __future__ import annotations

from importlib import import_module

from stobuilder.core.version import __version__

# ``formats`` is a function and the name of the subpackage that defines it. Importing a
# subpackage binds its name here to the module, so the function is bound at once, after it.
from stobuilder.formats import formats

# Every public name → the module that defines it.
_HOME = {
    "AtomResult": "stobuilder.exact.solver",
    "Basis": "stobuilder.model.basis",
    "BasisSpec": "stobuilder.builder.spec",
    "BuildOptions": "stobuilder.pipeline.options",
    "CheckOptions": "stobuilder.pipeline.options",
    "Configuration": "stobuilder.model.elements",
    "ElementBasis": "stobuilder.model.basis",
    "Fit": "stobuilder.expansion.fit",
    "InputError": "stobuilder.core.errors",
    "OutputOptions": "stobuilder.pipeline.options",
    "Prepared": "stobuilder.pipeline.path",
    "Shell": "stobuilder.model.basis",
    "ShellExponent": "stobuilder.model.shells",
    "Structure": "stobuilder.model.structures",
    "ZetaTable": "stobuilder.builder.spec",
    "atom_energy": "stobuilder.checks.atom",
    "atom_report": "stobuilder.checks.atom",
    "build_basis": "stobuilder.builder.construct",
    "build_structures": "stobuilder.pipeline.path",
    "element_basis": "stobuilder.builder.construct",
    "exponents": "stobuilder.builder.construct",
    "fit_sto": "stobuilder.expansion.fit",
    "formats": "stobuilder.formats",
    "ground_state": "stobuilder.model.elements",
    "load_zeta_file": "stobuilder.pipeline.options",
    "merge_basis": "stobuilder.formats",
    "optimize_zeta": "stobuilder.checks.atom",
    "parse_configuration": "stobuilder.model.elements",
    "parse_zeta_overrides": "stobuilder.pipeline.options",
    "prepare": "stobuilder.pipeline.path",
    "pyscf_mole": "stobuilder.calculator",
    "read_basis": "stobuilder.formats",
    "read_structures": "stobuilder.model.structures",
    "rules": "stobuilder.screening",
    "write_basis": "stobuilder.formats",
    "zeff": "stobuilder.builder.construct",
    "zeta_values": "stobuilder.builder.construct",
}

__all__ = sorted(_HOME)


def __getattr__(name: str):
    """A public name, imported from its module on first use and kept here."""
    home = _HOME.get(name)
    if home is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(home), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
