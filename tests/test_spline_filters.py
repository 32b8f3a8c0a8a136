"""The project's own cubic spline and smoothing filters against the general-purpose
reference implementations in SciPy (scipy.interpolate.CubicSpline, scipy.ndimage, scipy.fft),
which they replace on the command path to keep start-up short."""

import numpy as np
import pytest
from scipy import ndimage
from scipy.fft import next_fast_len as scipy_next_fast_len
from scipy.interpolate import CubicSpline

from lapbalance import filters
from lapbalance.spline import cubic_spline


@pytest.mark.parametrize("n", [2, 3, 4, 5, 50, 3000])
def test_not_a_knot_matches_scipy(n):
    rng = np.random.default_rng(n)
    x = np.cumsum(rng.uniform(0.2, 3.0, n))
    y = rng.normal(size=(n, 3))
    at = np.linspace(x[0] - 1.0, x[-1] + 1.0, 777)  # the end pieces extend outside
    ref = CubicSpline(x, y)(at)  # not-a-knot is SciPy's default end condition
    assert np.max(np.abs(cubic_spline(x, y, at) - ref)) < 1e-10 * (1 + np.max(np.abs(ref)))


@pytest.mark.parametrize("n", [4, 5, 50, 3000])
def test_periodic_matches_scipy(n):
    rng = np.random.default_rng(100 + n)
    x = np.cumsum(rng.uniform(0.2, 3.0, n))
    y = rng.normal(size=n)
    y[-1] = y[0]
    at = np.linspace(x[0], x[-1], 999)
    ref = CubicSpline(x, y, bc_type="periodic")(at)
    assert np.max(np.abs(cubic_spline(x, y, at, periodic=True) - ref)) < 1e-10


def test_spline_reproduces_a_cubic_exactly():
    # not-a-knot reproduces any cubic polynomial (de Boor 1978, ch. IV)
    x = np.array([0.0, 0.7, 1.1, 2.9, 3.0, 4.4])
    f = lambda t: 2.0 - t + 0.5 * t**2 - 0.25 * t**3  # noqa: E731
    at = np.linspace(-0.5, 5.0, 101)
    assert np.allclose(cubic_spline(x, f(x), at), f(at), atol=1e-11)


def test_spline_refuses_unordered_knots():
    with pytest.raises(ValueError):
        cubic_spline(np.array([0.0, 2.0, 1.0]), np.zeros(3), np.zeros(1))


@pytest.mark.parametrize("mode", ["wrap", "nearest"])
@pytest.mark.parametrize("n", [1, 2, 5, 40, 1000])
def test_filters_match_scipy_ndimage(mode, n):
    rng = np.random.default_rng(n)
    a = rng.normal(size=n)
    rows = rng.normal(size=(3, n))
    for size in (1, 2, 3, 4, 7, 50):
        assert np.allclose(filters.uniform_filter1d(a, size, mode=mode),
                           ndimage.uniform_filter1d(a, size, mode=mode), atol=1e-12)
        assert np.allclose(filters.uniform_filter1d(rows, size, axis=1, mode=mode),
                           ndimage.uniform_filter1d(rows, size, axis=1, mode=mode),
                           atol=1e-12)
        if size % 2:
            assert np.array_equal(filters.median_filter(a, size, mode=mode),
                                  ndimage.median_filter(a, size, mode=mode))
    for sigma in (0.1, 0.3, 1.0, 2.5, 17.0):
        assert np.allclose(filters.gaussian_filter1d(a, sigma, mode=mode),
                           ndimage.gaussian_filter1d(a, sigma, mode=mode), atol=1e-12)


def test_filters_refuse_other_edge_rules():
    with pytest.raises(ValueError):
        filters.uniform_filter1d(np.ones(5), 3, mode="reflect")


def test_next_fast_len_matches_scipy():
    assert all(filters.next_fast_len(n) == scipy_next_fast_len(n) for n in range(1, 20000))


def test_lap_command_path_does_not_import_the_heavy_scipy_packages(tmp_path):
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    code = ("import sys; from lapbalance.car import load_car; from lapbalance.track import "
            "load_track; from lapbalance.lap import simulate_lap; "
            f"simulate_lap(load_car(r'{root / 'examples' / 'gt_coupe.toml'}'), "
            f"load_track(r'{root / 'tracks' / 'veldmoor_ring.csv'}')); "
            "print(sorted(m for m in ('scipy.interpolate', 'scipy.ndimage', 'scipy.fft') "
            "if m in sys.modules))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                       check=True, cwd=tmp_path)
    assert r.stdout.strip().splitlines()[-1] == "[]"
