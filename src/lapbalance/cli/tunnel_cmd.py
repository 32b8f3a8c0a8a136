"""`lapbalance tunnel`: correct balance readings for how the car was restrained."""

from __future__ import annotations

import math
import re

import click

from lapbalance import tunnel
from lapbalance.air import isa_density
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.common import echo_json, json_option, set_option, table
from lapbalance.errors import InputError
from lapbalance.outputs import columns_csv_text, write_text_atomic
from lapbalance.units import KPH

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


def parse_height_band(text: str, option: str = "--cg-height-m"):
    """Parse ``0.45``, ``0.45±0.03``, ``0.45+-0.03`` or ``0.42:0.48`` [m].

    Returns (nominal, low, high) [m]; low == high == nominal for a plain number.
    """
    s = text.strip().replace(" ", "")
    m = re.fullmatch(rf"({_NUM})(?:±|\+-|\+/-)({_NUM})", s)
    if m:
        nom, tol = float(m.group(1)), float(m.group(2))
        if tol < 0:
            raise InputError(f'"{text}": the ± part must be >= 0', option)
        return nom, nom - tol, nom + tol
    m = re.fullmatch(rf"({_NUM}):({_NUM})", s)
    if m:
        lo, hi = float(m.group(1)), float(m.group(2))
        if hi < lo:
            raise InputError(f'"{text}": write the range as min:max', option)
        return 0.5 * (lo + hi), lo, hi
    try:
        v = float(s)
    except ValueError:
        raise InputError(f'"{text}" is not a height; write 0.45, 0.45±0.03, 0.45+-0.03 or '
                         "0.42:0.48 (metres)", option) from None
    return v, v, v


def _length(v, option: str, lo: float, hi: float, text: str | None = None) -> None:
    """Refuse a length [m] outside [lo, hi] (a value in mm is named as such)."""
    if v is None:
        return
    shown = text if text is not None else f"{v:g}"
    if not math.isfinite(v):
        raise InputError(f"= {shown} is not a finite number; give metres", option)
    if lo <= v <= hi or (lo >= 0.0 and v <= 0.0):  # zero/negative: the physics check says
        return
    if lo <= v / 1000.0 <= hi and abs(v) >= 10:
        raise InputError(f"= {shown} looks like millimetres, but the option is in metres; "
                         f"write {v / 1000.0:g}", option)
    raise InputError(f"= {shown} m is outside {lo:g} to {hi:g} m; give the value in metres",
                     option)


def _pct(x):
    return "n/a" if x is None or not math.isfinite(x) else f"{100 * x:.2f} %"


def _print_reading(r: tunnel.CorrectedReading, measured_label: str, band=None):
    rows = [
        ["front [N]", f"{r.measured_front:.1f}", f"{r.front:.1f}"],
        ["rear [N]", f"{r.measured_rear:.1f}", f"{r.rear:.1f}"],
        ["total [N]", f"{r.measured_front + r.measured_rear:.1f}", f"{r.total:.1f}"],
        ["aero balance, front share", _pct(r.measured_balance_front), _pct(r.balance_front)],
    ]
    click.echo(table(rows, ["", f"measured ({measured_label})",
                            "corrected (CG convention)"]))
    click.echo(f"drag {r.drag:.1f} N, CG height {r.cg_height:g} m, wheelbase {r.wheelbase:g} m, "
               f"restraint height {r.restraint_height:g} m")
    click.echo(f"correction D·(h_cg - z)/L = {r.correction:+.1f} N to the front, "
               f"{-r.correction:+.1f} N to the rear")
    if band is not None:
        (h_lo, h_hi), (b_lo, b_hi) = band
        click.echo(f"CG height {h_lo:g} to {h_hi:g} m gives corrected balance "
                   f"{_pct(b_lo)} to {_pct(b_hi)}")
    cp = r.centre_of_pressure
    if cp is not None:
        click.echo(f"vertical-force centre of pressure: {cp:.3f} m behind the front axle "
                   f"({_pct(cp / r.wheelbase)} of the wheelbase; drag height "
                   f"{r.drag_height:g} m)")


@main.command("tunnel")
@click.argument("readings", required=False, type=click.Path(dir_okay=False))
@click.option("--car", "car_file", type=click.Path(dir_okay=False),
              help="Car file supplying CG height, wheelbase, drag height and air density.")
@set_option
@click.option("--front-n", type=float, help="Measured front axle downforce (load change) [N].")
@click.option("--rear-n", type=float, help="Measured rear axle downforce [N].")
@click.option("--drag-n", type=float, help="Drag, positive rearward [N].")
@click.option("--cg-height-m", "cg_text", metavar="H|H±DH|MIN:MAX",
              help="CG height [m], optionally with its uncertainty: 0.45±0.03, 0.45+-0.03 "
                   "or 0.42:0.48.")
@click.option("--wheelbase-m", type=float, help="Wheelbase [m].")
@click.option("--restraint-height-m", type=float, default=0.0, show_default=True,
              help="Height at which the restraint reacted the drag (0 = wheels/ground) [m].")
@click.option("--drag-height-m", type=float,
              help="Height of the drag's line of action, for the centre of pressure [m].")
@click.option("--cl", type=float, help="SAE J1594 lift coefficient C_L (positive up).")
@click.option("--cd", type=float, help="Drag coefficient C_D.")
@click.option("--cpm", type=float,
              help="SAE J1594 pitching-moment coefficient about the ground mid-wheelbase "
                   "point (nose-up positive, reference length = wheelbase).")
@click.option("--clf", type=float, help="SAE J1594 front-axle lift coefficient.")
@click.option("--clr", type=float, help="SAE J1594 rear-axle lift coefficient.")
@click.option("--frontal-area-m2", type=float, help="Reference area for coefficients [m²].")
@click.option("--speed-kph", type=float, help="Air speed for coefficients [km/h].")
@click.option("--air-density", type=float,
              help="Air density in the tunnel [kg/m³], for coefficients and for the areas of "
                   "a table (default: the car's, else ISO 2533 sea level 1.225).")
@click.option("--lift-n", type=float, help="CFD total lift, positive up [N].")
@click.option("--pitch-moment-nm", type=float,
              help="CFD pitching moment about the reference point, nose-up positive [N·m].")
@click.option("--moment-ref-x-m", type=float, default=0.0, show_default=True,
              help="Moment reference point rearward of mid-wheelbase [m].")
@click.option("--moment-ref-z-m", type=float, default=0.0, show_default=True,
              help="Moment reference point height above ground [m].")
@click.option("--out", "out_path", type=click.Path(),
              help="Write the corrected table to this CSV file (table form).")
@click.option("--force", is_flag=True,
              help="Replace the --out file (and its provenance sidecar) if it exists.")
@json_option
def tunnel_command(readings, car_file, overrides, front_n, rear_n, drag_n, cg_text,
                   wheelbase_m, restraint_height_m, drag_height_m, cl, cd, cpm, clf, clr,
                   frontal_area_m2, speed_kph, air_density, lift_n, pitch_moment_nm,
                   moment_ref_x_m, moment_ref_z_m, out_path, force, as_json):
    """Correct aero balance readings to the CG convention (drag reacted at CG height).

    \b
    Forms:
      tunnel --front-n F --rear-n R --drag-n D --cg-height-m H --wheelbase-m L
      tunnel --cl CL --cd CD --cpm CPM --frontal-area-m2 A --speed-kph V ...
      tunnel --clf CLF --clr CLR --cd CD --frontal-area-m2 A --speed-kph V ...
      tunnel --lift-n L --drag-n D --pitch-moment-nm M [--moment-ref-x-m X --moment-ref-z-m Z]
      tunnel READINGS.csv --car CAR.toml [--out corrected.csv]

    A balance under a restrained car reads the drag couple about the restraint as an axle
    load: the front reads light by D·(h_cg - z)/L. Coefficients and CFD moments are
    ground-referenced (SAE J1594), i.e. z = 0.
    """
    numbers = {"--front-n": front_n, "--rear-n": rear_n, "--drag-n": drag_n, "--cl": cl,
               "--cd": cd, "--cpm": cpm, "--clf": clf, "--clr": clr,
               "--frontal-area-m2": frontal_area_m2, "--speed-kph": speed_kph,
               "--air-density": air_density, "--lift-n": lift_n,
               "--pitch-moment-nm": pitch_moment_nm}
    for name, v in numbers.items():
        if v is not None and not math.isfinite(v):
            raise InputError(f"= {v:g} is not a finite number; give a plain number", name)
    for name in ("--front-n", "--rear-n", "--drag-n", "--lift-n"):
        v = numbers[name]
        if v is not None and abs(v) > 1e6:
            raise InputError(f"= {v:g} N is beyond ±1e6 N (100 t); give the force in newtons "
                             "(a car's aero loads are up to tens of kN)", name)
    if pitch_moment_nm is not None and abs(pitch_moment_nm) > 1e7:
        raise InputError(f"= {pitch_moment_nm:g} N·m is beyond ±1e7 N·m; give newton-metres",
                         "--pitch-moment-nm")
    for name in ("--cl", "--cd", "--cpm", "--clf", "--clr"):
        v = numbers[name]
        if v is not None and abs(v) > 20:
            raise InputError(f"= {v:g} is beyond ±20; give the coefficient itself (C_L of a "
                             "car is about -4 to 1), not in counts or percent", name)
    _length(wheelbase_m, "--wheelbase-m", 0.5, 6.0)
    _length(restraint_height_m, "--restraint-height-m", -0.5, 2.0)
    _length(drag_height_m, "--drag-height-m", -0.5, 3.0)
    _length(moment_ref_x_m, "--moment-ref-x-m", -10.0, 10.0)
    _length(moment_ref_z_m, "--moment-ref-z-m", -5.0, 5.0)
    car = load_car(car_file, overrides) if car_file else None
    if overrides and car is None:
        raise click.UsageError("--set needs --car")
    if readings:
        _table_form(readings, car, restraint_height_m, drag_height_m, air_density, out_path,
                    force, as_json)
        return
    if out_path:
        raise click.UsageError("--out is for the table form (READINGS.csv --car CAR.toml)")

    coeff = any(v is not None for v in (cl, cpm, clf, clr))
    cfd = lift_n is not None or pitch_moment_nm is not None
    forces = front_n is not None or rear_n is not None
    if sum((coeff, cfd, forces)) != 1:
        raise click.UsageError("give exactly one input form: --front-n/--rear-n, "
                               "coefficients (--cl/--cpm or --clf/--clr), CFD "
                               "(--lift-n/--pitch-moment-nm), or a READINGS.csv with --car")

    # geometry ---------------------------------------------------------------------------
    if cg_text is not None:
        h, h_lo, h_hi = parse_height_band(cg_text)
        for x in (h_lo, h_hi):
            _length(x, "--cg-height-m", 0.0, 2.0, text=cg_text)
    elif car is not None:
        h = h_lo = h_hi = car.chassis.cg_height
    else:
        raise click.UsageError("give --cg-height-m (or --car)")
    L = wheelbase_m if wheelbase_m is not None else (car.chassis.wheelbase if car else None)
    if L is None:
        raise click.UsageError("give --wheelbase-m (or --car)")
    if drag_height_m is None and car is not None:
        drag_height_m = car.aero.drag_height

    # input form ---------------------------------------------------------------------------
    z = restraint_height_m
    if forces:
        if front_n is None or rear_n is None or drag_n is None:
            raise click.UsageError("the force form needs --front-n, --rear-n and --drag-n")
        f, r, d = front_n, rear_n, drag_n
        label = "ground" if z == 0 else f"restraint at {z:g} m"
    else:
        if restraint_height_m != 0.0:
            raise click.UsageError("coefficients and CFD moments are ground-referenced "
                                   "(SAE J1594); --restraint-height-m does not apply")
        label = "J1594, ground-referenced"
        if coeff:
            if cd is None or frontal_area_m2 is None or speed_kph is None:
                raise click.UsageError("coefficients need --cd, --frontal-area-m2 and "
                                       "--speed-kph")
            for name, v in (("--frontal-area-m2", frontal_area_m2), ("--speed-kph", speed_kph)):
                if not v > 0:
                    raise InputError(f"= {v:g} must be > 0", name)
            if frontal_area_m2 > 20.0:
                raise InputError(f"= {frontal_area_m2:g} m² is more than 20 m²; give the "
                                 "frontal area in m² (a car has about 1.5 to 3 m²)",
                                 "--frontal-area-m2")
            if speed_kph > 1000.0:
                raise InputError(f"= {speed_kph:g} km/h is above 1000 km/h; give the air "
                                 "speed in km/h", "--speed-kph")
            rho = air_density if air_density is not None else (
                car.air.density if car is not None else isa_density(0.0))
            if not 0.3 <= rho <= 1.6:
                raise InputError(f"= {rho:g} kg/m³ is not physical (0.3 to 1.6)",
                                 "--air-density")
            v_ms = speed_kph * KPH
            if cl is not None or cpm is not None:
                if cl is None or cpm is None or clf is not None or clr is not None:
                    raise click.UsageError("give --cl with --cpm, or --clf with --clr")
                f, r, d = tunnel.reading_from_coefficients(cl, cd, cpm, frontal_area_m2, rho,
                                                           v_ms)
            else:
                if clf is None or clr is None:
                    raise click.UsageError("give --clf with --clr")
                f, r, d = tunnel.reading_from_axle_coefficients(clf, clr, cd, frontal_area_m2,
                                                                rho, v_ms)
        else:
            if lift_n is None or pitch_moment_nm is None or drag_n is None:
                raise click.UsageError("the CFD form needs --lift-n, --drag-n and "
                                       "--pitch-moment-nm")
            if not (L > 0):
                raise InputError(f"= {L:g} must be > 0 m", "--wheelbase-m")
            f, r, d = tunnel.reading_from_force_and_moment(lift_n, drag_n, pitch_moment_nm,
                                                           moment_ref_x_m, moment_ref_z_m, L)
    res = tunnel.correct_reading(f, r, d, h, L, z, drag_height_m, source="tunnel")
    band = None
    if h_lo != h_hi:
        b = tunnel.balance_band(f, r, d, h_lo, h_hi, L, z, source="--cg-height-m")
        band = ((h_lo, h_hi), b)
    if as_json:
        from lapbalance import provenance

        out = res.as_dict()
        out["measured_label"] = label
        if band is not None:
            out["cg_height_min_m"], out["cg_height_max_m"] = h_lo, h_hi
            out["balance_front_at_cg_height_min"] = band[1][0]
            out["balance_front_at_cg_height_max"] = band[1][1]
            out["balance_front_min"] = min(band[1])
            out["balance_front_max"] = max(band[1])
        params = click.get_current_context().params
        out["provenance"] = provenance.build(
            [car] if car is not None else [],
            settings={k: v for k, v in params.items() if v is not None and k != "as_json"})
        echo_json(out)
        return
    _print_reading(res, label, band)


def _table_form(readings, car, restraint_height_m, drag_height_m, air_density, out_path,
                force, as_json):
    if car is None:
        raise click.UsageError("the table form needs --car CAR.toml (CG height, wheelbase)")
    from contextlib import ExitStack

    from lapbalance.outputs import output_file
    from lapbalance.provenance import sidecar_for

    with ExitStack() as outs:
        if out_path:  # the CSV and its provenance sidecar, taken before any work
            for p in (out_path, sidecar_for(out_path)):
                outs.enter_context(output_file(p, force, "--out", command="tunnel",
                                               inputs=[readings, car.source]))
        _table_run(readings, car, restraint_height_m, drag_height_m, air_density, out_path,
                   as_json)


def _table_run(readings, car, restraint_height_m, drag_height_m, air_density, out_path,
               as_json):
    tab = tunnel.read_readings(readings)
    dh = drag_height_m if drag_height_m is not None else car.aero.drag_height
    rho = air_density if air_density is not None else car.air.density
    if not 0.3 <= rho <= 1.6:
        raise InputError(f"= {rho:g} kg/m³ is not physical (0.3 to 1.6)", "--air-density")
    cols = tunnel.correct_table(tab, car.chassis.cg_height, car.chassis.wheelbase,
                                restraint_height_m, rho, dh,
                                expected_drag_area=car.aero.drag_area or None)
    from lapbalance import provenance

    record = provenance.build([car], files=[("tunnel-readings", readings)],
                              settings={"restraint_height_m": restraint_height_m,
                                        "drag_height_m": dh, "tunnel_air_density_kg_m3": rho})
    if out_path:
        import json

        write_text_atomic(out_path, columns_csv_text(cols, nan=""))
        side = provenance.sidecar_for(out_path)
        write_text_atomic(side, json.dumps(
            {**record, "outputs": [provenance.file_record(out_path, "output")]},
            indent=2, allow_nan=False) + "\n")
    if as_json:
        out = {k: [None if isinstance(v, float) and not math.isfinite(v) else
                   (float(v) if not isinstance(v, str) else v) for v in col]
               for k, col in cols.items()}
        out["provenance"] = record
        echo_json(out)
        return
    click.echo(f"{car.name}: CG height {car.chassis.cg_height:g} m, wheelbase "
               f"{car.chassis.wheelbase:g} m, restraint height {restraint_height_m:g} m, "
               f"tunnel air {rho:.4g} kg/m³ (for the areas)")
    show = [k for k in ("speed_kph", "front_n_measured", "rear_n_measured", "drag_n",
                        "front_n_cg", "rear_n_cg", "balance_front_measured",
                        "balance_front_cg", "centre_of_pressure_m") if k in cols]
    rows = []
    n = len(cols["front_n_cg"])
    for i in range(n):
        row = []
        for k in show:
            v = float(cols[k][i])
            row.append(_pct(v) if k.startswith("balance") else
                       (f"{v:.3f}" if k.endswith("_m") else f"{v:.1f}"))
        rows.append(row)
    click.echo(table(rows, show))
    click.echo("balance_front_measured: as read (restrained); balance_front_cg: corrected, "
               "CG convention")
    if out_path:
        click.echo(f"wrote {out_path} and {provenance.sidecar_for(out_path).name}")
