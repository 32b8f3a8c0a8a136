"""Tyre grip: load sensitivity, axle capacity and the friction ellipse."""

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from lapbalance import tyre


@pytest.mark.parametrize("fz, expected", [(1500, 2520.0), (3000, 4800.0), (4500, 6840.0),
                                          (6000, 8640.0)])
def test_linear_load_sensitivity_generic(fz, expected):
    # Source: normalised linear load sensitivity mu = mu0 (1 - k (Fz - Fz0)/Fz0) (REFERENCES.md
    # §7b, common practice form of the linear model of theracingline.net), mu0=1.6,
    # Fz0=3000 N, k=0.10.
    assert tyre.tyre_capacity(float(fz), 1.6, 0.10, 3000.0) == pytest.approx(expected)


def test_axle_capacity_loss_from_lateral_transfer_rcvd_fit():
    # Source: least-squares fit to Milliken & Milliken (1995) Fig. 2.9 data (REFERENCES.md
    # §7b): mu = 1.245000 - 3.247240e-5 Fz; axle 8000 N: 8920.8831 N without transfer,
    # 8661.1039 N with dFz = 2000 N (loss 2|b| dFz^2 = 259.7792 N).
    a, b = 1.245000, -3.247240e-5
    fz0 = 4000.0
    mu0 = a + b * fz0
    k = -b * fz0 / mu0
    assert tyre.axle_capacity(4000.0, 4000.0, mu0, k, fz0) == pytest.approx(8920.8831, rel=1e-6)
    assert tyre.axle_capacity(6000.0, 2000.0, mu0, k, fz0) == pytest.approx(8661.1039, rel=1e-6)


@pytest.mark.parametrize("fy, expected", [(0.0, 6000.0), (3250.0, 5196.1524),
                                          (5000.0, 3833.8264), (6500.0, 0.0)])
def test_friction_ellipse_available_force(fy, expected):
    # Source: friction ellipse (REFERENCES.md §7c, common practice in point-mass lap
    # simulation): Fx_max = 6000 N, Fy_max = 6500 N.
    assert tyre.available_longitudinal(fy, 6000.0, 6500.0) == pytest.approx(expected, abs=1e-4)
    assert tyre.usage(expected, fy, 6000.0, 6500.0) == pytest.approx(1.0, abs=1e-7)


@given(fz=st.floats(0, 1e5), k=st.floats(0, 0.9), fz0=st.floats(500, 1e4))
def test_capacity_never_falls_with_load(fz, k, fz0):
    # Source: DESIGN.md rule (capacity held at its peak); monotonicity by construction.
    c1 = tyre.tyre_capacity(fz, 1.5, k, fz0)
    c2 = tyre.tyre_capacity(fz * 1.01 + 1.0, 1.5, k, fz0)
    assert c2 >= c1 - 1e-9
    assert math.isfinite(c1) and c1 >= 0


def test_peak_load_of_rcvd_fit():
    # Source: REFERENCES.md §7b: peak of (a + b Fz) Fz at Fz = -a/(2b) = 19170.12 N.
    a, b = 1.245000, -3.247240e-5
    fz0 = 4000.0
    mu0 = a + b * fz0
    assert tyre.peak_load(-b * fz0 / mu0, fz0) == pytest.approx(19170.12, rel=1e-6)


def test_unloaded_wheel_has_no_capacity():
    # Source: definition (a wheel off the ground carries no force).
    assert tyre.tyre_capacity(0.0, 1.5, 0.1, 3000.0) == 0.0
    assert tyre.tyre_capacity(-10.0, 1.5, 0.1, 3000.0) == 0.0


def test_magic_formula_peak_option_maps_to_linear_law():
    # Source: Pacejka, Tire and Vehicle Dynamics, ch. 4 (from memory): mu = pD1 + pD2 dfz,
    # dfz = (Fz - Fz0)/Fz0 -- the normalised linear law with mu0 = pD1, k = -pD2/pD1.
    from tests.helpers import make_car

    mf = make_car(tyres={"front": {"peak_friction": None, "model": "magic-formula-peak",
                                   "pdy1": 1.5, "pdy2": -0.15, "pdx1": 1.6, "pdx2": -0.08,
                                   "reference_load_n": 3000.0}})
    t = mf.tyres.front
    assert (t.mu_lateral, t.mu_longitudinal) == (1.5, 1.6)
    assert t.k_lateral == pytest.approx(0.1) and t.k_longitudinal == pytest.approx(0.05)
    # at 4500 N: mu = 1.5 - 0.15 * 0.5 = 1.425
    cap = tyre.tyre_capacity(4500.0, t.mu_lateral, t.k_lateral, t.reference_load)
    assert cap == pytest.approx(1.425 * 4500.0)


@given(fz=st.floats(-100, 1e5), k=st.floats(0, 0.9), fz0=st.floats(500, 1e4))
def test_precomputed_load_factor_equals_capacity_law(fz, k, fz0):
    # Source: algebraic identity mu0 Fz (1 - k (Fz - Fz0)/Fz0) = mu0 Fz ((1 + k) - (k/Fz0) Fz);
    # the solver's division-free form must match the documented law to rounding.
    peak = tyre.peak_load(k, fz0)
    fast = 1.5 * tyre.load_factor(fz, 1.0 + k, k / fz0, peak)
    assert fast == pytest.approx(tyre.tyre_capacity(fz, 1.5, k, fz0), rel=1e-12, abs=1e-9)
