"""Driving-line benchmark (run by hand: python tests/benchmarks/bench_line.py).

Times :func:`lapbalance.line.min_curvature_line` on the 5.3 km demo circuit
tracks/veldmoor_ring.csv at 1 m step (its own 11-14 m width, a 2 m wide car): the solve, the
resampled track and its channels, in a fresh process so that the scipy imports count, then
warm. Target (issue): <= 2 s for a 5 km circuit at 1 m.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

CODE = """
import time
t0 = time.perf_counter()
from lapbalance.track import load_track
tr = load_track("tracks/veldmoor_ring.csv", step_m=1.0)
from lapbalance import line
t1 = time.perf_counter()
lt = line.min_curvature_line(tr, 2.0)
t2 = time.perf_counter()
c2 = time.process_time()
lt = line.min_curvature_line(tr, 2.0)
t3 = time.perf_counter()
c3 = time.process_time()
print(f"{tr.length_m:.0f} {tr.n} {t2 - t1:.3f} {t3 - t2:.3f} {lt.length_m:.1f} "
      f"{lt.solver['iterations']} {lt.solver['box_steps']} {c3 - c2:.3f}")
"""


def main():
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", CODE], cwd=ROOT, capture_output=True,
                         text=True, check=True).stdout.split()
    wall = time.perf_counter() - t0
    length, n, cold, warm, line_len, its, steps, cpu = out
    print(f"reference {float(length):.0f} m, {n} points at 1 m; line {float(line_len):.0f} m")
    print(f"min_curvature_line first call (imports included) {float(cold):.2f} s, warm "
          f"{float(warm):.2f} s, CPU {float(cpu):.2f} s ({its} linearised solves, {steps} "
          "interior-point steps); "
          f"whole process {wall:.2f} s; target <= 2 s")


if __name__ == "__main__":
    main()
