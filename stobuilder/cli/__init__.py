"""The command line: argparse subcommands over the Python API, nothing else.

One module per command (``stobuilder/cli/<name>.py``) with ``HELP``, ``add_arguments(parser)``
and ``run(args) -> int``; ``COMMANDS`` is the registry, in the order ``--help`` lists them. The
shared argument groups are in ``options``, the error handling and argument types in ``common``.
Building the parser imports no SCF, optimiser or calculator code: each command imports what it
needs inside ``run``.

A bad input prints one line ``stobuilder: error: ...`` to stderr and exits with status 2.
"""

from __future__ import annotations

import sys

from stobuilder.cli import atom, batch, bench, build, fit, formats, relax, tune, zeta
from stobuilder.cli.common import EXIT_BAD_INPUT, Parser, StderrHandler, guarded, say_deprecations
from stobuilder.cli.options import CLI_FLAGS
from stobuilder.core.version import __version__

COMMANDS = {
    "build": build,
    "relax": relax,
    "atom": atom,
    "formats": formats,
    "batch": batch,
    "bench": bench,
    "fit": fit,
    "tune": tune,
    "zeta": zeta,
}


def parser() -> Parser:
    """The whole command line: one subparser per entry of ``COMMANDS``."""
    top = Parser(prog="stobuilder", description="Slater-type-orbital minimal bases expanded in Gaussians.")
    top.add_argument("--version", action="version", version=f"stobuilder {__version__}")
    sub = top.add_subparsers(dest="command", required=True, parser_class=Parser)
    for name, module in COMMANDS.items():
        module.add_arguments(sub.add_parser(name, help=module.HELP, description=module.HELP))
    return top


def main(argv=None) -> int:
    """Run one command line (``sys.argv[1:]`` by default); the exit status."""

    def run() -> int:
        StderrHandler.install()
        args = parser().parse_args(argv)
        say_deprecations(args)
        return COMMANDS[args.command].run(args)

    return guarded(run, CLI_FLAGS)


__all__ = ["COMMANDS", "EXIT_BAD_INPUT", "main", "parser"]
