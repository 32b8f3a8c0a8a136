"""Record the lap time of every demo car on every demo circuit (and a few analytic tracks).

Writes ``tests/data/lap_times_reference.json``, which ``tests/test_lap_times_unchanged.py``
compares the solver against (to 1 ms). Record it with the solver you trust, *before* a change
that must not move lap times; the solver comes from whatever ``lapbalance`` is importable, so
it can be any source tree:

    PYTHONPATH=/path/to/tree/src python scripts/record_lap_times.py --out lap_times.json

Cars, tracks and the analytic circuits come from this script's own repository (``--root`` to
use another). Each entry: ``"<car file> @ <track>": lap time [s]`` (null when the lap is
infeasible).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def analytic_tracks():
    """Tracks built from exact curvature arrays (name -> Track-like object)."""
    import numpy as np

    from tests.helpers import analytic_track, circle, wavy_circuit

    return {
        "analytic:circle R60": circle(60.0),
        "analytic:wavy 5 km": wavy_circuit(5000.0, 1.0, seed=7),
        "analytic:wavy 2 km hilly": _hilly(wavy_circuit(2000.0, 1.0, seed=3)),
        "analytic:hairpins open": analytic_track(
            np.concatenate([np.zeros(400), np.full(60, 1 / 20), np.zeros(300),
                            np.full(80, -1 / 35), np.zeros(500)]), ds=1.0, closed=False,
            name="hairpins open"),
    }


def _hilly(t):
    import numpy as np

    s = t.distance_m
    t.grade_rad = 0.04 * np.sin(2 * math.pi * 3 * s / t.length_m)
    t.bank_rad = 0.03 * np.sin(2 * math.pi * 5 * s / t.length_m + 1.0)
    t.name = t.source = t.name + " hilly"
    return t


def demo_cars(root: Path):
    """Car files under examples/ (the targets files are not cars)."""
    return [p for p in sorted((root / "examples").glob("*.toml"))
            if not p.name.startswith("targets")]


def lap_times(root: Path = ROOT) -> dict[str, float | None]:
    from lapbalance.car import load_car
    from lapbalance.errors import InfeasibleError
    from lapbalance.lap import simulate_lap
    from lapbalance.track import load_track

    tracks = {p.name: load_track(p, step_m=1.0) for p in sorted((root / "tracks").glob("*.csv"))}
    tracks.update(analytic_tracks())
    times: dict[str, float | None] = {}
    for car_file in demo_cars(root):
        car = load_car(car_file)
        for name, track in tracks.items():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                try:
                    t = simulate_lap(car, track, assess_liftoff=False).lap_time_s
                except InfeasibleError:
                    t = None
            times[f"{car_file.name} @ {name}"] = t
    return times


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / "tests" / "data" / "lap_times_reference.json"))
    ap.add_argument("--root", default=str(ROOT),
                    help="repository whose examples/, tracks/ and tests/helpers.py to use")
    ap.add_argument("--label", default="solver before the change",
                    help="which solver recorded the times (kept in the file's note)")
    args = ap.parse_args(argv)
    root = Path(args.root).resolve()
    sys.path.insert(0, str(root))
    import lapbalance

    times = lap_times(root)
    doc = {"note": "lap times [s] recorded by scripts/record_lap_times.py with lapbalance "
                   f"{lapbalance.__version__} ({args.label}); 1 m step",
           "lap_time_s": times}
    Path(args.out).write_text(json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(f"wrote {len(times)} lap times to {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
