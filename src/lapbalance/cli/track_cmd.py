"""`lapbalance track`: load a track, print its summary and corners, optionally draw a map."""

from __future__ import annotations

import io
import math
from typing import TYPE_CHECKING

import click
import numpy as np

from lapbalance.cli import main
from lapbalance.cli.common import echo_json, json_option, table
from lapbalance.outputs import write_bytes_atomic

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
        "sector_starts_m": [round(s, 3) for s in tr.sector_starts_m],
        "corners": [
            {"id": c.id, "direction": c.direction, "entry_m": round(c.entry_m, 1),
             "apex_m": round(c.apex_m, 1), "exit_m": round(c.exit_m, 1),
             "min_radius_m": round(c.min_radius_m, 2)}
            for c in tr.corners
        ],
    }


def track_map_png(tr: Track) -> bytes:
    """Draw the track map (corners labelled at their apex) and return PNG bytes."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 7.0), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    x, y = tr.x_m, tr.y_m
    if tr.closed:
        x, y = np.append(x, x[0]), np.append(y, y[0])
    ax.plot(x, y, color="0.25", lw=1.5)
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
    fig.savefig(buf, format="png", metadata={"Software": "lapbalance"})
    return buf.getvalue()


@main.command("track")
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--step-m", type=float, default=1.0, show_default=True,
              help="Spacing of the resampled points [m].")
@click.option("--closed/--open", "closed", default=None,
              help="Force a closed circuit or an open stage (default: from the file).")
@click.option("--map", "map_png", type=click.Path(), default=None,
              metavar="PNG", help="Save a track map with corners labelled.")
@click.option("--force", is_flag=True, help="Replace an existing --map file.")
@json_option
def track_command(track_file, step_m, closed, map_png, force, as_json):
    """Load TRACK_FILE (CSV), print its length, corners and sectors."""
    from contextlib import nullcontext

    from lapbalance.cli.common import check_step, check_track_size
    from lapbalance.outputs import output_file
    from lapbalance.track import load_track

    check_step(step_m)
    with (output_file(map_png, force, "--map", command="track", inputs=[track_file],
                     need_bytes=300_000)
          if map_png else nullcontext()):
        tr = load_track(track_file, step_m=step_m, closed=closed)
        check_track_size(tr, step_m)
        info = track_summary(tr)
        if map_png:
            write_bytes_atomic(map_png, track_map_png(tr))
            info["map_png"] = str(map_png)
    if as_json:
        echo_json(info)
        return
    kind = "closed circuit" if tr.closed else "open stage"
    click.echo(f"{tr.name}  ({tr.source})")
    click.echo(f"{kind}, length {tr.length_m:.1f} m, {tr.n} points at {tr.step_m:.4f} m")
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
