"""Lift-off margins on the invented demo cars: one car that must flag, one that must not.

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


@pytest.fixture(scope="module")
def laps(ring):
    return {name: simulate_lap(load_car(ROOT / "examples" / f"{name}.toml"), ring)
            for name in ("offroad_truck", "gt_coupe", "fwd_hatch")}


def test_offroad_truck_flags_a_high_speed_corner(laps, ring):
    r = laps["offroad_truck"]
    car = r.car
    fast = [c for c in r.corners if c["liftoff_verdict"] in liftoff.FLAG_VERDICTS
            and c["min_speed_kph"] >= 150.0]
    assert fast, "the truck must flag at least one fast corner"
    c = min(fast, key=liftoff.rank_key)
    t, w = c["liftoff_tightest"], c["liftoff_worst_rear"]
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
    # the tunnel split hides a front-biased true split (ground convention -> CG adds D h/L to
    # the front): a lift even 5 % below the limit lateral acceleration saturates the rear
    assert car.aero.balance_cg > 0.6 or car.aero.rear_area_cg < 0.0
    assert t["margin"] < 0.95 and t["rear_reserve"] < -0.05
    assert t["safe_speed_kph"] < t["limit_speed_kph"] - 5.0
    # even coasting (no engine braking) does not keep the rear at the limit here
    assert t["coast_margin"] < 1.0


def test_front_drive_hatch_that_frees_its_front_axle_is_not_flagged(laps):
    r = laps["fwd_hatch"]
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
    # and a lift at the very limit of this corner keeps the rear within its grip
    assert c["liftoff_margin"] == 1.0
    assert c["liftoff_verdict"] not in liftoff.FLAG_VERDICTS
    assert not liftoff.flagged(r.corners)


def test_balanced_coupe_and_front_biased_truck_land_in_different_verdicts(laps):
    # Source: the ranking requirement: flagged corners are those with the smallest margins,
    # and the dangerous car must not read like the benign one.
    truck, coupe = laps["offroad_truck"], laps["gt_coupe"]
    tv = {c["liftoff_verdict"] for c in truck.corners}
    cv = {c["liftoff_verdict"] for c in coupe.corners}
    assert tv <= set(liftoff.FLAG_VERDICTS) and not cv & set(liftoff.FLAG_VERDICTS)
    assert liftoff.smallest_margin(truck.corners) < 0.9 < liftoff.smallest_margin(coupe.corners)
    # every flagged truck corner has a smaller margin than every unflagged coupe corner
    worst_unflagged = min(c["liftoff_margin"] for c in coupe.corners)
    assert all(c["liftoff_margin"] < worst_unflagged for c in liftoff.flagged(truck.corners))
