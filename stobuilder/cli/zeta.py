"""``stobuilder zeta``: Zeff, n* and ζ of every subshell of elements or configurations."""

from __future__ import annotations

from stobuilder.cli.common import add_json, add_rule, print_json, whole_arg

HELP = "Zeff, n* and zeta of every subshell"


def add_arguments(p) -> None:
    p.add_argument("elements", nargs="+", metavar="ELEMENT-OR-CONFIG", help='e.g. Fe, or "[Ar] 3d7 4s1"')
    add_rule(p)
    p.add_argument("--charge", type=whole_arg, default=0, help="ion charge (default 0)")
    add_json(p)


def run(args) -> int:
    from stobuilder.builder.construct import sto_exponents

    entries = [sto_exponents(item, rule=args.rule, charge=args.charge) for item in args.elements]
    if args.json:
        print_json({
            "rule": args.rule,
            "elements": [
                {
                    "symbol": conf.symbol,
                    "charge": conf.charge,
                    "configuration": conf.label,
                    "shells": [{"label": s.label, "zeff": s.zeff, "n_eff": s.n_eff, "zeta": s.zeta} for s in stos],
                }
                for conf, stos in entries
            ],
        })
        return 0
    for conf, stos in entries:
        charge = f", charge {conf.charge:+d}" if conf.charge else ""
        print(f"{conf.symbol} {conf.label}{charge}  (rule {args.rule})")
        print(f"  {'subshell':<10}{'Zeff':>10}{'n*':>6}{'zeta/bohr^-1':>14}")
        for s in stos:
            print(f"  {s.label:<10}{s.zeff:>10.4f}{s.n_eff:>6.1f}{s.zeta:>14.4f}")
    return 0
