"""Aero conventions, SAE J1594 helpers, pitching-moment transfer and centre of pressure."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance import aero
from tests.reference_cases import CASES, CD, HD, WB, A, drag_free_split, ids, three_bookkeepings

# --------------------------------------------------------------------------------------------
# SAE J1594 round trip
# --------------------------------------------------------------------------------------------


# Source: public wind-tunnel data set publishing CL, CPM, CLF, CLR together
# (huggingface.co/datasets/rvalerio/windtunnel, file 2/coeff.json), which obeys the SAE J1594
# split C_LF = C_L/2 + C_PM, C_LR = C_L/2 - C_PM to the printed 7 decimals (the last digit of
# C_LF differs by 1 from rounding, hence abs 2e-7).
def test_j1594_split_matches_public_data_set_row():
    # values in tests/reference_cases.py ("aero.j1594_dataset")
    for cid in ids("aero.j1594_dataset"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


# Source: SAE J1594 (2010) split is linear and invertible; round trip holds to rounding.
@given(cl=st.floats(-5, 5), cpm=st.floats(-2, 2))
def test_j1594_round_trip(cl, cpm):
    clf, clr = aero.j1594_axle_lift_coefficients(cl, cpm)
    cl2, cpm2 = aero.j1594_total_and_moment(clf, clr)
    assert cl2 == pytest.approx(cl, abs=1e-12)
    assert cpm2 == pytest.approx(cpm, abs=1e-12)


# --------------------------------------------------------------------------------------------
# Ground -> CG convention
# --------------------------------------------------------------------------------------------


def _ground_and_cg_from_force_system(f1, s1, f2, s2, drag, h_drag, cg_height, wheelbase):
    """First principles (Gillespie ch. 1: moments about a tyre contact point).

    Two vertical downforces f1, f2 [N] at s1, s2 [m] behind the front axle and a drag [N] at
    h_drag [m]. The ground reading reacts the drag at the ground, the CG convention at h_cg.
    """
    L = wheelbase
    front_free = (f1 * (L - s1) + f2 * (L - s2)) / L
    rear_free = (f1 * s1 + f2 * s2) / L
    ground = (front_free - drag * h_drag / L, rear_free + drag * h_drag / L)
    cg = (front_free - drag * (h_drag - cg_height) / L,
          rear_free + drag * (h_drag - cg_height) / L)
    return ground, cg


# Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), ch. 1 axle-load equation
# (moments about the contact points): reacting the drag at the ground instead of at CG height
# moves exactly D h_cg / L from front to rear, whatever the drag's height; total unchanged.
@given(f1=st.floats(0, 5000), s1=st.floats(-0.5, 3.5), f2=st.floats(0, 5000),
       s2=st.floats(-0.5, 3.5), drag=st.floats(0, 3000), h_drag=st.floats(0.0, 1.2),
       cg=st.floats(0.1, 0.8), L=st.floats(1.5, 4.0))
def test_ground_to_cg_shift_is_d_hcg_over_l_for_any_drag_height(f1, s1, f2, s2, drag, h_drag,
                                                               cg, L):
    (fg, rg), (fc, rc) = _ground_and_cg_from_force_system(f1, s1, f2, s2, drag, h_drag, cg, L)
    f, r = aero.to_cg_convention(fg, rg, drag, cg, L, "ground")
    assert f - fg == pytest.approx(drag * cg / L, rel=1e-9, abs=1e-9)
    assert rg - r == pytest.approx(drag * cg / L, rel=1e-9, abs=1e-9)
    assert f == pytest.approx(fc, rel=1e-9, abs=1e-6)
    assert r == pytest.approx(rc, rel=1e-9, abs=1e-6)
    assert f + r == pytest.approx(fg + rg, rel=1e-12, abs=1e-9)
    back = aero.from_cg_convention(f, r, drag, cg, L, "ground")
    assert back[0] == pytest.approx(fg, rel=1e-9, abs=1e-6)


# Source: Gillespie ch. 1 (moments about a contact point): a restraint at height z moves
# D (h_cg - z)/L; z = h_cg needs no correction, z = 0 equals the ground convention.
def test_restraint_shift_limits():
    assert aero.restraint_shift(1000.0, 0.4, 2.5, 0.4) == 0.0
    for cid in ids("aero.restraint_shift"):  # 160 N; 620 / 580 N with z = 0.1 m
        assert CASES[cid].value() == CASES[cid].approx(), cid


def test_unknown_convention_raises():
    with pytest.raises(ValueError, match="unknown convention"):
        aero.to_cg_convention(1.0, 1.0, 1.0, 0.4, 2.5, "wheels")


# --------------------------------------------------------------------------------------------
# Wheel-restrained balance worked example
# --------------------------------------------------------------------------------------------

# Source: derived from SAE J1594 (2010) ground-referenced coefficients and moments about the
# contact point (Gillespie ch. 1); worked example with C_L = -3.00, C_D = 1.00, A = 1.5 m²,
# WB = 3.0 m, h_D = 0.35 m, measured C_LF = -1.20, C_LR = -1.80; drag-free C_LF = -1.316667,
# C_LR = -1.683333, front share 40.0000 % -> 43.8889 %, C_PM 0.300000 -> 0.183333; at
# v = 50 m/s, rho = 1.225: front downforce 2756.2500 N measured, 3024.2188 N drag-free,
# drag couple 267.9688 N per axle. Printed to 6-7 figures (rel 1e-5).
# (inputs WB, HD, CD, A and the values are in tests/reference_cases.py, "aero.restrained")


@pytest.mark.parametrize("cg_height", [0.25, 0.30, 0.45])
def test_restrained_balance_worked_example_drag_free_split(cg_height):
    # the drag-free split does not depend on the CG height; the registry shows h_cg = 0.30 m
    clf, clr, share, xcp = drag_free_split(cg_height)
    assert clf == CASES["aero.restrained.clf_drag_free"].approx()
    assert clr == CASES["aero.restrained.clr_drag_free"].approx()
    assert share == CASES["aero.restrained.balance_drag_free"].approx()
    # the vertical centre of pressure sits at L * rear share behind the front axle
    assert xcp == CASES["aero.restrained.centre_of_pressure"].approx()
    case = CASES["aero.restrained.balance_measured"]
    assert case.value() == case.approx()
    for cid in ("aero.restrained.clf_drag_free", "aero.restrained.clr_drag_free",
                "aero.restrained.balance_drag_free", "aero.restrained.centre_of_pressure"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


def test_restrained_balance_worked_example_moment_coefficient_and_forces():
    for cid in ("aero.restrained.cl", "aero.restrained.cpm", "aero.restrained.cpm_drag_free",
                "aero.restrained.q", "aero.restrained.couple"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    q = aero.dynamic_pressure(1.225, 50.0)
    drag = q * A * CD
    assert q * A * 1.20 == CASES["tunnel.worked.front_measured"].approx()
    assert q * A * 1.20 + drag * HD / WB == CASES["tunnel.worked.front_corrected"].approx()


# Source: same derivation, reverse case for the car of the per-component example (L = 2.7 m,
# h_cg = 0.45 m, h_a = 0.40 m, CdA = 0.85 m², ClA = 2.0 m², drag-free front share 0.40): a
# wheel-restrained balance would show front C_LF·A = -0.674074 m², rear C_LR·A = -1.325926 m²,
# apparent front share 33.7037 %. Printed to 6 figures.
def test_wheel_restrained_reading_of_known_car():
    # drag-free split = split with the drag reacted at its own height (restraint at h_a)
    for cid in ids("aero.known_car_ground"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


# --------------------------------------------------------------------------------------------
# Axle loads: three book-keepings agree
# --------------------------------------------------------------------------------------------

# Source: Gillespie ch. 1 axle-load equation, per-component worked example (derived): m = 1300
# kg, L = 2.7, front axle->CG 1.40, CG->rear axle 1.30, h = 0.45, h_a = 0.40, CdA = 0.85,
# ClA = 2.0 with drag-free front share 0.40, v = 50 m/s, rho = 1.225, a_x = -10 m/s²:
# front 9337.0791 N, rear 6474.0659 N, sum 15811.1450 N; net ground force -11698.4375 N.
def test_axle_loads_three_bookkeepings_agree():
    # (A) drag-free split + inertial transfer m a_x h / L + drag pitch D h_a / L;
    # (B) CG convention + ground-force transfer X h / L (docs/method.md, axle loads);
    # (C) ground convention (wheel-restrained / J1594) + inertial transfer m a_x h / L.
    # Computed in tests/reference_cases.py (three_bookkeepings), values "aero.bookkeeping".
    for cid in ids("aero.bookkeeping"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    (a, b, c), _ = three_bookkeepings()
    assert a == pytest.approx(b, rel=1e-12) and b == pytest.approx(c, rel=1e-12)


# --------------------------------------------------------------------------------------------
# Pitching moment transfer and the CFD (force + moment) route
# --------------------------------------------------------------------------------------------


# Source: derived (r x F, SAE J1594 axes x rearward, z up; moments about a contact point,
# Gillespie ch. 1): a pure drag at height z_p, reacted at the ground, unloads the front axle by
# D z_p / L and loads the rear by the same.
def test_pure_drag_at_height_unloads_front_by_d_z_over_l():
    D, zp, L = 1200.0, 0.5, 3.0
    pm_mid = aero.pitch_moment_about_mid(0.0, 0.0, D, 0.7, zp)
    assert pm_mid == pytest.approx(D * zp, rel=1e-12)
    f, r = aero.ground_split_from_force_and_moment(0.0, pm_mid, L)
    assert f == pytest.approx(-D * zp / L, rel=1e-12)
    assert r == pytest.approx(D * zp / L, rel=1e-12)


# Source: derived (r x F, SAE J1594 axes): a lift acting at x_p behind mid-wheelbase makes a
# nose-down moment -x_p L about the mid point; a lift at the rear axle (x_p = L/2) loads only
# the rear axle (lever rule).
def test_lift_at_rear_axle_goes_to_rear_only():
    L = 2.8
    lift = -4000.0  # 4000 N downforce
    pm_mid = aero.pitch_moment_about_mid(0.0, lift, 0.0, L / 2, 0.0)
    f, r = aero.ground_split_from_force_and_moment(lift, pm_mid, L)
    assert f == pytest.approx(0.0, abs=1e-9)
    assert r == pytest.approx(4000.0, rel=1e-12)


def _moment_about(x0, z0, forces):
    """Pitching moment [N m] (J1594: about +y right, x rearward, z up) about (x0, z0)."""
    return sum((z - z0) * fx - (x - x0) * fz for x, z, fx, fz in forces)


# Source: derived; the J1594 route (C_PM about the ground mid-wheelbase point, C_LF = C_L/2 +
# C_PM) and the moment-transfer route must give the same CG-convention split for one force
# system, and both must equal moments about the contact points (Gillespie ch. 1).
@settings(max_examples=200)
@given(f1=st.floats(0, 6000), s1=st.floats(-0.5, 3.5), f2=st.floats(-1000, 6000),
       s2=st.floats(-0.5, 3.5), drag=st.floats(0, 3000), h_drag=st.floats(0.0, 1.2),
       x_p=st.floats(-3, 3), z_p=st.floats(-1, 2), cg=st.floats(0.1, 0.8),
       L=st.floats(1.5, 4.0))
def test_moment_route_equals_j1594_route_equals_first_principles(f1, s1, f2, s2, drag, h_drag,
                                                                  x_p, z_p, cg, L):
    # forces on the car in J1594 axes: (x from mid-wheelbase rearward, z, Fx, Fz)
    forces = [(s1 - L / 2, 0.3, 0.0, -f1), (s2 - L / 2, 0.1, 0.0, -f2),
              (0.2, h_drag, drag, 0.0)]
    lift = -(f1 + f2)
    pm_p = _moment_about(x_p, z_p, forces)
    f_m, r_m = aero.split_from_force_and_moment(lift, drag, pm_p, x_p, z_p, L, cg)
    # J1594 route in coefficients with an arbitrary q A
    qa = 2345.6
    cf, cr = aero.split_from_coefficients(lift / qa, drag / qa,
                                          _moment_about(0.0, 0.0, forces) / (qa * L), L, cg)
    (_, _), (fc, rc) = _ground_and_cg_from_force_system(f1, s1, f2, s2, drag, h_drag, cg, L)
    scale = 1.0 + abs(f1) + abs(f2) + drag
    for a, b in ((f_m, fc), (r_m, rc), (cf * qa, fc), (cr * qa, rc)):
        assert a == pytest.approx(b, abs=1e-9 * scale)


# --------------------------------------------------------------------------------------------
# Vertical centre of pressure
# --------------------------------------------------------------------------------------------


# Source: lever rule (statics): the vertical aero force alone acts at the downforce-weighted
# mean position of its parts, whatever the drag and CG heights.
@given(f1=st.floats(100, 6000), s1=st.floats(0, 3), f2=st.floats(100, 6000),
       s2=st.floats(0, 3), drag=st.floats(0, 3000), h_drag=st.floats(0.0, 1.2),
       cg=st.floats(0.1, 0.8))
def test_vertical_centre_of_pressure_is_lever_rule(f1, s1, f2, s2, drag, h_drag, cg):
    L = 3.0
    _, (fc, rc) = _ground_and_cg_from_force_system(f1, s1, f2, s2, drag, h_drag, cg, L)
    xcp = aero.vertical_centre_of_pressure(fc, rc, drag, cg, h_drag, L)
    assert xcp == pytest.approx((f1 * s1 + f2 * s2) / (f1 + f2), rel=1e-9, abs=1e-9)


def test_vertical_centre_of_pressure_nan_without_downforce():
    assert math.isnan(aero.vertical_centre_of_pressure(0.0, 0.0, 0.0, 0.3, 0.5, 3.0))
