"""Fuzzing the file readers: any bytes give a valid object or an InputError, never a crash.

Random bytes, random text and mutated copies of valid files go through the track CSV reader,
the car TOML reader, the aero-map CSV reader, the tunnel readings reader and (when present)
the targets reader. Any exception other than :class:`~lapbalance.errors.InputError` fails, and
so does a reader that does not return (guard in :func:`_bounded`).
"""

from __future__ import annotations

import importlib.util
import math
import threading
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lapbalance.aeromap import load_aero_map
from lapbalance.car import load_car
from lapbalance.errors import InputError
from lapbalance.track import load_track
from lapbalance.tunnel import read_readings

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"
HANG_GUARD_S = 60.0  # a hang, not a timing check: a read takes milliseconds

# small valid seeds to mutate (a full demo track is slow to resample on every example)
_A = [2 * math.pi * i / 48 for i in range(48)]
TRACK_SEED = ("# name: fuzz ring\n# closed: true\n# sectors_m: 0, 200, 400\nx_m,y_m,z_m,bank_deg,"
              "width_m\n" + "\n".join(f"{120 * math.cos(a):.3f},{120 * math.sin(a):.3f},"
                                      f"{2 * math.sin(a):.3f},4,12" for a in _A) + "\n")
LATLON_SEED = ("lat_deg,lon_deg\n" + "\n".join(
    f"{45 + 0.001 * math.cos(a):.7f},{7 + 0.0014 * math.sin(a):.7f}" for a in _A) + "\n")
CAR_SEED = (EXAMPLES / "gt_coupe.toml").read_text(encoding="utf-8")
MAP_SEED = (EXAMPLES / "single_seater_aero_map.csv").read_text(encoding="utf-8")
READINGS_SEED = (EXAMPLES / "gt_coupe_tunnel_sweep.csv").read_text(encoding="utf-8")
TARGETS_SEED = """title = "fuzz"
[model]
balance_bin_kph = 10
[[target]]
name = "aero balance window"
quantity = "aero_balance_front"
scope = { speed_kph = [150, 400] }
condition = { range = [0.40, 0.50] }
aggregate = "each"
"""

# pieces that matter to the formats, plus some noise
_TOKEN = st.sampled_from(list("0123456789.,;-+eE \t\n#:=[]\"'{}xyzmnabkdg_") +
                         ["nan", "inf", "\x00", "é", "\r\n", "1e309", ",,", "\n\n", "-0",
                          "true", "x_m", "lat_deg", "base", "[aero]", "# closed: "])


def _tokens(min_size=0, max_size=60):
    return st.lists(_TOKEN, min_size=min_size, max_size=max_size).map("".join)


@st.composite
def mutated(draw, seed: str):
    """A copy of ``seed`` with a few random edits (insert, delete, replace, swap lines)."""
    text = seed
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["insert", "delete", "replace", "drop_line", "dup_line",
                                   "swap_lines", "truncate"]))
        if not text:
            break
        i = draw(st.integers(0, len(text) - 1))
        if op == "insert":
            text = text[:i] + draw(_tokens(1, 4)) + text[i:]
        elif op == "delete":
            text = text[:i] + text[i + draw(st.integers(1, 8)):]
        elif op == "replace":
            text = text[:i] + draw(_TOKEN) + text[i + 1:]
        elif op == "truncate":
            text = text[:i]
        else:
            lines = text.split("\n")
            j = draw(st.integers(0, len(lines) - 1))
            k = draw(st.integers(0, len(lines) - 1))
            if op == "drop_line":
                del lines[j]
            elif op == "dup_line":
                lines.insert(k, lines[j])
            else:
                lines[j], lines[k] = lines[k], lines[j]
            text = "\n".join(lines)
    return text.encode("utf-8")


def _inputs(seed: str):
    return st.one_of(
        st.binary(max_size=400),
        st.text(max_size=300).map(lambda t: t.encode("utf-8")),
        _tokens().map(lambda t: t.encode("utf-8")),
        mutated(seed),
        mutated(seed),  # weighted toward near-valid files, where the deep checks are reached
    )


def _bounded(fn, path):
    box: dict = {}

    def target():
        try:
            box["value"] = fn(path)
        except BaseException as e:  # judged by the caller
            box["error"] = e

    t = threading.Thread(target=target, daemon=True)
    t.start()
    t.join(HANG_GUARD_S)
    assert not t.is_alive(), f"{fn.__name__} did not return on {path.read_bytes()[:200]!r}"
    return box


def _check(reader, data: bytes, path: Path, ok_type):
    path.write_bytes(data)
    box = _bounded(reader, path)
    err = box.get("error")
    if err is None:
        assert isinstance(box["value"], ok_type)
        return
    if not isinstance(err, InputError):
        raise AssertionError(f"{reader.__name__} raised {type(err).__name__}: {err} on "
                             f"{data[:300]!r}") from err
    line = err.one_line()
    assert "\n" not in line and line.strip()
    assert str(path) in line  # the message names the file


FUZZ = settings(max_examples=200, deadline=None, derandomize=False,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


@FUZZ
@given(data=st.one_of(_inputs(TRACK_SEED), mutated(LATLON_SEED)))
def test_track_reader(data, folder):
    from lapbalance.track import Track

    _check(lambda p: load_track(p, step_m=5.0), data, folder / "track.csv", Track)


@FUZZ
@given(data=_inputs(CAR_SEED))
def test_car_reader(data, folder):
    from lapbalance.car import Car

    _check(load_car, data, folder / "car.toml", Car)


@settings(FUZZ, max_examples=100)
@given(data=_inputs(MAP_SEED))
def test_aero_map_reader(data, folder):
    from lapbalance.aeromap import AeroMap

    def read(p):
        return load_aero_map(p, cg_height=0.3, wheelbase=3.0)

    read.__name__ = "load_aero_map"
    _check(read, data, folder / "map.csv", AeroMap)


@settings(FUZZ, max_examples=100)
@given(data=_inputs(READINGS_SEED))
def test_tunnel_readings_reader(data, folder):
    from lapbalance.tunnel import ReadingsTable

    _check(read_readings, data, folder / "readings.csv", ReadingsTable)


@settings(FUZZ, max_examples=100)
@given(data=_inputs(TARGETS_SEED))
def test_targets_reader(data, folder):
    if importlib.util.find_spec("lapbalance.targets") is None:
        pytest.skip("lapbalance.targets is not merged yet")
    from lapbalance.targets import load_targets

    _check(load_targets, data, folder / "targets.toml", list)


def test_mutation_seeds_are_valid(folder):
    """The seeds themselves load, so mutations start from a valid file."""
    (folder / "seed.csv").write_text(TRACK_SEED)
    load_track(folder / "seed.csv", step_m=5.0)
    (folder / "seed_ll.csv").write_text(LATLON_SEED)
    load_track(folder / "seed_ll.csv", step_m=5.0)
