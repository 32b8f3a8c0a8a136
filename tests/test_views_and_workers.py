"""Borrowed array views, the serial twins of the parallel kernels, and forked sweep workers.

No check values from outside here: these are identities (the same numbers by another code
path), reference-count bookkeeping and process-start behaviour.
"""

from __future__ import annotations

import math
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
from numba import njit

from lapbalance import kernels as K
from lapbalance import lap as L
from lapbalance.car import load_car
from lapbalance.views import borrowed, keep_alive
from tests.helpers import wavy_circuit

ROOT = Path(__file__).resolve().parents[1]


@njit(cache=False)
def _write_through(a, value):
    own = np.zeros(a.shape[0])
    b = borrowed(own)
    c = borrowed(a)
    for i in range(c.shape[0]):
        b[i] = c[i] * value
        c[i] = -c[i]
    s = 0.0
    for i in range(b.shape[0]):
        s += b[i]
    keep_alive(own)
    return s


@njit(cache=False)
def _many_calls(p, n):
    q = borrowed(p)
    s = 0.0
    for i in range(n):
        s += _leaf(q, i)
    return s


@njit(cache=False)
def _leaf(q, i):
    return q[i % q.shape[0]]


def test_borrowed_view_reads_and_writes_the_owner():
    a = np.arange(5.0)
    s = _write_through(a, 2.0)
    assert s == 2.0 * (0 + 1 + 2 + 3 + 4)
    np.testing.assert_array_equal(a, -np.arange(5.0))  # writes reached the caller's array


def test_borrowed_views_leave_reference_counts_alone():
    p = np.arange(7.0)
    before = sys.getrefcount(p)
    for _ in range(50):
        _many_calls(p, 1000)
    assert sys.getrefcount(p) == before


def test_borrowed_is_the_array_itself_in_plain_python():
    a = np.arange(3.0)
    assert borrowed(a) is a
    assert keep_alive(a) is None


def test_a_lap_leaves_the_parameter_arrays_reference_counts_alone():
    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    tr = wavy_circuit(1500.0, 1.0, seed=3)
    arrays = L.car_parameters(car)
    kappa = np.ascontiguousarray(tr.curvature_1pm)
    z = np.zeros_like(kappa)
    p, gears, trpm, tnm = arrays
    counts = [sys.getrefcount(x) for x in arrays]
    for _ in range(3):
        vlim = K.corner_limits_serial(kappa, z, z, L.speed_cap(car), p,
                                      L.SPEED_TOL, 8)
        v = K.speed_passes(kappa, z, z, vlim, 1.0, 0.0, math.nan, p, gears, trpm, tnm, L.FORCE_TOL)
        K.final_pass_serial(v, kappa, z, z, 1.0, math.nan, L.speed_cap(car), p, gears, trpm,
                            tnm, L.FORCE_TOL, L.LIFTOFF_AY_THRESHOLD)
    assert [sys.getrefcount(x) for x in arrays] == counts


_TWINS_SCRIPT = textwrap.dedent("""
    import math, sys
    import numpy as np
    sys.path.insert(0, {root!r})
    from lapbalance import kernels as K
    from lapbalance import lap as L
    from lapbalance.car import load_car
    from tests.helpers import wavy_circuit

    car = load_car({car!r})
    tr = wavy_circuit(2000.0, 1.0, seed=11)
    p, gears, trpm, tnm = L.car_parameters(car)
    kappa = np.ascontiguousarray(tr.curvature_1pm)
    z = np.zeros_like(kappa)
    vcap = L.speed_cap(car)
    a = K.corner_limits(kappa, z, z, vcap, p, L.SPEED_TOL, 8)
    b = K.corner_limits_serial(kappa, z, z, vcap, p, L.SPEED_TOL, 8)
    np.testing.assert_array_equal(a, b)
    v = K.speed_passes(kappa, z, z, a, 1.0, 0.0, math.nan, p, gears, trpm, tnm, L.FORCE_TOL)
    args = (v, kappa, z, z, 1.0, math.nan, vcap, p, gears, trpm, tnm, L.FORCE_TOL,
            L.LIFTOFF_AY_THRESHOLD)
    fa = K.final_pass(*args)
    fb = K.final_pass_serial(*args)
    np.testing.assert_array_equal(fa, fb)
    checked = np.ascontiguousarray(fa[:, K.NOUT + 6])
    ma = K.liftoff_margins(kappa, z, z, a, checked, p, gears, L.MARGIN_TOL, 8)
    mb = K.liftoff_margins_serial(kappa, z, z, a, checked, p, gears, L.MARGIN_TOL, 8)
    np.testing.assert_array_equal(ma, mb)
    assert np.isfinite(ma[:, K.M_LAMBDA]).sum() > 10  # the check ran somewhere
    print("same")
""")


@pytest.mark.parametrize("car_name", ["gt_coupe.toml", "single_seater_mapped.toml"])
def test_serial_twins_give_the_parallel_kernels_numbers_bit_for_bit(car_name, tmp_path):
    # in a fresh process: the parallel kernels start numba's thread pool, after which the
    # test process could no longer fork (forkpool, sweep workers)
    script = tmp_path / "twins.py"
    script.write_text(_TWINS_SCRIPT.format(root=str(ROOT), car=str(ROOT / "examples" / car_name)))
    r = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                       timeout=900, cwd=tmp_path)
    assert r.returncode == 0, r.stderr[-3000:]
    assert r.stdout.strip().splitlines()[-1] == "same"


_FORK_SCRIPT = textwrap.dedent("""
    import json, sys
    import numpy as np
    sys.path.insert(0, {root!r})
    from lapbalance.car import load_car
    from lapbalance import sweep as S
    from tests.helpers import wavy_circuit

    if __name__ == "__main__":
        car = load_car({car!r})
        tr = wavy_circuit(800.0, 1.0, seed=5)
        vary = {{"brakes.bias_front": list(np.linspace(0.55, 0.65, 9))}}
        one = S.sweep(car, tr, vary, workers=1)
        safe = S.fork_is_safe()
        used = []
        import multiprocessing as mp
        real = mp.get_context
        def spy(method=None):
            used.append(method)
            return real(method)
        mp.get_context = spy
        two = S.sweep(car, tr, vary, workers=2)
        print(json.dumps({{"safe": safe, "used": used,
                          "same": [a["lap_time_s"] for a in one] ==
                                  [b["lap_time_s"] for b in two]}}))
""")


def test_sweep_workers_are_forked_from_a_process_that_ran_laps(tmp_path):
    """A process that has run laps on one thread never started numba's thread pool, so its
    sweep workers are forked from it (they start with the kernels it loaded) and give the
    same rows as the serial sweep."""
    import json

    script = tmp_path / "fork_sweep.py"
    script.write_text(_FORK_SCRIPT.format(root=str(ROOT),
                                          car=str(ROOT / "examples" / "gt_coupe.toml")))
    r = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                       timeout=600, cwd=tmp_path)
    assert r.returncode == 0, r.stderr[-2000:]
    got = json.loads(r.stdout.strip().splitlines()[-1])
    if sys.platform.startswith("linux"):
        assert got["safe"] is True
        assert got["used"] == ["fork"]
    assert got["same"] is True


def test_fork_is_refused_once_numba_threads_started(monkeypatch):
    from lapbalance import sweep as S

    class _Started:
        _is_initialized = True

    monkeypatch.setitem(sys.modules, "numba.np.ufunc.parallel", _Started)
    assert S.fork_is_safe() is False

    class _Unknown:  # a numba without the flag: do not guess
        pass

    monkeypatch.setitem(sys.modules, "numba.np.ufunc.parallel", _Unknown)
    assert S.fork_is_safe() is False


@pytest.mark.parametrize("n, slots", [(0, 2), (1, 2), (3, 1), (200, 2), (1000, 8), (37, 64)])
def test_dask_batches_cover_every_point_once_and_shrink(n, slots):
    from lapbalance.sweep import _DASK_BATCH_MAX, _guided_batches

    todo = list(range(n))
    b = _guided_batches(todo, slots)
    assert [x for batch in b for x in batch] == todo
    sizes = [len(x) for x in b]
    assert all(1 <= s <= _DASK_BATCH_MAX for s in sizes)
    assert sizes == sorted(sizes, reverse=True)  # large first, small last
