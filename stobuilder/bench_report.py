"""The files of a bench: bench.tsv, bench.json, report.html and the PNG plots beside it.

Pure rendering: ``render_outputs`` turns the rows and the summary into {path: text or PNG bytes},
written all or none by the caller (``files.write_all``). The plots are drawn with matplotlib's
Agg canvas (no pyplot) without the Software tag, so the same rows give the same bytes on one machine and
software stack; the HTML page is self-contained apart from the PNG files it names with
``<img src=...>`` (relative names, beside it).
"""

from __future__ import annotations

import html
import io
import os
from collections.abc import Mapping, Sequence

from .errors import InputError

CAUTIONS = (
    "Minimal-basis atomization energies are far from experiment: errors of tens of kcal/mol are "
    "normal for STO-nG bases at the Hartree-Fock level (no electron correlation, a minimal basis).",
    "The comparison ranks exponent choices against each other on the same molecules; it does not "
    "validate a method, a basis or a result for any decision.",
    "The experimental values are the G2-1 atomization energies as ASE ships them (Curtiss et al., "
    "J. Chem. Phys. 94, 7221 (1991)); they include no correction for the missing correlation energy.",
)

TSV_COLUMNS = ("structure", "formula", "variant", "rule", "gaussians", "fit", "zeta_file", "spin", "method",
               "converged", "iterations", "energy_hartree", "reference_energy_hartree",
               "energy_above_reference_hartree", "atomization_kcal_mol", "reference_atomization_kcal_mol",
               "experiment_atomization_kcal_mol", "atomization_error_kcal_mol", "wall_seconds", "error")


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return repr(value)
    return " ".join(str(value).split())


def render_tsv(rows) -> str:
    """One line per structure × variant, columns TSV_COLUMNS (empty where a value is missing)."""
    lines = ["\t".join(TSV_COLUMNS)]
    for r in rows:
        lines.append("\t".join(_cell(getattr(r, c)) for c in TSV_COLUMNS))
    return "\n".join(lines) + "\n"


def render_json(doc: Mapping) -> str:
    """Strict JSON (no NaN, no Infinity), indented, with a final newline."""
    from .limits import strict_json

    return strict_json(doc, "the bench result holds a number that is not finite; nothing written") + "\n"


# ---------------------------------------------------------------------------- plots


def _figure(width: float, height: float, panels: int = 1):
    """A matplotlib Figure on the Agg canvas (no pyplot, no global state: nothing to close) and
    its ``panels`` axes, stacked, sharing x."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise InputError("the bench report needs matplotlib: pip install 'stobuilder[plot]'") from None
    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    axes = fig.subplots(panels, 1, sharex=True, squeeze=False)[:, 0]
    return fig, list(axes)


MARKERS = "osD^v<>pPX*h"


def _png(fig) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=100, metadata={"Software": None})
    return buffer.getvalue()


def _energy_errors(structures, variants, by, reference):
    """{variant: [error per structure, NaN where missing]}: E − E(reference basis) with a
    reference, else E − the lowest energy any variant gives for the structure (hartree)."""
    out = {}
    for v in variants:
        ys = []
        for s in structures:
            r = by.get((s, v))
            if reference is not None:
                y = r.energy_above_reference_hartree if r else None
            else:
                energies = [by[(s, w)].energy_hartree for w in variants if (s, w) in by and not by[(s, w)].failed]
                y = (r.energy_hartree - min(energies)) if r and not r.failed and energies else None
            ys.append(float("nan") if y is None else y)
        out[v] = ys
    return out


def energy_plot(structures: Sequence[str], variants: Sequence[str], rows, reference: str | None) -> bytes:
    """Energy error per molecule for every variant: E − E(reference basis) with a reference, else
    E − the lowest energy any variant gives for that molecule (hartree). With a reference and
    several variants a second panel shows E − the lowest of the variants, where the differences
    between the variants, small beside the basis-set error, can be read."""
    by = {(r.structure, r.variant): r for r in rows}
    panels = [reference] + ([None] if reference is not None and len(variants) > 1 else [])
    width, height = max(8.0, 0.22 * len(structures) + 3), 1.5 + 3.5 * len(panels)
    fig, axes = _figure(width, height, len(panels))
    x = list(range(len(structures)))
    for ax, ref in zip(axes, panels):
        for i, (v, ys) in enumerate(_energy_errors(structures, variants, by, ref).items()):
            ax.plot(x, ys, marker=MARKERS[i % len(MARKERS)], markersize=4, linewidth=0.8, label=v)
        what = f"E − E({ref})" if ref is not None else "E − lowest E of the variants"
        ax.set_ylabel(f"{what} / hartree")
        ax.set_title(f"Energy error per molecule ({what})")
        ax.grid(True, linewidth=0.3)
        ax.legend(fontsize=8)
    axes[-1].set_xticks(x)
    axes[-1].set_xticklabels(structures, rotation=90, fontsize=7)
    # fixed margins in inches: room for the rotated names
    fig.subplots_adjust(left=0.9 / width, right=1 - 0.2 / width, bottom=1.05 / height, top=1 - 0.45 / height,
                        hspace=0.6 / 3.5)
    return _png(fig)


def atomization_plot(variants: Sequence[str], rows, against: str) -> bytes:
    """Computed atomization energies against experiment (``against`` = "experiment") or against
    the reference basis ("reference"), kcal/mol, with the line of equality."""
    fig, (ax,) = _figure(6.5, 6.0)
    lo, hi = [], []
    for i, v in enumerate(variants):
        pts = []
        for r in rows:
            if r.variant != v or r.atomization_kcal_mol is None:
                continue
            x = r.experiment_atomization_kcal_mol if against == "experiment" else r.reference_atomization_kcal_mol
            if x is not None:
                pts.append((x, r.atomization_kcal_mol))
        if pts:
            xs, ys = zip(*pts)
            ax.scatter(xs, ys, s=16, marker=MARKERS[i % len(MARKERS)], label=v)
            lo.append(min(min(xs), min(ys)))
            hi.append(max(max(xs), max(ys)))
    if lo:
        a, b = min(lo), max(hi)
        pad = 0.05 * (b - a or 1.0)
        ax.plot([a - pad, b + pad], [a - pad, b + pad], color="grey", linewidth=0.8, label="equal")
    name = "experiment (G2-1)" if against == "experiment" else "reference basis"
    ax.set_xlabel(f"atomization energy, {name} / kcal mol⁻¹")
    ax.set_ylabel("atomization energy, computed / kcal mol⁻¹")
    ax.set_title(f"Atomization energies: computed against {name}")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=8)
    fig.subplots_adjust(left=0.14, right=0.97, bottom=0.1, top=0.93)
    return _png(fig)


# ---------------------------------------------------------------------------- the page


def _num(value, digits: int) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def render_html(plan, rows, summary, images: Mapping[str, str]) -> str:
    """The report page: cautions, summary per variant, the plots (``images``: caption → PNG file
    name beside the page), the failures, and every row."""
    e = html.escape
    ref = plan.reference
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">', "<title>stobuilder bench</title>",
           "<style>body{font-family:sans-serif;margin:2em;max-width:80em}table{border-collapse:collapse;"
           "font-size:90%}td,th{border:1px solid #bbb;padding:2px 6px;text-align:right}"
           "td.t,th.t{text-align:left}.caution{background:#fff4e0;border-left:4px solid #e0a040;padding:.5em 1em}"
           "img{max-width:100%}</style>", "</head><body>", "<h1>stobuilder bench</h1>"]
    out.append(f"<p>{len(plan.structures)} structures × {len(plan.variants)} variants"
               + (f"; reference basis {e(ref)}" if ref else "") + ". SCF: RHF for closed shells, ROHF for open "
               "shells (the method <code>build --check</code> picks); free atoms in their ground-state multiplicity, "
               "occupations fixed by atomic symmetry, computed once per element and variant. Energies in hartree, "
               "atomization energies in kcal/mol.</p>")
    out.append('<div class="caution"><h2>Cautions</h2><ul>' + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS)
               + "</ul></div>")
    out.append("<h2>Summary per variant</h2><table><tr><th class='t'>variant</th><th>structures</th><th>failed</th>"
               "<th>mean |ΔD<sub>e</sub>| vs experiment</th><th>max |ΔD<sub>e</sub>| vs experiment</th>"
               "<th>mean E − E(reference)</th><th>mean |D<sub>e</sub> − D<sub>e</sub>(reference)|</th></tr>")
    for s in summary:
        out.append(f"<tr><td class='t'>{e(s.variant)}</td><td>{s.structures}</td><td>{s.failed}</td>"
                   f"<td>{_num(s.mean_abs_atomization_error_kcal_mol, 2)}</td>"
                   f"<td>{_num(s.max_abs_atomization_error_kcal_mol, 2)}</td>"
                   f"<td>{_num(s.mean_energy_above_reference_hartree, 6)}</td>"
                   f"<td>{_num(s.mean_abs_atomization_vs_reference_kcal_mol, 2)}</td></tr>")
    out.append("</table>")
    for caption, name in images.items():
        out.append(f"<h2>{e(caption)}</h2><p><img src=\"{e(name)}\" alt=\"{e(caption)}\"></p>")
    failed = [r for r in rows if r.failed]
    out.append("<h2>Failures</h2>")
    if failed:
        out.append("<ul>" + "".join(f"<li>{e(r.structure)} ({e(r.variant)}): {e(r.error)}</li>" for r in failed)
                   + "</ul>")
    else:
        out.append("<p>None: every SCF converged.</p>")
    out.append("<h2>Every row</h2><table><tr><th class='t'>structure</th><th class='t'>variant</th><th>2S</th>"
               "<th class='t'>method</th><th>E</th><th>E(reference)</th><th>D<sub>e</sub></th>"
               "<th>D<sub>e</sub>(reference)</th><th>D<sub>e</sub>(experiment)</th><th>iterations</th>"
               "<th>seconds</th><th class='t'>state</th></tr>")
    for r in rows:
        state = "failed: " + r.error if r.failed else "converged"
        out.append(f"<tr><td class='t'>{e(r.structure)}</td><td class='t'>{e(r.variant)}</td><td>{r.spin}</td>"
                   f"<td class='t'>{e(r.method)}</td><td>{_num(r.energy_hartree, 8)}</td>"
                   f"<td>{_num(r.reference_energy_hartree, 8)}</td><td>{_num(r.atomization_kcal_mol, 2)}</td>"
                   f"<td>{_num(r.reference_atomization_kcal_mol, 2)}</td>"
                   f"<td>{_num(r.experiment_atomization_kcal_mol, 2)}</td><td>{r.iterations}</td>"
                   f"<td>{r.wall_seconds:.3f}</td><td class='t'>{e(state)}</td></tr>")
    out.append("</table></body></html>")
    return "\n".join(out) + "\n"


def render_outputs(plan, rows, summary, files: Mapping[str, str], document) -> dict[str, str | bytes]:
    """{path: contents} of every output: ``files`` maps "tsv", "json", "report", "energy_plot",
    "atomization_plot" to paths (the plots' beside the report); ``document(files written)`` is
    the JSON document (``bench.bench_document``). The atomization plot is made against experiment
    where the set has it, else against the reference basis, else not at all (then its path is
    absent from the result)."""

    variants = [v.label for v in plan.variants]
    structures = [b.name for b in plan.structures]
    contents: dict[str, str | bytes] = {}
    images: dict[str, str] = {}
    contents[files["energy_plot"]] = energy_plot(structures, variants, rows, plan.reference)
    images["Energy error per molecule"] = os.path.basename(files["energy_plot"])
    has_exp = any(r.experiment_atomization_kcal_mol is not None and r.atomization_kcal_mol is not None for r in rows)
    has_ref = any(r.reference_atomization_kcal_mol is not None and r.atomization_kcal_mol is not None for r in rows)
    if has_exp or has_ref:
        contents[files["atomization_plot"]] = atomization_plot(variants, rows, "experiment" if has_exp else "reference")
        images["Atomization energies, computed against " + ("experiment" if has_exp else "the reference basis")] = (
            os.path.basename(files["atomization_plot"]))
    written = {k: p for k, p in files.items() if k not in ("energy_plot", "atomization_plot") or p in contents}
    contents[files["tsv"]] = render_tsv(rows)
    contents[files["json"]] = render_json(document(written))
    contents[files["report"]] = render_html(plan, rows, summary, images)
    return contents
