"""Provenance records, the provenance sidecar, and rerunning a lap from its summary.json."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance import provenance
from lapbalance.car import load_car
from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.lap import simulate_lap
from lapbalance.rerun import rerun
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]
EX = ROOT / "examples"
TR = ROOT / "tracks"


def _sha(p: Path) -> str:
    # Source: FIPS 180-4 SHA-256, via Python's hashlib (a general-purpose reference library).
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.fixture()
def inputs(tmp_path):
    """Copies of a variant car, its base, and two tracks, in a folder of their own."""
    cars = tmp_path / "cars"
    cars.mkdir()
    for name in ("gt_coupe.toml", "gt_coupe_high_wing.toml"):
        shutil.copy(EX / name, cars / name)
    tracks = tmp_path / "tracks"
    tracks.mkdir()
    for name in ("veldmoor_ring.csv", "skarhelm_climb.csv"):
        shutil.copy(TR / name, tracks / name)
    return cars, tracks


def _lap(args):
    r = CliRunner().invoke(main, ["lap", *map(str, args)])
    assert r.exit_code == 0, r.output
    return r


def test_rerun_from_summary_alone_gives_the_same_lap_time(inputs, tmp_path, monkeypatch):
    cars, tracks = inputs
    out = tmp_path / "run"
    _lap([cars / "gt_coupe_high_wing.toml", tracks / "veldmoor_ring.csv", "--step-m", "2",
          "--set", "aero.drag_area_m2=0.85", "--set", "chassis.mass_kg=1375.5",
          "--out", out])
    summary = json.loads((out / "summary.json").read_text())
    prov = summary["provenance"]
    roles = {f["role"]: f for f in prov["inputs"]}
    assert set(roles) == {"car", "car-base", "track"}
    for f in prov["inputs"]:
        assert f["sha256"] == _sha(Path(f["path"]))
    assert sorted(o["text"] for o in prov["cars"][0]["overrides"]) == [
        "aero.drag_area_m2=0.85", "chassis.mass_kg=1375.5"]
    assert prov["cars"][0]["resolved"]["aero"]["drag_area"] == 0.85
    assert prov["cars"][0]["solver_parameters"]["mass"] == 1375.5
    assert prov["tracks"][0]["closed"] is True
    assert prov["run_utc"].endswith("Z") and prov["lapbalance_version"]
    # rerun from another working folder, with nothing but the summary
    monkeypatch.chdir(tmp_path)
    res, check = rerun(out / "summary.json")
    assert abs(res.lap_time_s - summary["lap_time_s"]) <= 1e-9
    assert abs(check["difference_s"]) <= 1e-9
    # the CLI form says so and exits 0
    r = CliRunner().invoke(main, ["rerun", str(out / "summary.json")])
    assert r.exit_code == 0, r.output
    assert "reproduced" in r.output and "matches" in r.output


def test_rerun_open_run_with_start_speed(inputs, tmp_path):
    cars, tracks = inputs
    out = tmp_path / "climb"
    _lap([cars / "gt_coupe.toml", tracks / "skarhelm_climb.csv", "--step-m", "2",
          "--start-speed-kph", "42.5", "--out", out])
    summary = json.loads((out / "summary.json").read_text())
    assert summary["provenance"]["solver"]["start_speed_kph"] == 42.5
    res, check = rerun(out / "summary.json")
    assert abs(check["difference_s"]) <= 1e-9
    assert res.time_label == "run time"


def test_rerun_refuses_changed_inputs_and_finds_moved_ones(inputs, tmp_path):
    cars, tracks = inputs
    out = tmp_path / "run"
    _lap([cars / "gt_coupe.toml", tracks / "veldmoor_ring.csv", "--step-m", "2", "--out", out])
    moved = tmp_path / "moved"
    shutil.move(str(cars), str(moved))
    with pytest.raises(InputError, match="not found"):
        rerun(out / "summary.json")
    res, check = rerun(out / "summary.json", search=[moved])
    assert abs(check["difference_s"]) <= 1e-9
    # one changed byte in the track: refused, naming the file and the hashes
    p = tracks / "veldmoor_ring.csv"
    p.write_text(p.read_text().replace("# name: Veldmoor Ring", "# name: Veldmoor Ring 2"))
    r = CliRunner().invoke(main, ["rerun", str(out / "summary.json"), "--search", str(moved)])
    assert r.exit_code == 2
    assert "has changed since the run" in r.output and "Traceback" not in r.output


def test_rerun_without_provenance_is_one_line(tmp_path):
    p = tmp_path / "summary.json"
    p.write_text(json.dumps({"lap_time_s": 1.0}))
    r = CliRunner().invoke(main, ["rerun", str(p)])
    assert r.exit_code == 2 and "no provenance record" in r.output


def test_aero_map_is_an_input_with_its_hash():
    car = load_car(EX / "single_seater_mapped.toml")
    files = dict((role, p) for role, p in provenance.car_files(car))
    assert Path(files["aero-map"]).name == "single_seater_aero_map.csv"
    rec = provenance.build([car])
    amap = [f for f in rec["inputs"] if f["role"] == "aero-map"][0]
    assert amap["sha256"] == _sha(EX / "single_seater_aero_map.csv")
    assert rec["cars"][0]["resolved"]["aero"]["aero_map"]["sha256"] == amap["sha256"]


def test_override_text_reproduces_the_value():
    car = load_car(EX / "gt_coupe.toml", ["aero.drag_area_m2=0.6000000000000001",
                                          'name="quote \\" car"',
                                          "powertrain.gear_ratios=[3.1, 2.2, 1.5]"])
    texts = [o["text"] for o in provenance.overrides(car)]
    again = load_car(EX / "gt_coupe.toml", texts)
    assert again.aero.drag_area == car.aero.drag_area == 0.6000000000000001
    assert again.name == car.name
    assert again.powertrain.gear_ratios == car.powertrain.gear_ratios


def test_lap_folder_sidecar_hashes_every_output_and_csvs_stay_plain(tmp_path):
    out = tmp_path / "run"
    _lap([EX / "gt_coupe.toml", TR / "veldmoor_ring.csv", "--step-m", "2", "--out", out])
    side = json.loads((out / "provenance.json").read_text())
    names = {o["name"]: o for o in side["outputs"]}
    assert {"channels.csv", "corners.csv", "summary.json"} <= set(names)
    for n, o in names.items():
        assert o["sha256"] == _sha(out / n)
    # the CSV files have no comment lines: csv (and a spreadsheet) read the header first
    rows = list(csv.reader(io.StringIO((out / "channels.csv").read_text())))
    assert rows[0][0] == "distance_m" and all(not r[0].startswith("#") for r in rows)


def test_json_outputs_carry_provenance(tmp_path):
    r = CliRunner().invoke(main, ["lap", str(EX / "gt_coupe.toml"), str(TR / "veldmoor_ring.csv"),
                                  "--step-m", "2", "--json"])
    doc = json.loads(r.output)
    assert doc["provenance"]["inputs"][0]["role"] == "car"
    assert set(doc["liftoff_verdicts"]) >= {"lift-critical", "lift-marginal", "lift-close",
                                            "lift-safe"}
    r = CliRunner().invoke(main, ["track", str(TR / "veldmoor_ring.csv"), "--json"])
    assert json.loads(r.output)["provenance"]["inputs"][0]["role"] == "track"
    r = CliRunner().invoke(main, ["check", str(EX / "gt_coupe.toml"),
                                  str(TR / "veldmoor_ring.csv"), str(EX / "targets_pass.toml"),
                                  "--step-m", "2", "--json"])
    roles = [f["role"] for f in json.loads(r.output)["provenance"]["inputs"]]
    assert roles == ["car", "track", "targets"]
    r = CliRunner().invoke(main, ["tunnel", str(EX / "gt_coupe_tunnel_sweep.csv"), "--car",
                                  str(EX / "gt_coupe.toml"), "--json"])
    roles = [f["role"] for f in json.loads(r.output)["provenance"]["inputs"]]
    assert roles == ["car", "tunnel-readings"]
    r = CliRunner().invoke(main, ["tunnel", "--front-n", "1000", "--rear-n", "2000",
                                  "--drag-n", "800", "--cg-height-m", "0.45",
                                  "--wheelbase-m", "2.65", "--json"])
    assert json.loads(r.output)["provenance"]["settings"]["front_n"] == 1000.0


def test_tunnel_out_gets_a_sidecar_and_force_help(tmp_path):
    out = tmp_path / "corrected.csv"
    args = ["tunnel", str(EX / "gt_coupe_tunnel_sweep.csv"), "--car", str(EX / "gt_coupe.toml"),
            "--out", str(out)]
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 0, r.output
    side = json.loads(provenance.sidecar_for(out).read_text())
    assert side["outputs"][0]["sha256"] == _sha(out)
    h = CliRunner().invoke(main, ["tunnel", "--help"]).output
    assert "Replace the --out file" in h and "output folder" not in h


def test_setup_differences_name_the_keys():
    base = load_car(EX / "gt_coupe.toml")
    wing = load_car(EX / "gt_coupe_high_wing.toml")
    diff = {k: (a, b) for k, a, b in provenance.car_differences(base, wing)}
    assert diff["aero.drag_area_m2"] == (0.8, 0.88)
    assert "name" not in diff and "chassis.mass_kg" not in diff
    rows = provenance.setup_rows([base, wing])
    by = {r[0]: r[2:] for r in rows}
    assert by["drag area CD·A"] == [base.aero.drag_area, wing.aero.drag_area]


def test_summary_is_a_property_and_still_callable():
    car = load_car(EX / "gt_coupe.toml")
    res = simulate_lap(car, load_track(TR / "veldmoor_ring.csv", step_m=2.0))
    assert res.summary["lap_time_s"] == res.lap_time_s == res.summary()["lap_time_s"]
    text = repr(res)
    assert len(text) < 200 and "lap_time_s=" in text and car.name in text
    html = res._repr_html_()
    assert html.startswith("<div>") and "<table>" in html and "lap time" in html
    frame = res.to_frame()
    assert list(frame.columns)[:2] == ["distance_m", "time_s"] and len(frame) == res.track.n
    assert frame["limit"].iloc[0] in ("front", "rear", "engine", "none", "rev-limit",
                                      "top-speed")
    assert frame.attrs["units"]["speed_kph"] == "km/h"


def test_to_frame_without_pandas_says_how_to_get_it(monkeypatch):
    import builtins

    car = load_car(EX / "gt_coupe.toml")
    res = simulate_lap(car, load_track(TR / "veldmoor_ring.csv", step_m=4.0))
    real = builtins.__import__

    def fake(name, *a, **k):
        if name == "pandas":
            raise ImportError("no pandas")
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", fake)
    with pytest.raises(ImportError, match=r"lapbalance\[frames\]"):
        res.to_frame()
