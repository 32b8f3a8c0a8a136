"""Sweep throughput (laps per second) with 1 and 2 local workers on a ~5 km track.

Run by hand from the repository root (pytest does not collect bench_*.py):

    PYTHONPATH=src:. python tests/benchmarks/bench_sweep.py [TRACK_FILE] [--points N]

Uses TRACK_FILE, else the track in ``tracks/`` whose length is closest to 5 km (once the track
module exists), else an analytic 5 km closed track. Prints, per worker count, the wall time
of the whole sweep (process start-up included), the overall and the steady rate (from the
fifth finished point to the last) and the 2-worker / 1-worker scaling ratio.
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def analytic_5km():
    from tests.helpers import analytic_track

    ds = 1.0
    # (length m, radius m, +1 left / -1 right / 0 straight): an invented fast circuit.
    layout = [(700, 0, 0), (180, 90, 1), (400, 0, 0), (250, 250, -1), (600, 0, 0),
              (120, 45, 1), (300, 0, 0), (350, 400, 1), (500, 0, 0), (160, 70, -1),
              (450, 0, 0), (220, 150, 1), (350, 0, 0), (140, 60, 1), (270, 0, 0)]
    k, corners, s = [], [], 0.0
    for length, radius, sign in layout:
        n = int(length / ds)
        k.append(np.full(n, 0.0 if sign == 0 else sign / radius))
        if sign:
            corners.append(SimpleNamespace(id=len(corners) + 1,
                                           direction="left" if sign > 0 else "right",
                                           entry_m=s, apex_m=s + length / 2,
                                           exit_m=s + length - ds, min_radius_m=radius))
        s += n * ds
    return analytic_track(np.concatenate(k), ds=ds, closed=True, name="analytic 5 km",
                          corners=corners)


def pick_track(path: str | None):
    try:
        from lapbalance.track import load_track
    except ImportError:
        load_track = None
    if path:
        return load_track(path, step_m=1.0)
    if load_track is not None and (ROOT / "tracks").is_dir():
        cands = []
        for f in sorted((ROOT / "tracks").glob("*.csv")):
            try:
                t = load_track(f, step_m=1.0)
            except Exception:  # a file that is not a track: skip it  # noqa: BLE001
                continue
            cands.append((abs(t.length_m - 5000.0), t))
        if cands:
            return min(cands, key=lambda c: c[0])[1]
    return analytic_5km()


def timed_sweep(car, track, vary, workers):
    from lapbalance.sweep import sweep

    stamps = []
    t0 = time.perf_counter()
    rows = sweep(car, track, vary, workers=workers,
                 progress=lambda d, t, r: stamps.append(time.perf_counter()))
    wall = time.perf_counter() - t0
    k0 = min(4, len(stamps) - 2)
    steady = (len(stamps) - 1 - k0) / (stamps[-1] - stamps[k0])
    first_two = stamps[1] - t0  # with a pool: the parent's point, then the pool's first
    return rows, wall, len(rows) / wall, steady, first_two


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("track", nargs="?")
    ap.add_argument("--points", type=int, default=60)
    args = ap.parse_args()

    from lapbalance.car import load_car
    from lapbalance.lap import simulate_lap

    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    track = pick_track(args.track)
    t = time.perf_counter()
    one = simulate_lap(car, track)  # warm the numba cache on disk
    first = time.perf_counter() - t
    n1 = max(2, int(round(args.points / 6)))
    vary = {"aero.downforce_area_m2": list(np.linspace(1.2, 2.0, n1)),
            "brakes.bias_front": [0.55, 0.57, 0.59, 0.61, 0.63, 0.65]}
    print(f"track: {track.name}, {track.length_m:.0f} m, {len(track.distance_m)} steps; "
          f"car: {car.name}; first lap {first:.2f} s (lap time {one.lap_time_s:.2f} s)")
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"cores: {os.cpu_count()}; load average {load:.2f}; points per sweep: {n1 * 6}")
    results = {}
    for workers in (1, 2):
        rows, wall, rate, steady, first_two = timed_sweep(car, track, vary, workers)
        results[workers] = (rows, rate, steady)
        print(f"workers={workers}: wall {wall:.2f} s, {rate:.1f} laps/s overall, "
              f"{steady:.1f} laps/s steady; first two points after {first_two:.2f} s")
    same = all(a["lap_time_s"] == b["lap_time_s"]
               for a, b in zip(results[1][0], results[2][0], strict=True))
    print(f"scaling 2/1 workers: {results[2][1] / results[1][1]:.2f} overall, "
          f"{results[2][2] / results[1][2]:.2f} steady; identical lap times: {same}")


if __name__ == "__main__":
    main()
