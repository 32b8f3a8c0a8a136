"""Every bad log in the corpus (tests/data/bad/log_*.csv) gets one clear line and exit 2.

Each file holds one mistake (written by ``scripts/make_demo_log.py --bad``). It is run
through every command that reads a log (``correlate``, ``report --log``); the answer must be
exactly one line on stderr starting with ``lapbalance: ``, name the file, match the expected
"what is wrong + how to fix it" pattern, and show no traceback.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
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


# --------------------------------------------------------------------------------------------
# Mangled logs: a reader answers with InputError or a Log, never with another exception
# --------------------------------------------------------------------------------------------

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@pytest.fixture(scope="module")
def good_log_lines():
    from lapbalance import correlate as C
    from lapbalance.car import load_car
    from lapbalance.lap import simulate_lap
    from lapbalance.track import load_track

    track = load_track(RING)
    lap = simulate_lap(load_car(CAR), track, assess_liftoff=False)
    cols = C.synthetic_log(lap, rate_hz=2.0, speed_noise_kph=0.5, position_noise_m=0.5,
                           seed=3)
    return track, C.log_csv_text(cols).splitlines()


_CELLS = st.sampled_from(["", "nan", "inf", "-1", "1e9", "abc", '"7,5"', "12;3", "0", "\t",
                          '"', "1e-9"])


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_mangled_log_gives_input_error_or_a_log(good_log_lines, tmp_path, data):
    from lapbalance import correlate as C
    from lapbalance.errors import InputError

    track, lines = good_log_lines
    lines = list(lines)
    for _ in range(data.draw(st.integers(1, 4))):
        kind = data.draw(st.sampled_from(["cell", "drop", "dup", "swap", "header"]))
        j = data.draw(st.integers(1, len(lines) - 1))
        if kind == "cell":
            cells = lines[j].split(",")
            cells[data.draw(st.integers(0, len(cells) - 1))] = data.draw(_CELLS)
            lines[j] = ",".join(cells)
        elif kind == "drop":
            del lines[j]
        elif kind == "dup":
            lines.insert(j, lines[j])
        elif kind == "swap" and j + 1 < len(lines):
            lines[j], lines[j + 1] = lines[j + 1], lines[j]
        elif kind == "header":
            cells = lines[0].split(",")
            cells[data.draw(st.integers(0, len(cells) - 1))] = data.draw(
                st.sampled_from(["time", "speed", "x_m", "", "TIME_S", "speed_mps"]))
            lines[0] = ",".join(cells)
    p = tmp_path / "mangled.csv"
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    try:
        log = C.load_log(p, track)
    except InputError as e:
        assert "\n" not in e.one_line() and str(p) in e.one_line()
    else:
        assert log.laps and all(np.all(np.isfinite(lap.speed_mps)) for lap in log.laps)
