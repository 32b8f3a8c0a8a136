"""`lapbalance rerun`: run a lap again from nothing but its summary.json (inputs by hash)."""

from __future__ import annotations

import click

from lapbalance.cli import main
from lapbalance.cli.common import echo_json, json_option, prepare_solver, units_option


@main.command("rerun")
@click.argument("summary_file", type=click.Path(dir_okay=False))
@click.option("--search", "search", multiple=True, type=click.Path(file_okay=False),
              help="A folder to look in for input files that moved (matched by name and "
                   "SHA-256; repeatable).")
@click.option("--tolerance-s", type=float, default=1e-9, show_default=True,
              help="Largest lap-time difference that counts as reproduced [s].")
@json_option
@units_option
def rerun_command(summary_file, search, tolerance_s, as_json, units):
    """Rerun the lap recorded in SUMMARY_FILE (a summary.json from `lap --out`).

    Every input file must still have the SHA-256 recorded in the summary; the recorded --set
    overrides and track and solver settings are applied. Exit status 0 when the lap time
    matches the recorded one within --tolerance-s, 1 when it does not, 2 on bad input.
    """
    import sys

    from lapbalance.cli.lap_cmd import format_lap
    from lapbalance.rerun import rerun

    prepare_solver()
    result, check = rerun(summary_file, search)
    ok = abs(check["difference_s"]) <= tolerance_s
    if as_json:
        echo_json({**check, "reproduced": ok, "tolerance_s": tolerance_s})
    else:
        for f in check["inputs_checked"]:
            click.echo(f"input {f['role']}: {f['path']} (SHA-256 {f['sha256'][:12]}... "
                       "matches)")
        click.echo(format_lap(result, units=units))
        click.echo("")
        click.echo(f"{result.time_label} {check['lap_time_s']:.9f} s, recorded "
                   f"{check['recorded_lap_time_s']:.9f} s, difference "
                   f"{check['difference_s']:+.1e} s: "
                   + ("reproduced" if ok else f"NOT reproduced (tolerance {tolerance_s:g} s)"))
    if not ok:
        sys.exit(1)
