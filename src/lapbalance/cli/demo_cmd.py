"""`lapbalance demo`: run the main job on the invented demo car, track and tunnel data."""

from __future__ import annotations

from pathlib import Path

import click

from lapbalance.cli import main
from lapbalance.cli.common import table
from lapbalance.errors import InputError

#: Marker file of demo folders written before output manifests existed (still recognised).
DEMO_MARKER = ".lapbalance-demo"


def demo_root() -> Path:
    """Folder holding ``examples/`` and ``tracks/`` (the source checkout)."""
    here = Path(__file__).resolve()
    for parent in here.parents:
        if (parent / "examples" / "gt_coupe.toml").exists() and (parent / "tracks").is_dir():
            return parent
    raise InputError("demo data not found: run the demo from a source checkout of lapbalance "
                     "(it reads examples/ and tracks/)", "demo")


def _say(msg: str) -> None:
    click.echo(msg, err=True)


@main.command("demo")
@click.option("--out", "out_dir", type=click.Path(), default="lapbalance-demo",
              show_default=True, help="Folder for the demo results.")
@click.option("--force", is_flag=True,
              help="Replace an earlier result of another lapbalance command in --out "
                   "(a folder holding files lapbalance did not write is always refused).")
def demo_command(out_dir, force):
    """Run the demo: a lap of the GT coupe with its lift-off check, the wind-tunnel
    correction of its balance readings, and the HTML report."""
    from lapbalance.lap import CAUTION
    from lapbalance.outputs import output_folder, read_manifest

    root = demo_root()
    out = Path(out_dir)
    man = read_manifest(out) if out.is_dir() else None
    own = (man is not None and man.get("command") == "demo") or (out / DEMO_MARKER).is_file()
    # take the folder first (refused or unwritable folders fail before the lap runs); the
    # demo replaces its own earlier result, never a file lapbalance did not write
    with output_folder(out, force=force or own, option="--out", command="demo") as folder:
        _demo(root, folder.staging, out)
    click.echo(f"caution: {CAUTION}")


def _demo(root: Path, tmp: Path, out: Path) -> None:
    """Run the demo jobs, print them, and write their files into staging folder ``tmp``."""
    from lapbalance import tunnel
    from lapbalance.car import load_car
    from lapbalance.cli.lap_cmd import format_lap
    from lapbalance.export import channels_csv, corners_csv, summary_json
    from lapbalance.lap import simulate_lap
    from lapbalance.outputs import columns_csv_text
    from lapbalance.track import load_track

    car_file = root / "examples" / "gt_coupe.toml"
    track_file = root / "tracks" / "veldmoor_ring.csv"
    _say(f"demo: loading {car_file.name} and {track_file.name}")
    car = load_car(car_file)
    track = load_track(track_file)
    from lapbalance.cli.common import prepare_solver

    prepare_solver()
    _say("demo: simulating the lap")
    result = simulate_lap(car, track)
    click.echo(format_lap(result))
    click.echo("")

    _say("demo: correcting the wind-tunnel balance readings for the wheel restraint")
    readings = tunnel.read_readings(root / "examples" / "gt_coupe_tunnel_sweep.csv")
    corr = tunnel.correct_table(readings, car.chassis.cg_height, car.chassis.wheelbase, 0.0,
                                car.air.density, car.aero.drag_height,
                                expected_drag_area=car.aero.drag_area or None)
    rows = []
    for i in range(len(corr["front_n_measured"])):
        rows.append([f"{corr['speed_kph'][i]:.0f}" if "speed_kph" in corr else str(i + 1),
                     f"{corr['front_n_measured'][i]:.0f}", f"{corr['rear_n_measured'][i]:.0f}",
                     f"{corr['balance_front_measured'][i] * 100:.1f}",
                     f"{corr['front_n_cg'][i]:.0f}", f"{corr['rear_n_cg'][i]:.0f}",
                     f"{corr['balance_front_cg'][i] * 100:.1f}",
                     f"{corr['correction_n'][i]:+.0f}"])
    click.echo("wind-tunnel readings (wheel-restrained) -> on-track split (CG convention)")
    click.echo(table(rows, ["km/h", "front N", "rear N", "front %", "front N cg",
                            "rear N cg", "front % cg", "shift N"]))
    click.echo("the scales under a wheel-restrained car read D·h_cg/L too little on the front;"
               " on track that load comes and goes with the tyres' drive force")
    click.echo("")

    report_html = None
    try:
        from lapbalance import report as _report
    except ImportError:
        _report = None
    if _report is not None:
        _say("demo: writing the HTML report")
        variant = root / "examples" / "gt_coupe_high_wing.toml"
        results = [result]
        if variant.exists():
            results.append(simulate_lap(load_car(variant), track))
        report_html = _report.build_report(results, dpi=70)

    (tmp / "channels.csv").write_text(channels_csv(result), encoding="utf-8")
    (tmp / "corners.csv").write_text(corners_csv(result), encoding="utf-8")
    (tmp / "summary.json").write_text(summary_json(result), encoding="utf-8")
    (tmp / "tunnel_corrected.csv").write_text(columns_csv_text(corr, nan=""),
                                              encoding="utf-8")
    if report_html is not None:
        (tmp / "report.html").write_text(report_html, encoding="utf-8")
    from lapbalance import provenance
    from lapbalance.export import write_provenance

    write_provenance(tmp, provenance.for_lap(
        result, [("tunnel-readings", root / "examples" / "gt_coupe_tunnel_sweep.csv")]))
    click.echo(f"wrote {out}/ (channels.csv, corners.csv, summary.json, provenance.json, "
               "tunnel_corrected.csv"
               f"{', report.html' if report_html else ''})")
