"""`lapbalance lap`: run a car around a track and print/write the results."""

from __future__ import annotations

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import echo_json, force_option, json_option, set_option, table
from lapbalance.liftoff import flagged, verdict_counts


def track_options(f):
    f = click.option("--step-m", type=float, default=1.0, show_default=True,
                     help="Resampling step along the track [m].")(f)
    f = click.option("--closed/--open", "closed", default=None,
                     help="Force a closed lap or an open run (default: from the file).")(f)
    f = click.option("--start-speed-kph", type=float, default=None,
                     help="Open tracks: speed at the start [km/h] (default 0, standing).")(f)
    return f


def load_inputs(car_file, track_file, overrides, step_m, closed, start_speed_kph=None,
                more_cars=()):
    """Check the numeric options, load the car and the track (InputError on bad input)."""
    from lapbalance.cli.common import check_start_speed, check_step, check_track_size
    from lapbalance.track import load_track

    check_step(step_m)
    car = load_car(car_file, overrides)
    check_start_speed(start_speed_kph, [car, *more_cars])
    track = load_track(track_file, step_m=step_m, closed=closed)
    check_track_size(track, step_m)
    return car, track


def format_lap(result, liftoff_only: bool = False) -> str:
    """Human-readable lap summary (text)."""
    s = result.summary()
    lines = []
    if not liftoff_only:
        lines.append(f"{s['car']} on {s['track']} ({s['length_m']:.0f} m, "
                     f"{'closed lap' if s['closed'] else 'open run'})")
        lines.append(f"lap time {s['lap_time_s']:.3f} s   top {s['top_speed_kph']:.1f} km/h   "
                     f"min {s['min_speed_kph']:.1f} km/h   mean {s['mean_speed_kph']:.1f} km/h")
        bal_cg, bal_g = s["aero_balance_front_cg"], s["aero_balance_front_ground"]
        if bal_cg is not None:
            lines.append(f"aero balance (front share) {bal_cg * 100:.1f} % on track "
                         f"(CG convention); {bal_g * 100:.1f} % as wheel-restrained scales "
                         "read it")
        if result.car.aero.aero_map is not None:
            ch = result.channels
            fast = ch["speed_kph"] >= 100.0
            if fast.any():
                b = ch["aero_balance_front"][fast]
                lines.append(f"aero map: on-track balance above 100 km/h ranges "
                             f"{b.min() * 100:.1f} % to {b.max() * 100:.1f} % (CG convention); "
                             f"front ride height {ch['ride_height_front_mm'].min():.1f} to "
                             f"{ch['ride_height_front_mm'].max():.1f} mm")
        lines.append("sectors: " + "   ".join(f"S{x['sector']} {x['time_s']:.3f} s"
                                              for x in s["sectors"]))
        lines.append("")
        rows = []
        for c in result.corners:
            rows.append([c["id"], c["direction"], f"{c['apex_m']:.0f}",
                         f"{c['min_radius_m']:.0f}", f"{c['min_speed_kph']:.1f}",
                         c["limiting_axle"], f"{c['balance_index_at_min']:+.3f}",
                         c.get("liftoff_verdict", ""),
                         _num(c.get("liftoff_max_shift"), "+.3f"),
                         _num(c.get("liftoff_max_usage_rear"), ".3f")])
        if rows:
            lines.append(table(rows, ["corner", "dir", "apex m", "radius m", "min km/h",
                                      "limit", "balance", "lift-off", "shift", "rear off"]))
            lines.append("balance = usage_rear - usage_front at the slowest point "
                         "(> 0 oversteer-leaning); shift = largest balance change on "
                         "lift-off; rear off = highest rear usage after lift-off")
            lines.append("")
    flags = flagged(result.corners)
    counts = verdict_counts(result.corners)
    lines.append("lift-off check: " + ", ".join(f"{v} {n}" for v, n in counts.items() if n))
    if flags:
        rows = []
        for c in flags:
            w = c["liftoff_worst_rear"]
            rows.append([c["id"], c["liftoff_verdict"].upper(), f"{w['distance_m']:.0f}",
                         f"{w['speed_kph']:.0f}", f"{w['usage_rear_on']:.3f}",
                         f"{w['usage_rear_off']:.3f}", f"{w['coast_usage_rear']:.3f}",
                         f"{w['front_load_shift_n']:+.0f}", c["liftoff_reason"]])
        lines.append(table(rows, ["corner", "verdict", "at m", "km/h", "rear on",
                                  "rear off", "rear coast", "front +N", "why"]))
        lines.append("rear on/off/coast = rear usage on throttle, after lift-off with engine "
                     "braking, and coasting without it")
    else:
        lines.append("no corner flagged")
    return "\n".join(lines)


def _num(x, fmt):
    return "" if x is None else format(x, fmt)


@main.command("lap")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(),
              help="Write channels.csv, corners.csv and summary.json here.")
@set_option
@json_option
@force_option
@track_options
@click.option("--liftoff-only", is_flag=True, help="Print only the lift-off check.")
@click.option("--plots", is_flag=True, help="Also write PNG figures into --out.")
def lap_command(car_file, track_file, out_dir, overrides, as_json, force, step_m, closed,
                start_speed_kph, liftoff_only, plots):
    """Run CAR_FILE around TRACK_FILE; print lap time, sectors, corners and lift-off flags."""
    from contextlib import nullcontext

    from lapbalance.export import write_lap_files
    from lapbalance.lap import simulate_lap
    from lapbalance.outputs import output_folder

    if plots and not out_dir:
        raise click.UsageError("--plots needs --out DIR")
    # take the folder before the lap is run: refused or unwritable folders fail at once
    with (output_folder(out_dir, force, command="lap", inputs=[car_file, track_file])
          if out_dir else nullcontext()) as folder:
        car, track = load_inputs(car_file, track_file, overrides, step_m, closed,
                                 start_speed_kph)
        result = simulate_lap(car, track, start_speed_kph=start_speed_kph)
        if folder is not None:
            extra = {}
            if plots:
                from lapbalance import plots as _plots

                extra = _plots.lap_figures_png(result)
            write_lap_files(result, folder.staging, extra)
    if as_json:
        echo_json(result.summary())
        return
    click.echo(format_lap(result, liftoff_only))
    if out_dir:
        click.echo(f"\nwrote {out_dir}/channels.csv, corners.csv, summary.json")
