"""Write the invented demo log and the bad-log corpus (reproducible: fixed seeds, no network).

The demo log ``examples/gt_coupe_veldmoor_log.csv`` is the tool's own lap of the demo GT coupe
on the demo Veldmoor Ring with known changes (grip x0.95, drag area x1.06, power x0.97), made
to look like a logger's export: 10 Hz, speed noise 1 km/h, position noise 0.5 m, lateral and
longitudinal acceleration noise 0.3 m/s², a logger distance that reads 1.2 % long, a clock that
starts at 512.3 s, an extra column the reader ignores (``gear``), the end of an out-lap before
two flying laps and the start of an in-lap after them. It is invented data for demonstrations:
fitting it recovers what was put in (a consistency check), it says nothing about a real car.

``--bad DIR`` writes the bad-log corpus (``log_*.csv``, one mistake each) into DIR.

Run: ``python scripts/make_demo_log.py [--out examples] [--bad tests/data/bad]``.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from lapbalance import correlate as C
from lapbalance.car import load_car
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track

ROOT = Path(__file__).resolve().parents[1]
CAR = ROOT / "examples" / "gt_coupe.toml"
TRACK = ROOT / "tracks" / "veldmoor_ring.csv"
#: What the "real" car has that the model does not (invented).
CHANGES = {"grip": 0.95, "drag": 1.06, "power": 0.97}


def _changed_car(car, grip):
    factors = ("grip", "drag", "power")
    return car.with_overrides(C.factor_overrides(car, factors, (grip, CHANGES["drag"],
                                                                CHANGES["power"])))


def demo_log() -> str:
    car = load_car(CAR)
    track = load_track(TRACK)
    # four laps back to back, the second flying lap a touch slower (grip 0.5 % lower)
    grips = (CHANGES["grip"], CHANGES["grip"], CHANGES["grip"] * 0.995, CHANGES["grip"])
    laps = [simulate_lap(_changed_car(car, g), track, assess_liftoff=False) for g in grips]
    cols = C.synthetic_log(laps, rate_hz=10.0, speed_noise_kph=1.0, position_noise_m=0.5,
                           distance_scale=1.012, time_offset_s=512.3, ay_noise_mps2=0.3,
                           seed=20261202, positions=True, lap_distance=False)
    t = cols["time_s"] - cols["time_s"][0]
    T = [r.lap_time_s for r in laps]
    keep = (t >= 0.75 * T[0]) & (t <= T[0] + T[1] + T[2] + 0.6 * T[3])
    cols = {k: v[keep] for k, v in cols.items()}
    cols["distance_m"] = np.round(cols["distance_m"] - cols["distance_m"][0], 2)
    v = cols["speed_kph"]
    cols["gear"] = np.clip(np.ceil(v / 45.0), 1, 6)
    cols["throttle_pct"] = np.round(cols["throttle_pct"])
    cols["brake_pct"] = np.round(cols["brake_pct"])
    return C.log_csv_text(cols, (
        "invented demo log written by scripts/make_demo_log.py: the tool's own laps of the "
        "demo GT coupe",
        "with grip x0.95, drag area x1.06, power x0.97, noise and a 1.2 % logger distance "
        "error; not a real car"))


def _one_lap_columns(car_file, track_file, rate_hz=2.0, positions=False, seed=1):
    car = load_car(car_file)
    track = load_track(track_file)
    r = simulate_lap(car, track, assess_liftoff=False)
    cols = C.synthetic_log(r, rate_hz=rate_hz, speed_noise_kph=0.5, seed=seed,
                           positions=positions)
    keep = ["time_s", "speed_kph", "distance_m"] + (["x_m", "y_m"] if positions else [])
    return {k: cols[k] for k in keep}


def bad_logs() -> dict[str, str]:
    """Corpus name -> CSV text (one mistake each), short logs at 2 Hz."""
    good = _one_lap_columns(CAR, TRACK)
    note = ("invented bad log written by scripts/make_demo_log.py --bad",)
    out = {}
    c = {k: v.copy() for k, v in good.items()}
    c["time_s"][41], c["time_s"][42] = c["time_s"][42], c["time_s"][41]
    out["log_time_backwards.csv"] = C.log_csv_text(c, note + ("two rows swapped",))
    c = {k: np.delete(v, np.arange(60, 72)) for k, v in good.items()}
    out["log_gap.csv"] = C.log_csv_text(c, note + ("6 s of rows missing",))
    c = dict(good)
    c["speed_mps"] = c.pop("speed_kph")
    c = {"time_s": c["time_s"], "speed_mps": c["speed_mps"], "distance_m": c["distance_m"]}
    out["log_speed_kph_labelled_mps.csv"] = C.log_csv_text(
        c, note + ("km/h values under a speed_mps header",))
    c = {"time_s": good["time_s"], "speed_kph": np.round(good["speed_kph"] / 3.6, 2)}
    out["log_speed_mps_labelled_kph.csv"] = C.log_csv_text(
        c, note + ("m/s values under a speed_kph header, no distance column",))
    other = _one_lap_columns(CAR, ROOT / "tracks" / "kettlewick_loops.csv")
    out["log_other_track.csv"] = C.log_csv_text(
        other, note + ("a lap of another demo track",))
    other = _one_lap_columns(CAR, ROOT / "tracks" / "kettlewick_loops.csv", positions=True)
    out["log_other_track_positions.csv"] = C.log_csv_text(
        other, note + ("a lap of another demo track, with positions",))
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / "examples"))
    ap.add_argument("--bad", default=None, help="also write the bad-log corpus here")
    args = ap.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "gt_coupe_veldmoor_log.csv").write_text(demo_log(), encoding="utf-8")
    print(f"wrote {out / 'gt_coupe_veldmoor_log.csv'}")
    if args.bad:
        bad = Path(args.bad)
        for name, text in bad_logs().items():
            (bad / name).write_text(text, encoding="utf-8")
            print(f"wrote {bad / name}")


if __name__ == "__main__":
    main()
