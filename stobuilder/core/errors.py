"""The exception types that the command line turns into a one-line message."""

from __future__ import annotations

from collections.abc import Mapping


class InputError(ValueError):
    """A bad input: the message names the input and the problem, on one line."""


class OptionError(InputError):
    """A bad value of one build option (or of two that exclude each other). Its text names each
    option as the door that took it calls it: the Python argument (``charge``) by default, and
    the command line's flag (``--charge``) where ``stobuilder.cli.main`` prints it
    (``render(stobuilder.cli.options.CLI_FLAGS)``).

    option   the BuildOptions field (or the Python argument) the value was given for
    rest     the message after the name, e.g. " must be a whole number, got 0.5"
    prefix   text before the name, e.g. a structure file's path and ": "
    other    a second option named after ``rest`` (then ``tail`` follows it)
    """

    def __init__(self, option: str, rest: str, prefix: str = "", other: str | None = None, tail: str = ""):
        self.option, self.rest, self.prefix, self.other, self.tail = option, rest, prefix, other, tail
        super().__init__(self.render({}))

    def render(self, names: Mapping[str, str]) -> str:
        """The message with every option called by its name in ``names`` (its own name when absent)."""
        second = "" if self.other is None else names.get(self.other, self.other) + self.tail
        return f"{self.prefix}{names.get(self.option, self.option)}{self.rest}{second}"

    def within(self, prefix: str) -> "OptionError":
        """This error with ``prefix`` (e.g. a structure's name and ": ") before its text."""
        return OptionError(self.option, self.rest, prefix + self.prefix, self.other, self.tail)

    @classmethod
    def of(cls, option: str, exc: InputError) -> "OptionError":
        """``exc`` (a message that begins with ``option``, as ``limits`` writes them) as an
        OptionError of ``option``."""
        message = str(exc)
        return cls(option, message[len(option):] if message.startswith(option) else f": {message}")
