"""The defaults of every door, in one place: the CLI's flags, the Python keywords, the calculator's
parameters, bench's variants and the lower layers' own keyword defaults all read this table."""

DEFAULTS = {"rule": "slater", "gaussians": 3, "norm": "l2", "sharing": "family", "radial": "integer"}

__all__ = ["DEFAULTS"]
