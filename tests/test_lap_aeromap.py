"""The lap solver with a ride-height aero map."""

import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance import aeromap
from lapbalance import kernels as K
from lapbalance.car import load_car
from lapbalance.errors import PhysicsWarning
from lapbalance.lap import car_parameters, simulate_lap
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def loops():
    return load_track(ROOT / "tracks" / "kettlewick_loops.csv", step_m=2.0)


def test_kernel_lookup_equals_reference_bilinear():
    # Source: aeromap.bilinear (numpy reference of the clamped bilinear lookup); the kernel
    # must give the same numbers to rounding, inside and outside the grid.
    car = load_car(ROOT / "examples" / "single_seater_mapped.toml")
    amap = car.aero.aero_map
    p, gears, trpm, tnm = car_parameters(car)
    rng = np.random.default_rng(3)
    xs = rng.uniform(0.0, 0.06, 200)
    ys = rng.uniform(0.02, 0.10, 200)
    ref = aeromap.bilinear(amap.fine_rh_front_m, amap.fine_rh_rear_m, amap.fine_front_area_cg,
                           xs, ys)
    got = np.array([K.map_lookup(p, 0, x, y) for x, y in zip(xs, ys, strict=True)])
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-14)
    both = np.array([K.map_eval(p, x, y)[:3] for x, y in zip(xs, ys, strict=True)])
    np.testing.assert_allclose(both[:, 0], ref, rtol=1e-12, atol=1e-14)
    for k, table in ((1, amap.fine_rear_area_cg), (2, amap.fine_drag_area)):
        ref_k = aeromap.bilinear(amap.fine_rh_front_m, amap.fine_rh_rear_m, table, xs, ys)
        np.testing.assert_allclose(both[:, k], ref_k, rtol=1e-12, atol=1e-14)


def test_stiff_springs_map_equals_constant_coefficients(loops):
    # Source: first principles -- with (near) rigid heave springs the ride heights stay at
    # their static values, where the map equals the base car's constant areas, so both runs
    # must agree (to the 1 um ride-height tolerance).
    base = load_car(ROOT / "examples" / "single_seater.toml")
    stiff = load_car(ROOT / "examples" / "single_seater_mapped.toml",
                     ["suspension.heave_rate_front_n_per_mm=1e6",
                      "suspension.heave_rate_rear_n_per_mm=1e6"])
    a = simulate_lap(base, loops)
    b = simulate_lap(stiff, loops)
    assert b.lap_time_s == pytest.approx(a.lap_time_s, rel=1e-5)
    np.testing.assert_allclose(b.channels["speed_mps"], a.channels["speed_mps"], rtol=1e-4)
    np.testing.assert_allclose(b.channels["ride_height_front_mm"], 30.0, atol=0.05)


def test_ride_heights_follow_heave_equation(loops):
    # Source: the heave equation the solver solves, rh = rh0 - (Fz - Fz_rest)/k, checked on
    # the reported channels (to the 1 um tolerance of the iteration).
    car = load_car(ROOT / "examples" / "single_seater_mapped.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhysicsWarning)
        r = simulate_lap(car, loops)
    ch = r.channels
    m, g = car.chassis.mass, 9.80665
    rest_f = m * g * car.chassis.front_weight_fraction
    # level track: normal acceleration g only where the track has no bank or grade
    expected = 30.0 - (ch["fz_front_n"] - rest_f) / 250.0
    np.testing.assert_allclose(ch["ride_height_front_mm"], expected, atol=2e-3)
    # the balance moves with ride height (the map is not flat)
    assert np.ptp(ch["aero_balance_front"]) > 0.01


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(1e-4, 5e-3), min_size=1, max_size=40), st.integers(0, 2**31))
def test_cell_search_equals_bisection_on_uneven_grids(gaps, seed):
    # Source: numpy.searchsorted (bisection) as the reference; the bin-table search must pick
    # the same cell everywhere, grid points and ties included.
    from lapbalance.params import _bin_table

    grid = np.concatenate([[0.01], 0.01 + np.cumsum(gaps)])
    n = grid.size
    tab = _bin_table(grid)
    p = np.concatenate([grid, tab])
    rng = np.random.default_rng(seed)
    xs = np.concatenate([grid, rng.uniform(grid[0] - 1e-3, grid[-1] + 1e-3, 200),
                         np.nextafter(grid, np.inf), np.nextafter(grid, -np.inf)])
    for x in xs:
        i, t = K._bracket_index(p, 0, n, n, x)
        if x <= grid[0]:
            assert (i, t) == (0, 0.0)
        elif x >= grid[-1]:
            assert (i, t) == (n - 2, 1.0)
        else:
            ref = int(np.searchsorted(grid, x, side="right")) - 1
            assert i == ref
            assert t == (x - grid[i]) / (grid[i + 1] - grid[i])


def test_in_cell_update_equals_a_fresh_lookup():
    # Source: algebra of the bilinear patch (value + f_x dx + f_y dy + f_xy dx dy is exact
    # inside one cell): the ride-height iteration updates the areas this way instead of a
    # second lookup, so it must agree with the lookup to rounding.
    car = load_car(ROOT / "examples" / "single_seater_mapped.toml")
    p, gears, trpm, tnm = car_parameters(car)
    rng = np.random.default_rng(5)
    checked = 0
    for _ in range(300):
        x, y = rng.uniform(0.005, 0.055), rng.uniform(0.025, 0.095)
        a = K.map_eval(p, x, y)
        xlo, xhi, ylo, yhi = a[12:16]
        if not (xlo < x < xhi and ylo < y < yhi):
            continue
        x2 = rng.uniform(xlo, xhi)
        y2 = rng.uniform(ylo, yhi)
        dx, dy = x2 - x, y2 - y
        b = K.map_eval(p, x2, y2)
        for k, (gx, gy, gxy) in enumerate(((3, 4, 9), (5, 6, 10), (7, 8, 11))):
            pred = a[k] + a[gx] * dx + a[gy] * dy + a[gxy] * dx * dy
            assert pred == pytest.approx(b[k], rel=1e-12, abs=1e-14)
        assert a[3] + a[9] * dy == pytest.approx(b[3], rel=1e-10, abs=1e-12)  # d/dx moves
        checked += 1
    assert checked > 100


@settings(max_examples=200, deadline=None)
@given(rhf=st.floats(-0.05, 0.2), rhr=st.floats(-0.05, 0.25), v=st.floats(5.0, 90.0),
       grade=st.floats(-0.1, 0.1))
def test_resistance_bound_holds_at_any_ride_heights(rhf, rhr, v, grade):
    # Source: definition (the clamped bilinear map is a convex combination of its table
    # entries, so its areas never exceed the largest entry); the speed passes skip a search
    # only where this bound of the steady force is below the engine's force.
    car = load_car(ROOT / "examples" / "single_seater_mapped.toml")
    p, gears, trpm, tnm = car_parameters(car)
    claf, clar, cda = K.map_eval(p, rhf, rhr)[:3]
    assert cda <= p[K.P_CDAMAX] + 1e-15 and claf + clar <= p[K.P_CLAMAX] + 1e-15
    m, q = p[K.P_MASS], 0.5 * p[K.P_RHO] * v * v
    steady = q * cda + p[K.P_CRR] * (m * 9.80665 * np.cos(grade) + q * (claf + clar)) \
        + m * 9.80665 * np.sin(grade)
    assert steady <= K._resistance_bound(v, 0.0, grade, 0.0, p) * (1 + 1e-12) + 1e-9
