"""Hard but valid inputs: finite results (no NaN, no hang) or a clear error; solver properties.

Part 1 runs physically awkward cases (downforce above weight, zero drag, zero power, too little
grip, a lifting wheel, a 20 km straight, banking, a hill climb from a standing start). Part 2
checks properties that must hold for any car on any smooth closed track (hypothesis).
"""

from __future__ import annotations

import dataclasses
import math
import threading
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InfeasibleError, InputError
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track, make_track
from lapbalance.units import G0
from tests.helpers import make_car

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"
TRACKS = ROOT / "tracks"

#: Channels that are NaN by definition somewhere: lift-off/coast figures off the checked steps,
#: ride heights without static ride heights, aero balance without downforce.
_NAN_BY_DESIGN = ("liftoff_", "coast_", "ride_height_", "aero_balance_front")
#: Guard against a hang (not a timing test: a healthy run takes well under a second). [s]
HANG_GUARD_S = 120.0


def _bounded(fn, *args, **kw):
    """Run ``fn`` in a daemon thread; fail (instead of hanging the suite) past the guard."""
    box: dict = {}

    def target():
        try:
            box["value"] = fn(*args, **kw)
        except BaseException as e:  # re-raised in the caller
            box["error"] = e

    t = threading.Thread(target=target, daemon=True)
    t.start()
    t.join(HANG_GUARD_S)
    assert not t.is_alive(), f"{getattr(fn, '__name__', fn)} did not return: a hang"
    if "error" in box:
        raise box["error"]
    return box["value"]


def _lap(car, track, **kw):
    return _bounded(simulate_lap, car, track, **kw)


def _assert_sane(res, car):
    """Finite lap, finite core channels, speeds within [0, rev-limited top speed], usage <= 1."""
    assert math.isfinite(res.lap_time_s) and res.lap_time_s > 0
    ch = res.channels
    for name, values in ch.items():
        if name.startswith(_NAN_BY_DESIGN):
            continue
        assert np.all(np.isfinite(values)), name
    checked = ch["liftoff_checked"] > 0
    for name in ch:
        if name.startswith(("liftoff_", "coast_")):
            assert np.all(np.isfinite(ch[name][checked])), name
    v = ch["speed_mps"]
    assert v.min() >= 0.0
    assert v.max() <= car.powertrain.top_speed_rev_limited() * (1 + 1e-9)
    assert ch["usage_front"].max() <= 1 + 1e-6
    assert ch["usage_rear"].max() <= 1 + 1e-6
    assert np.all(np.diff(ch["time_s"]) >= 0)


def _circle(radius, n=240, bank_deg=None):
    a = np.linspace(0.0, 2 * math.pi, n, endpoint=False)
    bank = None if bank_deg is None else np.full(n, bank_deg)
    return make_track(radius * np.cos(a), radius * np.sin(a), bank_deg=bank, closed=True,
                      name=f"circle R{radius:g}")


def _oval(radius, straight, step=10.0):
    """Closed oval: two straights of ``straight`` m joined by half circles of ``radius`` m."""
    pts = [(s, -radius) for s in np.arange(0.0, straight, step)]
    pts += [(straight + radius * math.cos(a), radius * math.sin(a))
            for a in np.arange(-math.pi / 2, math.pi / 2, step / radius)]
    pts += [(s, radius) for s in np.arange(straight, 0.0, -step)]
    pts += [(radius * math.cos(a), radius * math.sin(a))
            for a in np.arange(math.pi / 2, 3 * math.pi / 2, step / radius)]
    p = np.array(pts)
    return make_track(p[:, 0], p[:, 1], closed=True, step_m=5.0, name="oval")


def _straight(length, step=10.0):
    n = int(round(length / step)) + 1
    return make_track(np.linspace(0.0, length, n), np.zeros(n), closed=False, step_m=5.0,
                      name="straight")


# ---------------------------------------------------------------------------------------------
# part 1: hard but valid inputs
# ---------------------------------------------------------------------------------------------


def test_downforce_above_weight_at_speed():
    car = load_car(EXAMPLES / "single_seater.toml", ["aero.downforce_area_m2=6.0"])
    res = _lap(car, _oval(150.0, 1500.0))
    _assert_sane(res, car)
    weight = car.chassis.mass * G0
    assert res.channels["downforce_n"].max() > weight  # the case really is "more than weight"


def test_zero_drag_reaches_the_rev_limited_top_speed():
    gears = [3.0, 2.1, 1.6, 1.3, 1.1]
    car = make_car(aero={"drag_area_m2": 0.0},
                   powertrain={"gear_ratios": gears, "final_drive": 3.6, "shift_rpm": 7000.0,
                               "rev_limit_rpm": 7200.0, "power_kw": 300.0})
    res = _lap(car, _straight(6000.0))
    _assert_sane(res, car)
    # Source: gearing kinematics, v = omega r / (i_gear i_final) (Gillespie, Fundamentals of
    # Vehicle Dynamics, ch. 2): with no drag and no rolling resistance nothing but the limiter
    # in top gear stops the car.
    v_rev = 7200.0 * 2 * math.pi / 60 * 0.3 / (gears[-1] * 3.6)
    assert res.channels["speed_mps"].max() == pytest.approx(v_rev, rel=5e-3)
    assert "rev-limit" in res.limit_names() or "top-speed" in res.limit_names()


def test_zero_power_is_a_clear_error():
    car = make_car(powertrain={"power_kw": 0.0, "max_tractive_force_n": None})
    with pytest.raises(InfeasibleError, match=r"powertrain\.power_kw: the engine gives no drive "
                                              r"force .*give the engine's power or torque"):
        _lap(car, _circle(100.0))


def test_zero_power_via_the_command_line_exits_2():
    res = CliRunner().invoke(main, ["lap", str(EXAMPLES / "single_seater.toml"),
                                    str(TRACKS / "oranby_bowl.csv"), "--set",
                                    "powertrain.power_kw=0"])
    assert res.exit_code == 2, res.output
    msg = res.stderr.strip()
    assert "\n" not in msg and msg.startswith("lapbalance: ")
    assert "single_seater.toml: powertrain.power_kw: the engine gives no drive force" in msg


def test_grip_too_low_for_the_slowest_corner():
    car = make_car(tyres={"front": {"peak_friction": 0.001}, "rear": {"peak_friction": 0.001}})
    with pytest.raises(InfeasibleError, match=r"cannot hold the track at \d+ m .*radius 15 m.*"
                                              r"raise tyres peak_friction"):
        _lap(car, _circle(15.0))


def test_grip_too_low_to_climb_the_hill(tmp_path):
    n = 101
    hill = tmp_path / "steep_hill.csv"
    rows = [f"{5.0 * i:.1f},0,{0.30 * 5.0 * i:.2f}" for i in range(n)]
    hill.write_text("# closed: false\nx_m,y_m,z_m\n" + "\n".join(rows) + "\n")
    car = make_car(tyres={"front": {"peak_friction": 0.2}, "rear": {"peak_friction": 0.2}})
    with pytest.raises(InfeasibleError, match=r"cannot hold the track .*grade 1\d\.\d°"):
        _lap(car, load_track(hill))
    # and on the command line: one line, exit 2
    res = CliRunner().invoke(main, ["lap", str(EXAMPLES / "gt_coupe.toml"), str(hill),
                                    "--set", "tyres.front.peak_friction=0.2",
                                    "--set", "tyres.rear.peak_friction=0.2"])
    assert res.exit_code == 2, res.output
    assert res.stderr.strip().startswith("lapbalance: ") and "\n" not in res.stderr.strip()
    assert "grip too low" in res.stderr


def test_high_cg_truck_lifts_a_wheel_without_nan():
    car = load_car(EXAMPLES / "offroad_truck.toml",
                   ["chassis.cg_height_m=1.5", "chassis.track_front_m=1.2",
                    "chassis.track_rear_m=1.2", "tyres.front.peak_friction=1.6",
                    "tyres.rear.peak_friction=1.6"])
    res = _lap(car, _circle(15.0))
    _assert_sane(res, car)
    ch = res.channels
    lifted = (ch["wheel_lift_front"] > 0) | (ch["wheel_lift_rear"] > 0)
    assert lifted.any()
    # Source: Gillespie, Fundamentals of Vehicle Dynamics, ch. 9 (rollover threshold of a rigid
    # vehicle, a_y / g = t / (2 h)): the inner wheel unloads once a_y reaches g t / (2 h).
    threshold = G0 * 1.2 / (2 * 1.5)
    assert np.abs(ch["ay_mps2"]).max() <= threshold * (1 + 1e-3)
    for axle in ("front", "rear"):
        inner, outer = ch[f"fz_{axle}_inner_n"], ch[f"fz_{axle}_outer_n"]
        assert inner.min() >= -1e-6
        np.testing.assert_allclose(inner + outer, ch[f"fz_{axle}_n"], rtol=1e-9, atol=1e-6)
        flag = ch[f"wheel_lift_{axle}"] > 0
        assert np.all(inner[flag] <= 1e-3 * ch[f"fz_{axle}_n"][flag])


def test_twenty_km_straight_reaches_top_speed():
    car = load_car(EXAMPLES / "gt_coupe.toml")
    res = _lap(car, _oval(120.0, 20000.0))
    _assert_sane(res, car)
    v = res.channels["speed_mps"]
    # with drag the engine may not reach the limiter; on 20 km the car settles at its top speed:
    # the speed holds (within 0.1 %) over the last kilometres of the straight
    d = res.channels["distance_m"]
    on_straight = (d > 15000.0) & (d < 19500.0)
    assert v[on_straight].max() == pytest.approx(v.max(), rel=1e-9)
    assert v[on_straight].min() >= 0.999 * v.max()


def test_banked_oval_is_faster_than_the_same_oval_flat():
    car = load_car(EXAMPLES / "gt_coupe.toml")
    banked = load_track(TRACKS / "oranby_bowl.csv", step_m=2.0)
    assert np.abs(banked.bank_rad).max() > math.radians(5)
    flat = dataclasses.replace(banked, bank_rad=np.zeros_like(banked.bank_rad))
    r_b, r_f = _lap(car, banked), _lap(car, flat)
    _assert_sane(r_b, car)
    _assert_sane(r_f, car)
    # Source: Milliken & Milliken, Race Car Vehicle Dynamics (SAE 1995), ch. 2 (banked turn):
    # banking toward the turn adds a component of weight toward the centre, so a higher
    # cornering speed.
    assert r_b.lap_time_s < r_f.lap_time_s
    assert r_b.channels["speed_mps"].min() > r_f.channels["speed_mps"].min()


def test_hill_climb_from_a_standing_start():
    car = load_car(EXAMPLES / "fwd_hatch.toml")
    track = load_track(TRACKS / "skarhelm_climb.csv", step_m=2.0)
    assert not track.closed and np.ptp(track.z_m) > 50
    res = _lap(car, track)
    _assert_sane(res, car)
    v = res.channels["speed_mps"]
    assert v[0] == 0.0 and v[1] > 0.0 and np.all(v[1:] > 0.0)
    assert np.any(res.channels["grade_rad"] > math.radians(3))


@pytest.mark.parametrize("car_name", ["gt_coupe", "offroad_truck", "single_seater", "fwd_hatch"])
@pytest.mark.parametrize("track_name", ["veldmoor_ring", "kettlewick_logged", "oranby_bowl",
                                        "skarhelm_climb"])
def test_demo_cars_on_demo_tracks_are_sane(car_name, track_name, demo_tracks):
    car = load_car(EXAMPLES / f"{car_name}.toml")
    _assert_sane(_lap(car, demo_tracks[track_name]), car)


@pytest.fixture(scope="module")
def demo_tracks():
    return {p.stem: load_track(p, step_m=2.0) for p in TRACKS.glob("*.csv")}


def test_aero_map_rows_in_any_order_give_the_same_map(tmp_path):
    from lapbalance.aeromap import load_aero_map

    src = EXAMPLES / "single_seater_aero_map.csv"
    lines = src.read_text(encoding="utf-8").splitlines()
    head = [ln for ln in lines if ln.startswith("#") or ln.startswith("ride_height")]
    rows = [ln for ln in lines if ln and ln not in head]
    rng = np.random.default_rng(7)
    shuffled = tmp_path / "shuffled_map.csv"
    shuffled.write_text("\n".join(head + [rows[i] for i in rng.permutation(len(rows))]) + "\n")
    a = load_aero_map(src, cg_height=0.3, wheelbase=3.0)
    b = load_aero_map(shuffled, cg_height=0.3, wheelbase=3.0)
    for name in ("rh_front_m", "rh_rear_m", "front_area_cg", "rear_area_cg", "drag_area",
                 "fine_front_area_cg"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_start_speed_above_top_speed_is_capped():
    car = make_car(aero={"drag_area_m2": 0.5})
    res = _lap(car, _straight(2000.0), start_speed_kph=5000.0)
    _assert_sane(res, car)


# ---------------------------------------------------------------------------------------------
# part 2: properties over random cars and random smooth closed tracks
# ---------------------------------------------------------------------------------------------

GEARS = [3.0, 2.1, 1.6, 1.3, 1.1, 0.95]


@st.composite
def cars(draw):
    f = st.floats
    mu_f = draw(f(0.8, 2.0))
    mu_r = draw(f(0.8, 2.0))
    k = draw(f(0.0, 0.3))
    return make_car(
        chassis={"mass_kg": draw(f(300.0, 3000.0)), "cg_height_m": draw(f(0.2, 1.0)),
                 "front_weight_fraction": draw(f(0.35, 0.65))},
        aero={"downforce_area_m2": draw(f(-0.3, 4.0)), "balance_front": draw(f(0.3, 0.6)),
              "drag_area_m2": draw(f(0.2, 1.5))},
        tyres={"rolling_resistance": draw(f(0.0, 0.02)),
               "front": {"peak_friction": mu_f, "load_sensitivity": k},
               "rear": {"peak_friction": mu_r, "load_sensitivity": k}},
        powertrain={"power_kw": draw(f(50.0, 800.0)), "gear_ratios": GEARS,
                    "final_drive": 3.7, "wheel_radius_m": 0.33, "efficiency": 0.9,
                    "shift_rpm": 7500.0, "max_tractive_force_n": None},
        brakes={"bias_front": draw(f(0.5, 0.75))},
    )


@st.composite
def closed_tracks(draw):
    """A smooth closed track: r(theta) = R0 (1 + sum a_k cos(k theta + phi_k))."""
    r0 = draw(st.floats(150.0, 600.0))
    terms = draw(st.lists(st.tuples(st.integers(2, 5), st.floats(0.0, 0.06),
                                    st.floats(0.0, 2 * math.pi)), min_size=1, max_size=3))
    th = np.linspace(0.0, 2 * math.pi, 720, endpoint=False)
    r = np.ones_like(th)
    for kk, a, phi in terms:
        r += a * np.cos(kk * th + phi)
    x, y = r0 * r * np.cos(th), r0 * r * np.sin(th)
    track = make_track(x, y, closed=True, step_m=5.0, name="random")
    assume(1.0 / np.abs(track.curvature_1pm).max() >= 15.0)
    return track


@settings(max_examples=30, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(car=cars(), track=closed_tracks())
def test_lap_properties_hold_for_any_car_and_smooth_closed_track(car, track):
    res = _lap(car, track)
    _assert_sane(res, car)  # finite, 0 <= v <= rev-limited top speed, usage <= 1 + 1e-6
    ch = res.channels
    weight = car.chassis.mass * G0
    tol = 1e-9 * weight
    # load parts: static + aero -/+ the ground-force transfer give the axle loads
    np.testing.assert_allclose(ch["static_front_n"] + ch["aero_front_n"]
                               - ch["ground_transfer_n"], ch["fz_front_n"], rtol=0, atol=tol)
    np.testing.assert_allclose(ch["static_rear_n"] + ch["aero_rear_n"]
                               + ch["ground_transfer_n"], ch["fz_rear_n"], rtol=0, atol=tol)
    # Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), ch. 1 (vertical force
    # balance): on a level road the axle loads carry the weight plus the aerodynamic downforce.
    np.testing.assert_allclose(ch["fz_front_n"] + ch["fz_rear_n"],
                               weight + ch["downforce_n"], rtol=0, atol=1e-6 * weight)
    # the aero loads are the downforce, split
    np.testing.assert_allclose(ch["aero_front_n"] + ch["aero_rear_n"], ch["downforce_n"],
                               rtol=0, atol=1e-6 * weight)
    # the lap time lies between the track length run at the lowest and at the highest speed
    v = ch["speed_mps"]
    eps = 1e-9  # a constant-speed lap sits on both bounds
    assert track.length_m / v.max() * (1 - eps) <= res.lap_time_s
    assert res.lap_time_s <= track.length_m / v.min() * (1 + eps)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(car=cars(), start_kph=st.floats(0.0, 300.0), grade=st.floats(-0.08, 0.12))
def test_open_uniform_grade_runs_are_sane(car, start_kph, grade):
    n = 201
    x = np.linspace(0.0, 2000.0, n)
    track = make_track(x, 60.0 * np.sin(x / 300.0), z=grade * x, closed=False, step_m=5.0)
    try:
        res = _lap(car, track, start_speed_kph=start_kph)
    except InfeasibleError as e:  # too steep for this car's grip: a clear message, not NaN
        assert "grip too low" in str(e)
        return
    _assert_sane(res, car)
    assert res.channels["speed_mps"][0] == pytest.approx(
        min(start_kph / 3.6, res.channels["speed_limit_mps"][0]), abs=1e-6)


def test_non_finite_track_arrays_are_refused():
    track = _circle(100.0)
    bad = dataclasses.replace(track, curvature_1pm=np.where(np.arange(track.n) == 7, np.nan,
                                                            track.curvature_1pm))
    with pytest.raises(InputError, match="track curvature has non-finite values"):
        simulate_lap(make_car(), bad)
