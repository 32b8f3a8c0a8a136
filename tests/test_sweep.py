"""Tests for lapbalance.sweep and the `lapbalance sweep` command."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance.car import load_car
from lapbalance.errors import InfeasibleError, InputError
from lapbalance.lap import simulate_lap
from lapbalance.sweep import RESULT_COLUMNS, parse_vary, point_key, sweep, sweep_points
from tests.test_compare import EXAMPLES, TRACKS, loop_track

VARY = {"aero.downforce_area_m2": [1.2, 2.0], "brakes.bias_front": [0.55, 0.65]}


@pytest.fixture(scope="module")
def car():
    return load_car(EXAMPLES / "gt_coupe.toml")


@pytest.fixture(scope="module")
def track():
    return loop_track(ds=2.0)


@pytest.fixture(scope="module")
def serial(car, track):
    """The reference: the 2x2 grid run here, one point after another."""
    return sweep(car, track, VARY)


def same_rows(a, b):
    assert [r["point"] for r in a] == [r["point"] for r in b]
    for x, y in zip(a, b, strict=True):
        assert x == y


# Source: a sweep point is the car with that override run once; the solver is deterministic.
def test_one_value_sweep_equals_a_single_run(car, track):
    (row,) = sweep(car, track, {"aero.drag_area_m2": [0.85]})
    r = simulate_lap(car.with_overrides({"aero.drag_area_m2": 0.85}), track)
    assert row["status"] == "ok"
    assert row["lap_time_s"] == r.lap_time_s
    assert row["top_speed_kph"] == float(r.channels["speed_kph"].max())
    assert row["liftoff_worst_shift"] == max(c["liftoff_max_shift"] for c in r.corners)
    assert row["liftoff_max_usage_rear"] == max(c["liftoff_max_usage_rear"] for c in r.corners)
    assert row["liftoff_margin_min"] == min(c["liftoff_margin"] for c in r.corners)
    assert row["aero.drag_area_m2"] == 0.85
    assert set(RESULT_COLUMNS) <= set(row)


def test_points_leave_the_callers_car_unchanged(car, track):
    # Source: definition (each point's car is built from a copy of the keys; an override
    # must not reach the caller's car or the next point).
    import copy

    before = copy.deepcopy(car.raw)
    rows = sweep(car, track, {"powertrain.final_drive": [3.2, 3.9]})
    assert car.raw == before
    assert rows[0]["lap_time_s"] != rows[1]["lap_time_s"]
    (again,) = sweep(car, track, {"powertrain.final_drive": [3.2]})
    assert again["lap_time_s"] == rows[0]["lap_time_s"]


def test_grid_order_and_values(serial):
    assert [(r["aero.downforce_area_m2"], r["brakes.bias_front"]) for r in serial] == [
        (1.2, 0.55), (1.2, 0.65), (2.0, 0.55), (2.0, 0.65)]
    times = [r["lap_time_s"] for r in serial]
    # Common practice: more downforce at equal drag is faster on a cornering track.
    assert times[2] < times[0]


# Source: McKay, Beckman & Conover (1979), Technometrics 21(2): a Latin hypercube of n points
# puts exactly one point in each of the n equal-probability strata of every variable.
def test_latin_hypercube_strata_and_seed():
    pts = sweep_points({"aero.drag_area_m2": [0.6, 1.0], "brakes.bias_front": [0.5, 0.7]},
                       "lhs", n=8, seed=3)
    assert len(pts) == 8
    for key, (lo, hi) in (("aero.drag_area_m2", (0.6, 1.0)), ("brakes.bias_front", (0.5, 0.7))):
        x = np.array([p[key] for p in pts])
        strata = np.floor((x - lo) / (hi - lo) * 8).astype(int)
        assert sorted(strata) == list(range(8))
    assert pts == sweep_points({"aero.drag_area_m2": [0.6, 1.0],
                                "brakes.bias_front": [0.5, 0.7]}, "lhs", n=8, seed=3)


# Source: numpy.linspace semantics (n evenly spaced values, both ends included).
def test_parse_vary_forms():
    assert parse_vary("aero.downforce_area_m2=1.2:2.0:5") == (
        "aero.downforce_area_m2", list(np.linspace(1.2, 2.0, 5)))
    assert parse_vary("brakes.bias_front=0.55,0.6") == ("brakes.bias_front", [0.55, 0.6])
    assert parse_vary("tyres.rear.peak_friction=1.4") == ("tyres.rear.peak_friction", [1.4])
    assert parse_vary("aero.drag_area_m2=0.7:0.9", "lhs") == ("aero.drag_area_m2", [0.7, 0.9])


@pytest.mark.parametrize("spec,match", [
    ("aero.downforce_area=1:2:3", 'did you mean "downforce_area_m2"'),
    ("aero.drag_area_m2=0.7:0.9", "lo:hi:n"),
    ("aero.drag_area_m2=0.7:0.9:0", "at least 1"),
    ("aero.drag_area_m2=0.7:0.9:x", "not a whole number"),
    ("aero.drag_area_m2=a,b", "not a number"),
    ("aero.drag_area_m2=0.7,,0.8", "empty value"),
    ("powertrain.drive=1,2", "not a numeric key"),
    ("aero.drag_area_m2", "not section.key"),
])
def test_parse_vary_errors(spec, match):
    with pytest.raises(InputError, match=match) as e:
        parse_vary(spec)
    assert "\n" not in str(e.value)


def test_out_of_range_value_fails_before_running(car, track):
    with pytest.raises(InputError, match="--vary.*chassis.mass_kg.*not physical"):
        sweep(car, track, {"chassis.mass_kg": [1300.0, 30.0]})


def test_resume_skips_finished_points(car, track, serial, tmp_path):
    out = tmp_path / "sw"

    class Stop(Exception):
        pass

    def stop_after_two(done, total, row):
        if done == 2:
            raise Stop

    with pytest.raises(Stop):
        sweep(car, track, VARY, out=out, progress=stop_after_two)
    lines = (out / "sweep.csv").read_text().splitlines()
    assert len(lines) == 3  # header + the two finished points
    assert not (out / "results.csv").exists()
    computed = []
    rows = sweep(car, track, VARY, out=out, progress=lambda d, t, r: computed.append(r))
    assert len(computed) == 2
    assert {r["point"] for r in computed}.isdisjoint(l.split(",")[0] for l in lines[1:])
    same_rows(rows, serial)
    with open(out / "results.csv", newline="") as fh:
        res = list(csv.DictReader(fh))
    assert [float(r["lap_time_s"]) for r in res] == [r["lap_time_s"] for r in serial]
    meta = json.loads((out / "sweep.json").read_text())
    assert meta["points"] == 4 and meta["best"]["lap_time_s"] == min(
        r["lap_time_s"] for r in serial)
    assert (out / "lap_time.png").read_bytes()[:4] == b"\x89PNG"
    assert (out / "liftoff_shift.png").exists()
    # a line cut short by an interrupted run is dropped and that point recomputed
    log = out / "sweep.csv"
    text = log.read_text().splitlines(keepends=True)
    log.write_text("".join(text[:-1]) + text[-1][:25])
    computed.clear()
    rows = sweep(car, track, VARY, out=out, progress=lambda d, t, r: computed.append(r))
    assert len(computed) == 1
    same_rows(rows, serial)


def test_log_of_another_sweep_is_not_mixed(car, track, tmp_path):
    out = tmp_path / "sw"
    sweep(car, track, {"aero.drag_area_m2": [0.8]}, out=out)
    other = car.with_overrides({"chassis.mass_kg": 1400.0})
    with pytest.raises(InputError, match="another car.*--force"):
        sweep(other, track, {"aero.drag_area_m2": [0.8]}, out=out)
    with pytest.raises(InputError, match="other keys"):
        sweep(car, track, {"aero.downforce_area_m2": [1.5]}, out=out)
    rows = sweep(other, track, {"aero.drag_area_m2": [0.8]}, out=out, force=True)
    assert len((out / "sweep.csv").read_text().splitlines()) == 2
    assert rows[0]["lap_time_s"] > 0
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "notes.txt").write_text("mine")
    for force in (False, True):  # a folder holding the user's files is never taken
        with pytest.raises(InputError, match=r"holds 1 file lapbalance did not write "
                                             r"\(notes\.txt\)"):
            sweep(car, track, {"aero.drag_area_m2": [0.8]}, out=tmp_path / "busy",
                  force=force)
    assert sorted(p.name for p in (tmp_path / "busy").iterdir()) == ["notes.txt"]


def test_infeasible_point_is_recorded_not_fatal(car, track, monkeypatch):
    import lapbalance.lap as lap

    real = lap.simulate_lap

    def fake(c, t, **kw):
        if c.aero.drag_area > 0.95:
            raise InfeasibleError("cannot hold the track", "car")
        return real(c, t, **kw)

    monkeypatch.setattr(lap, "simulate_lap", fake)
    rows = sweep(car, track, {"aero.drag_area_m2": [0.8, 1.0]})
    assert [r["status"] for r in rows] == ["ok", "infeasible"]
    assert rows[1]["lap_time_s"] is None and "cannot hold" in rows[1]["message"]


def test_process_pool_gives_the_same_rows(car, track, serial, tmp_path):
    rows = sweep(car, track, VARY, workers=2, out=tmp_path / "pool")
    same_rows(rows, serial)
    assert len((tmp_path / "pool" / "sweep.csv").read_text().splitlines()) == 5


def test_dask_cluster_gives_the_same_rows(car, track, serial):
    distributed = pytest.importorskip("dask.distributed")
    import dask

    # Worker processes forked from one server start in about half the time of spawned ones.
    with dask.config.set({"distributed.worker.multiprocessing-method": "forkserver"}), \
            distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                     dashboard_address=None) as cluster:
        rows = sweep(car, track, VARY, cluster=cluster.scheduler_address)
    same_rows(rows, serial)


def test_point_key_is_stable():
    assert point_key({"a.b": 0.1, "c.d": 2}) == "a.b=0.1;c.d=2.0"


def test_package_names_from_a_fresh_interpreter():
    src = str(Path(__file__).resolve().parents[1] / "src")
    code = ("import lapbalance; f = lapbalance.sweep; g = lapbalance.compare; "
            "import lapbalance.sweep as m; print(callable(f), callable(g), callable(m))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={"PYTHONPATH": src}, timeout=120)
    assert out.stdout.split() == ["True", "True", "True"], out.stderr


# --------------------------------------------------------------------------------------------
# CLI
# --------------------------------------------------------------------------------------------


@pytest.fixture()
def track_file():
    """A demo circuit file, read by the real track loader (with --step-m 2 in the tests)."""
    return str(TRACKS / "kettlewick_loops.csv")


def run(args):
    from lapbalance.cli import main

    return CliRunner().invoke(main, args)


def test_cli_sweep_grid(track_file, tmp_path, car):
    from lapbalance.track import load_track

    out = tmp_path / "cli"
    r = run(["sweep", str(EXAMPLES / "gt_coupe.toml"), track_file, "--step-m", "2",
             "--vary", "aero.downforce_area_m2=1.2:2.0:2", "--vary", "brakes.bias_front=0.55,0.65",
             "--out", str(out)])
    assert r.exit_code == 0, r.output
    one = simulate_lap(car.with_overrides({"aero.downforce_area_m2": 1.2,
                                           "brakes.bias_front": 0.55}),
                       load_track(track_file, step_m=2.0))
    assert "lap s" in r.output and f"{one.lap_time_s:.3f}" in r.output
    assert {"sweep.csv", "results.csv", "sweep.json", "lap_time.png"} <= {
        p.name for p in out.iterdir()}
    r = run(["sweep", str(EXAMPLES / "gt_coupe.toml"), track_file, "--lhs", "3", "--step-m", "2",
             "--vary", "aero.drag_area_m2=0.7:0.9", "--set", "chassis.mass_kg=1250", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output[r.output.index("{"):])
    data = doc["points"]
    assert doc["provenance"]["cars"][0]["overrides"][0]["text"] == "chassis.mass_kg=1250"
    assert len(data) == 3 and all(0.7 <= d["aero.drag_area_m2"] <= 0.9 for d in data)


@pytest.mark.parametrize("args,match", [
    (["--vary", "aero.dragarea_m2=0.7:0.9:3"], 'did you mean "drag_area_m2"'),
    (["--vary", "aero.drag_area_m2=0.7:0.9"], "lo:hi:n"),
    (["--vary", "aero.drag_area_m2=0.7:0.9:0"], "at least 1"),
    (["--vary", "aero.drag_area_m2=0.7", "--workers", "0"], "--workers: = 0 must be between 1"),
    (["--vary", "aero.drag_area_m2=1,2", "--vary", "aero.drag_area_m2=3"], "twice"),
])
def test_cli_sweep_bad_vary_exits_2(track_file, args, match):
    r = run(["sweep", str(EXAMPLES / "gt_coupe.toml"), track_file, *args])
    assert r.exit_code == 2, r.output
    assert match in r.output and "Traceback" not in r.output
    assert len(r.output.strip().splitlines()) == 1


def test_cli_sweep_interrupt_says_how_to_resume(track_file, tmp_path, monkeypatch):
    import lapbalance.sweep as sweep_mod

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(sweep_mod, "sweep", interrupted)
    r = run(["sweep", str(EXAMPLES / "gt_coupe.toml"), track_file,
             "--vary", "aero.drag_area_m2=0.7,0.8", "--out", str(tmp_path / "o")])
    assert r.exit_code == 130
    assert "rerun the same command to resume" in r.output


def test_bad_cluster_address_is_input_error(car, track):
    pytest.importorskip("dask.distributed")
    with pytest.raises(InputError, match="--cluster.*check the address"):
        sweep(car, track, {"aero.drag_area_m2": [0.8]}, cluster="tcp://127.0.0.1:notaport")
