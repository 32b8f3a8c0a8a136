"""Car files: validation messages (issue 2 item 5), variants, ``--set`` overrides, air density.

Each validation error is checked twice: the library message (``InputError.one_line()``) and the
command line (``lapbalance car``: one line on stderr, exit status 2).
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InputError
from tests.reference_cases import CASES

ROOT = Path(__file__).resolve().parents[1]
GT = ROOT / "examples" / "gt_coupe.toml"
HIGH_WING = ROOT / "examples" / "gt_coupe_high_wing.toml"
GT_TEXT = GT.read_text(encoding="utf-8")


def _variant(tmp_path: Path, body: str, name: str = "car.toml") -> Path:
    """A variant of the GT coupe demo car with ``body`` overriding keys."""
    p = tmp_path / name
    p.write_text(f'base = "{GT.as_posix()}"\nname = "test variant"\n\n{body}', encoding="utf-8")
    return p


def _edited(tmp_path: Path, old: str, new: str, name: str = "car.toml") -> Path:
    """The GT coupe demo file with one line edited (for keys a variant cannot remove)."""
    assert old in GT_TEXT
    p = tmp_path / name
    p.write_text(GT_TEXT.replace(old, new, 1), encoding="utf-8")
    return p


def _cli_error(args) -> str:
    res = CliRunner().invoke(main, [str(a) for a in args])
    assert res.exit_code == 2, res.output
    assert "Traceback" not in res.output
    msg = res.stderr.strip()
    assert "\n" not in msg and msg.startswith("lapbalance: "), res.output
    return msg


def _both(path: Path, pattern: str, overrides=None) -> None:
    """The library error and the CLI line both match ``pattern`` and name the file."""
    with pytest.raises(InputError) as err:
        load_car(path, overrides)
    assert re.search(pattern, err.value.one_line()), err.value.one_line()
    args = ["car", path]
    for o in overrides or ():
        args += ["--set", o]
    msg = _cli_error(args)
    assert re.search(pattern, msg), msg
    assert path.name in msg or "--set" in msg


# ---------------------------------------------------------------------------------------------
# validation errors
# ---------------------------------------------------------------------------------------------


def test_unknown_key_suggests_the_closest_valid_key(tmp_path):
    p = _variant(tmp_path, "[chassis]\ncg_hieght_m = 0.45\n")
    _both(p, r'chassis\.cg_hieght_m: unknown key "chassis\.cg_hieght_m"; did you mean '
             r'"cg_height_m"\?')


def test_unknown_key_far_from_any_lists_the_valid_keys(tmp_path):
    p = _variant(tmp_path, "[brakes]\ncolour = 3\n")
    _both(p, r'brakes\.colour: unknown key .*; valid: bias_front$')


def test_unknown_section_suggests_the_closest_section(tmp_path):
    p = _variant(tmp_path, "[aerro]\ndrag_area_m2 = 0.8\n")
    _both(p, r'unknown section \[aerro\]; did you mean "aero"\?')


def test_missing_key_is_named(tmp_path):
    p = _edited(tmp_path, "cg_height_m = 0.42\n", "")
    _both(p, r'chassis\.cg_height_m: missing key "chassis\.cg_height_m" \(Height of the centre '
             r"of gravity above ground, m\)")


def test_missing_section_is_named(tmp_path):
    p = _edited(tmp_path, "[brakes]\nbias_front = 0.60\n", "")
    _both(p, r"brakes: missing section \[brakes\]")


def test_negative_mass(tmp_path):
    p = _variant(tmp_path, "[chassis]\nmass_kg = -5.0\n")
    _both(p, r"chassis\.mass_kg: = -5 kg is not physical; it must be >= 50 and <= 20000 kg")


def test_cg_height_above_two_metres_is_not_called_a_unit_slip(tmp_path):
    p = _variant(tmp_path, "[chassis]\ncg_height_m = 2.4\n")
    _both(p, r"chassis\.cg_height_m: = 2\.4 m is not physical; it must be > 0 and <= 2 m$")


@pytest.mark.parametrize("value, pattern", [
    (1.3, r"= 1\.3 is not physical; it must be > 0 and < 1$"),
    (0.0, r"= 0 is not physical; it must be > 0 and < 1$"),
    (-0.47, r"= -0\.47 is not physical; it must be > 0 and < 1$"),
    (47, r"= 47 looks like a percentage, but the key is a fraction; write 0\.47$"),
])
def test_weight_fraction_outside_zero_to_one(tmp_path, value, pattern):
    p = _variant(tmp_path, f"[chassis]\nfront_weight_fraction = {value}\n")
    _both(p, r"chassis\.front_weight_fraction: " + pattern)


def test_wheelbase_in_millimetres_under_a_metre_key(tmp_path):
    p = _variant(tmp_path, "[chassis]\nwheelbase_m = 2600\n")
    _both(p, r"chassis\.wheelbase_m: = 2600 looks like millimetres, but the key is in m; "
             r"write 2\.6 or use wheelbase_mm")


def test_cg_height_in_millimetres_under_a_metre_key(tmp_path):
    p = _variant(tmp_path, "[chassis]\ncg_height_m = 450\n")
    _both(p, r"chassis\.cg_height_m: = 450 looks like millimetres.*write 0\.45 or use "
             r"cg_height_mm")


def test_variant_whose_base_does_not_exist(tmp_path):
    p = tmp_path / "orphan.toml"
    p.write_text('base = "missing_base.toml"\nname = "orphan"\n', encoding="utf-8")
    _both(p, r'orphan\.toml: base: base car "missing_base\.toml" not found .*give a path '
             r"relative to this file")


def test_variant_chain_that_loops(tmp_path):
    a, b, c = (tmp_path / f"{n}.toml" for n in "abc")
    a.write_text('base = "b.toml"\nname = "a"\n', encoding="utf-8")
    b.write_text('base = "c.toml"\nname = "b"\n', encoding="utf-8")
    c.write_text('base = "a.toml"\nname = "c"\n', encoding="utf-8")
    _both(a, r"base: variant chain loops \(a\.toml -> b\.toml -> c\.toml -> a\.toml\); make "
             r"one file the plain base")


def test_variant_naming_itself_as_base(tmp_path):
    a = tmp_path / "self.toml"
    a.write_text('base = "self.toml"\nname = "self"\n', encoding="utf-8")
    _both(a, r"variant chain loops \(self\.toml -> self\.toml\)")


@pytest.mark.parametrize("override, pattern", [
    ("chassis.wheelbase=2.6", r'--set: chassis\.wheelbase: unknown key "chassis\.wheelbase"; '
                              r'did you mean "wheelbase_m"\?'),
    ("chasis.mass_kg=1200", r'--set: chasis\.mass_kg: unknown section "chasis"; did you mean '
                            r'"chassis"\?'),
    ("chassis.mass_kg=heavy", r"--set: chassis\.mass_kg: = 'heavy' is not a number; give a "
                              r"number"),
    ("chassis.mass_kg=-1", r"--set: chassis\.mass_kg: = -1 kg is not physical"),
    ("chassis.cg_height_m=420", r"--set: chassis\.cg_height_m: = 420 looks like millimetres"),
    ("mass_kg 1200", r'--set: "mass_kg 1200" is not section\.key=value'),
])
def test_set_override_with_bad_key_or_value(override, pattern):
    _both(GT, pattern, [override])


def test_lap_command_rejects_a_bad_set_before_running(tmp_path):
    msg = _cli_error(["lap", GT, ROOT / "tracks" / "veldmoor_ring.csv",
                      "--set", "brakes.bias_front=60"])
    assert re.search(r"--set: brakes\.bias_front: = 60 looks like a percentage.*write 0\.6",
                     msg), msg


# ---------------------------------------------------------------------------------------------
# good paths
# ---------------------------------------------------------------------------------------------


def test_variant_merges_its_keys_over_the_base():
    base, var = load_car(GT), load_car(HIGH_WING)
    raw = tomllib.loads(HIGH_WING.read_text(encoding="utf-8"))
    assert var.name == raw["name"] != base.name
    # untouched sections come from the base
    assert var.chassis == base.chassis
    assert var.tyres == base.tyres
    assert var.powertrain == base.powertrain
    assert var.air == base.air
    # overridden keys come from the variant, the convention is inherited from the base
    assert var.aero.drag_area == pytest.approx(raw["aero"]["drag_area_m2"], rel=1e-12)
    assert var.aero.downforce_area == pytest.approx(raw["aero"]["downforce_area_m2"], rel=1e-12)
    assert var.aero.input_convention == base.aero.input_convention == "ground"
    assert var.aero.input_balance_front == pytest.approx(raw["aero"]["balance_front"], rel=1e-12)
    # Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), ch. 1 (moments about the
    # rear contact patch) with SAE J1594 (2010) ground-referenced axle loads: drag reacted at
    # the ground instead of at CG height moves D h_cg / L to the front, F_Lf,cg = F_Lf,ground +
    # D h_cg / L (rear minus the same). Areas convert like forces since both scale with q.
    h, L = base.chassis.cg_height, base.chassis.wheelbase
    cda, cla, bal = (raw["aero"][k] for k in ("drag_area_m2", "downforce_area_m2",
                                              "balance_front"))
    assert var.aero.front_area_cg == pytest.approx(bal * cla + cda * h / L, rel=1e-12)
    assert var.aero.rear_area_cg == pytest.approx((1 - bal) * cla - cda * h / L, rel=1e-12)
    assert var.aero.balance_ground(h, L) == pytest.approx(bal, rel=1e-12)


def test_set_with_the_other_unit_spelling_replaces_the_file_key():
    car = load_car(GT, ["chassis.wheelbase_mm=2700"])
    assert car.chassis.wheelbase == pytest.approx(2.700, rel=1e-12)
    car = load_car(GT, ["chassis.cg_height_mm=395"])
    assert car.chassis.cg_height == pytest.approx(0.395, rel=1e-12)
    # and via the command line (no "gives the same quantity" clash with wheelbase_m)
    res = CliRunner().invoke(main, ["car", str(GT), "--set", "chassis.wheelbase_mm=2650",
                                    "--json"])
    assert res.exit_code == 0, res.output


def test_variant_with_the_other_unit_spelling_replaces_the_base_key(tmp_path):
    p = _variant(tmp_path, "[chassis]\nwheelbase_mm = 2710\n")
    assert load_car(p).chassis.wheelbase == pytest.approx(2.710, rel=1e-12)


def test_variant_in_another_folder_keeps_its_base_aero_map(tmp_path):
    mapped = ROOT / "examples" / "single_seater_mapped.toml"
    p = tmp_path / "elsewhere" / "heavier.toml"
    p.parent.mkdir()
    p.write_text(f'base = "{mapped.as_posix()}"\nname = "heavier"\n\n[chassis]\n'
                 "mass_kg = 660.0\n", encoding="utf-8")
    car, base = load_car(p), load_car(mapped)
    assert car.chassis.mass == 660.0
    assert car.aero.aero_map is not None
    assert Path(car.aero.aero_map.source).resolve() == \
        (ROOT / "examples" / "single_seater_aero_map.csv").resolve()
    assert car.aero.front_area_cg == pytest.approx(base.aero.front_area_cg, rel=1e-12)


def test_set_override_changes_only_its_key():
    base = load_car(GT)
    car = load_car(GT, ["aero.drag_area_m2=0.9", "brakes.bias_front=0.62"])
    assert car.aero.drag_area == pytest.approx(0.9, rel=1e-12)
    assert car.brakes.bias_front == pytest.approx(0.62, rel=1e-12)
    assert car.chassis == base.chassis and car.tyres == base.tyres
    assert base.with_overrides(["aero.drag_area_m2=0.9"]).aero == car.aero


def test_air_density_from_pressure_temperature_and_humidity(tmp_path):
    p = _edited(tmp_path, "temperature_c = 25.0\npressure_hpa = 1013.0\n"
                "relative_humidity_pct = 50.0\n",
                "temperature_c = 20.0\npressure_hpa = 1013.25\nrelative_humidity_pct = 50.0\n")
    # Source: CIPM-2007 moist-air equation, Picard, Davis, Gläser, Fujii, Metrologia 45 (2008)
    # 149-155, evaluated at 101325 Pa, 20 °C, 50 % RH: rho = 1.19931 kg/m³.
    case = CASES["car_air.conditions"]
    assert load_car(p).air.density == case.approx()
    assert case.value() == case.approx()


def test_air_density_from_altitude(tmp_path):
    p = _edited(tmp_path, "temperature_c = 25.0\npressure_hpa = 1013.0\n"
                "relative_humidity_pct = 50.0\n", "altitude_m = 1000.0\n")
    # Source: ISO 2533:1975 standard atmosphere at 1000 m: rho = 1.11164 kg/m³ (geopotential
    # altitude) or 1.11166 (geometric); the tolerance covers both.
    case = CASES["car_air.altitude"]
    assert load_car(p).air.density == case.approx()
    assert case.value() == case.approx()


def test_air_density_default_is_iso_sea_level(tmp_path):
    p = _edited(tmp_path, "temperature_c = 25.0\npressure_hpa = 1013.0\n"
                "relative_humidity_pct = 50.0\n", "")
    # Source: ISO 2533:1975 sea-level density 1.225 kg/m³.
    case = CASES["car_air.default"]
    assert load_car(p).air.density == case.approx()
    assert case.value() == case.approx()


def test_air_density_and_conditions_together_is_an_error(tmp_path):
    p = _edited(tmp_path, "temperature_c = 25.0\n", "temperature_c = 25.0\ndensity_kg_m3 = 1.2\n")
    _both(p, r"give either density_kg_m3 or the conditions")


def test_transient_section_keys_and_units():
    # Source: definition of the degree: 1 N/deg = 180/pi N/rad.
    from tests.helpers import make_car

    tr = {"yaw_inertia_kgm2": 1800.0, "cornering_stiffness_front_n_per_deg": 1400.0,
          "cornering_stiffness_rear_n_per_rad": 90000.0, "relaxation_length_m": 0.5,
          "steering_ratio": 15.0}
    car = make_car(transient=tr)
    assert car.transient.cornering_stiffness_front == pytest.approx(1400.0 * 57.29577951308232)
    assert car.transient.cornering_stiffness_load_exponent == 0.6
    with pytest.raises(InputError, match='unknown key "transient.yaw_inertia"'):
        make_car(transient={**tr, "yaw_inertia": 1.0})
    with pytest.raises(InputError,
                       match="transient.yaw_inertia_kgm2: = 0 kg·m² is not physical"):
        make_car(transient={**tr, "yaw_inertia_kgm2": 0.0})
    # a spreadsheet's N/deg value under the N/rad key
    with pytest.raises(InputError, match=r"= 1400 N/rad looks like N/deg.*"
                                         r"cornering_stiffness_rear_n_per_deg = 1400"):
        make_car(transient={**tr, "cornering_stiffness_rear_n_per_rad": 1400.0})
