"""Parameter sweeps: run one car over one track at many settings, on a laptop or a cluster.

A sweep varies numeric car-file keys (``section.key`` as in ``--set``) over a full grid or a
Latin hypercube (McKay, Beckman & Conover 1979, via :class:`scipy.stats.qmc.LatinHypercube`)
and reduces every lap to one small row: the point's values, lap time, top and minimum speed,
the worst lift-off balance shift, the number of corners the lift-off check flags and the
highest rear-axle usage after lift-off.

Where the points run:

* ``workers=1`` (default): one after another in this process.
* ``workers=N > 1``: a pool of N local processes (``forkserver`` start method where the
  platform has it, else ``spawn``). Each worker receives the car's raw key mapping and the
  track once, rebuilds the car from the raw mapping plus the point's overrides and runs it.
  Each worker runs numba single-threaded so that N workers use N cores. The first point
  runs in this process first, so the on-disk numba cache is warm before the workers start.
* ``cluster="tcp://host:8786"``: the points are submitted to an existing Dask distributed
  scheduler (optional extra ``lapbalance[cluster]``); lapbalance must be importable on the
  workers. Points travel in small batches (a lap takes milliseconds, about a task's round
  trip), each run with one numba thread, so a worker's threads do not oversubscribe it.

Resuming: with ``out``, every finished point is appended to ``OUT/sweep.csv`` at once (one
line, flushed to disk), keyed by a ``point`` column. Rerunning the same sweep into the same
folder skips the points already there; a ``base_id`` column (a hash of the car, the track,
the varied keys and the solver options) guards against mixing two different sweeps. At the
end ``results.csv`` (rows in point order), ``sweep.json`` and plots (lap time and worst
lift-off shift: heat maps for 2-D sweeps, line plots for 1-D) are written atomically.

Library code never prints: pass ``progress(done, total, row)`` to follow the sweep.
"""

from __future__ import annotations

import csv
import hashlib
import io
import itertools
import math
import os
import sys
import types
import warnings
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from lapbalance.car import SCHEMA, Car, apply_overrides, build_car, load_car
from lapbalance.errors import InfeasibleError, InputError, clip, did_you_mean
from lapbalance.forkpool import can_fork as fork_is_safe  # one fork test for all copies
from lapbalance.outputs import (
    OutputFolder,
    csv_text,
    write_bytes_atomic,
    write_json_atomic,
    write_text_atomic,
)

__all__ = ["RESULT_COLUMNS", "parse_vary", "point_key", "run_point", "sweep", "sweep_points"]

#: Result columns of every sweep row, after the point key and the varied keys.
#: lap_time_s [s], top_speed_kph / min_speed_kph [km/h], liftoff_worst_shift [-] (largest
#: balance-index rise on lift-off over all corners), flagged_corners [-] (verdict
#: lift-critical or lift-marginal), liftoff_max_usage_rear [-] (highest rear usage after
#: lift-off at the lap's own state), liftoff_margin_min [-] (smallest corner lift-off margin,
#: 1 = a lift at the limit keeps the rear), status ("ok" or "infeasible"), message (why a
#: point failed, or the first physics warning).
RESULT_COLUMNS = ("status", "lap_time_s", "top_speed_kph", "min_speed_kph",
                  "liftoff_worst_shift", "flagged_corners", "liftoff_max_usage_rear",
                  "liftoff_margin_min", "message")
_FLOAT_COLS = ("lap_time_s", "top_speed_kph", "min_speed_kph", "liftoff_worst_shift",
               "liftoff_max_usage_rear", "liftoff_margin_min")
LOG_NAME = "sweep.csv"
RESULTS_NAME = "results.csv"
_MAX_POINTS = 100_000


# --------------------------------------------------------------------------------------------
# Points
# --------------------------------------------------------------------------------------------


def _numeric_spec(dotted: str, source: str):
    sec, key = dotted.rsplit(".", 1) if "." in dotted else ("", dotted)
    if sec not in SCHEMA:
        raise InputError(f'unknown section "{sec}"; {did_you_mean(sec, [s for s in SCHEMA])}',
                         source, dotted)
    index = {n: k for k in SCHEMA[sec] for n in k.names()}
    if key not in index:
        raise InputError(f'unknown key "{dotted}"; {did_you_mean(key, index)}', source, dotted)
    if index[key].kind not in ("float", "int"):
        raise InputError(f"is not a numeric key ({index[key].kind}); only numbers can be swept",
                         source, dotted)
    return index[key]


def parse_vary(text: str, method: str = "grid") -> tuple[str, list[float]]:
    """Parse one ``--vary`` specification.

    Parameters
    ----------
    text : str
        ``section.key=lo:hi:n`` (n values from lo to hi, evenly spaced), ``section.key=a,b,c``
        (the values listed) or, for ``method="lhs"``, ``section.key=lo:hi`` (the range).
        Values are in the unit the key names (e.g. ``aero.downforce_area_m2`` in m²).
    method : str
        ``"grid"`` or ``"lhs"``.

    Returns
    -------
    (str, list of float)
        The dotted key and its values (for ``lhs``: the range ends are what counts).

    Raises
    ------
    InputError
        Unknown or non-numeric key (with the closest valid key), malformed range, n < 1.
    """
    src = "--vary"
    if "=" not in text:
        raise InputError(f'"{text}" is not section.key=lo:hi:n or section.key=a,b,c', src)
    key, rhs = (s.strip() for s in text.split("=", 1))
    _numeric_spec(key, src)
    rhs = rhs.strip()

    def num(s: str) -> float:
        try:
            x = float(s)
        except ValueError:
            raise InputError(f'"{clip(s)}" in "{clip(rhs)}" is not a number; write lo:hi:n, e.g. '
                             "1.2:2.0:5, or a list a,b,c", src, key) from None
        if not math.isfinite(x):
            raise InputError(f'"{s}" is not a finite number', src, key)
        return x

    if ":" in rhs:
        parts = rhs.split(":")
        if len(parts) == 2 and method == "lhs":
            lo, hi = num(parts[0]), num(parts[1])
            return key, [lo, hi]
        if len(parts) != 3:
            need = "lo:hi (or lo:hi:n)" if method == "lhs" else "lo:hi:n"
            raise InputError(f'"{rhs}" is not {need}; e.g. 1.2:2.0:5 for five values from '
                             "1.2 to 2.0", src, key)
        lo, hi = num(parts[0]), num(parts[1])
        try:
            n = int(parts[2])
        except ValueError:
            raise InputError(f'n = "{parts[2]}" in "{rhs}" is not a whole number; write '
                             "lo:hi:n, e.g. 1.2:2.0:5", src, key) from None
        if n < 1:
            raise InputError(f'n = {n} in "{rhs}" must be at least 1', src, key)
        if n > _MAX_POINTS:
            raise InputError(f'n = {n} in "{rhs}" is more than {_MAX_POINTS} values (each is '
                             "a whole lap); use fewer values or --lhs N", src, key)
        if n == 1 and lo != hi:
            raise InputError(f'n = 1 in "{rhs}" gives one value but lo != hi; write a single '
                             "value instead", src, key)
        return key, typed_range(parts[0], parts[1], n)
    items = [s.strip() for s in rhs.split(",")]
    if not rhs or any(not s for s in items):
        raise InputError(f'"{rhs}" has an empty value; write a,b,c or lo:hi:n', src, key)
    return key, [num(s) for s in items]


def typed_range(lo: str, hi: str, n: int) -> list[float]:
    """``n`` evenly spaced values from ``lo`` to ``hi`` as typed: computed in decimal, so
    ``0.5:0.7:3`` gives 0.6, not 0.6000000000000001 (values that are not short decimals,
    such as thirds, come out as the nearest float)."""
    from decimal import Decimal, localcontext

    with localcontext() as ctx:
        ctx.prec = 34
        a, b = Decimal(lo.strip()), Decimal(hi.strip())
        if n == 1:
            return [float(a)]
        step = (b - a) / (n - 1)
        return [float(a + i * step) for i in range(n - 1)] + [float(b)]


def auto_workers(n_points: int, cpus: int | None = None, forked: bool | None = None) -> int:
    """Default number of local worker processes for a sweep of ``n_points`` points.

    One process per CPU core this process may use (at most 8), each running the solver on one
    numba thread, once there are enough points to pay for starting the pool; below that, 1
    (run in this process). Workers forked from this process (``forked``; default: whether
    :func:`fork_is_safe`) start in milliseconds and pay from :data:`POINTS_PER_FORKED_WORKER`
    points per worker; workers from a fork server or spawned need
    :data:`POINTS_PER_WORKER`.
    """
    if cpus is None:
        try:
            cpus = len(os.sched_getaffinity(0))
        except (AttributeError, OSError):
            cpus = os.cpu_count() or 1
    if forked is None:
        forked = fork_is_safe()
    per = POINTS_PER_FORKED_WORKER if forked else POINTS_PER_WORKER
    return max(1, min(int(cpus), 8, int(n_points) // per))


#: Points per worker below which a pool started by a fork server costs more than it saves
#: (measured on a 5 km circuit, 2 cores: 200 points ran 0.57x as fast on 2 workers as on 1,
#: 1000 points 1.48x, when each worker imported the package and loaded the kernels; see
#: DEVELOPERS.md "Sweep workers").
POINTS_PER_WORKER = 250
#: The same for workers forked from a process that has the kernels loaded (see
#: DEVELOPERS.md "Sweep workers" for the measurement).
POINTS_PER_FORKED_WORKER = 20


def point_key(point: Mapping[str, float]) -> str:
    """Stable text key of a sweep point: ``key=value`` pairs (repr precision) joined by ``;``."""
    return ";".join(f"{k}={float(v)!r}" for k, v in point.items())


def sweep_points(vary: Mapping[str, Sequence[float]], method: str = "grid",
                 n: int | None = None, seed: int = 0) -> list[dict[str, float]]:
    """The points of a sweep, in run order.

    Parameters
    ----------
    vary : mapping of str -> sequence of float
        Dotted car-file key -> values, in the unit the key names.
    method : str
        ``"grid"``: every combination (the last key varies fastest). ``"lhs"``: ``n`` points
        of a Latin hypercube spanning each key's smallest to largest value.
    n : int, optional
        Number of points for ``lhs``. [-]
    seed : int
        Seed of the Latin hypercube (same seed, same points). [-]

    Returns
    -------
    list of dict
        One {key: value} mapping per point.
    """
    if not vary:
        raise InputError("give at least one key to vary, e.g. --vary aero.drag_area_m2="
                         "0.7:0.9:3", "--vary")
    keys = list(vary)
    vals = []
    for k in keys:
        v = [float(x) for x in np.atleast_1d(np.asarray(vary[k], dtype=float))]
        if not v:
            raise InputError("has no values", "--vary", k)
        if not all(math.isfinite(x) for x in v):
            raise InputError("has a non-finite value", "--vary", k)
        vals.append(v)
    if method == "grid":
        total = math.prod(len(v) for v in vals)
        if total > _MAX_POINTS:
            raise InputError(f"the grid has {total} points (more than {_MAX_POINTS}); use "
                             "fewer values or --lhs N", "--vary")
        return [dict(zip(keys, combo, strict=True)) for combo in itertools.product(*vals)]
    if method == "lhs":
        if n is None or int(n) < 1:
            raise InputError("a Latin hypercube needs the number of points n >= 1", "--lhs")
        if int(n) > _MAX_POINTS:
            raise InputError(f"n = {n} is more than {_MAX_POINTS} points", "--lhs")
        lo = np.array([min(v) for v in vals])
        hi = np.array([max(v) for v in vals])
        for k, a, b in zip(keys, lo, hi, strict=True):
            if a == b:
                raise InputError(f"the range {a:g}:{b:g} is empty; a Latin hypercube needs "
                                 "lo < hi", "--vary", k)
        from scipy.stats import qmc

        sampler = qmc.LatinHypercube(d=len(keys), rng=np.random.default_rng(seed))
        u = sampler.random(int(n))
        x = qmc.scale(u, lo, hi)
        return [{k: float(x[i, j]) for j, k in enumerate(keys)} for i in range(int(n))]
    raise InputError(f'method "{method}" is not grid or lhs', "sweep", "method")


# --------------------------------------------------------------------------------------------
# One point (runs in a worker)
# --------------------------------------------------------------------------------------------


def _car_at(raw: dict, source: str, point: Mapping[str, float]) -> Car:
    # a shallow copy: overrides replace entries, and the build converts values into new
    # objects, so the caller's mapping is never changed (a deep copy was a third of the cost)
    flat = dict(raw)
    apply_overrides(flat, dict(point))
    folder = Path(source).parent if source and not source.startswith("<") else Path(".")
    return build_car(flat, source, folder)


def run_point(raw: dict, source: str, track, point: Mapping[str, float],
              options: Mapping[str, Any] | None = None) -> dict:
    """Build the car for one sweep point, run the lap and reduce it to one row.

    Parameters
    ----------
    raw : dict
        The car's flat raw key mapping (``Car.raw``).
    source : str
        The car's file (relative paths such as an aero map are resolved against its folder).
    track : Track
        The track.
    point : mapping of str -> float
        Dotted key -> value (in the unit the key names).
    options : mapping, optional
        Keyword arguments for :func:`~lapbalance.lap.simulate_lap`.

    Returns
    -------
    dict
        ``point``, the point's values, then :data:`RESULT_COLUMNS`.
    """
    from lapbalance.lap import simulate_lap
    from lapbalance.liftoff import flagged, smallest_margin

    row: dict[str, Any] = {"point": point_key(point), **{k: float(v) for k, v in point.items()}}
    empty = {c: None for c in RESULT_COLUMNS}
    try:
        car = _car_at(raw, source, point)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = simulate_lap(car, track, **dict(options or {}))
    except InfeasibleError as e:
        row.update(empty, status="infeasible", message=e.one_line())
        return row
    shifts = [c["liftoff_max_shift"] for c in res.corners
              if c.get("liftoff_max_shift") is not None]
    rear = [c["liftoff_max_usage_rear"] for c in res.corners
            if c.get("liftoff_max_usage_rear") is not None]
    v = res.channels["speed_kph"]
    row.update({
        "status": "ok",
        "lap_time_s": float(res.lap_time_s),
        "top_speed_kph": float(np.max(v)),
        "min_speed_kph": float(np.min(v)),
        "liftoff_worst_shift": float(max(shifts)) if shifts else None,
        "flagged_corners": len(flagged(res.corners)),
        "liftoff_max_usage_rear": float(max(rear)) if rear else None,
        "liftoff_margin_min": smallest_margin(res.corners),
        "message": str(caught[0].message) if caught else None,
    })
    return row


_WORKER: dict[str, Any] = {}


def _die_with_parent(parent_pid: int) -> None:
    """End this worker when the sweep process dies (also by ``kill -9``).

    On Linux the kernel sends SIGKILL when the worker's parent (the fork server or the sweep
    process) exits (``prctl(PR_SET_PDEATHSIG)``); everywhere a daemon thread checks once a
    second that the sweep process ``parent_pid`` is still there and exits if not.
    """
    import signal
    import threading
    import time

    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            PR_SET_PDEATHSIG = 1
            libc.prctl(PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # pragma: no cover - no libc prctl
            pass

    def watch() -> None:
        while True:
            time.sleep(1.0)
            try:
                os.kill(parent_pid, 0)
                gone = False
            except ProcessLookupError:
                gone = True
            except PermissionError:  # pragma: no cover - pid reused by another user
                gone = True
            if gone:
                os._exit(1)

    threading.Thread(target=watch, name="lapbalance-parent-watch", daemon=True).start()
    try:  # the parent may have died before the signal was armed
        os.kill(parent_pid, 0)
    except OSError:
        os._exit(1)


def _init_worker(raw, source, track, options, threads, parent_pid=None):
    if parent_pid is not None:
        _die_with_parent(parent_pid)
    _WORKER.update(raw=raw, source=source, track=track, options=options)
    if threads:
        try:
            import numba

            numba.set_num_threads(threads)
        except (ImportError, ValueError):  # pragma: no cover - numba always present
            pass


def _pool_task(points):
    return [run_point(_WORKER["raw"], _WORKER["source"], _WORKER["track"], point,
                      _WORKER["options"]) for point in points]


# --------------------------------------------------------------------------------------------
# Results log (resume)
# --------------------------------------------------------------------------------------------


def _fmt(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return "" if not math.isfinite(v) else repr(v)
    return str(v)


def _header(keys: Sequence[str]) -> list[str]:
    return ["point", "base_id", *keys, *RESULT_COLUMNS]


def _row_line(row: Mapping, header: Sequence[str]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow([_fmt(row.get(c)) for c in header])
    return buf.getvalue()


def _parse_row(cells: list[str], header: list[str], keys: Sequence[str]) -> dict | None:
    if len(cells) != len(header):
        return None
    d = dict(zip(header, cells, strict=True))
    row: dict[str, Any] = {"point": d["point"]}
    try:
        for k in keys:
            row[k] = float(d[k])
        row["status"] = d["status"]
        for c in _FLOAT_COLS:
            row[c] = float(d[c]) if d[c] else None
        row["flagged_corners"] = int(d["flagged_corners"]) if d["flagged_corners"] else None
        row["message"] = d["message"] or None
    except (ValueError, KeyError):
        return None
    if row["status"] not in ("ok", "infeasible"):
        return None
    return row


def _read_log(path: Path, header: list[str], keys: Sequence[str],
              base_id: str) -> dict[str, dict]:
    """Rows already in the log {point: row}; rewrites the log if it holds a torn line."""
    text = path.read_text(encoding="utf-8-sig", errors="replace")
    lines = list(csv.reader(io.StringIO(text)))
    if not lines or lines[0] != header:
        raise InputError(f"{path} holds a sweep over other keys or columns; pass --force to "
                         "start over or choose another --out", "--out")
    done: dict[str, dict] = {}
    clean = True
    for cells in lines[1:]:
        row = _parse_row(cells, header, keys)
        if row is None:
            clean = False  # a line cut short by an interrupted run
            continue
        if cells[1] != base_id:
            raise InputError(f"{path} holds a sweep of another car, track or settings; pass "
                             "--force to start over or choose another --out", "--out")
        done[row["point"]] = row
    if not clean or not text.endswith("\n"):
        lines = [_row_line(dict(zip(header, header, strict=True)), header)]
        lines += [_row_line({**r, "base_id": base_id}, header) for r in done.values()]
        write_text_atomic(path, "".join(lines))
    return done


def _base_id(car: Car, track, keys: Sequence[str], options: Mapping) -> str:
    h = hashlib.sha256()
    items = sorted((s, k, repr(v)) for (s, k), (v, _src) in car.raw.items())
    h.update(repr(items).encode())
    d = np.asarray(track.distance_m, float)
    h.update(repr((getattr(track, "name", ""), float(track.length_m), bool(track.closed),
                   float(track.step_m), len(d))).encode())
    for name in ("curvature_1pm", "grade_rad", "bank_rad"):
        h.update(np.ascontiguousarray(getattr(track, name), dtype=float).tobytes())
    h.update(repr((list(keys), sorted((k, repr(v)) for k, v in options.items()))).encode())
    return h.hexdigest()[:16]


# --------------------------------------------------------------------------------------------
# sweep
# --------------------------------------------------------------------------------------------


def sweep(car, track, vary: Mapping[str, Sequence[float]], method: str = "grid",
          n: int | None = None, workers: int = 1, cluster=None, out=None, seed: int = 0,
          progress: Callable[[int, int, dict], None] | None = None, *, force: bool = False,
          simulate_options: Mapping[str, Any] | None = None, stats: dict | None = None,
          plot_format: str = "png", inputs: Sequence = (),
          provenance: Mapping | None = None) -> list[dict]:
    """Run ``car`` over ``track`` at every point of a grid or a Latin hypercube.

    Parameters
    ----------
    car : Car or str or Path
        The car (any ``--set`` overrides already applied) or its car file.
    track : Track
        The track (see :func:`lapbalance.load_track`).
    vary : mapping of str -> sequence of float
        Dotted numeric car-file key -> values, in the unit the key names.
    method : str
        ``"grid"`` (every combination) or ``"lhs"`` (Latin hypercube over each key's range).
    n : int, optional
        Number of Latin-hypercube points. [-]
    workers : int
        Local processes (1 = run here, one after another). [-]
    cluster : str or dask.distributed.Client, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``) or a client.
    out : str or Path, optional
        Folder for ``sweep.csv`` (appended as points finish; a rerun resumes), and at the end
        ``results.csv``, ``sweep.json`` and plots (written atomically).
    seed : int
        Latin-hypercube seed. [-]
    progress : callable, optional
        ``progress(done, total, row)`` after each newly computed point (``done`` counts the
        points found in the log too). An exception raised here stops the sweep; the points
        already logged are kept.
    force : bool
        Start over even if ``out`` holds results (of this or another sweep).
    simulate_options : mapping, optional
        Keyword arguments for :func:`~lapbalance.lap.simulate_lap`.
    stats : dict, optional
        Filled with ``points``, ``reused`` (found in ``OUT/sweep.csv`` from an earlier run)
        and ``computed``. [-]
    plot_format : str
        Format of the plots in ``out``: ``png``, ``svg`` or ``pdf``. [-]
    inputs : sequence of paths, optional
        The input files (an ``out`` folder holding one of them is refused).
    provenance : mapping, optional
        Provenance record (:mod:`lapbalance.provenance`) written to ``out`` as
        ``provenance.json``, with every file of the folder and its SHA-256.

    The ``out`` folder follows :mod:`lapbalance.outputs`: it is taken (locked) before the
    first point runs, must be new, empty or an earlier lapbalance result (a sweep resumes
    from its own), and only files its manifest lists are replaced.

    Returns
    -------
    list of dict
        One row per point in point order: ``point``, the varied keys, then
        :data:`RESULT_COLUMNS` (missing values are None).
    """
    if isinstance(car, str | Path):
        car = load_car(car)
    if not isinstance(car, Car):
        raise InputError("car must be a Car or a car file", "sweep", "car")
    workers = int(workers)
    if workers < 1:
        raise InputError(f"= {workers}; give at least 1 worker", "--workers")
    for k in vary:
        _numeric_spec(k, "--vary")
    points = sweep_points(vary, method, n, seed)
    keys = list(vary)
    options = dict(simulate_options or {})
    # Validate every point's car here, so bad values fail before any work starts.
    raw, source = car.raw, car.source or "<car>"
    for p in points:
        try:
            _car_at(raw, source, p)
        except InputError as e:
            raise InputError(e.message, "--vary", e.field) from None
    base_id = _base_id(car, track, keys, options)
    header = _header(keys)

    out_dir = Path(out) if out is not None else None
    done: dict[str, dict] = {}
    log = None
    folder = None
    if out_dir is not None:
        folder = OutputFolder(out_dir, force=force, command="sweep", inputs=inputs,
                              resume=True, need_bytes=128_000).reserve()
    try:
        if folder is not None:
            log = out_dir / LOG_NAME
            if folder.previous and not force:
                if LOG_NAME not in folder.previous or folder.previous_command != "sweep":
                    by = folder.previous_command or "another command"
                    raise InputError(f"{out_dir} already holds results; pass --force to "
                                     "replace them or choose another --out (written by "
                                     f"lapbalance {by})", "--out")
                done = _read_log(log, header, keys, base_id)
            folder.adopt([LOG_NAME])
            if force or not log.exists():
                write_text_atomic(log, _row_line(dict(zip(header, header, strict=True)),
                                                 header))
        rows = _sweep_run(points, done, log, header, base_id, progress, cluster, workers,
                          raw, source, track, options, stats)
        if folder is not None:
            reused = sum(1 for p in points if point_key(p) in done)
            _write_final(out_dir, rows, keys, car, track, method, n, seed, base_id, header,
                         folder, plot_format, reused, provenance)
    except OSError as e:
        if folder is not None:
            kept = _stop(folder, log, header)
            from lapbalance.outputs import os_input_error

            err = os_input_error(e, "write in the output folder", e.filename or out_dir,
                                 "--out")
            if kept:
                err = InputError(err.message + f"; the finished points are kept in {LOG_NAME}"
                                 ", rerun to resume", "--out")
            raise err from None
        raise
    except BaseException:
        if folder is not None:
            _stop(folder, log, header)
        raise
    if folder is not None:
        folder.commit()
    return rows


def _stop(folder, log, header) -> None:
    """After an error: keep a log holding finished points (a rerun resumes from it); else
    take back every file this run wrote, so nothing is left behind."""
    head = len(_row_line(dict(zip(header, header, strict=True)), header))
    try:
        keep = log is not None and log.stat().st_size > head
    except OSError:
        keep = False
    # keep the log of finished points (a rerun resumes); drop the final files begun here
    folder.discard_adopted(keep=[LOG_NAME] if keep else [])
    folder.abort(keep=keep)
    return keep


def _sweep_run(points, done, log, header, base_id, progress, cluster, workers, raw, source,
               track, options, stats=None) -> list[dict]:
    want = {point_key(p) for p in points}
    done = {k: v for k, v in done.items() if k in want}
    todo = [p for p in points if point_key(p) not in done]
    total = len(points)
    if stats is not None:
        stats.update(points=total, reused=total - len(todo), computed=len(todo))
    count = [len(done)]

    fh = open(log, "a", encoding="utf-8", newline="") if log is not None else None

    def record(row: dict) -> None:
        done[row["point"]] = row
        if fh is not None:
            fh.write(_row_line({**row, "base_id": base_id}, header))
            fh.flush()
            os.fsync(fh.fileno())
        count[0] += 1
        if progress is not None:
            progress(count[0], total, row)

    try:
        if cluster is not None:
            _run_dask(cluster, raw, source, track, todo, options, record)
        elif workers == 1 or len(todo) <= 1:
            for p in todo:
                record(run_point(raw, source, track, p, options))
        else:
            # Warm the numba cache (and compute the first point) here before the pool starts.
            record(run_point(raw, source, track, todo[0], options))
            _run_pool(workers, raw, source, track, todo[1:], options, record)
    finally:
        if fh is not None:
            fh.close()
    return [done[point_key(p)] for p in points]


def _run_pool(workers, raw, source, track, todo, options, record) -> None:
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    methods = mp.get_all_start_methods()
    if fork_is_safe():
        # Forked from this process, a worker starts with the kernels this process loaded
        # (its first point ran here): milliseconds instead of a second of imports and cache
        # loads per worker, which a sweep of a few hundred laps would not pay back.
        ctx = mp.get_context("fork")
    else:
        ctx = mp.get_context("forkserver" if "forkserver" in methods else "spawn")
    if ctx.get_start_method() == "forkserver":
        # Import once in the fork server what every worker needs, including the module of
        # the track's class (unpickling the track imports it), instead of once per worker.
        preload = ["lapbalance.sweep", "lapbalance.lap"]
        track_mod = type(track).__module__
        if track_mod in sys.modules and track_mod not in ("builtins", "types", "__main__"):
            preload.append(track_mod)
        ctx.set_forkserver_preload(preload)
    ex = ProcessPoolExecutor(max_workers=min(workers, len(todo)), mp_context=ctx,
                             initializer=_init_worker,
                             initargs=(raw, source, track, options, 1, os.getpid()))
    # a few points per task (guided batches, as for Dask): one round trip through the pool
    # costs this process about a millisecond, a lap not much more, and this process shares
    # the cores with the workers
    pending = iter(_guided_batches(todo, workers))
    running = set()
    try:
        for b in itertools.islice(pending, 2 * workers):
            running.add(ex.submit(_pool_task, b))
        while running:
            finished, running = wait(running, return_when=FIRST_COMPLETED)
            for f in finished:
                for row in f.result():
                    record(row)
                nxt = next(pending, None)
                if nxt is not None:
                    running.add(ex.submit(_pool_task, nxt))
    finally:
        for f in running:
            f.cancel()
        ex.shutdown(wait=True, cancel_futures=True)


#: Most sweep points one pool or Dask task runs.
_DASK_BATCH_MAX = 16


def _guided_batches(todo: list, slots: int) -> list[list]:
    """Split ``todo`` into batches of at most :data:`_DASK_BATCH_MAX` points, each half of
    what remains per worker slot (at least 2): large batches first, small ones last."""
    out = []
    i = 0
    n = len(todo)
    while i < n:
        size = max(2, min(_DASK_BATCH_MAX, (n - i) // (2 * max(1, slots))))
        out.append(todo[i:i + size])
        i += size
    return out


def _dask_batch(raw, source, track, points, options) -> list[dict]:
    """Run a few sweep points on a Dask worker, numba single-threaded: a worker process
    runs one task per thread it has, so more numba threads would oversubscribe its cores."""
    try:
        import numba

        if numba.get_num_threads() != 1:
            numba.set_num_threads(1)
    except (ImportError, ValueError):  # pragma: no cover - numba always present
        pass
    return [run_point(raw, source, track, p, options) for p in points]


def _run_dask(cluster, raw, source, track, todo, options, record) -> None:
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise InputError("running on a cluster needs Dask: pip install "
                         "'lapbalance[cluster]'", "--cluster") from None
    own = not isinstance(cluster, Client)
    if own:
        try:
            client = Client(str(cluster), timeout="20s")
        except (OSError, ValueError) as e:
            raise InputError(f"cannot reach the Dask scheduler at {cluster} ({e}); check the "
                             "address (tcp://host:8786)", "--cluster") from None
    else:
        client = cluster
    futures = []
    try:
        if not todo:
            return
        track_f = client.scatter(track, broadcast=True)
        # a few points per task: a lap takes milliseconds, a task round trip about as long;
        # batches shrink towards the end (guided scheduling) so that the workers finish
        # together instead of one running a last full batch alone
        slots = max(1, sum(client.nthreads().values()))
        batches = _guided_batches(todo, slots)
        futures = [client.submit(_dask_batch, raw, source, track_f, b, options, pure=False)
                   for b in batches]
        for f in as_completed(futures):
            for row in f.result():
                record(row)
    finally:
        if futures:
            client.cancel(futures)
        if own:
            client.close()


# --------------------------------------------------------------------------------------------
# Final outputs
# --------------------------------------------------------------------------------------------


def _write_final(out_dir: Path, rows, keys, car, track, method, n, seed, base_id,
                 header, folder=None, plot_format="png", reused=0, provenance=None) -> None:
    cols = ["point", *keys, *RESULT_COLUMNS]
    title = f"{car.name} on {getattr(track, 'name', '') or 'track'}"
    figures = sweep_figures(rows, keys, title=title, fmt=plot_format)
    if folder is not None:
        folder.adopt([RESULTS_NAME, "sweep.json", *figures]
                     + (["provenance.json"] if provenance is not None else []))
    write_text_atomic(out_dir / RESULTS_NAME,
                      csv_text(cols, ([_fmt(r.get(c)) for c in cols] for r in rows)))
    for name, data in figures.items():
        write_bytes_atomic(out_dir / name, data)
    ok = [r for r in rows if r["status"] == "ok"]
    best = min(ok, key=lambda r: r["lap_time_s"]) if ok else None
    write_json_atomic(out_dir / "sweep.json", {
        "car": car.name, "car_file": car.source, "track": getattr(track, "name", ""),
        "track_length_m": float(track.length_m), "method": method, "n": n, "seed": seed,
        "keys": list(keys), "points": len(rows), "ok": len(ok),
        "infeasible": len(rows) - len(ok), "reused": reused, "base_id": base_id,
        "best": None if best is None else {k: best[k] for k in ("point", *keys, "lap_time_s")},
    })
    if provenance is not None:
        from lapbalance.export import write_provenance

        write_provenance(out_dir, dict(provenance))


def sweep_figures_png(rows: Sequence[Mapping], keys: Sequence[str],
                      title: str | None = None) -> dict[str, bytes]:
    """Plots of a sweep as PNG bytes: ``lap_time.png``, ``liftoff_margin.png`` and
    ``liftoff_shift.png``
    (see :func:`sweep_figures`)."""
    return sweep_figures(rows, keys, title=title, fmt="png")


def _value_text(v: float) -> str:
    """A swept value as typed (shortest repr, no float noise)."""
    return f"{v:.10g}"


def sweep_figures(rows: Sequence[Mapping], keys: Sequence[str], title: str | None = None,
                  fmt: str = "png") -> dict[str, bytes]:
    """Plots of a sweep: ``lap_time.<fmt>`` and ``liftoff_shift.<fmt>`` (png, svg or pdf).

    1-D sweeps give line plots; 2-D grids give heat maps with a tick at every cell centre
    (the swept values as typed) and the value written in each cell; other 2-D point sets
    (Latin hypercubes) coloured scatter plots; sweeps over more keys give no plots (an empty
    dict). The colour scale runs from the smallest to the largest value of the sweep (no
    offset notation) and the colour-bar label states that range, so a small spread shows as
    small. ``title`` (e.g. "car on track") heads every plot.
    """
    if len(keys) not in (1, 2) or not rows:
        return {}
    out = {}
    for name in SWEEP_FIGURES:
        fig = sweep_figure(rows, keys, name, title)
        buf = io.BytesIO()
        fig.savefig(buf, format=fmt, metadata=None if fmt == "png" else {"Date": None})
        out[f"{name}.{fmt}"] = buf.getvalue()
    return out


#: Sweep figures: name -> (result column, label, unit).
SWEEP_FIGURES = {"lap_time": ("lap_time_s", "lap time", "s"),
                 "liftoff_margin": ("liftoff_margin_min",
                                    "smallest lift-off margin (1 = a lift at the limit keeps "
                                    "the rear)", "-"),
                 "liftoff_shift": ("liftoff_worst_shift",
                                   "worst lift-off balance shift (> 0 toward oversteer)", "-")}


def sweep_figure(rows: Sequence[Mapping], keys: Sequence[str], name: str = "lap_time",
                 title: str | None = None):
    """One sweep figure (a :class:`matplotlib.figure.Figure`; see :func:`sweep_figures`).

    ``name`` is a key of :data:`SWEEP_FIGURES`; ``keys`` has one or two swept keys.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    col, label, unit = SWEEP_FIGURES[name]
    z = np.array([np.nan if r.get(col) is None else float(r[col]) for r in rows])
    fin = z[np.isfinite(z)]
    rng = (f"range {fin.min():.4g} to {fin.max():.4g} {unit}"
           f" (spread {fin.max() - fin.min():.3g})" if fin.size else "no data")
    fig = Figure(figsize=(6.8, 5.0), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    x = np.array([float(r[keys[0]]) for r in rows])
    if len(keys) == 1:
        order = np.argsort(x, kind="stable")
        ax.plot(x[order], z[order], marker="o")
        ax.set_xlabel(keys[0])
        ax.set_ylabel(f"{label} [{unit}]")
        ax.yaxis.get_major_formatter().set_useOffset(False)
        xs = np.unique(x)
        if len(xs) <= 12:
            ax.set_xticks(xs, labels=[_value_text(v) for v in xs])
        ax.grid(True, alpha=0.3)
        ax.set_title(f"{title + ': ' if title else ''}{label}\n{rng}", fontsize=10)
    else:
        y = np.array([float(r[keys[1]]) for r in rows])
        xs, ys = np.unique(x), np.unique(y)
        if len(xs) * len(ys) == len(rows) and len(xs) > 1 and len(ys) > 1:
            grid = np.full((len(ys), len(xs)), np.nan)
            grid[np.searchsorted(ys, y), np.searchsorted(xs, x)] = z
            m = ax.pcolormesh(_edges(xs), _edges(ys), np.ma.masked_invalid(grid),
                              shading="flat", cmap="viridis")
            norm = m.norm
            for i, yy in enumerate(ys):
                for j, xx in enumerate(xs):
                    if np.isfinite(grid[i, j]):
                        dark = float(norm(grid[i, j])) < 0.6  # viridis: dark low end
                        ax.text(xx, yy, f"{grid[i, j]:.3f}", ha="center", va="center",
                                fontsize=7, color="white" if dark else "black")
            if len(xs) <= 15:
                ax.set_xticks(xs, labels=[_value_text(v) for v in xs])
            if len(ys) <= 15:
                ax.set_yticks(ys, labels=[_value_text(v) for v in ys])
            ax.grid(False)
        else:
            m = ax.scatter(x, y, c=np.ma.masked_invalid(z), cmap="viridis", s=30)
        cb = fig.colorbar(m, ax=ax)
        cb.formatter.set_useOffset(False)
        cb.update_ticks()
        cb.set_label(f"{label} [{unit}]\ncolour {rng}", fontsize=8)
        ax.set_xlabel(keys[0])
        ax.set_ylabel(keys[1])
        ax.set_title(f"{title + ': ' if title else ''}{label}", fontsize=10)
    return fig


def _edges(c: np.ndarray) -> np.ndarray:
    """Cell edges around sorted centres (half-way between neighbours)."""
    if len(c) == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


class _CallableModule(types.ModuleType):
    """Importing this module binds ``lapbalance.sweep`` to the module object; making the
    module callable keeps ``lapbalance.sweep(...)`` working after that."""

    def __call__(self, *args, **kwargs):
        return sweep(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
