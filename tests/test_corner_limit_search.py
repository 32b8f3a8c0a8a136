"""The warm-started corner-limit search against scipy's root finder, step by step.

Along a circuit of continuously varying curvature (and a variant whose grade and bank vary at
every step, as a measured road's do) every limit the chunked search returns must be feasible
and lie on the grip boundary: scipy.optimize.brentq (reference library) finds the root of the
same usage excess next to it. The search accepts a usage within 2e-5 of 1, about 1e-5 of the
speed without aero and up to 5e-5 with strong aero, so the bound is 1e-4 relative.
"""

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from lapbalance import kernels as K
from lapbalance.car import load_car
from lapbalance.lap import car_parameters
from tests.helpers import wavy_circuit

ROOT = Path(__file__).resolve().parents[1]
VCAP = 90.0  # [m/s], above every limit but the straights'


def _road(kind, n):
    s = np.arange(n, dtype=float)
    if kind == "flat":
        return np.zeros(n), np.zeros(n)
    # grade within ±4 % and bank within ±3°, changing at every step (< 1e-3 rad per step)
    grade = 0.04 * np.sin(2 * math.pi * s / 700.0) + 0.01 * np.sin(2 * math.pi * s / 130.0)
    bank = math.radians(3.0) * np.sin(2 * math.pi * s / 450.0 + 1.0)
    return grade, bank


@pytest.mark.parametrize("road", ["flat", "graded"])
@pytest.mark.parametrize("car_file", ["gt_coupe.toml", "single_seater.toml",
                                      "single_seater_mapped.toml"])
def test_every_corner_limit_is_on_the_boundary(car_file, road):
    car = load_car(ROOT / "examples" / car_file)
    p, _, _, _ = car_parameters(car)
    tr = wavy_circuit(2000.0, 1.0, seed=11)
    k = np.ascontiguousarray(tr.curvature_1pm)
    grade, bank = _road(road, len(k))
    vlim = K.corner_limits_serial(k, grade, bank, VCAP, p, 1e-3, 4)
    out = np.full(K.NOUT, np.nan)
    below_cap = 0
    for i in range(len(k)):
        def g(v):
            return K._g_speed(v, k[i], grade[i], bank[i], p, out)
        v = vlim[i]
        assert g(v) <= 0.0, f"step {i}: the limit {v} m/s is infeasible"
        if v >= VCAP:
            continue
        below_cap += 1
        hi = v * (1.0 + 1e-4)
        assert g(hi) > 0.0, f"step {i}: feasible 1e-4 above the limit {v} m/s"
        root = brentq(g, v, hi, xtol=1e-12)
        assert v <= root <= v * (1.0 + 1e-4)
        if i % 97 == 0:  # no infeasible speed below the limit (spot checks)
            assert all(g(f * v) <= 0.0 for f in (0.25, 0.5, 0.75, 0.95))
    assert below_cap > 0.5 * len(k)


def test_limits_at_and_below_the_cap_on_a_changing_road():
    # A bend of one radius whose grade changes at every step, with the cap just below the
    # flat road's limit: climbing takes grip, so the limit drops below the cap on the climbs
    # and returns to it on the descents. Every step must be feasible, and every step below the
    # cap on the boundary (scipy.optimize.brentq, as above).
    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    p, _, _, _ = car_parameters(car)
    out = np.full(K.NOUT, np.nan)
    cap = 40.0
    # the curvature whose flat-road limit is 0.4 % above the cap
    kc = brentq(lambda kk: K.corner_limit(kk, 0.0, 0.0, 0.0, 0.0, 90.0, p, out, 1e-6)
                - 1.004 * cap, 1e-3, 0.2)
    n = 800
    k = np.full(n, kc)
    grade = 0.08 * np.sin(np.arange(n) / 50.0)  # ±8 %, < 1.6e-3 rad per step
    bank = np.zeros(n)
    vlim = K.corner_limits_serial(k, grade, bank, cap, p, 1e-3, 1)
    held = 0
    for i in range(n):
        def g(v):
            return K._g_speed(v, k[i], grade[i], bank[i], p, out)
        assert g(vlim[i]) <= 0.0, f"step {i}: {vlim[i]} m/s is infeasible"
        if vlim[i] >= cap:
            held += 1
        else:
            assert g(vlim[i] * (1.0 + 1e-4)) > 0.0, f"step {i}: feasible above the limit"
    assert 0.1 * n < held < 0.9 * n
