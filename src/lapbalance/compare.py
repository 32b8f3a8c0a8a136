"""Compare cars (a base and its variants) over one or more tracks.

Every car runs every track with :func:`lapbalance.lap.simulate_lap`; the results are reduced
to plain tables (lists of dict rows, SI or unit-named keys) that the CLI prints and writes:

``summary``
    one row per track and car: lap time, delta to the base, top speed, mean aero balance at
    low and at high speed, number of corners the lift-off check flags, the smallest lift-off
    margin over the corners and its change from the base.
``segments``
    one row per track, car and lap segment (corners carry their lift-off margin and its
    change from the base: wing packages compared on lift-off safety, not only on time).
    The lap is cut into **corners** (from the corner's
    ``entry_m`` to its ``exit_m``, as the track defines them) and the **straights** between
    them (from one corner's exit to the next corner's entry; on a closed lap the last straight
    runs through the start line to the first corner). The segments tile the lap exactly once,
    so for every car the segment times add up to the lap time and the segment deltas
    (variant minus base, negative = the variant is faster there) add up to the lap delta.
    Corners that overlap are cut at the next corner's entry.

Segment times are read from the solver's ``time_s`` channel (elapsed time at each step: the
sum over steps of ``2 ds / (v_i + v_{i+1})``, each step at the mean of its end speeds),
interpolated linearly at the segment ends.

Aero balance bands: the mean of the ``aero_balance_front`` channel (front share of downforce,
CG convention) over the track steps below ``low`` km/h and over those at or above ``high``
km/h (steps are equally spaced in distance, so this is a distance-weighted mean). The
ground-convention figure (as wheel-restrained scales read it) is given beside it.

:func:`sweep` (parameter sweeps) lives in :mod:`lapbalance.sweep` and is re-exported here.
"""

from __future__ import annotations

import math
import re
import sys
import types
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from lapbalance.car import Car, load_car
from lapbalance.errors import InputError
from lapbalance.liftoff import flagged, smallest_margin
from lapbalance.sweep import sweep  # noqa: F401  (re-exported: lapbalance.sweep)

__all__ = ["CompareResult", "compare", "lap_segments", "segment_times", "sweep",
           "time_delta", "time_at"]

#: Default speed bands for the low/high-speed aero balance [km/h]: below 120, at or above 180.
#: Engineering judgement (a documented default, not a published value): it separates slow
#: from fast corners for GT-class cars; change it with ``speed_bands_kph``.
SPEED_BANDS_KPH = (120.0, 180.0)


@dataclass(frozen=True)
class CompareResult:
    """Result of :func:`compare`.

    Attributes
    ----------
    labels : list of str
        One label per car, the base first.
    tracks : list of str
        One unique, file-name-safe key per track (from the track name).
    laps : list of list of LapResult
        ``laps[i][j]`` is car ``j`` on track ``i``.
    summary : list of dict
        Per track and car: ``track``, ``car``, ``lap_time_s`` [s], ``delta_s`` [s] (car minus
        base), ``top_speed_kph`` [km/h], ``min_speed_kph`` [km/h],
        ``aero_balance_front_low`` / ``_high`` [-] (CG convention), the same with
        ``_ground`` [-], ``liftoff_worst_shift`` [-], ``flagged_corners`` [-],
        ``liftoff_margin_min`` [-] (smallest corner lift-off margin, NaN when none checked),
        ``liftoff_margin_delta`` [-] (car minus base; > 0 = the car keeps more margin),
        ``liftoff_reserve_min`` [-] (smallest rear reserve after a lift at the limit; it ranks
        cars whose margin is 1) and ``liftoff_reserve_delta`` [-] (car minus base).
    segments : list of dict
        Per track, car and segment: ``track``, ``car``, ``segment`` ("C<id>" or "S<n>"),
        ``kind`` ("corner"/"straight"), ``corner_id``, ``start_m``, ``end_m`` [m],
        ``time_s`` [s], ``delta_s`` [s] (car minus base), ``min_speed_kph`` [km/h] and for
        corners ``liftoff_verdict``, ``liftoff_margin`` [-], ``liftoff_margin_delta`` [-]
        (car minus base), ``liftoff_rear_reserve`` [-], ``liftoff_rear_reserve_delta`` [-]
        (car minus base), ``liftoff_max_shift`` [-],
        ``liftoff_max_usage_rear`` [-].
    speed_bands_kph : tuple of float
        The low/high speed bands used for the aero balance. [km/h]
    """

    labels: list[str]
    tracks: list[str]
    laps: list[list[Any]] = field(repr=False)
    summary: list[dict]
    segments: list[dict]
    speed_bands_kph: tuple[float, float] = SPEED_BANDS_KPH

    def summary_for(self, track: str) -> list[dict]:
        """Summary rows of one track (by key in :attr:`tracks`)."""
        return [r for r in self.summary if r["track"] == track]

    def segments_for(self, track: str) -> list[dict]:
        """Segment rows of one track (by key in :attr:`tracks`)."""
        return [r for r in self.segments if r["track"] == track]

    def to_json(self) -> dict:
        """Plain-JSON form (no lap channels)."""
        return {"labels": list(self.labels), "tracks": list(self.tracks),
                "speed_bands_kph": list(self.speed_bands_kph),
                "summary": [_jsonable_row(r) for r in self.summary],
                "segments": [_jsonable_row(r) for r in self.segments]}


def _jsonable_row(row: dict) -> dict:
    out = {}
    for k, v in row.items():
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, float) and not math.isfinite(v):
            v = None
        out[k] = v
    return out


# --------------------------------------------------------------------------------------------
# Segments and time along the lap
# --------------------------------------------------------------------------------------------


def time_at(result, distance_m: float | np.ndarray) -> float | np.ndarray:
    """Elapsed time at a distance along the lap, linear between steps.

    Parameters
    ----------
    result : LapResult
        A lap from :func:`lapbalance.lap.simulate_lap`.
    distance_m : float or array
        Distance from the start line, between 0 and the lap length. [m]

    Returns
    -------
    float or array
        Elapsed time at ``distance_m``; the lap length maps to the lap time. [s]
    """
    d = np.asarray(result.channels["distance_m"], float)
    t = np.asarray(result.channels["time_s"], float)
    L = float(result.track.length_m)
    if d[-1] < L:  # closed lap: the end of the last step is the start line, one lap later
        d = np.append(d, L)
        t = np.append(t, result.lap_time_s)
    out = np.interp(distance_m, d, t)
    return float(out) if np.ndim(out) == 0 else out


def lap_segments(track) -> list[dict]:
    """Cut a track into corners and the straights between them (see the module notes).

    Parameters
    ----------
    track : Track
        Track with ``length_m`` [m], ``closed`` and ``corners`` (``id``, ``entry_m``,
        ``exit_m`` [m]).

    Returns
    -------
    list of dict
        In lap order: ``segment``, ``kind``, ``corner_id`` (None for straights), ``start_m``,
        ``end_m`` [m]. On a closed lap a segment through the start line has
        ``end_m < start_m``. Zero-length straights are left out.
    """
    L = float(track.length_m)
    closed = bool(track.closed)
    corners = sorted(getattr(track, "corners", ()) or (),
                     key=lambda c: float(c.entry_m) % L if closed else float(c.entry_m))
    if not corners:
        return [{"segment": "S1", "kind": "straight", "corner_id": None,
                 "start_m": 0.0, "end_m": L}]
    # Work in unwrapped distance u: a closed lap runs from the first corner's entry for one
    # lap length; an open run from 0 to L.
    entries = [float(c.entry_m) % L if closed else float(c.entry_m) for c in corners]
    origin = entries[0] if closed else 0.0
    end = origin + L if closed else L
    parts: list[tuple[str, Any, float, float]] = []
    prev = origin
    for j, c in enumerate(corners):
        e = max(entries[j], prev)
        if closed:
            span = (float(c.exit_m) - float(c.entry_m)) % L
        else:
            span = float(c.exit_m) - float(c.entry_m)
            if span < 0:
                raise InputError(f"corner {c.id} ends before it starts ({c.exit_m:g} m < "
                                 f"{c.entry_m:g} m) on an open track", track.source,
                                 "corners")
        nxt = entries[j + 1] if j + 1 < len(corners) else end
        x = min(e + span, nxt, end)
        if e > prev:
            parts.append(("straight", None, prev, e))
        parts.append(("corner", c, e, x))
        prev = x
    if prev < end:
        parts.append(("straight", None, prev, end))

    def wrap(u: float) -> float:
        if closed and u == end:
            return origin  # exactly where the lap started, without rounding
        return u - L if u > L else u

    rows, n_str = [], 0
    for kind, c, a, b in parts:
        if kind == "corner":
            name, cid = f"C{c.id}", int(c.id)
        else:
            n_str += 1
            name, cid = f"S{n_str}", None
        rows.append({"segment": name, "kind": kind, "corner_id": cid,
                     "start_m": wrap(a), "end_m": wrap(b)})
    return rows


def segment_times(result, segments: Sequence[Mapping] | None = None) -> list[float]:
    """Time spent in each segment of :func:`lap_segments`. [s]

    Parameters
    ----------
    result : LapResult
        A lap.
    segments : list of dict, optional
        From :func:`lap_segments` (default: computed from ``result.track``).

    Returns
    -------
    list of float
        One time per segment; their sum is the lap time (to rounding). [s]
    """
    if segments is None:
        segments = lap_segments(result.track)
    T = float(result.lap_time_s)
    out = []
    for s in segments:
        t0, t1 = time_at(result, s["start_m"]), time_at(result, s["end_m"])
        dt = t1 - t0
        if s["end_m"] < s["start_m"]:
            dt += T  # through the start line of a closed lap
        out.append(float(dt))
    return out


def time_delta(base, other) -> np.ndarray:
    """Time gained or lost along the lap: ``other`` minus ``base`` at each step of ``base``.

    Parameters
    ----------
    base, other : LapResult
        Laps on the same track.

    Returns
    -------
    numpy array
        Elapsed-time difference at every step of ``base`` (positive = ``other`` is behind). [s]
    """
    d = np.asarray(base.channels["distance_m"], float)
    return time_at(other, d) - time_at(base, d)


def _segment_min_speed(result, seg) -> float:
    d = result.channels["distance_m"]
    a, b = seg["start_m"], seg["end_m"]
    mask = (d >= a) & (d <= b) if b >= a else (d >= a) | (d <= b)
    v = result.channels["speed_kph"]
    return float(v[mask].min()) if mask.any() else float(np.interp(a, d, v))


# --------------------------------------------------------------------------------------------
# compare
# --------------------------------------------------------------------------------------------


def _band_mean(result, low_kph: float, high_kph: float, channel: str) -> tuple[float, float]:
    v = result.channels["speed_kph"]
    x = result.channels[channel]
    lo, hi = v < low_kph, v >= high_kph
    with np.errstate(invalid="ignore"):
        m_lo = float(np.nanmean(x[lo])) if lo.any() and np.isfinite(x[lo]).any() else math.nan
        m_hi = float(np.nanmean(x[hi])) if hi.any() and np.isfinite(x[hi]).any() else math.nan
    return m_lo, m_hi


def _as_car(item, base: Car, what: str) -> tuple[Car, str | None]:
    """A Car from a Car, a path, an override mapping or a list of ``k=v`` strings."""
    if isinstance(item, Car):
        return item, None
    if isinstance(item, str | Path) and not (isinstance(item, str) and "=" in item
                                               and not Path(item).exists()):
        return load_car(item), None
    if isinstance(item, Mapping):
        text = ", ".join(f"{k}={v}" for k, v in item.items())
        return base.with_overrides(dict(item)), text
    if isinstance(item, str):
        item = [item]
    if isinstance(item, Sequence) and all(isinstance(s, str) for s in item):
        return base.with_overrides(list(item)), ", ".join(s.strip() for s in item)
    raise InputError(f"{what} must be a Car, a car file or override settings "
                     f"(got {type(item).__name__})", "compare", what)


def _slug(name: str) -> str:
    s = re.sub(r"[^A-Za-z0-9_.-]+", "_", str(name)).strip("._") or "track"
    return s[:60]


def _unique(names: list[str], fmt: str = "{} ({})") -> list[str]:
    out, seen = [], {}
    for n in names:
        if n in seen:
            seen[n] += 1
            n = fmt.format(n, seen[n])
        else:
            seen[n] = 1
        out.append(n)
    return out


def compare(base_car, variants, tracks, labels: Sequence[str] | None = None, *,
            speed_bands_kph: tuple[float, float] = SPEED_BANDS_KPH,
            simulate_options: Mapping[str, Any] | None = None) -> CompareResult:
    """Run a base car and its variants over tracks and tabulate the differences.

    Parameters
    ----------
    base_car : Car or str or Path
        The reference car (or its car file).
    variants : sequence
        Each a :class:`~lapbalance.car.Car`, a car file (e.g. a TOML with ``base = ...``), an
        override mapping ``{"aero.drag_area_m2": 0.86}`` or a list of ``section.key=value``
        strings applied to the base car.
    tracks : Track or sequence of Track
        Tracks (see :func:`lapbalance.load_track`).
    labels : sequence of str, optional
        One label per car, base first (default: car names; override sets are labelled by
        their settings).
    speed_bands_kph : (float, float)
        Low and high speed bands of the aero-balance means. [km/h]
    simulate_options : mapping, optional
        Keyword arguments passed to :func:`~lapbalance.lap.simulate_lap` (e.g.
        ``start_speed_kph``).

    Returns
    -------
    CompareResult
        Plain tables (see the class); deltas are car minus base. [s]
    """
    from lapbalance.lap import simulate_lap

    if isinstance(base_car, str | Path):
        base_car = load_car(base_car)
    if not isinstance(base_car, Car):
        raise InputError("base_car must be a Car or a car file", "compare", "base_car")
    if isinstance(variants, Car | Mapping | str | Path):
        variants = [variants]
    cars, auto = [base_car], [base_car.name]
    for i, v in enumerate(variants):
        car, text = _as_car(v, base_car, f"variants[{i}]")
        cars.append(car)
        auto.append(text if text is not None else car.name)
    if labels is None:
        labels = _unique(auto)
    else:
        labels = [str(x) for x in labels]
        if len(labels) != len(cars):
            raise InputError(f"got {len(labels)} labels for {len(cars)} cars (base first); "
                             "give one label per car", "compare", "labels")
        if len(set(labels)) != len(labels):
            raise InputError("labels must be unique", "compare", "labels")
    if not isinstance(tracks, Sequence):
        tracks = [tracks]
    if not tracks:
        raise InputError("give at least one track", "compare", "tracks")
    low, high = (float(x) for x in speed_bands_kph)
    if not 0 < low <= high:
        raise InputError(f"speed bands {speed_bands_kph} must be 0 < low <= high km/h",
                         "compare", "speed_bands_kph")
    opts = dict(simulate_options or {})
    keys = _unique([_slug(getattr(t, "name", "track")) for t in tracks], fmt="{}_{}")
    all_laps, summary, segments = [], [], []
    for key, track in zip(keys, tracks, strict=True):
        laps = [simulate_lap(car, track, **opts) for car in cars]
        all_laps.append(laps)
        segs = lap_segments(track)
        seg_t = [segment_times(r, segs) for r in laps]
        base = laps[0]
        base_min = _nan(smallest_margin(base.corners))
        base_margin = {c["id"]: _nan(c.get("liftoff_margin")) for c in base.corners}
        base_reserve = {c["id"]: _nan(c.get("liftoff_rear_reserve")) for c in base.corners}
        base_rmin = _min_reserve(base.corners)
        for j, (label, r) in enumerate(zip(labels, laps, strict=True)):
            lo_cg, hi_cg = _band_mean(r, low, high, "aero_balance_front")
            lo_g, hi_g = _band_mean(r, low, high, "aero_balance_front_ground")
            shifts = [c["liftoff_max_shift"] for c in r.corners
                      if c.get("liftoff_max_shift") is not None]
            summary.append({
                "track": key, "car": label, "lap_time_s": float(r.lap_time_s),
                "delta_s": float(r.lap_time_s) - float(base.lap_time_s),
                "top_speed_kph": float(np.max(r.channels["speed_kph"])),
                "min_speed_kph": float(np.min(r.channels["speed_kph"])),
                "aero_balance_front_low": lo_cg, "aero_balance_front_high": hi_cg,
                "aero_balance_front_ground_low": lo_g, "aero_balance_front_ground_high": hi_g,
                "liftoff_worst_shift": max(shifts) if shifts else math.nan,
                "flagged_corners": len(flagged(r.corners)),
                "liftoff_margin_min": _nan(smallest_margin(r.corners)),
                "liftoff_margin_delta": _nan(smallest_margin(r.corners)) - base_min,
                "liftoff_reserve_min": _min_reserve(r.corners),
                "liftoff_reserve_delta": _min_reserve(r.corners) - base_rmin,
            })
            crow = {c["id"]: c for c in r.corners}
            for s, t, tb in zip(segs, seg_t[j], seg_t[0], strict=True):
                row = {"track": key, "car": label, **s, "time_s": t, "delta_s": t - tb,
                       "min_speed_kph": _segment_min_speed(r, s),
                       "liftoff_verdict": None, "liftoff_margin": math.nan,
                       "liftoff_margin_delta": math.nan, "liftoff_rear_reserve": math.nan,
                       "liftoff_rear_reserve_delta": math.nan,
                       "liftoff_max_shift": math.nan, "liftoff_max_usage_rear": math.nan}
                c = crow.get(s["corner_id"]) if s["kind"] == "corner" else None
                if c is not None:
                    row["liftoff_verdict"] = c.get("liftoff_verdict")
                    for k in ("liftoff_margin", "liftoff_rear_reserve", "liftoff_max_shift",
                              "liftoff_max_usage_rear"):
                        row[k] = _nan(c.get(k))
                    row["liftoff_margin_delta"] = (row["liftoff_margin"]
                                                   - base_margin.get(c["id"], math.nan))
                    row["liftoff_rear_reserve_delta"] = (row["liftoff_rear_reserve"]
                                                         - base_reserve.get(c["id"], math.nan))
                segments.append(row)
    return CompareResult(list(labels), keys, all_laps, summary, segments,
                         (low, high))


def _nan(x) -> float:
    return math.nan if x is None else float(x)


def _min_reserve(corners) -> float:
    vals = [c["liftoff_rear_reserve"] for c in corners
            if c.get("liftoff_rear_reserve") is not None]
    return min(vals) if vals else math.nan


class _CallableModule(types.ModuleType):
    """Importing this module binds ``lapbalance.compare`` to the module object; making the
    module callable keeps ``lapbalance.compare(...)`` working after that."""

    def __call__(self, *args, **kwargs):
        return compare(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
