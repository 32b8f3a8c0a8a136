"""Lap-solver benchmark (run by hand: python tests/benchmarks/bench_lap.py).

Times simulate_lap on a generated 5 km closed circuit at 1 m step after the compile, reports
the ratio to the same kernels run as plain Python (numba disabled, in a subprocess), and the
whole-process time of `lapbalance lap` on the demo with a warm numba cache.
Targets (issue): <= 10 ms per lap on one core; <= 3 s for the CLI with a warm cache.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))


def five_km_track():
    """A closed 5 km circuit built from curvature segments (deterministic)."""
    from tests.helpers import analytic_track

    segs = [(600, 0), (120, 1 / 60), (400, 0), (250, -1 / 180), (300, 0), (90, 1 / 25),
            (500, 0), (350, 1 / 300), (200, 0), (160, -1 / 45), (450, 0), (240, 1 / 120),
            (300, 0), (140, -1 / 35), (400, 0)]
    total = sum(s for s, _ in segs)
    turn = sum(s * k for s, k in segs)
    k = np.concatenate([np.full(int(s), kk) for s, kk in segs])
    k = k + (2 * math.pi - turn) / total  # spread the closing turn so the heading closes
    w = 9
    k = np.convolve(np.r_[k[-w:], k, k[:w]], np.ones(w) / w, "same")[w:-w]
    k = k * (5000.0 / len(k))
    return analytic_track(k, ds=1.0, closed=True, name="bench 5 km")


def time_laps(car_file: str, repeats: int = 20) -> dict:
    from lapbalance.car import load_car
    from lapbalance.lap import simulate_lap

    car = load_car(ROOT / "examples" / car_file)
    track = five_km_track()
    t0 = time.perf_counter()
    simulate_lap(car, track)
    first = time.perf_counter() - t0
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        r = simulate_lap(car, track)
        ts.append(time.perf_counter() - t0)
    return {"car": car_file, "first_s": first, "median_ms": 1e3 * float(np.median(ts)),
            "min_ms": 1e3 * float(np.min(ts)), "lap_time_s": r.lap_time_s}


def main():
    single = "--single-thread" in sys.argv
    if single:
        import numba

        numba.set_num_threads(1)
    if "--python" in sys.argv:
        print(json.dumps(time_laps(sys.argv[-1], repeats=1)))
        return
    cars = ["gt_coupe.toml", "single_seater.toml", "offroad_truck.toml", "fwd_hatch.toml",
            "single_seater_mapped.toml"]
    rows = [time_laps(c) for c in cars]
    for r in rows:
        print(f"{r['car']:28s} compiled: median {r['median_ms']:7.2f} ms  min {r['min_ms']:7.2f} ms"
              f"  (first call {r['first_s']:.2f} s, lap {r['lap_time_s']:.3f} s)")
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    py = subprocess.run([sys.executable, __file__, "--python", "gt_coupe.toml"], env=env,
                        capture_output=True, text=True, check=True)
    pr = json.loads(py.stdout.strip().splitlines()[-1])
    print(f"plain Python (NUMBA_DISABLE_JIT=1), gt_coupe: {pr['first_s']:.1f} s per lap -> "
          f"speed-up {pr['first_s'] * 1e3 / rows[0]['median_ms']:.0f}x")
    demo_car = ROOT / "examples" / "gt_coupe.toml"
    tracks = sorted((ROOT / "tracks").glob("*.csv"))
    if tracks:
        cmd = [sys.executable, "-m", "lapbalance.cli", "lap", str(demo_car), str(tracks[0])]
        subprocess.run(cmd, capture_output=True, check=False)  # warm the cache
        t0 = time.perf_counter()
        subprocess.run(cmd, capture_output=True, check=True)
        print(f"`lapbalance lap` whole process, warm cache: {time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    main()
