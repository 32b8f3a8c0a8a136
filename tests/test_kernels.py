"""Kernel hygiene: imports, compiled-vs-Python parity, no objects in the hot loops."""

import ast
import math
from pathlib import Path

import numpy as np
import pytest

from lapbalance import kernels as K
from lapbalance.lap import car_parameters
from tests.helpers import make_car

SRC = Path(__file__).resolve().parents[1] / "src" / "lapbalance"
ALLOWED = {"math", "numpy", "numba", "__future__", "lapbalance.loads", "lapbalance.tyre",
           "lapbalance.units", "lapbalance.kernels", "lapbalance.views", "numba.core",
           "numba.extending"}


@pytest.mark.parametrize("module", ["kernels.py", "loads.py", "tyre.py",
                                    "transient_kernels.py", "views.py"])
def test_kernel_modules_import_only_numeric_libraries(module):
    # Common practice (DEVELOPERS.md, layers): kernels import only math, numpy, numba (and each
    # other).
    tree = ast.parse((SRC / module).read_text())
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            names = [node.module]
        else:
            continue
        for n in names:
            assert n in ALLOWED, f"{module} imports {n}"


def _args(car, v=35.0, kappa=1 / 80.0):
    p, gears, trpm, tnm = car_parameters(car)
    return p, gears, trpm, tnm


@pytest.mark.parametrize("drive, brake", [(1500.0, 0.0), (0.0, 6000.0), (-800.0, 0.0)])
def test_state_compiled_equals_python(drive, brake):
    # Source: the same code run by the numba compiler and by CPython must agree to ~1e-12.
    car = make_car(aero={"downforce_area_m2": 1.5, "balance_front": 0.45, "drag_area_m2": 0.8},
                   tyres={"front": {"load_sensitivity": 0.12}, "rear": {"load_sensitivity": 0.1}})
    p, gears, trpm, tnm = _args(car)
    a = np.empty(K.NOUT)
    b = np.empty(K.NOUT)
    K.state(35.0, 1 / 80.0, 0.02, 0.05, drive, brake, p, a)
    K.state.py_func(35.0, 1 / 80.0, 0.02, 0.05, drive, brake, p, b)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-9)


def test_corner_limit_compiled_equals_python():
    # Source: compiled vs uncompiled run of the same search (parity, ~1e-12 relative).
    car = make_car(aero={"downforce_area_m2": 1.5, "balance_front": 0.45, "drag_area_m2": 0.8},
                   tyres={"front": {"load_sensitivity": 0.12}})
    p, gears, trpm, tnm = _args(car)
    out = np.empty(K.NOUT)
    vcap = 90.0
    a = K.corner_limit(1 / 60.0, 0.0, 0.0, 0.0, 0.0, vcap, p, out, 1e-3)
    b = K.corner_limit.py_func(1 / 60.0, 0.0, 0.0, 0.0, 0.0, vcap, p, out, 1e-3)
    assert a == pytest.approx(b, rel=1e-12)
    assert 0 < a < vcap and math.isfinite(a)


def test_engine_force_and_gears():
    # Source: definition of gearing: rpm = v / r * ratio * final * 60 / (2 pi).
    car = make_car(powertrain={"power_kw": None, "torque_curve_rpm": [1000.0, 8000.0],
                               "torque_curve_nm": [400.0, 400.0], "gear_ratios": [3.0, 2.0, 1.0],
                               "final_drive": 3.0, "wheel_radius_m": 0.3, "efficiency": 0.9,
                               "shift_rpm": 7000.0, "rev_limit_rpm": 7500.0,
                               "max_tractive_force_n": None})
    p, gears, trpm, tnm = _args(car)
    g, rpm = K.gear_and_rpm(30.0, p, gears)
    assert rpm == pytest.approx(30.0 / 0.3 * gears[g] * 3.0 * 60 / (2 * math.pi))
    assert g == 1  # first gear would exceed the 7000 rpm shift point at 30 m/s
    assert 30.0 / 0.3 * 3.0 * 3.0 * 60 / (2 * math.pi) > 7000.0
    f = K.engine_force(30.0, p, gears, trpm, tnm)
    assert f == pytest.approx(400.0 * 2.0 * 3.0 * 0.9 / 0.3)
    # above the rev limit in top gear: no drive
    v_lim = 7500.0 * 2 * math.pi / 60 * 0.3 / 3.0
    assert K.engine_force(v_lim * 1.01, p, gears, trpm, tnm) == 0.0


def test_warm_started_corner_limits_equal_independent_searches():
    # Source: the warm start and the curvature-monotonicity shortcut must not change the
    # answer: compare with a search from scratch at every 25th step (tolerance 2e-3 m/s, two
    # search tolerances).
    from pathlib import Path

    from lapbalance.car import load_car
    from lapbalance.track import load_track

    root = Path(__file__).resolve().parents[1]
    car = load_car(root / "examples" / "gt_coupe.toml")
    tr = load_track(root / "tracks" / "skarhelm_climb.csv")
    p, gears, trpm, tnm = car_parameters(car)
    vcap = car.powertrain.top_speed_rev_limited()
    k, g, b = tr.curvature_1pm, tr.grade_rad, tr.bank_rad
    warm = K.corner_limits_serial(k, g, b, vcap, p, 1e-3, 1)
    chunked = K.corner_limits_serial(k, g, b, vcap, p, 1e-3, 7)
    out = np.empty(K.NOUT)
    for i in range(0, len(k), 25):
        cold = K.corner_limit(k[i], g[i], b[i], 0.0, 0.0, vcap, p, out, 1e-3)
        assert warm[i] == pytest.approx(cold, abs=2e-3)
        assert chunked[i] == pytest.approx(cold, abs=2e-3)
