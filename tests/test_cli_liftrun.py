"""`lapbalance liftrun` through the CLI: tables, files, figures, bad input."""

import csv
import json
import re
from pathlib import Path

from click.testing import CliRunner

from lapbalance.cli import main

ROOT = Path(__file__).resolve().parents[1]
HATCH = str(ROOT / "examples" / "fwd_hatch.toml")


def test_liftrun_prints_writes_and_plots(tmp_path):
    out = tmp_path / "lift"
    r = CliRunner().invoke(main, ["liftrun", HATCH, "--radius", "40", "--out", str(out),
                                  "--plots"])
    assert r.exit_code == 0, r.output
    assert "R = 40 m: steady limit" in r.output and "yaw ratio" in r.output
    for name in ("runs.csv", "histories.csv", "summary.json", "liftrun_figures.png",
                 "liftrun_history_R40.png"):
        assert (out / name).stat().st_size > 0
    rows = list(csv.DictReader((out / "runs.csv").open()))
    ays = [float(x["ay0_mps2"]) for x in rows]
    assert ays[0] == 4.0 and all(0 < b - a <= 0.5 + 1e-9 for a, b in zip(ays, ays[1:]))
    s = json.loads((out / "summary.json").read_text())
    assert s["radii"][0]["radius_m"] == 40.0 and len(s["radii"][0]["runs"]) == len(rows)
    assert "ISO 9816" in s["method"] and "caution" in s
    # an occupied folder is refused without --force
    r = CliRunner().invoke(main, ["liftrun", HATCH, "--radius", "40", "--out", str(out)])
    assert r.exit_code == 2 and "--force" in r.output


def test_liftrun_json_and_radius_lists():
    r = CliRunner().invoke(main, ["liftrun", HATCH, "--radius", "60,120", "--ay-step", "0.5",
                                  "--json"])
    assert r.exit_code == 0, r.output
    s = json.loads(r.output)
    assert [x["radius_m"] for x in s["radii"]] == [60.0, 120.0]
    run = s["radii"][0]["runs"][0]
    assert {"yaw_rate_ratio", "sideslip_peak_change_deg", "path_radius_ratio",
            "lateral_deviation_m", "mean_decel_mps2", "spin"} <= set(run)


def test_liftrun_needs_the_transient_section(tmp_path):
    text = (ROOT / "examples" / "fwd_hatch.toml").read_text()
    car = tmp_path / "car.toml"
    car.write_text(re.sub(r"\n\[transient\].*", "\n", text, flags=re.S))
    r = CliRunner().invoke(main, ["liftrun", str(car)])
    assert r.exit_code == 2
    assert "no [transient] section" in r.output and "yaw_inertia_kgm2" in r.output
    assert "steering_ratio" in r.output and "Traceback" not in r.output


def test_liftrun_bad_options():
    for args, msg in ((["--ay-step", "0.8"], "at most 0.5"), (["--radius", "forty"],
                      "not a number"), (["--radius", "2"], "between 5 and 5000"),
                      (["--ramp-s", "-1"], "between 0 and 2 s")):
        r = CliRunner().invoke(main, ["liftrun", HATCH] + args)
        assert r.exit_code == 2, (args, r.output)
        assert msg in r.output
