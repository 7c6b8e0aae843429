"""Fennick Reach odour screen, step 5: do the two rules give the same molecules?

Relaxes ammonia and hydrogen sulfide from the bundled structures with stobuilder's ASE
calculator, once with Slater's rules and once with the molecular (published STO-3G) exponents,
and prints bond length, angle and energy side by side. A few seconds on a laptop.
Run: python examples/relax_compare.py
"""

from pathlib import Path

import ase.io
from ase.optimize import BFGS
from ase.units import Hartree

from stobuilder.calculator import STOCalculator

HERE = Path(__file__).parent / "structures"
MOLECULES = ("ammonia.xyz", "hydrogen_sulfide.xyz")
RULES = ("slater", "molecular")


def relax(path: Path, rule: str):
    atoms = ase.io.read(path)
    atoms.calc = STOCalculator(rule=rule, gaussians=3)
    opt = BFGS(atoms, logfile=None)
    converged = opt.run(fmax=0.01, steps=100)
    return atoms, opt.nsteps, converged


def main() -> None:
    print(f"{'molecule':<22}{'rule':<11}{'r(X-H)/Å':>10}{'H-X-H/°':>10}{'E/hartree':>16}{'steps':>7}")
    for name in MOLECULES:
        for rule in RULES:
            atoms, steps, converged = relax(HERE / name, rule)
            heavy = max(range(len(atoms)), key=lambda i: atoms.numbers[i])
            hydrogens = [i for i in range(len(atoms)) if atoms.numbers[i] == 1]
            r = atoms.get_distance(heavy, hydrogens[0])
            angle = atoms.get_angle(hydrogens[0], heavy, hydrogens[1])
            energy = atoms.get_potential_energy() / Hartree
            print(f"{name:<22}{rule:<11}{r:>10.4f}{angle:>10.2f}{energy:>16.8f}{steps:>7}"
                  + ("" if converged else "  NOT CONVERGED"))


if __name__ == "__main__":
    main()
