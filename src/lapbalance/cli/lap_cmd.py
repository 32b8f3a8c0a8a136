"""`lapbalance lap`: run a car around a track and print/write the results."""

from __future__ import annotations

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import (apply_line, echo_json, force_option, json_option,
                                   line_options, set_option, table)
from lapbalance.liftoff import flagged, ranked, smallest_margin, verdict_counts


def track_options(f):
    f = click.option("--step-m", type=float, default=1.0, show_default=True,
                     help="Resampling step along the track [m].")(f)
    f = click.option("--closed/--open", "closed", default=None,
                     help="Force a closed lap or an open run (default: from the file).")(f)
    f = click.option("--start-speed-kph", type=float, default=None,
                     help="Open tracks: speed at the start [km/h] (default 0, standing).")(f)
    return f


def load_inputs(car_file, track_file, overrides, step_m, closed):
    from lapbalance.track import load_track

    if not 0 < step_m <= 50:
        from lapbalance.errors import InputError

        raise InputError(f"= {step_m} must be between 0 and 50 m", "--step-m")
    car = load_car(car_file, overrides)
    track = load_track(track_file, step_m=step_m, closed=closed)
    return car, track


def format_lap(result, liftoff_only: bool = False) -> str:
    """Human-readable lap summary (text)."""
    s = result.summary()
    lines = []
    if not liftoff_only:
        lines.append(f"{s['car']} on {s['track']} ({s['length_m']:.0f} m, "
                     f"{'closed lap' if s['closed'] else 'open run'})")
        line_note = _line_note(result.track)
        if line_note:
            lines.append(line_note)
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
        for c in ranked(result.corners):
            rows.append([c["id"], c["direction"], f"{c['apex_m']:.0f}",
                         f"{c['min_radius_m']:.0f}", f"{c['min_speed_kph']:.1f}",
                         c["limiting_axle"], f"{c['balance_index_at_min']:+.3f}",
                         c.get("liftoff_verdict", ""),
                         _num(c.get("liftoff_margin"), ".3f"),
                         _num(c.get("liftoff_speed_margin_kph"), ".1f"),
                         _num(c.get("liftoff_rear_reserve"), "+.3f"),
                         _num(c.get("liftoff_max_shift"), "+.3f")])
        if rows:
            lines.append(table(rows, ["corner", "dir", "apex m", "radius m", "min km/h",
                                      "limit", "balance", "lift-off", "margin", "dv km/h",
                                      "reserve", "shift"]))
            lines.append("sorted by lift-off margin, tightest first. balance = usage_rear - "
                         "usage_front at the slowest point (> 0 oversteer-leaning); margin = "
                         "a_y where a lift keeps the rear / a_y at the limit (1 = safe at the "
                         "limit); dv = limit speed minus that safe speed; reserve = 1 - rear "
                         "usage after a lift at the limit (< 0 saturates); shift = largest "
                         "balance change on lift-off at the lap's own state")
            lines.append("")
    flags = flagged(result.corners)
    counts = verdict_counts(result.corners)
    low = smallest_margin(result.corners)
    lines.append("lift-off check: " + ", ".join(f"{v} {n}" for v, n in counts.items() if n)
                 + ("" if low is None else f"; smallest margin {low:.3f}"))
    if flags:
        rows = []
        for c in flags:
            t = c["liftoff_tightest"]
            w = c["liftoff_worst_rear"]
            rows.append([c["id"], c["liftoff_verdict"].upper(), f"{t['margin']:.3f}",
                         f"{t['distance_m']:.0f}", f"{t['limit_speed_kph']:.0f}",
                         f"{t['safe_speed_kph']:.0f}", f"{t['coast_margin']:.3f}",
                         f"{w['distance_m']:.0f}", f"{w['usage_rear_on']:.3f}",
                         f"{w['usage_rear_off']:.3f}", f"{w['front_load_shift_n']:+.0f}",
                         c["liftoff_reason"]])
        lines.append(table(rows, ["corner", "verdict", "margin", "at m", "limit km/h",
                                  "safe km/h", "coast", "lap at m", "rear on", "rear off",
                                  "front +N", "why"]))
        lines.append("margin at m = the tightest step; limit/safe km/h = its corner-limit "
                     "speed and the highest speed where a lift keeps the rear; coast = the "
                     "margin without engine braking; lap at m, rear on/off, front +N = the "
                     "lap's own step with the highest rear usage after a lift")
    else:
        lines.append("no corner flagged")
    return "\n".join(lines)


def _line_note(track) -> str:
    """One line on the driving line a lap ran on ('' for the track file's own line)."""
    if getattr(track, "line", "centreline") == "centreline":
        return ""
    off = track.line_offset_m
    return (f"driving line: {track.line} ({track.length_m:.0f} m against "
            f"{track.reference_length_m:.0f} m on the track file's line; offset "
            f"{off.min():+.2f} to {off.max():+.2f} m, left positive; car width "
            f"{track.car_width_m:.2f} m, margin {track.margin_m:.2f} m)")


def _num(x, fmt):
    return "" if x is None else format(x, fmt)


@main.command("lap")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Write channels.csv, corners.csv and summary.json here.")
@set_option
@json_option
@force_option
@track_options
@line_options
@click.option("--liftoff-only", is_flag=True, help="Print only the lift-off check.")
@click.option("--plots", is_flag=True, help="Also write PNG figures into --out.")
def lap_command(car_file, track_file, out_dir, overrides, as_json, force, step_m, closed,
                start_speed_kph, line, track_width_m, line_margin_m, liftoff_only, plots):
    """Run CAR_FILE around TRACK_FILE; print lap time, sectors, corners and lift-off flags."""
    from lapbalance.export import write_lap_folder
    from lapbalance.lap import simulate_lap

    if out_dir:  # refuse an occupied folder before the lap is run, not after
        from lapbalance.outputs import check_output_dir

        check_output_dir(out_dir, force)
    car, track = load_inputs(car_file, track_file, overrides, step_m, closed)
    track = apply_line(track, car, line, track_width_m, line_margin_m)
    result = simulate_lap(car, track, start_speed_kph=start_speed_kph)
    if out_dir:
        from lapbalance.liftoff import corner_response

        extra = {}
        curve = corner_response(result)
        if curve is not None:
            extra["liftoff_response.csv"] = curve.csv_text().encode("utf-8")
        if plots:
            from lapbalance import plots as _plots

            extra.update(_plots.lap_figures_png(result))
            if curve is not None:
                extra["liftoff_response.png"] = _plots.figure_png(
                    _plots.liftoff_response_figure(curve, result.car.name))
        write_lap_folder(result, out_dir, force=force, extra=extra)
    elif plots:
        raise click.UsageError("--plots needs --out DIR")
    if as_json:
        echo_json(result.summary())
        return
    click.echo(format_lap(result, liftoff_only))
    if out_dir:
        click.echo(f"\nwrote {out_dir}/channels.csv, corners.csv, summary.json"
                   + (", liftoff_response.csv (tightest corner)"
                      if "liftoff_response.csv" in extra else ""))
