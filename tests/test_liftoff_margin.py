"""Lift-off margin: closed form, the tall-car scenario, monotonic properties, parity, ranking."""

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from lapbalance import kernels as K
from lapbalance import liftoff
from lapbalance.lap import car_parameters, evaluate_forces, simulate_lap
from lapbalance.units import G0
from tests.helpers import analytic_track, make_car
from tests.reference_cases import (CASES, closed_form_margin, closed_form_margin_car, ids,
                                   margin_circle_lap)

RHO = 1.225

# The closed form (our derivation, sources in the docstring of test_margin_matches_closed_form)
# and its test car live in the reference-case registry, with the check values.
_closed_form_car = closed_form_margin_car
_closed_form_margin = closed_form_margin


@pytest.mark.parametrize("balance_front", [0.62, 0.5])
def test_margin_matches_closed_form(balance_front):
    r"""Closed form: flat circle of radius R, constant friction mu on both axles and in both
    directions (no load sensitivity), rear drive, coasting lift (no engine overrun), no rolling
    resistance, CG-convention aero split ClA_f, ClA_r, drag area CdA, q = rho v^2 / 2.

    Axle loads (Gillespie, Fundamentals of Vehicle Dynamics, ch. 1: moments about the contact
    points; with the drag folded into the CG-convention split and the ground force X at the
    ground): Fz_f = m g b/L + q ClA_f - X h/L, Fz_r = m g a/L + q ClA_r + X h/L, with a = front
    axle to CG and b = CG to rear axle (Gillespie's b and c). Steady yaw demand
    Fy_f = m v^2/R b/L, Fy_r = m v^2/R a/L. Friction ellipse per axle (Milliken & Milliken,
    Race Car Vehicle Dynamics, ch. 2): u = sqrt(Fx^2 + Fy^2) / (mu Fz) for equal friction in
    both directions. With no load sensitivity the axle capacity is mu times the axle load
    however the lateral transfer splits it between the wheels.

    * After a coasting lift X = 0 and the rear carries no Fx: u_r = Fy_r / (mu Fz_r) = 1 gives
      m v^2 a/(L R) = mu (m g a/L + q ClA_r), linear in v^2:
      v_s^2 = mu g / (1/R - mu rho ClA_r L / (2 m a)).
    * On throttle at steady speed X = D = q CdA, on the rear axle. Front: Fx_f = 0, so u_f = 1
      at v_f^2 = mu g / (1/R - mu rho (ClA_f - CdA h/L) L / (2 m b)). Rear:
      v^2 sqrt(c^2 + e^2) = mu (A + B v^2) with c = rho CdA/2, e = m a/(L R),
      A = m g a/L, B = rho (ClA_r + CdA h/L)/2, so v_r^2 = mu A / (sqrt(c^2 + e^2) - mu B).
    * The steady limit is v_l^2 = min(v_f^2, v_r^2); on a flat circle a_y = v^2/R, so the
      margin is lambda = min(1, v_s^2 / v_l^2).

    The solver's margin at every checked step of the lap must match to 1e-4.
    """
    car = _closed_form_car(balance_front)
    R = 150.0
    ch = car.chassis
    expected, vl2, vs2 = _closed_form_margin(
        ch.mass, ch.wheelbase, ch.front_weight_fraction, ch.cg_height,
        car.aero.front_area_cg, car.aero.rear_area_cg, car.aero.drag_area, 1.4, R)
    # the registry's check values are this closed form, evaluated
    reg = f"margin.closed_form.f{balance_front:g}"
    assert CASES[f"{reg}.margin"].expected == pytest.approx(expected, abs=1e-7)
    assert CASES[f"{reg}.limit_speed"].expected == pytest.approx(math.sqrt(vl2), rel=1e-7)
    for cid in ids(reg):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    r = margin_circle_lap(balance_front)  # simulate_lap(car, circle(R), assess_liftoff=False)
    c = r.channels
    checked = c["liftoff_checked"] > 0
    assert checked.all()
    assert c["speed_limit_mps"][0] ** 2 == pytest.approx(vl2, rel=1e-4)
    np.testing.assert_allclose(c["liftoff_step_margin"], expected, atol=1e-4)
    # no overrun: the coasting margin is the same lift
    np.testing.assert_allclose(c["coast_step_margin"], expected, atol=1e-4)
    if expected < 1.0:
        np.testing.assert_allclose(c["liftoff_safe_speed_mps"] ** 2, vs2, rtol=1e-4)
        # the rear reserve after a lift at the limit: 1 - Fy_r / (mu Fz_r) at v_l
        m, L, a = ch.mass, ch.wheelbase, ch.a
        fz = m * G0 * a / L + 0.5 * RHO * vl2 * car.aero.rear_area_cg
        res = 1.0 - (m * vl2 / R * a / L) / (1.4 * fz)
        np.testing.assert_allclose(c["liftoff_step_rear_reserve"], res, atol=1e-4)
        assert res < 0.0
    else:
        assert np.all(c["liftoff_step_rear_reserve"] >= 0.0)


def test_closed_form_cases_cover_both_sides_of_one():
    # Source: the closed form above; the two parametrised balances must exercise a lift that
    # saturates below the limit (lambda < 1) and one that keeps the rear at the limit (= 1).
    ch = _closed_form_car().chassis
    lams = [_closed_form_margin(ch.mass, ch.wheelbase, ch.front_weight_fraction,
                                ch.cg_height, 2.0 * f, 2.0 * (1 - f), 1.0, 1.4, 150.0)[0]
            for f in (0.62, 0.5)]
    assert lams[0] < 0.99 and lams[1] == 1.0


def _tall_car(convention):
    # An invented tall, short-wheelbase car (h/L = 0.39) whose wheel-restrained tunnel split
    # reads balanced.
    return make_car(chassis={"mass_kg": 1750.0, "wheelbase_m": 2.25, "cg_height_m": 0.88,
                             "front_weight_fraction": 0.5, "track_front_m": 1.62,
                             "track_rear_m": 1.62},
                    aero={"downforce_area_m2": 0.9, "drag_area_m2": 1.5,
                          "balance_front": 0.5, "balance_convention": convention},
                    tyres={"rolling_resistance": 0.015,
                           "front": {"peak_friction": 1.30, "load_sensitivity": 0.08},
                           "rear": {"peak_friction": 1.20, "load_sensitivity": 0.08}},
                    powertrain={"overrun_torque_nm": 70.0, "power_kw": 300.0,
                                "gear_ratios": [3.5, 2.3, 1.6, 1.2, 0.95, 0.8],
                                "final_drive": 3.7, "wheel_radius_m": 0.36,
                                "shift_rpm": 6000.0},
                    suspension={"roll_centre_height_front_m": 0.10,
                                "roll_centre_height_rear_m": 0.15})


def _five_corners():
    segs = [(300, 0.0), (180, 1 / 60), (250, 0.0), (260, -1 / 130), (250, 0.0),
            (320, 1 / 220), (300, 0.0), (380, -1 / 320), (300, 0.0), (420, 1 / 450),
            (300, 0.0)]
    k = np.concatenate([np.full(int(s), kk) for s, kk in segs])
    k = np.convolve(k, np.ones(25) / 25, "same")
    from lapbalance.track import Corner

    corners, pos = [], 0.0
    for j, (s, kk) in enumerate(segs):
        if kk != 0.0:
            corners.append(Corner(len(corners) + 1, "left" if kk > 0 else "right", pos,
                                  pos + s / 2, pos + s, 1 / abs(kk)))
        pos += s
    return analytic_track(k, ds=1.0, closed=False, corners=corners, name="five corners")


def test_tall_car_ground_split_has_smaller_margin_in_every_fast_corner():
    """The scenario the tool exists for: a tall, short-wheelbase car whose tunnel balance,
    read with the wheels restrained, says 50 % front. Entered as what it is
    (``balance_convention = "ground"``) the on-track (CG-convention) split is front-biased:
    the restraint reacted the drag at the ground, so the scales read D h/L too little on the
    front and too much on the rear (Gillespie ch. 1, moments about the contact points; the
    correction front += D h/L, rear -= D h/L is docs/method.md's convention table). Taken at
    face value as a CG split, the same numbers put D h/L more load on the rear at every speed.

    After a lift the rear keeps only its static and aero load, so the ground-entered car's rear
    has exactly D h/L less there at a given speed, and its rear saturates at a lower fraction
    of its limit. The difference grows with q: it is the fast corners where it must show.
    Thresholds play no part: the test compares margins.
    """
    track = _five_corners()
    res = {}
    for conv in ("ground", "cg"):
        r = simulate_lap(_tall_car(conv), track, start_speed_kph=100.0)
        res[conv] = {c["id"]: c for c in r.corners}
    # fast = slowest point at 150 km/h or more (engineering judgement: where a step-out is
    # hardest to catch)
    fast = [cid for cid, c in res["cg"].items() if c["min_speed_kph"] >= 150.0]
    assert len(fast) >= 3
    for cid in fast:
        g, c = res["ground"][cid], res["cg"][cid]
        assert g["liftoff_margin"] < c["liftoff_margin"] - 0.03, cid
    for cid in res["cg"]:  # slower corners: lambda may be 1 for both, the reserve still shows
        g, c = res["ground"][cid], res["cg"][cid]
        assert g["liftoff_margin"] <= c["liftoff_margin"], cid
        assert g["liftoff_rear_reserve"] < c["liftoff_rear_reserve"] - 0.02, cid
    # the mechanism, at one speed: after the same lift the rear load differs by D h/L
    v, kappa = 45.0, 1 / 220.0
    car_g, car_c = _tall_car("ground"), _tall_car("cg")
    p, gears, *_ = car_parameters(car_g)
    fo = K.overrun_force(v, p, gears)
    off_g = evaluate_forces(car_g, v, kappa, drive_n=-fo)
    off_c = evaluate_forces(car_c, v, kappa, drive_n=-fo)
    d_h_l = 0.5 * car_g.air.density * 1.5 * v * v * 0.88 / 2.25
    assert off_c["fzr"] - off_g["fzr"] == pytest.approx(d_h_l, rel=1e-9)
    assert off_g["ur"] > off_c["ur"]


def _margin_car(balance_front, downforce, overrun=110.0, wf=0.47, ls=0.08):
    # an invented rear-drive car with a high CG and strong engine braking, so that lifts near
    # the limit matter (margins below 1) over much of the sampled range
    return make_car(chassis={"front_weight_fraction": wf, "cg_height_m": 0.62},
                    aero={"downforce_area_m2": downforce, "drag_area_m2": 1.1,
                          "balance_front": balance_front},
                    tyres={"rolling_resistance": 0.012,
                           "front": {"peak_friction": 1.4, "load_sensitivity": ls},
                           "rear": {"peak_friction": 1.45, "load_sensitivity": ls}},
                    powertrain={"overrun_torque_nm": overrun,
                                "gear_ratios": [3.0, 2.1, 1.6, 1.25, 1.0],
                                "final_drive": 3.6, "shift_rpm": 7000.0})


TOL = 2e-4  # search tolerance on the margin (usage within 1e-5 of 1, speed within 5e-4 m/s)
PROPS = settings(max_examples=40, deadline=None)


@PROPS
@given(f=st.floats(0.30, 0.60), d=st.floats(0.01, 0.15), total=st.floats(0.5, 3.5),
       radius=st.floats(40.0, 400.0))
def test_rearward_cg_balance_never_lowers_the_margin_where_the_front_limits(f, d, total,
                                                                             radius):
    # Source: the axle-load equation (Gillespie ch. 1): moving the CG-convention split rearward
    # at constant total takes load off the front (the limit a_y cannot rise while the front
    # limits) and puts it on the rear (the rear after the lift carries more, its capacity is
    # non-decreasing in load), so a_y,safe / a_y,limit cannot fall.
    a = liftoff.margin_at(_margin_car(f, total), 1 / radius)
    b = liftoff.margin_at(_margin_car(f - d, total), 1 / radius)
    assume(a["limiting_axle"] == "front" and b["limiting_axle"] == "front")
    assert b["margin"] >= a["margin"] - TOL
    if b["margin"] < 1.0:  # (the safe speed is capped at the limit, which may fall)
        assert b["safe_speed_mps"] >= a["safe_speed_mps"] - 1e-3


@PROPS
@given(f=st.floats(0.30, 0.65), total=st.floats(0.3, 3.0), extra=st.floats(0.05, 1.0),
       radius=st.floats(40.0, 400.0))
def test_more_rear_downforce_never_lowers_the_margin_where_the_front_limits(f, total, extra,
                                                                            radius):
    # Source: the axle-load equation (Gillespie ch. 1): rear downforce added with the front
    # unchanged loads only the rear; while the front limits, the steady limit is unchanged and
    # the rear after the lift can only hold more.
    front = f * total
    a = liftoff.margin_at(_margin_car(f, total), 1 / radius)
    b = liftoff.margin_at(_margin_car(front / (total + extra), total + extra), 1 / radius)
    assume(a["limiting_axle"] == "front" and b["limiting_axle"] == "front")
    assert b["margin"] >= a["margin"] - TOL
    if b["margin"] < 1.0:
        assert b["safe_speed_mps"] >= a["safe_speed_mps"] - 1e-3


@PROPS
@given(f=st.floats(0.25, 0.65), total=st.floats(-0.3, 3.0), t1=st.floats(0.0, 150.0),
       dt=st.floats(1.0, 150.0), radius=st.floats(30.0, 400.0), wf=st.floats(0.40, 0.60))
def test_more_engine_overrun_never_raises_the_margin(f, total, t1, dt, radius, wf):
    # Source: the axle-load equation (Gillespie ch. 1): more overrun makes the ground force more
    # negative (load moves forward, off the rear) and adds to the driven rear axle's
    # longitudinal demand; the steady limit does not involve the overrun at all.
    a = liftoff.margin_at(_margin_car(f, total, overrun=t1, wf=wf), 1 / radius)
    b = liftoff.margin_at(_margin_car(f, total, overrun=t1 + dt, wf=wf), 1 / radius)
    assert b["limit_speed_mps"] == pytest.approx(a["limit_speed_mps"], abs=1e-9)
    assert b["margin"] <= a["margin"] + TOL
    assert b["safe_speed_mps"] <= a["safe_speed_mps"] + 1e-3


def test_where_the_rear_limits_more_rear_downforce_lowers_the_fraction():
    r"""Where the rear axle sets the steady limit, the margin as a fraction can fall when rear
    downforce is added, although the safe-lift speed rises. Closed form of
    test_margin_matches_closed_form with X = ClA_r and kk = mu rho / 2:
    lambda = v_s^2 / v_r^2 = (s - kk X) / (e - kk X) with s = sqrt(c^2 + e^2) - kk CdA h/L, so
    d lambda / dX = kk (s - e) / (e - kk X)^2, negative whenever lambda < 1 (s < e). The added
    rear load raises the limit more (relatively) than the safe-lift speed. The monotonic
    properties above are therefore stated where the front limits.
    """
    ch = _closed_form_car().chassis
    args = (ch.mass, ch.wheelbase, ch.front_weight_fraction, ch.cg_height)
    lo = _closed_form_margin(*args, 1.3, 0.7, 1.0, 1.4, 150.0)
    hi = _closed_form_margin(*args, 1.3, 0.8, 1.0, 1.4, 150.0)
    assert lo[0] < 1.0 and hi[1] > lo[1] and hi[2] > lo[2]  # rear-limited; both speeds rise
    assert hi[0] < lo[0]
    # the solver agrees (same car, same two rear areas)
    m_lo = liftoff.margin_at(_closed_form_car(1.3 / 2.0, 2.0), 1 / 150.0)
    m_hi = liftoff.margin_at(_closed_form_car(1.3 / 2.1, 2.1), 1 / 150.0)
    assert m_lo["limiting_axle"] == "rear" and m_hi["limiting_axle"] == "rear"
    assert m_lo["margin"] == pytest.approx(lo[0], abs=1e-4)
    assert m_hi["margin"] == pytest.approx(hi[0], abs=1e-4)


def test_margin_kernel_compiled_equals_python():
    # Source: compiled vs uncompiled run of the same search (parity).
    car = _margin_car(0.6, 2.0, overrun=80.0)
    p, gears, trpm, tnm = car_parameters(car)
    k = np.full(40, 1 / 90.0)
    k[20:] = 1 / 140.0
    z = np.zeros(40)
    vlim = K.corner_limits_serial(k, z, z, 90.0, p, 1e-3, 1)
    checked = np.ones(40)
    checked[5] = 0.0
    a = K.liftoff_margins_serial(k, z, z, vlim, checked, p, gears, 5e-4, 2)
    b = K.liftoff_margins.py_func(k, z, z, vlim, checked, p, gears, 5e-4, 2)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)
    assert np.all(np.isnan(a[5])) and np.isfinite(a[6]).all()


def test_warm_started_margins_equal_a_cold_search():
    # Source: definition (the warm start changes the work, not the answer, up to tolerance).
    car = _margin_car(0.62, 2.0, overrun=80.0)
    p, gears, trpm, tnm = car_parameters(car)
    k = np.linspace(1 / 200.0, 1 / 60.0, 60)
    z = np.zeros(60)
    vlim = K.corner_limits_serial(k, z, z, 90.0, p, 1e-3, 1)
    warm = K.liftoff_margins_serial(k, z, z, vlim, np.ones(60), p, gears, 5e-4, 1)
    out = np.empty(K.NOUT)
    for i in range(0, 60, 7):
        vs, _ = K.liftoff_safe_speed(k[i], 0.0, 0.0, vlim[i], 0.0, 0, p, gears,
                                     out, 5e-4)
        assert warm[i, K.M_VSAFE] == pytest.approx(vs, abs=2e-3)
    assert np.any(warm[:, K.M_LAMBDA] < 1.0)


def test_no_safe_speed_gives_zero_and_clamped_reserve():
    # Source: definition: when even the slowest trial speed saturates the rear after a lift
    # (an absurd engine braking in first gear), no fraction of the limit is safe.
    car = _margin_car(0.5, 1.0, overrun=2000.0)
    m = liftoff.margin_at(car, 1 / 40.0)
    assert m["margin"] == 0.0 and m["safe_speed_mps"] == 0.0
    assert m["rear_reserve"] == -1.0


def test_banked_margin_uses_lateral_acceleration_not_speed():
    # Source: road-plane lateral acceleration on a bank, a_y = v^2 k cos(phi) - g sin(phi)
    # (force balance in the road plane; ISO 8855 axes): the margin is the ratio of a_y, so at
    # the same speeds it is below the ratio of v^2 on a bank that helps the turn.
    car = _closed_form_car(0.62)
    bank = math.radians(6.0)
    m = liftoff.margin_at(car, 1 / 150.0, bank=bank)
    vs, vl = m["safe_speed_mps"], m["limit_speed_mps"]
    ay = [v * v / 150.0 * math.cos(bank) - G0 * math.sin(bank) for v in (vs, vl)]
    assert m["margin"] == pytest.approx(ay[0] / ay[1], abs=1e-9)
    assert m["margin"] < (vs / vl) ** 2


def test_corner_ranking_and_verdicts_follow_the_margin():
    # Source: the documented verdict rules (liftoff module doc); no physics value involved.
    t = liftoff.Thresholds()
    assert liftoff.verdict(0.85, -0.1, t)[0] == "lift-critical"
    assert liftoff.verdict(0.93, -0.06, t)[0] == "lift-marginal"
    assert liftoff.verdict(0.97, -0.03, t)[0] == "lift-close"
    assert liftoff.verdict(1.0, 0.02, t)[0] == "lift-close"
    assert liftoff.verdict(1.0, 0.08, t)[0] == "lift-safe"
    assert liftoff.verdict(None, None, t)[0] == "not-checked"
    rows = [{"id": 1, "liftoff_margin": 1.0, "liftoff_rear_reserve": 0.2,
             "liftoff_verdict": "lift-safe"},
            {"id": 2, "liftoff_margin": 0.93, "liftoff_rear_reserve": -0.06,
             "liftoff_verdict": "lift-marginal"},
            {"id": 3, "liftoff_margin": None, "liftoff_rear_reserve": None,
             "liftoff_verdict": "not-checked"},
            {"id": 4, "liftoff_margin": 0.85, "liftoff_rear_reserve": -0.1,
             "liftoff_verdict": "lift-critical"},
            {"id": 5, "liftoff_margin": 1.0, "liftoff_rear_reserve": 0.03,
             "liftoff_verdict": "lift-close"}]
    assert [c["id"] for c in liftoff.ranked(rows)] == [4, 2, 5, 1, 3]
    assert [c["id"] for c in liftoff.flagged(rows)] == [4, 2]
    assert liftoff.smallest_margin(rows) == 0.85


def test_lap_corner_rows_carry_margin_rank_and_tightest_step():
    # Source: definition: a corner's margin is the smallest over its checked steps, and its
    # tightest step is where that minimum sits.
    track = _five_corners()
    r = simulate_lap(_tall_car("ground"), track, start_speed_kph=100.0)
    ch = r.channels
    for c in r.corners:
        mask = (ch["distance_m"] >= c["entry_m"]) & (ch["distance_m"] <= c["exit_m"])
        vals = ch["liftoff_step_margin"][mask & (ch["liftoff_checked"] > 0)]
        assert c["liftoff_margin"] == pytest.approx(float(np.nanmin(vals)), abs=1e-12)
        t = c["liftoff_tightest"]
        assert t["margin"] == c["liftoff_margin"]
        assert t["speed_margin_kph"] == pytest.approx(
            t["limit_speed_kph"] - t["safe_speed_kph"], abs=1e-9)
    ranks = sorted(c["liftoff_rank"] for c in r.corners)
    assert ranks == list(range(1, len(r.corners) + 1))
    first = min(r.corners, key=lambda c: c["liftoff_rank"])
    assert first["liftoff_margin"] == liftoff.smallest_margin(r.corners)


def test_response_curve_follows_iso_9816_stepping_and_matches_single_states():
    # Source: ISO 9816:2018 initial condition (steady turn from about 4 m/s², steps of at most
    # 0.5 m/s² where the response changes quickly); each point is one steady state evaluated
    # with lapbalance.lap.evaluate_forces (same axle-load equation, Gillespie ch. 1).
    car = _margin_car(0.6, 2.0, overrun=80.0)
    cur = liftoff.response_curve(car, 120.0)
    ay = cur.columns["ay_initial_mps2"]
    assert ay[0] == pytest.approx(4.0)
    assert np.all(np.diff(ay) <= 0.5 + 1e-12) and np.all(np.diff(ay) > 0)
    assert ay[-1] == pytest.approx(cur.limit_speed_mps ** 2 / 120.0, rel=1e-9)
    i = len(ay) // 2
    v = cur.columns["speed_kph"][i] / 3.6
    assert v * v / 120.0 == pytest.approx(ay[i], rel=1e-9)
    p, gears, *_ = car_parameters(car)
    off = evaluate_forces(car, v, 1 / 120.0, drive_n=-K.overrun_force(v, p, gears))
    assert cur.columns["usage_rear_off"][i] == pytest.approx(off["ur"], rel=1e-12)
    assert cur.columns["front_share_off"][i] == pytest.approx(
        off["fzf"] / (off["fzf"] + off["fzr"]), rel=1e-12)
    # the rear after the lift reaches 1 where the margin says
    ur = cur.columns["usage_rear_off"]
    if cur.margin < 1.0:
        a_safe = cur.margin * ay[-1]
        assert np.all(ur[ay < a_safe - 0.05] <= 1.0)
        assert ur[-1] > 1.0
    text = cur.csv_text().splitlines()
    assert text[0].split(",") == list(liftoff.RESPONSE_COLUMNS)
    assert len(text) == len(ay) + 1


def test_liftoff_does_not_import_the_lap_solver():
    # Source: the module layout (lap imports liftoff; liftoff never imports lap), checked in a
    # fresh interpreter so that nothing else has imported the solver first.
    import subprocess
    import sys

    code = ("import sys, lapbalance.liftoff; "
            "print(any(m == 'lapbalance.lap' for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"


def test_compare_reports_margin_and_its_delta_per_corner():
    # Source: definition (compare's delta = variant minus base, per corner).
    from lapbalance.compare import compare

    track = _five_corners()
    res = compare(_tall_car("cg"), [_tall_car("ground")], [track], ["cg", "ground"],
                  simulate_options={"start_speed_kph": 100.0})
    laps = {lab: {c["id"]: c for c in lap.corners}
            for lab, lap in zip(res.labels, res.laps[0], strict=True)}
    segs = [s for s in res.segments if s["car"] == "ground" and s["kind"] == "corner"]
    assert segs
    for s in segs:
        g, c = laps["ground"][s["corner_id"]], laps["cg"][s["corner_id"]]
        assert s["liftoff_margin"] == g["liftoff_margin"]
        assert s["liftoff_margin_delta"] == pytest.approx(g["liftoff_margin"]
                                                          - c["liftoff_margin"], abs=1e-12)
        assert s["liftoff_rear_reserve_delta"] < 0.0
    summ = {r["car"]: r for r in res.summary}
    assert summ["cg"]["liftoff_margin_delta"] == 0.0
    assert summ["ground"]["liftoff_margin_delta"] < -0.03


@pytest.mark.parametrize("car_file", ["gt_coupe.toml", "single_seater.toml",
                                      "single_seater_mapped.toml"])
def test_warm_margins_on_a_varying_curvature_lap_equal_cold_searches(car_file):
    # Source: definition, as above, on a circuit whose curvature varies at every step (the
    # warm start predicts each safe speed from the neighbours' in ln|curvature|): at every
    # checked step the safe speed agrees with a search from scratch to two tolerances, the
    # lift there keeps the rear (u_r <= 1) and one tolerance above it does not.
    from lapbalance.car import load_car
    from tests.helpers import wavy_circuit

    car = load_car(Path(__file__).resolve().parents[1] / "examples" / car_file)
    p, gears, trpm, tnm = car_parameters(car)
    tr = wavy_circuit(2000.0, 1.0, seed=3)
    k = np.ascontiguousarray(tr.curvature_1pm)
    z = np.zeros(len(k))
    vlim = K.corner_limits_serial(k, z, z, 90.0, p, 1e-3, 1)
    checked = (vlim < 90.0).astype(float)
    warm = K.liftoff_margins_serial(k, z, z, vlim, checked, p, gears, 5e-4, 3)
    out = np.empty(K.NOUT)
    unsafe = 0
    for i in np.flatnonzero(checked):
        for coast, col in ((0.0, K.M_VSAFE), (1.0, K.M_VSAFE_COAST)):
            vs = warm[i, col]
            cold, _ = K.liftoff_safe_speed(k[i], 0.0, 0.0, vlim[i], 0.0, coast, p, gears,
                                           out, 5e-4)
            assert vs == pytest.approx(cold, abs=1e-3), (i, coast)
            if vs <= 0.0:
                continue
            K.lift_state(vs, k[i], 0.0, 0.0, coast, p, gears, out)
            assert out[K.O_UR] <= 1.0 + 1e-12
            if vs < vlim[i]:
                unsafe += 1
                K.lift_state(vs + 5e-4, k[i], 0.0, 0.0, coast, p, gears, out)
                assert out[K.O_UR] > 1.0 - 2e-5
    assert unsafe > 50
