"""Lift-off verdicts on the invented demo cars: one case that must flag, one that must not.

The demo data are invented; the checks below are not numbers from them but relations that
follow from the axle-load equation (Gillespie, Fundamentals of Vehicle Dynamics, ch. 1) and
the verdict rules documented in lapbalance.liftoff.
"""

from pathlib import Path

import pytest

from lapbalance import liftoff
from lapbalance.car import load_car
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def ring():
    return load_track(ROOT / "tracks" / "veldmoor_ring.csv")


def test_offroad_truck_flags_a_high_speed_corner(ring):
    car = load_car(ROOT / "examples" / "offroad_truck.toml")
    r = simulate_lap(car, ring)
    fast = [c for c in r.corners if c["liftoff_verdict"] == "rear-saturates"
            and c["liftoff_worst_rear"]["speed_kph"] >= 150.0]
    assert fast, "the truck must saturate its rear on lift-off in at least one fast corner"
    c = max(fast, key=lambda c: c["liftoff_worst_rear"]["speed_kph"])
    w = c["liftoff_worst_rear"]
    # Why, from the numbers: the truck's CG is high for its wheelbase (h/L = 0.85/2.5 = 0.34),
    # so lifting off moves (drive + overrun) h/L onto the front -- more than a kilonewton at
    # this speed -- while its rear was already near its limit on throttle.
    ch = r.channels
    i = int(round(w["distance_m"] / ring.step_m))
    fo = ch["overrun_force_n"][i]
    expected_shift = liftoff.first_principles_front_shift(
        ch["drive_force_n"][i] - ch["rolling_resistance_n"][i], ch["rolling_resistance_n"][i],
        fo, car.chassis.cg_height, car.chassis.wheelbase)
    assert w["front_load_shift_n"] == pytest.approx(expected_shift, rel=1e-6)
    assert w["front_load_shift_n"] > 1000.0
    assert w["usage_rear_on"] > 0.95
    # the rear then needs more grip than it has, by far more than the 1 % margin
    assert w["usage_rear_off"] > 1.05
    # even coasting (no engine braking) saturates it here: the drive force's own share
    assert w["coast_usage_rear"] > 1.0


def test_front_drive_hatch_that_frees_its_front_axle_is_not_flagged(ring):
    car = load_car(ROOT / "examples" / "fwd_hatch.toml")
    r = simulate_lap(car, ring)
    # the corner exit where lifting frees the driven front axle the most
    c = max(r.corners, key=lambda c: c["liftoff_max_shift"] or 0.0)
    w = c["liftoff_worst_shift"]
    # Why, from the numbers: on full throttle the front tyres carry the drive force, so
    # lifting off frees most of their grip (front usage falls by more than a third); the
    # balance index moves far toward oversteer, but the rear, which carries no drive force,
    # stays well inside its grip (below 0.85 after lift-off).
    assert w["balance_shift"] > 0.3
    assert w["usage_front_off"] < w["usage_front_on"] - 0.3
    assert w["usage_rear_off"] < 0.85
    # and at the step where the rear is busiest after lift-off it still keeps a reserve
    assert c["liftoff_worst_rear"]["usage_rear_off"] < 0.95
    assert c["liftoff_verdict"] == "stable"
