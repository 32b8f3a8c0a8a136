"""Every step's reported a_x is the one its speed change needs, wherever a force acts.

The quasi-static solver reports, per step, the force balance it applied; the speed trace must
follow from it by the constant-acceleration step v[i+1]² = v[i]² + 2 a_x ds (the
kinematics of the discretisation, docs/method.md "The solver"). The backward pass solves
its braking step implicitly (the force applied at the step's own speed), so this must hold
at every step, including where the acceleration and braking traces meet.
"""

import warnings
from pathlib import Path

import numpy as np
import pytest

from lapbalance.car import load_car
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track
from tests.helpers import wavy_circuit

ROOT = Path(__file__).resolve().parents[1]
CARS = [p.name for p in sorted((ROOT / "examples").glob("*.toml"))
        if not p.name.startswith("targets")]


def _tracks():
    tracks = {p.stem: load_track(p) for p in sorted((ROOT / "tracks").glob("*.csv"))}
    tracks["wavy"] = wavy_circuit(3000.0, 1.0, seed=5)
    return tracks


TRACKS = _tracks()


@pytest.mark.parametrize("track", list(TRACKS))
@pytest.mark.parametrize("car", CARS)
def test_reported_ax_matches_the_speed_change(car, track):
    tr = TRACKS[track]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = simulate_lap(load_car(ROOT / "examples" / car), tr, assess_liftoff=False)
    ch = r.channels
    v = ch["speed_mps"]
    vnext = np.append(v[1:], v[0]) if tr.closed else v[1:]
    ax = ch["ax_mps2"][: len(vnext)]
    ds = float(tr.step_m)
    need = (vnext ** 2 - v[: len(vnext)] ** 2) / (2.0 * ds)
    force = (ch["drive_force_n"] + ch["brake_force_n"])[: len(vnext)]
    acting = np.ones(len(vnext), bool)  # every step applies a force balance (coasting too)
    err = np.abs(ax - need)[acting]
    worst = int(np.argmax(err))
    assert err.max() <= 1e-6, (f"step {worst}: a_x {ax[worst]:.6f} vs speed change "
                               f"{need[worst]:.6f} m/s², force {force[worst]:.1f} N")
    # the check is not empty: the speed changes, and on every circuit but the bowl (which
    # the quicker cars take flat out, power-limited all round) the lap brakes hard and
    # accelerates
    assert np.ptp(need) > 0.05
    if track != "oranby_bowl":
        assert need.min() < -5.0 and need.max() > 1.0


def test_a_power_limited_closed_lap_is_periodic():
    # Source: road-load power balance (Gillespie, *Fundamentals of Vehicle Dynamics*, SAE 1992,
    # ch. 2, top speed where the tractive power P equals the drag power ½ρ CdA v³; no rolling
    # resistance here). On a circle of 2 km the corner limit lies far above that speed, so the
    # car never reaches it: the closed lap must settle at the drag-limited speed all round (a
    # lap started at the unreachable limit would decelerate the whole way and need an
    # impossible closing step).
    from tests.helpers import circle, make_car

    car = make_car(aero={"drag_area_m2": 0.8}, powertrain={"power_kw": 100.0})
    v_top = (100e3 / (0.5 * 1.225 * 0.8)) ** (1.0 / 3.0)
    tr = circle(2000.0, ds=2.0)
    r = simulate_lap(car, tr, assess_liftoff=False)
    v = r.channels["speed_mps"]
    assert np.all(r.channels["speed_limit_mps"] > 1.5 * v_top)
    np.testing.assert_allclose(v, v_top, rtol=1e-6)
    assert r.lap_time_s == pytest.approx(2 * np.pi * 2000.0 / v_top, rel=1e-6)
    need = (np.append(v[1:], v[0]) ** 2 - v ** 2) / (2.0 * float(tr.step_m))
    assert np.max(np.abs(r.channels["ax_mps2"] - need)) <= 1e-6
