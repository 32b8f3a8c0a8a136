"""Correlation with a logged lap: reading, splitting, alignment, comparison, fit, variant.

The synthetic logs here are the tool's own laps with known changes and noise. Recovering the
changes is a **consistency check** of the alignment and the fit (they undo what was put in),
not a validation of the lap model against a real car.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance import correlate as C
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track, make_track

ROOT = Path(__file__).resolve().parents[1]
CAR = ROOT / "examples" / "gt_coupe.toml"
RING = ROOT / "tracks" / "veldmoor_ring.csv"
DEMO_LOG = ROOT / "examples" / "gt_coupe_veldmoor_log.csv"


@pytest.fixture(scope="module")
def car():
    return load_car(CAR)


@pytest.fixture(scope="module")
def ring():
    return load_track(RING)


@pytest.fixture(scope="module")
def model(car, ring):
    return simulate_lap(car, ring)


@pytest.fixture(scope="module")
def changed_lap(car, ring):
    """The demo car with grip x0.93 and drag area x1.08 (the 'real' car of the check)."""
    true = car.with_overrides(C.factor_overrides(car, ("grip", "drag"), (0.93, 1.08)))
    return simulate_lap(true, ring, assess_liftoff=False)


def _write(tmp_path, cols, name="log.csv", comments=()):
    p = tmp_path / name
    p.write_text(C.log_csv_text(cols, comments), encoding="utf-8")
    return p


# --------------------------------------------------------------------------------------------
# Must show: the fit recovers known changes (consistency check, not a validation)
# --------------------------------------------------------------------------------------------


def test_fit_recovers_known_grip_drag_and_distance_scale(car, ring, changed_lap, tmp_path):
    """Consistency check, not a validation: a log made by the tool's own lap of the demo car
    with grip x0.93 and drag area x1.08, 1 km/h speed noise, a logger distance that reads
    1.5 % long and a clock that starts at 1234.5 s, aligned from the speed traces alone (no
    positions). The fit must give back grip within 1 %, drag area within 3 % and the distance
    scale (1/1.015 track metres per logger metre) within 0.2 %."""
    cols = C.synthetic_log(changed_lap, rate_hz=20.0, speed_noise_kph=1.0,
                           distance_scale=1.015, time_offset_s=1234.5, positions=False,
                           seed=11)
    log = C.load_log(_write(tmp_path, cols), ring)
    assert log.split_by == "none" and len(log.laps) == 1
    corr = C.correlate(car, ring, log, align="speed", fit=("grip", "drag"))
    grip, drag = corr.fit.values
    assert abs(grip / 0.93 - 1) < 0.01
    assert abs(drag / 1.08 - 1) < 0.03
    assert abs(corr.alignment.scale * 1.015 - 1) < 0.002
    # the confidence is finite and small beside the tolerances, and the log lap time is the
    # changed car's (time offset removed)
    assert np.all(np.isfinite(corr.fit.std)) and np.all(corr.fit.std < 0.02)
    assert abs(corr.lap.lap_time_s - changed_lap.lap_time_s) < 0.1
    # the fitted car runs the lap within 0.3 % of the changed car's time
    assert abs(corr.fitted.lap_time_s / changed_lap.lap_time_s - 1) < 3e-3


def test_alignment_from_positions_and_from_speed_agree_on_the_demo_ring(car, ring, model):
    """On the demo log of the demo ring (positions with 0.5 m noise, logger distance 1.2 %
    long, a car with other grip, drag and power than the model), the alignment from the
    projected positions and the one from the speed traces place every sample within 1 m of
    each other; so does the alignment against the fitted model of all three factors."""
    log = C.load_log(DEMO_LOG, ring)
    for lap in log.laps:
        d = lap.logger_distance_m
        p = C.align_positions(lap, model)
        s = C.align_speed(lap, model)
        assert np.max(np.abs((p.scale * d + p.offset_m) - (s.scale * d + s.offset_m))) < 1.0
    corr = C.correlate(car, ring, log, lap=1, align="speed", fit=("grip", "drag", "power"))
    s = corr.alignment
    assert s.reference == "fitted model"
    lap = log.laps[0]
    p = C.align_positions(lap, model)
    d = lap.logger_distance_m
    assert np.max(np.abs((p.scale * d + p.offset_m) - (s.scale * d + s.offset_m))) < 1.0
    # Both recover the logger's distance error (it reads 1.2 % long).
    assert abs(p.scale * 1.012 - 1) < 5e-4
    # The time delta starts at the line at 0 and ends at the lap-time difference.
    td = corr.trace["time_delta_s"]
    assert abs(td[0]) < 0.02
    assert abs(td[-1] - (corr.lap.lap_time_s - corr.model.lap_time_s)) < 0.05


def test_two_lap_log_splits_into_two_laps(ring, changed_lap, tmp_path):
    cols = C.synthetic_log([changed_lap, changed_lap], rate_hz=10.0, speed_noise_kph=0.5,
                           position_noise_m=0.5, time_offset_s=300.0, seed=2,
                           lap_distance=True)
    log = C.load_log(_write(tmp_path, cols), ring)
    assert log.split_by == "positions" and len(log.laps) == 2 and log.partial == 0
    for lap in log.laps:
        assert abs(lap.lap_time_s - changed_lap.lap_time_s) < 0.05
    # the same log without positions splits by its lap-distance column
    no_pos = {k: v for k, v in cols.items() if k not in ("x_m", "y_m")}
    log2 = C.load_log(_write(tmp_path, no_pos, "nopos.csv"), ring)
    assert log2.split_by == "lap_distance" and len(log2.laps) == 2
    for lap in log2.laps:
        assert abs(lap.lap_time_s - changed_lap.lap_time_s) < 0.1


def test_demo_log_has_two_flying_laps_between_partial_laps(ring):
    log = C.load_log(DEMO_LOG, ring)
    assert len(log.laps) == 2 and log.partial == 2
    assert "gear" in log.ignored
    assert 9.5 < log.rate_hz < 10.5


# --------------------------------------------------------------------------------------------
# Reading logs shaped like real exports
# --------------------------------------------------------------------------------------------


def test_reader_accepts_bom_quotes_crlf_extra_columns_and_blank_optional_cells(
        ring, changed_lap, tmp_path):
    cols = C.synthetic_log(changed_lap, rate_hz=5.0, positions=False, seed=4)
    text = C.log_csv_text({"time_s": cols["time_s"], "speed_kph": cols["speed_kph"],
                           "ay_mps2": cols["ay_mps2"]})
    lines = text.splitlines()
    lines[0] = '"Time_s","speed_kph","ay_mps2","Driver note"'
    out = [lines[0]]
    for i, ln in enumerate(lines[1:]):
        t, v, ay = ln.split(",")
        ay = "" if i % 7 == 3 else ay
        out.append(f'"{t}",{v},{ay},"lap, clean"')
    p = tmp_path / "export.csv"
    p.write_bytes(b"\xef\xbb\xbf" + "\r\n".join(out).encode("utf-8") + b"\r\n")
    log = C.load_log(p, ring)
    assert len(log.laps) == 1 and log.ignored == ("driver note",)
    assert np.all(np.isfinite(log.laps[0].channels["ay_mps2"]))
    assert abs(log.laps[0].lap_time_s - changed_lap.lap_time_s) < 0.3


def test_speed_in_mps_reads_like_kph(ring, changed_lap, tmp_path):
    cols = C.synthetic_log(changed_lap, rate_hz=5.0, positions=False, seed=5)
    a = C.load_log(_write(tmp_path, {"time_s": cols["time_s"],
                                     "speed_kph": cols["speed_kph"]}, "a.csv"), ring)
    b = C.load_log(_write(tmp_path, {"time_s": cols["time_s"],
                                     "speed_mps": cols["speed_kph"] / 3.6}, "b.csv"), ring)
    assert np.allclose(a.laps[0].speed_mps, b.laps[0].speed_mps)


def test_latlon_log_on_a_latlon_track(car, tmp_path):
    """A log in WGS-84 degrees, projected with the track's own origin, lands on the line."""
    from lapbalance.track import latlon_to_local

    tfile = ROOT / "tracks" / "kettlewick_logged.csv"
    track = load_track(tfile)
    lap = simulate_lap(car, track, assess_liftoff=False)
    cols = C.synthetic_log(lap, rate_hz=10.0, positions=True, seed=6)
    lat0, lon0 = C.track_origin(tfile)
    # invert the local projection by fixed-point iteration on its local scale (m per degree)
    east, north = cols.pop("x_m"), cols.pop("y_m")
    e1, n1 = latlon_to_local([lat0 + 1e-3], [lon0 + 1e-3], lat0, lon0)
    lat = lat0 + north / n1[0] * 1e-3
    lon = lon0 + east / e1[0] * 1e-3
    for _ in range(4):
        e, n = latlon_to_local(lat, lon, lat0, lon0)
        lat, lon = lat + (north - n) / n1[0] * 1e-3, lon + (east - e) / e1[0] * 1e-3
    cols["lat_deg"], cols["lon_deg"] = np.round(lat, 8), np.round(lon, 8)
    log = C.load_log(_write(tmp_path, cols), track, track_latlon_origin=(lat0, lon0))
    assert log.split_by == "positions" and len(log.laps) == 1
    assert np.sqrt(np.mean(log.laps[0].cross_track_m ** 2)) < 0.5
    with pytest.raises(InputError, match="track is not in lat/lon"):
        C.load_log(_write(tmp_path, cols, "b.csv"), track)


def test_projection_onto_a_circle_matches_the_arc_length():
    """Points at a known radial offset from a circular track line: the projected distance is
    the arc length R·θ and the cross-track distance the radial offset (closed form)."""
    R = 100.0
    th = np.linspace(0, 2 * np.pi, 2000, endpoint=False)
    track = make_track(R * np.sin(th), R - R * np.cos(th), closed=True, step_m=1.0)
    phi = np.array([0.3, 1.0, 2.5, 4.0, 5.9])
    off = np.array([2.0, -3.0, 0.5, 4.0, -1.0])  # left positive (inside of a left turn)
    x, y = (R - off) * np.sin(phi), R - (R - off) * np.cos(phi)
    s, n = C.project(track, x, y)
    # Source: closed form, arc length of a circle s = R·phi (the resampled line is a polygon
    # of 1 m chords, so its length is scaled by length / (2 pi R))
    assert np.allclose(s, R * phi * track.length_m / (2 * np.pi * R), atol=0.05)
    assert np.allclose(n, off, atol=0.02)


# --------------------------------------------------------------------------------------------
# Comparison and fit details
# --------------------------------------------------------------------------------------------


def test_identical_log_matches_and_noise_does_not_bias_minima(car, ring, model, tmp_path):
    """A noisy log of the model's own lap: every segment is 'close', the time delta stays
    within 0.1 s, and the window estimate of the corner minima is unbiased (mean error under
    0.15 km/h) while the lowest smoothed sample reads low."""
    cols = C.synthetic_log(model, rate_hz=20.0, speed_noise_kph=1.0, position_noise_m=0.3,
                           seed=8)
    corr = C.correlate(car, ring, C.load_log(_write(tmp_path, cols), ring))
    rows = corr.segments
    assert all(r["verdict"] == "close" for r in rows), [
        (r["segment"], r["model_minus_log_kph"]) for r in rows if r["verdict"] != "close"]
    d = np.array([r["model_minus_log_kph"] for r in rows])
    assert abs(d.mean()) < 0.15
    assert np.nanmax(np.abs(corr.trace["time_delta_s"])) < 0.1
    corners = [r for r in rows if r["kind"] == "corner"]
    assert np.mean([r["model_kph"] - r["log_sample_kph"] for r in corners]) > 0.0


def test_spreadsheet_shaped_log_still_fits(car, ring, tmp_path):
    """Whole km/h, whole metres, times to 10 ms, 25 Hz, a blank line and a text column:
    the grip factor still comes back within 1 % (consistency check, not a validation)."""
    true = car.with_overrides(C.factor_overrides(car, ("grip",), (0.96,)))
    lap = simulate_lap(true, ring, assess_liftoff=False)
    cols = C.synthetic_log(lap, rate_hz=25.0, speed_noise_kph=0.7, positions=False, seed=12,
                           distance_scale=0.985, time_offset_s=77.0)
    rows = [f"{t:.2f},{v:.0f},{d:.0f},ok" for t, v, d in
            zip(cols["time_s"], cols["speed_kph"], cols["distance_m"], strict=True)]
    rows.insert(500, "")
    p = tmp_path / "sheet.csv"
    p.write_text("time_s,speed_kph,distance_m,status\n" + "\n".join(rows) + "\n",
                 encoding="utf-8")
    corr = C.correlate(car, ring, C.load_log(p, ring), fit=("grip",))
    assert abs(corr.fit.values[0] / 0.96 - 1) < 0.01
    assert abs(corr.alignment.scale * 0.985 - 1) < 0.002
    ranks = sorted(r["rank"] for r in corr.segments)
    assert ranks == list(range(1, len(corr.segments) + 1))


def test_factor_keys_cover_every_grip_drag_power_spelling(car):
    assert set(C.factor_keys(car, "grip")) == {"tyres.front.peak_friction",
                                               "tyres.rear.peak_friction"}
    assert set(C.factor_keys(car, "power")) == {"powertrain.torque_curve_nm"}
    over = C.factor_overrides(car, ("power", "drag"), (0.9, 1.1))
    scaled = car.with_overrides(over)
    assert scaled.powertrain.torque_curve_nm[0] == pytest.approx(0.9 * 350)
    assert scaled.aero.drag_area == pytest.approx(1.1 * car.aero.drag_area)
    mapped = load_car(ROOT / "examples" / "single_seater_mapped.toml")
    with pytest.raises(InputError, match="drag area of a car with an aero map"):
        C.factor_keys(mapped, "drag")
    with pytest.raises(InputError, match="either grip or grip-front"):
        C.check_factors(("grip", "grip-rear"))
    with pytest.raises(InputError, match='unknown factor "grp"; did you mean "grip"'):
        C.check_factors(("grp",))


def test_front_rear_grip_fit_moves_the_axle_that_changed(car, ring, tmp_path):
    """Only the rear tyres lose grip (x0.95): the fit gives the rear factor below the front."""
    true = car.with_overrides(C.factor_overrides(car, ("grip-rear",), (0.95,)))
    lap = simulate_lap(true, ring, assess_liftoff=False)
    cols = C.synthetic_log(lap, rate_hz=10.0, speed_noise_kph=0.5, position_noise_m=0.3,
                           seed=9)
    corr = C.correlate(car, ring, C.load_log(_write(tmp_path, cols), ring),
                       fit=("grip-front", "grip-rear"))
    front, rear = corr.fit.values
    assert rear < front - 0.02
    assert abs(rear - 0.95) < 0.01


# --------------------------------------------------------------------------------------------
# Command line, variant file, report
# --------------------------------------------------------------------------------------------


def test_cli_writes_folder_and_a_variant_every_command_reads(tmp_path):
    runner = CliRunner()
    variant = tmp_path / "fitted.toml"
    out = tmp_path / "corr"
    res = runner.invoke(main, ["correlate", str(CAR), str(RING), str(DEMO_LOG), "--fit",
                               "grip", "--write-variant", str(variant), "--out", str(out),
                               "--plots", "--set", "chassis.mass_kg=1310"])
    assert res.exit_code == 0, res.output
    assert "aligned by positions" in res.output and "grip" in res.output
    assert sorted(p.name for p in out.iterdir()) == [".lapbalance-manifest.json",
                                                      "correlation.png", "provenance.json",
                                                      "segments.csv",
                                                      "summary.json", "trace.csv"]
    text = variant.read_text(encoding="utf-8")
    assert "base = " in text and "[tyres.front]" in text
    fitted = load_car(variant)
    base = load_car(CAR)
    assert fitted.chassis.mass == 1310.0  # the --set the fit ran with is part of the variant
    ratio = fitted.tyres.front.mu_lateral / base.tyres.front.mu_lateral
    assert 0.9 < ratio < 1.0
    assert fitted.tyres.rear.mu_lateral / base.tyres.rear.mu_lateral == pytest.approx(
        ratio, rel=1e-5)
    res = runner.invoke(main, ["lap", str(variant), str(RING)])
    assert res.exit_code == 0, res.output
    # never overwrite the user's file without --force
    res = runner.invoke(main, ["correlate", str(CAR), str(RING), str(DEMO_LOG), "--fit",
                               "grip", "--write-variant", str(variant)])
    assert res.exit_code == 2 and "already exists" in res.output


def test_report_gets_a_correlation_section(tmp_path):
    out = tmp_path / "r.html"
    res = CliRunner().invoke(main, ["report", str(CAR), str(RING), "--log", str(DEMO_LOG),
                                    "--out", str(out)])
    assert res.exit_code == 0, res.output
    html = out.read_text(encoding="utf-8")
    assert '<h2 id="correlation">' in html and 'href="#correlation"' in html
    # the lap figures, the lift-off response of the tightest corner, and the correlation
    from lapbalance.plots import LAP_FIGURES
    assert html.count("data:image/png;base64") == len(LAP_FIGURES) + 2


def test_json_summary_is_plain_json(tmp_path):
    import json

    res = CliRunner().invoke(main, ["correlate", str(CAR), str(RING), str(DEMO_LOG), "--lap",
                                    "2", "--json"])
    assert res.exit_code == 0, res.output
    s = json.loads(res.output)
    assert s["lap_compared"] == 2 and s["laps_in_log"] == 2
    assert math.isclose(s["alignment"]["scale"], 1 / 1.012, rel_tol=1e-3)
    res = CliRunner().invoke(main, ["correlate", str(CAR), str(RING), str(DEMO_LOG), "--lap",
                                    "3"])
    assert res.exit_code == 2 and "--lap: = 3: the log has 2 complete lap(s)" in res.output


def test_correlation_figure_fits_its_fixed_layout(car, ring, model):
    from lapbalance.plots_correlate import correlation_figure
    from tests.helpers import layout_problems

    corr = C.correlate(car, ring, C.load_log(DEMO_LOG, ring), model=model)
    for dpi in (40, 70, 110):
        assert layout_problems(correlation_figure(corr), dpi) == []
