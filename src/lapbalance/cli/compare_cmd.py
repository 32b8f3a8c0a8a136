"""`lapbalance compare` (a base car against variants) and `lapbalance sweep` (parameter sweeps)."""

from __future__ import annotations

import io
import math
import sys

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
    prepare_solver,
    set_option,
    table,
    units_option,
)
from lapbalance.cli.lap_cmd import track_options
from lapbalance.errors import InputError


def _load_tracks(track_files, step_m, closed):
    from lapbalance.cli.common import check_step, check_track_size
    from lapbalance.track import load_track

    check_step(step_m)
    tracks = [load_track(f, step_m=step_m, closed=closed) for f in track_files]
    for t in tracks:
        check_track_size(t, step_m)
    return tracks


def split_settings(text: str) -> list[str]:
    """Split ``"a.b=1,c.d=[1, 2]"`` at commas outside brackets and quotes."""
    out, cur, depth, quote = [], [], 0, None
    for ch in text:
        if quote:
            quote = None if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == "," and depth == 0:
            out.append("".join(cur).strip())
            cur = []
            continue
        cur.append(ch)
    out.append("".join(cur).strip())
    items = [s for s in out if s]
    if not items or any("=" not in s for s in items):
        raise InputError(f'"{text}" is not section.key=value[,section.key=value...]',
                         "--set-variant")
    return items


def _f(x, fmt: str) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    return format(x, fmt)


def _pct_pair(cg, ground) -> str:
    if cg is None or not math.isfinite(cg):
        return "-"
    return f"{cg * 100:.1f} ({ground * 100:.1f})"


def _track_name(result, key: str) -> str:
    i = result.tracks.index(key)
    return getattr(result.laps[i][0].track, "name", "") or key


def format_setup(result, key: str | None = None) -> str:
    """Setup table of every car and, per variant, the car-file keys that differ from the base."""
    from lapbalance import provenance as prov

    i = 0 if key is None else result.tracks.index(key)
    cars = [r.car for r in result.laps[i]]
    labels = result.labels
    rows = [[label, unit, *(prov.format_value(v) for v in vals)]
            for label, unit, *vals in prov.setup_rows(cars)]
    lines = ["setup", table(rows, ["quantity", "unit", *labels], "ll" + "r" * len(labels))]
    for car, lab in zip(cars[1:], labels[1:], strict=True):
        diff = prov.car_differences(cars[0], car)
        lines.append("")
        lines.append(f"what differs from the base: {lab}")
        if diff:
            lines.append(table([[k, prov.format_value(a), prov.format_value(b)]
                                for k, a, b in diff], ["key", "base", "variant"], "lll"))
        else:
            lines.append("(no car-file key differs)")
    return "\n".join(lines)


def format_compare(result, track: str, units: str = "metric") -> str:
    """Text tables of one track (by key): the lap summary and the per-segment time deltas."""
    from lapbalance.units import Display

    d = Display(units)
    su, lu = d.unit("speed"), d.unit("length")
    rows = result.summary_for(track)
    lo, hi = result.speed_bands_kph
    laps = result.laps[result.tracks.index(track)]
    tl = laps[0].time_label
    kind = "closed lap" if laps[0].track.closed else "open run"
    lines = [f"track {_track_name(result, track)} ({kind})"]

    def bal(r, lap, which):
        if lap.car.aero.downforce_area < 0:
            return "net lift"
        return _pct_pair(r[f"aero_balance_front_{which}"],
                         r[f"aero_balance_front_ground_{which}"])

    lines.append(table(
        [[r["car"], _f(r["lap_time_s"], ".3f"), _f(r["delta_s"], "+.3f"),
          _f(d.speed_kph(r["top_speed_kph"]), ".1f"), bal(r, lap, "low"), bal(r, lap, "high"),
          _f(r["liftoff_margin_min"], ".3f"), _f(r["liftoff_margin_delta"], "+.3f"),
          _f(r["liftoff_reserve_min"], "+.3f"), _f(r["liftoff_reserve_delta"], "+.3f"),
          r["flagged_corners"], _f(r["liftoff_worst_shift"], "+.3f")]
         for r, lap in zip(rows, laps, strict=True)],
        ["car", f"{tl} s", "delta s", f"top {su}", f"bal <{d.speed_kph(lo):.0f} %",
         f"bal >={d.speed_kph(hi):.0f} %", "margin", "d margin", "reserve", "d reserve",
         "flagged", "lift shift"]))
    lines.append(f"bal = front share of downforce, mean over steps below {d.speed_kph(lo):.0f} "
                 f"{su} / at or above {d.speed_kph(hi):.0f} {su}, as CG convention "
                 "(wheel-restrained scales in brackets; 'net lift': the car lifts, a share "
                 "means nothing); delta = car minus base (negative = faster); margin = smallest "
                 "lift-off margin over the corners (1 = a lift at the limit keeps the rear); "
                 "reserve = smallest rear reserve after a lift at the limit (< 0 saturates; "
                 "it ranks cars whose margin is 1); d = car minus base (> 0 safer)")
    segs = result.segments_for(track)
    labels = result.labels
    by_car = {lab: [s for s in segs if s["car"] == lab] for lab in labels}
    base = by_car[labels[0]]
    if len(base) > 1:
        srows = []
        for i, s in enumerate(base):
            row = [s["segment"], f"{d.length(s['start_m']):.0f}", f"{d.length(s['end_m']):.0f}",
                   f"{s['time_s']:.3f}"]
            row += [f"{by_car[lab][i]['delta_s']:+.3f}" for lab in labels[1:]]
            corner = s["kind"] == "corner"
            row.append(_f(s["liftoff_margin"], ".3f") if corner else "")
            row += [_f(by_car[lab][i]["liftoff_margin_delta"], "+.3f") if corner else ""
                    for lab in labels[1:]]
            row.append(_f(s["liftoff_rear_reserve"], "+.3f") if corner else "")
            row += [_f(by_car[lab][i]["liftoff_rear_reserve_delta"], "+.3f") if corner else ""
                    for lab in labels[1:]]
            verdicts = [by_car[lab][i]["liftoff_verdict"] for lab in labels]
            row.append("/".join(v or "-" for v in verdicts) if corner else "")
            srows.append(row)
        tot = [sum(by_car[lab][i]["delta_s"] for i in range(len(base))) for lab in labels[1:]]
        srows.append([tl.split()[0], "", "", f"{sum(s['time_s'] for s in base):.3f}"]
                     + [f"{t:+.3f}" for t in tot] + [""] * (2 * len(labels) + 1))
        head = ["segment", f"from {lu}", f"to {lu}", "base s"] + [f"d {j + 1} s"
                                                          for j in range(len(labels) - 1)]
        head += ["base margin"] + [f"dm {j + 1}" for j in range(len(labels) - 1)]
        head += ["base reserve"] + [f"dr {j + 1}" for j in range(len(labels) - 1)]
        lines.append("")
        lines.append(table(srows, head + ["lift-off verdicts"]))
        lines.append("C = corner (entry to exit), S = straight between corners; d j = time "
                     "of car j minus base there; base margin = the base car's lift-off "
                     "margin in the corner, dm j = car j's margin minus it (> 0 safer); base "
                     "reserve, dr j = the same for the rear reserve after a lift at the limit; "
                     "verdicts in car order: "
                     + "; ".join(f"{j}: {lab}" for j, lab in enumerate(labels)))
    return "\n".join(lines)


def format_compare_runs(runs, labels, units: str = "metric") -> str:
    """Text table of the lift-off runs in time of every car at the base car's corners
    (:func:`lapbalance.transient.compare_corner_runs`)."""
    from lapbalance.units import Display

    d = Display(units)
    if not runs:
        return "lift-off in time: no corner to run"
    rows = []
    for r in runs:
        row = [r["corner"], f"{d.length(r['radius_m']):.0f}", f"{d.speed_kph(r['speed_kph']):.0f}"]
        for lab in labels:
            c = r["cars"].get(lab)
            row.append("" if c is None or c["status"] != "ok" else f"{c['yaw_rate_ratio']:.2f}"
                       + (" SPIN" if c["spin"] else ""))
        for lab in labels:
            c = r["cars"].get(lab)
            row.append("" if c is None else ("none" if c["spin_onset_ay_mps2"] is None
                                             else f"{c['spin_onset_fraction']:.2f}"))
        rows.append(row)
    head = (["corner", f"radius {d.unit('length')}", d.unit("speed")]
            + [f"yaw {j}" for j in range(len(labels))]
            + [f"spin from {j}" for j in range(len(labels))])
    return "\n".join([
        "lift-off in time at the base car's flagged corners (or its tightest), every car at "
        "the base's radius and speed:", table(rows, head),
        "yaw j = car j's yaw-rate ratio 1 s after the lift (> 1 tucks in; SPIN = tail-out past "
        "the spin bound within 3 s); spin from j = lowest initial a_y, as a share of car j's "
        "steady limit at that radius, from which a lift spins it (higher = more forgiving; "
        "none = no spin up to the limit); cars: "
        + "; ".join(f"{j}: {lab}" for j, lab in enumerate(labels))])


def _csv_rows(rows, columns):
    from lapbalance.outputs import csv_text

    def fmt(v):
        if v is None:
            return ""
        if isinstance(v, float):
            return "" if not math.isfinite(v) else f"{v:.6g}"
        return str(v)

    return csv_text(columns, ([fmt(r.get(c)) for c in columns] for r in rows))


SUMMARY_COLUMNS = ("car", "lap_time_s", "delta_s", "top_speed_kph", "min_speed_kph",
                   "aero_balance_front_low", "aero_balance_front_high",
                   "aero_balance_front_ground_low", "aero_balance_front_ground_high",
                   "liftoff_worst_shift", "flagged_corners", "liftoff_margin_min",
                   "liftoff_margin_delta", "liftoff_reserve_min", "liftoff_reserve_delta")
SEGMENT_COLUMNS = ("car", "segment", "kind", "corner_id", "start_m", "end_m", "time_s",
                   "delta_s", "min_speed_kph", "liftoff_verdict", "liftoff_margin",
                   "liftoff_margin_delta", "liftoff_rear_reserve", "liftoff_rear_reserve_delta",
                   "liftoff_max_shift",
                   "liftoff_max_usage_rear")


_FMT = ["png"]  # figure format of the running compare (set by the command)


def _png(fig) -> bytes:
    if isinstance(fig, bytes):
        return fig
    buf = io.BytesIO()
    fig.savefig(buf, format=_FMT[0], metadata=None if _FMT[0] == "png" else {"Date": None})
    return buf.getvalue()


def _figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9, 6), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _overlay_png(laps, labels) -> bytes:
    """Speed and aero balance over distance, one line per car (fallback figure)."""
    fig = _figure()
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    for r, lab in zip(laps, labels, strict=True):
        d = r.channels["distance_m"]
        ax1.plot(d, r.channels["speed_kph"], lw=1, label=lab)
        ax2.plot(d, r.channels["aero_balance_front"] * 100, lw=1, label=lab)
    ax1.set_ylabel("speed [km/h]")
    ax2.set_ylabel("aero balance, front share [%]\n(CG convention)")
    ax2.set_xlabel("distance [m]")
    ax1.legend(fontsize=8)
    for ax in (ax1, ax2):
        ax.grid(True, alpha=0.3)
    return _png(fig)


def _delta_map_png(base, others, labels) -> bytes:
    """Track maps coloured by time gained or lost against the base (fallback figure)."""
    import numpy as np

    from lapbalance.compare import time_delta

    fig = _figure()
    axes = np.atleast_1d(fig.subplots(1, len(others), squeeze=False)).ravel()
    deltas = [time_delta(base, o) for o in others]
    lim = max(max(float(np.max(np.abs(dl))) for dl in deltas), 1e-6)
    x, y = base.channels["x_m"], base.channels["y_m"]
    for ax, dl, lab in zip(axes, deltas, labels, strict=True):
        m = ax.scatter(x, y, c=dl, s=4, cmap="coolwarm", vmin=-lim, vmax=lim)
        ax.set_aspect("equal")
        ax.set_title(f"{lab}\nminus base", fontsize=9)
        ax.set_xticks([])
        ax.set_yticks([])
    fig.colorbar(m, ax=list(axes), label="elapsed-time difference [s] (> 0 behind)")
    return _png(fig)


def compare_figures(result, i: int, key: str, fmt: str = "png") -> dict[str, bytes]:
    """Overlay and delta-map figures of track ``i`` as ``png``, ``svg`` or ``pdf`` bytes."""
    _FMT[0] = fmt
    try:
        out = compare_figures_png(result, i, key)
    finally:
        _FMT[0] = "png"
    return {name[: -len(".png")] + "." + fmt: data for name, data in out.items()}


def compare_figures_png(result, i: int, key: str) -> dict[str, bytes]:
    """Overlay and delta-map PNGs of track ``i``; uses lapbalance.plots when it has them."""
    laps, labels = result.laps[i], result.labels
    try:
        from lapbalance import plots as _plots
    except ImportError:
        _plots = None
    out = {}
    if _plots is not None and hasattr(_plots, "overlay_figure"):
        out[f"overlay_{key}.png"] = _png(_plots.overlay_figure(laps, labels))
    else:
        out[f"overlay_{key}.png"] = _overlay_png(laps, labels)
    if len(laps) > 1:
        if _plots is not None and hasattr(_plots, "delta_figure"):
            for j, r in enumerate(laps[1:]):
                out[f"delta_{key}_{j + 1}.png"] = _png(_plots.delta_figure(laps[0], r))
        else:
            out[f"delta_{key}.png"] = _delta_map_png(laps[0], laps[1:], labels[1:])
    return out


@main.command("compare")
@click.argument("base_file", type=click.Path(dir_okay=False))
@click.argument("variant_files", nargs=-1, type=click.Path(dir_okay=False))
@click.option("--track", "track_files", multiple=True, required=True,
              type=click.Path(dir_okay=False), help="Track file (repeatable).")
@click.option("--set-variant", "set_variants", multiple=True,
              metavar="SECTION.KEY=VALUE[,...]",
              help='A variant made of overrides on the base, e.g. --set-variant '
                   '"aero.downforce_area_m2=1.9,aero.drag_area_m2=0.86" (repeatable).')
@click.option("--out", "out_dir", type=click.Path(),
              help="Write compare_<track>.csv, corners_<track>.csv and plots here.")
@click.option("--plots/--no-plots", default=True, show_default=True,
              help="With --out, also write figures.")
@plot_format_option
@force_option
@json_option
@track_options
@units_option
@line_options
@click.option("--in-time/--no-in-time", "in_time", default=True, show_default=True,
              help="For car files with a [transient] section: also run the lift-off in time "
                   "(single-track model) for every car at the base car's flagged corners.")
def compare_command(base_file, variant_files, track_files, set_variants, out_dir, plots,
                    plot_format, force, as_json, step_m, closed, start_speed_kph, units, line,
                    track_width_m, line_margin_m, in_time):
    """Run BASE_FILE and each VARIANT_FILE (car files, e.g. with base = "...") over every
    --track; print lap times, deltas, aero balance, lift-off margins, per-corner time won or
    lost, a setup table and what each variant changes from the base.

    With --line min-curvature every car drives the line built for BASE_FILE's width, so the
    comparison shows the cars, not their lines."""
    from contextlib import nullcontext

    from lapbalance import provenance
    from lapbalance.cli.common import check_start_speed
    from lapbalance.compare import compare
    from lapbalance.outputs import output_folder

    if not variant_files and not set_variants:
        raise InputError("give at least one variant: a car file after the base, or "
                         "--set-variant SECTION.KEY=VALUE[,...]", "compare")
    inputs = [base_file, *variant_files, *track_files]
    # take the output folder first: a refused or unwritable folder fails before any lap
    with (output_folder(out_dir, force, command="compare", inputs=inputs)
          if out_dir else nullcontext()) as folder:
        base = load_car(base_file)
        variants: list = [load_car(f) for f in variant_files]
        for text in set_variants:
            items = split_settings(text)
            try:
                base.with_overrides(items)  # report bad keys against --set-variant
            except InputError as e:
                raise InputError(e.message, "--set-variant", e.field) from None
            variants.append(items)
        check_start_speed(start_speed_kph, [base, *[v for v in variants
                                                    if not isinstance(v, list)]])
        tracks = _load_tracks(track_files, step_m, closed)
        tracks = [apply_line(t, base, line, track_width_m, line_margin_m) for t in tracks]
        prepare_solver()
        opts = {"start_speed_kph": start_speed_kph} if start_speed_kph is not None else {}
        result = compare(base, variants, tracks, simulate_options=opts)
        cars = [r.car for r in result.laps[0]]
        record = provenance.build(cars, tracks, solver=result.laps[0][0].settings,
                                  settings={"labels": result.labels,
                                            "set_variants": list(set_variants),
                                            "speed_bands_kph": list(result.speed_bands_kph)})
        written: list[str] = []
        if folder is not None:
            from lapbalance.export import write_provenance

            tmp = folder.staging
            for i, key in enumerate(result.tracks):
                for name, text in (
                        (f"compare_{key}.csv", _csv_rows(result.summary_for(key),
                                                         SUMMARY_COLUMNS)),
                        (f"corners_{key}.csv", _csv_rows(result.segments_for(key),
                                                         SEGMENT_COLUMNS))):
                    (tmp / name).write_text(text, encoding="utf-8")
                    written.append(name)
                if plots:
                    for name, data in compare_figures(result, i, key, plot_format).items():
                        (tmp / name).write_bytes(data)
                        written.append(name)
            write_provenance(tmp, record)
            written.append(provenance.SIDECAR)
    runs = {}
    if in_time and any(c.transient is not None for c in cars):
        from lapbalance.transient import compare_corner_runs

        runs = {key: compare_corner_runs(result.laps[i], result.labels)
                for i, key in enumerate(result.tracks)}
    if as_json:
        echo_json({**result.to_json(),
                   "track_names": [_track_name(result, k) for k in result.tracks],
                   **({"liftoff_runs": runs} if runs else {}),
                   "provenance": record})
        return
    click.echo("\n\n".join(format_compare(result, key, units)
                            + (("\n\n" + format_compare_runs(runs[key], result.labels, units))
                               if key in runs else "")
                            for key in result.tracks))
    click.echo("")
    click.echo(format_setup(result))
    if out_dir:
        click.echo(f"\nwrote {len(written)} files in {out_dir}/: " + ", ".join(written))


# --------------------------------------------------------------------------------------------
# sweep
# --------------------------------------------------------------------------------------------


class _Progress:
    """A click progress bar on stderr, opened at the first report."""

    def __init__(self, label: str = "sweep"):
        self.bar = None
        self.label = label

    def __call__(self, done, total, row):
        if not sys.stderr.isatty():  # no bar in logs and pipes (keeps errors one line)
            return
        if self.bar is None:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr,
                                         show_pos=True)
            self.bar.__enter__()
        self.bar.update(done - self.bar.pos)

    def close(self):
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


def format_sweep(rows, keys, limit: int = 30, units: str = "metric",
                 time_word: str = "lap") -> str:
    """Text table of sweep rows (the fastest ``limit`` points when there are more)."""
    from lapbalance.units import Display

    d = Display(units)
    shown = rows
    note = ""
    if len(rows) > limit:
        ok = [r for r in rows if r["status"] == "ok"]
        shown = sorted(ok, key=lambda r: r["lap_time_s"])[:limit]
        note = f"(fastest {len(shown)} of {len(rows)} points; all in results.csv with --out)"
    body = []
    for r in shown:
        body.append([*(f"{r[k]:.10g}" for k in keys), _f(r["lap_time_s"], ".3f"),
                     _f(d.speed_kph(r["top_speed_kph"]), ".1f"),
                     _f(r.get("liftoff_margin_min"), ".3f"),
                     _f(r["flagged_corners"], "d"), _f(r["liftoff_worst_shift"], "+.3f"),
                     _f(r["liftoff_max_usage_rear"], ".3f"), r["status"]])
    text = table(body, [*keys, f"{time_word} s", f"top {d.unit('speed')}", "margin",
                        "flagged", "lift shift", "rear off", "status"])
    text += ("\nmargin = smallest lift-off margin over the corners (1 = a lift at the limit "
             "keeps the rear); lift shift = largest balance change on lift-off over all "
             "corners (> 0 toward oversteer); rear off = highest rear usage after lift-off")
    return text + ("\n" + note if note else "")


@main.command("sweep")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--vary", "vary_specs", multiple=True, required=True,
              metavar="SECTION.KEY=LO:HI:N|A,B,C",
              help="A numeric car key and its values: n values from lo to hi, or a list "
                   "(repeatable; with --lhs, LO:HI is enough).")
@click.option("--lhs", "lhs_n", type=int, default=None,
              help="Latin hypercube of N points over the --vary ranges instead of a grid.")
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seed of the Latin hypercube.")
@click.option("--workers", type=int, default=None,
              help="Local processes to run points in parallel (default: one per CPU core, "
                   "up to 8, each on one solver thread, once the sweep has enough points "
                   "per worker to pay for starting them: 20 when they are forked from "
                   "this process (Linux), 250 otherwise; else 1, in this process).")
@click.option("--cluster", default=None, metavar="ADDRESS",
              help="Run on a Dask scheduler, e.g. tcp://10.0.0.5:8786 (needs "
                   "lapbalance[cluster]).")
@click.option("--out", "out_dir", type=click.Path(),
              help="Folder for sweep.csv (a rerun resumes), results.csv, sweep.json, plots.")
@force_option
@set_option
@json_option
@track_options
@plot_format_option
@units_option
@line_options
def sweep_command(car_file, track_file, vary_specs, lhs_n, seed, workers, cluster, out_dir,
                  force, overrides, as_json, step_m, closed, start_speed_kph, plot_format,
                  units, line, track_width_m, line_margin_m):
    """Run CAR_FILE over TRACK_FILE at every point of a grid (or Latin hypercube) of car
    settings; print lap time and lift-off figures per point.

    With --line min-curvature the line is built once for CAR_FILE's width (a swept
    chassis.overall_width_m does not move it)."""
    import os

    from lapbalance import provenance
    from lapbalance.cli.common import check_car_track_order, check_int, check_start_speed
    from lapbalance.sweep import auto_workers, parse_vary, sweep, sweep_points

    check_int(lhs_n, "--lhs", 1, 100_000, "each point is a whole lap")
    check_int(seed, "--seed", 0, 2**32 - 1, "the seed of the Latin hypercube generator")
    check_int(workers, "--workers", 1, max(64, 4 * (os.cpu_count() or 1)),
              "each worker is a process holding its own solver and track, ~200 MB")
    method = "lhs" if lhs_n is not None else "grid"
    vary: dict[str, list[float]] = {}
    for spec in vary_specs:
        key, values = parse_vary(spec, method)
        if key in vary:
            raise InputError("is given twice; vary each key once", "--vary", key)
        vary[key] = values
    check_car_track_order(car_file, track_file)
    car = load_car(car_file, overrides)
    check_start_speed(start_speed_kph, [car])
    (track,) = _load_tracks([track_file], step_m, closed)
    track = apply_line(track, car, line, track_width_m, line_margin_m)
    opts = {"start_speed_kph": start_speed_kph} if start_speed_kph is not None else {}
    if workers is None:
        workers = 1 if cluster else auto_workers(len(sweep_points(vary, method, lhs_n, seed)))
    prepare_solver()
    from lapbalance.lap import LIFTOFF_AY_THRESHOLD

    record = provenance.build([car], [track],
                              solver={**opts, "liftoff_ay_threshold_mps2": LIFTOFF_AY_THRESHOLD},
                              settings={"vary": vary, "method": method, "lhs_points": lhs_n,
                                        "seed": seed, "workers": workers,
                                        "cluster": cluster})
    # the worker count is shown on the progress bar, once the output folder is taken (a
    # refused folder gets its one line alone)
    bar = _Progress(f"sweep ({workers} worker process{'es' if workers > 1 else ''}; "
                    "--workers to change)")
    stats: dict = {}
    try:
        rows = sweep(car, track, vary, method=method, n=lhs_n, workers=workers,
                     cluster=cluster, out=out_dir, seed=seed, progress=bar, force=force,
                     simulate_options=opts, stats=stats, plot_format=plot_format,
                     inputs=[car_file, track_file], provenance=record)
    except KeyboardInterrupt:
        bar.close()
        kept = (f"; finished points are kept in {out_dir}/sweep.csv, rerun the same command "
                "to resume") if out_dir else ""
        click.echo(f"lapbalance: sweep interrupted{kept}", err=True)
        sys.exit(130)
    finally:
        bar.close()
    if as_json:
        echo_json({"points": rows, "reused": stats.get("reused", 0), "provenance": record})
        return
    if stats.get("reused"):
        click.echo(f"resumed: reused {stats['reused']} of {stats['points']} points from "
                   f"{out_dir}/sweep.csv, computed {stats['computed']}")
    click.echo(f"{car.name} on {getattr(track, 'name', '') or 'track'} "
               f"({'closed lap' if track.closed else 'open run'})")
    click.echo(format_sweep(rows, list(vary), units=units,
                            time_word="lap" if track.closed else "run"))
    if out_dir:
        figs = (f", lap_time.{plot_format}, liftoff_margin.{plot_format}, "
                f"liftoff_shift.{plot_format}"
                if len(vary) <= 2 else "")
        click.echo(f"\nwrote {out_dir}/results.csv, sweep.csv, sweep.json, "
                   f"{provenance.SIDECAR}{figs}")
