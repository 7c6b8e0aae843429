"""Bench robustness (issue 21, §2, §4, §5): manifest records validated field by field, a manifest
that is a symbolic link refused (bench and batch), zeta files as libraries, structures given
twice, text from inputs unable to break out of a TSV field, the page or a plot, and the report's
outputs (free atoms published, self-contained deterministic page, plots, wording).

Outside facts relied on: the G2-1 geometries and experimental atomization energies of
ase.data.g2_1 (Curtiss, Raghavachari, Redfern & Pople, J. Chem. Phys. 94, 7221 (1991)); the
atomization energy D_e = Σ E(free atoms) − E(molecule) (its definition, any physical chemistry
text; common practice, no source); TSV has one record a line and fields split by tabs (IANA
text/tab-separated-values registration; value from memory); a data: URI carries base64 bytes
(RFC 2397).
"""

from __future__ import annotations

import base64
import concurrent.futures as cf
import csv
import html
import json
import os
import re
from html.parser import HTMLParser

import pytest
from ase.build import molecule
from ase.io import write

from cli_run import assert_one_line_error, run_cli
from stobuilder import batch
from stobuilder.bench import run as bench, report as bench_report
from stobuilder.core.limits import one_line
from stobuilder.jobs import executors
from stobuilder.jobs.manifest import Manifest


@pytest.fixture()
def threads(monkeypatch):
    """The bench's calculations on one thread of this process (fast, no spawned interpreter)."""
    monkeypatch.setattr(executors, "local_executor", lambda workers: cf.ThreadPoolExecutor(1))


def _counts(stdout):
    m = re.search(r"(\d+) calculations: (\d+) computed, (\d+) taken from the manifest, (\d+) failed", stdout)
    return tuple(int(x) for x in m.groups())


def _bench(tmp_path, capsys, *args, out="out"):
    return run_cli(["bench", *args, "--out", str(tmp_path / out), "--progress", "off"], capsys)


def _strict(text):
    def bad(name):
        raise ValueError(f"non-finite number {name} in JSON")

    return json.loads(text, parse_constant=bad)


# ---------------------------------------------------------------------------- manifest records


def _nan(record):
    record["result"]["energy_hartree"] = float("nan")


def _true_energy(record):
    record["result"]["energy_hartree"] = True  # would be used as 1.0 hartree


def _set(key, value):
    def change(record):
        record["result"][key] = value

    return change


def _top(key, value):
    def change(record):
        record[key] = value

    return change


def _not_converged_but_done(record):
    record["result"]["converged"] = False


FAULTS = {
    "energy NaN": ("molecule", _nan),
    "energy true": ("molecule", _true_energy),
    "atom energy true": ("atom", _true_energy),
    "converged 'yes'": ("molecule", _set("converged", "yes")),
    "wall_seconds 'abc'": ("molecule", _set("wall_seconds", "abc")),
    "wall_seconds negative": ("molecule", _set("wall_seconds", -1.0)),
    "iterations 2.5": ("molecule", _set("iterations", 2.5)),
    "iterations true": ("molecule", _set("iterations", True)),
    "method 3": ("molecule", _set("method", 3)),
    "error 5": ("molecule", _set("error", 5)),
    "unknown result key": ("molecule", _set("surprise", 1)),
    "unknown record key": ("molecule", _top("surprise", 1)),
    "no finished_utc": ("molecule", lambda r: r.pop("finished_utc")),
    "done but not converged": ("molecule", _not_converged_but_done),
}


@pytest.mark.parametrize("fault", list(FAULTS))
def test_a_record_with_bad_values_is_reported_and_recomputed(tmp_path, capsys, threads, fault):
    # LiH: free atoms H and Li, the molecule: 3 calculations
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    first = _strict((tmp_path / "out" / "bench.json").read_text())
    path = tmp_path / "out" / bench.MANIFEST_NAME
    lines = path.read_text().splitlines()
    kind, change = FAULTS[fault]
    (number, record), = [(i, json.loads(x)) for i, x in enumerate(lines) if json.loads(x)["task"].startswith(kind + "|")
                         and json.loads(x)["task"].endswith("|Li" if kind == "atom" else "|LiH")]
    change(record)
    lines[number] = json.dumps(record)  # NaN written as NaN, as a tampered or foreign line could hold
    path.write_text("\n".join(lines) + "\n")
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    assert _counts(stdout) == (3, 1, 2, 0)  # only the bad record's calculation again
    notes = [x for x in err.splitlines() if "unusable" in x]
    assert len(notes) == 1 and f"line {number + 1}:" in notes[0], err
    again = _strict((tmp_path / "out" / "bench.json").read_text())
    assert again["rows"][0]["energy_hartree"] == pytest.approx(first["rows"][0]["energy_hartree"], abs=1e-9)
    assert again["rows"][0]["atomization_kcal_mol"] == pytest.approx(first["rows"][0]["atomization_kcal_mol"], abs=1e-6)
    # and the run after that computes nothing (the bad line stays in the file and is noted again,
    # as any unusable line is, until --force starts a fresh manifest)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0 and _counts(stdout) == (3, 0, 3, 0)


def test_batch_records_with_bad_values_are_reported_and_recomputed(tmp_path):
    # the batch's manifest reader checks every field the same way (batch.BATCH_RECORD)
    src = tmp_path / "src"
    src.mkdir()
    for name in ("H2O", "NH3", "CH4"):
        write(src / f"{name}.xyz", molecule(name))
    items = batch.discover([str(src)])
    out = tmp_path / "out"
    with cf.ThreadPoolExecutor(2) as pool:
        assert batch.run_batch(items, batch.BuildOptions(), str(out), executor=pool).done == 3
    path = out / batch.MANIFEST_NAME
    records = [json.loads(x) for x in path.read_text().splitlines()]
    records[0]["frames"] = "1"
    records[1]["timings"]["total_s"] = float("nan")
    records[2]["spin"] = True
    path.write_text("".join(json.dumps(r) + "\n" for r in records))
    notes = []
    assert batch.read_manifest(str(path), notes) == {}
    assert "line 1: frames is not" in notes[0] and "line 2: timings" in notes[0] and "line 3: spin" in notes[0]
    with cf.ThreadPoolExecutor(2) as pool:
        again = batch.run_batch(items, batch.BuildOptions(), str(out), executor=pool)
    assert (again.done, again.skipped) == (3, 0) and "unusable" in again.notes[0]


def test_batch_record_layout_names_the_field():
    assert "no name" in batch._record_problem({"input": "/x.xyz", "status": "done"})
    assert "name is not" in batch._record_problem({**dict.fromkeys(batch.BATCH_RECORD, None), "input": "/x"})


# ---------------------------------------------------------------------------- symbolic-link manifests


def test_a_bench_manifest_that_is_a_symbolic_link_is_refused(tmp_path, capsys, threads):
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / bench.MANIFEST_NAME).symlink_to(outside)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert_one_line_error(code, err)
    assert "symbolic link" in err and bench.MANIFEST_NAME in err
    assert outside.read_text() == "not yours\n"
    assert sorted(os.listdir(out)) == [bench.MANIFEST_NAME]  # nothing computed, nothing written


def test_an_output_that_is_a_symbolic_link_is_replaced_not_written_through(tmp_path, capsys, threads):
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    tsv = tmp_path / "out" / "bench.tsv"
    text = tsv.read_text()
    tsv.unlink()
    tsv.symlink_to(outside)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH")
    assert code == 0, err
    assert outside.read_text() == "not yours\n"
    assert not tsv.is_symlink() and tsv.read_text() == text


def test_a_batch_manifest_that_is_a_symbolic_link_is_refused(tmp_path, capsys):
    src = tmp_path / "h2o.xyz"
    write(src, molecule("H2O"))
    outside = tmp_path / "precious.txt"
    outside.write_text("not yours\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / batch.MANIFEST_NAME).symlink_to(outside)
    code, stdout, err = run_cli(["batch", str(src), "--out", str(out), "--progress", "off"], capsys)
    assert_one_line_error(code, err)
    assert "symbolic link" in err
    assert outside.read_text() == "not yours\n"
    assert sorted(os.listdir(out)) == [batch.MANIFEST_NAME]
    with pytest.raises(batch.InputError, match="symbolic link"):
        Manifest(str(out / batch.MANIFEST_NAME))


# ---------------------------------------------------------------------------- zeta files


def test_a_zeta_file_naming_no_element_of_the_structures_is_refused(tmp_path, capsys, threads):
    zeta = tmp_path / "helium.toml"
    zeta.write_text("[He]\n1s = 1.6875\n")  # 27/16, He's variational ζ (Zener 1930; value from memory)
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert str(zeta) in err and "names none of the structures' elements" in err and "He" in err
    assert not (tmp_path / "out").exists()


def test_a_bench_zeta_file_takes_the_rule_and_words_of_every_door(tmp_path, capsys):
    # the rule of build, relax, tune and batch (pipeline.check_zeta_elements): the command line
    # names the flag, the Python door its argument; a file with no ζ in it is refused as well
    from stobuilder.pipeline.options import OptionError

    zeta = tmp_path / "helium.toml"
    zeta.write_text("[He]\n1s = 1.6875\n")  # 27/16, He's variational ζ (Zener 1930; value from memory)
    code, _, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert err.startswith(f"stobuilder: error: --zeta-file {zeta}: it names none of the structures' elements"), err
    structures = bench.set_structures("g2-1", ["LiH"])
    with pytest.raises(OptionError, match=f"^zeta_file {re.escape(str(zeta))}: it names none"):
        bench.plan(structures, bench.make_variants(["slater"], [3], ["l2"], [str(zeta)]))
    zeta.write_text("[H]\n")
    code, _, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "--zeta-file", str(zeta))
    assert_one_line_error(code, err)
    assert f"--zeta-file {zeta}: it gives no ζ" in err
    assert not (tmp_path / "out").exists()


def test_a_zeta_file_is_a_library(tmp_path, capsys, threads):
    # [H] applies to LiH's H; [He] is unused, and editing it changes nothing: nothing recomputed
    zeta = tmp_path / "lib.toml"
    zeta.write_text("[H]\n1s = 1.24\n[He]\n1s = 1.6875\n")
    args = ["--set", "g2-1", "LiH", "--zeta-file", str(zeta), "--json"]
    code, stdout, err = _bench(tmp_path, capsys, *args)
    assert code == 0, err
    rows = {r["variant"]: r for r in _strict(stdout[:stdout.rindex("}") + 1])["rows"]}
    assert rows["slater N=3 l2"]["energy_hartree"] != rows["slater N=3 l2 +lib.toml"]["energy_hartree"]
    zeta.write_text("[H]\n1s = 1.24\n[He]\n1s = 1.7\n")
    code, stdout, err = _bench(tmp_path, capsys, *args[:-1])
    assert code == 0 and _counts(stdout) == (6, 0, 6, 0), stdout


# ---------------------------------------------------------------------------- given twice


def test_a_structure_file_given_twice_is_refused(tmp_path, capsys, threads, monkeypatch):
    write(tmp_path / "lih.xyz", molecule("LiH"))
    monkeypatch.chdir(tmp_path)
    for twice in (["lih.xyz", "lih.xyz"], ["lih.xyz", "./lih.xyz"], ["lih.xyz", str(tmp_path / "lih.xyz")]):
        code, stdout, err = _bench(tmp_path, capsys, *twice)
        assert_one_line_error(code, err)
        assert "given twice" in err
    assert not (tmp_path / "out").exists()


def test_a_set_molecule_given_twice_is_refused(tmp_path, capsys, threads):
    code, stdout, err = _bench(tmp_path, capsys, "--set", "g2-1", "LiH", "CH4", "LiH")
    assert_one_line_error(code, err)
    assert "'LiH'" in err and "given twice" in err
    assert not (tmp_path / "out").exists()


# ---------------------------------------------------------------------------- text from inputs


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.images = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "img":
            self.images.append(dict(attrs)["src"])


def test_hostile_names_cannot_break_out_of_any_output(tmp_path, capsys):
    # a structure file name with a tab, a line end, markup and matplotlib's mathematics
    # delimiters, and a zeta file whose name holds the task keys' separator "|"
    name = "a\tb\n<script>alert(1)$\\frac$.xyz"
    path = tmp_path / name
    write(path, molecule("LiH"), format="xyz")
    zeta = tmp_path / "x|y.toml"
    zeta.write_text("[H]\n1s = 1.24\n")
    structures = bench.select_structures([str(path)], None)
    plan = bench.plan(structures, bench.make_variants(["slater"], [3], ["l2"], [str(zeta)]))
    out = tmp_path / "out"
    with cf.ThreadPoolExecutor(1) as pool:
        result = bench.run_bench(plan, str(out), executor=pool)
    assert result.exit_status == 0 and all(r.atomization_kcal_mol is not None for r in result.rows)
    # TSV: one record per line, every line the header's number of fields, the name escaped
    for table, columns in (("bench.tsv", bench_report.TSV_COLUMNS), ("free_atoms.tsv", bench_report.ATOM_TSV_COLUMNS)):
        lines = (out / table).read_text().split("\n")
        assert lines[-1] == "" and all(len(x.split("\t")) == len(columns) for x in lines[:-1]), table
    with open(out / "bench.tsv", newline="") as handle:
        rows = list(csv.DictReader(handle, delimiter="\t"))
    assert [r["structure"] for r in rows] == [one_line(str(path))] * 2
    assert rows[1]["variant"] == "slater N=3 l2 +x|y.toml"
    # HTML: no tag from the name, the name shown escaped
    page = (out / "report.html").read_text()
    parser = _Page()
    parser.feed(page)
    assert "script" not in parser.tags
    assert html.escape(one_line(str(path))) in page
    # JSON keeps the name exactly
    assert {r["structure"] for r in _strict((out / "bench.json").read_text())["rows"]} == {str(path)}
    # the printed summary is one line per entry
    assert all("\t" not in x for x in bench.summary_table(result).splitlines())


# ---------------------------------------------------------------------------- the report


@pytest.fixture(scope="module")
def two_variants(tmp_path_factory):
    """A bench of five G2-1 molecules in two variants, on one thread: (out folder, result)."""
    out = tmp_path_factory.mktemp("report") / "out"
    plan = bench.plan(bench.set_structures("g2-1", ["LiH", "CH4", "NH3", "H2O", "HF"]),
                      bench.make_variants(["slater", "molecular"], [3], ["l2"]))
    with cf.ThreadPoolExecutor(1) as pool:
        result = bench.run_bench(plan, str(out), executor=pool)
    assert result.exit_status == 0
    return out, result


def test_atomization_energies_recomputed_from_the_published_outputs_alone(two_variants):
    # D_e = Σ E(free atoms) − E(molecule): from bench.json's rows and free atoms, and again from
    # bench.tsv and free_atoms.tsv, with the factor bench.json states
    from ase.formula import Formula

    out, _ = two_variants
    doc = _strict((out / "bench.json").read_text())
    factor = doc["hartree_to_kcal_mol"]
    assert factor == pytest.approx(627.5095, abs=1e-3)  # kcal/mol per hartree, CODATA (value from memory)
    atoms = {(a["variant"], a["element"]): a["energy_hartree"] for a in doc["free_atoms"]}
    for row in doc["rows"]:
        total = sum(atoms[(row["variant"], s)] * n for s, n in Formula(row["formula"]).count().items())
        assert (total - row["energy_hartree"]) * factor == pytest.approx(row["atomization_kcal_mol"], abs=1e-9)
    with open(out / "free_atoms.tsv", newline="") as handle:
        tsv_atoms = {(a["variant"], a["element"]): float(a["energy_hartree"])
                     for a in csv.DictReader(handle, delimiter="\t")}
    assert tsv_atoms == atoms
    with open(out / "bench.tsv", newline="") as handle:
        row = next(r for r in csv.DictReader(handle, delimiter="\t") if r["structure"] == "CH4")
    d_e = (tsv_atoms[(row["variant"], "C")] + 4 * tsv_atoms[(row["variant"], "H")] - float(row["energy_hartree"])) * factor
    assert d_e == pytest.approx(float(row["atomization_kcal_mol"]), abs=1e-9)
    page = (out / "report.html").read_text()
    assert "<h2>Free atoms</h2>" in page and f"{atoms[('slater N=3 l2', 'C')]:.8f}" in page


def test_the_page_is_byte_identical_and_embeds_deterministic_pngs(two_variants, tmp_path):
    import subprocess
    import sys

    out, result = two_variants
    plan, rows, summary, atoms = result.plan, result.rows, result.summary, result.atoms
    files = {k: str(tmp_path / v) for k, v in bench.OUTPUT_NAMES.items()}

    def render():
        return bench_report.render_outputs(plan, rows, summary, atoms, files,
                                           lambda w: bench.bench_document(plan, rows, summary, atoms, w))

    first, second = render(), render()
    assert first == second
    parser = _Page()
    parser.feed(first[files["report"]])
    assert [base64.b64decode(s.split(",", 1)[1]) for s in parser.images] == [first[files["energy_plot"]],
                                                                             first[files["atomization_plot"]]]
    # another process draws the same bytes (the PNG carries no time and no software tag)
    code = ("import sys, json; from stobuilder import bench_report as r; "
            "sys.stdout.buffer.write(r._png(r._figure(2, 2)[0]))")
    env = dict(os.environ, PYTHONPATH=os.path.dirname(os.path.dirname(os.path.abspath(bench.__file__))))
    a = subprocess.run([sys.executable, "-c", code], capture_output=True, env=env, timeout=120).stdout
    assert a[:8] == b"\x89PNG\r\n\x1a\n" and a == bench_report._png(bench_report._figure(2, 2)[0])
    assert b"tIME" not in a and b"Software" not in a


def test_energy_plot_has_markers_and_no_lines(two_variants):
    _, result = two_variants
    names = [b.name for b in result.plan.structures]
    fig = bench_report.energy_figure(names, [v.label for v in result.plan.variants], result.rows, None)
    lines = [line for ax in fig.axes for line in ax.get_lines()]
    assert lines and all(line.get_linestyle() == "None" and line.get_marker() not in (None, "None", "") for line in lines)
    # one variant and no reference: the only panel would be zero everywhere, so no plot
    assert bench_report.energy_figure(names, ["slater N=3 l2"], result.rows, None) is None
    assert bench_report.energy_panels(["a"], "sto-3g") == ["sto-3g"]


def test_outlying_points_are_labelled_with_their_molecule():
    # errors 0, ±0.5, ±1 and 50: only 50 lies beyond 3 scaled MADs of the median (Hampel 1974)
    pts = [(10.0, 10.0), (20.0, 20.5), (30.0, 29.5), (40.0, 41.0), (50.0, 49.0), (60.0, 110.0)]
    assert bench_report.outlying(pts) == [False] * 5 + [True]
    assert bench_report.outlying(pts[:3]) == [False] * 3  # too few points to call one outlying
    assert bench_report.outlying([(1.0, 2.0)] * 5) == [False] * 5  # no spread
    rows = [bench.BenchRow(f"M{i}", "H2", "v", "slater", 3, "l2", None, 0, "RHF", -1.0, True, 3, 0.1, y, x, None, None)
            for i, (x, y) in enumerate(pts)]
    fig = bench_report.atomization_figure(["v"], rows, "experiment")
    assert [t.get_text() for t in fig.axes[0].texts] == ["M5"]
    assert "Hampel" in bench_report.OUTLIER_RULE


def test_wording_singular_and_cautions(tmp_path):
    from stobuilder.model.structures import Structure

    (one,) = bench.set_structures("g2-1", ["LiH"])
    ion = bench.BenchStructure("oh-.xyz", Structure("oh-.xyz", 0, ("O", "H"), ((0, 0, 0), (0, 0, 0.97)), -1, 0, False))
    variants = bench.make_variants(["slater"], [3], ["l2"])
    page = bench_report.render_html(bench.BenchPlan((one,), variants, None, ()), (), (), (), {})
    assert "1 structure × 1 variant;" in page.replace(".", ";") and "1 variants" not in page
    assert "tens to hundreds of kcal/mol" in page
    assert "Experiment contains the electron correlation energy; the computed Hartree-Fock values lack it" in page
    assert "no correction for the missing correlation" not in page
    assert "Charged structures" not in page
    page = bench_report.render_html(bench.BenchPlan((one, ion), variants, None, ()), (), (), (), {})
    assert "2 structures × 1 variant" in page
    assert "Charged structures (oh-.xyz)" in page and "neutral free atoms" in page
    # structure files only: no experiment, so no caution about the experimental values
    page = bench_report.render_html(bench.BenchPlan((ion,), variants, None, ()), (), (), (), {})
    assert "Experiment contains" not in page and "Charged structures (oh-.xyz)" in page


def test_long_names_are_shortened_in_plots_only():
    # a path longer than the label room is shown by its end in the plot; the tables keep it whole
    name = "/a/very/long/folder/of/structures/methane.xyz"
    rows = [bench.BenchRow(name, "CH4", v, "slater", 3, "l2", None, 0, "RHF", e, True, 3, 0.1, None, None, None, None)
            for v, e in (("v1", -40.0), ("v2", -40.1))]
    fig = bench_report.energy_figure([name], ["v1", "v2"], rows, None)
    (label,) = [t.get_text() for t in fig.axes[-1].get_xticklabels()]
    assert label.startswith("…") and name.endswith(label[1:]) and len(label) == bench_report.PLOT_LABEL_CHARACTERS


def test_page_columns_carry_units_and_empty_ones_are_left_out(two_variants):
    # no reference basis was asked for: no reference column says "–" in every row
    out, _ = two_variants
    page = (out / "report.html").read_text()
    assert "E(reference)" not in page and "D<sub>e</sub>(reference)" not in page
    assert "<th>D<sub>e</sub>(experiment) / kcal mol⁻¹</th>" in page and "<th>E / hartree</th>" in page


def test_batch_prints_a_failure_from_a_hostile_file_name_on_one_line(tmp_path, capsys, threads):
    src = tmp_path / "src"
    src.mkdir()
    bad = src / "bad\nname.xyz"
    bad.write_text("")  # an empty structure file: the item fails
    write(src / "h2o.xyz", molecule("H2O"))
    code, stdout, err = run_cli(["batch", str(src), "--out", str(tmp_path / "out"), "--progress", "off"], capsys)
    assert code == 1, err
    failed = [x for x in stdout.splitlines() if x.startswith("failed: ")]
    assert len(failed) == 1 and one_line(str(bad)) in failed[0]
    assert "name.xyz" not in stdout.replace(failed[0], "")  # no stray line holding the rest of the name
