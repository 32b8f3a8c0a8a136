"""`lapbalance check`: run a car around a track and check it against handling targets."""

from __future__ import annotations

import sys

import click

from lapbalance.cli import main
from lapbalance.cli.common import (
    apply_line,
    echo_json,
    json_option,
    line_options,
    set_option,
    table,
)
from lapbalance.cli.lap_cmd import load_inputs, track_options


def _measured(o) -> str:
    if o.measured is None:
        return "n/a"
    if isinstance(o.measured, str):
        return o.measured
    from lapbalance.targets import format_value

    unit = "" if o.unit in ("", "-") else f" {o.unit}"
    return f"{format_value(o.measured)}{unit}"


def format_outcomes(outcomes, car_name: str, track_name: str) -> str:
    """Text table of target outcomes with a one-line verdict."""
    from lapbalance.targets import where_text

    rows = []
    for o in outcomes:
        agg = "" if o.aggregate == "each" else f" ({o.aggregate})"
        rows.append([o.name, _measured(o) + agg, o.limit,
                     {"pass": "PASS", "fail": "FAIL"}.get(o.status, "NO DATA"),
                     where_text(o), o.scope])
    lines = [f"{car_name} on {track_name}: handling targets", "",
             table(rows, ["target", "measured", "limit", "result", "worst at", "scope"],
                   align="lllll" + "l")]
    failed = [o for o in outcomes if not o.passed]
    if failed:
        lines.append("")
    for o in failed:
        lines.append(f"{o.name}: {o.detail}" + (f" -- {o.note}" if o.note else ""))
    n_ok = sum(o.passed for o in outcomes)
    lines.append("")
    lines.append(f"{n_ok} of {len(outcomes)} targets pass"
                 + ("" if n_ok == len(outcomes) else f"; {len(outcomes) - n_ok} fail"))
    return "\n".join(lines)


@main.command("check")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.argument("targets_file", type=click.Path(dir_okay=False))
@set_option
@json_option
@track_options
@line_options
def check_command(car_file, track_file, targets_file, overrides, as_json, step_m, closed,
                  start_speed_kph, line, track_width_m, line_margin_m):
    """Check CAR_FILE on TRACK_FILE against the handling targets in TARGETS_FILE.

    Exit status 0 when every target passes, 1 when any fails (or has no data), 2 on bad input.
    """
    from lapbalance.lap import simulate_lap
    from lapbalance.targets import all_passed, check, load_targets

    targets = load_targets(targets_file)
    car, track = load_inputs(car_file, track_file, overrides, step_m, closed)
    track = apply_line(track, car, line, track_width_m, line_margin_m)
    result = simulate_lap(car, track, start_speed_kph=start_speed_kph)
    outcomes = check(result, targets)
    ok = all_passed(outcomes)
    if as_json:
        from lapbalance.provenance import for_lap

        echo_json({"car": car.name, "track": getattr(track, "name", ""),
                   "targets_file": str(targets_file), "passed": ok,
                   "targets": [o.to_dict() for o in outcomes],
                   "provenance": for_lap(result, [("targets", targets_file)])})
    else:
        click.echo(format_outcomes(outcomes, car.name, getattr(track, "name", "")))
    if not ok:
        sys.exit(1)
