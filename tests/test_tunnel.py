"""Tunnel/CFD balance readings corrected to the CG convention, and `lapbalance tunnel`."""

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given
from hypothesis import strategies as st

from lapbalance import aero, tunnel
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.cli.tunnel_cmd import parse_height_band
from lapbalance.errors import InputError
from tests.reference_cases import CASES, ids

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


# --------------------------------------------------------------------------------------------
# Physics
# --------------------------------------------------------------------------------------------


# Source: Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), ch. 1 axle-load equation,
# moments about the rear contact point: a drag D at height h_D held by a restraint at z gives
# the front axle -D (h_D - z)/L, held at CG height -D (h_D - h_cg)/L; the difference
# D (h_cg - z)/L is the correction, and the vertical force balance leaves the total unchanged.
@given(fv=st.floats(0, 8000), x=st.floats(0, 3.0), drag=st.floats(0, 4000),
       hd=st.floats(0, 1.2), z=st.floats(0, 0.8), h=st.floats(0.1, 0.8),
       L=st.floats(1.8, 3.5))
def test_correction_is_d_times_cg_minus_restraint_over_l(fv, x, drag, hd, z, h, L):
    # a vertical downforce fv at x behind the front axle + drag at hd, restrained at z
    front_meas = fv * (L - x) / L - drag * (hd - z) / L
    rear_meas = fv * x / L + drag * (hd - z) / L
    r = tunnel.correct_reading(front_meas, rear_meas, drag, h, L, z)
    assert r.correction == pytest.approx(drag * (h - z) / L, rel=1e-12, abs=1e-12)
    assert r.front == pytest.approx(fv * (L - x) / L - drag * (hd - h) / L, abs=1e-8)
    assert r.rear == pytest.approx(fv * x / L + drag * (hd - h) / L, abs=1e-8)
    assert r.total == pytest.approx(front_meas + rear_meas, abs=1e-9)


# Source: derived from SAE J1594 (2010) and Gillespie ch. 1, worked example: C_L = -3.00,
# C_D = 1.00, A = 1.5 m², WB = 3.0 m, h_D = 0.35 m, measured C_LF = -1.20, C_LR = -1.80,
# v = 50 m/s, rho = 1.225: front downforce measured 2756.2500 N, drag-free 3024.2188 N, drag
# couple 267.9688 N per axle; front share 40.0000 % measured, 43.8889 % drag-free.
def test_worked_example_wheel_restrained():
    # values in tests/reference_cases.py ("tunnel.worked")
    for cid in ids("tunnel.worked"):
        assert CASES[cid].value() == CASES[cid].approx(), cid
    f, r, d = tunnel.reading_from_axle_coefficients(-1.20, -1.80, 1.00, 1.5, 1.225, 50.0)
    # the vertical centre of pressure does not depend on the CG height
    cps = [tunnel.correct_reading(f, r, d, h, 3.0, drag_height=0.35).centre_of_pressure
           for h in (0.2, 0.35, 0.5)]
    share = CASES["tunnel.worked.balance_corrected"]
    assert cps == pytest.approx([3.0 * (1 - share.expected)] * 3, rel=share.rel)
    # same through C_L and C_PM (= 0.300000 ground-referenced)
    f2, r2, d2 = tunnel.reading_from_coefficients(-3.0, 1.0, 0.3, 1.5, 1.225, 50.0)
    assert (f2, r2, d2) == (pytest.approx(f), pytest.approx(r), pytest.approx(d))


# Source: derived (SAE J1594 axes, r x F); the CFD force + moment route and the J1594
# coefficient route describe the same force system and must give the same split.
@given(lift=st.floats(-20000, 2000), drag=st.floats(0, 5000), pm=st.floats(-5000, 5000),
       xp=st.floats(-2, 2), zp=st.floats(-0.5, 1.5), L=st.floats(2.0, 3.5))
def test_cfd_route_equals_j1594_route(lift, drag, pm, xp, zp, L):
    f, r, d = tunnel.reading_from_force_and_moment(lift, drag, pm, xp, zp, L)
    qa = 0.5 * 1.2 * 60.0**2 * 1.4
    pm_mid = pm + zp * drag - xp * lift
    fc, rc, dc = tunnel.reading_from_coefficients(lift / qa, drag / qa, pm_mid / (qa * L),
                                                  1.4, 1.2, 60.0)
    scale = 1 + abs(lift) + drag + abs(pm)
    assert f == pytest.approx(fc, abs=1e-9 * scale)
    assert r == pytest.approx(rc, abs=1e-9 * scale)
    assert d == pytest.approx(dc, abs=1e-9 * scale)
    # and aero.split_from_force_and_moment is this plus the ground -> CG shift
    fcg, rcg = aero.split_from_force_and_moment(lift, drag, pm, xp, zp, L, 0.3)
    res = tunnel.correct_reading(f, r, drag, 0.3, L)
    assert res.front == pytest.approx(fcg, abs=1e-9 * scale)
    assert res.rear == pytest.approx(rcg, abs=1e-9 * scale)


# Source: the correction D (h_cg - z)/L is linear in h_cg (Gillespie ch. 1), so the balance at
# any CG height inside the band lies between the balances at the ends.
@given(h=st.floats(0.2, 0.6), dh=st.floats(0.0, 0.1), drag=st.floats(1, 3000))
def test_uncertainty_band_brackets_nominal(h, dh, drag):
    b_lo, b_hi = tunnel.balance_band(1200.0, 2000.0, drag, h - dh, h + dh, 2.7)
    nom = tunnel.correct_reading(1200.0, 2000.0, drag, h, 2.7).balance_front
    assert min(b_lo, b_hi) - 1e-12 <= nom <= max(b_lo, b_hi) + 1e-12


@pytest.mark.parametrize("kw, match", [
    ({"wheelbase": -2.6}, "wheelbase_m = -2.6 must be > 0"),
    ({"cg_height": 0.0}, "cg_height_m = 0 must be > 0"),
    ({"drag": -10.0}, "drag_n = -10 must be >= 0"),
    ({"restraint_height": -0.1}, "restraint_height_m = -0.1 must be >= 0"),
    ({"front": float("nan")}, "front_n = nan must be a finite number"),
])
def test_bad_reading_raises(kw, match):
    args = {"front": 1000.0, "rear": 2000.0, "drag": 800.0, "cg_height": 0.4,
            "wheelbase": 2.6}
    args.update(kw)
    with pytest.raises(InputError, match=match):
        tunnel.correct_reading(**args)


def test_parse_height_band():
    assert parse_height_band("0.45") == (0.45, 0.45, 0.45)
    assert parse_height_band("0.45±0.03") == pytest.approx((0.45, 0.42, 0.48))
    assert parse_height_band("0.45+-0.03") == pytest.approx((0.45, 0.42, 0.48))
    assert parse_height_band("0.42:0.48") == pytest.approx((0.45, 0.42, 0.48))
    with pytest.raises(InputError, match="min:max"):
        parse_height_band("0.48:0.42")
    with pytest.raises(InputError, match="is not a height"):
        parse_height_band("tall")


# --------------------------------------------------------------------------------------------
# Table form and the demo sweep
# --------------------------------------------------------------------------------------------


def test_demo_sweep_matches_gt_coupe_aero():
    car = load_car(EXAMPLES / "gt_coupe.toml")
    tab = tunnel.read_readings(EXAMPLES / "gt_coupe_tunnel_sweep.csv")
    cols = tunnel.correct_table(tab, car.chassis.cg_height, car.chassis.wheelbase, 0.0, 1.18)
    # invented data generated from the car file's aero within 0.5 %: check consistency
    np.testing.assert_allclose(cols["balance_front_measured"], 0.38, atol=0.005)
    np.testing.assert_allclose(cols["balance_front_cg"], car.aero.balance_cg, atol=0.005)
    np.testing.assert_allclose(cols["drag_area_m2"], car.aero.drag_area, rtol=0.005)
    np.testing.assert_allclose(
        cols["front_downforce_area_cg_m2"] + cols["rear_downforce_area_cg_m2"],
        car.aero.downforce_area, rtol=0.005)
    assert list(cols["run"]) == ["r01", "r02", "r03", "r04", "r05"]


def _readings(tmp_path, header="speed_kph,front_n,rear_n,drag_n", rows=("200,900,1500,1200",)):
    p = tmp_path / "r.csv"
    p.write_text(header + "\n" + "\n".join(rows) + "\n")
    return p


def test_readings_missing_column(tmp_path):
    with pytest.raises(InputError, match='line 1: missing column "drag_n"'):
        tunnel.read_readings(_readings(tmp_path, "front_n,rear_n", ("900,1500",)))


def test_readings_misspelt_column(tmp_path):
    with pytest.raises(InputError, match='unknown column "drag"; did you mean "drag_n"'):
        tunnel.read_readings(_readings(tmp_path, "front_n,rear_n,drag", ("900,1500,10",)))


def test_readings_text_cell(tmp_path):
    with pytest.raises(InputError, match='line 2: rear_n = "lots" is not a number'):
        tunnel.read_readings(_readings(tmp_path, rows=("200,900,lots,1200",)))


# --------------------------------------------------------------------------------------------
# CLI
# --------------------------------------------------------------------------------------------


def test_cli_single_reading_json():
    res = run("tunnel", "--front-n", 1000, "--rear-n", 2000, "--drag-n", 800,
              "--cg-height-m", 0.45, "--wheelbase-m", 2.65, "--drag-height-m", 0.55, "--json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    for k in ("front_n", "rear_n", "balance_front", "measured_front_n", "measured_rear_n",
              "measured_balance_front", "correction_n", "restraint_height_m",
              "centre_of_pressure_m"):
        assert k in out
    # Source: D h_cg / L per axle (Gillespie ch. 1), here 800 * 0.45 / 2.65
    assert out["correction_n"] == pytest.approx(800 * 0.45 / 2.65, rel=1e-12)
    assert out["front_n"] == pytest.approx(1000 + 800 * 0.45 / 2.65, rel=1e-12)
    assert out["measured_balance_front"] == pytest.approx(1 / 3, rel=1e-12)


def test_cli_single_reading_text_and_no_drag_height():
    res = run("tunnel", "--front-n", 1000, "--rear-n", 2000, "--drag-n", 800,
              "--cg-height-m", 0.45, "--wheelbase-m", 2.65, "--restraint-height-m", 0.2)
    assert res.exit_code == 0, res.output
    assert "measured (restraint at 0.2 m)" in res.output
    assert "corrected (CG convention)" in res.output
    res = run("tunnel", "--front-n", 1000, "--rear-n", 2000, "--drag-n", 800,
              "--cg-height-m", 0.45, "--wheelbase-m", 2.65, "--json")
    assert json.loads(res.output)["centre_of_pressure_m"] is None


@pytest.mark.parametrize("band", ["0.45±0.03", "0.45+-0.03", "0.42:0.48"])
def test_cli_cg_band(band):
    res = run("tunnel", "--front-n", 1000, "--rear-n", 2000, "--drag-n", 800,
              "--cg-height-m", band, "--wheelbase-m", 2.65, "--json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    assert out["balance_front_min"] <= out["balance_front"] <= out["balance_front_max"]
    assert out["balance_front_min"] == pytest.approx((1000 + 800 * 0.42 / 2.65) / 3000)
    res = run("tunnel", "--front-n", 1000, "--rear-n", 2000, "--drag-n", 800,
              "--cg-height-m", band, "--wheelbase-m", 2.65)
    assert "CG height 0.42 to 0.48 m gives corrected balance" in res.output


def test_cli_coefficients_and_cfd_agree():
    # J1594 worked example: C_L -3, C_PM 0.3, C_D 1, A 1.5, 180 km/h = 50 m/s, rho 1.225
    a = run("tunnel", "--cl", -3.0, "--cpm", 0.3, "--cd", 1.0, "--frontal-area-m2", 1.5,
            "--speed-kph", 180, "--air-density", 1.225, "--cg-height-m", 0.35,
            "--wheelbase-m", 3.0, "--json")
    assert a.exit_code == 0, a.output
    ja = json.loads(a.output)
    assert ja["measured_front_n"] == pytest.approx(2756.25, rel=1e-7)
    assert ja["front_n"] == pytest.approx(3024.2188, rel=1e-6)
    b = run("tunnel", "--clf", -1.2, "--clr", -1.8, "--cd", 1.0, "--frontal-area-m2", 1.5,
            "--speed-kph", 180, "--air-density", 1.225, "--cg-height-m", 0.35,
            "--wheelbase-m", 3.0, "--json")
    assert json.loads(b.output)["front_n"] == pytest.approx(ja["front_n"], rel=1e-12)
    # CFD: lift -6890.625 N, drag 2296.875 N, moment about a point 0.35 m up at mid-wheelbase
    qa = 1531.25 * 1.5
    pm_mid = 0.3 * qa * 3.0
    c = run("tunnel", "--lift-n", -3.0 * qa, "--drag-n", qa, "--pitch-moment-nm",
            pm_mid - 0.35 * qa, "--moment-ref-z-m", 0.35, "--cg-height-m", 0.35,
            "--wheelbase-m", 3.0, "--json")
    assert c.exit_code == 0, c.output
    assert json.loads(c.output)["front_n"] == pytest.approx(ja["front_n"], rel=1e-9)


def test_cli_table_writes_and_refuses_overwrite(tmp_path):
    out = tmp_path / "corrected.csv"
    args = ("tunnel", EXAMPLES / "gt_coupe_tunnel_sweep.csv", "--car",
            EXAMPLES / "gt_coupe.toml", "--out", out)
    res = run(*args)
    assert res.exit_code == 0, res.output
    text = out.read_text()
    assert text.splitlines()[0].startswith("speed_kph,ride_height_front_mm")
    assert "balance_front_cg" in text.splitlines()[0]
    assert len(text.splitlines()) == 6
    out.write_text("precious\n")
    res = run(*args)
    assert res.exit_code == 2
    assert "already exists; pass --force" in res.output
    assert out.read_text() == "precious\n"
    res = run(*args, "--force")
    assert res.exit_code == 0
    assert out.read_text() == text
    # the tunnel's air density sets the areas: drag area of the demo sweep is 0.8 m² at 1.18
    res = run(*args, "--force", "--air-density", 1.18, "--json")
    cols = json.loads(res.output)
    np.testing.assert_allclose(cols["drag_area_m2"], 0.8, rtol=0.005)


@pytest.mark.parametrize("args, match", [
    (("--front-n", 1000, "--rear-n", 2000, "--drag-n", 800, "--cg-height-m", 0.45,
      "--wheelbase-m", -2.65), "wheelbase_m = -2.65 must be > 0"),
    (("--front-n", 1000, "--rear-n", 2000, "--drag-n", 800, "--cg-height-m", "abc",
      "--wheelbase-m", 2.65), "is not a height"),
    (("--front-n", 1000, "--drag-n", 800, "--cg-height-m", 0.4, "--wheelbase-m", 2.65),
     "needs --front-n, --rear-n and --drag-n"),
    (("--front-n", 1000, "--rear-n", 2000, "--drag-n", 800), "give --cg-height-m"),
    (("--front-n", 1, "--rear-n", 2, "--drag-n", 1, "--cl", -3, "--cpm", 0.1,
      "--cg-height-m", 0.4, "--wheelbase-m", 2.65), "exactly one input form"),
])
def test_cli_bad_input_exits_2(args, match):
    res = run("tunnel", *args)
    assert res.exit_code == 2
    assert match in res.output


def test_cli_table_missing_column_and_unknown_car_key(tmp_path):
    p = _readings(tmp_path, "front_n,rear_n", ("900,1500",))
    res = run("tunnel", p, "--car", EXAMPLES / "gt_coupe.toml")
    assert res.exit_code == 2
    assert 'missing column "drag_n"' in res.output
    res = run("tunnel", EXAMPLES / "gt_coupe_tunnel_sweep.csv", "--car",
              EXAMPLES / "gt_coupe.toml", "--set", "chassis.cg_hieght_m=0.4")
    assert res.exit_code == 2
    assert 'unknown key "chassis.cg_hieght_m"' in res.output
    res = run("tunnel", EXAMPLES / "gt_coupe_tunnel_sweep.csv")
    assert res.exit_code == 2
    assert "needs --car" in res.output
