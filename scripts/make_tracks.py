"""Write the invented demo circuits into ``tracks/`` (reproducible: fixed seeds, no network).

Each circuit is a list of straights and constant-radius arcs. The piecewise-constant curvature
is passed through a moving average of length ``transition_m``, which turns every step in
curvature into a linear ramp (a clothoid transition) and keeps the total heading change. Closed
circuits are scaled to turn exactly 360 degrees and closed exactly by lengthening or shortening
the straights (the smallest change in the least-squares sense). Every circuit is checked for a
minimum radius of 10 m and for self-crossing before it is written.

All names and layouts are invented for demonstrations; none is a real circuit.

Run: ``python scripts/make_tracks.py [--out tracks]``.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np

FINE_M = 0.25  # integration step [m]
OUT_STEP_M = 2.0  # spacing of the written points [m]
MIN_RADIUS_M = 10.0


def curvature_profile(segments, transition_m):
    """Piecewise-constant curvature of ('S', length) / ('A', radius, angle_deg) segments."""
    parts = []
    for seg in segments:
        if seg[0] == "S":
            n = int(round(seg[1] / FINE_M))
            parts.append(np.zeros(n))
        else:
            _, r, ang = seg
            n = int(round(abs(r * math.radians(ang)) / FINE_M))
            parts.append(np.full(n, math.copysign(1.0 / r, ang)))
    return parts


def integrate(k, closed, transition_m):
    """Smooth the curvature with a moving average and integrate it to heading and x, y."""
    w = max(1, int(round(transition_m / FINE_M)))
    if closed:
        kk = np.concatenate([k[-w:], k, k[:w]])
        ks = np.convolve(kk, np.ones(w) / w, mode="same")[w:-w]
    else:
        ks = np.convolve(np.pad(k, w, mode="edge"), np.ones(w) / w, mode="same")[w:-w]
    th = np.concatenate([[0.0], np.cumsum(ks) * FINE_M])  # heading at nodes
    mid = 0.5 * (th[:-1] + th[1:])
    x = np.concatenate([[0.0], np.cumsum(np.cos(mid)) * FINE_M])
    y = np.concatenate([[0.0], np.cumsum(np.sin(mid)) * FINE_M])
    return ks, th, x, y


def build_closed(segments, transition_m, turn_deg=360.0):
    """Close the circuit exactly: heading by scaling curvature, position by the straights."""
    segs = [list(s) for s in segments]
    straights = [i for i, s in enumerate(segs) if s[0] == "S"]
    for _ in range(10):
        parts = curvature_profile(segs, transition_m)
        k = np.concatenate(parts)
        total = np.sum(k) * FINE_M
        k *= math.radians(turn_deg) / total
        ks, th, x, y = integrate(k, True, transition_m)
        gap = np.array([x[-1] - x[0], y[-1] - y[0]])
        if np.hypot(*gap) < 1.0:
            break
        # heading along the middle of each straight
        starts = np.cumsum([0] + [len(p) for p in parts])
        a = np.array([[math.cos(th[(starts[i] + starts[i + 1]) // 2]) for i in straights],
                      [math.sin(th[(starts[i] + starts[i + 1]) // 2]) for i in straights]])
        delta = -a.T @ np.linalg.solve(a @ a.T, gap)
        for i, dl in zip(straights, delta, strict=True):
            segs[i][1] += dl
            if segs[i][1] < 2.0 * transition_m:
                raise SystemExit(f"straight {i} would shrink to {segs[i][1]:.0f} m; "
                                 "redesign the layout")
    else:
        raise SystemExit("the layout does not close; redesign it")
    # straights are whole multiples of FINE_M, so a gap below 1 m remains: spread it
    # linearly along the lap (a uniform shear, which adds no curvature)
    frac = np.arange(x.size) / (x.size - 1)
    x = x - gap[0] * frac
    y = y - gap[1] * frac
    return ks, x[:-1], y[:-1]


def self_crossing(x, y, closed, step=5.0):
    """True when the polyline crosses itself (checked on a ~5 m resample)."""
    s = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    m = int(s[-1] / step)
    t = np.linspace(0.0, s[-1], m)
    px, py = np.interp(t, s, x), np.interp(t, s, y)
    if closed:
        px, py = np.append(px, px[0]), np.append(py, py[0])
    p0 = np.stack([px[:-1], py[:-1]], 1)
    p1 = np.stack([px[1:], py[1:]], 1)
    nseg = p0.shape[0]
    for i in range(nseg):
        j = np.arange(i + 2, nseg)
        if closed and i == 0:
            j = j[j != nseg - 1]
        if j.size == 0:
            continue
        d1 = p1[i] - p0[i]
        d2 = p1[j] - p0[j]
        den = d1[0] * d2[:, 1] - d1[1] * d2[:, 0]
        r = p0[j] - p0[i]
        with np.errstate(divide="ignore", invalid="ignore"):
            ta = (r[:, 0] * d2[:, 1] - r[:, 1] * d2[:, 0]) / den
            tb = (r[:, 0] * d1[1] - r[:, 1] * d1[0]) / den
        ok = np.abs(den) > 1e-9 * np.hypot(*d1) * np.hypot(d2[:, 0], d2[:, 1])
        if np.any(ok & (ta >= 0) & (ta <= 1) & (tb >= 0) & (tb <= 1)):
            return True
    return False


def check(name, k, x, y, closed):
    kmax = float(np.max(np.abs(k)))
    if 1.0 / kmax < MIN_RADIUS_M:
        raise SystemExit(f"{name}: min radius {1 / kmax:.1f} m < {MIN_RADIUS_M} m")
    if self_crossing(x, y, closed):
        raise SystemExit(f"{name}: the centreline crosses itself")


def write_csv(path, name, closed, cols, sectors=None, note=""):
    every = int(round(OUT_STEP_M / FINE_M))
    lines = [f"# name: {name}", f"# closed: {'true' if closed else 'false'}"]
    if sectors:
        lines.append("# sectors_m: " + ", ".join(f"{s:.0f}" for s in sectors))
    lines.append("# invented demo track written by scripts/make_tracks.py" + note)
    lines.append(",".join(cols))
    arrays = [cols[c][::every] for c in cols]
    if not closed:  # keep the finish point
        arrays = [np.append(a, cols[c][-1]) if (len(cols[c]) - 1) % every else a
                  for a, c in zip(arrays, cols, strict=True)]
    fmt = {"lat_deg": "{:.8f}", "lon_deg": "{:.8f}"}
    for row in zip(*arrays, strict=True):
        lines.append(",".join(fmt.get(c, "{:.4f}").format(v)  # 0.1 mm: no curvature ripple
                              for c, v in zip(cols, row, strict=True)))
    Path(path).write_text("\n".join(lines) + "\n")


def lap_width(n, mean_m, swing_m, waves, phase):
    """A smoothly varying width around a closed lap of ``n`` points: ``mean ± swing`` over a
    whole number of ``waves`` per lap, so that the width closes on itself [m]."""
    u = np.arange(n) / n
    return mean_m + swing_m * np.sin(2.0 * np.pi * waves * u + phase)


def length_of(x, y, closed):
    d = np.hypot(np.diff(x), np.diff(y)).sum()
    return d + (math.hypot(x[-1] - x[0], y[-1] - y[0]) if closed else 0.0)


# --------------------------------------------------------------------------------------------
# The circuits (invented)
# --------------------------------------------------------------------------------------------

FAST = [  # ~5 km, counter-clockwise, high-speed sweepers
    ("S", 850), ("A", 70, 90), ("S", 300), ("A", 400, 30), ("S", 150), ("A", 300, -30),
    ("S", 300), ("A", 160, 90), ("S", 250), ("A", 520, -20), ("S", 200), ("A", 220, 40),
    ("S", 250), ("A", 60, 70), ("S", 300), ("A", 45, 80), ("S", 100), ("A", 45, -80),
    ("S", 250), ("A", 140, -45), ("S", 100), ("A", 140, 45),
    ("S", 250), ("A", 90, 90), ("S", 370),
]


def _finger(r_turn, length, r_hairpin, side):
    """Out-and-back: a 90-degree turn, a straight, a 180-degree hairpin, back, a turn."""
    return [("A", r_turn, -90 * side), ("S", length), ("A", r_hairpin, 180 * side),
            ("S", length), ("A", r_turn, -90 * side)]


TWISTY = [  # ~2.7 km, counter-clockwise, hairpins of 12-16 m radius
    ("S", 450), ("A", 30, 90), ("S", 80), *_finger(25, 200, 14, 1), ("S", 100),
    ("A", 40, 90), ("S", 120), ("A", 35, 45), ("S", 60), ("A", 35, -45), ("S", 100),
    *_finger(20, 160, 12, 1), ("S", 100), ("A", 18, 90), ("S", 80), ("A", 50, -40),
    ("S", 60), ("A", 50, 40), ("S", 60), ("A", 16, 90), ("S", 110),
]

OVAL = [  # ~2.4 km, counter-clockwise, two 180-degree banked turns
    ("S", 600), ("A", 190, 180), ("S", 600), ("A", 190, 180),
]

HILL = [  # ~4.6 km open stage: a valley road, a stack of switchback hairpins, a ridge road
    ("S", 350), ("A", 120, 30), ("S", 300), ("A", 60, -30), ("S", 250),
    ("A", 15, 180), ("S", 380), ("A", 14, -180), ("S", 400), ("A", 16, 180), ("S", 380),
    ("A", 13, -180), ("S", 300), ("A", 80, 40), ("S", 350), ("A", 40, -70), ("S", 250),
    ("A", 200, 30), ("S", 400), ("A", 35, 80), ("S", 300), ("A", 150, -40), ("S", 300),
]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1] / "tracks"))
    out = Path(ap.parse_args(argv).out)
    out.mkdir(parents=True, exist_ok=True)
    summary = []

    # (a) fast circuit (the benchmark track)
    k, x, y = build_closed(FAST, transition_m=40.0)
    check("fast", k, x, y, True)
    L = length_of(x, y, True)
    write_csv(out / "veldmoor_ring.csv", "Veldmoor Ring", True,
              {"x_m": x, "y_m": y, "width_m": lap_width(x.size, 12.5, 1.5, 3, 0.7)},
              sectors=[0, round(L * 0.34), round(L * 0.68)])
    summary.append(("veldmoor_ring", L, 1 / np.max(np.abs(k))))

    # (b) twisty circuit with hairpins
    k, x, y = build_closed(TWISTY, transition_m=15.0)
    check("twisty", k, x, y, True)
    L = length_of(x, y, True)
    write_csv(out / "kettlewick_loops.csv", "Kettlewick Loops", True,
              {"x_m": x, "y_m": y, "width_m": lap_width(x.size, 11.0, 1.0, 4, 0.0)})
    summary.append(("kettlewick_loops", L, 1 / np.max(np.abs(k))))

    # (c) banked oval: bank follows curvature, 16 deg at full radius
    k, x, y = build_closed(OVAL, transition_m=120.0)
    check("oval", k, x, y, True)
    bank = 16.0 * k[: x.size] / np.max(np.abs(k))
    L = length_of(x, y, True)
    write_csv(out / "oranby_bowl.csv", "Oranby Bowl", True,
              {"x_m": x, "y_m": y, "bank_deg": bank, "width_m": np.full(x.size, 15.0)})
    summary.append(("oranby_bowl", L, 1 / np.max(np.abs(k))))

    # (d) open hill-climb with ~300 m of climb
    k = np.concatenate(curvature_profile(HILL, 15.0))
    ks, _, x, y = integrate(k, False, 15.0)
    check("hill", ks, x, y, False)
    s = np.arange(x.size) * FINE_M
    L = s[-1]
    u = s / L
    z = 300.0 * (u - np.sin(2 * np.pi * u) / (2 * np.pi) * 0.5) + 8.0 * np.sin(6 * np.pi * u)
    write_csv(out / "skarhelm_climb.csv", "Skarhelm Climb", False,
              {"x_m": x, "y_m": y, "z_m": z, "width_m": np.full(x.size, 7.0)})
    summary.append(("skarhelm_climb", L, 1 / np.max(np.abs(ks))))

    # (e) a logged-style lap of the twisty circuit: lat/lon with 0.3 m GPS-like noise
    rng = np.random.default_rng(20261202)
    k, x, y = build_closed(TWISTY, transition_m=15.0)
    every = int(round(OUT_STEP_M / FINE_M))
    xs = x[::every] + rng.normal(0.0, 0.3, x[::every].size)
    ys = y[::every] + rng.normal(0.0, 0.3, x[::every].size)
    lat0, lon0 = 45.0, -30.0  # a point in the open Atlantic, so no real place is implied
    r_earth = 6371008.8  # mean Earth radius [m]; the loader projects with WGS-84
    lat = lat0 + np.degrees(ys / r_earth)
    lon = lon0 + np.degrees(xs / (r_earth * math.cos(math.radians(lat0))))
    lines = ["# name: Kettlewick Loops (logged)", "# closed: true",
             "# invented logged-style trace (0.3 m noise) written by scripts/make_tracks.py",
             "lat_deg,lon_deg"]
    lines += [f"{a:.8f},{b:.8f}" for a, b in zip(lat, lon, strict=True)]
    (out / "kettlewick_logged.csv").write_text("\n".join(lines) + "\n")

    for name, L, rmin in summary:
        print(f"{name:18s} length {L:7.1f} m  min radius {rmin:6.1f} m")


if __name__ == "__main__":
    main()
