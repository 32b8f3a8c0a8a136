"""Every file in the bad-input corpus (tests/data/bad) gets one clear line and exit status 2.

Each corpus file is paired with good other inputs (demo cars in ``examples/``, demo tracks in
``tracks/``) and run through every command that reads that kind of file. The answer must be
exactly one line on stderr starting with ``lapbalance: ``, name the bad file, match the
expected "what is wrong + how to fix it" pattern below, and show no traceback.

File kinds by name prefix: ``car_`` (TOML car file), ``track_`` (track CSV), ``aeromap_``
(aero-map CSV, read through a car file's ``aero.map_file``), ``tunnel_`` (tunnel readings
table), ``targets_`` (handling targets, ``lapbalance check``).
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]
BAD = ROOT / "tests" / "data" / "bad"
GOOD_CAR = ROOT / "examples" / "gt_coupe.toml"
GOOD_VARIANT = ROOT / "examples" / "gt_coupe_high_wing.toml"
MAPPED_CAR = ROOT / "examples" / "single_seater_mapped.toml"
GOOD_TRACK = ROOT / "tracks" / "veldmoor_ring.csv"
GOOD_READINGS = ROOT / "examples" / "gt_coupe_tunnel_sweep.csv"
GOOD_TARGETS = """\
[[target]]
name = "aero balance window"
quantity = "aero_balance_front"
condition = { range = [0.30, 0.60] }
"""

LINE = r"line \d+: "

#: corpus file -> regex the one-line message must match (field/row, what is wrong, the fix).
EXPECT: dict[str, str] = {
    # car files ------------------------------------------------------------------------------
    "car_empty.toml": r"is empty; a car file needs .*sections",
    "car_binary.toml": r"is a binary file, not a TOML car file",
    "car_not_utf8.toml": r"is not UTF-8 text; save the car file as UTF-8",
    "car_half_edited_syntax_error.toml": r"is not valid TOML \(.*line 3\d.*\); check quotes",
    "car_unknown_key.toml": r"chassis\.paint_colour: unknown key .*; valid: .*mass_kg",
    "car_misspelt_key.toml": r'chassis\.wheelbse_m: unknown key .*did you mean "wheelbase_m"',
    "car_unknown_section.toml": r'brake: unknown section \[brake\]; did you mean "brakes"',
    "car_missing_section.toml": r"brakes: missing section \[brakes\]",
    "car_missing_key.toml": r'chassis\.mass_kg: missing key "chassis\.mass_kg" \(.*kg\)',
    "car_negative_mass.toml": r"chassis\.mass_kg: = -1300 kg is not physical; it must be >= 50",
    "car_mass_in_tonnes.toml": r"chassis\.mass_kg: = 1\.3 looks like tonnes.*write 1300",
    "car_wheelbase_in_mm.toml":
        r"chassis\.wheelbase_m: = 2650 looks like millimetres.*write 2\.65 or use wheelbase_mm",
    "car_cg_height_in_mm.toml":
        r"chassis\.cg_height_m: = 420 looks like millimetres.*write 0\.42",
    "car_cg_height_above_2m.toml":
        r"chassis\.cg_height_m: = 2\.5 m is not physical; it must be > 0 and <= 2 m",
    "car_weight_fraction_percent.toml":
        r"chassis\.front_weight_fraction: = 47 looks like a percentage.*write 0\.47",
    "car_weight_fraction_above_one.toml":
        r"chassis\.front_weight_fraction: = 1\.2 is not physical; it must be > 0 and < 1",
    "car_weight_fraction_negative.toml":
        r"chassis\.front_weight_fraction: = -0\.3 is not physical; it must be > 0 and < 1",
    "car_zero_wheel_radius.toml":
        r"powertrain\.wheel_radius_m: = 0 m is not physical; it must be >= 0\.1",
    "car_negative_drag_area.toml": r"aero\.drag_area_m2: = -0\.8 m² is not physical; .*>= 0",
    "car_gear_ratios_not_descending.toml":
        r"powertrain\.gear_ratios: ratios must fall from first gear to top gear",
    "car_torque_curve_length_mismatch.toml":
        r"powertrain\.torque_curve_nm: torque_curve_rpm has 8 values but torque_curve_nm "
        r"has 7; give one torque per rpm",
    "car_text_in_number.toml": r"chassis\.mass_kg: = '1300 kg' is not a number; give a number",
    "car_nan_value.toml": r"aero\.drag_area_m2: = nan is not a finite number; give a plain",
    "car_inf_value.toml":
        r"tyres\.front\.peak_friction: = inf is not a finite number; give a plain",
    "car_bias_front_percent.toml": r"brakes\.bias_front: = 60 looks like a percentage.*0\.6",
    "car_pressure_in_pascals.toml": r"air\.pressure_hpa: = 101300 looks like pascals.*1013",
    "car_ride_height_in_metres.toml":
        r"suspension\.static_ride_height_front_mm: = 0\.06 looks like metres.*write 60",
    "car_both_wheelbase_spellings.toml":
        r'chassis\.wheelbase_mm: gives the same quantity as "wheelbase_m"; keep one',
    "car_drive_unknown_choice.toml":
        r'powertrain\.drive: = "rwd" is not one of rear, front, all',
    "car_gear_ratios_text.toml":
        r"powertrain\.gear_ratios: must be a non-empty list of numbers, e\.g\.",
    "car_missing_convention.toml":
        r'aero\.balance_convention: missing key .*"cg", "ground" .* or "restraint"',
    "car_rev_limit_below_shift.toml":
        r"powertrain\.rev_limit_rpm: rev_limit_rpm 6500 is below shift_rpm 7200; the limiter",
    "car_section_is_value.toml": r'powertrain\.brakes: unknown key "powertrain\.brakes"',
    "car_variant_base_missing.toml":
        r'base: base car "no_such_base_car\.toml" not found .*give a path relative',
    "car_variant_loop_a.toml":
        r"base: variant chain loops \(car_variant_loop_a\.toml -> car_variant_loop_b\.toml -> "
        r"car_variant_loop_a\.toml\); make one file the plain base",
    "car_variant_loop_b.toml":
        r"base: variant chain loops \(car_variant_loop_b\.toml -> car_variant_loop_a\.toml -> "
        r"car_variant_loop_b\.toml\); make one file the plain base",
    "car_variant_bad_override.toml":
        r"car_variant_bad_override\.toml: chassis\.cg_height_m: = -0\.4 m is not physical",
    "car_torque_curve_rad_per_s.toml":
        r"powertrain\.torque_curve_rpm: ends at 785\.4, far below rev_limit_rpm 7500: the "
        r"speeds look like rad/s .*multiply them by 9\.5493 to give rpm",
    "car_torque_curve_rev_per_s.toml":
        r"powertrain\.torque_curve_rpm: .*the speeds look like rev/s .*multiply them by 60",
    "car_torque_curve_ends_far_below_limit.toml":
        r"powertrain\.torque_curve_rpm: ends at 1750 rpm, far below rev_limit_rpm 7500; give "
        r"the torque up to the rev limit",
    "car_deep_nesting.toml": r"nests lists or tables too deeply; a car file needs plain",
    "car_huge_integer.toml": r"holds a number too long to read",
    "car_350kB_string_value.toml":
        r"chassis\.mass_kg: = '1300 kg .*….* \(352002 characters\) is not a number",
    "car_windows_1252.toml": r"is not UTF-8 text; save the car file as UTF-8",
    "car_utf16_without_bom.toml":
        r"is UTF-16 text without a byte-order mark; save the car file as UTF-8",
    "car_mass_as_list.toml": r"chassis\.mass_kg: = \[1300\.0\] is not a number",
    "car_mass_as_boolean.toml": r"chassis\.mass_kg: = True is not a number",
    "car_duplicate_key.toml": r"is not valid TOML \(Cannot overwrite a value .*line 8",
    "car_aero_map_missing.toml":
        r'aero\.map_file: aero map "no_such_aero_map\.csv" not found .*give a path relative '
        r"to the car file",
    # track files ----------------------------------------------------------------------------
    "track_empty.csv": r"the file is empty; give a header row",
    "track_binary.csv": r"binary file, not CSV text; export the track as CSV",
    "track_not_utf8.csv": r"not UTF-8 text; export the track as CSV \(UTF-8\)",
    "track_semicolon_delimiter.csv": LINE + r"the header uses semicolons .*; use commas",
    "track_tab_delimiter.csv": LINE + r"the header uses tabs .*; use commas",
    "track_missing_header.csv": LINE + r"the first row is numbers, not a header; add a header",
    "track_unknown_columns.csv":
        LINE + r"header needs columns x_m,y_m or lat_deg,lon_deg \(unknown: east, north\)",
    "track_header_only.csv": r"the header has no rows of points below it; add one row",
    "track_text_in_numeric_column.csv":
        r"line 20: column x_m = \"12\.5 m\" is not a number; write a plain number",
    "track_nan_value.csv": r"line 26: column x_m = nan is not a finite number; give a value",
    "track_inf_value.csv": r"line 33: column y_m = inf is not a finite number; give a value",
    "track_ragged_row.csv": r"line 43: 3 values but the header has 2 columns; give one value",
    "track_two_points.csv": r"only 2 distinct point\(s\); give at least 10 distinct points",
    "track_duplicate_points.csv": r"only 3 distinct point\(s\); give at least 10 distinct",
    "track_zigzag.csv": r"step sideways by about .* m .*: the trace zig-zags; give the points "
                        r"in driving order",
    "track_doubles_back.csv":
        r"radius .* m at \d+ m along the track .*zig-zags or crosses itself; check the points",
    "track_1km_jump.csv": r"line 44: jump of 1000 m from the previous point .*fill the gap",
    "track_bank_in_radians.csv": r"bank_deg: .*looks like radians; multiply by 57\.2958",
    "track_bank_beyond_60deg.csv": r"line 15: bank_deg = 75 is beyond ±60 deg; give the bank",
    "track_elevation_in_mm.csv":
        LINE + r"z_m changes by .*grade .* above 35 %.*check the elevation unit \(metres\)",
    "track_lat_lon_swapped.csv":
        LINE + r"lat_deg = -120 is outside -90\.\.90; check the column order",
    "track_closed_with_gap.csv":
        r"closed track but its ends are 500 m apart; mark it open \(# closed: false / --open\)",
    "track_bad_closed_flag.csv": r'# closed: "maybe" is not true or false; write true or false',
    "track_sectors_not_rising.csv": r"sectors_m: sector starts .* must increase",
    "track_negative_width.csv": r"line 12: width_m = -12 must be > 0",
    "track_duplicate_column.csv": LINE + r"a column name appears twice in the header; keep one",
    "track_350kB_line.csv": r"line 25: 2 values but the header has 4 columns",
    "track_quoted_text_cell.csv":
        r'line 35: column x_m = "12\.5 m" is not a number; write a plain number',
    "track_blank_cell.csv": r'line 13: column x_m = "" is not a number',
    "track_single_column.csv": LINE + r"header needs columns x_m,y_m or lat_deg,lon_deg",
    "track_windows_1252.csv": r"not UTF-8 text; export the track as CSV \(UTF-8\)",
    "track_utf16_without_bom.csv":
        r"UTF-16 text without a byte-order mark; export the track as CSV \(UTF-8\)",
    # aero maps ------------------------------------------------------------------------------
    "aeromap_ragged_grid.csv":
        r"grid: grid is not complete: 41 of 7 x 6 = 42 nodes given; missing front 10 mm with "
        r"rear 40 mm",
    "aeromap_duplicate_node.csv":
        LINE + r"duplicate node \(front 8 mm, rear 60 mm\), first given on line \d+; keep one",
    "aeromap_missing_column.csv": LINE + r'missing column "drag_area_m2"; the header needs',
    "aeromap_no_convention.csv":
        r'convention: missing "# convention: cg\|ground\|restraint" line before the header',
    "aeromap_misspelt_metadata.csv":
        LINE + r'unknown metadata "# conventon:"; did you mean "convention"',
    "aeromap_ride_heights_in_metres.csv":
        r"ride_height_front_mm: .*look like metres, but the column is in mm; multiply by 1000",
    "aeromap_single_rear_ride_height.csv":
        r"ride_height_rear_mm: .*has 1 distinct value\(s\); the map needs at least 2 per axis",
    "aeromap_text_cell.csv":
        LINE + r'front_downforce_area_m2 = "n/a" is not a number; give a number',
    "aeromap_negative_drag.csv": LINE + r"drag_area_m2 = -1\.\d+ is negative; drag area is >= 0",
    "aeromap_binary.csv": r"is a binary file, not an aero map CSV",
    "aeromap_not_utf8.csv": r"is not UTF-8 text; save the aero map as UTF-8 CSV",
    "aeromap_quoted_text_cell.csv":
        r'line 9: front_downforce_area_m2 = "about 1" is not a number; give a number',
    # tunnel readings ------------------------------------------------------------------------
    "tunnel_missing_column.csv":
        LINE + r'missing column "drag_n"; the header needs front_n, rear_n, drag_n',
    "tunnel_misspelt_column.csv": LINE + r'unknown column "frnt_n"; did you mean "front_n"',
    "tunnel_negative_drag.csv":
        LINE + r"drag_n = -\d+\.?\d* is negative; drag is positive rearward",
    "tunnel_negative_speed.csv": LINE + r"speed_kph = -100 is negative; .*speed >= 0",
    "tunnel_decimal_comma.csv":
        r"line 4: has 8 values but the header has 7 columns; write decimals with a point",
    "tunnel_semicolon_delimiter.csv":
        LINE + r"the header is separated by semicolons; save the file with commas",
    "tunnel_empty.csv": r"has no header line; give columns front_n, rear_n, drag_n",
    "tunnel_binary.csv": r"cannot be read as UTF-8 CSV text",
    "tunnel_speeds_in_mps.csv":
        r"speed_kph: the speeds look like m/s, not km/h: read as km/h they give a drag area of "
        r"10\.4 m² \(the car's is 0\.8 m²\), as m/s 0\.80\d m²; multiply the speeds by 3\.6",
    "tunnel_every_reading_zero.csv":
        r"every reading is zero \(front_n, rear_n and drag_n\); give the readings with the "
        r"wind on",
    "tunnel_text_in_number.csv": LINE + r'rear_n = "450 N" is not a number',
    "tunnel_nan_value.csv": LINE + r"drag_n = nan is not a finite number",
    "tunnel_duplicate_column.csv": LINE + r'column "front_n" appears twice; keep one',
    "tunnel_short_row.csv": LINE + r"has 5 values but the header has 7 columns; fill in",
    "tunnel_header_only.csv": r"has a header but no readings",
    "tunnel_not_utf8.csv": r"cannot be read as UTF-8 CSV text",
    # targets --------------------------------------------------------------------------------
    "targets_unknown_quantity.toml":
        r'target\[1\]\.quantity: unknown quantity "aero_balanse_front"; did you mean '
        r'"aero_balance_front"',
    "targets_unknown_condition.toml":
        r'target\[1\]\.condition: unknown condition "maximum"; did you mean "max"',
    "targets_syntax_error.toml": r"not valid TOML \(.*line 3",
    "targets_empty.toml": r"target: no targets; add at least one \[\[target\]\] table",
    "targets_range_as_percent.toml":
        r"target\[1\]\.condition\.range: = \[38, 48\] looks like a percentage, but "
        r"aero_balance_front is a fraction \(0 to 1\); write \[0\.38, 0\.48\]",
    "targets_max_usage_as_percent.toml":
        r"target\[1\]\.condition\.max: = 95 looks like a percentage, but usage_rear_at_min is "
        r"a fraction \(0 to 1\); write 0\.95",
    "targets_min_balance_as_percent.toml":
        r"target\[1\]\.condition\.min: = 40 looks like a percentage.*write 0\.4",
    "targets_binary.toml": r"is a binary file, not a targets TOML file",
    "targets_not_utf8.toml": r"is not UTF-8 text; save the targets file as UTF-8",
    "targets_deep_nesting.toml": r"lists nested too deeply or a number too long",
}

# log_*.csv (logged laps) are checked by tests/test_correlate_bad.py
CORPUS = sorted(p.name for p in BAD.iterdir() if p.is_file() and not p.name.startswith("log_"))

#: Longest message line a bad input may give (long values are cut) [characters].
MAX_MESSAGE = 520


def _has(command: str) -> bool:
    return command in main.commands


def _targets_ok() -> bool:
    return _has("check") and importlib.util.find_spec("lapbalance.targets") is not None


def _runs(name: str, tmp: Path) -> list[tuple[str, list[str]]]:
    """(label, argv) for every registered command that reads this kind of file."""
    bad = str(BAD / name)
    car, track = str(GOOD_CAR), str(GOOD_TRACK)
    targets = tmp / "targets.toml"
    targets.write_text(GOOD_TARGETS, encoding="utf-8")
    kind = name.split("_", 1)[0]
    runs: list[tuple[str, list[str]]] = []
    if kind == "aeromap":
        # read through a variant of the mapped demo car that points at the bad map
        variant = tmp / "mapped_variant.toml"
        variant.write_text(f'base = "{MAPPED_CAR.as_posix()}"\nname = "bad map variant"\n\n'
                           f'[aero]\nmap_file = "{(BAD / name).as_posix()}"\n',
                           encoding="utf-8")
        kind, bad = "car", str(variant)
    if kind == "car":
        runs += [("car", ["car", bad]), ("lap", ["lap", bad, track]),
                 ("tunnel", ["tunnel", str(GOOD_READINGS), "--car", bad])]
        if _targets_ok():
            runs.append(("check", ["check", bad, track, str(targets)]))
        if _has("report"):
            runs.append(("report", ["report", bad, track, "--out", str(tmp / "r.html")]))
            runs.append(("report-variant", ["report", car, track, "--variant", bad,
                                            "--out", str(tmp / "r.html")]))
        if _has("compare"):
            runs.append(("compare-base", ["compare", bad, car, "--track", track]))
            runs.append(("compare-variant", ["compare", car, bad, "--track", track]))
        if _has("sweep"):
            runs.append(("sweep", ["sweep", bad, track, "--vary",
                                   "aero.drag_area_m2=0.8:0.9:2"]))
    elif kind == "track":
        runs += [("track", ["track", bad]), ("lap", ["lap", car, bad])]
        if _targets_ok():
            runs.append(("check", ["check", car, bad, str(targets)]))
        if _has("report"):
            runs.append(("report", ["report", car, bad, "--out", str(tmp / "r.html")]))
        if _has("compare"):
            runs.append(("compare", ["compare", car, str(GOOD_VARIANT), "--track", bad]))
        if _has("sweep"):
            runs.append(("sweep", ["sweep", car, bad, "--vary", "aero.drag_area_m2=0.8:0.9:2"]))
    elif kind == "tunnel":
        runs.append(("tunnel", ["tunnel", bad, "--car", car]))
        runs.append(("tunnel-out", ["tunnel", bad, "--car", car, "--out",
                                    str(tmp / "corrected.csv")]))
    elif kind == "targets":
        if _targets_ok():
            runs.append(("check", ["check", car, track, bad]))
    return runs


def test_corpus_is_large_and_every_file_has_an_expectation():
    assert len(CORPUS) >= 110
    assert len(CORPUS) + len(TRICKY_CORPUS) >= 130
    assert set(CORPUS) == set(EXPECT), (set(CORPUS) ^ set(EXPECT))
    kinds = {n.split("_", 1)[0] for n in CORPUS}
    assert kinds == {"car", "track", "aeromap", "tunnel", "targets"}


@pytest.mark.parametrize("name", CORPUS)
def test_bad_file_gives_one_clear_line(name, tmp_path):
    if name.startswith("targets_"):
        pytest.importorskip("lapbalance.targets")
    runs = _runs(name, tmp_path)
    if not runs:
        pytest.skip("no registered command reads this kind of file yet")
    runner = CliRunner()
    pattern = re.compile(EXPECT[name])
    for label, argv in runs:
        res = runner.invoke(main, argv)
        where = f"{label}: {' '.join(argv)}\n{res.output}"
        assert res.exit_code == 2, where
        assert "Traceback" not in res.output, where
        msg = res.stderr.strip()
        assert "\n" not in msg, where
        assert msg.startswith("lapbalance: "), where
        assert res.output.strip() == msg, where  # nothing else printed
        assert name in msg, where
        assert pattern.search(msg), f"{where}\nexpected /{EXPECT[name]}/"
        assert len(msg) <= MAX_MESSAGE, f"{where}\n{len(msg)} characters"
        # nothing was written for a failed run
        assert not (tmp_path / "corrected.csv").exists()
        assert not (tmp_path / "r.html").exists()


@pytest.mark.parametrize("name", [n for n in CORPUS if n.startswith(("car_", "track_"))])
def test_library_loaders_raise_input_error_naming_the_file(name):
    path = BAD / name
    loader = load_car if name.startswith("car_") else load_track
    with pytest.raises(InputError) as err:
        loader(path)
    assert err.value.source is not None
    assert name in err.value.one_line()
    assert re.search(EXPECT[name], err.value.one_line())


def test_folder_given_as_car_file_is_a_usage_error():
    res = CliRunner().invoke(main, ["car", str(ROOT / "examples")])
    assert res.exit_code == 2
    assert "Traceback" not in res.output
    assert "is a directory" in res.output


@pytest.mark.parametrize("argv, pattern", [
    (["lap", str(GOOD_CAR), "tracks/skarhelm_climb.csv", "--start-speed-kph", "-5"],
     r"start_speed_kph: = -5 km/h must be a finite speed >= 0"),
    (["lap", str(GOOD_CAR), "tracks/skarhelm_climb.csv", "--start-speed-kph", "nan"],
     r"start_speed_kph: = nan km/h must be a finite speed >= 0"),
    (["lap", str(GOOD_CAR), str(GOOD_TRACK), "--step-m", "nan"],
     r"--step-m: = nan must be between 0 and 50 m"),
    (["track", str(GOOD_TRACK), "--step-m", "1e9"],
     r"--step-m: = 1e\+09 must be between 0 and 50 m"),
    (["lap", str(GOOD_CAR), str(GOOD_TRACK), "--step-m", "1e-6"],
     r"--step-m: = 1e-06 must be between 0 and 50 m, at least 0\.1 m \(at 1e-06 m a 5 km lap "
     r"has 5e\+09 points, about .* GB of channels"),
    (["lap", str(GOOD_CAR), "tracks/skarhelm_climb.csv", "--start-speed-kph", "900"],
     r"--start-speed-kph: = 900 km/h is above the top speed of .* \(\d+ km/h at the rev "
     r"limit in top gear\); the lap would silently start at \d+ km/h"),
    (["sweep", str(GOOD_CAR), str(GOOD_TRACK), "--vary", "aero.drag_area_m2=0.8:0.9:10000000"],
     r'--vary: aero\.drag_area_m2: n = 10000000 in "0\.8:0\.9:10000000" is more than 100000 '
     r"values \(each is a whole lap\)"),
    (["sweep", str(GOOD_CAR), str(GOOD_TRACK), "--vary", "aero.drag_area_m2=0.8:0.9",
      "--lhs", "1000000000"], r"--lhs: = 1000000000 must be between 1 and 100000 \(each point"),
    (["sweep", str(GOOD_CAR), str(GOOD_TRACK), "--vary", "aero.drag_area_m2=0.8:0.9",
      "--lhs", "4", "--seed", "-3"], r"--seed: = -3 must be between 0 and 4294967295"),
    (["sweep", str(GOOD_CAR), str(GOOD_TRACK), "--vary", "aero.drag_area_m2=0.8",
      "--workers", "5000"], r"--workers: = 5000 must be between 1 and \d+ \(each worker is a "
                             r"process"),
    (["tunnel", "--front-n", "300", "--rear-n", "400", "--drag-n", "350", "--cg-height-m",
      "420", "--wheelbase-m", "2.65"],
     r"--cg-height-m: = 420 looks like millimetres, but the option is in metres; write 0\.42"),
    (["tunnel", "--front-n", "nan", "--rear-n", "400", "--drag-n", "350", "--cg-height-m",
      "0.42", "--wheelbase-m", "2.65"], r"--front-n: = nan is not a finite number"),
    (["tunnel", "--cl", "-3", "--cd", "0.4", "--cpm", "0.1", "--frontal-area-m2", "2000",
      "--speed-kph", "200", "--cg-height-m", "0.42", "--wheelbase-m", "2.65"],
     r"--frontal-area-m2: = 2000 m² is more than 20 m²"),
    (["tunnel", "--cl", "-300", "--cd", "40", "--cpm", "10", "--frontal-area-m2", "2",
      "--speed-kph", "200", "--cg-height-m", "0.42", "--wheelbase-m", "2.65"],
     r"--cl: = -300 is beyond ±20; give the coefficient itself"),
    (["tunnel", "--front-n", "3e9", "--rear-n", "400", "--drag-n", "350", "--cg-height-m",
      "0.42", "--wheelbase-m", "2.65"], r"--front-n: = 3e\+09 N is beyond ±1e6 N"),
    (["car", str(GOOD_CAR), "--set", "chassis.mass_kg=" + "9" * 5000],
     r"--set: chassis\.mass_kg: = inf is not a finite number"),
    (["car", str(GOOD_CAR), "--set", "x" * 300000 + "=1"],
     r"--set: \.x+…x+ \(300001 characters\): unknown key"),
    (["lap", str(GOOD_CAR), str(GOOD_TRACK), "--set", "chassis.mass=1000"],
     r'--set: chassis\.mass: unknown key "chassis\.mass"; did you mean "mass_kg"'),
    (["lap", str(GOOD_CAR), str(GOOD_TRACK), "--set", "nonsense"],
     r'--set: "nonsense" is not section\.key=value'),
    (["lap", str(GOOD_CAR), str(GOOD_TRACK), "--set",
      "powertrain.torque_curve_nm=[0, 0, 0, 0, 0, 0, 0, 0]"],
     r"powertrain\.torque_curve_nm: the engine gives no drive force .*give the engine's"),
    (["car", "no_such_car.toml"], r"no_such_car\.toml: file not found; check the path"),
    (["track", "no_such_track.csv"], r"no_such_track\.csv: file not found; check the path"),
])
def test_bad_options_give_one_clear_line(argv, pattern, monkeypatch):
    monkeypatch.chdir(ROOT)
    res = CliRunner().invoke(main, argv)
    assert res.exit_code == 2, res.output
    msg = res.stderr.strip()
    assert "\n" not in msg and msg.startswith("lapbalance: "), res.output
    assert re.search(pattern, msg), msg
    assert len(msg) <= MAX_MESSAGE, msg


# ---------------------------------------------------------------------------------------------
# tricky inputs that must be accepted (tests/data/tricky): spreadsheet and editor habits
# ---------------------------------------------------------------------------------------------

TRICKY = ROOT / "tests" / "data" / "tricky"
TRICKY_CORPUS = sorted(p.name for p in TRICKY.iterdir() if p.is_file())
PLAIN = {"car": GOOD_CAR, "targets": ROOT / "examples" / "targets_pass.toml",
         "track": ROOT / "tracks" / "oranby_bowl.csv", "tunnel": GOOD_READINGS,
         "aeromap": ROOT / "examples" / "single_seater_aero_map.csv"}

#: tricky file -> regex of the one warning it must give (files not listed give none).
TRICKY_WARNS: dict[str, str] = {
    "car_torque_curve_short.toml":
        r"powertrain\.torque_curve_rpm: the curve ends at 6000 rpm, below rev_limit_rpm 7500; "
        r"the torque is held at 570 N·m up to the limit: extend the curve",
    "car_shift_below_best_torque.toml":
        r"powertrain\.shift_rpm: = 4200 rpm is below 5000 rpm, where the engine gives its best "
        r"torque \(force\)",
    "tunnel_tare_row.csv":
        r"line \d+: front_n, rear_n and drag_n are all zero \(a tare or wind-off row\?\); the "
        r"row is left out",
    "tunnel_wind_off_row.csv":
        r"line \d+: speed_kph = 0 with loads on the balance \(a wind-off or tare row\?\); its "
        r"areas are left empty",
}
#: tricky files read on purpose differently from their plain twin (a row or the engine).
TRICKY_DIFFERENT = {"car_torque_curve_short.toml", "car_shift_below_best_torque.toml",
                    "tunnel_wind_off_row.csv"}


def _load(kind: str, path: Path, tmp: Path):
    from lapbalance import tunnel
    from lapbalance.targets import load_targets

    if kind == "car":
        c = load_car(path)
        return (c.chassis, c.aero, c.tyres, c.brakes, c.suspension, c.air)
    if kind == "targets":
        return [(t.name, t.quantity, t.condition, t.scope, t.aggregate)
                for t in load_targets(path)]
    if kind == "track":
        t = load_track(path, step_m=4.0)
        return (t.name, t.closed, round(t.length_m, 9), t.x_m.tolist(), t.y_m.tolist(),
                t.bank_rad.tolist())
    if kind == "tunnel":
        tab = tunnel.read_readings(path)
        return ({k: v.tolist() for k, v in tab.columns.items()}, tab.extra)
    variant = tmp / f"variant_{path.stem}.toml"  # aero map: read through a car file
    variant.write_text(f'base = "{MAPPED_CAR.as_posix()}"\n\n[aero]\nmap_file = '
                       f'"{path.as_posix()}"\n', encoding="utf-8")
    m = load_car(variant).aero.aero_map
    return (m.rh_front_m.tolist(), m.rh_rear_m.tolist(), m.front_area_cg.tolist(),
            m.rear_area_cg.tolist(), m.drag_area.tolist())


def test_tricky_corpus_covers_every_reader():
    assert {n.split("_", 1)[0] for n in TRICKY_CORPUS} == set(PLAIN)
    assert set(TRICKY_WARNS) <= set(TRICKY_CORPUS)


@pytest.mark.parametrize("name", TRICKY_CORPUS)
def test_tricky_file_reads_like_the_plain_one(name, tmp_path):
    import warnings

    kind = name.split("_", 1)[0]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = _load(kind, TRICKY / name, tmp_path)
    texts = [str(w.message) for w in caught]
    if name in TRICKY_WARNS:
        assert len(texts) == 1 and re.search(TRICKY_WARNS[name], texts[0]), texts
        assert name in texts[0]
    else:
        assert texts == []
    if name in TRICKY_DIFFERENT:
        return  # a different engine or an extra row on purpose
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert got == _load(kind, PLAIN[kind], tmp_path)


@pytest.mark.parametrize("name", [n for n in TRICKY_CORPUS
                                  if n.startswith(("car_", "tunnel_", "targets_"))])
def test_tricky_file_is_accepted_by_the_commands(name, tmp_path):
    path = str(TRICKY / name)
    if name.startswith("car_"):
        argv = ["car", path]
    elif name.startswith("tunnel_"):
        argv = ["tunnel", path, "--car", str(GOOD_CAR), "--out", str(tmp_path / "c.csv")]
    else:
        argv = ["check", str(GOOD_CAR), str(GOOD_TRACK), path, "--step-m", "4"]
    res = CliRunner().invoke(main, argv)
    assert res.exit_code in ((0, 1) if argv[0] == "check" else (0,)), res.output
    assert "Traceback" not in res.output
    warns = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(warns) == (1 if name in TRICKY_WARNS else 0), res.stderr
    if name.startswith("tunnel_"):
        text = (tmp_path / "c.csv").read_text(encoding="utf-8")
        assert "nan" not in text.lower()  # no literal nan cell (a tare row is left out)
        rows = 6 if name == "tunnel_wind_off_row.csv" else 5  # the five readings (+ wind off)
        assert text.count("\n") == 1 + rows
