"""`lapbalance correlate`: hold a car's model lap against a logged lap; fit a few factors."""

from __future__ import annotations

from pathlib import Path

import click

from lapbalance.cli import main
from lapbalance.cli.common import echo_json, force_option, json_option, set_option, table


def format_correlation(corr) -> str:
    """Human-readable correlation summary (text)."""
    s = corr.summary()
    al = corr.alignment
    lines = [f"{s['car']} on {s['track']} ({s['track_length_m']:.0f} m) against "
             f"{Path(s['log']).name}: {s['laps_in_log']} complete lap(s)"
             + (f", {s['partial_laps_left_out']} partial left out"
                if s["partial_laps_left_out"] else "")
             + f", {s['sample_rate_hz']:.0f} Hz, split by {s['split_by']}"]
    dt = corr.model.lap_time_s - corr.lap.lap_time_s
    lines.append(f"lap {corr.lap.number}: logged {corr.lap.lap_time_s:.3f} s, model "
                 f"{corr.model.lap_time_s:.3f} s ({dt:+.3f} s, negative = model faster)"
                 + (f", fitted model {corr.fitted.lap_time_s:.3f} s" if corr.fitted else ""))
    cr = "" if al.cross_track_rms_m != al.cross_track_rms_m else \
        f", positions {al.cross_track_rms_m:.2f} m RMS from the track line"
    lines.append(f"aligned by {al.method}: distance scale {al.scale:.5f} (track m per logger "
                 f"m), offset {al.offset_m:+.2f} m, speed RMS log-model "
                 f"{al.speed_rms_kph:.2f} km/h{cr}")
    if len(corr.laps) > 1:
        lines.append("laps: " + "   ".join(f"{r['lap']}: {r['lap_time_s']:.3f} s"
                                            for r in corr.laps))
    lines.append("")
    fitted = corr.fitted is not None
    rows = []
    for r in corr.segments:
        row = [r["segment"], f"{r['at_m']:.0f}", f"{r['model_kph']:.1f}",
               _n(r["log_kph"], ".1f"), _n(r["model_minus_log_kph"], "+.1f"), r["verdict"]]
        if fitted:
            row.append(_n(r.get("fitted_kph"), ".1f"))
        row += [_n(r.get("model_ay_mps2"), ".1f"), _n(r.get("log_ay_mps2"), ".1f")]
        rows.append(row)
    head = ["segment", "at m", "model km/h", "log km/h", "diff", "model is"]
    if fitted:
        head.append("fitted km/h")
    head += ["model ay", "log ay"]
    lines.append(table(rows, head))
    lines.append("C = corner minimum speed, S = straight top speed; diff = model - log "
                 "(> 0: model optimistic); ay = peak lateral acceleration [m/s²]")
    worst = sorted((r for r in corr.segments if r["model_minus_log_kph"] ==
                    r["model_minus_log_kph"]), key=lambda r: -abs(r["model_minus_log_kph"]))
    if worst:
        lines.append("largest differences: " + ", ".join(
            f"{r['segment']} {r['model_minus_log_kph']:+.1f} km/h" for r in worst[:3]))
    if corr.fit is not None:
        f = corr.fit
        lines.append("")
        lines.append(f"fit on {f.n_residuals} corner minimum and straight top speeds "
                     f"(weights corner {f.weights['corner']:g}, straight "
                     f"{f.weights['straight']:g}); residual RMS {f.residual_rms_kph:.2f} km/h")
        frows = [[r["factor"], f"{r['value']:.4f}", _n(r["std"], ".4f"),
                  f"{_n(r['ci95_low'], '.4f')} .. {_n(r['ci95_high'], '.4f')}"]
                 for r in f.table()]
        lines.append(table(frows, ["factor", "value", "± 1 sigma", "95 % interval"]))
        if len(f.factors) > 1:
            pairs = [(f.factors[i], f.factors[j], f.correlation[i, j])
                     for i in range(len(f.factors)) for j in range(i + 1, len(f.factors))]
            lines.append("factor correlation: " + ", ".join(f"{a}/{b} {c:+.2f}"
                                                           for a, b, c in pairs))
        lines.append("the factors are estimates from one log; every other car value is "
                     "taken as right")
    return "\n".join(lines)


def _n(x, fmt):
    if x is None or x != x:
        return "–"
    return format(x, fmt)


@main.command("correlate")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.argument("log_file", type=click.Path(dir_okay=False))
@set_option
@click.option("--fit", "fit", default="", metavar="FACTORS",
              help="Comma-separated factors to fit: grip, grip-front, grip-rear, drag, power.")
@click.option("--lap", "lap", type=int, default=None,
              help="Lap of the log to compare (1 = first complete lap; default the fastest).")
@click.option("--align", type=click.Choice(["auto", "positions", "speed"]), default="auto",
              show_default=True, help="Distance alignment: from positions, or from the speed "
              "traces (fitted logger distance scale and offset).")
@click.option("--corner-weight", type=float, default=1.0, show_default=True,
              help="Fit weight of each corner's minimum speed.")
@click.option("--straight-weight", type=float, default=1.0, show_default=True,
              help="Fit weight of each straight's top speed.")
@click.option("--write-variant", "variant_file", type=click.Path(dir_okay=False),
              help="Write the fitted car as a variant file (TOML, base = CAR_FILE).")
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Write trace.csv, segments.csv and summary.json here.")
@click.option("--plots", is_flag=True, help="Also write correlation.png into --out.")
@json_option
@force_option
@click.option("--step-m", type=float, default=1.0, show_default=True,
              help="Resampling step along the track [m].")
def correlate_command(car_file, track_file, log_file, overrides, fit, lap, align,
                      corner_weight, straight_weight, variant_file, out_dir, plots, as_json,
                      force, step_m):
    """Compare CAR_FILE's lap of TRACK_FILE with the logged run LOG_FILE (CSV).

    Prints the alignment, the corner minimum and straight top speeds (log vs model) and,
    with --fit, the fitted factors with their confidence. --write-variant writes the
    fitted car for every other command.
    """
    from lapbalance import correlate as C
    from lapbalance.cli.lap_cmd import load_inputs
    from lapbalance.errors import InputError
    from lapbalance.outputs import check_output_dir, write_text_atomic

    for name, w in (("--corner-weight", corner_weight), ("--straight-weight", straight_weight)):
        if not (w >= 0 and w == w and w != float("inf")):
            raise InputError(f"= {w:g} must be a finite weight >= 0", name)
    factors = tuple(f for f in fit.split(",") if f.strip())
    if variant_file and not factors:
        raise click.UsageError("--write-variant needs --fit FACTORS")
    if variant_file and Path(variant_file).exists() and not force:
        raise InputError("already exists; pass --force to replace it or choose another "
                         "--write-variant", variant_file)
    if variant_file and Path(variant_file).resolve() == Path(car_file).resolve():
        raise InputError("is the car file itself; write the variant to another file",
                         variant_file, "--write-variant")
    if out_dir:
        check_output_dir(out_dir, force)
    elif plots:
        raise click.UsageError("--plots needs --out DIR")
    car, track = load_inputs(car_file, track_file, overrides, step_m, None, prepare=False)
    log = C.load_log(log_file, track, track_latlon_origin=C.track_origin(track_file))
    from lapbalance.cli.common import prepare_solver

    prepare_solver()  # after the log is read and checked: a bad log gets its one line alone
    corr = C.correlate(car, track, log, lap=lap, align=align, fit=factors,
                       corner_weight=corner_weight, straight_weight=straight_weight)
    from lapbalance import provenance

    record = provenance.build([car], [track], files=[("log", log_file)],
                              solver=corr.model.settings if corr.model is not None else None,
                              settings={"fit": list(factors), "align": align, "lap": lap,
                                        "corner_weight": corner_weight,
                                        "straight_weight": straight_weight})
    if out_dir:
        extra = {}
        if plots:
            from lapbalance.plots import figure_png
            from lapbalance.plots_correlate import correlation_figure

            extra["correlation.png"] = figure_png(correlation_figure(corr))
        C.write_folder(corr, out_dir, force=force, extra=extra, provenance=record)
    if variant_file:
        from lapbalance.car import _parse_override

        sets = {}
        for o in overrides:
            sec, key, val = _parse_override(o)
            sets[f"{sec}.{key}" if sec else key] = val
        note = (f"fitted to lap {corr.lap.number} of {Path(log_file).name} on "
                f"{track.name}: {', '.join(factors)}")
        write_text_atomic(variant_file, C.variant_text(corr.fit, car_file, variant_file,
                                                       note=note, extra_overrides=sets))
    if as_json:
        echo_json({**corr.summary(), "provenance": record})
        return
    click.echo(format_correlation(corr))
    if out_dir:
        click.echo(f"\nwrote {out_dir}/trace.csv, segments.csv, summary.json, provenance.json"
                   + (", correlation.png" if plots else ""))
    if variant_file:
        click.echo(f"wrote {variant_file} (fitted variant; base = {car_file})")
