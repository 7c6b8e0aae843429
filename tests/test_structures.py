"""Reading structure files through ASE: formats, frames, charge/spin, ghosts, bad files."""

import numpy as np
import pytest
from ase import Atoms
from ase.build import bulk, molecule
from ase.io import write

from stobuilder.core.errors import InputError
from stobuilder.model.structures import elements_of, read_structures


@pytest.mark.parametrize("fmt,name", [("xyz", "w.xyz"), ("extxyz", "w.extxyz"), ("proteindatabank", "w.pdb"), ("vasp", "POSCAR")])
def test_formats_ase_reads(tmp_path, fmt, name):
    water = molecule("H2O", vacuum=4.0)  # ASE's G2 geometry, in a box (POSCAR needs a cell)
    water.pbc = False
    path = tmp_path / name
    write(path, water, format=fmt)
    (st,) = read_structures(path)
    assert sorted(st.symbols) == ["H", "H", "O"]
    assert np.allclose(sorted(np.ravel(st.positions)), sorted(np.ravel(water.positions)), atol=1e-3)
    assert st.charge == 0 and st.spin == 0
    assert st.periodic == (fmt == "vasp")  # a POSCAR cell is always periodic  # 10 electrons: closed shell by default


def test_cif_is_periodic(tmp_path):
    path = tmp_path / "zns.cif"
    write(path, bulk("ZnS", "zincblende", a=5.41))
    (st,) = read_structures(path)
    assert st.periodic and st.elements == ("S", "Zn")


def test_extxyz_charge_spin_and_override(tmp_path):
    atoms = molecule("NH3")
    atoms.info = {"charge": -1, "multiplicity": 2}
    path = tmp_path / "nh3.extxyz"
    write(path, atoms, format="extxyz")
    (st,) = read_structures(path)
    assert (st.charge, st.spin) == (-1, 1)
    (st2,) = read_structures(path, charge=1, spin=1)
    assert (st2.charge, st2.spin) == (1, 1)


def test_frames_union_of_elements(tmp_path):
    path = tmp_path / "traj.extxyz"
    write(path, [molecule("H2O"), molecule("NH3"), molecule("CH4")], format="extxyz")
    frames = read_structures(path)
    assert len(frames) == 3 and elements_of(frames) == ("H", "C", "N", "O")


def test_ghost_atoms_are_skipped_with_a_note(tmp_path):
    atoms = Atoms("H2X", positions=[(0, 0, 0), (0, 0, 0.74), (0, 0, 3.0)])
    path = tmp_path / "ghost.extxyz"
    write(path, atoms, format="extxyz")
    (st,) = read_structures(path)
    assert st.symbols == ("H", "H") and "ghost" in st.notes[0]


def test_bad_files(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_structures(tmp_path / "missing.xyz")
    empty = tmp_path / "empty.xyz"
    empty.write_text("")
    with pytest.raises(InputError, match="empty"):
        read_structures(empty)
    garbage = tmp_path / "garbage.xyz"
    garbage.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(InputError, match="garbage.xyz"):
        read_structures(garbage)
    unknown = tmp_path / "unknown.xyz"
    unknown.write_text("1\n\nQq 0 0 0\n")
    with pytest.raises(InputError, match="unknown.xyz"):
        read_structures(unknown)


def test_impossible_charge_spin(tmp_path):
    path = tmp_path / "oh.xyz"
    write(path, molecule("OH"))  # 9 electrons
    with pytest.raises(InputError, match="cannot have spin 0"):
        read_structures(path, spin=0)
    with pytest.raises(InputError, match="leaves"):
        read_structures(path, charge=9)


def test_a_file_name_with_an_at_sign_is_read_as_that_file(tmp_path):
    """ASE reads "name@index" as a frame selection unless told not to; a file named "h2@0.xyz" or
    "@.xyz" is that file, every frame (found by the tune fuzz test; common practice, no source)."""
    from stobuilder.model.structures import read_structures

    for name in ("@.xyz", "h2@0.xyz", "two@1:.xyz"):
        path = tmp_path / name
        path.write_text("2\n\nH 0 0 0\nH 0 0 0.74\n2\n\nH 0 0 0\nH 0 0 0.75\n")
        frames = read_structures(str(path))
        assert [f.positions[1][2] for f in frames] == [0.74, 0.75], name
