"""The bench's published outputs (stobuilder.bench.report): text from inputs cannot break out of
a TSV field, the page or a plot; the free atoms are published, so that the atomization energies
can be recomputed from the outputs alone; the page is self-contained and byte-identical, with
deterministic PNGs; the plots and the page's wording.

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
from html.parser import HTMLParser

import pytest
from ase.build import molecule
from ase.io import write

from stobuilder.bench import run as bench, report as bench_report
from stobuilder.core.limits import one_line
from support import child_env, strict_json


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
    assert {r["structure"] for r in strict_json((out / "bench.json").read_text())["rows"]} == {str(path)}
    # the printed summary is one line per entry
    assert all("\t" not in x for x in bench.summary_table(result).splitlines())


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
    doc = strict_json((out / "bench.json").read_text())
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
    code = ("import sys, json; from stobuilder.bench import report as r; "
            "sys.stdout.buffer.write(r._png(r._figure(2, 2)[0]))")
    env = child_env()
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

