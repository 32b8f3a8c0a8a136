"""Data safety: atomic writes, no overwriting without --force, nothing half-written.

An interrupted run is simulated by making one of the writers raise ``KeyboardInterrupt`` after
other files of the same folder were already written.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance import export, outputs
from lapbalance.cli import main
from lapbalance.errors import InputError
from lapbalance.outputs import (
    staged_dir,
    write_bytes_atomic,
    write_json_atomic,
    write_text_atomic,
)

ROOT = Path(__file__).resolve().parents[1]
CAR = ROOT / "examples" / "gt_coupe.toml"
TRACK = ROOT / "tracks" / "oranby_bowl.csv"
READINGS = ROOT / "examples" / "gt_coupe_tunnel_sweep.csv"


def _leftovers(folder: Path) -> list[str]:
    """Hidden temporary files/folders (locks, staging, temporaries) the writers would leave
    behind, here and in the folders below (the manifest of a result folder is no leftover)."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob(".*")
                  if p.name != outputs.MANIFEST)


def _old_results(folder: Path) -> dict[str, bytes]:
    """An earlier lapbalance result: files listed in the folder's manifest."""
    folder.mkdir()
    files = {"channels.csv": b"distance_m,speed_kph\n0,100\n",
             "summary.json": b'{"lap_time_s": 99.0}\n',
             "plots/speed.png": b"png"}
    for name, data in files.items():
        (folder / name).parent.mkdir(exist_ok=True)
        (folder / name).write_bytes(data)
    (folder / outputs.MANIFEST).write_text(json.dumps(
        {"written_by": "lapbalance", "command": "lap", "files": sorted(files)}))
    return files


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*")
            if p.is_file() and p.name != outputs.MANIFEST}


# ---------------------------------------------------------------------------------------------
# single files
# ---------------------------------------------------------------------------------------------


def test_file_is_written_to_a_temporary_file_and_renamed_into_place(tmp_path, monkeypatch):
    target = tmp_path / "out" / "summary.json"
    seen = []
    real_replace = os.replace

    def spy(src, dst):
        src, dst = Path(src), Path(dst)
        seen.append((src, dst, src.read_bytes()))
        assert not dst.exists() or dst.read_bytes() == b"old"  # not yet touched
        real_replace(src, dst)

    monkeypatch.setattr(outputs.os, "replace", spy)
    write_text_atomic(target, "first")
    target.write_bytes(b"old")
    write_text_atomic(target, "second")
    assert target.read_text() == "second"
    assert len(seen) == 2
    for src, dst, _data in seen:
        assert dst == target and src.parent == target.parent and src != target
        assert src.name.startswith(".summary.json.") and src.suffix == ".tmp"
        assert not src.exists()
    assert seen[1][2] == b"second"
    assert _leftovers(target.parent) == []


def test_failed_file_write_keeps_the_old_file_and_leaves_no_temp(tmp_path, monkeypatch):
    target = tmp_path / "corrected.csv"
    target.write_bytes(b"old contents\n")

    def broken_fsync(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(outputs.os, "fsync", broken_fsync)
    with pytest.raises(KeyboardInterrupt):
        write_bytes_atomic(target, b"new contents that never land\n")
    assert target.read_bytes() == b"old contents\n"
    assert _leftovers(tmp_path) == []


def test_json_with_nan_is_refused_before_anything_is_written(tmp_path):
    target = tmp_path / "summary.json"
    target.write_text('{"ok": true}\n')
    with pytest.raises(ValueError):
        write_json_atomic(target, {"lap_time_s": float("nan")})
    assert json.loads(target.read_text()) == {"ok": True}
    assert _leftovers(tmp_path) == []


# ---------------------------------------------------------------------------------------------
# folders
# ---------------------------------------------------------------------------------------------


def test_existing_folder_is_not_replaced_without_force(tmp_path):
    out = tmp_path / "results"
    old = _old_results(out)
    with pytest.raises(InputError, match=r"already holds results; pass --force to replace them"):
        with staged_dir(out, force=False) as tmp:
            (tmp / "x").write_text("new")
    assert _snapshot(out) == old
    assert _leftovers(tmp_path) == []


def test_force_swaps_in_the_complete_new_folder(tmp_path):
    out = tmp_path / "results"
    _old_results(out)
    with staged_dir(out, force=True) as tmp:
        assert tmp.parent == out and tmp.name.startswith(outputs.STAGING_PREFIX)
        (tmp / "channels.csv").write_text("new")
        assert (out / "summary.json").exists()  # the old files stay until the end
    assert _snapshot(out) == {"channels.csv": b"new"}
    assert outputs.read_manifest(out)["files"] == ["channels.csv"]
    assert _leftovers(tmp_path) == []


def test_empty_existing_folder_is_used_without_force(tmp_path):
    out = tmp_path / "results"
    out.mkdir()
    with staged_dir(out) as tmp:
        (tmp / "a.csv").write_text("a")
    assert _snapshot(out) == {"a.csv": b"a"}
    assert _leftovers(tmp_path) == []


def test_a_file_in_the_way_of_the_folder_is_an_error(tmp_path):
    out = tmp_path / "results"
    out.write_text("a file")
    with pytest.raises(InputError, match=r"exists and is not a folder; choose another --out"):
        with staged_dir(out, force=True):
            pass
    assert out.read_text() == "a file"


def test_interrupted_folder_write_leaves_the_old_folder_intact(tmp_path, monkeypatch, lap):
    out = tmp_path / "results"
    old = _old_results(out)
    written = []
    real_channels = export.channels_csv

    def channels_then_note(result):
        written.append("channels")
        return real_channels(result)

    def interrupted(result):
        assert written  # channels.csv is already in the staging folder
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "channels_csv", channels_then_note)
    monkeypatch.setattr(export, "corners_csv", interrupted)
    with pytest.raises(KeyboardInterrupt):
        export.write_lap_folder(lap, out, force=True)
    assert _snapshot(out) == old
    assert _leftovers(tmp_path) == []


def test_interrupted_first_write_creates_no_folder(tmp_path, monkeypatch, lap):
    out = tmp_path / "fresh"

    def interrupted(result):
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "summary_json", interrupted)
    with pytest.raises(KeyboardInterrupt):
        export.write_lap_folder(lap, out)
    assert not out.exists()
    assert _leftovers(tmp_path) == []


@pytest.fixture(scope="module")
def lap():
    from lapbalance.car import load_car
    from lapbalance.lap import simulate_lap
    from lapbalance.track import load_track

    return simulate_lap(load_car(CAR), load_track(TRACK, step_m=2.0))


# ---------------------------------------------------------------------------------------------
# command line
# ---------------------------------------------------------------------------------------------


def _lap_args(out: Path, *more) -> list[str]:
    return ["lap", str(CAR), str(TRACK), "--step-m", "2", "--out", str(out), *more]


def test_lap_refuses_an_occupied_out_folder_without_force(tmp_path, monkeypatch):
    out = tmp_path / "results"
    old = _old_results(out)

    def must_not_run(*a, **k):
        raise AssertionError("the lap ran although the output folder was refused")

    monkeypatch.setattr("lapbalance.lap.simulate_lap", must_not_run)
    res = CliRunner().invoke(main, _lap_args(out))
    assert res.exit_code == 2, res.output
    msg = res.stderr.strip()
    assert "\n" not in msg and msg.startswith("lapbalance: --out: ")
    assert "already holds results; pass --force to replace them" in msg
    assert _snapshot(out) == old


def test_lap_force_replaces_the_folder(tmp_path):
    out = tmp_path / "results"
    _old_results(out)
    res = CliRunner().invoke(main, _lap_args(out, "--force"))
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == [outputs.MANIFEST, "channels.csv",
                                                      "corners.csv", "liftoff_response.csv",
                                                      "liftoff_runs.csv", "provenance.json",
                                                      "summary.json"]
    assert json.loads((out / "summary.json").read_text())["lap_time_s"] > 0
    assert _leftovers(tmp_path) == []


def test_interrupted_lap_command_keeps_old_results(tmp_path, monkeypatch):
    out = tmp_path / "results"
    old = _old_results(out)

    def interrupted(result):
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "corners_csv", interrupted)
    res = CliRunner().invoke(main, _lap_args(out, "--force"))
    assert res.exit_code == 130, res.output
    assert "interrupted; no partial output was written" in res.stderr
    assert "Traceback" not in res.output
    assert _snapshot(out) == old
    assert _leftovers(tmp_path) == []


def test_failed_lap_with_out_writes_nothing(tmp_path):
    out = tmp_path / "results"
    res = CliRunner().invoke(main, ["lap", str(CAR), str(ROOT / "tests/data/bad/track_empty.csv"),
                                    "--out", str(out)])
    assert res.exit_code == 2
    assert list(tmp_path.iterdir()) == []


def test_tunnel_table_refuses_an_existing_out_file_without_force(tmp_path):
    target = tmp_path / "corrected.csv"
    target.write_text("engineer's table\n")
    args = ["tunnel", str(READINGS), "--car", str(CAR), "--out", str(target)]
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 2
    assert "already exists; pass --force to replace it" in res.stderr
    assert "(not written by lapbalance; --force replaces this one file)" in res.stderr
    assert target.read_text() == "engineer's table\n"
    res = CliRunner().invoke(main, args + ["--force"])
    assert res.exit_code == 0, res.output
    assert "balance_front_cg" in target.read_text().splitlines()[0]
    assert _leftovers(tmp_path) == []


def test_demo_may_replace_its_own_earlier_output(tmp_path, monkeypatch):
    cmd = main.commands.get("demo")
    if cmd is None:
        pytest.skip("lapbalance demo is not registered yet")
    monkeypatch.chdir(tmp_path)
    out = tmp_path / "demo-out"
    opts = {o for p in cmd.params for o in getattr(p, "opts", ())}
    args = ["demo"]
    if "--out" in opts:
        args += ["--out", str(out)]
    elif any(p.param_type_name == "argument" for p in cmd.params):
        args += [str(out)]
    runner = CliRunner()
    first = runner.invoke(main, args)
    assert first.exit_code == 0, first.output
    made = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*") if p.is_file())
    assert made
    second = runner.invoke(main, args)  # no --force: the demo's own output is replaced
    assert second.exit_code == 0, second.output
    again = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*") if p.is_file())
    assert again == made
    assert not [n for n in _leftovers(tmp_path) if n.endswith(".tmp") or ".old-" in n]
