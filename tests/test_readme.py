"""README.md's "Loading the files in PySCF" lines, run as written on files the build writes: each
line (one per format, tagged with the format's name) gives PySCF the same AOs and the same RHF
energy as the `.py` file."""

import os
import re
import shutil
from pathlib import Path

import pytest
from pyscf import scf

import stobuilder

ROOT = Path(__file__).resolve().parents[1]


def _loading_block():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("### Loading the files in PySCF"):]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


def test_readme_lines_load_every_format_with_the_same_aos_and_energy(tmp_path, monkeypatch):
    block = _loading_block()
    setup = [x for x in block.splitlines() if x and not x.startswith("mol = ")]
    lines = {m.group(2): m.group(1) for m in re.finditer(r"^(mol = .*?)\s+# (\w+)$", block, re.M)}
    assert set(lines) == set(stobuilder.formats())  # one line for every format
    (tmp_path / "examples" / "structures").mkdir(parents=True)
    shutil.copy(ROOT / "examples" / "structures" / "methanethiol.xyz", tmp_path / "examples" / "structures")
    monkeypatch.chdir(tmp_path)
    stobuilder.build_structures(["examples/structures/methanethiol.xyz"], codes=["all"], out_dir="basis")
    assert sorted(os.listdir("basis")) == sorted("methanethiol" + f.extension for f in stobuilder.formats().values())

    def run(line):
        namespace = {}
        exec("\n".join(setup + [line]), namespace)
        mol = namespace["mol"]
        mol.verbose = 0
        mf = scf.RHF(mol)
        mf.conv_tol = 1e-11
        energy = mf.kernel()
        assert mf.converged
        return mol.nao, energy

    ref_nao, ref = run(lines["pyscf"])
    assert ref_nao == 18  # CH3SH, minimal basis: C and S 1s2s2p(3s3p) = 5 + 9, four H 1s
    for code, line in lines.items():
        nao, energy = run(line)
        assert nao == ref_nao, code
        assert energy == pytest.approx(ref, abs=1e-9), code
