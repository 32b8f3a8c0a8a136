"""Lift-off runs in time at a lap's corners: lap corner table, compare, report.

These tests check the wiring and the consistency of the corner runs with the single-track
procedure itself; the model's physics is checked against closed forms in test_transient.py.
"""

import json
import math
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance import transient
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]
TRUCK = str(ROOT / "examples" / "offroad_truck.toml")
GT = str(ROOT / "examples" / "gt_coupe.toml")
RING = str(ROOT / "tracks" / "veldmoor_ring.csv")


@pytest.fixture(scope="module")
def truck_lap():
    return simulate_lap(load_car(TRUCK), load_track(RING, step_m=4.0))


def test_runs_cover_the_flagged_corners_tightest_first(truck_lap):
    runs = transient.lap_corner_runs(truck_lap)
    flagged = [c["id"] for c in truck_lap.corners
               if c.get("liftoff_verdict") in ("lift-critical", "lift-marginal")]
    assert flagged and sorted(r["corner"] for r in runs) == sorted(flagged)
    margins = [r["liftoff_margin"] for r in runs]
    assert margins == sorted(margins)
    for r in runs:
        assert r["status"] == "ok"
        assert 0.0 < r["spin_onset_fraction"] <= 1.0
        # the run starts at the lap's apex speed, or at the model's own limit below it
        v_lap = r["speed_kph"] / 3.6
        v_run = math.sqrt(r["ay0_mps2"] * r["radius_m"])
        assert v_run <= v_lap + 1e-9
        assert r["at_limit"] == (v_run < v_lap - 1e-6)


def test_spin_onset_is_the_first_spinning_run_of_the_stepping(truck_lap):
    car = truck_lap.car
    r = transient.lap_corner_runs(truck_lap)[0]
    onset = transient.spin_onset(car, r["radius_m"])
    assert onset["spin_onset_ay_mps2"] == r["spin_onset_ay_mps2"]
    levels = transient.sweep_levels(onset["ay_limit_mps2"])
    k = levels.index(onset["spin_onset_ay_mps2"])
    assert k == 0 or levels[k] - levels[k - 1] <= 0.5 + 1e-12  # ISO 9816 stepping
    if k > 0:  # the step below does not spin
        below = transient.corner_runs(car, [(r["radius_m"], math.sqrt(levels[k - 1]
                                                                      * r["radius_m"]))])[0]
        assert below["spin"] is False


def test_a_lap_with_no_flagged_corner_runs_its_tightest():
    res = simulate_lap(load_car(GT), load_track(RING, step_m=4.0))
    runs = transient.lap_corner_runs(res)
    tightest = min((c for c in res.corners if c.get("liftoff_margin") is not None),
                   key=lambda c: (c["liftoff_margin"], c["liftoff_rear_reserve"]))
    assert [r["corner"] for r in runs] == [tightest["id"]]


def test_a_car_without_transient_data_gets_no_runs(truck_lap):
    from dataclasses import replace

    bare = replace(truck_lap, car=replace(truck_lap.car, transient=None))
    assert transient.lap_corner_runs(bare) == []


def test_compare_runs_every_car_at_the_base_corners(truck_lap):
    same = transient.compare_corner_runs([truck_lap, truck_lap], ["a", "b"])
    assert same and all(r["cars"]["a"] == r["cars"]["b"] for r in same)
    own = transient.lap_corner_runs(truck_lap)
    assert [r["corner"] for r in same] == [r["corner"] for r in own]
    assert same[0]["cars"]["a"]["spin_onset_fraction"] == own[0]["spin_onset_fraction"]


def test_lap_cli_shows_the_runs_and_can_skip_them():
    runner = CliRunner()
    r = runner.invoke(main, ["lap", TRUCK, RING, "--step-m", "4", "--liftoff-only"])
    assert r.exit_code == 0, r.output
    assert "lift-off in time" in r.output and "spin from" in r.output
    doc = json.loads(runner.invoke(main, ["lap", TRUCK, RING, "--step-m", "4",
                                          "--json"]).output)
    assert doc["liftoff_runs"] and "spin_onset_fraction" in doc["liftoff_runs"][0]
    r = runner.invoke(main, ["lap", TRUCK, RING, "--step-m", "4", "--liftoff-only",
                             "--no-in-time"])
    assert r.exit_code == 0 and "lift-off in time" not in r.output


def test_compare_cli_and_report_carry_the_runs(tmp_path):
    runner = CliRunner()
    r = runner.invoke(main, ["compare", GT, TRUCK, "--track", RING, "--step-m", "4"])
    assert r.exit_code == 0, r.output
    assert "lift-off in time at the base car's flagged corners" in r.output
    out = tmp_path / "r.html"
    r = runner.invoke(main, ["report", TRUCK, RING, "--step-m", "4", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "Lift-off in time at the flagged corners" in out.read_text(encoding="utf-8")


def test_lift_off_run_figures_fit_their_fixed_layout():
    from lapbalance import plots_transient
    from lapbalance.transient import sweep
    from tests.helpers import layout_problems

    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    sweeps = [sweep(car, r) for r in (40.0, 100.0)]
    for dpi in (40, 110):
        assert layout_problems(plots_transient.figures_figure(sweeps, car.name), dpi) == []
        assert layout_problems(plots_transient.histories_figure(sweeps[0], car.name),
                               dpi) == []
