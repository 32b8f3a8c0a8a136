"""CLI tests of `lapbalance track` (click CliRunner on lapbalance.cli.main)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance.cli import main

ROOT = Path(__file__).resolve().parents[1]
OVAL = ROOT / "tracks" / "oranby_bowl.csv"
HILL = ROOT / "tracks" / "skarhelm_climb.csv"


def run(*args):
    return CliRunner().invoke(main, ["track", *map(str, args)])


def test_text_output_has_summary_corners_and_sectors():
    r = run(OVAL)
    assert r.exit_code == 0, r.output
    assert "Oranby Bowl" in r.output
    assert "closed circuit, length 2394.0 m" in r.output
    assert "corner  direction  entry_m  apex_m  exit_m  min_radius_m" in r.output
    assert "sector  start_m  end_m  length_m" in r.output
    assert "max bank 16.0 deg" in r.output


def test_json_output_matches_library():
    from lapbalance.track import load_track

    r = run(HILL, "--json", "--step-m", "2")
    assert r.exit_code == 0, r.output
    info = json.loads(r.output)
    tr = load_track(HILL, step_m=2.0)
    assert info["closed"] is False
    assert info["points"] == tr.n
    assert info["length_m"] == pytest.approx(tr.length_m, abs=1e-3)
    assert info["step_m"] == pytest.approx(tr.step_m, rel=1e-6)
    assert len(info["corners"]) == len(tr.corners)
    assert set(info["corners"][0]) == {"id", "direction", "entry_m", "apex_m", "exit_m",
                                       "min_radius_m"}
    assert info["elevation_range_m"] == pytest.approx(float(np.ptp(tr.z_m)), abs=1e-3)


def test_open_flag_overrides_file(tmp_path):
    r = run(OVAL, "--open", "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.output)["closed"] is False


def test_map_png_written(tmp_path):
    out = tmp_path / "sub" / "map.png"
    r = run(OVAL, "--map", out)
    assert r.exit_code == 0, r.output
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    assert not [p for p in out.parent.iterdir() if p.name.endswith(".tmp")]


def test_bad_file_exit_2_one_line(tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text("x_m;y_m\n1;2\n")
    r = CliRunner().invoke(main, ["track", str(p)])
    assert r.exit_code == 2
    assert "Traceback" not in r.output
    msg = r.output.strip()
    assert msg.count("\n") == 0
    assert "bad.csv: line 1: the header uses semicolons between columns; use commas" in msg


def test_csv_with_xy_from_circle(tmp_path):
    # Source: analytic geometry: circle of radius 100 m -> length 2 pi R = 628.3 m.
    n = 314
    t = np.arange(n) * 2 * math.pi / n
    p = tmp_path / "ring.csv"
    p.write_text("x_m,y_m\n" + "".join(f"{100 * math.cos(a):.6f},{100 * math.sin(a):.6f}\n"
                                       for a in t))
    r = run(p, "--json")
    info = json.loads(r.output)
    assert info["length_m"] == pytest.approx(2 * math.pi * 100, rel=1e-4)
    assert info["closed"] is True
    assert info["min_radius_m"] == pytest.approx(100.0, rel=5e-3)
