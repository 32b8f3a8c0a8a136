"""Tyre grip: load sensitivity, axle capacity and the friction ellipse."""

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from lapbalance import tyre
from tests.reference_cases import CASES, ids, magic_formula_peak_car_tyre


@pytest.mark.parametrize("cid", ids("tyre.linear"))
def test_linear_load_sensitivity_generic(cid):
    # Source: normalised linear load sensitivity mu = mu0 (1 - k (Fz - Fz0)/Fz0) (common
    # practice form of the linear model, Milliken & Milliken RCVD ch. 2), mu0=1.6, Fz0=3000 N,
    # k=0.10 ("tyre.linear" in tests/reference_cases.py).
    assert CASES[cid].value() == CASES[cid].approx()


def test_axle_capacity_loss_from_lateral_transfer_rcvd_fit():
    # Source: least-squares fit to Milliken & Milliken (1995) Fig. 2.9 data (our fit):
    # mu = 1.245000 - 3.247240e-5 Fz; axle 8000 N: 8920.8831 N without transfer,
    # 8661.1039 N with dFz = 2000 N (loss 2|b| dFz^2 = 259.7792 N) ("tyre.rcvd_axle").
    for cid in ids("tyre.rcvd_axle"):
        assert CASES[cid].value() == CASES[cid].approx(), cid


@pytest.mark.parametrize("cid", ids("tyre.ellipse"))
def test_friction_ellipse_available_force(cid):
    # Source: friction ellipse (common practice in point-mass lap simulation, e.g. Lenzo &
    # Rossi 2020): Fx_max = 6000 N, Fy_max = 6500 N ("tyre.ellipse").
    case = CASES[cid]
    fy = float(cid.split(".", 2)[2])
    assert case.value() == case.approx()
    assert tyre.usage(case.expected, fy, 6000.0, 6500.0) == pytest.approx(1.0, abs=1e-7)


@given(fz=st.floats(0, 1e5), k=st.floats(0, 0.9), fz0=st.floats(500, 1e4))
def test_capacity_never_falls_with_load(fz, k, fz0):
    # Source: docs/method.md, tyre capacity (held at its peak); monotone by construction.
    c1 = tyre.tyre_capacity(fz, 1.5, k, fz0)
    c2 = tyre.tyre_capacity(fz * 1.01 + 1.0, 1.5, k, fz0)
    assert c2 >= c1 - 1e-9
    assert math.isfinite(c1) and c1 >= 0


def test_peak_load_of_rcvd_fit():
    # Source: peak of (a + b Fz) Fz at Fz = -a/(2b) = 19170.12 N for the RCVD Fig. 2.9 fit
    # ("tyre.rcvd_peak_load").
    case = CASES["tyre.rcvd_peak_load"]
    assert case.value() == case.approx()


def test_unloaded_wheel_has_no_capacity():
    # Source: definition (a wheel off the ground carries no force).
    assert tyre.tyre_capacity(0.0, 1.5, 0.1, 3000.0) == 0.0
    assert tyre.tyre_capacity(-10.0, 1.5, 0.1, 3000.0) == 0.0


def test_magic_formula_peak_option_maps_to_linear_law():
    # Source: Pacejka, Tire and Vehicle Dynamics, ch. 4 (from memory): mu = pD1 + pD2 dfz,
    # dfz = (Fz - Fz0)/Fz0 -- the normalised linear law with mu0 = pD1, k = -pD2/pD1.
    t = magic_formula_peak_car_tyre()
    assert (t.mu_lateral, t.mu_longitudinal) == (1.5, 1.6)
    assert t.k_lateral == pytest.approx(0.1) and t.k_longitudinal == pytest.approx(0.05)
    # at 4500 N: mu = 1.5 - 0.15 * 0.5 = 1.425 ("tyre.magic_formula_peak")
    case = CASES["tyre.magic_formula_peak"]
    assert case.value() == case.approx()


@given(fz=st.floats(-100, 1e5), k=st.floats(0, 0.9), fz0=st.floats(500, 1e4))
def test_precomputed_load_factor_equals_capacity_law(fz, k, fz0):
    # Source: algebraic identity mu0 Fz (1 - k (Fz - Fz0)/Fz0) = mu0 Fz ((1 + k) - (k/Fz0) Fz);
    # the solver's division-free form must match the documented law to rounding.
    peak = tyre.peak_load(k, fz0)
    fast = 1.5 * tyre.load_factor(fz, 1.0 + k, k / fz0, peak)
    assert fast == pytest.approx(tyre.tyre_capacity(fz, 1.5, k, fz0), rel=1e-12, abs=1e-9)
