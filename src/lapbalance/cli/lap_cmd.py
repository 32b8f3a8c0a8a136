"""`lapbalance lap`: run a car around a track and print/write the results."""

from __future__ import annotations

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import (
    apply_line,
    echo_json,
    force_option,
    json_option,
    line_options,
    plot_format_option,
    set_option,
    table,
    units_option,
)
from lapbalance.liftoff import flagged, ranked, smallest_margin, verdict_counts


def track_options(f):
    f = click.option("--step-m", type=float, default=1.0, show_default=True,
                     help="Resampling step along the track [m].")(f)
    f = click.option("--closed/--open", "closed", default=None,
                     help="Force a closed lap or an open run (default: from the file).")(f)
    f = click.option("--start-speed-kph", type=float, default=None,
                     help="Open tracks: speed at the start [km/h] (default 0, standing).")(f)
    return f


def load_inputs(car_file, track_file, overrides, step_m, closed, start_speed_kph=None,
                more_cars=(), prepare: bool = True):
    """Check the numeric options, load the car and the track (InputError on bad input), and
    compile the solver with progress on a first run (``prepare``)."""
    from lapbalance.cli.common import (
        check_car_track_order,
        check_start_speed,
        check_step,
        check_track_size,
        prepare_solver,
    )
    from lapbalance.track import load_track

    check_step(step_m)
    check_car_track_order(car_file, track_file)
    car = load_car(car_file, overrides)
    check_start_speed(start_speed_kph, [car, *more_cars])
    track = load_track(track_file, step_m=step_m, closed=closed)
    check_track_size(track, step_m)
    if prepare:
        prepare_solver()
    return car, track


def overrides_line(car) -> str | None:
    """``overrides: --set a.b=1 --set c.d=2`` for a car with --set overrides, else None."""
    from lapbalance.provenance import overrides

    ov = overrides(car)
    if not ov:
        return None
    return "overrides: " + " ".join(f"--set {o['text']}" for o in ov)


def aero_line(s: dict, car, disp) -> str | None:
    """The aero line of the header: the front share, or axle lift values for a net-lift car."""
    bal_cg, bal_g = s["aero_balance_front_cg"], s["aero_balance_front_ground"]
    if s.get("aero_net_lift"):
        ae = car.aero
        v = 200.0 / 3.6  # reference speed for the axle forces [m/s]
        q = 0.5 * car.air.density * v * v
        fu = disp.unit("force")
        return (f"aero: net lift, so a front share means nothing; axle downforce areas "
                f"front {ae.front_area_cg:+.3f} m², rear {ae.rear_area_cg:+.3f} m² (CG "
                f"convention, < 0 = lift): at {disp.speed(v):.0f} {disp.unit('speed')} "
                f"front {disp.force(q * ae.front_area_cg):+.0f} {fu}, rear "
                f"{disp.force(q * ae.rear_area_cg):+.0f} {fu}")
    if bal_cg is None:
        return None
    return (f"aero balance (front share) {bal_cg * 100:.1f} % on track (CG convention); "
            f"{bal_g * 100:.1f} % as wheel-restrained scales read it")


def format_lap(result, liftoff_only: bool = False, units: str = "metric") -> str:
    """Human-readable lap summary (text), in the display ``units`` (metric or imperial)."""
    from lapbalance.liftoff import VERDICT_MEANING
    from lapbalance.units import Display

    d = Display(units)
    su, lu, fu = d.unit("speed"), d.unit("length"), d.unit("force")
    s = result.summary
    lines = []
    if not liftoff_only:
        lines.append(f"{s['car']} on {s['track']} ({d.length(s['length_m']):.0f} {lu}, "
                     f"{'closed lap' if s['closed'] else 'open run'})")
        ov = overrides_line(result.car)
        if ov:
            lines.append(ov)
        line_note = _line_note(result.track)
        if line_note:
            lines.append(line_note)
        lines.append(f"{result.time_label} {s['lap_time_s']:.3f} s   "
                     f"top {d.speed_kph(s['top_speed_kph']):.1f} {su}   "
                     f"min {d.speed_kph(s['min_speed_kph']):.1f} {su}   "
                     f"mean {d.speed_kph(s['mean_speed_kph']):.1f} {su}")
        al = aero_line(s, result.car, d)
        if al:
            lines.append(al)
        if result.car.aero.aero_map is not None:
            ch = result.channels
            fast = ch["speed_kph"] >= 100.0
            if fast.any():
                b = ch["aero_balance_front"][fast]
                lines.append(f"aero map: on-track balance above {d.speed_kph(100.0):.0f} {su} "
                             f"ranges {b.min() * 100:.1f} % to {b.max() * 100:.1f} % (CG "
                             f"convention); front ride height "
                             f"{ch['ride_height_front_mm'].min():.1f} to "
                             f"{ch['ride_height_front_mm'].max():.1f} mm")
        lines.append("sectors: " + "   ".join(f"S{x['sector']} {x['time_s']:.3f} s"
                                              for x in s["sectors"]))
        lines.append("")
        rows = []
        for c in ranked(result.corners):
            dv = c.get("liftoff_speed_margin_kph")
            rows.append([c["id"], c["direction"], f"{d.length(c['apex_m']):.0f}",
                         f"{d.length(c['min_radius_m']):.0f}",
                         f"{d.speed_kph(c['min_speed_kph']):.1f}",
                         c["limiting_axle"], f"{c['balance_index_at_min']:+.3f}",
                         c.get("liftoff_verdict", ""),
                         _num(c.get("liftoff_margin"), ".3f"),
                         "" if dv is None else f"{d.speed_kph(dv):.1f}",
                         _num(c.get("liftoff_rear_reserve"), "+.3f"),
                         _num(c.get("liftoff_max_shift"), "+.3f")])
        if rows:
            lines.append(table(rows, ["corner", "dir", f"apex {lu}", f"radius {lu}",
                                      f"min {su}", "limit", "balance", "lift-off", "margin",
                                      f"dv {su}", "reserve", "shift"]))
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
            rows.append([c["id"], c["liftoff_verdict"], f"{t['margin']:.3f}",
                         f"{d.length(t['distance_m']):.0f}",
                         f"{d.speed_kph(t['limit_speed_kph']):.0f}",
                         f"{d.speed_kph(t['safe_speed_kph']):.0f}", f"{t['coast_margin']:.3f}",
                         f"{d.length(w['distance_m']):.0f}", f"{w['usage_rear_on']:.3f}",
                         f"{w['usage_rear_off']:.3f}", f"{d.force(w['front_load_shift_n']):+.0f}",
                         c["liftoff_reason"]])
        lines.append(table(rows, ["corner", "verdict", "margin", f"at {lu}", f"limit {su}",
                                  f"safe {su}", "coast", f"lap at {lu}", "rear on", "rear off",
                                  f"front +{fu}", "why"]))
        lines.append("margin at = the tightest step; limit/safe = its corner-limit speed and "
                     "the highest speed where a lift keeps the rear; coast = the margin "
                     "without engine braking; lap at, rear on/off, front + = the lap's own "
                     "step with the highest rear usage after a lift")
        for v in dict.fromkeys(c["liftoff_verdict"] for c in flags):
            lines.append(f"{v}: {VERDICT_MEANING.get(v, '')}")
    else:
        lines.append("no corner flagged")
    return "\n".join(lines)


def lap_json(result, files=()) -> dict:
    """The ``--json`` output of a lap: the summary, the verdict wording and the provenance."""
    from lapbalance.export import summary_dict
    from lapbalance.liftoff import VERDICT_MEANING
    from lapbalance.provenance import for_lap

    out = summary_dict(result, for_lap(result, files))
    out["liftoff_verdicts"] = dict(VERDICT_MEANING)
    return out


#: Columns of ``liftoff_runs.csv`` and the ``--json`` key ``liftoff_runs``.
RUN_COLUMNS = ("corner", "liftoff_verdict", "liftoff_margin", "radius_m", "speed_kph",
               "ay0_mps2", "at_limit", "status", "yaw_rate_ratio", "sideslip_peak_change_deg",
               "path_radius_ratio", "lateral_deviation_m", "spin", "ay_limit_mps2",
               "spin_onset_ay_mps2", "spin_onset_fraction")


def format_corner_runs(runs, units: str = "metric") -> str:
    """Text table of the lift-off runs in time at a lap's corners
    (:func:`lapbalance.transient.lap_corner_runs`)."""
    from lapbalance.units import Display

    d = Display(units)
    su, lu = d.unit("speed"), d.unit("length")
    rows = []
    for r in runs:
        ok = r["status"] == "ok"
        onset = r["spin_onset_fraction"]
        rows.append([r["corner"], r.get("liftoff_verdict") or "",
                     f"{d.length(r['radius_m']):.0f}",
                     f"{d.speed_kph(r['ay0_mps2'] ** 0.5 * r['radius_m'] ** 0.5 * 3.6):.0f}"
                     + (" *" if r["at_limit"] else ""),
                     _num(r["yaw_rate_ratio"] if ok else None, ".2f"),
                     _num(r["sideslip_peak_change_deg"] if ok else None, "+.1f"),
                     ("SPIN" if r["spin"] else "holds") if ok else r["status"],
                     "none" if r["spin_onset_ay_mps2"] is None else f"{onset:.2f}"])
    lines = ["lift-off in time (single-track model, steering held, engine overrun in the "
             "lap's gear)" + ("" if runs else ": no corner to run"),
             table(rows, ["corner", "verdict", f"radius {lu}", su, "yaw ratio",
                          "tail-out deg", "at 3 s", "spin from"]) if rows else "",
             "yaw ratio = yaw rate 1 s after the lift over that of a car staying on the "
             "radius (> 1 tucks in); tail-out = largest sideslip change within 3 s (< 0 tail "
             "out); spin from = lowest initial a_y, as a share of the model's steady limit at "
             "that radius, from which a lift spins the car (ISO 9816 stepping; none = no "
             "spin up to the limit); * = the lap's speed is above the single-track model's "
             "steady limit, so the run starts at that limit"]
    return "\n".join(x for x in lines if x)


def runs_csv_text(runs) -> str:
    """``liftoff_runs.csv``: one row per corner run (:data:`RUN_COLUMNS`)."""
    from lapbalance.outputs import csv_text

    return csv_text(RUN_COLUMNS, [["" if r.get(k) is None else r.get(k) for k in RUN_COLUMNS]
                                  for r in runs])


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
@click.option("--out", "out_dir", type=click.Path(),
              help="Write channels.csv, corners.csv, summary.json and provenance.json here.")
@set_option
@json_option
@force_option
@track_options
@line_options
@click.option("--liftoff-only", is_flag=True, help="Print only the lift-off check.")
@click.option("--in-time/--no-in-time", "in_time", default=True, show_default=True,
              help="For a car file with a [transient] section: also run the lift-off in time "
                   "(single-track model) at the flagged corners, or at the tightest corner "
                   "when none is flagged.")
@click.option("--plots", is_flag=True, help="Also write the figures into --out.")
@plot_format_option
@click.option("--map-channel", "map_channel", default=None, metavar="CHANNEL",
              help="Colour the track-map figure by this channel (e.g. speed_kph, "
                   "usage_rear; default: the balance index where the car corners).")
@units_option
def lap_command(car_file, track_file, out_dir, overrides, as_json, force, step_m, closed,
                start_speed_kph, line, track_width_m, line_margin_m, liftoff_only, in_time,
                plots, plot_format, map_channel, units):
    """Run CAR_FILE around TRACK_FILE; print lap time, sectors, corners and lift-off flags.

    With --out, summary.json records what was run (inputs with SHA-256, overrides, the
    resolved car, settings); `lapbalance rerun OUT/summary.json` runs it again.
    """
    from contextlib import nullcontext

    from lapbalance.export import write_lap_files
    from lapbalance.lap import CHANNELS, simulate_lap
    from lapbalance.outputs import output_folder

    if map_channel is not None and map_channel not in CHANNELS:
        from lapbalance.errors import InputError, did_you_mean

        raise InputError(f'"{map_channel}" is not a channel; '
                         f"{did_you_mean(map_channel, CHANNELS)}", "--map-channel")
    if plots and not out_dir:
        raise click.UsageError("--plots needs --out DIR")
    # take the folder before the lap is run: refused or unwritable folders fail at once
    with (output_folder(out_dir, force, command="lap", inputs=[car_file, track_file])
          if out_dir else nullcontext()) as folder:
        car, track = load_inputs(car_file, track_file, overrides, step_m, closed,
                                 start_speed_kph)
        track = apply_line(track, car, line, track_width_m, line_margin_m)
        result = simulate_lap(car, track, start_speed_kph=start_speed_kph)
        runs = None
        if in_time and car.transient is not None:
            from lapbalance.transient import lap_corner_runs

            runs = lap_corner_runs(result)
        extra = {}
        if runs:
            extra["liftoff_runs.csv"] = runs_csv_text(runs).encode("utf-8")
        if folder is not None:
            from lapbalance.liftoff import corner_response

            curve = corner_response(result)
            if curve is not None:
                extra["liftoff_response.csv"] = curve.csv_text().encode("utf-8")
            if plots:
                from lapbalance import plots as _plots

                extra.update(_plots.lap_figures(result, fmt=plot_format,
                                                map_channel=map_channel, curve=curve))
            write_lap_files(result, folder.staging, extra)
    if as_json:
        out = lap_json(result)
        if runs is not None:
            out["liftoff_runs"] = [{k: r.get(k) for k in RUN_COLUMNS} for r in runs]
        echo_json(out)
        return
    click.echo(format_lap(result, liftoff_only, units))
    if runs is not None:
        click.echo("")
        click.echo(format_corner_runs(runs, units))
    if out_dir:
        click.echo(f"\nwrote {out_dir}/channels.csv, corners.csv, summary.json, "
                   f"provenance.json"
                   + (", liftoff_response.csv (tightest corner)"
                      if "liftoff_response.csv" in extra else "")
                   + (", liftoff_runs.csv" if "liftoff_runs.csv" in extra else "")
                   + (f" and {plot_format.upper()} figures" if plots else ""))
