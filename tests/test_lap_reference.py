"""Lap solver against textbook closed forms and a scipy ODE solution.

Expected values, their sources and tolerances are in ``tests/reference_cases.py`` ("lap.*");
the laps themselves are built there too, so that ``docs/validation.md`` shows the same numbers
these tests assert.
"""

import math

import numpy as np
import pytest

from lapbalance.units import G0
from tests.reference_cases import (
    BRAKE_BIAS,
    CASES,
    DOWNFORCE_CIRCLES,
    brake_zone,
    circle_lap,
    downforce_circle_lap,
    ids,
    power_straight,
    top_speed_lap,
)


@pytest.mark.parametrize("mu, radius", [(1.0, 50.0), (1.4, 120.0)])
def test_circle_without_aero_reaches_sqrt_mu_g_r(mu, radius):
    # Source: textbook point-mass cornering limit m v^2 / R = mu m g: v = sqrt(mu g R); road
    # car mu=1, R=50 -> 22.1435 m/s. Every step within 0.5 %, and the lap time.
    for cid in ids(f"lap.circle.mu{mu:g}_r{radius:g}"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    assert circle_lap(mu, radius).channels["speed_mps"].size > 100


@pytest.mark.parametrize("mu, m, radius, cla, expected", DOWNFORCE_CIRCLES)
def test_circle_with_downforce_matches_closed_form(mu, m, radius, cla, expected):
    # Source: point mass with downforce, m v^2/R = mu (m g + 1/2 rho ClA v^2) (critical-radius
    # idea of Lenzo & Rossi 2020): GT-like and single-seater rows. Balance equal to the
    # weight distribution, no drag: both axles saturate together.
    closed_form = math.sqrt(mu * m * G0 / (m / radius - mu * 0.5 * 1.225 * cla))
    assert closed_form == pytest.approx(expected, rel=1e-5)
    case = CASES[f"lap.downforce_circle.m{m:g}_r{radius:g}"]
    assert case.expected == expected
    assert case.value() == case.approx()
    assert np.allclose(downforce_circle_lap(mu, m, radius, cla).channels["speed_mps"], expected,
                       rtol=case.rel)


def test_straight_constant_power_matches_solve_ivp():
    # Source: scipy.integrate.solve_ivp of m v dv/ds = P/v - 1/2 rho CdA v^2 - Crr m g
    # (road-load equation; general-purpose reference library), every step within 0.5 %.
    r, ref = power_straight()
    assert set(r.limit_names()[:-1]) == {"engine"}
    case = CASES["lap.power_straight"]
    assert case.value() == case.approx()
    assert np.allclose(r.channels["speed_mps"], ref, rtol=case.rel)


def test_top_speed_matches_power_balance_root():
    # Source: power balance P = (1/2 rho CdA v^2 + Crr m g) v solved with scipy brentq:
    # GT-like P=400 kW, CdA=0.85, Crr=0.015, m=1300 -> 90.2527 m/s.
    root, on_lap = CASES["lap.top_speed.root"], CASES["lap.top_speed.lap"]
    assert root.value() == root.approx()
    assert on_lap.value() == on_lap.approx()
    assert top_speed_lap().channels["speed_mps"].max() <= root.value() * (1 + 1e-9)


@pytest.mark.parametrize("bias, expected", BRAKE_BIAS)
def test_braking_with_fixed_bias_matches_lock_limits(bias, expected):
    # Source: Gillespie ch. 3 brake proportioning (lock limits derived in docs/method.md):
    # mu=1.4, front axle to CG 1.2, CG to rear 1.4, L=2.6, h=0.5; rear lock limits here. The
    # same deceleration appears at every step of a braking zone: straight into a hairpin.
    for cid in ids(f"lap.brake_bias.{bias:g}"):
        assert CASES[cid].expected == expected
        assert CASES[cid].value() == CASES[cid].approx(), cid
    r, zone = brake_zone(bias)
    assert zone.sum() > 20
    assert set(np.array(r.limit_names())[zone]) == {"rear"}


def test_rwd_traction_limit():
    # Source: RWD traction limit on a level road without aero (Gillespie ch. 2, derived):
    # a = mu g (b/L) / (1 - mu h/L) = 8.67114 m/s^2 (mu=1.4, b=1.2, L=2.6, h=0.5).
    case = CASES["lap.rwd_traction"]
    assert case.value() == case.approx()


def test_forward_backward_meeting_point_on_straight():
    # Source: constant-acceleration kinematics: leaving one corner at v1 and entering the
    # next at v2 over a straight s, the traces meet at v_m^2 = (v1^2 a_brk + v2^2 a_acc +
    # 2 a_acc a_brk s)/(a_acc + a_brk) (e.g. v1=20, v2=25, s=400, a_acc=5, a_brk=10 ->
    # 56.05057 m/s). Reproduced with the solver's own constant limits (traction cap 5 m/s^2):
    # the trace peak must equal the kinematic meeting speed for those limits.
    for cid in ids("lap.meeting"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    v1, v2, s, a_acc, a_brk = 20.0, 25.0, 400.0, 5.0, 10.0
    vm = math.sqrt((v1 ** 2 * a_brk + v2 ** 2 * a_acc + 2 * a_acc * a_brk * s)
                   / (a_acc + a_brk))
    assert vm == pytest.approx(56.05057, rel=1e-6)
