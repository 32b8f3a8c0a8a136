"""`lapbalance liftrun`: power-off in a turn (ISO 9816 constant-radius method) for one car."""

from __future__ import annotations

import math

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import echo_json, force_option, json_option, set_option, table


def _f(x, fmt):
    return "" if x is None or (isinstance(x, float) and not math.isfinite(x)) else format(x, fmt)


def format_sweep(car, sw) -> str:
    """Text table of one radius's runs."""
    lines = [f"R = {sw.radius_m:g} m: steady limit {sw.ay_limit_mps2:.2f} m/s² "
             f"(lap model {sw.lap_ay_limit_mps2:.2f} m/s²)"]
    rows = []
    for run in sw.runs:
        r = run.row()
        rows.append([f"{r['ay0_mps2']:.2f}", f"{r['speed0_kph']:.1f}", r["gear"],
                     _f(r["steering_wheel_deg"], ".1f"), _f(r["sideslip0_deg"], "+.2f"),
                     _f(r["yaw_rate_ratio"], ".3f"), _f(r["yaw_angle_difference_deg"], "+.2f"),
                     _f(r["sideslip_change_deg"], "+.2f"),
                     _f(r["sideslip_peak_change_deg"], "+.2f"),
                     _f(r["sideslip_peak_time_s"], ".2f"), _f(r["path_radius_ratio"], ".3f"),
                     _f(r["lateral_deviation_m"], "+.2f"), _f(r["mean_decel_mps2"], ".2f"),
                     "SPIN" if r["spin"] else ""])
    if rows:
        lines.append(table(rows, ["ay0 m/s²", "km/h", "gear", "wheel°", "slip0°", "yaw ratio",
                                  "yaw Δ°", "Δslip°", "peak Δ°", "at s", "R/R0", "dev m",
                                  "decel", "spin"]))
        spin = next((r.ay0_mps2 for r in sw.runs if r.figures["spin"]), None)
        if spin is None:
            lines.append("no spin up to the steady limit")
        else:
            lines.append(f"first spin at a_y0 = {spin:.2f} m/s² "
                         f"({spin / sw.ay_limit_mps2 * 100:.0f} % of the steady limit)")
    else:
        lines.append("no steady turn from the first a_y0 up to the limit at this radius")
    return "\n".join(lines)


def _radii(values) -> list[float]:
    out = []
    for v in values:
        for part in str(v).split(","):
            part = part.strip()
            if not part:
                continue
            try:
                out.append(float(part))
            except ValueError:
                from lapbalance.errors import InputError

                raise InputError(f'"{part}" is not a number; give radii in m, e.g. '
                                 "--radius 40 --radius 100 or --radius 40,100",
                                 "--radius") from None
    return out


@main.command("liftrun")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.option("--radius", "radii", multiple=True, metavar="M",
              help="Radius of the initial steady turn [m]; repeat or give a comma list "
                   "(default 40 and 100).")
@click.option("--ay-start", type=float, default=4.0, show_default=True,
              help="First initial lateral acceleration [m/s²].")
@click.option("--ay-step", type=float, default=0.5, show_default=True,
              help="Step of the initial lateral acceleration [m/s²] (at most 0.5).")
@click.option("--ramp-s", type=float, default=0.1, show_default=True,
              help="Time for the drive force to fall to the engine overrun [s].")
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Write runs.csv, histories.csv and summary.json here.")
@click.option("--plots", is_flag=True, help="Also write PNG figures into --out.")
@set_option
@json_option
@force_option
def liftrun_command(car_file, radii, ay_start, ay_step, ramp_s, out_dir, plots, overrides,
                    as_json, force):
    """Power-off in a turn for CAR_FILE: steady circle, throttle released, wheel held.

    The single-track model (yaw inertia, tyre lag, the lap's loads and axle capacities at
    every instant) is run the way ISO 9816's constant-radius method runs a car: from a steady
    turn at a_y0 = v²/R the throttle is released and the response read at t0 + 1 s. A
    yaw-rate ratio above 1 means the car tucks into the turn; SPIN means the sideslip grew
    past 10°. Needs the car file's [transient] section.
    """
    from lapbalance import transient as T
    from lapbalance.errors import InputError

    if out_dir:
        from lapbalance.outputs import check_output_dir

        check_output_dir(out_dir, force)
    elif plots:
        raise click.UsageError("--plots needs --out DIR")
    if not (math.isfinite(ramp_s) and 0.0 <= ramp_s <= 2.0):
        raise InputError(f"= {ramp_s:g} s must be between 0 and 2 s", "--ramp-s")
    rs = _radii(radii) or list(T.DEFAULT_RADII)
    car = load_car(car_file, overrides)
    T.require_transient(car)
    sweeps = [T.sweep(car, r, ay_start=ay_start, ay_step=ay_step, ramp_s=ramp_s) for r in rs]
    summary = T.sweep_summary(car, sweeps, ramp_s)
    if out_dir:
        from lapbalance.outputs import staged_dir, write_json_atomic, write_text_atomic

        with staged_dir(out_dir, force) as tmp:
            write_text_atomic(tmp / "runs.csv", T.runs_csv(sweeps))
            write_text_atomic(tmp / "histories.csv", T.histories_csv(sweeps))
            write_json_atomic(tmp / "summary.json", summary)
            if plots:
                from lapbalance import plots_transient

                for name, data in plots_transient.figures_png(sweeps, car.name).items():
                    (tmp / name).write_bytes(data)
    if as_json:
        echo_json(summary)
        return
    lin = summary["linear"]
    click.echo(f"{car.name}: power-off in a turn (ISO 9816 constant-radius method, left turn, "
               f"wheel held, throttle released over {ramp_s:g} s)")
    vch = lin["characteristic_speed_mps"]
    click.echo(f"linear model: understeer gradient {lin['understeer_gradient_deg_per_g']:+.2f} "
               "deg/g" + (f", characteristic speed {vch * 3.6:.0f} km/h" if vch else ""))
    for sw in sweeps:
        click.echo("")
        click.echo(format_sweep(car, sw))
    click.echo("")
    click.echo("yaw ratio = yaw rate at t0+1 s over v/R0 at the actual speed (> 1 tucks in); "
               "Δslip = sideslip change at t0+1 s, peak Δ = largest tail-out change in 0-3 s "
               "(negative = tail out); R/R0 = path-radius ratio; dev = distance inside the "
               "circle; decel = mean deceleration 0-1 s [m/s²]")
    click.echo("Single-track model estimate: confirm with qualified engineers and track "
               "testing.")
    if out_dir:
        click.echo(f"\nwrote {out_dir}/runs.csv, histories.csv, summary.json"
                   + (" and figures" if plots else ""))
