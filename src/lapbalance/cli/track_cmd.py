"""`lapbalance track`: load a track, print its summary and corners, optionally draw a map."""

from __future__ import annotations

import io
import math
from typing import TYPE_CHECKING

import click
import numpy as np

from lapbalance.cli import main
from lapbalance.cli.common import echo_json, json_option, line_options, table
from lapbalance.errors import InputError
from lapbalance.outputs import write_bytes_atomic

#: Car width of ``--line`` without --car or --car-width-m [m]. Common practice: GT and
#: open-wheel race cars are about 1.8-2.0 m wide.
DEFAULT_CAR_WIDTH_M = 2.0

if TYPE_CHECKING:
    from lapbalance.track import Track


def track_summary(tr: Track) -> dict:
    """JSON-ready summary of a track (practical units carry their unit in the key)."""
    return {
        "name": tr.name,
        "source": tr.source,
        "closed": tr.closed,
        "length_m": round(tr.length_m, 3),
        "step_m": round(tr.step_m, 6),
        "points": tr.n,
        "min_radius_m": round(1.0 / float(np.max(np.abs(tr.curvature_1pm))), 3)
        if np.any(tr.curvature_1pm) else None,
        "elevation_range_m": round(float(np.ptp(tr.z_m)), 3),
        "max_grade_pct": round(100.0 * float(np.max(np.abs(np.tan(tr.grade_rad)))), 3),
        "max_bank_deg": round(float(np.degrees(np.max(np.abs(tr.bank_rad)))), 3),
        "noise_m": round(float(tr.noise_m), 4) if math.isfinite(tr.noise_m) else None,
        "noise_given": bool(tr.noise_given),
        "input_points": int(tr.input_points),
        "input_spacing_m": round(float(tr.input_spacing_m), 4)
        if math.isfinite(tr.input_spacing_m) else None,
        "smoothing_m_range": [round(float(np.min(tr.smoothing_m)), 2),
                              round(float(np.max(tr.smoothing_m)), 2)]
        if tr.smoothing_m is not None else None,
        "sector_starts_m": [round(s, 3) for s in tr.sector_starts_m],
        "corners": [
            {"id": c.id, "direction": c.direction, "entry_m": round(c.entry_m, 1),
             "apex_m": round(c.apex_m, 1), "exit_m": round(c.exit_m, 1),
             "min_radius_m": round(c.min_radius_m, 2)}
            for c in tr.corners
        ],
    }


def track_map_png(tr: Track, fmt: str = "png") -> bytes:
    """Draw the track map (corners labelled at their apex; edges and the driving line when
    the track has a width) with the curvature against distance beside it, and return PNG (or
    ``svg``, ``pdf``) bytes."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from lapbalance.plots import draw_track_curvature

    fig = Figure(figsize=(13.0, 6.5), dpi=110, layout="constrained")
    ax = fig.add_subplot(1, 2, 1)
    draw_track_curvature(fig.add_subplot(1, 2, 2), tr)
    x, y = tr.x_m, tr.y_m
    if tr.closed:
        x, y = np.append(x, x[0]), np.append(y, y[0])
    from lapbalance.plots import draw_track_edges

    draw_track_edges(ax, tr, color="0.6")
    on_line = getattr(tr, "line", "centreline") != "centreline"
    ax.plot(x, y, color="tab:red" if on_line else "0.25", lw=1.5,
            label=f"{tr.line} line" if on_line else None)
    ax.plot(tr.x_m[0], tr.y_m[0], "o", color="tab:green", label="start")
    if not tr.closed:
        ax.plot(tr.x_m[-1], tr.y_m[-1], "s", color="tab:red", label="finish")
    for s in tr.sector_starts_m[1:]:
        i = min(int(round(s / tr.step_m)), tr.n - 1)
        ax.plot(tr.x_m[i], tr.y_m[i], "|", color="tab:blue", ms=14, mew=2)
    span = max(np.ptp(tr.x_m), np.ptp(tr.y_m), 1.0)
    for c in tr.corners:
        i = int(round(c.apex_m / tr.step_m)) % tr.n
        # label offset toward the outside of the corner (right of travel for a left turn)
        j = min(i + 1, tr.n - 1)
        k = j - 1
        hx, hy = tr.x_m[j] - tr.x_m[k], tr.y_m[j] - tr.y_m[k]
        h = math.hypot(hx, hy) or 1.0
        sgn = -1.0 if c.direction == "left" else 1.0
        off = 0.03 * span
        ax.annotate(str(c.id), (tr.x_m[i], tr.y_m[i]),
                    (tr.x_m[i] - sgn * hy / h * off, tr.y_m[i] + sgn * hx / h * off),
                    ha="center", va="center", fontsize=8,
                    color="tab:blue" if c.direction == "left" else "tab:orange")
    ax.set_aspect("equal")
    ax.set_xlabel("x [m]")
    ax.set_ylabel("y [m]")
    kind = "closed" if tr.closed else "open"
    ax.set_title(f"{tr.name}: {tr.length_m / 1000:.3f} km, {kind}, {len(tr.corners)} corners "
                 "(blue left, orange right)", fontsize=9)
    ax.legend(loc="best", fontsize=8)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt,
                metadata={"Software": "lapbalance"} if fmt == "png" else {"Date": None})
    return buf.getvalue()


@main.command("track")
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--step-m", type=float, default=1.0, show_default=True,
              help="Spacing of the resampled points [m].")
@click.option("--closed/--open", "closed", default=None,
              help="Force a closed circuit or an open stage (default: from the file).")
@click.option("--noise-m", type=float, default=None,
              help="Position noise of the points (standard deviation) [m]; default: "
                   "estimated from the points; 0 trusts them as exact.")
@click.option("--map", "map_png", type=click.Path(), default=None,
              metavar="FILE", help="Save a track map with corners labelled and the curvature "
                                   "against distance beside it (PNG; SVG or PDF when the "
                                   "file name ends in .svg or .pdf).")
@line_options
@click.option("--car-width-m", type=float, default=None, metavar="M",
              help="Car width for --line min-curvature [m] (default 2.0, or from --car).")
@click.option("--car", "car_file", type=click.Path(dir_okay=False), default=None,
              help="Car file whose chassis.overall_width_m sets the car width.")
@click.option("--out", "out_csv", type=click.Path(), default=None,
              metavar="CSV", help="Write the track (on --line, the line) as a track CSV that "
              "the other commands read.")
@click.option("--force", is_flag=True, help="Replace an existing --map or --out file.")
@json_option
def track_command(track_file, step_m, closed, noise_m, map_png, line, track_width_m,
                  line_margin_m, car_width_m, car_file, out_csv, force, as_json):
    """Load TRACK_FILE (CSV), print its length, noise, corners and sectors.

    With --line min-curvature, build the minimum-curvature line inside the track width and
    describe (and --out: export) that line instead.
    """
    from contextlib import ExitStack

    from lapbalance.cli.common import check_step, check_track_size
    from lapbalance.outputs import output_file
    from lapbalance.track import MAX_NOISE_M, load_track

    check_step(step_m)
    if noise_m is not None and not (math.isfinite(noise_m) and 0 <= noise_m <= MAX_NOISE_M):
        raise InputError(f"= {noise_m} must be between 0 and {MAX_NOISE_M:g} m", "--noise-m")
    if car_width_m is not None and car_file:
        raise InputError("give --car or --car-width-m, not both", "--car-width-m")
    inputs = [track_file, *([car_file] if car_file else [])]
    with ExitStack() as outs:
        # take the output files first: an existing, unwritable or input file fails at once
        if map_png:
            outs.enter_context(output_file(map_png, force, "--map", command="track",
                                           inputs=inputs, need_bytes=300_000))
        if out_csv:
            outs.enter_context(output_file(out_csv, force, "--out", command="track",
                                           inputs=inputs))
        tr = load_track(track_file, step_m=step_m, closed=closed, noise_m=noise_m)
        check_track_size(tr, step_m)
        ref = tr
        ref_length = tr.length_m
        if line != "centreline" or track_width_m is not None:
            from lapbalance import line as _line

            margin = _line.LINE_MARGIN_M if line_margin_m is None else line_margin_m
            if car_file:
                from lapbalance.car import load_car

                car_width_m = _line.car_width_m(load_car(car_file))
            elif car_width_m is None:
                car_width_m = DEFAULT_CAR_WIDTH_M
            tr = _line.on_line(tr, line, car_width=car_width_m, margin_m=margin,
                               width_m=track_width_m)
        info = track_summary(tr)
        if getattr(tr, "line", "centreline") != "centreline":
            info["line"] = {"kind": tr.line, "reference_length_m": round(ref_length, 3),
                            "car_width_m": tr.car_width_m, "margin_m": tr.margin_m,
                            "offset_min_m": round(float(tr.line_offset_m.min()), 4),
                            "offset_max_m": round(float(tr.line_offset_m.max()), 4),
                            "solver": {k: (round(v, 6) if isinstance(v, float) else v)
                                       for k, v in (tr.solver or {}).items()}}
        if out_csv:
            from lapbalance.line import track_csv_text
            from lapbalance.outputs import write_text_atomic

            note = f"written by lapbalance track from {tr.source}"
            if "line" in info:
                note += (f"\n{tr.line} line for a car {tr.car_width_m:.2f} m wide, "
                         f"{tr.margin_m:.2f} m from each edge")
            write_text_atomic(out_csv, track_csv_text(tr, note))
            info["out_csv"] = str(out_csv)
        if map_png:
            suffix = str(map_png).lower().rsplit(".", 1)[-1]
            write_bytes_atomic(map_png, track_map_png(tr, suffix if suffix in ("svg", "pdf")
                                                      else "png"))
            info["map_png"] = str(map_png)
    if as_json:
        from lapbalance import provenance

        info["provenance"] = provenance.build(tracks=[tr])
        echo_json(info)
        return
    kind = "closed circuit" if tr.closed else "open stage"
    click.echo(f"{tr.name}  ({tr.source})")
    click.echo(f"{kind}, length {tr.length_m:.1f} m, {tr.n} points at {tr.step_m:.4f} m")
    if ref.smoothing_m is not None:
        how = "given" if ref.noise_given else "estimated"
        click.echo(f"from {ref.input_points} input points {ref.input_spacing_m:.3g} m apart; "
                   "position "
                   f"noise {1000 * ref.noise_m:.0f} mm ({how}); smoothing "
                   f"{float(np.min(ref.smoothing_m)):.1f}-{float(np.max(ref.smoothing_m)):.1f} m")
    if "line" in info:
        ln = info["line"]
        click.echo(f"{tr.line} line for a car {tr.car_width_m:.2f} m wide, margin "
                   f"{tr.margin_m:.2f} m: {ref_length - tr.length_m:+.1f} m shorter than the "
                   f"track file's line ({ref_length:.1f} m); offset {ln['offset_min_m']:+.2f} "
                   f"to {ln['offset_max_m']:+.2f} m (left positive)")
    extra = []
    if info["elevation_range_m"] > 0:
        extra.append(f"elevation range {info['elevation_range_m']:.1f} m, "
                     f"max grade {info['max_grade_pct']:.1f} %")
    if info["max_bank_deg"] > 0:
        extra.append(f"max bank {info['max_bank_deg']:.1f} deg")
    if info["min_radius_m"] is not None:
        extra.append(f"min radius {info['min_radius_m']:.1f} m")
    if extra:
        click.echo(", ".join(extra))
    click.echo("")
    rows = [[c.id, c.direction, f"{c.entry_m:.0f}", f"{c.apex_m:.0f}", f"{c.exit_m:.0f}",
             f"{c.min_radius_m:.1f}"] for c in tr.corners]
    if rows:
        click.echo(table(rows, ["corner", "direction", "entry_m", "apex_m", "exit_m",
                                "min_radius_m"], "rlrrrr"))
    else:
        click.echo("no corners (all radii above the corner threshold)")
    click.echo("")
    ends = list(tr.sector_starts_m[1:]) + [tr.length_m]
    srows = [[i + 1, f"{a:.0f}", f"{b:.0f}", f"{b - a:.0f}"]
             for i, (a, b) in enumerate(zip(tr.sector_starts_m, ends, strict=True))]
    click.echo(table(srows, ["sector", "start_m", "end_m", "length_m"]))
    if map_png:
        click.echo(f"\nmap written to {map_png}")
    if out_csv:
        click.echo(f"\ntrack written to {out_csv}")
