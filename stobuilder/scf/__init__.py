"""The PySCF SCF driver that the checks, the calculator, bench, tune and relax run on.

    size       the size guard: scf_size / check_scf_size (memory of one SCF against the limit)
    mole       make_mole, structure_mole: PySCF Moles of our structures and bases
    run        solve_scf (the one SCF run), solve_scf_energy, run_scf → ScfResult; progress lines
    free_atom  free_atom_setup: a free atom held to its configuration (irrep_occupations)

Callers import from the submodules (``from stobuilder.scf.run import solve_scf``), where a test
that replaces a function finds it.
"""
