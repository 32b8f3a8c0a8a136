"""`lapbalance report`: run one car (and variants) around a track and write an HTML report."""

from __future__ import annotations

from pathlib import Path

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import apply_line, line_options, set_option, units_option
from lapbalance.cli.lap_cmd import load_inputs, track_options


@main.command("report")
@click.argument("car_file", type=click.Path(dir_okay=False))
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--variant", "variants", multiple=True, type=click.Path(dir_okay=False),
              metavar="CAR_FILE", help="Another car file to compare with CAR_FILE "
              "(repeatable); adds a comparison table and overlay figures.")
@set_option
@click.option("--out", "out_file", required=True, type=click.Path(),
              help="HTML file to write, e.g. report.html.")
@click.option("--force", is_flag=True, help="Replace an existing report file.")
@click.option("--log", "log_file", type=click.Path(dir_okay=False),
              help="A logged run (CSV) of CAR_FILE on TRACK_FILE: adds a correlation section.")
@click.option("--log-fit", "log_fit", default="", metavar="FACTORS",
              help="With --log: factors to fit (grip, grip-front, grip-rear, drag, power).")
@track_options
@line_options
@units_option
def report_command(car_file, track_file, variants, overrides, out_file, force, step_m, closed,
                   start_speed_kph, line, track_width_m, line_margin_m, units, log_file=None,
                   log_fit=""):
    """Run CAR_FILE (and every --variant) around TRACK_FILE; write a self-contained HTML report.

    --set overrides apply to every car, so variants differ only by their own files. With
    --line min-curvature every car drives the line built for CAR_FILE's width. The
    report ends with a provenance section (inputs with SHA-256, overrides, settings) and,
    with variants, a setup table and what each variant changes from the base.
    """
    from lapbalance import provenance
    from lapbalance.cli.common import prepare_solver
    from lapbalance.lap import simulate_lap
    from lapbalance.outputs import output_file, write_text_atomic
    from lapbalance.report import build_report

    out = Path(out_file)
    files = [car_file, *variants]
    # take the file first: an existing, unwritable or input file fails before any lap runs
    with output_file(out, force, "--out", command="report",
                     inputs=[*files, track_file, *([log_file] if log_file else [])],
                     need_bytes=1_500_000 * (1 + len(variants))):
        more = [load_car(v, overrides) for v in variants]
        car, track = load_inputs(car_file, track_file, overrides, step_m, closed,
                                 start_speed_kph, more, prepare=False)
        track = apply_line(track, car, line, track_width_m, line_margin_m)
        log = None
        if log_file:  # read (and check) the log before any lap is run
            from lapbalance import correlate as C

            fit = C.check_factors(log_fit.split(","))
            log = C.load_log(log_file, track, track_latlon_origin=C.track_origin(track_file))
        elif log_fit:
            raise click.UsageError("--log-fit needs --log FILE")
        prepare_solver()  # after every input is read, so a bad input gets its one line alone
        cars = [car, *more]
        labels = [c.name for c in cars]
        if len(set(labels)) < len(labels):
            labels = [Path(f).stem for f in files]
        results = []
        for j, (c, lab) in enumerate(zip(cars, labels, strict=True)):
            click.echo(f"[{j + 1}/{len(cars)}] {lab}: running the lap ...", err=True)
            results.append(simulate_lap(c, track, start_speed_kph=start_speed_kph))
        corr = None
        if log_file:
            click.echo(f"correlating {labels[0]} with {log_file} ...", err=True)
            corr = C.correlate(car, track, log, fit=fit, model=results[0])
        click.echo("rendering figures ...", err=True)
        pfiles = [("log", log_file)] if log_file else []
        record = provenance.build(cars, [track], files=pfiles, solver=results[0].settings,
                                  settings={"log_fit": log_fit} if log_file else None)
        write_text_atomic(out, build_report(results, labels, units=units, provenance=record,
                                            correlation=corr))
    times = ", ".join(f"{lab} {r.lap_time_s:.3f} s" for lab, r in zip(labels, results,
                                                                       strict=True))
    click.echo(f"wrote {out} ({times})")
