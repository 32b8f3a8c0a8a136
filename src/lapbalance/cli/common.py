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



def line_options(f):
    """``--line``, ``--width-m`` and ``--line-margin-m`` (the driving line, lapbalance.line)."""
    f = click.option("--line-margin-m", type=float, default=None, metavar="M",
                     help="Clearance between the car's side and each track edge on the line "
                          "[m] (default 0.25).")(f)
    f = click.option("--width-m", "track_width_m", type=float, default=None, metavar="M",
                     help="Track width [m], constant, replacing the track file's width.")(f)
    f = click.option("--line", "line", type=click.Choice(["centreline", "min-curvature"]),
                     default="centreline", show_default=True,
                     help="Path the car drives: the track file's line, or the minimum-"
                          "curvature line inside the track width (needs a width).")(f)
    return f


def apply_line(track, car, line, track_width_m, margin_m):
    """The track a command runs on for the ``--line`` options (see lapbalance.line.on_line)."""
    if line == "centreline" and track_width_m is None:
        return track
    from lapbalance import line as _line

    margin = _line.LINE_MARGIN_M if margin_m is None else margin_m
    return _line.on_line(track, line, car=car, margin_m=margin, width_m=track_width_m)


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


units_option = click.option(
    "--units", "units", type=click.Choice(["metric", "imperial"]), default="metric",
    show_default=True,
    help="Units shown on the terminal and in the report (imperial: mph, lbf, ft); files "
         "always stay SI with the unit in the column name.")
plot_format_option = click.option(
    "--plot-format", "plot_format", type=click.Choice(["png", "svg", "pdf"]), default="png",
    show_default=True, help="File format of the figures.")


def prepare_solver() -> None:
    """Compile the solver with progress on stderr if numba's cache is cold (first run)."""
    import sys

    from lapbalance import firstrun

    firstrun.ensure_ready(sys.stderr)


_TRACK_SUFFIXES = (".csv", ".txt", ".tsv")


def check_car_track_order(car_file, track_file, car_arg: str = "CAR_FILE",
                          track_arg: str = "TRACK_FILE") -> None:
    """Refuse swapped CAR and TRACK arguments with a hint (before any file is parsed)."""
    from pathlib import Path

    from lapbalance.errors import InputError

    c, t = Path(str(car_file)), Path(str(track_file))
    car_is_track = c.suffix.lower() in _TRACK_SUFFIXES
    track_is_car = t.suffix.lower() == ".toml"
    if car_is_track and track_is_car:
        raise InputError(f"{c.name} looks like a track and {t.name} like a car file: the "
                         f"arguments are swapped; give the car first, then the track "
                         f"({car_arg} {track_arg})", c)


# --------------------------------------------------------------------------------------------
# bounds on numeric options (each with its reason)
# --------------------------------------------------------------------------------------------

#: Smallest and largest resampling step [m].
STEP_MIN_M, STEP_MAX_M = 0.1, 50.0
#: Most track points a lap may have (memory for the channels grows with it) [-].
MAX_TRACK_POINTS = 2_000_000
#: Highest start speed accepted at all [km/h].
START_SPEED_MAX_KPH = 1000.0


def _channel_bytes_per_point() -> int:
    try:
        from lapbalance.lap import CHANNELS

        return 8 * (len(CHANNELS) + 16)
    except ImportError:  # pragma: no cover
        return 8 * 80


def check_step(step_m: float, option: str = "--step-m") -> float:
    """Refuse a resampling step outside [0.1, 50] m, saying what it would cost."""
    import math

    from lapbalance.errors import InputError

    if not (isinstance(step_m, int | float) and math.isfinite(step_m)
            and STEP_MIN_M <= step_m <= STEP_MAX_M):
        why = ""
        if isinstance(step_m, int | float) and 0 < step_m < STEP_MIN_M:
            n = 5000.0 / step_m
            gb = n * _channel_bytes_per_point() / 1e9
            why = (f" (at {step_m:g} m a 5 km lap has {n:.3g} points, about {gb:.3g} GB of "
                   "channels; finer steps than 0.1 m add nothing the track data can hold)")
        elif isinstance(step_m, int | float) and step_m > STEP_MAX_M:
            why = " (a coarser step steps over whole corners)"
        raise InputError(f"= {step_m:g} must be between 0 and {STEP_MAX_M:g} m, at least "
                         f"{STEP_MIN_M:g} m{why}; 1 m is usual", option)
    return float(step_m)


def check_track_size(track, step_m: float, option: str = "--step-m") -> None:
    """Refuse a track that would have more than :data:`MAX_TRACK_POINTS` points."""
    from lapbalance.errors import InputError

    n = int(getattr(track, "n", 0))
    if n > MAX_TRACK_POINTS:
        gb = n * _channel_bytes_per_point() / 1e9
        need = track.length_m / MAX_TRACK_POINTS
        raise InputError(f"= {step_m:g} m gives {n} points on this {track.length_m / 1000:.1f}"
                         f" km track (about {gb:.2g} GB of channels, more than the "
                         f"{MAX_TRACK_POINTS} point limit); use a step >= {need:.2g} m", option)


def check_start_speed(start_speed_kph, cars) -> None:
    """Refuse a start speed far above what the car can reach (it would be clamped)."""
    from lapbalance.errors import InputError
    from lapbalance.lap import check_start_speed as _check_value

    _check_value(start_speed_kph)  # negative or not finite: the solver's own message
    if start_speed_kph is None:
        return
    if start_speed_kph > START_SPEED_MAX_KPH:
        raise InputError(f"= {start_speed_kph:g} km/h is above {START_SPEED_MAX_KPH:g} km/h; "
                         "give the speed in km/h (not m/h or mm/s)", "--start-speed-kph")
    for car in cars:
        try:
            vmax = car.powertrain.top_speed_rev_limited() * 3.6
        except (AttributeError, ZeroDivisionError):
            continue
        if start_speed_kph > 1.02 * vmax:
            raise InputError(f"= {start_speed_kph:g} km/h is above the top speed of "
                             f"{car.name} ({vmax:.0f} km/h at the rev limit in top gear); the "
                             f"lap would silently start at {vmax:.0f} km/h; give a start "
                             f"speed <= {vmax:.0f} km/h", "--start-speed-kph")


def check_int(value, option: str, lo: int, hi: int, why: str) -> int:
    """Refuse a whole-number option outside [lo, hi], with the reason ``why``."""
    from lapbalance.errors import InputError

    if value is None:
        return value
    if not lo <= int(value) <= hi:
        raise InputError(f"= {value} must be between {lo} and {hi} ({why})", option)
    return int(value)
