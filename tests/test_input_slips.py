"""Unit slips named as such, without flagging inputs that are right, and readable messages.

The checks must rank, not flag everything: the demo cars load without a warning, a target on
a usage that may exceed 1 after lift-off is no percentage, and a truck-sized drag area with
its own car is no speed-unit slip.
"""

from __future__ import annotations

import errno
import warnings
from pathlib import Path

import numpy as np
import pytest

from lapbalance import tunnel
from lapbalance.car import load_car
from lapbalance.errors import InputError, clip, tidy
from lapbalance.outputs import os_error_line, write_bytes_atomic
from lapbalance.targets import targets_from_dict
from lapbalance.textio import decode_text, looks_like_utf16

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("name", sorted(p.name for p in (ROOT / "examples").glob("*.toml")
                                        if not p.name.startswith("targets")))
def test_demo_cars_load_without_a_warning(name):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        load_car(ROOT / "examples" / name)


def test_rad_per_s_is_told_from_rpm():
    car = ROOT / "examples" / "gt_coupe.toml"
    # 2π/60: 7500 rpm = 785.4 rad/s (unit definition)
    rads = "powertrain.torque_curve_rpm=[104.7, 209.4, 314.2, 418.9, 523.6, 628.3, 733.0, 785.4]"
    with pytest.raises(InputError, match=r"look like rad/s \(785\.4 rad/s = 7500 rpm\)"):
        load_car(car, [rads])
    with pytest.warns(UserWarning, match=r"ends at 7000 rpm, below rev_limit_rpm 7500"):
        load_car(car, ["powertrain.torque_curve_rpm=[1000, 2000, 3000, 4000, 5000, 6000, "
                       "6500, 7000]"])


def test_usage_above_one_is_no_percentage_but_98_is():
    base = {"name": "t", "quantity": "liftoff_max_usage_rear"}
    targets_from_dict({"target": [{**base, "condition": {"max": 1.05}}]})
    with pytest.raises(InputError, match=r"= 98 looks like a percentage"):
        targets_from_dict({"target": [{**base, "condition": {"max": 98}}]})
    lap_time = {"name": "t", "quantity": "lap_time_s", "condition": {"max": 95}}
    targets_from_dict({"target": [lap_time]})  # seconds, not a share


def _table(speed_kph, drag_n):
    n = len(speed_kph)
    cols = {"speed_kph": np.asarray(speed_kph, float), "front_n": np.full(n, 300.0),
            "rear_n": np.full(n, 400.0), "drag_n": np.asarray(drag_n, float)}
    return tunnel.ReadingsTable(cols, {}, np.arange(1, n + 1), "t.csv")


def test_speed_unit_check_ranks():
    rho = 1.225
    v = np.array([80.0, 100.0, 120.0])  # km/h
    q = 0.5 * rho * (v / 3.6) ** 2  # dynamic pressure, q = ρv²/2 [Pa] (definition)
    truck = _table(v, 6.0 * q)  # C_D·A = 6 m²: a large truck, speeds in km/h
    tunnel.check_speed_unit(truck, rho, expected_drag_area=6.0)
    car_ms = _table(v / 3.6, 0.8 * q)  # a car's 0.8 m² with the speeds typed in m/s
    with pytest.raises(InputError, match=r"look like m/s"):
        tunnel.check_speed_unit(car_ms, rho, expected_drag_area=0.8)
    with pytest.raises(InputError, match=r"look like m/s"):
        tunnel.check_speed_unit(car_ms, rho)
    tunnel.check_speed_unit(_table(v, 0.8 * q), rho)


def test_clip_and_tidy_keep_messages_readable():
    long = "x" * 350_000
    c = clip(long, 60)
    assert len(c) <= 60 + 25 and c.endswith("(350000 characters)") and "…" in c
    assert clip("short") == "short"
    assert clip("a\nb\x00c") == "a b c"
    line = tidy("file.csv: line 3: " + " ".join(["12.5"] * 100_000) + "; write a number")
    assert len(line) <= 520 and line.endswith("; write a number")
    assert line.startswith("file.csv: line 3: 12.5")
    err = InputError(f'= "{long}" is not a number; give a number', "f.toml", "chassis.mass_kg")
    assert len(err.one_line()) < 200 and err.one_line().endswith("; give a number")


def test_text_decoding():
    text = "name = \"x\"\n"
    assert decode_text(b"\xef\xbb\xbf" + text.encode(), "f", "a file", "save as UTF-8") == text
    assert decode_text(text.encode("utf-16"), "f", "a file", "save as UTF-8") == text
    assert looks_like_utf16(("a,b\n1,2\n" * 4).encode("utf-16-le"))
    assert not looks_like_utf16(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" * 4)
    with pytest.raises(InputError, match="UTF-16 text without a byte-order mark"):
        decode_text(text.encode("utf-16-be"), "f", "a file", "save as UTF-8")


def test_os_error_lines_name_the_output_not_the_lock(tmp_path):
    e = OSError(errno.ENOSPC, "No space left on device", str(tmp_path / "D" / ".lapbalance.lock"))
    line = os_error_line(e, "write in the output folder")
    assert line == (f"{tmp_path / 'D'}: cannot write in the output folder (no space left on "
                    "device); free some space or choose a folder on another disk")
    e = OSError(errno.EROFS, "Read-only file system", str(tmp_path / ".report.html.ab12.tmp"))
    assert os_error_line(e).startswith(f"{tmp_path / 'report.html'}: cannot write (read-only")


def test_failed_atomic_write_leaves_no_folder_it_made(tmp_path, monkeypatch):
    import lapbalance.outputs as outputs

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(outputs.os, "fsync", full)
    with pytest.raises(OSError):
        write_bytes_atomic(tmp_path / "a" / "b" / "map.png", b"png")
    assert list(tmp_path.iterdir()) == []
