"""Every bad log in the corpus (tests/data/bad/log_*.csv) gets one clear line and exit 2.

Each file holds one mistake (written by ``scripts/make_demo_log.py --bad``). It is run
through every command that reads a log (``correlate``, ``report --log``); the answer must be
exactly one line on stderr starting with ``lapbalance: ``, name the file, match the expected
"what is wrong + how to fix it" pattern, and show no traceback.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance.cli import main

ROOT = Path(__file__).resolve().parents[1]
BAD = ROOT / "tests" / "data" / "bad"
CAR = ROOT / "examples" / "gt_coupe.toml"
RING = ROOT / "tracks" / "veldmoor_ring.csv"

#: corpus file -> regex of its one-line message (column or line, what is wrong, the fix).
EXPECT: dict[str, str] = {
    "log_time_backwards.csv":
        r"line 46: time_s goes backwards or repeats \(21 s then 20\.5 s\); sort the rows by "
        r"time and remove repeated rows",
    "log_gap.csv":
        r"line \d+: gap of 6\.50 s in time_s .*longer than 2 s: the logger lost data; cut the "
        r"log at the gap",
    "log_speed_kph_labelled_mps.csv":
        r"speed_mps: speeds look like km/h, not m/s: .* from distance_m; rename the column "
        r"speed_kph",
    "log_speed_mps_labelled_kph.csv":
        r"speed_kph: speeds look like m/s, not km/h: .* from the track length .*; rename the "
        r"column speed_mps",
    "log_other_track.csv":
        r"distance_m: lap 1 is 25\d\d m long but Veldmoor Ring is 5298 m \(-5\d\.\d %, more "
        r"than 5 %\): a log of another track\? check the track file",
    "log_other_track_positions.csv":
        r"positions: the logged positions lie \d+ m from the track line \(median; more than "
        r"25 m\): a log of another track",
}

CORPUS = sorted(p.name for p in BAD.glob("log_*.csv"))


def test_every_log_corpus_file_has_an_expectation():
    assert set(CORPUS) == set(EXPECT), set(CORPUS) ^ set(EXPECT)


@pytest.mark.parametrize("name", CORPUS)
def test_bad_log_gives_one_clear_line(name, tmp_path):
    bad = str(BAD / name)
    runner = CliRunner()
    pattern = re.compile(EXPECT[name])
    for argv in (["correlate", str(CAR), str(RING), bad],
                 ["correlate", str(CAR), str(RING), bad, "--fit", "grip", "--json"],
                 ["report", str(CAR), str(RING), "--log", bad, "--out",
                  str(tmp_path / "r.html")]):
        res = runner.invoke(main, argv)
        assert res.exit_code == 2, (argv, res.output)
        err = [ln for ln in res.stderr.splitlines() if ln.startswith("lapbalance: ")
               and "warning" not in ln]
        assert len(err) == 1, res.stderr
        assert "Traceback" not in res.output
        assert bad in err[0]
        assert pattern.search(err[0]), err[0]
    assert not (tmp_path / "r.html").exists()
