"""The files of a bench: bench.tsv, free_atoms.tsv, bench.json, report.html and its PNG plots.

Pure rendering: ``render_outputs`` turns the rows, the summary and the free atoms into
{path: text or PNG bytes}, written all or none by the caller (``files.write_all``). The plots are
drawn with matplotlib's Agg canvas (no pyplot) without the Software tag, so the same rows give
the same bytes on one machine and software stack. The HTML page is self-contained: it embeds
the same PNG bytes as ``data:`` URIs (RFC 2397), so it shows its plots alone; the PNG files
beside it are the same pictures for other uses.

Text taken from the inputs (structure names and paths, zeta-file names, error messages) goes
into every field through ``limits.one_line`` (and ``html.escape`` in the page; in the plots a
``$`` is escaped so that matplotlib does not read it as mathematics).
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Mapping, Sequence

from stobuilder.core.errors import InputError
from stobuilder.core.limits import one_line

CAUTIONS = (
    "Minimal-basis atomization energies are far from experiment: errors of tens to hundreds of "
    "kcal/mol are normal for STO-nG bases at the Hartree-Fock level (no electron correlation, a "
    "minimal basis).",
    "The comparison ranks exponent choices against each other on the same molecules; it does not "
    "validate a method, a basis or a result for any decision.",
    "The experimental values are the G2-1 atomization energies as ASE ships them (Curtiss et al., "
    "J. Chem. Phys. 94, 7221 (1991)). Experiment contains the electron correlation energy; the "
    "computed Hartree-Fock values lack it, which is a large part of their difference from "
    "experiment.",
)

TSV_COLUMNS = ("structure", "formula", "variant", "rule", "gaussians", "norm", "zeta_file", "spin", "method",
               "converged", "iterations", "energy_hartree", "reference_energy_hartree",
               "energy_above_reference_hartree", "atomization_kcal_mol", "reference_atomization_kcal_mol",
               "experiment_atomization_kcal_mol", "atomization_error_kcal_mol", "wall_seconds", "error")
ATOM_TSV_COLUMNS = ("variant", "element", "spin", "method", "converged", "iterations", "energy_hartree", "error")

# A point of atomization.png is outlying, and labelled with its molecule, when its error
# (computed − the x value) lies more than OUTLIER_MADS scaled median absolute deviations
# (1.4826 · MAD, which is σ for normal errors) from the median error of its variant: the Hampel
# identifier (Hampel, J. Am. Stat. Assoc. 69, 383 (1974); value from memory). Variants with fewer
# than OUTLIER_MIN_POINTS points get no labels.
OUTLIER_MADS = 3.0
OUTLIER_MIN_POINTS = 4
OUTLIER_RULE = (f"A point is labelled with its molecule when its error (computed − the x value) lies more than "
                f"{OUTLIER_MADS:g} scaled median absolute deviations (1.4826·MAD) from the median error of its "
                f"variant (the Hampel identifier; variants with fewer than {OUTLIER_MIN_POINTS} points get no labels).")


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return repr(value)
    return one_line(value)  # a tab or a line end from an input cannot split the field or the row


def _table(columns, rows) -> str:
    lines = ["\t".join(columns)]
    for r in rows:
        lines.append("\t".join(_cell(getattr(r, c)) for c in columns))
    return "\n".join(lines) + "\n"


def render_tsv(rows) -> str:
    """One line per structure × variant, columns TSV_COLUMNS (empty where a value is missing)."""
    return _table(TSV_COLUMNS, rows)


def render_atoms_tsv(atoms) -> str:
    """One line per free atom and variant, columns ATOM_TSV_COLUMNS: the energies every
    atomization energy of bench.tsv is made of."""
    return _table(ATOM_TSV_COLUMNS, atoms)


def render_json(doc: Mapping) -> str:
    """Strict JSON (no NaN, no Infinity), indented, with a final newline."""
    from stobuilder.core.limits import strict_json

    return strict_json(doc, "the bench result holds a number that is not finite; nothing written") + "\n"


def plural(count: int, noun: str) -> str:
    return f"{count} {noun}" + ("" if count == 1 else "s")


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


PLOT_LABEL_CHARACTERS = 28  # a longer structure name is shown by its end in a plot (the tables hold it whole)


def _plot_text(text, shorten: bool = False) -> str:
    """Text from an input as a plot label: one line, and a ``$`` shown as itself (matplotlib
    takes text between two ``$`` for mathematics); with ``shorten``, a long name (a path) as
    "…" and its last PLOT_LABEL_CHARACTERS − 1 characters."""
    text = one_line(text)
    if shorten and len(text) > PLOT_LABEL_CHARACTERS:
        text = "…" + text[-(PLOT_LABEL_CHARACTERS - 1):]
    return text.replace("$", r"\$")


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


def energy_panels(variants: Sequence[str], reference: str | None) -> list[str | None]:
    """The panels of energy_error.png: E − E(reference) with a reference; E − the lowest of the
    variants with more than one variant. One variant and no reference: none (that panel would be
    zero everywhere)."""
    return ([reference] if reference is not None else []) + ([None] if len(variants) > 1 else [])


def energy_plot(structures: Sequence[str], variants: Sequence[str], rows, reference: str | None) -> bytes | None:
    """The PNG of ``energy_figure``, or None when there is no panel."""
    fig = energy_figure(structures, variants, rows, reference)
    return None if fig is None else _png(fig)


def energy_figure(structures: Sequence[str], variants: Sequence[str], rows, reference: str | None):
    """Energy error per molecule for every variant, markers only (the molecules are separate
    points, not a series): E − E(reference basis) with a reference, and with several variants
    (alone without a reference) E − the lowest energy of the variants for that molecule, where
    the differences between the variants, small beside the basis-set error, can be read
    (hartree). None when there is no panel (``energy_panels``). A matplotlib Figure."""
    panels = energy_panels(variants, reference)
    if not panels:
        return None
    by = {(r.structure, r.variant): r for r in rows}
    width, height = max(8.0, 0.22 * len(structures) + 3), 1.5 + 3.5 * len(panels)
    fig, axes = _figure(width, height, len(panels))
    x = list(range(len(structures)))
    for ax, ref in zip(axes, panels):
        for i, (v, ys) in enumerate(_energy_errors(structures, variants, by, ref).items()):
            ax.plot(x, ys, marker=MARKERS[i % len(MARKERS)], markersize=5, linestyle="none", label=_plot_text(v))
        what = f"E − E({_plot_text(ref)})" if ref is not None else "E − lowest E of the variants"
        ax.set_ylabel(f"{what} / hartree")
        ax.set_title(f"Energy error per molecule ({what})")
        ax.grid(True, linewidth=0.3)
        ax.legend(fontsize=8)
    axes[-1].set_xticks(x)
    axes[-1].set_xticklabels([_plot_text(s, shorten=True) for s in structures], rotation=90, fontsize=7)
    # fixed margins in inches: room for the rotated names
    fig.subplots_adjust(left=0.9 / width, right=1 - 0.2 / width, bottom=1.05 / height, top=1 - 0.45 / height,
                        hspace=0.6 / 3.5)
    return fig


def outlying(points: Sequence[tuple[float, float]]) -> list[bool]:
    """Which of the (x, computed) points are outlying (the rule of OUTLIER_RULE)."""
    import statistics

    if len(points) < OUTLIER_MIN_POINTS:
        return [False] * len(points)
    errors = [y - x for x, y in points]
    median = statistics.median(errors)
    mad = statistics.median(abs(d - median) for d in errors)
    if mad == 0:
        return [False] * len(points)
    return [abs(d - median) > OUTLIER_MADS * 1.4826 * mad for d in errors]


def atomization_plot(variants: Sequence[str], rows, against: str) -> bytes:
    """The PNG of ``atomization_figure``."""
    return _png(atomization_figure(variants, rows, against))


def atomization_figure(variants: Sequence[str], rows, against: str):
    """Computed atomization energies against experiment (``against`` = "experiment") or against
    the reference basis ("reference"), kcal/mol, with the line of equality; outlying points
    (``outlying``) labelled with their molecule."""
    fig, (ax,) = _figure(7.0, 6.5)
    lo, hi = [], []
    for i, v in enumerate(variants):
        pts, names = [], []
        for r in rows:
            if r.variant != v or r.atomization_kcal_mol is None:
                continue
            x = r.experiment_atomization_kcal_mol if against == "experiment" else r.reference_atomization_kcal_mol
            if x is not None:
                pts.append((x, r.atomization_kcal_mol))
                names.append(r.structure)
        if pts:
            xs, ys = zip(*pts)
            ax.scatter(xs, ys, s=16, marker=MARKERS[i % len(MARKERS)], label=_plot_text(v))
            for (px, py), name, out in zip(pts, names, outlying(pts)):
                if out:
                    ax.annotate(_plot_text(name, shorten=True), (px, py), xytext=(4, 3), textcoords="offset points", fontsize=7)
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
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.09, top=0.94)
    return fig


# ---------------------------------------------------------------------------- the page


def _num(value, digits: int) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _text(value) -> str:
    """Text from an input for the page: one line, HTML-escaped."""
    return html.escape(one_line(value))


def data_uri(png: bytes) -> str:
    """``data:image/png;base64,...`` (RFC 2397) of PNG bytes."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _data_table(first, numbers, items, last=()) -> str:
    """An HTML table: the ``first`` columns (header, cell function, "t" for text), the number
    columns (header, attribute, digits) that hold a value in some item (a column empty in
    every row is left out), then the ``last`` columns."""
    numbers = [c for c in numbers if any(getattr(i, c[1]) is not None for i in items)]
    head = "".join(f"<th class='{k}'>{h}</th>" if k else f"<th>{h}</th>" for h, _, k in first)
    head += "".join(f"<th>{h}</th>" for h, _, _ in numbers)
    head += "".join(f"<th class='{k}'>{h}</th>" if k else f"<th>{h}</th>" for h, _, k in last)
    lines = [f"<table><tr>{head}</tr>"]
    for i in items:
        cells = "".join(f"<td class='{k}'>{f(i)}</td>" if k else f"<td>{f(i)}</td>" for _, f, k in first)
        cells += "".join(f"<td>{_num(getattr(i, name), digits)}</td>" for _, name, digits in numbers)
        cells += "".join(f"<td class='{k}'>{f(i)}</td>" if k else f"<td>{f(i)}</td>" for _, f, k in last)
        lines.append(f"<tr>{cells}</tr>")
    return "\n".join(lines) + "</table>"


def cautions(plan) -> tuple[str, ...]:
    """The cautions of the report: CAUTIONS (the one on the experimental values only where the
    structures have them), and one for charged structures, whose atomization energies are taken
    against neutral free atoms."""
    out = CAUTIONS if any(b.experiment_kcal_mol is not None for b in plan.structures) else CAUTIONS[:2]
    charged = [b.name for b in plan.structures if b.structure.charge != 0]
    if not charged:
        return out
    shown = ", ".join(one_line(n) for n in charged[:10]) + (f" and {len(charged) - 10} more" if len(charged) > 10 else "")
    return out + (
        f"Charged structures ({shown}): their atomization energies are taken against neutral free atoms, so they "
        "include an ionization energy or an electron affinity and are not the energy to break the ion into "
        "its fragments.",)


def render_html(plan, rows, summary, atoms, images: Mapping[str, tuple[bytes, str]], notes: Sequence[str] = (),
                hartree_kcal_mol: float | None = None) -> str:
    """The report page: cautions, summary per variant, the plots (``images``: caption → (PNG
    bytes, text under it), embedded), ``notes`` on plots left out, the free atoms, the
    failures, and every row; ``hartree_kcal_mol`` the factor used (stated when given).
    Byte-identical for the same input."""
    e = html.escape
    ref = plan.reference
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">', "<title>stobuilder bench</title>",
           "<style>body{font-family:sans-serif;margin:2em;max-width:80em}table{border-collapse:collapse;"
           "font-size:90%}td,th{border:1px solid #bbb;padding:2px 6px;text-align:right}"
           "td.t,th.t{text-align:left}.caution{background:#fff4e0;border-left:4px solid #e0a040;padding:.5em 1em}"
           "img{max-width:100%}.note{color:#444}</style>", "</head><body>", "<h1>stobuilder bench</h1>"]
    out.append(f"<p>{plural(len(plan.structures), 'structure')} × {plural(len(plan.variants), 'variant')}"
               + (f"; reference basis {_text(ref)}" if ref else "") + ". SCF: RHF for closed shells, ROHF for open "
               "shells (the method <code>build --check</code> picks); free atoms in their ground-state multiplicity, "
               "occupations fixed by atomic symmetry, computed once per element and variant. Energies in hartree, "
               "atomization energies D<sub>e</sub> = ΣE(free atoms) − E(molecule) in kcal/mol"
               + (f" (1 hartree = {hartree_kcal_mol:.6f} kcal/mol)" if hartree_kcal_mol else "") + ".</p>")
    out.append('<div class="caution"><h2>Cautions</h2><ul>' + "".join(f"<li>{e(c)}</li>" for c in cautions(plan))
               + "</ul></div>")
    summary_columns = [
        ("mean |ΔD<sub>e</sub>| vs experiment / kcal mol⁻¹", "mean_abs_atomization_error_kcal_mol", 2),
        ("max |ΔD<sub>e</sub>| vs experiment / kcal mol⁻¹", "max_abs_atomization_error_kcal_mol", 2),
        ("mean E − E(reference) / hartree", "mean_energy_above_reference_hartree", 6),
        ("mean |D<sub>e</sub> − D<sub>e</sub>(reference)| / kcal mol⁻¹", "mean_abs_atomization_vs_reference_kcal_mol", 2),
    ]
    out.append("<h2>Summary per variant</h2>" + _data_table(
        [("variant", lambda s: _text(s.variant), "t"), ("structures", lambda s: str(s.structures), ""),
         ("failed", lambda s: str(s.failed), "")],
        [(head, name, digits) for head, name, digits in summary_columns], summary))
    for caption, (png, under) in images.items():
        out.append(f"<h2>{e(caption)}</h2><p><img src=\"{data_uri(png)}\" alt=\"{e(caption)}\"></p>"
                   + (f"<p class='note'>{e(under)}</p>" if under else ""))
    for note in notes:
        out.append(f"<p class='note'>{e(note)}</p>")
    out.append("<h2>Free atoms</h2><p>The energies every atomization energy is made of (also in "
               "<code>free_atoms.tsv</code> and <code>bench.json</code>): D<sub>e</sub> = ΣE(free atoms) − "
               "E(molecule).</p>" + _data_table(
                   [("variant", lambda a: _text(a.variant), "t"), ("element", lambda a: e(a.element), "t"),
                    ("2S", lambda a: str(a.spin), ""), ("method", lambda a: e(a.method), "t"),
                    ("E / hartree", lambda a: _num(a.energy_hartree, 8), ""),
                    ("state", lambda a: "converged" if a.converged else _text("failed: " + (a.error or "SCF failed")),
                     "t")], [], atoms))
    failed = [r for r in rows if r.failed]
    out.append("<h2>Failures</h2>")
    if failed:
        out.append("<ul>" + "".join(f"<li>{_text(r.structure)} ({_text(r.variant)}): {_text(r.error)}</li>"
                                    for r in failed) + "</ul>")
    else:
        out.append("<p>None: every SCF converged.</p>")
    out.append("<h2>Every row</h2>" + _data_table(
        [("structure", lambda r: _text(r.structure), "t"), ("variant", lambda r: _text(r.variant), "t"),
         ("2S", lambda r: str(r.spin), ""), ("method", lambda r: e(r.method), "t"),
         ("E / hartree", lambda r: _num(r.energy_hartree, 8), ""),
         ("D<sub>e</sub> / kcal mol⁻¹", lambda r: _num(r.atomization_kcal_mol, 2), "")],
        [("E(reference) / hartree", "reference_energy_hartree", 8),
         ("D<sub>e</sub>(reference) / kcal mol⁻¹", "reference_atomization_kcal_mol", 2),
         ("D<sub>e</sub>(experiment) / kcal mol⁻¹", "experiment_atomization_kcal_mol", 2)],
        rows,
        [("iterations", lambda r: str(r.iterations), ""), ("seconds", lambda r: f"{r.wall_seconds:.3f}", ""),
         ("state", lambda r: _text("failed: " + r.error if r.failed else "converged"), "t")]))
    out.append("</body></html>")
    return "\n".join(out) + "\n"


def render_outputs(plan, rows, summary, atoms, files: Mapping[str, str], document) -> dict[str, str | bytes]:
    """{path: contents} of every output: ``files`` maps "tsv", "atoms_tsv", "json", "report",
    "energy_plot", "atomization_plot" to paths (the plots' beside the report); ``document(files
    written)`` is the JSON document (``bench.bench_document``). The energy plot is left out with
    one variant and no reference (``energy_panels``); the atomization plot is made against
    experiment where the set has it, else against the reference basis, else not at all. A plot
    left out has no path in the result, and the page says why."""

    variants = [v.label for v in plan.variants]
    structures = [b.name for b in plan.structures]
    contents: dict[str, str | bytes] = {}
    images: dict[str, tuple[bytes, str]] = {}
    notes = []
    energy = energy_plot(structures, variants, rows, plan.reference)
    if energy is not None:
        contents[files["energy_plot"]] = energy
        images["Energy error per molecule"] = (energy, "")
    else:
        notes.append("No energy plot: with one variant and no reference basis there is no energy to "
                     "compare each molecule's energy with.")
    has_exp = any(r.experiment_atomization_kcal_mol is not None and r.atomization_kcal_mol is not None for r in rows)
    has_ref = any(r.reference_atomization_kcal_mol is not None and r.atomization_kcal_mol is not None for r in rows)
    if has_exp or has_ref:
        png = atomization_plot(variants, rows, "experiment" if has_exp else "reference")
        contents[files["atomization_plot"]] = png
        images["Atomization energies, computed against " + ("experiment" if has_exp else "the reference basis")] = (
            png, OUTLIER_RULE)
    else:
        notes.append("No atomization plot: the structures have no experimental atomization energy and no reference "
                     "basis was asked for.")
    written = {k: p for k, p in files.items() if k not in ("energy_plot", "atomization_plot") or p in contents}
    contents[files["tsv"]] = render_tsv(rows)
    contents[files["atoms_tsv"]] = render_atoms_tsv(atoms)
    doc = document(written)
    contents[files["json"]] = render_json(doc)
    contents[files["report"]] = render_html(plan, rows, summary, atoms, images, notes, doc.get("hartree_to_kcal_mol"))
    return contents


__all__ = ["ATOM_TSV_COLUMNS", "CAUTIONS", "OUTLIER_RULE", "TSV_COLUMNS", "atomization_figure", "atomization_plot", "cautions", "data_uri",
           "energy_figure", "energy_plot", "outlying", "render_atoms_tsv", "render_html", "render_json", "render_outputs", "render_tsv"]
