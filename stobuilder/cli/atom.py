"""``stobuilder atom``: one atom or ion with exact STOs, and the cost of its Gaussian expansions."""

from __future__ import annotations

from stobuilder.cli.common import add_json, add_rule, print_json, whole_arg
from stobuilder.cli.options import add_gaussians, add_method, add_norm, add_zeta

HELP = "one atom with exact STOs: energy, ζ, virial ratio, Gaussian-expansion error"


def add_arguments(p) -> None:
    p.add_argument("element", metavar="ELEMENT", help='element symbol, or a configuration such as "[Ar] 3d7 4s1"')
    add_rule(p)
    p.add_argument("--configuration", metavar="CONFIG", help='explicit configuration, e.g. "1s2 2s1 2p3"')
    p.add_argument("--charge", type=whole_arg, default=0, help="ion charge (default 0)")
    add_zeta(p, one_element=True)
    p.add_argument("--optimize", action="store_true", help="optimise every ζ variationally (from the rule's values)")
    p.add_argument("--stos", type=whole_arg, default=1, metavar="K",
                   help="STOs per occupied subshell (default 1; K > 1: all ζ optimised, e.g. 2 double-ζ)")
    p.add_argument("--sto-n", choices=("same", "alternate"), default="same",
                   help="principal quantum numbers of the K STOs: all the subshell's n (default), or n, n+1, n, …")
    add_gaussians(p, several=True, default=[])
    add_norm(p)
    add_method(p)
    add_json(p)


def run(args) -> int:
    from stobuilder.builder.spec import ZetaTable
    from stobuilder.checks.atom import atom_report
    from stobuilder.model.elements import resolve

    symbol = resolve(args.element, args.charge or 0, args.configuration).symbol
    doc = atom_report(
        args.element,
        rule=args.rule,
        configuration=args.configuration,
        charge=args.charge,
        zeta=ZetaTable.parse(args.zeta or [], element=symbol).of_element(symbol) or None,
        optimize=args.optimize,
        gaussians=args.gaussians,
        method=args.method,
        norm=args.norm,
        stos=args.stos,
        sto_n=args.sto_n,
    )
    if args.json:
        print_json(doc)
        return 0
    print(doc["state"])  # names the element, its configuration and the determinant computed
    if doc["stos_per_subshell"] > 1:
        print(f"  STOs ({doc['stos_per_subshell']} per subshell, all ζ optimised): " + "  ".join(
            f"{f['subshell']}(n={f['n']}) {f['zeta']:.6f}" for f in doc["stos"]))
    else:
        source = "optimised" if args.optimize else f"rule {args.rule}" + (", your own ζ" if args.zeta else "")
        print(f"  STOs ({source}): " + "  ".join(f"{k} {v:.6f}" for k, v in doc["zeta"].items()))
    print(f"  exact-STO {doc['method']}: E = {doc['energy_exact_hartree']:.10f} hartree, -V/T = {doc['virial_ratio']:.10f}"
          + ("" if doc["converged"] else "  NOT CONVERGED"))
    limit = doc["hartree_fock_limit"]
    if limit is not None:
        print(f"  E - E(Hartree-Fock limit {limit['energy_hartree']:.7f}) = {limit['above_hartree']:+.3e} hartree"
              f" ({limit['source']})")
    for name, coefficients in doc["expansions"].items():
        print(f"  {name} = " + " ".join(f"{c:+.6f}" for c in coefficients) + "  (over the STOs of its l, in the order above)")
    for note in doc["notes"]:
        print(f"  note: {note}")
    for row in doc["gaussian"]:
        diff = row["energy_hartree"] - doc["energy_exact_hartree"]
        print(
            f"  STO-{row['gaussians']}G ({row['norm']} fit): E = {row['energy_hartree']:.10f} hartree, "
            f"E - E(exact) = {diff:+.3e}" + ("" if row["converged"] else "  NOT CONVERGED")
        )
    print("  orbital energies/hartree: " + "  ".join(
        f"{o['label']}{'' if o['spin'] == 'both' else '(' + o['spin'][0] + ')'} {o['energy_hartree']:.5f}"
        for o in doc["orbital_energies"] if o["occupation"] > 0
    ))
    return 0
