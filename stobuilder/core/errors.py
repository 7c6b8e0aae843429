"""The one exception type that the command line turns into a one-line message."""


class InputError(ValueError):
    """A bad input: the message names the input and the problem, on one line."""
