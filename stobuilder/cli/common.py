"""What every command shares: the parser class, the argument types, deprecated aliases, JSON
printing and the handling of errors (one line ``stobuilder: error: ...``, exit status 2).

Light on purpose: this module and the parser it helps build import no SCF, optimiser or
calculator code (tests/test_cli_imports.py).
"""

from __future__ import annotations

import argparse
import sys

from stobuilder.core.errors import InputError

EXIT_BAD_INPUT = 2
EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE, what a shell reports for a command killed by a closed pipe
EXIT_INTERRUPTED = 130  # 128 + SIGINT

WHOLE_NUMBER_LIMIT = 10**100  # far beyond any flag's own range (which the options check); refused before int()


class Parser(argparse.ArgumentParser):
    """argparse with one-line errors (no usage dump) and exit status 2."""

    def error(self, message):
        raise InputError(f"{self.prog}: {message}")


def whole_in(low: int | None = None, high: int | None = None, what: str = ""):
    """The argparse type of every whole-number flag: digits with an optional sign and exponent
    (``200``, ``+3``, ``2e2``), no decimal point (``2.0`` is refused, as the Python door refuses
    the float 2.0), else "is not a whole number"; one outside
    [``low``, ``high``] (default: within ±WHOLE_NUMBER_LIMIT; the options check their own range
    after) is "out of range", saying the range (``what`` names the values: "steps")."""
    from decimal import Decimal, InvalidOperation

    lo = -WHOLE_NUMBER_LIMIT if low is None else low
    hi = WHOLE_NUMBER_LIMIT if high is None else high

    def parse(text: str) -> int:
        try:
            value = Decimal(text.strip())
        except InvalidOperation:
            value = None
        if value is None or not value.is_finite() or value != value.to_integral_value() or "." in text:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number")
        if not lo <= value <= hi:
            span = f"{what} go from {lo} to {hi}" if what else f"no flag takes a whole number beyond ±1e{len(str(hi)) - 1}"
            raise argparse.ArgumentTypeError(f"{text} is out of range: {span}")
        return int(value)

    return parse


whole_arg = whole_in()  # the argparse type of a whole-number flag with no range of its own


def deprecation(old: str, new: str) -> None:
    """The one line a deprecated flag prints on stderr."""
    print(f"stobuilder: {old} is deprecated; use {new}", file=sys.stderr)


DEPRECATIONS = "_deprecated"  # the namespace attribute {old flag: new flag} of a parsed command line


def say_deprecations(args) -> None:
    """One line on stderr per deprecated flag the command line used (after it parsed: a command
    line that fails to parse says only its error)."""
    for old, new in getattr(args, DEPRECATIONS, {}).items():
        deprecation(old, new)


class DeprecatedAlias(argparse.Action):
    """A hidden old flag (``--fit``) that does what its new one does (``--norm``) and says so on
    stderr, once per command line (``say_deprecations``). ``value`` fixes the value of a flag that takes none
    (``--shared-exponents`` → ``--sharing shared``); ``append`` collects values as the new flag
    does where it is repeatable. Registered with ``help=argparse.SUPPRESS``: never in --help."""

    def __init__(self, option_strings, dest, new: str, value=None, append: bool = False, **kwargs):
        self.new, self.value, self.append = new, value, append
        kwargs.setdefault("help", argparse.SUPPRESS)
        super().__init__(option_strings, dest, nargs=0 if value is not None else None, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        said = namespace.__dict__.setdefault(DEPRECATIONS, {})
        said.setdefault(option_string, self.new if self.value is None else f"{self.new} {self.value}")
        value = self.value if self.value is not None else values
        _store(parser, namespace, self.dest, value, option_string, self.append)


class Choice(argparse.Action):
    """A flag whose value may also come from a deprecated alias of the same ``dest``: two
    different flags giving different values are an error (``--sharing family`` with
    ``--separate-fits``), as the old mutually exclusive flags were."""

    def __init__(self, option_strings, dest, append: bool = False, **kwargs):
        self.append = append
        super().__init__(option_strings, dest, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        _store(parser, namespace, self.dest, values, option_string, self.append)


def _store(parser, namespace, dest, value, flag, append) -> None:
    if append:
        items = list(getattr(namespace, dest, None) or [])
        setattr(namespace, dest, items + [value])
        return
    given = namespace.__dict__.setdefault("_given_by", {})
    before = given.get(dest)
    if before is not None and before[0] != flag and before[1] != value:
        parser.error(f"{before[0]} and {flag} give different values; give one")
    given[dest] = (flag, value)
    setattr(namespace, dest, value)


class Refused(argparse.Action):
    """A hidden flag another command takes (``--check`` in tune): an error saying why, one line,
    before any work. Never in --help."""

    def __init__(self, option_strings, dest, reason: str, **kwargs):
        self.reason = reason
        kwargs.setdefault("help", argparse.SUPPRESS)
        super().__init__(option_strings, dest, nargs=0, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        raise InputError(f"{parser.prog}: {option_string} is for build; {self.reason}")


def refuse(parser, flags, reason: str) -> None:
    """Register ``flags`` (build's, which this command does not take) as Refused."""
    for flag in flags:
        parser.add_argument(flag, action=Refused, reason=reason, dest=f"_refused{flag.replace('-', '_')}")


def print_json(doc) -> None:
    """Print strict JSON (no NaN or Infinity)."""
    from stobuilder.core.limits import strict_json

    print(strict_json(doc, "the result holds a number that is not finite; nothing printed"))


def fmt_energy(e) -> str:
    return "n/a" if e is None else f"{e:.8f}"


def add_json(parser, help: str = "print JSON") -> None:
    parser.add_argument("--json", action="store_true", help=help)


def add_rule(parser, default: str | None = None) -> None:
    """``--rule`` (one value): the names from the rules' registry."""
    from stobuilder.core.defaults import DEFAULTS
    from stobuilder.screening import rules

    default = DEFAULTS["rule"] if default is None else default
    parser.add_argument("--rule", default=default, help=f"screening rule: {', '.join(rules())} (default {default})")


class StderrHandler:
    """Log records of the stobuilder loggers (progress of long computations) as
    ``stobuilder: message`` lines on whatever sys.stderr is at the time."""

    @staticmethod
    def install() -> None:
        import logging

        logger = logging.getLogger("stobuilder")
        if any(getattr(h, "_stobuilder_cli", False) for h in logger.handlers):
            return

        class Handler(logging.Handler):
            _stobuilder_cli = True

            def emit(self, record):
                try:
                    print(f"stobuilder: {record.getMessage()}", file=sys.stderr, flush=True)
                except (OSError, ValueError):
                    pass

        logger.addHandler(Handler(logging.INFO))
        logger.setLevel(logging.INFO)
        logger.propagate = False


def quiet_broken_pipe() -> int:
    """stdout's reader has gone (``stobuilder formats | head -1``): stop quietly, as command-line
    tools do, with no message and no second error when Python flushes stdout at exit."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    return EXIT_BROKEN_PIPE


def flag_text(exc: InputError, flags) -> str:
    """The message of ``exc`` in the command line's words, on one line: an error that names
    Python arguments (``OptionError``, ``files.OverwriteError``: anything with ``render``) names
    their flags instead (``flags``: ``options.CLI_FLAGS``); a message that a path with a line end
    would break gets the line end escaped (``limits.one_line``)."""
    from stobuilder.core.limits import one_line

    text = exc.render({**flags, "force": "--force"}) if hasattr(exc, "render") else str(exc)
    return one_line(text) if len(text.splitlines()) > 1 else text


def guarded(run, flags) -> int:
    """``run()``'s exit status, with every expected failure as one line on stderr: bad input
    (InputError, OSError) exit 2, its message naming the flags of ``flags``; a closed stdout
    141; an interrupt 130."""
    try:
        status = run()
        sys.stdout.flush()  # a closed pipe shows here, inside the handlers, not at exit
        return status
    except BrokenPipeError:
        return quiet_broken_pipe()
    except InputError as exc:
        print(f"stobuilder: error: {flag_text(exc, flags)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"stobuilder: error: {where}{exc.strerror or exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("stobuilder: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
