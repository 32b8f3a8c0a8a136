"""Correlation benchmark (run by hand: python tests/benchmarks/bench_correlate.py).

A ten-lap log at 20 Hz of the demo GT coupe on the demo Veldmoor Ring (5.3 km, about 100 s a
lap: ~20 500 samples with positions, logger distance, accelerations, throttle and brake) is
written to a temporary file, then timed after the numba compile:

* ``load_log`` (read, check, project every position, cut into laps);
* ``correlate`` without a fit, aligned by positions and by the speed traces;
* ``correlate`` with a grip + drag fit (positions), and the whole of read + correlate + fit.

Target (issue): a ten-lap log at 20 Hz correlated in <= 3 s. Each figure is the best of
three runs (the machine is shared); pin one core with ``taskset -c 1`` for the one-core figure.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))

from lapbalance import correlate as C  # noqa: E402
from lapbalance.car import load_car  # noqa: E402
from lapbalance.lap import simulate_lap  # noqa: E402
from lapbalance.track import load_track  # noqa: E402


def best(fn, n=3):
    out = []
    for _ in range(n):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return min(out)


def main() -> None:
    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    track = load_track(ROOT / "tracks" / "veldmoor_ring.csv")
    real = car.with_overrides(C.factor_overrides(car, ("grip", "drag"), (0.95, 1.05)))
    lap = simulate_lap(real, track, assess_liftoff=False)  # compiles the kernels
    cols = C.synthetic_log([lap] * 10, rate_hz=20.0, speed_noise_kph=1.0,
                           position_noise_m=0.5, distance_scale=1.01, ay_noise_mps2=0.3,
                           seed=1)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "ten_laps.csv"
        path.write_text(C.log_csv_text(cols), encoding="utf-8")
        size = path.stat().st_size
        log = C.load_log(path, track)
        print(f"log: {len(cols['time_s'])} samples, {len(log.laps)} laps, "
              f"{size / 1e6:.1f} MB")
        t_load = best(lambda: C.load_log(path, track))
        t_pos = best(lambda: C.correlate(car, track, log, align="positions"))
        t_spd = best(lambda: C.correlate(car, track, log, align="speed"))
        t_fit = best(lambda: C.correlate(car, track, log, fit=("grip", "drag")))
        t_all = best(lambda: C.correlate(car, track, C.load_log(path, track),
                                         fit=("grip", "drag")))
    print(f"load_log (read, check, project, split)   {t_load:6.3f} s")
    print(f"correlate, positions, no fit            {t_pos:6.3f} s")
    print(f"correlate, speed traces, no fit         {t_spd:6.3f} s")
    print(f"correlate, positions, fit grip + drag   {t_fit:6.3f} s")
    print(f"read + correlate + fit (the whole job)  {t_all:6.3f} s   target <= 3 s")


if __name__ == "__main__":
    main()
