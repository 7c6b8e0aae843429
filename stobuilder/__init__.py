"""stobuilder: Slater-type-orbital minimal basis sets, expanded in Gaussians, for open codes.

The public API; every name here is a plain function or a frozen dataclass.
"""

from stobuilder.core.version import __version__  # noqa: E402,F401

from stobuilder.checks.atom import atom_report  # noqa: E402
from stobuilder.exact.atoms import AtomResult  # noqa: E402
from stobuilder.checks.atom import atom_energy, optimize_zeta  # noqa: E402
from stobuilder.model.basis import Basis, ElementBasis, Shell  # noqa: E402
from stobuilder.calculator import pyscf_mole  # noqa: E402  (STOCalculator: stobuilder.calculator)
from stobuilder.builder.construct import build_basis, element_basis, exponents, zeta_values, zeff  # noqa: E402
from stobuilder.builder.spec import BasisSpec, ZetaTable  # noqa: E402
from stobuilder.model.elements import Configuration, ground_state, parse_configuration  # noqa: E402
from stobuilder.core.errors import InputError  # noqa: E402
from stobuilder.expansion import Fit  # noqa: E402
from stobuilder.formats import formats  # noqa: E402
from stobuilder.pipeline.options import BuildOptions, CheckOptions, OutputOptions, load_zeta_file, parse_zeta_overrides  # noqa: E402
from stobuilder.pipeline.path import Prepared, prepare  # noqa: E402
from stobuilder.public import build_structures, fit_sto, merge_basis, read_basis, write_basis  # noqa: E402  (argument checks)
from stobuilder.screening import ShellExponent, rules  # noqa: E402
from stobuilder.model.structures import Structure, read_structures  # noqa: E402

__all__ = [
    "AtomResult",
    "atom_energy",
    "atom_report",
    "load_zeta_file",
    "optimize_zeta",
    "parse_zeta_overrides",
    "Basis",
    "BasisSpec",
    "BuildOptions",
    "CheckOptions",
    "OutputOptions",
    "ZetaTable",
    "Prepared",
    "prepare",
    "pyscf_mole",
    "Configuration",
    "ElementBasis",
    "Fit",
    "InputError",
    "Shell",
    "ShellExponent",
    "Structure",
    "build_basis",
    "build_structures",
    "element_basis",
    "exponents",
    "fit_sto",
    "formats",
    "ground_state",
    "merge_basis",
    "parse_configuration",
    "read_basis",
    "read_structures",
    "rules",
    "write_basis",
    "zeff",
    "zeta_values",
]
