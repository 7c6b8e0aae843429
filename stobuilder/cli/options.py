"""The argument groups the commands share, and parsed arguments turned into the library's values.

Groups (each command adds the ones it honours, nothing it would refuse):

- ``add_basis``   basis options: --rule, --gaussians, --norm, --sharing, --radial, --zeta, --zeta-file
                  (a ``BasisSpec`` and the zeta-file library)
- ``add_output``  output options: --code, --sp-shells (``OutputOptions``)
- ``add_scf``     SCF options: --method, --charge, --spin, and with ``check=True`` --check
                  (``CheckOptions``)

``build_options(args)`` makes the one ``BuildOptions`` of whatever groups a command added.
``CLI_FLAGS`` maps the Python names an ``OptionError`` carries to these flags, so a message from
the library reads in the command line's words. The library itself knows no flag.

Deprecated spellings (hidden from --help, working, one line on stderr): ``--fit`` for
``--norm``; ``--shared-exponents`` / ``--separate-fits`` for ``--sharing shared`` / ``--sharing
separate``.

Light: choices and help texts come from the registries (rules, formats, norms, methods), none of
which imports PySCF, scipy.optimize or ASE's calculators.
"""

from __future__ import annotations

import argparse
import contextlib

from stobuilder.core.errors import InputError
from stobuilder.cli.common import Choice, DeprecatedAlias, whole_arg

# The flag of each Python option name, for ``OptionError.render`` (every command's messages).
CLI_FLAGS = {
    "rule": "--rule", "gaussians": "--gaussians", "norm": "--norm", "sharing": "--sharing",
    "radial": "--radial", "zeta": "--zeta", "zeta_library": "--zeta-file", "zeta_file": "--zeta-file",
    "sp_shells": "--sp-shells", "codes": "--code", "check": "--check", "method": "--method", "charge": "--charge",
    "spin": "--spin", "merge_into": "--merge-into", "split_elements": "--split-elements", "out_dir": "--out",
}

GAUSSIANS_METAVAR = "N"
ZETA_METAVAR = "ELEMENT:LABEL=VALUE"
ZETA_ONE_ELEMENT_METAVAR = "[ELEMENT:]LABEL=VALUE"


def _one_of_several(text: str) -> int:
    """One value of a ``--gaussians`` that takes several: as ``whole_arg``, and a value that is no
    number says why argparse read it as one (``bench --gaussians 3 CH4.xyz``)."""
    try:
        return whole_arg(text)
    except argparse.ArgumentTypeError as exc:
        if "not a whole number" not in str(exc):
            raise
        raise argparse.ArgumentTypeError(
            f"{exc}; --gaussians takes every value that follows it, so give the structures before it") from None


def add_gaussians(parser, several: bool = False, default=None) -> None:
    """``--gaussians N``: one value, or with ``several`` (the commands that compare expansions)
    repeatable, each occurrence taking one or more (``--gaussians 3 6 --gaussians 12``)."""
    from stobuilder.core.defaults import DEFAULTS
    from stobuilder.expansion.fit import MAX_GAUSSIANS

    if several:
        parser.add_argument("--gaussians", type=_one_of_several, action="extend", nargs="+", default=default,
                            metavar=GAUSSIANS_METAVAR,
                            help=f"Gaussians per STO, 1–{MAX_GAUSSIANS}; repeatable, several at once allowed")
    else:
        default = DEFAULTS["gaussians"] if default is None else default
        parser.add_argument("--gaussians", type=whole_arg, default=default, metavar=GAUSSIANS_METAVAR,
                            help=f"Gaussians per STO, 1–{MAX_GAUSSIANS} (default {default})")


def add_norm(parser, several: bool = False) -> None:
    """``--norm`` (the fitting norm; names from the library), with the hidden deprecated ``--fit``."""
    from stobuilder.core.defaults import DEFAULTS
    from stobuilder.expansion.fit import NORMS

    default = None if several else DEFAULTS["norm"]
    text = "l2 least squares, h1 Sobolev" if set(NORMS) == {"l2", "h1"} else ", ".join(NORMS)
    more = f"repeatable (default {DEFAULTS['norm']})" if several else f"default {DEFAULTS['norm']}"
    parser.add_argument("--norm", choices=NORMS, default=default, action=Choice, append=several,
                        help=f"fitting norm of the Gaussian expansions: {text} ({more})")
    parser.add_argument("--fit", dest="norm", choices=NORMS, action=DeprecatedAlias, new="--norm", append=several)


def add_zeta(parser, one_element: bool = False, on_top_of_file: bool = True) -> None:
    """``--zeta [ELEMENT:]LABEL=VALUE`` (repeatable; ``ZetaTable.parse``'s grammar). The element
    may be left out only where the command names one element (``one_element``)."""
    if one_element:
        parser.add_argument("--zeta", action="append", metavar=ZETA_ONE_ELEMENT_METAVAR,
                            help="your own ζ for one subshell, e.g. 1s=1.6875 (repeatable)")
    else:
        tail = "; on top of --zeta-file" if on_top_of_file else ""
        parser.add_argument("--zeta", action="append", metavar=ZETA_METAVAR,
                            help=f"your own ζ for one subshell, e.g. Fe:3d=2.1 (repeatable{tail})")


def add_basis(parser) -> None:
    """The basis options (one ``BasisSpec`` and the zeta-file library)."""
    from stobuilder.builder.spec import RADIAL_FORMS, SHARING_MODES
    from stobuilder.core.defaults import DEFAULTS
    from stobuilder.cli.common import add_rule

    g = parser.add_argument_group("basis options")
    add_rule(g)
    add_gaussians(g)
    add_norm(g)
    g.add_argument(
        "--sharing", choices=SHARING_MODES, default=DEFAULTS["sharing"], action=Choice,
        help="which STOs share Gaussian exponents: family (one fit at ζ = 1 per n, each subshell scaled by its "
             "own ζ²), shared (one exponent set per n, fitted jointly at the rule's ζ ratios; allows sp shells), "
             f"separate (every subshell fitted on its own) (default {DEFAULTS['sharing']})",
    )
    g.add_argument("--shared-exponents", dest="sharing", action=DeprecatedAlias, new="--sharing", value="shared")
    g.add_argument("--separate-fits", dest="sharing", action=DeprecatedAlias, new="--sharing", value="separate")
    g.add_argument(
        "--radial", choices=RADIAL_FORMS, default=DEFAULTS["radial"],
        help=f"STO radial form: integer n, or the rule's effective n* (default {DEFAULTS['radial']})",
    )
    add_zeta(g)
    g.add_argument("--zeta-file", metavar="FILE.toml", help="your own ζ: a TOML table per element, e.g. [Fe] 3d = 2.1")


def add_output(parser) -> None:
    """The output options (``OutputOptions``)."""
    from stobuilder.formats import formats

    g = parser.add_argument_group("output options")
    g.add_argument("--code", action="append", metavar="CODE",
                   help=f"output format, repeatable: {', '.join(formats())}, or all (default nwchem)")
    g.add_argument("--sp-shells", action="store_true", help="write s and p shells that share exponents as sp shells")


def add_method(parser) -> None:
    """``--method``: the SCF method (the commands that run SCFs)."""
    from stobuilder.model.methods import METHODS

    parser.add_argument("--method", choices=METHODS, default="auto", help="SCF method (default: RHF/ROHF)")


def add_scf(parser, check: bool = True) -> None:
    """The SCF options (``CheckOptions``): --method, --charge, --spin, and --check where the
    command runs SCF checks only when asked (build, batch)."""
    g = parser.add_argument_group("SCF options")
    if check:
        g.add_argument("--check", action="store_true", help="run PySCF SCF checks with the basis before writing")
    add_method(g)
    g.add_argument("--charge", type=whole_arg, metavar="Q", help="total charge (overrides the files)")
    g.add_argument("--spin", type=whole_arg, metavar="2S", help="2S, the number of unpaired electrons (overrides the files)")


def add_parallel(parser, progress_help: str) -> None:
    """Where the tasks run (batch, bench): --workers or --scheduler, and --progress."""
    from stobuilder.jobs.progress import PROGRESS_MODES

    parser.add_argument("--workers", type=whole_arg, metavar="N", help="local worker processes (default: the usable cores)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run on a Dask cluster, e.g. tcp://host:8786 (needs stobuilder[cluster])")
    parser.add_argument("--progress", choices=PROGRESS_MODES, default="auto", help=progress_help)


def workers(args) -> tuple[int | None, str | None]:
    """``--workers`` / ``--scheduler`` checked: (local worker count, or None on a Dask cluster;
    a note when the count was capped)."""
    from stobuilder import jobs

    if args.scheduler is not None and args.workers is not None:
        raise InputError("--workers is for local runs; a Dask cluster brings its own workers")
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be >= 1, got {args.workers}")
    if args.scheduler is not None:
        jobs.check_scheduler_address(args.scheduler)
        return None, None
    return jobs.worker_count(args.workers)


@contextlib.contextmanager
def executor(args):
    """The Dask cluster's executor for ``--scheduler`` (its client closed afterwards), else None:
    the engine's own process pool."""
    from stobuilder import jobs

    if args.scheduler is None:
        yield None
        return
    client, pool = jobs.dask_executor(args.scheduler)
    try:
        yield pool
    finally:
        client.close()


def build_options(args):
    """The BuildOptions of parsed arguments: the groups the command added, the rest at their
    defaults (the zeta file read now, as the options' library: ``--zeta`` on top)."""
    from stobuilder.builder.spec import ZetaTable
    from stobuilder.pipeline.options import BuildOptions

    get = vars(args).get
    return BuildOptions(
        rule=args.rule,
        gaussians=args.gaussians,
        norm=args.norm,
        sharing=args.sharing,
        radial=args.radial,
        zeta=ZetaTable.parse(get("zeta") or []),
        zeta_file=get("zeta_file") or None,
        sp_shells=bool(get("sp_shells")),
        codes=tuple(get("code") or ("nwchem",)),
        check=bool(get("check")),
        method=get("method") or "auto",
        charge=get("charge"),
        spin=get("spin"),
    )


__all__ = ["CLI_FLAGS", "add_basis", "add_gaussians", "add_method", "add_norm", "add_output", "add_scf", "add_parallel", "add_zeta", "build_options",
           "executor", "workers"]
