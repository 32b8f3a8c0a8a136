"""Options and helpers shared by the command modules (parsing only, no physics)."""

from __future__ import annotations

import json

import click

set_option = click.option(
    "--set", "overrides", multiple=True, metavar="SECTION.KEY=VALUE",
    help="Override a car-file key, e.g. --set aero.drag_area_m2=0.9 (repeatable).",
)
json_option = click.option("--json", "as_json", is_flag=True,
                           help="Print the result as JSON on stdout.")
force_option = click.option("--force", is_flag=True,
                            help="Replace results already in the output folder.")


def echo_json(obj) -> None:
    click.echo(json.dumps(obj, indent=2, allow_nan=False))


def table(rows: list[list], header: list[str], align: str | None = None) -> str:
    """Plain-text table with a header rule; numbers right-aligned."""
    cells = [[str(c) for c in header]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    if align is None:
        align = "".join("l" if i == 0 else "r" for i in range(len(header)))
    out = []
    for j, r in enumerate(cells):
        line = "  ".join(c.ljust(w) if a == "l" else c.rjust(w)
                         for c, w, a in zip(r, widths, align, strict=True))
        out.append(line.rstrip())
        if j == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)
