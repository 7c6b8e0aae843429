"""Regenerate the demo structures of the Fennick Reach odour screen (see examples/README.md).

Molecular geometries come from ASE's G2 collection (ase.collections.g2: Curtiss et al., J. Chem.
Phys. 106, 1063, 1997, MP2/6-31G* geometries as ASE ships them). The ammonium ion geometry and the
zinc sulfide cell are demo values: tetrahedral NH4+ with N–H 1.03 Å, and zinc blende with
a = 5.41 Å (value from memory, close to the measured lattice constant).
Run: python examples/make_structures.py
"""

from pathlib import Path

import numpy as np
from ase import Atoms
from ase.build import bulk
from ase.collections import g2
from ase.io import write

HERE = Path(__file__).parent / "structures"


def main() -> None:
    HERE.mkdir(exist_ok=True)
    write(HERE / "hydrogen_sulfide.xyz", g2["SH2"])
    write(HERE / "methanethiol.xyz", g2["CH3SH"])
    write(HERE / "dimethyl_sulfide.pdb", g2["CH3SCH3"])
    write(HERE / "ammonia.xyz", g2["NH3"])
    write(HERE / "trimethylamine.xyz", g2["C3H9N"])
    no2 = g2["NO2"].copy()
    no2.info = {"multiplicity": 2, "site": "flare stack"}
    write(HERE / "nitrogen_dioxide.extxyz", no2, format="extxyz")
    d = 1.03 / np.sqrt(3.0)
    nh4 = Atoms("NH4", positions=[(0, 0, 0), (d, d, d), (-d, -d, d), (-d, d, -d), (d, -d, -d)])
    nh4.info = {"charge": 1, "spin": 0, "site": "digester liquor"}
    write(HERE / "ammonium.extxyz", nh4, format="extxyz")
    write(HERE / "zinc_sulfide.cif", bulk("ZnS", "zincblende", a=5.41))


if __name__ == "__main__":
    main()
