"""Track-loading benchmark (run by hand: python tests/benchmarks/bench_track.py).

Writes a 100 km closed centreline given every 0.05 m (2 million points, coordinates rounded to
1 cm, like a dense survey export) to a temporary CSV, then loads it with ``load_track`` in a
fresh process and reports the wall time and the peak resident memory of that process.
Targets (issue): under 15 s and under 2 GB.
"""

from __future__ import annotations

import math
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]

CHILD = """
import resource, sys, time
sys.path.insert(0, {src!r})
from lapbalance.track import load_track
t = time.perf_counter()
tr = load_track({path!r})
dt = time.perf_counter() - t
rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
print(f"{{dt:.2f}} {{rss:.0f}} {{tr.length_m:.1f}} {{tr.noise_m:.4f}} {{len(tr.corners)}}")
"""


def write_track(path: Path, length_m: float = 100_000.0, spacing_m: float = 0.05) -> None:
    """A wavy closed loop (radius varying by +-8 %), points every ``spacing_m``, 1 cm grid."""
    n = int(round(length_m / spacing_m))
    t = np.arange(n) * (2.0 * math.pi / n)
    r0 = length_m / (2.0 * math.pi)
    r = r0 * (1.0 + 0.05 * np.cos(7.0 * t) + 0.03 * np.sin(23.0 * t))
    x = np.round(r * np.cos(t), 2)
    y = np.round(r * np.sin(t), 2)
    with path.open("w") as f:
        f.write("# closed: true\nx_m,y_m\n")
        for i in range(0, n, 200_000):
            f.write("\n".join(f"{a:.2f},{b:.2f}" for a, b in zip(x[i:i + 200_000],
                                                               y[i:i + 200_000], strict=True)))
            f.write("\n")


def main() -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "track_100km.csv"
        write_track(path)
        size_mb = path.stat().st_size / 1e6
        code = CHILD.format(src=str(ROOT / "src"), path=str(path))
        out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                             text=True).stdout.split()
    dt, rss, length, noise, corners = float(out[0]), float(out[1]), out[2], out[3], out[4]
    print(f"100 km at 0.05 m ({size_mb:.0f} MB CSV): load {dt:.2f} s (target < 15 s), "
          f"peak memory {rss:.0f} MB (target < 2048 MB); length {length} m, "
          f"noise {noise} m, {corners} corners")


if __name__ == "__main__":
    main()
