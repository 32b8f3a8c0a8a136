"""Tests of the built-in handling figures (lapbalance.handling)."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from lapbalance import handling
from lapbalance.car import load_car
from lapbalance.lap import simulate_lap
from lapbalance.units import G0
from tests.helpers import analytic_track, make_car
from tests.reference_cases import CASES, constant_radius_run_fit, gillespie_k, ids

EXAMPLES = __import__("pathlib").Path(__file__).resolve().parents[1] / "examples"

# Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), ch. 6, bicycle model,
# evaluated for m = 1200 kg, b = 1.2 m (front axle to CG), c = 1.4 m, L = 2.6 m,
# C_af = 2400 N/deg, C_ar = 2800 N/deg. The helper car has exactly this mass and geometry
# (front weight fraction c/L = 1.4/2.6). Values in tests/reference_cases.py ("handling.*").


def test_gillespie_ch6_understeer_gradient():
    # W_f = 6336.6046 N, W_r = 5431.3754 N, K = 0.700475 deg/g.
    for cid in ids("handling.static_weight") + ["handling.understeer_gradient"]:
        assert CASES[cid].value() == CASES[cid].approx(), cid


def test_gillespie_ch6_steer_and_characteristic_speed():
    # R = 100 m, a_y = 0.5 g: Ackermann angle 1.489690 deg, road-wheel steer 1.839928 deg;
    # v_ch = 45.6680 m/s; critical speed sqrt(-57.3 L g / K) of an oversteering car: the same
    # magnitude as the characteristic speed for K of opposite sign.
    for cid in ("handling.ackermann", "handling.steer", "handling.characteristic_speed",
                "handling.critical_speed"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    K = gillespie_k()
    assert handling.characteristic_speed(2.6, -K) is None
    assert handling.critical_speed(2.6, K) is None


def test_constant_radius_run_steer_slope_is_the_gillespie_gradient():
    # Gillespie ch. 6 (K = 0.700475 deg/g, steer 1.839928 deg at R = 100 m and 0.5 g). The
    # run takes the lateral demands from the solver's steady states, so this checks
    # F_yf = m a_y b/L, F_yr = m a_y a/L inside the solver too.
    for cid in ids("handling.run"):
        if cid != "handling.run.limit_mu_g":
            assert CASES[cid].value() == CASES[cid].approx(), cid
    run = constant_radius_run_fit()[0]
    # ISO 4138:2021 steps lateral acceleration by no more than 0.5 m/s².
    assert np.all(np.diff(run.ay_mps2) <= 0.5 + 1e-12)


def test_constant_radius_limit_is_mu_g_without_aero_or_load_sensitivity():
    # Source: Coulomb friction and Newton's second law: with no aero, no drag, no rolling
    # resistance and load-independent friction, each axle's demand and capacity are both
    # proportional to its static load, so both saturate at a_y = mu g ("handling.run.limit_mu_g").
    case = CASES["handling.run.limit_mu_g"]
    assert case.value() == case.approx()
    run = handling.constant_radius_run(make_car(), 100.0)
    assert run.steer_deg is None
    assert abs(run.limit_understeer_index) < 1e-3
    assert max(run.usage_front[-1], run.usage_rear[-1]) == pytest.approx(1.0, abs=1e-3)


@pytest.mark.parametrize(("mu_f", "mu_r", "axle", "sign"),
                         [(1.2, 1.4, "front", 1.0), (1.4, 1.2, "rear", -1.0)])
def test_limit_understeer_index_sign_follows_the_weaker_axle(mu_f, mu_r, axle, sign):
    # Source: definition (docs/method.md, usage): usage = demand / capacity; the axle with
    # less friction saturates first, and u_f - u_r > 0 means the front does (understeer at
    # the limit).
    car = make_car(tyres={"front": {"peak_friction": mu_f}, "rear": {"peak_friction": mu_r}})
    run = handling.constant_radius_run(car, 100.0)
    assert run.limiting_axle == axle
    assert sign * run.limit_understeer_index > 0.1
    assert run.limit_ay_mps2 == pytest.approx(min(mu_f, mu_r) * G0, rel=1e-4)
    # Demands follow the static split on a level road at steady speed.
    assert np.allclose(run.fy_front_n, 1200 * run.ay_mps2 * 1.4 / 2.6, rtol=1e-9)
    assert np.allclose(run.fy_rear_n, 1200 * run.ay_mps2 * 1.2 / 2.6, rtol=1e-9)


def _fake_result(speed_kph, bal_cg, bal_ground):
    return SimpleNamespace(channels={"speed_kph": np.asarray(speed_kph, float),
                                     "aero_balance_front": np.asarray(bal_cg, float),
                                     "aero_balance_front_ground": np.asarray(bal_ground,
                                                                             float)})


def test_balance_migration_fixed_bands_linear_trend():
    # Source: arithmetic: a balance rising 0.0002 per km/h moves 0.0002 * (225 - 75) = 0.03
    # between the means of the bands [50, 100] and [200, 250] sampled uniformly.
    v = np.linspace(50, 250, 2001)
    bal = 0.40 + 0.0002 * v
    r = _fake_result(v, bal, bal - 0.05)
    m = handling.balance_migration(r, (50, 100), (200, 250))
    assert m["value"] == pytest.approx(0.03, rel=1e-9)
    assert m["low_mean"] == pytest.approx(0.415, rel=1e-9)
    g = handling.balance_migration(r, (50, 100), (200, 250), convention="ground")
    assert g["value"] == pytest.approx(0.03, rel=1e-9)
    assert g["high_mean"] == pytest.approx(0.40 + 0.0002 * 225 - 0.05, rel=1e-9)


def test_balance_migration_default_bands_are_speed_percentiles():
    v = np.linspace(60, 260, 201)
    r = _fake_result(v, 0.4 + 0.0001 * v, 0.4 + 0.0001 * v)
    m = handling.balance_migration(r)
    assert m["low_band_kph"] == [60.0, pytest.approx(np.percentile(v, 25))]
    assert m["high_band_kph"] == [pytest.approx(np.percentile(v, 90)), 260.0]
    assert m["value"] > 0


def test_balance_migration_undefined_without_downforce():
    r = _fake_result([100, 200], [np.nan, np.nan], [np.nan, np.nan])
    assert handling.balance_migration(r)["value"] is None
    assert handling.aero_balance_curve(r).speed_kph.size == 0


def test_aero_balance_curve_bins_and_means():
    v = np.array([101, 105, 109, 111, 119, 135])
    bal = np.array([0.40, 0.42, 0.44, 0.50, 0.52, 0.60])
    c = handling.aero_balance_curve(_fake_result(v, bal, bal - 0.1), 10.0)
    assert list(c.speed_kph) == [105.0, 115.0, 135.0]
    assert np.allclose(c.balance_cg, [0.42, 0.51, 0.60])
    assert np.allclose(c.balance_ground, [0.32, 0.41, 0.50])
    assert list(c.steps) == [3, 2, 1]


def _gt_lap():
    k = np.concatenate([np.zeros(500), np.full(200, 1 / 80), np.zeros(500)])
    corner = SimpleNamespace(id=1, direction="left", entry_m=500, apex_m=600, exit_m=699,
                             min_radius_m=80)
    track = analytic_track(k, 1.0, closed=False, corners=(corner,))
    return simulate_lap(load_car(EXAMPLES / "gt_coupe.toml"), track, start_speed_kph=150)


def test_gt_coupe_curve_is_flat_at_its_input_balance():
    # Source: docs/method.md, aero conventions: without an aero map the CG-convention split is a
    # fixed fraction; the ground-convention reading is the car file's own input (0.38,
    # wheel-restrained balance), since front -= D h_cg / L scales with the same q.
    r = _gt_lap()
    c = handling.aero_balance_curve(r)
    assert np.allclose(c.balance_cg, r.car.aero.balance_cg, rtol=1e-12)
    assert np.allclose(c.balance_ground, 0.38, rtol=1e-9)
    assert handling.balance_migration(r)["value"] == pytest.approx(0.0, abs=1e-12)
    lean = handling.corner_leaning(r)
    assert lean[0]["limit_leaning"] == handling.leaning(r.corners[0]["balance_index_at_min"])
    f = handling.figures(r)
    assert f["understeer_gradient_deg_per_g"] is None
    assert f["characteristic_speed_kph"] is None
    f2 = handling.figures(r, cornering_stiffness_front=3400, cornering_stiffness_rear=4200)
    wf, wr = handling.static_axle_weights(r.car)
    assert f2["understeer_gradient_deg_per_g"] == pytest.approx(wf / 3400 - wr / 4200)
    assert f2["characteristic_speed_kph"] == pytest.approx(
        3.6 * math.sqrt(math.degrees(1) * 2.65 * G0 / (wf / 3400 - wr / 4200)))


@pytest.mark.parametrize(("b", "name"), [(0.05, "oversteer"), (-0.05, "understeer"),
                                         (0.01, "neutral"), (-0.02, "neutral")])
def test_leaning_bands(b, name):
    # Common practice: balance index > 0 means the rear is nearer its limit (docs/method.md).
    assert handling.leaning(b) == name


def test_speed_cap_before_grip_limit_warns():
    from lapbalance.errors import PhysicsWarning

    # Rev-limited top speed 20000 rpm * 2 pi * 0.3 m / 60 / 10 = 62.8 m/s, below the grip
    # limit sqrt(1.4 g * 1000 m) = 117 m/s on a 1000 m radius.
    car = make_car(powertrain={"gear_ratios": [10.0]})
    with pytest.warns(PhysicsWarning, match="speed cap"):
        run = handling.constant_radius_run(car, 1000.0)
    assert run.limit_speed_mps < 70.0
