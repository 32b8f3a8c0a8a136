"""The rough edges a new user hits: first-run notice, wording, units, figures, sweep/compare."""

from __future__ import annotations

import csv
import io
import json
import os
import re
import runpy
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance import firstrun, plots
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.lap import simulate_lap
from lapbalance.liftoff import VERDICT_MEANING
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]
EX = ROOT / "examples"
RING = str(ROOT / "tracks" / "veldmoor_ring.csv")
CLIMB = str(ROOT / "tracks" / "skarhelm_climb.csv")
GT = str(EX / "gt_coupe.toml")
WING = str(EX / "gt_coupe_high_wing.toml")
TRUCK = str(EX / "offroad_truck.toml")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def ring_lap():
    return simulate_lap(load_car(GT), load_track(RING, step_m=2.0))


# -- first run --------------------------------------------------------------------------------


def test_cache_is_warm_after_a_lap(ring_lap):
    assert not firstrun.cache_is_cold()


def test_cold_cache_is_detected_without_compiling(tmp_path):
    code = "from lapbalance import firstrun; print(firstrun.cold_kernels())"
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "empty-cache"),
           "PYTHONPATH": str(ROOT / "src")}
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         timeout=120, check=True).stdout
    assert "corner_limits" in out and "final_pass" in out


@pytest.mark.parametrize("cmd", [
    ["lap", GT, RING, "--step-m", "4"],
    ["check", GT, RING, str(EX / "targets_pass.toml"), "--step-m", "4"],
    ["compare", GT, WING, "--track", RING, "--step-m", "4"],
    ["sweep", GT, RING, "--vary", "aero.drag_area_m2=0.7,0.8", "--step-m", "4"],
])
def test_every_solver_command_says_it_prepares_on_a_cold_cache(cmd, monkeypatch, ring_lap):
    # cold cache simulated; the kernels are already compiled here, so the stages are quick
    monkeypatch.setattr(firstrun, "cache_is_cold", lambda: True)
    r = run(*cmd)
    assert r.exit_code in (0, 1), r.output
    assert "preparing the solver, first run only" in r.output
    assert "[6/6] lift-off runs in time" in r.output


def test_warm_cache_prints_no_notice(ring_lap):
    r = run("lap", GT, RING, "--step-m", "4")
    assert "preparing the solver" not in r.output


# -- lap header, wording, units -----------------------------------------------------------------


def test_lap_header_names_the_overrides():
    base = run("lap", GT, RING, "--step-m", "4").output.splitlines()
    over = run("lap", GT, RING, "--step-m", "4", "--set", "aero.drag_area_m2=0.85").output
    assert "overrides: --set aero.drag_area_m2=0.85" in over.splitlines()[1]
    assert not any(line.startswith("overrides:") for line in base)


def test_swapped_car_and_track_get_a_hint():
    r = run("lap", RING, GT)
    assert r.exit_code == 2 and "swapped" in r.output and "Traceback" not in r.output
    r = run("sweep", RING, GT, "--vary", "aero.drag_area_m2=0.7,0.8")
    assert r.exit_code == 2 and "swapped" in r.output


def test_open_track_reports_run_time():
    out = run("lap", GT, CLIMB, "--step-m", "4").output
    assert "run time " in out and "lap time" not in out
    out = run("lap", GT, RING, "--step-m", "4").output
    assert "lap time " in out and "run time" not in out
    out = run("sweep", GT, CLIMB, "--step-m", "4", "--vary", "aero.drag_area_m2=0.7,0.8",
              "--units", "imperial").output
    assert "Skarhelm Climb (open run)" in out and "run s" in out and "top mph" in out


def test_net_lift_car_shows_axle_values_not_a_share():
    out = run("lap", TRUCK, RING, "--step-m", "4").output
    assert "net lift" in out and "aero balance (front share) -" not in out
    car = load_car(TRUCK)
    assert f"front {car.aero.front_area_cg:+.3f} m²" in out


def test_imperial_units_on_the_terminal():
    doc = json.loads(run("lap", GT, RING, "--step-m", "4", "--json").output)
    out = run("lap", GT, RING, "--step-m", "4", "--units", "imperial").output
    # Source: NIST SP 811 (2008) appendix B.8: 1 mi/h = 0.44704 m/s exactly, so
    # 1 mph = 1.609344 km/h; 1 ft = 0.3048 m.
    top_mph = doc["top_speed_kph"] / 1.609344
    assert f"top {top_mph:.1f} mph" in out
    assert f"({doc['length_m'] / 0.3048:.0f} ft, closed lap)" in out
    assert "km/h" not in out.split("\n\n")[0].splitlines()[2]


@pytest.fixture(scope="module")
def report_html(tmp_path_factory):
    from lapbalance import report

    rep = tmp_path_factory.mktemp("report") / "r.html"
    with pytest.MonkeyPatch.context() as mp:  # the per-lap figures are tested elsewhere
        mp.setattr(report, "_figures", lambda result, dpi: "")
        r = run("report", GT, RING, "--variant", WING, "--step-m", "8", "--out", rep,
                "--set", "chassis.mass_kg=1390", "--units", "imperial")
    assert r.exit_code == 0, r.output
    return rep.read_text()


def test_verdict_wording_is_one_source(report_html):
    doc = json.loads(run("lap", TRUCK, RING, "--step-m", "4", "--json").output)
    assert doc["liftoff_verdicts"] == VERDICT_MEANING
    out = run("lap", TRUCK, RING, "--step-m", "4", "--liftoff-only").output
    assert f"lift-critical: {VERDICT_MEANING['lift-critical']}" in out
    assert "LIFT-CRITICAL" not in out
    for meaning in VERDICT_MEANING.values():
        assert meaning in report_html


# -- figures ------------------------------------------------------------------------------------


def test_balance_map_shows_cornering_steps_only(ring_lap):
    fig = plots.track_map_figure(ring_lap)
    (lc,) = [c for c in fig.axes[0].collections if c.get_array() is not None]
    # one value per polyline (a run of steps of one colour): repeat it for each of its steps
    steps = [len(p.vertices) - 1 for p in lc.get_paths()]
    arr = np.ma.masked_invalid(np.repeat(np.asarray(lc.get_array(), float), steps))
    ay = np.abs(ring_lap.channels["ay_mps2"][:-1])
    corner = (ay >= 4.0) & (np.abs(ring_lap.channels["ax_mps2"][:-1]) <= 0.5 * ay)
    assert np.all(arr.mask[~corner]) and not np.any(arr.mask[corner])
    # the scale is set by the corners, not by the straights' drive-force-loaded rear
    bal = ring_lap.channels["balance_index"][:-1]
    assert lc.norm.vmax < np.percentile(np.abs(bal[~corner]), 99.5)


def test_track_map_by_any_channel_and_plot_formats(tmp_path, ring_lap):
    fig = plots.track_map_figure(ring_lap, channel="speed_kph")
    assert "speed_kph [km/h]" in [ax.get_ylabel() for ax in fig.axes]
    out = tmp_path / "svg"
    r = run("lap", GT, RING, "--step-m", "8", "--out", out, "--plots", "--plot-format", "svg",
            "--map-channel", "usage_rear")
    assert r.exit_code == 0, r.output
    assert "SVG figures" in r.output
    svg = (out / "track_map.svg").read_bytes()
    assert b"<svg" in svg[:400] and b"usage_rear" in svg
    assert (out / "speed.svg").is_file() and not list(out.glob("*.png"))
    assert plots.figure_bytes(plots.speed_figure(ring_lap), "pdf").startswith(b"%PDF")
    r = run("lap", GT, RING, "--out", tmp_path / "x", "--plots", "--map-channel", "sped_kph")
    assert r.exit_code == 2 and 'did you mean "speed_kph"' in r.output


def test_net_lift_aero_figure_draws_axle_loads():
    res = simulate_lap(load_car(TRUCK), load_track(RING, step_m=4.0))
    fig = plots.aero_balance_figure(res)
    assert "aero load on the axle [N]" in fig.axes[0].get_ylabel()


# -- compare and report -------------------------------------------------------------------------


def test_compare_names_files_track_and_shows_setup(tmp_path):
    out = tmp_path / "cmp"
    r = run("compare", GT, "--track", RING, "--set-variant", "aero.drag_area_m2=0.7",
            "--step-m", "4", "--out", out, "--plot-format", "svg")
    assert r.exit_code == 0, r.output
    assert "track Veldmoor Ring (closed lap)" in r.output
    written = r.output.rsplit(": ", 1)[1].strip().split(", ")
    assert "<track>" not in r.output and written
    assert all((out / name).is_file() for name in written)
    assert any(name.endswith(".svg") for name in written)
    assert "what differs from the base: aero.drag_area_m2=0.7" in r.output
    assert re.search(r"aero\.drag_area_m2\s+0\.8\s+0\.7", r.output)
    assert "drag area CD·A" in r.output
    doc = json.loads(run("compare", GT, "--track", RING, "--set-variant",
                         "aero.drag_area_m2=0.7", "--step-m", "4", "--json").output)
    assert doc["track_names"] == ["Veldmoor Ring"] and len(doc["provenance"]["cars"]) == 2


def test_report_has_provenance_setup_and_differences(report_html):
    html = report_html
    assert 'id="provenance"' in html and "SHA-256" in html
    assert "--set chassis.mass_kg=1390" in html
    assert "What differs from the base: Halden GT coupe, high wing" in html
    assert "aero.downforce_area_m2" in html and "<h3>Setup</h3>" in html
    assert "top [mph]" in html and "min speed [mph]" in html


# -- sweep --------------------------------------------------------------------------------------


def test_sweep_values_as_typed_ticks_and_resume(tmp_path):
    from lapbalance.sweep import parse_vary, sweep_figure

    assert parse_vary("aero.drag_area_m2=0.5:0.7:3")[1] == [0.5, 0.6, 0.7]
    out = tmp_path / "sw"
    args = ["sweep", GT, RING, "--step-m", "4", "--vary", "aero.drag_area_m2=0.5:0.7:3",
            "--vary", "brakes.bias_front=0.55:0.65:2", "--out", out, "--workers", "1"]
    r = run(*args)
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(io.StringIO((out / "results.csv").read_text())))
    assert [r_["aero.drag_area_m2"] for r_ in rows[::2]] == ["0.5", "0.6", "0.7"]
    assert (out / "provenance.json").is_file()
    r2 = run(*args)
    assert "resumed: reused 6 of 6 points" in r2.output
    assert json.loads((out / "sweep.json").read_text())["reused"] == 6
    pts = [{"aero.drag_area_m2": float(r_["aero.drag_area_m2"]),
            "brakes.bias_front": float(r_["brakes.bias_front"]),
            "lap_time_s": float(r_["lap_time_s"]), "liftoff_worst_shift": 0.1} for r_ in rows]
    fig = sweep_figure(pts, ["aero.drag_area_m2", "brakes.bias_front"], "lap_time",
                       title="Halden GT coupe on Veldmoor Ring")
    ax = fig.axes[0]
    assert list(ax.get_xticks()) == [0.5, 0.6, 0.7]
    assert [t.get_text() for t in ax.get_xticklabels()] == ["0.5", "0.6", "0.7"]
    assert list(ax.get_yticks()) == [0.55, 0.65]
    assert "Veldmoor Ring" in ax.get_title()
    lt = [p["lap_time_s"] for p in pts]
    label = fig.axes[1].get_ylabel()
    assert f"range {min(lt):.4g} to {max(lt):.4g} s" in label


def test_auto_workers():
    from lapbalance.sweep import auto_workers

    assert auto_workers(10, cpus=2, forked=False) == 1
    assert auto_workers(480, cpus=2, forked=False) == 1
    assert auto_workers(600, cpus=2, forked=False) == 2
    assert auto_workers(10_000, cpus=64, forked=False) == 8
    # forked workers start in milliseconds: a pool pays from a few dozen points
    assert auto_workers(10, cpus=2, forked=True) == 1
    assert auto_workers(200, cpus=2, forked=True) == 2
    assert auto_workers(200, cpus=64, forked=True) == 8
    assert auto_workers(200, cpus=1, forked=True) == 1
    h = run("sweep", "--help").output
    assert "one per CPU core" in h


# -- docs and the notebook ----------------------------------------------------------------------


def test_readme_examples_write_under_one_folder():
    text = (ROOT / "README.md").read_text()
    commands = [line for line in text.splitlines() if line.startswith("lapbalance ")]
    outs = re.findall(r"--(?:out|map)\s+(\S+)", "\n".join(commands))
    assert outs and all(o.startswith("results/") for o in outs), outs
    ignore = (ROOT / ".gitignore").read_text().split()
    assert "lapbalance-demo/" in ignore and "results/" in ignore


def test_notebook_example_runs_top_to_bottom(tmp_path, monkeypatch):
    monkeypatch.setenv("LAPBALANCE_NOTEBOOK_OUT", str(tmp_path))
    text = (EX / "notebook.py").read_text()
    assert text.count("# %%") >= 6
    runpy.run_path(str(EX / "notebook.py"), run_name="__main__")
    assert (tmp_path / "speed_map.svg").is_file() and (tmp_path / "balance_map.png").is_file()
