"""``stobuilder formats``: the basis-file formats (name, extension, description)."""

from __future__ import annotations

from stobuilder.cli.common import add_json, print_json

HELP = "the basis-file formats: name, file extension, description"


def add_arguments(p) -> None:
    add_json(p)


def run(args) -> int:
    from stobuilder.formats import formats

    table = formats().values()
    if args.json:
        print_json({"formats": [{"name": f.name, "extension": f.extension, "description": f.description} for f in table]})
        return 0
    width = max(len(f.extension) for f in table) + 2
    print(f"{'name':<12}{'extension':<{width}}description")
    for f in table:
        print(f"{f.name:<12}{f.extension:<{width}}{f.description}")
    return 0
