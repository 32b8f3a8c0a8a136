"""Axle-load decomposition against Gillespie and Milliken worked cases, plus invariants."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance import loads
from lapbalance.units import G0
from tests.helpers import make_car
from tests.reference_cases import CASES, ids, longitudinal_transfer, milliken_lateral


def test_gillespie_axle_load_equation_with_drag_grade_and_acceleration():
    # Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992) ch. 1, general axle-load
    # equation evaluated for m=1200, L=2.6, b=1.2 (front axle to CG), c=1.4, h=0.5, CdA=0.7,
    # rho=1.225, v=40, drag height 0.6, a_x=2, grade 2 deg (values and inputs in
    # tests/reference_cases.py, "loads.gillespie"). Drag-free aero split with zero lift = a
    # restraint at the drag's own height (0.6 m).
    for cid in ids("loads.gillespie"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


def test_reference_breakdown_braking_with_downforce():
    # Source: per-part breakdown derived from Gillespie ch. 1 statics (docs/method.md, axle
    # loads): m=1300, L=2.7, b=1.4, c=1.3, h=0.45, drag height 0.4, CdA=0.85, ClA=2.0 drag-free
    # front share 0.4, v=50, rho=1.225, a_x=-10; sum = m g + q ClA ("loads.braking").
    for cid in ids("loads.braking"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


@pytest.mark.parametrize("cid", ids("loads.longitudinal"))
def test_longitudinal_transfer_m_a_h_over_l(cid):
    # Source: Gillespie ch. 1: dFz = m a h / L, m=1200, h=0.5, L=2.6 ("loads.longitudinal").
    case = CASES[cid]
    gt, front_loss = longitudinal_transfer(1.0 if cid.endswith(".1g") else 0.5)
    assert gt == case.value() == case.approx()
    assert front_loss == case.approx()


def test_milliken_lateral_transfer_per_axle():
    # Source: Milliken & Milliken, Race Car Vehicle Dynamics (SAE 1995) ch. 18 steady-state
    # lateral transfer with roll-centre heights and roll-stiffness split, evaluated for m=1200,
    # a_y=1 g, tf=1.60, tr=1.58, h=0.5, z_f=0.05, z_r=0.10, K_f/(K_f+K_r)=0.6, front axle to
    # CG 1.2, L=2.6; the roll-moment balance t_f dFz_f + t_r dFz_r = m a_y h is exact
    # ("loads.lateral").
    for cid in ids("loads.lateral"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    *_, lf, lr, status = milliken_lateral()
    assert (lf, lr, status) == (0.0, 0.0, loads.OK)


finite = st.floats(-1e4, 1e4, allow_nan=False)


@settings(max_examples=300, deadline=None)
@given(m=st.floats(100, 5000), wf=st.floats(0.2, 0.8), L=st.floats(1.5, 4.0),
       h=st.floats(0.1, 1.2), ay=st.floats(-30, 30), af=st.floats(-3e3, 3e4),
       ar=st.floats(-3e3, 3e4), x=st.floats(-5e4, 5e4), kf=st.floats(0, 1),
       zf=st.floats(-0.1, 0.5), zr=st.floats(-0.1, 0.5))
def test_load_parts_sum_and_no_nan(m, wf, L, h, ay, af, ar, x, kf, zf, zr):
    # Source: vertical force and roll-moment balance (Newton), exact to rounding.
    a, b = (1 - wf) * L, wf * L
    r = loads.axle_loads(m, G0, a, b, L, h, 1.6, 1.5, zf, zr, kf, ay, af, ar, x)
    (sf, sr, aef, aer, gt, dff, dfr, fzf, fzr, fo, fi, ro, ri, lf, lr, status) = r
    assert all(math.isfinite(v) for v in r)
    assert sf + aef - gt == pytest.approx(fzf, abs=1e-6)
    assert sr + aer + gt == pytest.approx(fzr, abs=1e-6)
    assert fzf + fzr == pytest.approx(m * G0 + af + ar, rel=1e-9, abs=1e-6)
    if status == loads.OK:
        assert fo + fi == pytest.approx(fzf, abs=1e-6)
        assert ro + ri == pytest.approx(fzr, abs=1e-6)
        assert min(fi, ri) >= -1e-6
        if lf == 0 and lr == 0:
            # transfers add up to the roll moment m a_y h
            assert 1.6 * dff + 1.5 * dfr == pytest.approx(m * abs(ay) * h, rel=1e-9, abs=1e-6)
        else:
            # a lifted wheel hands its axle's excess roll moment to the other axle
            assert 1.6 * dff + 1.5 * dfr == pytest.approx(m * abs(ay) * h, rel=1e-9, abs=1e-6)


def test_wheel_lift_moves_roll_moment_and_flags():
    # Source: roll-moment balance (docs/method.md, lateral transfer and wheel lift); exact.
    m, L, h = 1000.0, 2.5, 0.6
    fzf, fzr = 4000.0, 6000.0
    # all roll stiffness at the front: front would transfer more than half its load
    dff, dfr, lf, lr, status = loads.lateral_transfer(m, 9.0, 1.25, 1.25, L, h, 1.5, 1.5,
                                                      0.0, 0.0, 1.0, fzf, fzr)
    assert status == loads.OK and lf == 1.0 and lr == 0.0
    assert dff == pytest.approx(fzf / 2)
    assert 1.5 * dff + 1.5 * dfr == pytest.approx(m * 9.0 * h)


def test_both_axles_lifting_is_rollover():
    # Source: roll-moment balance: m a_y h above t_f Fz_f/2 + t_r Fz_r/2 cannot be reacted.
    m, h = 1000.0, 1.5
    fz = m * G0 / 2
    moment_capacity = 1.5 * fz / 2 * 2
    ay = 1.01 * moment_capacity / (m * h)
    *_, status = loads.lateral_transfer(m, ay, 1.25, 1.25, 2.5, h, 1.5, 1.5, 0.0, 0.0, 0.5,
                                        fz, fz)
    assert status == loads.ROLLOVER
    ay_ok = 0.99 * moment_capacity / (m * h)
    *_, status = loads.lateral_transfer(m, ay_ok, 1.25, 1.25, 2.5, h, 1.5, 1.5, 0.0, 0.0,
                                        0.5, fz, fz)
    assert status == loads.OK


def test_vectorised_wrapper_matches_scalar():
    # Source: same function; the wrapper must not change the numbers.
    car = make_car()
    ay = np.array([0.0, 5.0, -8.0])
    out = loads.axle_loads_array(car, ay, 100.0, 200.0, np.array([0.0, 1000.0, -2000.0]))
    ch = car.chassis
    for i in range(3):
        r = loads.axle_loads(ch.mass, G0, ch.a, ch.b, ch.wheelbase, ch.cg_height,
                             ch.track_front, ch.track_rear, 0.05, 0.10, 0.6, ay[i], 100.0,
                             200.0, [0.0, 1000.0, -2000.0][i])
        assert out["fz_front_n"][i] == r[7]
        assert out["lat_transfer_rear_n"][i] == r[6]
