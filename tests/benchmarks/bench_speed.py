"""Speed benchmark: every figure of the speed issue measured in one run, with its ratios.

Run by hand from the repository root (pytest does not collect bench_*.py):

    PYTHONPATH=src:. python tests/benchmarks/bench_speed.py [--only ROWS] [--json OUT]

Rows (``--only`` takes a comma-separated subset of the keys in brackets):

* [lap] 5 km lap at 1 m on a circuit of continuously varying curvature
  (:func:`tests.helpers.wavy_circuit`), one numba thread, beside the constant-curvature
  segments track of ``bench_lap.py``: median of repeated ``simulate_lap`` calls (whole call,
  lift-off assessment included) and of the three kernels alone, and their ratio.
* [evals] state evaluations per step, counted: the kernels run as plain Python
  (``NUMBA_DISABLE_JIT=1``, in a subprocess) on the same 5 km circuit with the
  load-and-usage model wrapped by counters (the full ``_state_once`` and, where it exists,
  the lean ``_usage_once``), per solver phase (corner limits, speed passes, final pass with
  its two lift-off evaluations where the check applies, lift-off margins); aero-map lookups
  counted too.
* [map] the aero-map car (examples/single_seater_mapped.toml) against the same car with
  constant coefficients (examples/single_seater.toml, whose static values the map matches).
* [threads] 2 numba threads against 1 on the single wavy lap (same process, alternating).
* [sweep] a sweep with 2 local workers against 1 worker (in-process), laps per second;
  beside it the machine's own 2-process scaling (two busy loops in two processes against
  one), the ceiling of the ratio on a shared machine.
* [dask] 200 points through a local 2-process Dask cluster (1 thread each) against the
  local 2-worker pool (cluster start-up excluded, pool start-up included).
* [cold] the first-ever ``lapbalance lap`` with an empty numba cache: CPU time of the
  subprocess (``resource.getrusage(RUSAGE_CHILDREN)``).
* [cli] ``lapbalance lap`` whole process with a warm cache (wall and CPU time).
* [demo] ``lapbalance demo`` whole process with a warm cache (wall and CPU time).

Every row runs in a fresh process (as a user's command would: a row that sets numba's thread
count starts its thread pool, and a process that has done so no longer forks sweep workers).

The machine may be shared: compare ratios measured in one run, and the instruction-free
counts (evaluations per step), rather than absolute times across runs.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
ENV = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "src"), str(ROOT)]))


def _median_ms(fn, repeats):
    fn()
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return 1e3 * float(np.median(ts))


def _kernels_only(car, track):
    """A callable running the three solver kernels (no post-processing)."""
    import math

    from lapbalance import kernels as K
    from lapbalance import lap as L

    p, gears, trpm, tnm = L.car_parameters(car)
    kappa = np.ascontiguousarray(track.curvature_1pm, float)
    grade = np.ascontiguousarray(track.grade_rad, float)
    bank = np.ascontiguousarray(track.bank_rad, float)
    ds = float(track.step_m)
    vcap = L.speed_cap(car)
    n = len(kappa)
    # the kernels simulate_lap runs on one thread (the serial twins of the parallel loops)
    corner, final = K.corner_limits_serial, K.final_pass_serial

    def run():
        vlim = corner(kappa, grade, bank, vcap, p, L.SPEED_TOL,
                      8 if n > 400 else 1)
        s = int(np.argmin(vlim))
        order = np.concatenate([np.arange(s, n), np.arange(0, s), [s]])
        v = K.speed_passes(kappa[order], grade[order], bank[order], vlim[order], ds, math.nan,
                           float(vlim[s]), p, gears, trpm, tnm, L.FORCE_TOL)
        vv = np.empty(n)
        vv[order[:n]] = v[:n]
        final(vv, kappa, grade, bank, ds, float(vv[0]), vcap, p, gears, trpm, tnm,
              L.FORCE_TOL, L.LIFTOFF_AY_THRESHOLD)

    return run


def _car(name):
    from lapbalance.car import load_car

    return load_car(ROOT / "examples" / name)


def row_lap(res, repeats):
    import numba

    from lapbalance.lap import simulate_lap
    from tests.benchmarks.bench_lap import five_km_track
    from tests.helpers import wavy_circuit

    numba.set_num_threads(1)
    car = _car("gt_coupe.toml")
    wavy, segs = wavy_circuit(5000.0, 1.0, seed=7), five_km_track()
    for key, tr in (("wavy", wavy), ("segments", segs)):
        res[f"lap_{key}_ms"] = _median_ms(lambda tr=tr: simulate_lap(car, tr), repeats)
        res[f"kernels_{key}_ms"] = _median_ms(_kernels_only(car, tr), repeats)
    res["lap_wavy_over_segments"] = res["lap_wavy_ms"] / res["lap_segments_ms"]
    res["kernels_wavy_over_segments"] = res["kernels_wavy_ms"] / res["kernels_segments_ms"]


_COUNT_CODE = r"""
import json, sys
import lapbalance.kernels as K
from lapbalance.car import load_car
from lapbalance.lap import simulate_lap
from tests.helpers import wavy_circuit
counts = {}
def wrap(name):
    f = getattr(K, name)
    def g(*a, **k):
        counts[name] = counts.get(name, 0) + 1
        return f(*a, **k)
    setattr(K, name, g)
for name in ("_state_once", "_usage_once", "map_eval"):
    if hasattr(K, name):
        wrap(name)
import lapbalance.lap as L
def phase(mod, name, tag):
    f = getattr(mod, name)
    def g(*a, **k):
        before = counts.get("_state_once", 0) + counts.get("_usage_once", 0)
        r = f(*a, **k)
        after = counts.get("_state_once", 0) + counts.get("_usage_once", 0)
        counts[tag] = counts.get(tag, 0) + after - before
        return r
    setattr(mod, name, g)
for mod, name, tag in ((L, "_corner_limits_kernel", "corner_limits"),
                       (L, "_speed_passes_kernel", "speed_passes"),
                       (L, "_final_pass_kernel", "final_pass"),
                       (L, "_liftoff_margins_kernel", "liftoff_margins"),
                       ):
    if hasattr(mod, name):
        phase(mod, name, tag)
out = {}
for car in sys.argv[1:]:
    counts.clear()
    tr = wavy_circuit(5000.0, 1.0, seed=7)
    simulate_lap(load_car("examples/" + car), tr, assess_liftoff=False)
    out[car] = dict(counts, steps=len(tr.distance_m))
print(json.dumps(out))
"""


def row_evals(res):
    env = dict(ENV, NUMBA_DISABLE_JIT="1")
    cars = ["gt_coupe.toml", "single_seater.toml", "single_seater_mapped.toml"]
    r = subprocess.run([sys.executable, "-c", _COUNT_CODE, *cars], env=env, cwd=ROOT,
                       capture_output=True, text=True, check=True)
    data = json.loads(r.stdout.strip().splitlines()[-1])
    for car, c in data.items():
        tag = car.removesuffix(".toml")
        n = c["steps"]
        full, lean = c.get("_state_once", 0), c.get("_usage_once", 0)
        res[f"evals_per_step_{tag}"] = (full + lean) / n
        res[f"evals_full_per_step_{tag}"] = full / n
        res[f"evals_lean_per_step_{tag}"] = lean / n
        for ph in ("corner_limits", "speed_passes", "final_pass", "liftoff_margins"):
            res[f"evals_{ph}_per_step_{tag}"] = c.get(ph, 0) / n
        if "mapped" in car:
            res[f"map_lookups_per_step_{tag}"] = c.get("map_eval", 0) / n


def row_map(res, repeats):
    import numba

    from lapbalance.lap import simulate_lap
    from tests.helpers import wavy_circuit

    numba.set_num_threads(1)
    tr = wavy_circuit(5000.0, 1.0, seed=7)
    mapped, plain = _car("single_seater_mapped.toml"), _car("single_seater.toml")
    res["lap_mapped_ms"] = _median_ms(lambda: simulate_lap(mapped, tr), repeats)
    res["lap_constant_ms"] = _median_ms(lambda: simulate_lap(plain, tr), repeats)
    res["mapped_over_constant"] = res["lap_mapped_ms"] / res["lap_constant_ms"]


def row_threads(res, repeats):
    import numba

    from lapbalance.lap import simulate_lap
    from tests.helpers import wavy_circuit

    car = _car("gt_coupe.toml")
    tr = wavy_circuit(5000.0, 1.0, seed=7)
    ts = {1: [], 2: []}
    for nt in (1, 2):
        numba.set_num_threads(nt)
        simulate_lap(car, tr)
    for _ in range(repeats):
        for nt in (1, 2):
            numba.set_num_threads(nt)
            t0 = time.perf_counter()
            simulate_lap(car, tr)
            ts[nt].append(time.perf_counter() - t0)
    numba.set_num_threads(1)
    res["lap_1thread_ms"] = 1e3 * float(np.median(ts[1]))
    res["lap_2threads_ms"] = 1e3 * float(np.median(ts[2]))
    res["threads_2_over_1_time"] = res["lap_2threads_ms"] / res["lap_1thread_ms"]


def _sweep_rate(car, track, vary, **kw):
    from lapbalance.sweep import sweep

    t0 = time.perf_counter()
    rows = sweep(car, track, vary, **kw)
    wall = time.perf_counter() - t0
    return rows, len(rows) / wall


def row_sweep(res, points):
    from tests.benchmarks.bench_lap import five_km_track

    car = _car("gt_coupe.toml")
    tr = five_km_track()
    vary = {"brakes.bias_front": list(np.linspace(0.55, 0.65, points))}
    _sweep_rate(car, tr, {"brakes.bias_front": [0.6]}, workers=1)  # warm
    r1, rate1 = _sweep_rate(car, tr, vary, workers=1)
    r2, rate2 = _sweep_rate(car, tr, vary, workers=2)
    res["sweep_points"] = points
    res["sweep_1worker_laps_per_s"] = rate1
    res["sweep_2workers_laps_per_s"] = rate2
    res["sweep_2_over_1"] = rate2 / rate1
    res["sweep_same_lap_times"] = all(a["lap_time_s"] == b["lap_time_s"]
                                      for a, b in zip(r1, r2, strict=True))
    res["machine_2_over_1"] = _machine_scaling()


def _busy(n=4_000_000):
    s = 0
    for i in range(n):
        s += i * i
    return s


def _machine_scaling():
    """The ceiling of any 2-process speed-up on this machine right now: two pure-Python busy
    loops in two forked processes against the same two in one (a shared machine's second
    core is not always a whole core)."""
    import multiprocessing as mp

    t0 = time.perf_counter()
    _busy()
    _busy()
    serial = time.perf_counter() - t0
    ctx = mp.get_context("fork")
    ps = [ctx.Process(target=_busy) for _ in range(2)]
    t0 = time.perf_counter()
    for p in ps:
        p.start()
    for p in ps:
        p.join()
    return serial / (time.perf_counter() - t0)


def row_dask(res, points=200):
    from dask.distributed import Client, LocalCluster

    from tests.benchmarks.bench_lap import five_km_track

    car = _car("gt_coupe.toml")
    tr = five_km_track()
    vary = {"brakes.bias_front": list(np.linspace(0.55, 0.65, points))}
    _, pool = _sweep_rate(car, tr, vary, workers=2)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cl, Client(cl) as client:
        _sweep_rate(car, tr, {"brakes.bias_front": [0.6, 0.61]}, cluster=client)  # warm
        _, dask_rate = _sweep_rate(car, tr, vary, cluster=client)
    res["dask_points"] = points
    res["pool_2workers_laps_per_s"] = pool
    res["dask_2workers_laps_per_s"] = dask_rate
    res["dask_over_pool"] = dask_rate / pool


def _child_cpu(cmd, env, cwd):
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    r = subprocess.run(cmd, env=env, cwd=cwd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if r.returncode != 0:
        raise RuntimeError(f"{cmd} failed: {r.stderr[-2000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


LAP_CMD = [sys.executable, "-m", "lapbalance", "lap", "examples/gt_coupe.toml",
           "tracks/veldmoor_ring.csv"]


def row_cold(res):
    with tempfile.TemporaryDirectory() as cache:
        env = dict(ENV, NUMBA_CACHE_DIR=cache)
        wall, cpu = _child_cpu(LAP_CMD, env, ROOT)
    res["cold_lap_wall_s"] = wall
    res["cold_lap_cpu_s"] = cpu


def row_cli(res, repeats=3):
    _child_cpu(LAP_CMD, ENV, ROOT)
    runs = [_child_cpu(LAP_CMD, ENV, ROOT) for _ in range(repeats)]
    res["cli_lap_warm_wall_s"] = float(np.median([w for w, _ in runs]))
    res["cli_lap_warm_cpu_s"] = float(np.median([c for _, c in runs]))


def row_demo(res, repeats=2):
    with tempfile.TemporaryDirectory() as tmp:
        cmd = [sys.executable, "-m", "lapbalance", "demo", "--out", str(Path(tmp) / "demo")]
        _child_cpu(cmd, ENV, tmp)
        runs = [_child_cpu(cmd, ENV, tmp) for _ in range(repeats)]
    res["demo_warm_wall_s"] = float(np.median([w for w, _ in runs]))
    res["demo_warm_cpu_s"] = float(np.median([c for _, c in runs]))


ROWS = ("lap", "evals", "map", "threads", "sweep", "dask", "cold", "cli", "demo")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", default=",".join(ROWS))
    ap.add_argument("--repeats", type=int, default=15)
    ap.add_argument("--points", type=int, default=200, help="points of the [sweep] row")
    ap.add_argument("--json", help="also write the figures to this JSON file")
    ap.add_argument("--child", help=argparse.SUPPRESS)  # one row, in this process
    args = ap.parse_args()
    if args.child:
        res = {}
        _row(args.child, res, args)
        print(json.dumps(res))
        return
    only = [s.strip() for s in args.only.split(",") if s.strip()]
    for key in only:
        if key not in ROWS:
            raise SystemExit(f"unknown row {key!r}; choose from {', '.join(ROWS)}")
    res: dict = {"cores": os.cpu_count(), "load_average_1min": os.getloadavg()[0]}
    for key in only:
        # every row in a fresh process: a row that sets numba's thread count starts its
        # thread pool, after which a sweep could not fork its workers as a user's sweep does
        t0 = time.perf_counter()
        r = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", key,
                            "--repeats", str(args.repeats), "--points", str(args.points)],
                           capture_output=True, text=True, env=ENV, cwd=ROOT)
        if r.returncode != 0:
            raise SystemExit(f"row {key} failed:\n{r.stderr[-3000:]}")
        res.update(json.loads(r.stdout.strip().splitlines()[-1]))
        print(f"[{key} done in {time.perf_counter() - t0:.1f} s]", file=sys.stderr)
    res["load_average_1min_end"] = os.getloadavg()[0]
    width = max(len(k) for k in res)
    for k, v in res.items():
        print(f"{k:{width}s}  {v:.3f}" if isinstance(v, float) else f"{k:{width}s}  {v}")
    if args.json:
        Path(args.json).write_text(json.dumps(res, indent=1) + "\n")


def _row(key, res, args):
    """Run row ``key`` in this process, filling ``res``."""
    rows = {"lap": lambda: row_lap(res, args.repeats), "evals": lambda: row_evals(res),
            "map": lambda: row_map(res, args.repeats),
            "threads": lambda: row_threads(res, args.repeats),
            "sweep": lambda: row_sweep(res, args.points), "dask": lambda: row_dask(res),
            "cold": lambda: row_cold(res), "cli": lambda: row_cli(res),
            "demo": lambda: row_demo(res)}
    rows[key]()


if __name__ == "__main__":
    main()
