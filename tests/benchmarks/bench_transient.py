"""Single-track lift-off benchmark (run by hand: python tests/benchmarks/bench_transient.py).

Times, after the compile, (1) one 3-second lift-off run's integration kernel (RK4 at the
default step), (2) the same run through the Python layer (steady turn + integration +
figures), and (3) a full ISO 9816 a_y0 sweep at one radius (steady limit, steady turns and
every run) for each demo car at 40 m and 100 m.
Targets (issue): <= 2 ms per compiled 3 s run; <= 100 ms per sweep at one radius.
Pin one core for the one-core figure: NUMBA_NUM_THREADS=1 taskset -c 1 python ...
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))


def best(fn, repeats):
    """Best and median wall time [s], and the best process CPU time [s] (on a loaded machine
    the scheduler's time slices inflate the wall time; the CPU time is what the code costs)."""
    ts, cs = [], []
    for _ in range(repeats):
        c0 = time.process_time()
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
        cs.append(time.process_time() - c0)
    best.cpu = min(cs)
    return min(ts), float(np.median(ts))


def main() -> None:
    from lapbalance import transient as T
    from lapbalance import transient_kernels as tk
    from lapbalance.car import load_car

    car = load_car(ROOT / "examples" / "gt_coupe.toml")
    R = 40.0
    lim = T.steady_limit(car, R)
    run = T.lift_off_run(car, R, 0.8 * lim)  # compiles
    m = T.model_parameters(car)
    q = m.q.copy()
    q[tk.Q_R0], q[tk.Q_DELTA] = R, run.steady.steer_rad
    q[tk.Q_F0], q[tk.Q_F1] = run.steady.drive_force_n, -run.overrun_force_n
    y0 = T._initial_state(run.steady.x, run.speed0_mps, R)
    n = int(round(T.DURATION_S / run.step_s))
    hist = np.empty((n + 1, tk.NH))

    def kernel():
        tk.integrate(y0, q, m.p, run.step_s, n, math.radians(60), 1.0, hist)

    b, med = best(kernel, 50)
    print(f"one 3 s run, kernel only ({n} RK4 steps of {run.step_s * 1e3:.1f} ms): "
          f"best {b * 1e3:.2f} ms, median {med * 1e3:.2f} ms, CPU {best.cpu * 1e3:.2f} ms")
    b, med = best(lambda: T.lift_off_run(car, R, 0.8 * lim, model=m), 20)
    print(f"one 3 s run, Python layer (steady turn + run + figures): best {b * 1e3:.2f} ms, "
          f"median {med * 1e3:.2f} ms, CPU {best.cpu * 1e3:.2f} ms")
    for f in ("gt_coupe", "fwd_hatch", "offroad_truck", "single_seater"):
        c = load_car(ROOT / "examples" / f"{f}.toml")
        for R in (40.0, 100.0):
            sw = T.sweep(c, R)
            b, med = best(lambda c=c, R=R: T.sweep(c, R), 5)
            print(f"sweep {f:14s} R = {R:5.0f} m: {len(sw.runs):2d} runs to "
                  f"{sw.ay_limit_mps2:5.2f} m/s², best {b * 1e3:6.1f} ms, "
                  f"median {med * 1e3:6.1f} ms, CPU {best.cpu * 1e3:6.1f} ms "
                  f"({best.cpu / len(sw.runs) * 1e3:.2f} ms per run)")


if __name__ == "__main__":
    main()
