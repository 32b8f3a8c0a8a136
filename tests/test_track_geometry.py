"""Track geometry from inputs shaped like real ones: dense, sparse, rounded and noisy points.

Every check value is a closed form (named beside it) or geographiclib; the inputs are drawn
from the exact shape, then spaced, rounded and disturbed the way survey or logger exports are.
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track, make_track
from lapbalance.units import G0
from tests.helpers import make_car
from tests.reference_cases import (CASES, circle_points, clothoid_track, geodesic_ring, ids,
                                   latlon_ring_track, write_latlon_ring)

ROOT = Path(__file__).resolve().parents[1]


def path_points(parts, spacing, fine=0.01):
    """Positions every ``spacing`` along a path of (length, k_start, k_end) pieces whose
    curvature is linear in arc length (straights, arcs, clothoids), by integrating the heading
    with the midpoint rule on a ``fine`` step; also returns distance and exact curvature."""
    ks = [np.linspace(k0, k1, int(round(length / fine)), endpoint=False)
          for length, k0, k1 in parts]
    k = np.concatenate(ks)
    th = np.concatenate([[0.0], np.cumsum(k) * fine])
    mid = 0.5 * (th[:-1] + th[1:])
    x = np.concatenate([[0.0], np.cumsum(np.cos(mid)) * fine])
    y = np.concatenate([[0.0], np.cumsum(np.sin(mid)) * fine])
    every = int(round(spacing / fine))
    s = np.arange(x.size) * fine
    return x[::every], y[::every], s[::every], np.append(k, k[-1])[::every]


# ------------------------------------------------------------------------------------------
# Circles at any spacing and rounding
# ------------------------------------------------------------------------------------------

# Source: analytic geometry: a circle of radius R has curvature 1/R everywhere (sign by
# ISO 8855, left turn positive) and length 2 pi R. Rounding to 1 cm at 0.1 m spacing is not
# white noise (slow saw-tooth errors where the circle runs along an axis).
@pytest.mark.parametrize("rounding", [1e-4, 1e-3, 1e-2])
@pytest.mark.parametrize("spacing", [0.1, 0.5, 1.0, 5.0])
@pytest.mark.parametrize("radius", [15.0, 50.0, 300.0, 1000.0])
def test_circle_curvature_independent_of_spacing_and_rounding(radius, spacing, rounding):
    x, y = circle_points(radius, spacing, rounding)
    tr = make_track(x, y)
    assert tr.closed
    err = tr.curvature_1pm * radius - 1.0
    assert math.sqrt(float(np.mean(err**2))) <= 0.01
    assert len(tr.corners) == 1 and tr.corners[0].direction == "left"
    assert tr.length_m == pytest.approx(2.0 * math.pi * radius, rel=1e-3)
    if (spacing, rounding) == (1.0, 1e-3):  # the registry's rows: same checks, same limits
        reg = f"track.circle.r{radius:g}"
        assert CASES[f"{reg}.length"].expected == pytest.approx(2.0 * math.pi * radius)
        assert CASES[f"{reg}.curvature"].abs == 0.01
        for cid in ids(reg):
            assert CASES[cid].value() == CASES[cid].approx(), cid


# Source: point-mass steady cornering without downforce, m v² / R = mu m g, so
# v = sqrt(mu g R) and the lap of a circle takes 2 pi R / v (e.g. Milliken & Milliken, Race Car
# Vehicle Dynamics, 1995, ch. 2). Test car: mu = 1, no aero, no load sensitivity.
@pytest.mark.parametrize(("radius", "spacing", "rounding"), [
    (15.0, 5.0, 1e-2), (15.0, 0.1, 1e-2), (50.0, 1.0, 1e-3), (300.0, 0.5, 1e-2),
    (1000.0, 0.1, 1e-2), (1000.0, 5.0, 1e-4)])
def test_circle_lap_time_matches_closed_form(radius, spacing, rounding):
    car = make_car(tyres={"front": {"peak_friction": 1.0}, "rear": {"peak_friction": 1.0}})
    tr = make_track(*circle_points(radius, spacing, rounding))
    r = simulate_lap(car, tr, assess_liftoff=False)
    closed_form = 2.0 * math.pi * radius / math.sqrt(1.0 * G0 * radius)
    assert r.lap_time_s == pytest.approx(closed_form, rel=2e-3)


def test_output_step_does_not_change_the_curve():
    # the output step resamples the fitted curve: curvature at common distances agrees
    x, y = circle_points(40.0, 0.5, 1e-3)
    a = make_track(x, y, step_m=0.25)
    b = make_track(x, y, step_m=2.0)
    assert a.length_m == pytest.approx(b.length_m, rel=1e-9)
    kb = np.interp(b.distance_m, a.distance_m, a.curvature_1pm)
    assert np.max(np.abs(kb - b.curvature_1pm)) < 1e-4 / 40.0


# ------------------------------------------------------------------------------------------
# Clothoid, hairpin, sweeper
# ------------------------------------------------------------------------------------------

# Source: Euler spiral (clothoid), curvature linear in arc length, k(s) = s / (R Lc) from 0 to
# 1/R over Lc; positions from the Fresnel integrals x = a sqrt(pi) C(s / (a sqrt(pi))),
# y = a sqrt(pi) S(s / (a sqrt(pi))) with a² = R Lc (Abramowitz & Stegun, Handbook of
# Mathematical Functions, 1964, 7.3.1-7.3.2; scipy.special.fresnel).
@pytest.mark.parametrize(("spacing", "rounding"), [(0.5, 1e-3), (2.0, 1e-2)])
def test_clothoid_curvature_is_linear_in_arc_length(spacing, rounding):
    R, Lc, straight, arc = 80.0, 120.0, 150.0, 0.5 * math.pi * 80.0
    # the registry builds the points: straight, then the spiral from scipy.special.fresnel,
    # then the arc, rounded to ``rounding``
    tr, d, inner, exact = clothoid_track(spacing, rounding)
    assert np.max(np.abs(tr.curvature_1pm[inner] - exact)) <= 0.02 / R
    assert tr.length_m == pytest.approx(straight + Lc + arc - spacing, rel=2e-3)
    reg = f"track.clothoid.s{spacing:g}"
    assert CASES[f"{reg}.curvature"].abs == 0.02 / R
    for cid in ids(reg):
        assert CASES[cid].value() == CASES[cid].approx(), cid


def _noisy_turn(radius, angle_deg, spacing, noise_m, seed):
    parts = [(150.0, 0.0, 0.0), (math.radians(angle_deg) * radius, 1 / radius, 1 / radius),
             (150.0, 0.0, 0.0)]
    x, y, _, _ = path_points(parts, spacing)
    rng = np.random.default_rng(seed)
    return x + rng.normal(0.0, noise_m, x.size), y + rng.normal(0.0, noise_m, y.size)


# Source: the drawn shape (a 180-degree arc of radius 12 m between straights; a 90-degree
# arc of 300 m); apex radius = 1 / max |curvature| of the one corner. Noise: Gaussian, 0.3 m
# per coordinate, fixed seeds (GPS-like logged trace).
@pytest.mark.parametrize(("radius", "angle", "tol"), [(12.0, 180.0, 0.15), (300.0, 90.0, 0.03)])
@pytest.mark.parametrize(("spacing", "seed"), [(0.1, 1), (1.0, 2), (2.0, 3)])
def test_noisy_hairpin_and_sweeper_keep_their_radius(radius, angle, tol, spacing, seed):
    x, y = _noisy_turn(radius, angle, spacing, 0.3, seed)
    tr = make_track(x, y, closed=False)
    assert len(tr.corners) == 1
    assert tr.corners[0].min_radius_m == pytest.approx(radius, rel=tol)
    assert tr.noise_m == pytest.approx(0.3, rel=0.25)


# Source: the noise is drawn with a known standard deviation; dense points (0.05 m apart) are
# averaged in bins before the fit, and the reported noise is that of one input point.
@pytest.mark.parametrize(("spacing", "noise"), [(0.05, 0.5), (1.0, 0.1), (5.0, 0.3)])
def test_noise_estimate_is_that_of_one_point(spacing, noise):
    x, y = _noisy_turn(60.0, 120.0, spacing, noise, seed=5)
    tr = make_track(x, y, closed=False)
    assert tr.noise_m == pytest.approx(noise, rel=0.25)
    assert not tr.noise_given
    given = make_track(x, y, closed=False, noise_m=0.2)
    assert given.noise_m == 0.2 and given.noise_given


# ------------------------------------------------------------------------------------------
# The same circuit at three spacings and two roundings
# ------------------------------------------------------------------------------------------

def _demo_builder():
    spec = importlib.util.spec_from_file_location("make_tracks", ROOT / "scripts" /
                                                  "make_tracks.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.slow
def test_same_circuit_same_lap_time_at_any_spacing_and_rounding():
    from lapbalance.car import load_car

    mk = _demo_builder()
    _, x, y = mk.build_closed(mk.TWISTY, transition_m=15.0)  # 2.55 km, hairpins of 12-16 m
    x, y = x[:-1], y[:-1]  # the last point repeats the first
    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    times = {}
    for spacing in (0.5, 1.0, 2.0):
        every = int(round(spacing / mk.FINE_M))
        for rounding in (1e-4, 1e-3):
            xs = np.round(x[::every] / rounding) * rounding
            ys = np.round(y[::every] / rounding) * rounding
            tr = make_track(xs, ys, closed=True)
            times[spacing, rounding] = simulate_lap(car, tr, assess_liftoff=False).lap_time_s
    t = np.array(list(times.values()))
    assert (t.max() - t.min()) / t.min() <= 2e-3, times


# ------------------------------------------------------------------------------------------
# Degenerate and mistaken inputs
# ------------------------------------------------------------------------------------------

def test_repeated_points_on_a_short_straight_stay_an_open_straight():
    # a 9 m straight given with every point twice: the ends are 9 m apart but the closing
    # segment would run back over the whole straight, so it is not a lap
    x = np.repeat(np.arange(10.0), 2)
    tr = make_track(x, np.zeros_like(x))
    assert not tr.closed
    assert tr.length_m == pytest.approx(9.0, rel=1e-6)
    assert np.max(np.abs(tr.curvature_1pm)) < 1e-6


def test_out_and_back_trace_is_refused():
    x = np.concatenate([np.arange(0.0, 50.0), np.arange(49.0, -1.0, -1.0)])
    with pytest.raises(InputError, match=r"near point 49; the path turns back by 180 deg"):
        make_track(x, np.zeros_like(x))
    with pytest.raises(InputError, match=r"closed track but the path turns back by 180 deg "
                                         r"from the last point to the first; mark it open"):
        make_track(x, np.zeros_like(x), closed=True)


_geodesic_ring = geodesic_ring


# Source: geographiclib (Karney, "Algorithms for geodesics", J. Geodesy 87, 2013, 43-55):
# points at geodesic distance 600 m from a centre on the WGS-84 ellipsoid, and the geodesic
# length of their polygon. Places: across the antimeridian, high latitude, round a pole.
@pytest.mark.parametrize(("lat0", "lon0"), [(10.0, 179.999), (-45.0, -179.995), (78.0, 20.0),
                                            (89.999, 120.0), (-89.995, 45.0)])
def test_latlon_projection_anywhere(tmp_path, lat0, lon0):
    from geographiclib.geodesic import Geodesic

    g = Geodesic.WGS84
    pts = _geodesic_ring(lat0, lon0, 600.0, 4.0)
    p = tmp_path / "ring.csv"
    write_latlon_ring(p, pts)
    tr = load_track(p)
    geo = sum(g.Inverse(*pts[i], *pts[(i + 1) % len(pts)])["s12"] for i in range(len(pts)))
    assert tr.length_m == pytest.approx(geo, rel=1e-4)
    tag = {(78.0, 20.0): "high_latitude", (10.0, 179.999): "antimeridian"}.get((lat0, lon0))
    if tag is not None:  # the registry's rows: the same ring, its geodesic length tabulated
        c = CASES[f"track.latlon.{tag}.length"]
        assert c.expected == pytest.approx(geo, rel=1e-8)
        assert latlon_ring_track(lat0, lon0).length_m == pytest.approx(tr.length_m, rel=1e-12)
        assert c.value() == c.approx()
    assert 1.0 / np.max(np.abs(tr.curvature_1pm)) == pytest.approx(600.0, rel=1e-3)
    assert len(tr.corners) == 1


def _run(*args):
    return CliRunner().invoke(main, ["track", *map(str, args)])


def test_latlon_in_radians_is_named(tmp_path):
    pts = np.radians(_geodesic_ring(45.0, 7.0, 600.0, 4.0))
    p = tmp_path / "rad.csv"
    p.write_text("lat_deg,lon_deg\n" + "\n".join(f"{a:.10f},{b:.10f}" for a, b in pts) + "\n")
    r = _run(p)
    assert r.exit_code == 2 and r.output.count("\n") == 1
    assert "looks like radians; multiply by 57.2958 to give degrees" in r.output


def test_xy_in_kilometres_is_named(tmp_path):
    t = np.linspace(0.0, 2.0 * math.pi, 1500, endpoint=False)
    p = tmp_path / "km.csv"
    p.write_text("x_m,y_m\n" + "\n".join(f"{0.5 * math.cos(a):.4f},{0.5 * math.sin(a):.4f}"
                                         for a in t) + "\n")
    r = _run(p)
    assert r.exit_code == 2 and r.output.count("\n") == 1
    assert "looks like kilometres; multiply by 1000 to give metres" in r.output


def test_track_command_reports_noise_and_draws_curvature(tmp_path):
    x, y = _noisy_turn(40.0, 270.0, 1.0, 0.2, seed=9)
    p = tmp_path / "logged.csv"
    p.write_text("# closed: false\nx_m,y_m\n"
                 + "\n".join(f"{a:.3f},{b:.3f}" for a, b in zip(x, y, strict=True)) + "\n")
    r = _run(p)
    assert r.exit_code == 0, r.output
    assert "mm (estimated)" in r.output and "min radius" in r.output
    r = _run(p, "--noise-m", "0.25", "--map", tmp_path / "m.png")
    assert r.exit_code == 0, r.output
    assert "position noise 250 mm (given)" in r.output
    assert (tmp_path / "m.png").read_bytes()[:4] == b"\x89PNG"
    r = _run(p, "--noise-m", "-1")
    assert r.exit_code == 2 and "--noise-m" in r.output


@pytest.mark.parametrize("radius", [15.0, 120.0, 1000.0])
def test_fitted_positions_stay_on_the_circle(radius):
    """The points of the fitted curve lie on the input circle (closed form: |p| = R), not on
    the smaller circle a long smoothing kernel draws them to (its gain H shrinks a circle to
    R·H), to 1 cm."""
    n = int(round(2 * math.pi * radius))
    phi = np.arange(n) * 2 * math.pi / n
    tr = make_track(radius * np.cos(phi), radius * np.sin(phi), closed=True, step_m=1.0)
    assert np.max(np.abs(np.hypot(tr.x_m, tr.y_m) - radius)) < 0.01


def test_fitted_positions_follow_the_demo_centrelines():
    """Every input point of a clean demo circuit lies within 0.3 m of the fitted line (the
    track is 10-14 m wide; common practice: a map and a driving line need the road where it
    is, not only its curvature)."""
    from scipy.spatial import cKDTree

    for name in ("veldmoor_ring.csv", "kettlewick_loops.csv"):
        path = ROOT / "tracks" / name
        rows = [ln for ln in path.read_text().splitlines() if ln and not ln.startswith("#")]
        pts = np.array([[float(v) for v in ln.split(",")[:2]] for ln in rows[1:]])
        tr = load_track(path)
        dist, _ = cKDTree(np.c_[tr.x_m, tr.y_m]).query(pts)
        assert dist.max() < 0.3, name
