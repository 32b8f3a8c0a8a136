"""Lap times of every demo car on every demo circuit stay as recorded (to 1 ms).

The reference (``tests/data/lap_times_reference.json``) was recorded by
``scripts/record_lap_times.py`` with the solver before a speed-only change. A fix that is
meant to move a lap time lists that pair under ``moved_by_fixes`` with its new time, the old
one and why (and says so in the changelog), so every other pair is still checked against
the times from before the change; a solver change that moves many re-records the file.
"""

import json
import math
from pathlib import Path

import pytest

from scripts.record_lap_times import lap_times

REF = Path(__file__).parent / "data" / "lap_times_reference.json"


@pytest.fixture(scope="module")
def now():
    return lap_times()


def test_every_recorded_lap_time_unchanged_to_1ms(now):
    data = json.loads(REF.read_text())
    ref = dict(data["lap_time_s"])
    for key, fix in data.get("moved_by_fixes", {}).items():
        assert key in ref and fix["why"] and fix["was_s"] == ref[key]
        ref[key] = fix["lap_time_s"]
    assert set(now) == set(ref)
    bad = {k: (ref[k], now[k]) for k in ref
           if (ref[k] is None) != (now[k] is None)
           or (ref[k] is not None and not abs(now[k] - ref[k]) <= 1e-3)}
    assert not bad, bad
    assert sum(t is not None and math.isfinite(t) for t in now.values()) >= 30
