"""`lapbalance lap`, `car` and `demo` through the CLI."""

import json
from pathlib import Path

from click.testing import CliRunner

from lapbalance.cli import main

ROOT = Path(__file__).resolve().parents[1]
GT = str(ROOT / "examples" / "gt_coupe.toml")
RING = str(ROOT / "tracks" / "veldmoor_ring.csv")
LOOPS = str(ROOT / "tracks" / "kettlewick_loops.csv")


def test_version_and_help():
    r = CliRunner().invoke(main, ["--version"])
    assert r.exit_code == 0 and "0.1.0" in r.output
    r = CliRunner().invoke(main, ["--help"])
    assert r.exit_code == 0
    for cmd in ("lap", "car", "track", "tunnel", "demo"):
        assert cmd in r.output


def test_lap_prints_and_writes(tmp_path):
    out = tmp_path / "run"
    r = CliRunner().invoke(main, ["lap", GT, LOOPS, "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "lap time" in r.output and "lift-off check" in r.output
    for name in ("channels.csv", "corners.csv", "summary.json"):
        assert (out / name).exists()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["lap_time_s"] > 0 and summary["corners"]
    assert {"liftoff_verdict", "liftoff_worst_shift", "liftoff_worst_rear"} <= set(
        summary["corners"][0])
    header = (out / "channels.csv").read_text().splitlines()[0].split(",")
    for ch in ("distance_m", "speed_mps", "fz_front_n", "ground_transfer_n", "usage_rear",
               "balance_index", "limit", "liftoff_balance_shift"):
        assert ch in header
    # no overwrite without --force
    r2 = CliRunner().invoke(main, ["lap", GT, LOOPS, "--out", str(out)])
    assert r2.exit_code == 2 and "--force" in r2.output
    r3 = CliRunner().invoke(main, ["lap", GT, LOOPS, "--out", str(out), "--force"])
    assert r3.exit_code == 0


def test_lap_json_and_overrides():
    r = CliRunner().invoke(main, ["lap", GT, LOOPS, "--json"])
    base = json.loads(r.output)
    r = CliRunner().invoke(main, ["lap", GT, LOOPS, "--json", "--set",
                                  "chassis.mass_kg=1400"])
    heavy = json.loads(r.output)
    # Source: first principles -- more mass, same grip and power: slower lap.
    assert heavy["lap_time_s"] > base["lap_time_s"]
    assert len(base["sectors"]) == 3


def test_liftoff_only_prints_flags():
    r = CliRunner().invoke(main, ["lap", str(ROOT / "examples" / "offroad_truck.toml"), RING,
                                  "--liftoff-only"])
    assert r.exit_code == 0
    # one wording for verdicts in terminal, JSON and report: the code, then its meaning
    assert "  lift-critical  " in r.output and "lap time" not in r.output
    from lapbalance.liftoff import VERDICT_MEANING
    assert f"lift-critical: {VERDICT_MEANING['lift-critical']}" in r.output


def test_bad_override_exits_2_one_line():
    r = CliRunner().invoke(main, ["lap", GT, LOOPS, "--set", "chassis.wheelbase_m=2650"])
    assert r.exit_code == 2
    assert "looks like millimetres" in r.output and "Traceback" not in r.output


def test_car_command_shows_both_conventions():
    r = CliRunner().invoke(main, ["car", GT, "--json"])
    d = json.loads(r.output)
    # Source: ground -> CG conversion front += CdA h/L (Gillespie ch. 1 moments about the
    # contact point): 0.38 as given, 0.38 + 0.8*0.42/2.65/1.6 on track
    assert abs(d["aero_balance_front_ground"] - 0.38) < 1e-12
    assert abs(d["aero_balance_front_cg"] - (0.38 + 0.8 * 0.42 / 2.65 / 1.6)) < 1e-12


def test_schema_doc_is_current():
    # docs/car-file.md is generated from the schema; keep it in step.
    r = CliRunner().invoke(main, ["car", "--schema"])
    assert r.output.strip() == (ROOT / "docs" / "car-file.md").read_text().strip()


def test_demo_runs_twice_and_refuses_foreign_folder(tmp_path):
    out = tmp_path / "demo"
    r = CliRunner().invoke(main, ["demo", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert (out / "summary.json").exists() and (out / ".lapbalance-manifest.json").exists()
    r = CliRunner().invoke(main, ["demo", "--out", str(out)])
    assert r.exit_code == 0
    # a user's file put into the demo's own folder: the rerun refuses and keeps it
    (out / "my_notes.txt").write_text("keep me too")
    for extra in ([], ["--force"]):
        r = CliRunner().invoke(main, ["demo", "--out", str(out), *extra])
        assert r.exit_code == 2, r.output
        assert "holds 1 file lapbalance did not write (my_notes.txt)" in r.stderr
    assert (out / "my_notes.txt").read_text() == "keep me too"
    assert (out / "summary.json").exists()
    foreign = tmp_path / "mine"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep me")
    for extra in ([], ["--force"]):
        r = CliRunner().invoke(main, ["demo", "--out", str(foreign), *extra])
        assert r.exit_code == 2
    assert sorted(p.name for p in foreign.iterdir()) == ["notes.txt"]
    assert (foreign / "notes.txt").read_text() == "keep me"
