"""`lapbalance report`: run one car (and variants) around a track and write an HTML report."""

from __future__ import annotations

from pathlib import Path

import click

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import set_option
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
@track_options
def report_command(car_file, track_file, variants, overrides, out_file, force, step_m, closed,
                   start_speed_kph):
    """Run CAR_FILE (and every --variant) around TRACK_FILE; write a self-contained HTML report.

    --set overrides apply to every car, so variants differ only by their own files.
    """
    from lapbalance.lap import simulate_lap
    from lapbalance.outputs import output_file, write_text_atomic
    from lapbalance.report import build_report

    out = Path(out_file)
    files = [car_file, *variants]
    # take the file first: an existing, unwritable or input file fails before any lap runs
    with output_file(out, force, "--out", command="report", inputs=[*files, track_file],
                     need_bytes=1_500_000 * (1 + len(variants))):
        more = [load_car(v, overrides) for v in variants]
        car, track = load_inputs(car_file, track_file, overrides, step_m, closed,
                                 start_speed_kph, more)
        cars = [car, *more]
        labels = [c.name for c in cars]
        if len(set(labels)) < len(labels):
            labels = [Path(f).stem for f in files]
        results = []
        for j, (c, lab) in enumerate(zip(cars, labels, strict=True)):
            click.echo(f"[{j + 1}/{len(cars)}] {lab}: running the lap ...", err=True)
            results.append(simulate_lap(c, track, start_speed_kph=start_speed_kph))
        click.echo("rendering figures ...", err=True)
        write_text_atomic(out, build_report(results, labels))
    times = ", ".join(f"{lab} {r.lap_time_s:.3f} s" for lab, r in zip(labels, results,
                                                                       strict=True))
    click.echo(f"wrote {out} ({times})")
