"""`lapbalance car`: show a car's derived figures, or the car-file key reference."""

from __future__ import annotations

import click

from lapbalance.car import load_car, schema_markdown
from lapbalance.cli import main
from lapbalance.cli.common import echo_json, json_option, set_option, table
from lapbalance.units import G0


@main.command("car")
@click.argument("car_file", required=False, type=click.Path(dir_okay=False))
@set_option
@json_option
@click.option("--schema", is_flag=True, help="Print the car-file key reference (Markdown).")
def car_command(car_file, overrides, as_json, schema):
    """Show CAR_FILE's static loads and aero balance in both conventions."""
    if schema:
        click.echo(schema_markdown())
        return
    if not car_file:
        raise click.UsageError("give a CAR_FILE, or --schema")
    car = load_car(car_file, overrides)
    ch, ae = car.chassis, car.aero
    info = {
        "name": car.name,
        "mass_kg": ch.mass,
        "static_front_n": ch.mass * G0 * ch.front_weight_fraction,
        "static_rear_n": ch.mass * G0 * (1 - ch.front_weight_fraction),
        "downforce_area_m2": ae.downforce_area,
        "drag_area_m2": ae.drag_area,
        "aero_balance_front_cg": ae.balance_cg,
        "aero_balance_front_ground": ae.balance_ground(ch.cg_height, ch.wheelbase),
        "balance_as_given": ae.input_balance_front,
        "convention_as_given": ae.input_convention,
        "air_density_kg_m3": car.air.density,
        "air_density_from": car.air.how,
        "rev_limited_top_speed_kph": car.powertrain.top_speed_rev_limited() * 3.6,
    }
    if ae.drag_height is not None and ae.downforce_area != 0:
        from lapbalance.aero import vertical_centre_of_pressure

        info["vertical_cop_behind_front_axle_m"] = vertical_centre_of_pressure(
            ae.front_area_cg, ae.rear_area_cg, ae.drag_area, ch.cg_height, ae.drag_height,
            ch.wheelbase)
    if as_json:
        echo_json({k: (None if isinstance(v, float) and v != v else v) for k, v in info.items()})
        return
    click.echo(f"{car.name}  ({car.source})")
    rows = []
    for k, v in info.items():
        if k == "name":
            continue
        rows.append([k, f"{v:.4g}" if isinstance(v, float) else str(v)])
    click.echo(table(rows, ["quantity", "value"], "ll"))
