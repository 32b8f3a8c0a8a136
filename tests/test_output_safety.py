"""Nothing the user made is lost: output folders lapbalance owns, reservation, path faults,
and sweep workers that end with their parent.

The rules are in the docstring of :mod:`lapbalance.outputs` (and the README). Real processes
are used where the behaviour is between processes (two runs on one folder, ``kill -9``); the
rest runs in-process through click's test runner to stay cheap.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from lapbalance import outputs
from lapbalance.cli import main

ROOT = Path(__file__).resolve().parents[1]
#: What `lap --out` writes for a demo car with a [transient] section (sorted).
LAP_FILES = ["channels.csv", "corners.csv", "liftoff_response.csv", "liftoff_runs.csv",
             "provenance.json", "summary.json"]
CAR = ROOT / "examples" / "gt_coupe.toml"
VARIANT = ROOT / "examples" / "gt_coupe_high_wing.toml"
TRACK = ROOT / "tracks" / "oranby_bowl.csv"
READINGS = ROOT / "examples" / "gt_coupe_tunnel_sweep.csv"
IS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0


def _env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT / "src") + os.pathsep + env.get("PYTHONPATH", "")
    env.setdefault("NUMBA_NUM_THREADS", "1")
    return env


def _hidden(folder: Path) -> list[str]:
    """Locks, staging folders and temporaries left anywhere below ``folder``."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob(".*")
                  if p.name != outputs.MANIFEST)


def _one_line(res) -> str:
    msg = res.stderr.strip()
    assert res.exit_code == 2, res.output
    assert "Traceback" not in res.output, res.output
    assert "\n" not in msg and msg.startswith("lapbalance: "), res.output
    return msg


def _lap(out, *more) -> list[str]:
    return ["lap", str(CAR), str(TRACK), "--step-m", "4", "--out", str(out), *more]


# ---------------------------------------------------------------------------------------------
# folders lapbalance owns
# ---------------------------------------------------------------------------------------------


def test_force_next_to_the_users_own_files_keeps_them(tmp_path):
    d = tmp_path / "D"
    d.mkdir()
    car, track = d / "car.toml", d / "track.csv"
    car.write_bytes(CAR.read_bytes())
    track.write_bytes(TRACK.read_bytes())
    (d / "notes.txt").write_text("mine")
    before = {p.name: p.read_bytes() for p in d.iterdir()}
    for cmd in (["lap", str(car), str(track), "--out", str(d), "--force"],
                ["compare", str(car), str(VARIANT), "--track", str(track), "--out", str(d),
                 "--force"],
                ["sweep", str(car), str(track), "--vary", "aero.drag_area_m2=0.8", "--out",
                 str(d), "--force"],
                ["demo", "--out", str(d), "--force"]):
        msg = _one_line(CliRunner().invoke(main, cmd))
        assert re.search(r"D holds 3 files lapbalance did not write \(car\.toml, notes\.txt, "
                         r"track\.csv\): choose an empty or new folder", msg), msg
    assert {p.name: p.read_bytes() for p in d.iterdir()} == before


def test_force_replaces_only_the_files_the_manifest_lists(tmp_path):
    out = tmp_path / "res"
    assert CliRunner().invoke(main, _lap(out, "--plots")).exit_code == 0
    man = outputs.read_manifest(out)
    assert man["command"] == "lap" and "channels.csv" in man["files"]
    assert any(f.endswith(".png") for f in man["files"])
    res = CliRunner().invoke(main, _lap(out))
    assert "already holds results; pass --force" in _one_line(res)
    res = CliRunner().invoke(main, _lap(out, "--force"))  # without --plots this time
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == [outputs.MANIFEST, *LAP_FILES]
    (out / "extra.txt").write_text("mine")  # the user adds a file: now it is theirs too
    msg = _one_line(CliRunner().invoke(main, _lap(out, "--force")))
    assert "holds 1 file lapbalance did not write (extra.txt)" in msg
    assert (out / "extra.txt").read_text() == "mine"


def test_out_dot_works_and_leaves_no_hidden_staging(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = CliRunner().invoke(main, _lap("."))
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in tmp_path.iterdir()) == [outputs.MANIFEST, *LAP_FILES]
    (tmp_path / "car.toml").write_text("name = 'x'\n")
    assert "holds 1 file lapbalance did not write (car.toml)" in _one_line(
        CliRunner().invoke(main, _lap(".", "--force")))
    assert _hidden(tmp_path) == []


def test_stale_lock_and_staging_of_a_killed_run_are_cleared(tmp_path):
    out = tmp_path / "res"
    out.mkdir()
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()  # a pid that no longer runs
    (out / outputs.LOCK).write_text(json.dumps({"pid": dead.pid, "command": "lap"}))
    stale = out / f"{outputs.STAGING_PREFIX}{dead.pid}"
    stale.mkdir()
    (stale / "channels.csv").write_text("half")
    res = CliRunner().invoke(main, _lap(out))
    assert res.exit_code == 0, res.output
    assert _hidden(tmp_path) == []
    assert (out / "channels.csv").read_text() != "half"


def test_a_live_lock_refuses_the_second_run_at_once(tmp_path, monkeypatch):
    out = tmp_path / "res"
    out.mkdir()
    (out / outputs.LOCK).write_text(json.dumps({"pid": os.getppid(), "command": "lap"}))

    def must_not_run(*a, **k):
        raise AssertionError("the lap ran although the folder is taken")

    monkeypatch.setattr("lapbalance.lap.simulate_lap", must_not_run)
    msg = _one_line(CliRunner().invoke(main, _lap(out)))
    assert re.search(r"is being written by another lapbalance run \(pid \d+, lap\); wait for "
                     r"it to finish or choose another --out", msg), msg
    assert sorted(p.name for p in out.iterdir()) == [outputs.LOCK]


@pytest.mark.slow
def test_two_concurrent_real_runs_give_one_result_and_one_refusal(tmp_path):
    out = tmp_path / "D"
    cmd = [sys.executable, "-m", "lapbalance", *_lap(out)]
    procs = [subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                              env=_env(), cwd=tmp_path) for _ in range(2)]
    done = [(p.wait(timeout=300), *p.communicate()) for p in procs]
    codes = sorted(rc for rc, _o, _e in done)
    assert codes == [0, 2], done
    err = next(e for rc, _o, e in done if rc == 2).strip()
    assert "\n" not in err and "Traceback" not in err, err
    assert re.search(r"is being written by another lapbalance run|already holds results; "
                     r"pass --force", err), err
    assert sorted(p.name for p in out.iterdir()) == [outputs.MANIFEST, *LAP_FILES]
    assert json.loads((out / "summary.json").read_text())["lap_time_s"] > 0
    assert _hidden(tmp_path) == []


# ---------------------------------------------------------------------------------------------
# single output files
# ---------------------------------------------------------------------------------------------


def test_single_files_never_replace_an_input_and_need_force(tmp_path, monkeypatch):
    mine = tmp_path / "car.toml"
    mine.write_bytes(CAR.read_bytes())

    def must_not_run(*a, **k):
        raise AssertionError("the lap ran although the output was refused")

    monkeypatch.setattr("lapbalance.lap.simulate_lap", must_not_run)
    for extra in ([], ["--force"]):
        msg = _one_line(CliRunner().invoke(main, ["report", str(mine), str(TRACK), "--out",
                                                  str(mine), *extra]))
        assert "is an input of this run; choose another file for --out" in msg
        msg = _one_line(CliRunner().invoke(main, ["tunnel", str(READINGS), "--car", str(mine),
                                                  "--out", str(READINGS), *extra]))
        assert "is an input of this run" in msg
    assert mine.read_bytes() == CAR.read_bytes()
    png = tmp_path / "map.png"
    png.write_bytes(b"my own picture")
    msg = _one_line(CliRunner().invoke(main, ["track", str(TRACK), "--map", str(png)]))
    assert "already exists; pass --force to replace it" in msg
    assert "not written by lapbalance" in msg and png.read_bytes() == b"my own picture"
    res = CliRunner().invoke(main, ["track", str(TRACK), "--map", str(png), "--force"])
    assert res.exit_code == 0, res.output
    assert outputs.written_by_lapbalance(png)
    msg = _one_line(CliRunner().invoke(main, ["track", str(TRACK), "--map", str(png)]))
    assert "(an earlier lapbalance output;" in msg
    assert _hidden(tmp_path) == []


# ---------------------------------------------------------------------------------------------
# path faults: read-only folder, full disk
# ---------------------------------------------------------------------------------------------


@contextlib.contextmanager
def _tmpfs(where: Path, options: str):
    where.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)],
                       capture_output=True)
    if r.returncode != 0:
        where.rmdir()
        pytest.skip("cannot mount a tmpfs here")
    try:
        yield where
    finally:
        subprocess.run(["umount", str(where)], check=False)
        where.rmdir()


@contextlib.contextmanager
def _read_only(where: Path):
    if IS_ROOT:  # root writes through permission bits: use a read-only file system
        with _tmpfs(where, "ro,size=64k") as d:
            yield d
    else:
        where.mkdir()
        where.chmod(0o555)
        try:
            yield where
        finally:
            where.chmod(0o755)
            where.rmdir()


def _commands(base: Path) -> list[list[str]]:
    return [_lap(base / "lapout"), _lap(base),
            ["report", str(CAR), str(TRACK), "--out", str(base / "r.html")],
            ["track", str(TRACK), "--map", str(base / "m.png")],
            ["tunnel", str(READINGS), "--car", str(CAR), "--out", str(base / "c.csv")],
            ["compare", str(CAR), str(VARIANT), "--track", str(TRACK), "--out",
             str(base / "cmp")],
            ["sweep", str(CAR), str(TRACK), "--vary", "aero.drag_area_m2=0.8", "--out",
             str(base / "sw")]]


def test_read_only_folder_gives_one_line_before_any_lap(tmp_path, monkeypatch):
    def must_not_run(*a, **k):
        raise AssertionError("a lap ran although the output cannot be written")

    monkeypatch.setattr("lapbalance.lap.simulate_lap", must_not_run)
    with _read_only(tmp_path / "ro") as ro:
        for cmd in _commands(ro):
            msg = _one_line(CliRunner().invoke(main, cmd))
            assert re.search(r": cannot write.*\((read-only file system|permission denied)\); "
                             r"choose a folder", msg), msg
            assert str(ro) in msg and ".lapbalance" not in msg, msg
            assert list(ro.iterdir()) == []


def test_full_disk_gives_one_line_and_leaves_nothing(tmp_path, monkeypatch):
    if not IS_ROOT:
        pytest.skip("a tiny tmpfs needs root")
    # an almost full disk is refused at the start, before any lap runs
    with _tmpfs(tmp_path / "full", "size=48k") as full:
        with monkeypatch.context() as m:
            m.setattr("lapbalance.lap.simulate_lap", lambda *a, **k: 1 / 0)
            for cmd in _commands(full):
                msg = _one_line(CliRunner().invoke(main, cmd))
                assert re.search(r"cannot write \(no space left on device: [\d.]+ kB free, the "
                                 r"output needs about .*\); free some space", msg), msg
                assert list(full.iterdir()) == [], (cmd, list(full.rglob("*")))
    # the disk fills while the results are written (ENOSPC from the kernel)
    with _tmpfs(tmp_path / "fills", "size=320k") as full:
        for cmd in (["lap", str(CAR), str(TRACK), "--step-m", "0.5", "--out",
                     str(full / "lap")],):
            msg = _one_line(CliRunner().invoke(main, cmd))
            assert re.search(r"/(lap|sw): cannot write in the output folder \(no space left "
                             r"on device\); free some space", msg), msg
            assert list(full.iterdir()) == [], (cmd, list(full.rglob("*")))


# ---------------------------------------------------------------------------------------------
# sweep workers end with their parent
# ---------------------------------------------------------------------------------------------


def _children() -> dict[int, int]:
    """{pid: parent pid} of every live (not zombie) process (Linux /proc)."""
    out = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            stat = Path(f"/proc/{d}/stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if fields[0] != "Z":
            out[int(d)] = int(fields[1])
    return out


def _descendants(pid: int) -> set[int]:
    tree = _children()
    found, todo = set(), [pid]
    while todo:
        p = todo.pop()
        for c, pp in tree.items():
            if pp == p and c not in found:
                found.add(c)
                todo.append(c)
    return found


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_kill_9_of_a_sweep_leaves_no_process_after_10_s(tmp_path):
    track = ROOT / "tracks" / "veldmoor_ring.csv"  # the longest demo lap: the pool stays busy
    cmd = [sys.executable, "-m", "lapbalance", "sweep", str(CAR), str(track), "--step-m", "0.5",
           "--vary", "aero.drag_area_m2=0.6:1.2:2000", "--workers", "2", "--out",
           str(tmp_path / "sw")]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            env=_env(), cwd=tmp_path)
    kids: set[int] = set()
    try:
        deadline = time.monotonic() + 240
        log = tmp_path / "sw" / "sweep.csv"
        while time.monotonic() < deadline and proc.poll() is None:
            kids = _descendants(proc.pid)
            # the first point runs in the sweep process, the next ones in the pool: a header
            # and three points logged means the two workers are computing laps now (forked
            # from the sweep process, or from a fork server with a resource tracker)
            lines = log.read_text().count("\n") if log.exists() else 0
            if len(kids) >= 2 and lines >= 4:
                break
            time.sleep(0.2)
        assert proc.poll() is None and len(kids) >= 2, "the pool never started"
        kids = _descendants(proc.pid)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        end = time.monotonic() + 10
        alive = kids
        while time.monotonic() < end:
            alive = kids & set(_children())
            if not alive:
                break
            time.sleep(0.2)
        assert not alive, f"still running 10 s after kill -9: {sorted(alive)}"
    finally:
        if proc.poll() is None:
            proc.kill()
        for k in kids | _descendants(proc.pid):  # never leave a process behind
            with contextlib.suppress(OSError):
                os.kill(k, signal.SIGKILL)
    # the log of finished points is kept; the next run takes the folder over (stale lock)
    assert (tmp_path / "sw" / "sweep.csv").exists()


def test_a_damaged_manifest_never_reaches_outside_the_folder(tmp_path):
    out = tmp_path / "res"
    out.mkdir()
    victim = tmp_path / "precious.txt"
    victim.write_text("mine")
    (out / "channels.csv").write_text("old")
    (out / outputs.MANIFEST).write_text(json.dumps({
        "written_by": "lapbalance", "command": "lap",
        "files": ["channels.csv", "../precious.txt", str(victim), "./x", None]}))
    res = CliRunner().invoke(main, _lap(out, "--force"))
    assert res.exit_code == 0, res.output
    assert victim.read_text() == "mine"
    assert outputs.read_manifest(out)["files"] == LAP_FILES


def test_sigterm_during_a_run_cleans_up_like_ctrl_c(tmp_path):
    out = tmp_path / "D"
    cmd = [sys.executable, "-m", "lapbalance", "lap", str(CAR),
           str(ROOT / "tracks" / "veldmoor_ring.csv"), "--step-m", "0.1", "--plots", "--out",
           str(out)]  # the figures keep it busy for seconds after the folder is taken
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            env=_env(), cwd=tmp_path)
    try:
        deadline = time.monotonic() + 120
        while not (out / outputs.LOCK).exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        assert (out / outputs.LOCK).exists(), "the run never took its folder"
        proc.send_signal(signal.SIGTERM)
        _out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    # exit status 130 from our interrupt path; on a loaded machine the run was seen, once in
    # several, to end by SIGINT instead (-2) after printing the same line and cleaning up: the
    # interrupt reached the interpreter again while it was exiting
    assert proc.returncode in (130, -signal.SIGINT), (proc.returncode, err)
    assert err.strip() == "lapbalance: interrupted; no partial output was written"
    assert list(tmp_path.iterdir()) == []  # the folder it made is gone with lock and staging


def test_hidden_sibling_staging_of_an_earlier_version_is_cleared(tmp_path):
    out = tmp_path / "res"
    old = tmp_path / ".res.k2j4x9q1.tmp"  # what a killed run of an earlier version left
    old.mkdir()
    (old / "channels.csv").write_text("half")
    mine = tmp_path / ".res.notes123.tmp"  # not only result files: not ours to remove
    mine.mkdir()
    (mine / "todo.txt").write_text("mine")
    for d in (old, mine):
        os.utime(d, (time.time() - 3600, time.time() - 3600))
    assert CliRunner().invoke(main, _lap(out)).exit_code == 0
    assert not old.exists() and (mine / "todo.txt").read_text() == "mine"


def test_temporaries_of_a_killed_write_do_not_make_the_folder_foreign(tmp_path):
    out = tmp_path / "res"
    assert CliRunner().invoke(main, _lap(out)).exit_code == 0
    (out / ".summary.json.ab12cd34.tmp").write_text("{")  # kill -9 inside an atomic write
    (out / f".{outputs.MANIFEST}.x9y8z7w6.tmp").write_text("{")
    res = CliRunner().invoke(main, _lap(out, "--force"))
    assert res.exit_code == 0, res.output
    assert _hidden(tmp_path) == []


def test_a_result_file_the_user_edited_is_not_replaced(tmp_path):
    out = tmp_path / "res"
    assert CliRunner().invoke(main, _lap(out)).exit_code == 0
    assert set(outputs.read_manifest(out)["sha256"]) == set(LAP_FILES)
    edited = (out / "summary.json").read_text() + "\n// my notes on this run\n"
    (out / "summary.json").write_text(edited)
    msg = _one_line(CliRunner().invoke(main, _lap(out, "--force")))
    assert re.search(r"res: summary\.json was changed since lapbalance wrote it; move it "
                     r"elsewhere to keep it, or choose another --out", msg), msg
    assert (out / "summary.json").read_text() == edited
