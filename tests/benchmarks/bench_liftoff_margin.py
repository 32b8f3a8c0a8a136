"""Lift-off margin cost benchmark (run by hand: python tests/benchmarks/bench_liftoff_margin.py).

Times a whole ``simulate_lap`` on the generated 5 km circuit of ``bench_lap.py`` (1 m step,
after the compile) and, on the same inputs, the margin kernel alone
(:func:`lapbalance.kernels.liftoff_margins`). Reports the margin's share as a ratio to the rest
of the lap solve. Target (issue): the margin adds at most 30 % to a lap's solve time.
Pass ``--single-thread`` to pin numba to one thread.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

CARS = ["gt_coupe.toml", "single_seater.toml", "offroad_truck.toml", "fwd_hatch.toml",
        "single_seater_mapped.toml"]


def _median_s(fn, repeats):
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return float(np.median(ts))


def measure(car_file: str, repeats: int = 30) -> dict:
    import warnings

    from lapbalance import kernels as K
    from lapbalance.car import load_car
    from lapbalance.lap import MARGIN_TOL, car_parameters, simulate_lap
    from tests.benchmarks.bench_lap import five_km_track

    car = load_car(ROOT / "examples" / car_file)
    track = five_km_track()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = simulate_lap(car, track)  # compile and warm
        lap_s = _median_s(lambda: simulate_lap(car, track), repeats)
    p, gears, trpm, tnm, mx, my, mt = car_parameters(car)
    ch = r.channels
    args = (np.ascontiguousarray(ch["curvature_1pm"]), np.ascontiguousarray(ch["grade_rad"]),
            np.ascontiguousarray(ch["bank_rad"]), np.ascontiguousarray(ch["speed_limit_mps"]),
            np.ascontiguousarray(ch["liftoff_checked"]), p, gears, mx, my, mt, MARGIN_TOL,
            8 if len(ch["distance_m"]) > 400 else 1)
    K.liftoff_margins(*args)
    margin_s = _median_s(lambda: K.liftoff_margins(*args), repeats)
    return {"car": car_file, "lap_ms": lap_s * 1e3, "margin_ms": margin_s * 1e3,
            "ratio": margin_s / (lap_s - margin_s),
            "checked": int(np.sum(ch["liftoff_checked"] > 0))}


def main():
    if "--single-thread" in sys.argv:
        import numba

        numba.set_num_threads(1)
    worst = 0.0
    for c in CARS:
        m = measure(c)
        worst = max(worst, m["ratio"])
        print(f"{m['car']:28s} lap {m['lap_ms']:7.2f} ms  margin {m['margin_ms']:6.2f} ms  "
              f"-> adds {m['ratio'] * 100:5.1f} %  ({m['checked']} checked steps)")
    print(f"largest addition {worst * 100:.1f} % (target <= 30 %)")


if __name__ == "__main__":
    main()
