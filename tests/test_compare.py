"""Tests for lapbalance.compare and the `lapbalance compare` command."""

from __future__ import annotations

import json
import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance.car import load_car
from lapbalance.compare import compare, lap_segments, segment_times, time_at, time_delta
from lapbalance.errors import InputError
from lapbalance.lap import simulate_lap
from tests.helpers import analytic_track

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def corner(i, direction, entry, exit_, radius):
    return SimpleNamespace(id=i, direction=direction, entry_m=float(entry),
                           apex_m=float(entry + exit_) / 2, exit_m=float(exit_),
                           min_radius_m=float(radius))


def loop_track(ds=2.0, closed=True, shift=0):
    """~1 km test track: two corners joined by straights (``shift`` rolls the start line)."""
    n = int(1000 / ds)
    k = np.zeros(n)
    d = np.arange(n) * ds
    spans = [(200, 400, 1 / 60), (600, 800, -1 / 120)]
    cs = []
    for j, (a, b, kk) in enumerate(spans):
        k[(d >= a) & (d < b)] = kk
        cs.append([j + 1, "left" if kk > 0 else "right", a, b - ds, 1 / abs(kk)])
    if shift:
        k = np.roll(k, -int(shift / ds))
        for c in cs:
            c[2] = (c[2] - shift) % 1000
            c[3] = (c[3] - shift) % 1000
    return analytic_track(k, ds=ds, closed=closed, name="test loop",
                          corners=[corner(*c) for c in cs])


@pytest.fixture(scope="module")
def base():
    return load_car(EXAMPLES / "gt_coupe.toml")


@pytest.fixture(scope="module")
def track():
    return loop_track()


# Source: definition of the delta (variant lap time minus base lap time); the solver is
# deterministic, so compare() must reproduce two separate runs bit for bit.
def test_delta_equals_difference_of_separate_runs(base, track):
    res = compare(base, [EXAMPLES / "gt_coupe_high_wing.toml"], [track])
    b = simulate_lap(base, track).lap_time_s
    v = simulate_lap(load_car(EXAMPLES / "gt_coupe_high_wing.toml"), track).lap_time_s
    rows = res.summary_for(res.tracks[0])
    assert rows[0]["delta_s"] == 0.0
    assert rows[1]["lap_time_s"] == v
    assert rows[1]["delta_s"] == v - b
    assert rows[1]["delta_s"] != 0.0


# Source: additivity of time over a partition of the lap (the segments tile it once), so
# segment times sum to the lap time and segment deltas to the lap delta, to rounding.
@pytest.mark.parametrize("closed,shift", [(True, 0), (True, 300), (True, 700), (False, 0)])
def test_segment_deltas_add_up_to_lap_delta(base, closed, shift):
    tr = loop_track(closed=closed, shift=shift)
    res = compare(base, [{"aero.downforce_area_m2": 2.0, "aero.drag_area_m2": 0.9}], [tr])
    key = res.tracks[0]
    segs = res.segments_for(key)
    lap = {r["car"]: r for r in res.summary_for(key)}
    for label in res.labels:
        mine = [s for s in segs if s["car"] == label]
        assert sum(s["time_s"] for s in mine) == pytest.approx(lap[label]["lap_time_s"],
                                                             abs=1e-9)
        assert sum(s["delta_s"] for s in mine) == pytest.approx(lap[label]["delta_s"],
                                                              abs=1e-9)
    assert {s["segment"] for s in segs} >= {"C1", "C2"}
    assert any(abs(s["delta_s"]) > 1e-4 for s in segs if s["kind"] == "corner")


# Source: the segments partition the track: their lengths add up to the track length.
@pytest.mark.parametrize("closed,shift", [(True, 0), (True, 700), (False, 0)])
def test_segments_tile_the_track(closed, shift):
    tr = loop_track(closed=closed, shift=shift)
    segs = lap_segments(tr)
    L = tr.length_m
    total = sum((s["end_m"] - s["start_m"]) % L if closed else s["end_m"] - s["start_m"]
                for s in segs)
    assert total == pytest.approx(L, abs=1e-9)
    kinds = [s["kind"] for s in segs]
    assert kinds.count("corner") == 2
    assert all(a != b for a, b in zip(kinds, kinds[1:], strict=False))  # alternating


def test_no_corners_is_one_straight(base):
    tr = analytic_track(np.full(500, 1 / 400), ds=2.0, closed=True)
    (seg,) = lap_segments(tr)
    assert (seg["start_m"], seg["end_m"]) == (0.0, tr.length_m)
    r = simulate_lap(base, tr)
    assert segment_times(r) == [pytest.approx(r.lap_time_s, rel=1e-15)]


# Source: time over a step at constant acceleration, dt = 2 ds / (v_i + v_{i+1}) (uniformly
# accelerated motion, s = (v0 + v1) t / 2), summed over the corner's steps.
def test_corner_time_is_time_spent_from_entry_to_exit(base, track):
    r = simulate_lap(base, track)
    c1 = track.corners[0]
    d, v = r.channels["distance_m"], r.channels["speed_mps"]
    i0, i1 = int(np.searchsorted(d, c1.entry_m)), int(np.searchsorted(d, c1.exit_m))
    expect = float(np.sum(2 * track.step_m / (v[i0:i1] + v[i0 + 1:i1 + 1])))
    segs = lap_segments(track)
    t = dict(zip((s["segment"] for s in segs), segment_times(r, segs), strict=True))
    assert t["C1"] == pytest.approx(expect, rel=1e-12)
    assert time_at(r, track.length_m) == r.lap_time_s


# Source: aero balance in the CG convention is constant without an aero map
# (docs/method.md: F_Lf / (F_Lf + F_Lr), both scale with dynamic pressure).
def test_balance_bands_and_empty_band(base, track):
    res = compare(base, [["aero.drag_area_m2=0.7"]], [track], speed_bands_kph=(150, 150))
    r0 = res.summary[0]
    assert r0["aero_balance_front_low"] == pytest.approx(base.aero.balance_cg, rel=1e-12)
    assert r0["aero_balance_front_high"] == pytest.approx(base.aero.balance_cg, rel=1e-12)
    g = base.aero.balance_ground(base.chassis.cg_height, base.chassis.wheelbase)
    assert r0["aero_balance_front_ground_low"] == pytest.approx(g, rel=1e-12)
    res2 = compare(base, [["aero.drag_area_m2=0.7"]], [track], speed_bands_kph=(50, 400))
    assert math.isnan(res2.summary[0]["aero_balance_front_low"])
    assert res2.to_json()["summary"][0]["aero_balance_front_high"] is None


def test_time_delta_ends_at_lap_delta(base, track):
    res = compare(base, [{"aero.drag_area_m2": 0.7}], [track])
    b, v = res.laps[0]
    dl = time_delta(b, v)
    assert dl[0] == 0.0
    assert time_at(v, track.length_m) - time_at(b, track.length_m) == \
        res.summary[1]["delta_s"]
    assert dl.shape == b.channels["distance_m"].shape


def test_labels_and_bad_input(base, track):
    res = compare(base, [{"aero.drag_area_m2": 0.7}, ["aero.drag_area_m2=0.7"]], [track])
    assert res.labels == [base.name, "aero.drag_area_m2=0.7", "aero.drag_area_m2=0.7 (2)"]
    two = compare(base, [{"aero.drag_area_m2": 0.7}], [track, track], labels=["a", "b"])
    assert two.tracks == ["test_loop", "test_loop_2"] and two.labels == ["a", "b"]
    with pytest.raises(InputError, match="labels"):
        compare(base, [{"aero.drag_area_m2": 0.7}], [track], labels=["one"])
    with pytest.raises(InputError, match="unique"):
        compare(base, [{"aero.drag_area_m2": 0.7}], [track], labels=["a", "a"])
    with pytest.raises(InputError, match='did you mean "drag_area_m2"'):
        compare(base, [{"aero.drag_area": 0.7}], [track])
    with pytest.raises(InputError, match="at least one track"):
        compare(base, [{"aero.drag_area_m2": 0.7}], [])


def test_package_level_names_are_callable(base, track):
    import lapbalance.compare  # noqa: F401  (binds the module to the package name)

    res = lapbalance.compare(base, [{"aero.drag_area_m2": 0.7}], track)
    assert res.labels[0] == base.name
    assert callable(lapbalance.sweep)


# --------------------------------------------------------------------------------------------
# CLI
# --------------------------------------------------------------------------------------------


TRACKS = Path(__file__).resolve().parents[1] / "tracks"


@pytest.fixture()
def track_file():
    """A demo circuit file, read by the real track loader (with --step-m 2 in the tests)."""
    return str(TRACKS / "kettlewick_loops.csv")


# Source: additivity of time over a partition of the lap, on the demo circuits as the track
# loader finds their corners (closed lap and open hill-climb run).
@pytest.mark.parametrize("name", ["veldmoor_ring.csv", "skarhelm_climb.csv"])
def test_segments_add_up_on_demo_tracks(base, name):
    from lapbalance.track import load_track

    tr = load_track(TRACKS / name, step_m=5.0)
    res = compare(base, [{"aero.downforce_area_m2": 2.0}], [tr])
    segs = res.segments_for(res.tracks[0])
    n_corners = len([s for s in segs if s["kind"] == "corner" and s["car"] == res.labels[0]])
    assert n_corners == len(tr.corners)
    for row in res.summary:
        mine = [s for s in segs if s["car"] == row["car"]]
        assert sum(s["time_s"] for s in mine) == pytest.approx(row["lap_time_s"], abs=1e-9)
        assert sum(s["delta_s"] for s in mine) == pytest.approx(row["delta_s"], abs=1e-9)


def run(args):
    from lapbalance.cli import main

    return CliRunner().invoke(main, args)


def test_cli_compare_prints_and_writes(track_file, tmp_path):
    out = tmp_path / "cmp"
    r = run(["compare", str(EXAMPLES / "gt_coupe.toml"),
             str(EXAMPLES / "gt_coupe_high_wing.toml"), "--track", track_file,
             "--set-variant", "aero.downforce_area_m2=1.9,aero.drag_area_m2=0.86",
             "--out", str(out), "--step-m", "2"])
    assert r.exit_code == 0, r.output
    assert "delta s" in r.output and "C1" in r.output and "lap" in r.output
    names = sorted(p.name for p in out.iterdir())
    assert "compare_Kettlewick_Loops.csv" in names and "corners_Kettlewick_Loops.csv" in names
    assert any(n.startswith("overlay_") and n.endswith(".png") for n in names)
    text = (out / "compare_Kettlewick_Loops.csv").read_text().splitlines()
    assert len(text) == 4 and text[0].startswith("car,lap_time_s,delta_s")
    # an existing output folder is kept unless --force
    r2 = run(["compare", str(EXAMPLES / "gt_coupe.toml"), "--track", track_file,
              "--set-variant", "aero.drag_area_m2=0.7", "--out", str(out), "--step-m", "2"])
    assert r2.exit_code == 2 and "--force" in r2.output


def test_cli_compare_json_and_errors(track_file):
    r = run(["compare", str(EXAMPLES / "gt_coupe.toml"), "--track", track_file,
             "--set-variant", "aero.drag_area_m2=0.7", "--json", "--step-m", "2"])
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    assert data["labels"] == ["Halden GT coupe", "aero.drag_area_m2=0.7"]
    r = run(["compare", str(EXAMPLES / "gt_coupe.toml"), "--track", track_file])
    assert r.exit_code == 2 and "at least one variant" in r.output
    r = run(["compare", str(EXAMPLES / "gt_coupe.toml"), "--track", track_file,
             "--set-variant", "aero.dragarea_m2=0.7"])
    assert r.exit_code == 2 and "did you mean" in r.output and "Traceback" not in r.output
    assert r.output.startswith("lapbalance: --set-variant: aero.dragarea_m2:")


def test_split_settings_keeps_lists_together():
    from lapbalance.cli.compare_cmd import split_settings

    assert split_settings("a.b=1, powertrain.gear_ratios=[3.0, 2.0],c.d='x,y'") == [
        "a.b=1", "powertrain.gear_ratios=[3.0, 2.0]", "c.d='x,y'"]
    with pytest.raises(InputError, match="--set-variant"):
        split_settings("aero.drag_area_m2")
