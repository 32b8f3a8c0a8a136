"""Lap solver against textbook closed forms and a scipy ODE solution."""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from lapbalance.lap import limits_at, simulate_lap
from lapbalance.units import G0
from tests.helpers import analytic_track, circle, make_car, straight


@pytest.mark.parametrize("mu, radius", [(1.0, 50.0), (1.4, 120.0)])
def test_circle_without_aero_reaches_sqrt_mu_g_r(mu, radius):
    # Source: textbook point-mass cornering limit m v^2 / R = mu m g (e.g. REFERENCES.md §9a
    # with ClA = 0): v = sqrt(mu g R); road car mu=1, R=50 -> 22.1435 m/s.
    car = make_car(tyres={"front": {"peak_friction": mu}, "rear": {"peak_friction": mu}})
    r = simulate_lap(car, circle(radius), assess_liftoff=False)
    v = r.channels["speed_mps"]
    assert np.allclose(v, math.sqrt(mu * G0 * radius), rtol=5e-3)
    assert r.lap_time_s == pytest.approx(2 * math.pi * radius / math.sqrt(mu * G0 * radius),
                                         rel=5e-3)


@pytest.mark.parametrize("mu, m, radius, cla, expected", [
    # Source: REFERENCES.md §9a (point mass with downforce; critical-radius idea of Lenzo &
    # Rossi 2020): GT-like and single-seater rows.
    (1.4, 1300.0, 100.0, 2.0, 39.7691),
    (1.4, 1300.0, 50.0, 2.0, 27.1098),
    (1.6, 620.0, 50.0, 3.510204, 32.9505),
])
def test_circle_with_downforce_matches_closed_form(mu, m, radius, cla, expected):
    # Balance equal to the weight distribution, no drag: both axles saturate together.
    car = make_car(chassis={"mass_kg": m},
                   aero={"downforce_area_m2": cla, "balance_front": 1.4 / 2.6},
                   tyres={"front": {"peak_friction": mu}, "rear": {"peak_friction": mu}},
                   powertrain={"gear_ratios": [1.0], "wheel_radius_m": 0.3})
    r = simulate_lap(car, circle(radius), assess_liftoff=False)
    closed_form = math.sqrt(mu * m * G0 / (m / radius - mu * 0.5 * 1.225 * cla))
    assert closed_form == pytest.approx(expected, rel=1e-5)
    assert np.allclose(r.channels["speed_mps"], expected, rtol=5e-3)


def test_straight_constant_power_matches_solve_ivp():
    # Source: scipy.integrate.solve_ivp of m v dv/ds = P/v - 1/2 rho CdA v^2 - Crr m g
    # (road-load equation, REFERENCES.md §9b/§9c; general-purpose reference library).
    P, m, cda, crr, rho = 300e3, 1300.0, 0.85, 0.015, 1.225
    car = make_car(chassis={"mass_kg": m}, aero={"drag_area_m2": cda},
                   tyres={"rolling_resistance": crr, "front": {"peak_friction": 3.0},
                          "rear": {"peak_friction": 3.0}},
                   powertrain={"power_kw": P / 1e3})
    track = straight(1500.0)
    v0 = 25.0
    r = simulate_lap(car, track, start_speed_kph=v0 * 3.6, assess_liftoff=False)
    assert set(r.limit_names()[:-1]) == {"engine"}

    def rhs(s, y):
        v = y[0]
        return [(P / v - 0.5 * rho * cda * v * v - crr * m * G0) / (m * v)]

    sol = solve_ivp(rhs, (0, 1500.0), [v0], rtol=1e-10, atol=1e-10, dense_output=True)
    s = r.channels["distance_m"]
    ref = sol.sol(s)[0]
    assert np.allclose(r.channels["speed_mps"], ref, rtol=5e-3)


def test_top_speed_matches_power_balance_root():
    # Source: REFERENCES.md §9b, P = (1/2 rho CdA v^2 + Crr m g) v solved with scipy brentq:
    # GT-like P=400 kW, CdA=0.85, Crr=0.015, m=1300 -> 90.2527 m/s.
    P, m, cda, crr, rho = 400e3, 1300.0, 0.85, 0.015, 1.225
    v_top = brentq(lambda v: (0.5 * rho * cda * v * v + crr * m * G0) * v - P, 1.0, 500.0)
    assert v_top == pytest.approx(90.2527, rel=1e-6)
    car = make_car(chassis={"mass_kg": m}, aero={"drag_area_m2": cda},
                   tyres={"rolling_resistance": crr, "front": {"peak_friction": 3.0},
                          "rear": {"peak_friction": 3.0}},
                   powertrain={"power_kw": P / 1e3})
    r = simulate_lap(car, straight(20000.0, ds=2.0), start_speed_kph=80.0 * 3.6,
                     assess_liftoff=False)
    assert r.channels["speed_mps"].max() == pytest.approx(v_top, rel=5e-3)
    assert r.channels["speed_mps"].max() <= v_top * (1 + 1e-9)


@pytest.mark.parametrize("bias, expected", [(0.55, 8.81025), (0.60, 9.46849), (0.65, 10.23303),
                                            (0.70, 11.13187)])
def test_braking_with_fixed_bias_matches_lock_limits(bias, expected):
    # Source: Gillespie ch. 3 brake proportioning (closed form derived in REFERENCES.md §9c):
    # mu=1.4, front axle to CG 1.2, CG to rear 1.4, L=2.6, h=0.5; rear lock limits here.
    car = make_car(brakes={"bias_front": bias})
    lim = limits_at(car, 30.0)
    assert lim["max_decel_mps2"] == pytest.approx(expected, rel=5e-3)
    # the same deceleration appears in a braking zone of a lap: straight into a hairpin
    k = np.concatenate([np.zeros(600), np.full(80, 1 / 15.0), np.zeros(50)])
    r = simulate_lap(car, analytic_track(k), start_speed_kph=150.0, assess_liftoff=False)
    brk = r.channels["brake_force_n"] > 0
    zone = brk & (r.channels["curvature_1pm"] == 0)
    zone[np.argmax(zone)] = False  # the step where the acceleration and braking traces meet
    assert zone.sum() > 20
    assert np.allclose(-r.channels["ax_mps2"][zone], expected, rtol=5e-3)
    assert set(np.array(r.limit_names())[zone]) == {"rear"}


def test_rwd_traction_limit():
    # Source: REFERENCES.md §9c, RWD traction limit on a level road without aero:
    # a = mu g (b/L) / (1 - mu h/L) = 8.67114 m/s^2 (mu=1.4, b=1.2, L=2.6, h=0.5).
    car = make_car()
    lim = limits_at(car, 10.0)
    assert lim["max_accel_mps2"] == pytest.approx(8.67114, rel=5e-3)


def test_forward_backward_meeting_point_on_straight():
    # Source: REFERENCES.md §10 kinematic check: v1=20, v2=25, s=400, a_acc=5, a_brk=10 ->
    # v_meet = 56.05057 m/s. Reproduced with constant accelerations from the solver's
    # own limits: the trace peak must equal the kinematic meeting speed for those limits.
    car = make_car(powertrain={"power_kw": 3000.0, "max_tractive_force_n": 1200.0 * 5.0},
                   tyres={"front": {"peak_friction": 3.0}, "rear": {"peak_friction": 3.0}},
                   brakes={"bias_front": 0.6})
    lim = limits_at(car, 40.0)
    a_acc = lim["max_accel_mps2"]
    assert a_acc == pytest.approx(5.0, rel=1e-6)
    a_brk = lim["max_decel_mps2"]
    R1, R2 = 20.0 ** 2 / (3.0 * G0), 25.0 ** 2 / (3.0 * G0)
    k = np.concatenate([np.full(40, 1 / R1), np.zeros(401), np.full(40, 1 / R2)])
    r = simulate_lap(car, analytic_track(k), start_speed_kph=20 * 3.6, assess_liftoff=False)
    v1 = r.channels["speed_mps"][40]
    v2 = r.channels["speed_mps"][440]
    s = 400.0
    vm = math.sqrt((v1 ** 2 * a_brk + v2 ** 2 * a_acc + 2 * a_acc * a_brk * s)
                   / (a_acc + a_brk))
    assert r.channels["speed_mps"][40:441].max() == pytest.approx(vm, rel=5e-3)
