"""The self-check before anything is written: every text `build` and `batch` make is read back
with our own reader of its format and must give the basis again (formats.render_checked). A
writer that loses digits or writes a text its reader refuses is an error: exit 2, one line,
nothing on disk (`build`); a failed item with no files (`batch`). The broken writers are injected
(the real ones pass: tests/test_formats.py)."""

import concurrent.futures as cf
import os
import re
from dataclasses import replace

import pytest
from ase.build import molecule
from ase.io import write

import stobuilder
from importlib import import_module
from stobuilder import batch
from stobuilder.batch import discover, read_manifest, run_batch
from stobuilder.pipeline.options import BuildOptions
from stobuilder.cli import main
from stobuilder.core.errors import InputError

formats_module = import_module("stobuilder.formats")  # the package (stobuilder.formats is also a function)


@pytest.fixture(scope="module")
def basis():
    return stobuilder.build_basis(["H", "C", "S", "Zn"], rule="slater", gaussians=3)


def _ten_digits(text):
    """The text with every E-notation number cut to 10 significant digits (a lost-precision bug)."""
    return re.sub(r"-?\d\.\d{15}E[+-]\d\d", lambda m: f"{float(m.group()):.9E}", text)


def _truncated(text):
    """The text without its last line (a writer that forgets the terminator)."""
    return "".join(text.splitlines(keepends=True)[:-1])


BROKEN = {"ten digits": ("nwchem", _ten_digits), "truncated": ("gaussian", _truncated)}


@pytest.fixture(params=sorted(BROKEN))
def broken(request, monkeypatch):
    """The registry with one writer broken; returns its format name."""
    code, damage = BROKEN[request.param]
    table = formats_module._registry()

    def patched():
        out = []
        for f in table:
            if f.name == code:
                real = f.write
                f = replace(f, write=lambda b, sp_shells=False, real=real: damage(real(b, sp_shells=sp_shells)))
            out.append(f)
        return tuple(out)

    monkeypatch.setattr(formats_module, "_registry", patched)
    monkeypatch.setattr(batch, "_PREPARE_CACHE", {})
    return code


@pytest.mark.parametrize("code", tuple(stobuilder.formats()))
@pytest.mark.parametrize("sp", [False, True])
def test_the_real_writers_pass_their_self_check(basis, code, sp):
    assert formats_module.render_checked(basis, code, sp) == stobuilder.write_basis(basis, code, sp)


def test_a_broken_writer_fails_the_self_check(basis, broken):
    with pytest.raises(InputError) as info:
        formats_module.render_checked(basis, broken, source="x.xyz")
    message = str(info.value)
    assert message.startswith(f"x.xyz: the {broken} file made for it does not read back as written")
    assert "\n" not in message and message.endswith("nothing written")


@pytest.fixture()
def structure(tmp_path):
    path = tmp_path / "in" / "methanethiol.xyz"
    path.parent.mkdir()
    write(path, molecule("CH3SH"))  # ASE G2 geometry
    return str(path)


def test_build_with_a_broken_writer_exits_2_and_writes_nothing(structure, broken, tmp_path, capsys):
    out = tmp_path / "out"
    # every format: the good ones would be written too if the check came after the first rename
    code = main(["build", structure, "--code", "all", "--out", str(out)])
    _, err = capsys.readouterr()
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("stobuilder: error: ") and "methanethiol.xyz" in err, err
    assert f"the {broken} file made for it does not read back" in err
    assert not out.exists()
    assert sorted(os.listdir(tmp_path / "in")) == ["methanethiol.xyz"]


def test_batch_with_a_broken_writer_fails_the_item_and_writes_no_file(structure, broken, tmp_path):
    out = tmp_path / "batch"
    summary = run_batch(discover([structure]), BuildOptions(codes=("pyscf", broken)), str(out),
                        executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed, summary.exit_status) == (0, 1, 1)
    (record,) = read_manifest(str(out / batch.MANIFEST_NAME)).values()
    assert record["status"] == "failed" and record["files"] == {}
    assert f"the {broken} file made for it does not read back" in record["error"]
    extensions = [stobuilder.formats()[c].extension for c in ("pyscf", broken)]
    assert not [n for n in os.listdir(out) if any(n.endswith(e) for e in extensions)]  # not even the good one
