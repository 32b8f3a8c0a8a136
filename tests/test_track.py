"""Tests of lapbalance.track: geometry against analytic results, geodesy against geographiclib,
bad input, corner detection and the demo circuits."""

from __future__ import annotations

import filecmp
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance import track as T
from lapbalance.errors import InputError
from lapbalance.track import Corner, Track, detect_corners, load_track, make_track

ROOT = Path(__file__).resolve().parents[1]
TRACKS = ROOT / "tracks"


def circle(radius, spacing, ccw=True, centre=(0.0, 0.0)):
    n = int(round(2 * math.pi * radius / spacing))
    t = np.arange(n) * 2 * math.pi / n
    y = centre[1] + radius * np.sin(t) * (1 if ccw else -1)
    return centre[0] + radius * np.cos(t), y


def write(tmp_path, text, name="t.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def xy_csv(x, y, extra=None, header_extra=""):
    lines = ["x_m,y_m" + header_extra]
    for i, (a, b) in enumerate(zip(x, y, strict=True)):
        tail = "" if extra is None else "," + ",".join(f"{c[i]:.6f}" for c in extra)
        lines.append(f"{a:.6f},{b:.6f}{tail}")
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------------------------------
# Geometry against analytic results
# ------------------------------------------------------------------------------------------

# Source: analytic geometry: a circle of radius R has curvature 1/R everywhere and length
# 2 pi R; sign by ISO 8855 (yaw positive counter-clockwise seen from above, i.e. a left turn).
@pytest.mark.parametrize("radius", [15.0, 80.0, 120.0, 400.0])
@pytest.mark.parametrize("spacing", [1.0, 2.5, 5.0])
@pytest.mark.parametrize("ccw", [True, False])
def test_clean_circle_curvature_within_half_percent(radius, spacing, ccw):
    x, y = circle(radius, spacing, ccw)
    tr = make_track(x, y, step_m=1.0)
    sign = 1.0 if ccw else -1.0
    assert tr.closed
    assert np.max(np.abs(tr.curvature_1pm * radius * sign - 1.0)) < 0.005
    assert tr.length_m == pytest.approx(2 * math.pi * radius, rel=1e-4)
    assert len(tr.corners) == 1
    assert tr.corners[0].direction == ("left" if ccw else "right")
    assert tr.corners[0].min_radius_m == pytest.approx(radius, rel=0.005)


# Source: analytic geometry (curvature 1/R). Test set-up (our choice): Gaussian noise with
# standard deviation 0.3 m added to each coordinate of points spaced 1-5 m on circles of radius
# 80-150 m; the design target is 3 % everywhere on the lap.
@pytest.mark.parametrize(("radius", "spacing", "seed"),
                         [(100.0, 2.0, 1), (100.0, 5.0, 2), (80.0, 1.0, 3), (150.0, 1.0, 4),
                          (150.0, 3.0, 5)])
def test_noisy_circle_curvature_within_three_percent(radius, spacing, seed):
    rng = np.random.default_rng(seed)
    x, y = circle(radius, spacing)
    x = x + rng.normal(0.0, 0.3, x.size)
    y = y + rng.normal(0.0, 0.3, y.size)
    tr = make_track(x, y, closed=True)
    assert np.max(np.abs(tr.curvature_1pm * radius - 1.0)) < 0.03
    assert tr.length_m == pytest.approx(2 * math.pi * radius, rel=0.005)


# Source: the noise is drawn with a known standard deviation (0.3 m); the estimator should
# find it to within about 25 % (a robust MAD estimate over a few hundred points).
def test_noise_estimate_close_to_drawn_noise():
    rng = np.random.default_rng(7)
    x, y = circle(120.0, 2.0)
    x = x + rng.normal(0.0, 0.3, x.size)
    y = y + rng.normal(0.0, 0.3, y.size)
    u = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    assert T._estimate_noise(x, y, u, True) == pytest.approx(0.3, rel=0.25)
    xc, yc = circle(120.0, 2.0)
    uc = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(xc), np.diff(yc)))])
    assert T._estimate_noise(xc, yc, uc, True) < 1e-3


# Source: analytic geometry: a straight line has zero curvature; its ends are far apart, so
# the track is open and runs 0..length inclusive.
def test_straight_line_is_open_with_zero_curvature():
    s = np.linspace(0.0, 500.0, 101)
    tr = make_track(s * 0.6, s * 0.8, step_m=1.0)
    assert not tr.closed
    assert np.max(np.abs(tr.curvature_1pm)) < 1e-9
    assert tr.length_m == pytest.approx(500.0, rel=1e-7)  # a fitted curve, not interpolated
    assert tr.distance_m[0] == 0.0 and tr.distance_m[-1] == pytest.approx(500.0)
    assert tr.n == 501 and tr.step_m == pytest.approx(1.0)
    assert tr.corners == ()


# Source: definition of grade: a road rising 5 m per 100 m has grade atan(0.05) rad.
def test_grade_from_constant_slope():
    s = np.linspace(0.0, 400.0, 81)
    tr = make_track(s, np.zeros_like(s), z=0.05 * s)
    assert np.allclose(tr.grade_rad, math.atan(0.05), atol=1e-9)
    tr_down = make_track(s[::-1], np.zeros_like(s), z=0.05 * s[::-1])
    assert np.allclose(tr_down.grade_rad, -math.atan(0.05), atol=1e-9)


# Source: definition of grade (rise over run), 4 % slope. Test set-up (our choice): logged
# elevation with 0.3 m Gaussian noise every 2 m; the adaptive elevation low-pass should hold the
# grade within 2.5 % grade points everywhere (ends included) and its mean within 0.1 %.
@pytest.mark.parametrize("seed", [0, 3, 5])
def test_grade_from_noisy_constant_slope(seed):
    rng = np.random.default_rng(seed)
    s = np.arange(0.0, 1000.0, 2.0)
    tr = make_track(s, np.zeros_like(s), z=0.04 * s + rng.normal(0.0, 0.3, s.size))
    g = np.tan(tr.grade_rad)
    assert np.max(np.abs(g - 0.04)) < 0.025
    assert np.mean(g) == pytest.approx(0.04, abs=1e-3)


# Source: unit conversion, 10 deg = 0.174533 rad; bank follows the input (sign kept).
def test_bank_interpolated_and_converted():
    x, y = circle(100.0, 2.0)
    tr = make_track(x, y, bank_deg=np.full(x.size, 10.0), width=np.full(x.size, 12.0))
    assert np.allclose(tr.bank_rad, math.radians(10.0))
    assert np.allclose(tr.width_m, 12.0)
    assert np.all(np.isnan(make_track(x, y).width_m))


# Source: point layout of the public API (closed: N points, ds = L/N, point N not stored;
# open: N points, 0..L inclusive, ds = L/(N-1)).
def test_point_layout_closed_and_open():
    x, y = circle(50.0, 1.0)
    c = make_track(x, y, step_m=0.7)
    assert c.closed
    assert c.step_m == pytest.approx(c.length_m / c.n, rel=1e-12)
    assert abs(c.step_m - 0.7) <= 0.7 / c.n + 1e-12
    assert c.distance_m[-1] == pytest.approx(c.length_m - c.step_m)
    o = make_track(x, y, step_m=0.7, closed=False)
    assert not o.closed
    assert o.step_m == pytest.approx(o.length_m / (o.n - 1), rel=1e-12)
    assert o.distance_m[-1] == pytest.approx(o.length_m)
    # open along the same points: one segment (the closing one) shorter
    assert o.length_m == pytest.approx(c.length_m - math.hypot(x[-1] - x[0], y[-1] - y[0]),
                                       rel=1e-4)
    for a in (c.distance_m, c.x_m, c.curvature_1pm, c.grade_rad, c.bank_rad, c.width_m):
        assert a.dtype == np.float64 and a.flags.c_contiguous and a.shape == (c.n,)


def test_closed_duplicate_end_point_dropped():
    x, y = circle(60.0, 2.0)
    a = make_track(x, y)
    b = make_track(np.append(x, x[0]), np.append(y, y[0]))
    assert b.closed and b.length_m == pytest.approx(a.length_m, rel=1e-12)


# Source: geometry: mirroring the track (y -> -y) turns every left corner into a right one,
# so the curvature changes sign; rotation and translation leave it unchanged.
@settings(max_examples=15, deadline=None)
@given(angle=st.floats(0.0, 2 * math.pi), dx=st.floats(-1e4, 1e4), dy=st.floats(-1e4, 1e4))
def test_curvature_invariant_to_rigid_motion_and_flips_on_mirror(angle, dx, dy):
    t = np.linspace(0.0, 2 * math.pi, 400, endpoint=False)
    x = 300 * np.cos(t) + 40 * np.cos(3 * t)
    y = 200 * np.sin(t) + 30 * np.sin(2 * t)
    base = make_track(x, y)
    c, s = math.cos(angle), math.sin(angle)
    moved = make_track(c * x - s * y + dx, s * x + c * y + dy)
    assert np.allclose(moved.curvature_1pm, base.curvature_1pm, atol=1e-7)
    mirrored = make_track(x, -y)
    assert np.allclose(mirrored.curvature_1pm, -base.curvature_1pm, atol=1e-9)


# ------------------------------------------------------------------------------------------
# Geodesy against geographiclib (WGS-84)
# ------------------------------------------------------------------------------------------

def _logged_trace(lat0, lon0, radius, spacing, seed):
    from geographiclib.geodesic import Geodesic

    g = Geodesic.WGS84
    n = int(round(2 * math.pi * radius / spacing))
    rng = np.random.default_rng(seed)
    pts = []
    for i in range(n):
        az = 360.0 * i / n
        # an oval-ish logged lap: radius varies, small lateral noise
        r = radius * (1.0 + 0.3 * math.cos(2 * math.radians(az))) + rng.normal(0.0, 0.05)
        d = g.Direct(lat0, lon0, az, r)
        pts.append((d["lat2"], d["lon2"]))
    return np.array(pts)


# Source: geographiclib (Karney, "Algorithms for geodesics", J. Geodesy 87, 43-55, 2013),
# WGS-84 geodesic distances; the projection must agree within 0.1 %.
@pytest.mark.parametrize(("lat0", "lon0"), [(52.0, 4.0), (-33.9, 151.2), (64.0, -21.0)])
def test_latlon_import_matches_geographiclib(tmp_path, lat0, lon0):
    from geographiclib.geodesic import Geodesic

    g = Geodesic.WGS84
    pts = _logged_trace(lat0, lon0, 600.0, 4.0, seed=11)
    text = "# closed: true\nlat_deg,lon_deg\n" + "\n".join(
        f"{a:.9f},{b:.9f}" for a, b in pts) + "\n"
    tr = load_track(write(tmp_path, text), step_m=1.0)
    # polyline length of the raw points on the ellipsoid (chords of ~4 m on radii >= 420 m:
    # chord and arc differ by < 1e-5)
    geo_len = sum(g.Inverse(*pts[i], *pts[(i + 1) % len(pts)])["s12"] for i in range(len(pts)))
    assert tr.length_m == pytest.approx(geo_len, rel=1e-3)
    # straight-line distances across the lap
    e, nn = T.latlon_to_local(pts[:, 0], pts[:, 1])
    for i, j in [(0, len(pts) // 2), (len(pts) // 4, 3 * len(pts) // 4), (5, 300)]:
        ref = g.Inverse(*pts[i], *pts[j])["s12"]
        assert math.hypot(e[i] - e[j], nn[i] - nn[j]) == pytest.approx(ref, rel=1e-3)


# ------------------------------------------------------------------------------------------
# CSV metadata and format
# ------------------------------------------------------------------------------------------

def test_metadata_lines_and_extra_columns(tmp_path):
    x, y = circle(100.0, 3.0)
    z = np.zeros_like(x)
    text = ("# name: Test Loop\n# closed: false\n# sectors_m: 0, 150, 400\n"
            + xy_csv(x, y, [z, np.full(x.size, 5.0)], ",z_m,bank_deg"))
    tr = load_track(write(tmp_path, text))
    assert tr.name == "Test Loop" and not tr.closed
    assert tr.sector_starts_m == (0.0, 150.0, 400.0)
    assert np.allclose(np.degrees(tr.bank_rad), 5.0)
    assert tr.source.endswith("t.csv")
    # argument overrides the file
    assert load_track(write(tmp_path, text), closed=True).closed
    # default sectors: three equal
    tr2 = load_track(write(tmp_path, xy_csv(x, y), "u.csv"))
    assert tr2.name == "u"
    assert tr2.sector_starts_m == pytest.approx((0.0, tr2.length_m / 3, 2 * tr2.length_m / 3))


# ------------------------------------------------------------------------------------------
# Bad input: one line naming the file, row/column and the fix
# ------------------------------------------------------------------------------------------

GOOD_X, GOOD_Y = circle(100.0, 5.0)


@pytest.mark.parametrize(("content", "match"), [
    ("", r"t\.csv: the file is empty"),
    ("   \n\n", "empty"),
    ("# name: x\n", "no header row"),
    ("1.0,2.0\n3.0,4.0\n", r"line 1: the first row is numbers, not a header; add a header"),
    ("x_m;y_m\n1;2\n", "semicolons between columns; use commas"),
    ("x_m\ty_m\n1\t2\n", "tabs between columns; use commas"),
    ("east,north\n1,2\n", r"header needs columns x_m,y_m or lat_deg,lon_deg \(unknown: east"),
    ("x_m,y_m\n", "no rows of points"),
    ("x_m,y_m\n1,2\n3\n", r"line 3: 1 values but the header has 2 columns"),
    ("x_m,y_m\n1,2\n3,abc\n", r'line 3: column y_m = "abc" is not a number'),
    ("x_m,y_m\n1,2\n3,12 m\n", r'line 3: column y_m = "12 m" is not a number'),
    ("x_m,y_m\n1,2\nnan,4\n", r"line 3: column x_m = nan is not a finite number"),
    ("x_m,y_m\n1,2\n3,inf\n", r"line 3: column y_m = inf is not a finite number"),
    ("x_m,y_m,x_m\n1,2,3\n", "appears twice"),
    ("x_m,y_m,lat_deg,lon_deg\n1,2,3,4\n", "keep one pair"),
    ("x_m,y_m\n" + "5,5\n" * 30, r"only 1 distinct point\(s\)"),
    ("x_m,y_m\n0,0\n100,0\n", r"only 2 distinct point\(s\); give at least 10"),
    ("lat_deg,lon_deg\n95,10\n", r"line 2: lat_deg = 95 is outside -90..90"),
    ("lat_deg,lon_deg\n45,190\n", r"line 2: lon_deg = 190 is outside -180..180"),
    ("# closed: maybe\nx_m,y_m\n" + "".join(f"{i},0\n" for i in range(20)),
     r"# closed: \"maybe\" is not true or false"),
    ("# sectors_m: 0, a\nx_m,y_m\n1,2\n", "sectors_m: .* is not a list of numbers"),
])
def test_bad_csv_raises_one_line(tmp_path, content, match):
    with pytest.raises(InputError, match=match) as e:
        load_track(write(tmp_path, content))
    assert "\n" not in str(e.value)
    assert str(e.value).startswith(str(tmp_path / "t.csv"))


def test_binary_file(tmp_path):
    p = tmp_path / "t.csv"
    p.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR")
    with pytest.raises(InputError, match="binary file, not CSV text; export the track as CSV"):
        load_track(p)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        load_track(tmp_path / "nope.csv")


def test_one_km_gap_names_the_row(tmp_path):
    s = np.arange(0.0, 200.0, 2.0)
    x = np.concatenate([s, s[-1] + 1000.0 + s])
    text = xy_csv(x, np.zeros_like(x))
    # the first point after the gap is data row 101, file line 102
    with pytest.raises(InputError, match=r"line 102: jump of 1000 m from the previous point"):
        load_track(write(tmp_path, text))


# Common practice: no car turns on a radius below about 3 m; a trace that doubles back on
# itself (here a 180-degree turn within 2 m after 60 m) cannot be a road.
def test_doubling_back_names_the_distance(tmp_path):
    s = np.arange(0.0, 62.0, 2.0)
    x = np.concatenate([s, s[::-1]])
    y = np.concatenate([np.zeros_like(s), np.full_like(s, 2.0)])
    # the turn is at input rows 31-32 (file lines 32-33); the distance is along the fitted line
    msg = (r"radius [0-2](\.\d+)? m at \d+ m along the track \(near line 3[1-4]; .*\): "
           r"the trace zig-zags")
    with pytest.raises(InputError, match=msg):
        load_track(write(tmp_path, xy_csv(x, y)), closed=False)


def test_bank_in_radians_detected(tmp_path):
    x, y = GOOD_X, GOOD_Y
    text = xy_csv(x, y, [np.full(x.size, 0.21)], ",bank_deg")
    with pytest.raises(InputError, match="bank_deg: .*looks like radians; multiply by 57.2958"):
        load_track(write(tmp_path, text))


def test_bank_too_large(tmp_path):
    x, y = GOOD_X, GOOD_Y
    b = np.full(x.size, 10.0)
    b[7] = 75.0
    with pytest.raises(InputError, match=r"line 9: bank_deg = 75 is beyond ±60 deg"):
        load_track(write(tmp_path, xy_csv(x, y, [b], ",bank_deg")))


def test_elevation_jump_too_steep(tmp_path):
    s = np.arange(0.0, 300.0, 5.0)
    z = np.zeros_like(s)
    z[20:] += 30.0  # a 30 m step over 5 m: feet typed as metres, or a spike
    msg = r"line 22: z_m changes by \+30.0 m over 20 m \(grade 150 %.*step \+30.0 m over 5.0 m"
    with pytest.raises(InputError, match=msg):
        load_track(write(tmp_path, xy_csv(s, np.zeros_like(s), [z], ",z_m")))


def test_closed_forced_on_far_apart_ends(tmp_path):
    s = np.arange(0.0, 600.0, 5.0)
    with pytest.raises(InputError, match=r"closed track but its ends are 595 m apart; mark it"):
        load_track(write(tmp_path, xy_csv(s, np.zeros_like(s))), closed=True)


@pytest.mark.parametrize(("sectors", "match"), [
    ([100.0, 200.0], "must begin with 0"),
    ([0.0, 300.0, 200.0], "must increase"),
    ([0.0, 9999.0], "below the length"),
])
def test_bad_sectors(sectors, match):
    with pytest.raises(InputError, match=match):
        make_track(GOOD_X, GOOD_Y, sector_starts_m=sectors)


def test_make_track_bad_arrays():
    with pytest.raises(InputError, match=r"x\[3\] is not finite"):
        make_track([0, 1, 2, np.nan], [0, 0, 0, 0])
    with pytest.raises(InputError, match="y has 3 values but x has 4"):
        make_track([0, 1, 2, 3], [0, 0, 0])
    with pytest.raises(InputError, match="step = -1 must be a positive"):
        make_track(GOOD_X, GOOD_Y, step_m=-1)


# ------------------------------------------------------------------------------------------
# Corner detection
# ------------------------------------------------------------------------------------------

def _profile(n, parts):
    k = np.zeros(n)
    for a, b, v in parts:
        k[a:b] = v
    return np.arange(n, dtype=float), k


def test_hysteresis_does_not_split_on_dither():
    d, k = _profile(1000, [(100, 300, 1 / 100)])
    # dither between the on and off thresholds inside the corner: still one corner
    k[180:190] = 1 / 600
    cs = detect_corners(d, k, closed=False)
    assert len(cs) == 1
    c = cs[0]
    assert (c.id, c.direction, c.entry_m, c.exit_m) == (1, "left", 100.0, 299.0)
    assert c.min_radius_m == pytest.approx(100.0)


def test_merge_short_gap_and_split_long_gap():
    d, k = _profile(1000, [(100, 200, -1 / 50), (215, 300, -1 / 40), (500, 600, -1 / 60),
                           (700, 800, 1 / 60)])
    cs = detect_corners(d, k, closed=False)
    assert [c.direction for c in cs] == ["right", "right", "left"]
    assert (cs[0].entry_m, cs[0].exit_m, cs[0].min_radius_m) == (100.0, 299.0, 40.0)
    assert cs[0].apex_m == 215.0


def test_tiny_corner_dropped():
    d, k = _profile(1000, [(100, 105, 1 / 200), (400, 500, 1 / 100)])  # 1.4 deg vs 57 deg
    cs = detect_corners(d, k, closed=False)
    assert len(cs) == 1 and cs[0].entry_m == 400.0


def test_corner_wrapping_over_start_line():
    d, k = _profile(1000, [(950, 1000, 1 / 80), (0, 40, 1 / 80), (400, 500, -1 / 90)])
    cs = detect_corners(d, k, closed=True)
    assert len(cs) == 2
    assert cs[0].direction == "right" and cs[0].id == 1
    wrap = cs[1]
    assert wrap.direction == "left" and wrap.entry_m == 950.0 and wrap.exit_m == 39.0
    assert wrap.exit_m < wrap.entry_m
    # open: the same trace gives two separate pieces
    assert len(detect_corners(d, k, closed=False)) == 3


# ------------------------------------------------------------------------------------------
# Demo circuits (invented): checks of the brief's requirements, not reference values
# ------------------------------------------------------------------------------------------

@pytest.mark.parametrize("name", ["veldmoor_ring", "kettlewick_loops", "oranby_bowl",
                                  "skarhelm_climb", "kettlewick_logged"])
def test_demo_tracks_load_and_are_drivable(name):
    tr = load_track(TRACKS / f"{name}.csv")
    assert isinstance(tr, Track) and all(isinstance(c, Corner) for c in tr.corners)
    assert 1.0 / np.max(np.abs(tr.curvature_1pm)) >= 10.0 * 0.99
    assert len(tr.corners) >= 2
    ids = [c.id for c in tr.corners]
    assert ids == list(range(1, len(ids) + 1))


def test_demo_track_kinds():
    fast = load_track(TRACKS / "veldmoor_ring.csv")
    assert fast.closed and 4500 < fast.length_m < 5500
    twisty = load_track(TRACKS / "kettlewick_loops.csv")
    assert twisty.closed and 2500 < twisty.length_m < 3000
    assert 10.0 <= min(c.min_radius_m for c in twisty.corners) <= 20.0
    oval = load_track(TRACKS / "oranby_bowl.csv")
    assert oval.closed and 12.0 <= np.degrees(oval.bank_rad.max()) <= 20.0
    hill = load_track(TRACKS / "skarhelm_climb.csv")
    assert not hill.closed and 4000 < hill.length_m < 5000
    assert 250.0 <= hill.z_m[-1] - hill.z_m[0] <= 350.0


def test_make_tracks_script_is_reproducible(tmp_path):
    subprocess.run([sys.executable, str(ROOT / "scripts" / "make_tracks.py"), "--out",
                    str(tmp_path)], check=True, capture_output=True)
    for f in sorted(TRACKS.glob("*.csv")):
        assert filecmp.cmp(f, tmp_path / f.name, shallow=False), f.name
