"""Driving line (lapbalance.line): closed forms, the band, the box solver, CLI, demo laps."""

from __future__ import annotations

import glob
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance import line as L
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.track import load_track, make_track
from tests.helpers import make_car
from tests.reference_cases import CASES, annulus_line, corner_points, solve_corner

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("radius, theta_deg", [(200.0, 10.0), (200.0, 20.0)])
def test_isolated_corner_apex_radius_closed_forms(radius, theta_deg):
    """Isolated left corner (centreline radius R, deflection θ) between long straights; the
    car's centre may use e = w/2 - c either side of the centreline.

    Largest constant-radius arc (outside-inside-outside). Let O be the corner's centre and P
    the point where the outer bounds of the two straights meet. The outer bounds are lines at
    distance R + e from O, the inner bound a circle of radius R - e about O; everything is
    symmetric about the bisector OP, and each outer line makes the angle θ/2 with the normal
    to the bisector. A circle of radius ρ tangent to both outer lines has its centre on the
    bisector at ρ/cos(θ/2) from P, so its point nearest P lies at ρ/cos(θ/2) - ρ from P; the
    inner bound's point nearest P lies at (R + e)/cos(θ/2) - (R - e). Touching there:

        ρ (1 - cos(θ/2)) = (R + e) - (R - e) cos(θ/2)
        ρ_arc = R + e (1 + cos(θ/2)) / (1 - cos(θ/2)).

    The same equation gives D = ρ_arc (1 - cos(θ/2)) = (R + e) - (R - e) cos(θ/2), the
    distance from the apex point A to each outer line.

    The minimum of ∫κ² ds is not that arc: between the contacts it is the small-slope beam
    (y'''' = 0), whose curvature falls linearly from K at the apex to 0 where the line meets the
    outer edge tangentially (a contact with a straight obstacle keeps y'' continuous). With X
    along the apex tangent, y'' = K (1 - X/X_c): the slope reaches K X_c/2 = tan(θ/2), and
    y(X_c) = K X_c²/3 must equal tan(θ/2) X_c - D/cos(θ/2) (tangent to the outer line). Then
    D/cos(θ/2) = K X_c²/6, X_c = 3 D / sin(θ/2) and

        ρ_apex = 1/K = 3 D / (2 sin(θ/2) tan(θ/2)),   ρ_apex / ρ_arc = 3 cos(θ/2) / (2 (1 +
        cos(θ/2))) -> 3/4 as θ -> 0.

    The small-slope form neglects terms of order tan²(θ/2) (0.8 % at 10°, 3 % at 20°); the QP
    apex radius must match it within 2 %, must not exceed ρ_arc (no line through the corner
    is straighter everywhere than the largest arc), and the line must touch the outer bound
    on both straights and the inner bound at the apex. Closed forms derived here (plane
    geometry, and the small-slope bending energy of a beam, whose minimiser satisfies the
    Euler-Bernoulli equation y'''' = 0 between supports; e.g. Timoshenko & Gere, Mechanics of
    Materials, on beam deflection).
    """
    e = 5.0
    alpha, k, info = solve_corner(radius, theta_deg, e)
    c, s = math.cos(math.radians(theta_deg) / 2), math.sin(math.radians(theta_deg) / 2)
    rho_arc = radius + e * (1 + c) / (1 - c)
    d = (radius + e) - (radius - e) * c
    rho_apex = 3.0 * d / (2.0 * s * (s / c))
    i = int(np.argmax(k)) + 1
    r_qp = 1.0 / float(k.max())
    c_apex = CASES[f"line.corner.t{theta_deg:g}.apex_radius"]
    assert (radius, e) == (200.0, 5.0) and c_apex.expected == pytest.approx(rho_apex, rel=1e-12)
    assert r_qp == c_apex.approx() and c_apex.rel == 0.02
    assert c_apex.value() == c_apex.approx()
    assert r_qp < rho_arc
    assert alpha[i] == pytest.approx(e, abs=0.01)  # inside at the apex (left turn)
    assert np.min(alpha[:i]) == pytest.approx(-e, abs=0.01)  # outside before
    assert np.min(alpha[i:]) == pytest.approx(-e, abs=0.01)  # outside after
    assert info["int_k2_line"] < info["int_k2_reference"]


def test_sharp_corner_apex_below_largest_arc():
    """A 90° corner (R = 50 m, e = 5 m): the line still touches outside-inside-outside and its
    apex radius stays between the centreline radius and the largest arc
    ρ_arc = R + e (1 + cos 45°)/(1 - cos 45°) = 79.14 m (closed form of the test above)."""
    e = 5.0
    alpha, k, _ = solve_corner(50.0, 90.0, e)
    rho_arc = 50.0 + e * (1 + math.cos(math.pi / 4)) / (1 - math.cos(math.pi / 4))
    assert rho_arc == pytest.approx(79.142, abs=1e-3)
    c = CASES["line.corner.sharp.apex_radius"]  # the band (50 m, rho_arc) as centre ± half
    assert c.expected - c.abs == pytest.approx(50.0) and c.expected + c.abs == pytest.approx(
        rho_arc)
    assert c.value() == c.approx()
    i = int(np.argmax(k)) + 1
    assert 50.0 < 1.0 / k.max() < rho_arc
    assert alpha[i] == pytest.approx(e, abs=0.01)
    assert np.min(alpha[:i]) == pytest.approx(-e, abs=0.01)
    assert np.min(alpha[i:]) == pytest.approx(-e, abs=0.01)


def test_annulus_line_is_outer_edge_minus_margin():
    """A ring of constant width: ∫κ² ds = 2π/r falls as the radius r grows, so the line is the
    outermost circle the band allows: outer edge radius - (car width/2 + margin), to 1 cm."""
    r0, w, car_w, margin = 120.0, 12.0, 2.0, 0.25
    # the registry's ring: n = 754 points, make_track(..., width=w, closed=True, step_m=1.0)
    lt = annulus_line(r0, w, car_w, margin)  # = L.min_curvature_line(tr, car_w, margin)
    radius = np.hypot(lt.x_m, lt.y_m)
    target = r0 + w / 2 - (car_w / 2 + margin)
    assert np.max(np.abs(radius - target)) < 0.01
    for cid in ("line.annulus.radius", "line.annulus.length"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    assert CASES["line.annulus.radius"].expected == pytest.approx(target)
    assert np.max(np.abs(lt.line_offset_m + (w / 2 - car_w / 2 - margin))) < 0.01
    assert lt.length_m == pytest.approx(2 * math.pi * target, rel=1e-4)
    # the edges move with the line: 1.25 m to the right edge, the rest to the left
    assert np.allclose(lt.width_m - lt.width_left_m, car_w / 2 + margin, atol=0.01)


@st.composite
def smooth_closed_tracks(draw):
    r0 = draw(st.floats(150.0, 350.0))
    amps = [draw(st.floats(0.0, 0.06)) for _ in range(3)]
    phases = [draw(st.floats(0.0, 2 * math.pi)) for _ in range(3)]
    w_mean = draw(st.floats(7.0, 15.0))
    w_swing = draw(st.floats(0.0, 2.0))
    car_w = draw(st.floats(1.5, 2.2))
    return r0, amps, phases, w_mean, w_swing, car_w


@settings(max_examples=12, deadline=None)
@given(smooth_closed_tracks())
def test_line_never_leaves_the_band(params):
    """Random smooth closed tracks (radial harmonics 2-4 on a circle, varying width): every
    offset of the solved line lies within -w_right + c <= α <= w_left - c, and the line
    through the resampled track stays inside the edges (1 cm for resampling)."""
    r0, amps, phases, w_mean, w_swing, car_w = params
    n = int(2 * math.pi * r0 / 2.0)
    phi = np.arange(n) * 2 * math.pi / n
    r = r0 * (1 + sum(a * np.cos((j + 2) * phi + p)
                      for j, (a, p) in enumerate(zip(amps, phases, strict=True))))
    width = w_mean + w_swing * np.sin(3 * phi)
    tr = make_track(r * np.cos(phi), r * np.sin(phi), width=width, closed=True, step_m=2.0)
    bd = L.band(tr, car_w, 0.25)
    alpha, _ = L.min_curvature_offsets(tr.x_m, tr.y_m, bd.lo_m, bd.hi_m, True)
    assert np.all(alpha >= bd.lo_m - 1e-9) and np.all(alpha <= bd.hi_m + 1e-9)
    lt = L.min_curvature_line(tr, car_w, 0.25)
    c = car_w / 2 + 0.25
    assert np.all(lt.width_left_m >= c - 0.01)
    assert np.all(lt.width_m - lt.width_left_m >= c - 0.01)


def test_box_solver_matches_scipy_bvls():
    """The interior-point box solver against scipy.optimize.lsq_linear(method='bvls') (dense
    bounded-variable least squares, Stark & Parker 1995) on one linearised line problem."""
    from scipy.optimize import lsq_linear

    p = corner_points(40.0, 120.0, straight_m=60.0)
    n = len(p)
    nrm = L.normals(p[:, 0], p[:, 1], False)
    k, (dm, d0, dp) = L._curvature_jacobian(p, nrm, False)
    k = np.concatenate([[0.0], k[1:-1], [0.0]])
    J = L._jacobian_matrix(dm, d0, dp, False)
    lo, hi = np.full(n, -4.0), np.full(n, 4.0)
    x, info = L.box_least_squares(J, -k, lo, hi)
    ref = lsq_linear(J.toarray(), -k, bounds=(lo, hi), method="bvls", tol=1e-15)
    assert info["converged"]
    assert np.max(np.abs(x - ref.x)) < 1e-4
    cost = 0.5 * np.sum((J @ x + k) ** 2)
    assert cost <= ref.cost * (1 + 1e-9) + 1e-15


def test_reader_left_right_widths_and_errors(tmp_path):
    f = tmp_path / "lr.csv"
    n = 400
    phi = np.arange(n) * 2 * math.pi / n
    rows = [f"{100 * math.cos(a):.4f},{100 * math.sin(a):.4f},8.0,4.0" for a in phi]
    f.write_text("# closed: true\nx_m,y_m,width_left_m,width_right_m\n" + "\n".join(rows))
    tr = load_track(f)
    assert np.allclose(tr.width_m, 12.0) and np.allclose(tr.width_left_m, 8.0)
    wl, wr = L.edge_widths(tr)
    assert np.allclose(wr, 4.0)
    bd = L.band(tr, 2.0, 0.25)
    assert np.allclose(bd.lo_m, -2.75) and np.allclose(bd.hi_m, 6.75)
    g = tmp_path / "l_only.csv"
    g.write_text("x_m,y_m,width_left_m\n" + "\n".join(r.rsplit(",", 1)[0] for r in rows))
    with pytest.raises(InputError, match="go together"):
        load_track(g)
    h = tmp_path / "narrow.csv"
    h.write_text("# closed: true\nx_m,y_m,width_m\n"
                 + "\n".join(r.rsplit(",", 2)[0] + ",2.4" for r in rows))
    with pytest.raises(InputError, match="narrower than the car"):
        L.band(load_track(h), 2.0, 0.25)


def test_car_width_key_and_default():
    car = make_car()
    assert L.car_width_m(car) == pytest.approx(1.6 + L.CAR_WIDTH_OVER_TRACK_M)
    assert L.car_width_m(make_car(chassis={"overall_width_mm": 1890.0})) == pytest.approx(1.89)
    with pytest.raises(InputError, match="less than the track width"):
        make_car(chassis={"overall_width_m": 1.2})
    with pytest.raises(InputError, match="millimetres"):
        make_car(chassis={"overall_width_m": 1890.0})


def test_cli_line_needs_a_width_and_exports(tmp_path):
    run = CliRunner().invoke
    car = str(ROOT / "examples" / "gt_coupe.toml")
    logged = str(ROOT / "tracks" / "kettlewick_logged.csv")
    r = run(main, ["lap", car, logged, "--line", "min-curvature"])
    assert r.exit_code == 2
    assert r.output.count("\n") == 1 and "no width" in r.output and "--width-m" in r.output
    out = tmp_path / "line.csv"
    r = run(main, ["track", str(ROOT / "tracks" / "kettlewick_loops.csv"), "--line",
                   "min-curvature", "--car", car, "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "shorter than the track file's line" in r.output
    r = run(main, ["track", str(ROOT / "tracks" / "kettlewick_loops.csv"), "--out", str(out)])
    assert r.exit_code == 2 and "already exists" in r.output
    r = run(main, ["lap", car, str(out), "--json"])
    assert r.exit_code == 0, r.output
    r2 = run(main, ["lap", car, str(ROOT / "tracks" / "kettlewick_loops.csv"), "--json",
                    "--line", "min-curvature"])
    assert r2.exit_code == 0, r2.output
    import json

    a, b = json.loads(r.output), json.loads(r2.output)
    assert b["settings"]["line"] == "min-curvature"
    assert a["settings"]["line"] == "centreline"
    # the exported line drives like the line built on the fly (resampled twice: 0.2 %)
    assert a["lap_time_s"] == pytest.approx(b["lap_time_s"], rel=2e-3)


def test_channel_and_centreline_default():
    from lapbalance.lap import CHANNELS, simulate_lap

    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    tr = load_track(ROOT / "tracks" / "oranby_bowl.csv")
    assert CHANNELS["line_offset_m"][0] == "m"
    res = simulate_lap(car, tr, assess_liftoff=False)
    assert np.all(res.channels["line_offset_m"] == 0.0)
    lt = L.on_line(tr, "min-curvature", car=car)
    res2 = simulate_lap(car, lt, assess_liftoff=False)
    assert np.array_equal(res2.channels["line_offset_m"], lt.line_offset_m)
    assert res2.settings["line"] == "min-curvature"


def _demo_cars():
    return [f for f in sorted(glob.glob(str(ROOT / "examples" / "*.toml")))
            if not Path(f).name.startswith("targets")]


def test_demo_circuits_faster_on_the_line():
    """Every demo car on the demo road circuits with a width: the minimum-curvature line is
    faster than the centreline (its corners are wider and the lap is shorter).

    The banked oval is the exception, and the test holds that too: minimising ∫κ² ds there
    bends the line on the long straights, which makes the lap longer and the two 180° turns
    tighter than the centreline's, so the line is slower (minimum curvature is not minimum
    time)."""
    from lapbalance.lap import simulate_lap

    cars = [load_car(f) for f in _demo_cars()]
    tracks = []
    for f in sorted(glob.glob(str(ROOT / "tracks" / "*.csv"))):
        t = load_track(f, step_m=2.0)  # 2 m keeps CI short; the relation holds at 1 m too
        if np.all(np.isfinite(t.width_m)):
            tracks.append(t)
    assert len(tracks) >= 4 and len(cars) >= 5
    for t in tracks:
        lines: dict[float, object] = {}
        for car in cars:
            w = L.car_width_m(car)
            if w not in lines:
                lines[w] = L.on_line(t, "min-curvature", car_width=w)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                a = simulate_lap(car, t, assess_liftoff=False).lap_time_s
                b = simulate_lap(car, lines[w], assess_liftoff=False).lap_time_s
            if "Bowl" in t.name:
                assert lines[w].length_m > t.length_m
                assert np.max(np.abs(lines[w].curvature_1pm)) > np.max(np.abs(t.curvature_1pm))
                assert b > a, (t.name, car.name, a, b)
            else:
                assert b < a, (t.name, car.name, a, b)


@pytest.mark.parametrize("command", ["lap", "compare", "sweep", "check", "report", "track"])
def test_every_lap_command_takes_the_line_options(command):
    r = CliRunner().invoke(main, [command, "--help"])
    assert r.exit_code == 0
    for opt in ("--line [centreline|min-curvature]", "--width-m", "--line-margin-m"):
        assert opt in r.output, (command, opt)


def test_check_runs_on_the_line(tmp_path):
    targets = tmp_path / "t.toml"
    targets.write_text('[[target]]\nname = "line offset within the road"\n'
                       'quantity = "line_offset_m"\ncondition = { range = [-6.0, 6.0] }\n')
    r = CliRunner().invoke(main, ["check", str(ROOT / "examples" / "gt_coupe.toml"),
                                  str(ROOT / "tracks" / "kettlewick_loops.csv"),
                                  str(targets), "--line", "min-curvature", "--json"])
    assert r.exit_code == 0, r.output
    assert '"passed": true' in r.output
