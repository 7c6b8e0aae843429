"""``stobuilder fit``: Gaussians fitted to STOs (exponents, coefficients, error; a plot)."""

from __future__ import annotations

from stobuilder.cli.common import add_json, deprecation, print_json
from stobuilder.cli.options import add_gaussians, add_norm, add_zeta
from stobuilder.core.errors import InputError

HELP = "fit Gaussians to STOs: exponents, coefficients, error; optionally a plot"


def add_arguments(p) -> None:
    p.add_argument("subshells", nargs="+", metavar="SUBSHELL", help="e.g. 1s, or 2s 2p (or 2s,2p) sharing exponents")
    add_gaussians(p)
    add_norm(p)
    add_zeta(p, one_element=True)
    p.add_argument("--plot", metavar="FILE.png", help="draw the STO, its expansion, the residual and epsilon against N")
    p.add_argument("--force", action="store_true", help="overwrite an existing --plot file")
    add_json(p)
    p.epilog = ("--zeta gives the ζ (bohr⁻¹) the exponents are scaled to (default 1): the subshells of one fit "
                "share it, so one value, e.g. --zeta 2s=1.95 (the element prefix names nothing a fit uses)")


def _plain_number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def fit_zeta(items, labels) -> float:
    """The one ζ of ``fit --zeta`` items (``ZetaTable.parse``'s grammar, the element optional; a
    plain number is the deprecated form of earlier versions): every label must be one of the
    fitted subshells, and all values equal (one fit, one scale). Default 1."""
    from stobuilder.builder.spec import ZetaTable
    from stobuilder.core.limits import zeta_value
    from stobuilder.model.elements import normalise_symbol

    values: dict[str, float] = {}
    grammar, old = [], []
    for text in items or ():
        number = _plain_number(text)
        if number is not None:
            old.append(text)
            values[labels[0]] = zeta_value(number, "--zeta")
        else:
            grammar.append(text)
    if grammar:
        # a fit has no element: the table is read back for whichever one the items name
        key = grammar[0].split("=", 1)[0]
        symbol = "H"
        if ":" in key:
            try:
                symbol = normalise_symbol(key.split(":", 1)[0])
            except InputError:
                pass  # ZetaTable.parse reports the bad element in its own words
        table = ZetaTable.parse(grammar, element=symbol).of_element(symbol)
        for label, zeta in table.items():
            if label not in labels:
                raise InputError(f"--zeta {label}: {label} is not a subshell of this fit ({', '.join(labels)})")
            values[label] = zeta
    distinct = sorted(set(values.values()))
    if len(distinct) > 1:
        given = ", ".join(f"{k}={v:g}" for k, v in values.items())
        raise InputError(f"--zeta: the subshells of one fit share one ζ scale; {given} differ: give one value")
    for text in old:  # said once the values are good: a bad one is a one-line error
        deprecation(f"--zeta {text}", f"--zeta {labels[0]}={text}")
    return distinct[0] if distinct else 1.0


def run(args) -> int:
    from stobuilder.expansion import lookup
    from stobuilder.expansion.fit import normalise_subshells
    from stobuilder.expansion.report import fit_document, fit_table

    labels = list(normalise_subshells([x for item in args.subshells for x in item.split(",") if x]))
    zeta = fit_zeta(args.zeta, labels)
    if args.plot:  # before any fit: the plot may be written (atomic_write makes no folder)
        from stobuilder.core.files import check_targets

        check_targets({args.plot: ""}, args.force, make_folders=False, name="--plot")
    fit = lookup(labels, args.gaussians, args.norm)
    doc = fit_document(fit, zeta)
    if args.plot:
        from stobuilder.expansion.plot import plot_fit

        doc["plot"] = plot_fit(fit, args.plot, zeta)
    if args.json:
        print_json(doc)
    else:
        print(fit_table(fit, zeta))
        if args.plot:
            print(f"  wrote {args.plot}")
    return 0
