"""The lap solver: car and track in, :class:`LapResult` out.

validate -> build float arrays -> call the numba kernels (:mod:`lapbalance.kernels`) -> wrap.
Method (docs/method.md): corner-speed limit per step (steady speed, both axles u<=1), forward pass
with the largest drive force the powertrain gives and both axles carry, backward pass with the
fixed brake bias, speed = minimum of the three; closed laps start at the slowest point so the
lap closes on itself. Each step's a_x comes from the force balance applied there.
"""

from __future__ import annotations

import contextlib
import functools
import math
import os
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lapbalance import kernels as _k
from lapbalance import liftoff
from lapbalance.car import Car
from lapbalance.errors import InfeasibleError, InputError, PhysicsWarning
from lapbalance.kernels import corner_limits as _corner_limits_parallel
from lapbalance.kernels import corner_limits_serial as _corner_limits_kernel
from lapbalance.kernels import final_pass as _final_pass_parallel
from lapbalance.kernels import final_pass_serial as _final_pass_kernel
from lapbalance.kernels import liftoff_margins as _liftoff_margins_parallel
from lapbalance.kernels import liftoff_margins_serial as _liftoff_margins_kernel
from lapbalance.kernels import speed_passes as _speed_passes_kernel
from lapbalance.liftoff import corner_mask as _corner_mask
from lapbalance.params import (  # noqa: F401  (public here too)
    FORCE_TOL,
    MARGIN_TOL,
    SPEED_TOL,
    car_parameters,
    speed_cap,
)
from lapbalance.units import G0

#: Names of the ``limit`` channel codes.
LIMIT_NAMES = {
    _k.LIM_NONE: "none",
    _k.LIM_FRONT: "front",
    _k.LIM_REAR: "rear",
    _k.LIM_ENGINE: "engine",
    _k.LIM_REV: "rev-limit",
    _k.LIM_SPEEDCAP: "top-speed",
}

#: Default lateral-acceleration threshold for the lift-off check [m/s²]: ISO 9816 starts its
#: power-off-in-a-turn runs from a steady turn at about 4 m/s² (ISO 9816:2018).
LIFTOFF_AY_THRESHOLD = 4.0

#: Fewest steps [-] and cores [-] for which a single lap runs its parallel kernels on several
#: numba threads; below either, one thread is quicker: a lap of a few thousand steps takes
#: milliseconds, less than waking and joining threads costs on a busy machine.
PARALLEL_MIN_STEPS = 50_000
PARALLEL_MIN_CORES = 4


# Unit and meaning of every channel (name -> (unit, description)); DEVELOPERS.md glossary.
CHANNELS: dict[str, tuple[str, str]] = {
    "distance_m": ("m", "distance from the start line"),
    "time_s": ("s", "elapsed time"),
    "x_m": ("m", "position east"),
    "y_m": ("m", "position north"),
    "z_m": ("m", "elevation"),
    "line_offset_m": ("m", "lateral offset of the driven line from the track file's reference "
                      "line, left positive (0 on the centreline)"),
    "curvature_1pm": ("1/m", "path curvature, left positive"),
    "grade_rad": ("rad", "road grade, uphill positive"),
    "bank_rad": ("rad", "banking, left side lower positive"),
    "corner_id": ("-", "corner number (0 = not in a corner)"),
    "speed_mps": ("m/s", "speed"),
    "speed_kph": ("km/h", "speed"),
    "speed_limit_mps": ("m/s", "steady corner-speed limit at this step"),
    "ax_mps2": ("m/s²", "longitudinal acceleration from the applied force balance"),
    "ay_mps2": ("m/s²", "lateral acceleration the tyres supply (road plane, left positive)"),
    "gear": ("-", "gear (1 = first)"),
    "rpm": ("rpm", "engine speed"),
    "drive_force_n": ("N", "drive force at the wheels"),
    "brake_force_n": ("N", "brake force at the wheels"),
    "engine_force_n": ("N", "largest drive force the powertrain gives at this speed"),
    "rolling_resistance_n": ("N", "rolling resistance, all tyres"),
    "drag_n": ("N", "aerodynamic drag"),
    "downforce_n": ("N", "aerodynamic downforce (negative = lift)"),
    "static_front_n": ("N", "weight on the front axle (normal component)"),
    "static_rear_n": ("N", "weight on the rear axle (normal component)"),
    "aero_front_n": ("N", "aero load on the front axle, CG convention"),
    "aero_rear_n": ("N", "aero load on the rear axle, CG convention"),
    "ground_transfer_n": ("N", "load moved to the rear by the ground forces, X·h/L"),
    "lat_transfer_front_n": ("N", "lateral load transfer, front axle"),
    "lat_transfer_rear_n": ("N", "lateral load transfer, rear axle"),
    "fz_front_n": ("N", "front axle load"),
    "fz_rear_n": ("N", "rear axle load"),
    "fz_front_outer_n": ("N", "front outer-wheel load"),
    "fz_front_inner_n": ("N", "front inner-wheel load"),
    "fz_rear_outer_n": ("N", "rear outer-wheel load"),
    "fz_rear_inner_n": ("N", "rear inner-wheel load"),
    "wheel_lift_front": ("-", "1 when the front inner wheel lifts"),
    "wheel_lift_rear": ("-", "1 when the rear inner wheel lifts"),
    "fx_front_n": ("N", "front axle longitudinal demand"),
    "fx_rear_n": ("N", "rear axle longitudinal demand"),
    "fy_front_n": ("N", "front axle lateral demand"),
    "fy_rear_n": ("N", "rear axle lateral demand"),
    "usage_front": ("-", "front axle grip usage (friction ellipse)"),
    "usage_rear": ("-", "rear axle grip usage"),
    "balance_index": ("-", "usage_rear - usage_front (> 0 oversteer-leaning)"),
    "aero_balance_front": ("-", "front share of downforce, CG convention"),
    "aero_balance_front_ground": ("-", "front share as wheel-restrained scales read it"),
    "ride_height_front_mm": ("mm", "front ride height"),
    "ride_height_rear_mm": ("mm", "rear ride height"),
    "floor_contact": ("-", "1 where a ride height reaches zero"),
    "aero_map_outside": ("-", "1 where ride heights leave the aero map (extrapolated)"),
    "limit": ("-", "limiting constraint code (see LIMIT_NAMES)"),
    "liftoff_checked": ("-", "1 where the lift-off check applies (cornering on throttle); "
                        "the liftoff_* and coast_* channels are NaN where it is 0"),
    "overrun_force_n": ("N", "engine-braking force at the wheels in the current gear"),
    "liftoff_balance_shift": ("-", "balance index change on lift-off, B_off - B_on; NaN "
                              "where not checked (liftoff_checked = 0)"),
    "liftoff_front_load_shift_n": ("N", "front axle load change on lift-off; NaN where not "
                                   "checked (liftoff_checked = 0)"),
    "liftoff_usage_front": ("-", "front usage after lift-off; NaN where not checked "
                            "(liftoff_checked = 0)"),
    "liftoff_usage_rear": ("-", "rear usage after lift-off; NaN where not checked "
                           "(liftoff_checked = 0)"),
    "liftoff_ax_mps2": ("m/s²", "longitudinal acceleration after lift-off; NaN where not "
                        "checked (liftoff_checked = 0)"),
    "coast_balance_shift": ("-", "balance index change when coasting (no engine braking); "
                            "NaN where not checked (liftoff_checked = 0)"),
    "coast_front_load_shift_n": ("N", "front axle load change when coasting; NaN where not "
                                 "checked (liftoff_checked = 0)"),
    "coast_usage_front": ("-", "front usage when coasting; NaN where not checked "
                          "(liftoff_checked = 0)"),
    "coast_usage_rear": ("-", "rear usage when coasting; NaN where not checked "
                         "(liftoff_checked = 0)"),
    "liftoff_step_margin": ("-", "lift-off margin a_y_safe / a_y_limit with engine overrun "
                            "(1 = a lift at the limit keeps the rear; checked steps only)"),
    "liftoff_safe_speed_mps": ("m/s", "highest speed at or below the limit where a lift with "
                               "overrun keeps rear usage <= 1"),
    "liftoff_step_speed_margin_kph": ("km/h", "limit speed minus the safe-lift speed"),
    "liftoff_ay_limit_mps2": ("m/s²", "lateral acceleration at this step's corner limit"),
    "liftoff_step_rear_reserve": ("-", "1 - rear usage after a lift with overrun at the "
                                  "limit speed (< 0 saturates; clamped at -1)"),
    "coast_step_margin": ("-", "lift-off margin when coasting (no engine braking)"),
    "coast_safe_speed_mps": ("m/s", "highest speed at or below the limit where coasting keeps "
                             "rear usage <= 1"),
    "coast_step_rear_reserve": ("-", "1 - rear usage when coasting from the limit speed "
                                "(clamped at -1)"),
}


@dataclass(frozen=True)
class LapResult:
    """Result of :func:`simulate_lap`.

    Attributes
    ----------
    car, track : the inputs.
    lap_time_s : float
        Lap (or run) time. [s]
    channels : dict of str -> numpy array
        One value per track step; names carry their units (see :data:`CHANNELS`).
    corners : list of dict
        Per-corner table (see :func:`corner_table`), with lift-off fields once assessed.
    sectors : list of dict
        Sector start/end distance [m] and time [s].
    """

    car: Car
    track: Any
    lap_time_s: float
    channels: dict[str, np.ndarray]
    corners: list[dict] = field(default_factory=list)
    sectors: list[dict] = field(default_factory=list)
    settings: dict = field(default_factory=dict)

    def limit_names(self) -> list[str]:
        """The ``limit`` channel as names."""
        return [LIMIT_NAMES[int(c)] for c in self.channels["limit"]]

    # Notebook use: a short repr, an HTML table, a DataFrame. Results are read through
    # attributes and properties (``lap_time_s``, ``summary``, ``provenance``); ``summary`` is
    # also callable, as it was a method before, so ``result.summary()`` keeps working.

    def __repr__(self) -> str:
        tr = getattr(self.track, "name", "") or "track"
        return (f"LapResult(car={self.car.name!r}, track={tr!r}, "
                f"{self.time_label.replace(' ', '_')}_s={self.lap_time_s:.3f}, "
                f"steps={len(self.channels.get('distance_m', ()))}, "
                f"corners={len(self.corners)})")

    def _repr_html_(self) -> str:
        """The summary as an HTML table (Jupyter). Built here rather than by
        :mod:`lapbalance.report`, which imports this module."""
        import html

        s = self.summary
        bal = s["aero_balance_front_cg"]
        low = s.get("liftoff_margin_min")
        rows = [(self.time_label, f"{s['lap_time_s']:.3f} s"),
                ("length", f"{s['length_m']:.0f} m "
                           f"({'closed lap' if s['closed'] else 'open run'})"),
                ("top / min / mean speed", f"{s['top_speed_kph']:.1f} / {s['min_speed_kph']:.1f}"
                 f" / {s['mean_speed_kph']:.1f} km/h"),
                ("aero balance, front share (CG convention)",
                 "net lift" if s.get("aero_net_lift") or bal is None else f"{bal * 100:.1f} %"),
                ("lift-off verdicts", ", ".join(f"{n} {v}" for v, n in
                                                 s.get("liftoff_verdicts", {}).items() if n)
                 or "no corners"),
                ("smallest lift-off margin", "–" if low is None else f"{low:.3f}")]
        body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                       f"<td>{html.escape(v)}</td></tr>" for k, v in rows)
        return (f"<div><strong>{html.escape(str(s['car']))}</strong> on "
                f"{html.escape(str(s['track']) or 'track')}<table>{body}</table></div>")

    @property
    def time_label(self) -> str:
        """``"lap time"`` on a closed circuit, ``"run time"`` on an open (point-to-point) one."""
        return time_label(self.track)

    @property
    def summary(self) -> _Summary:
        """Plain-JSON summary (lap time, speeds, sectors, smallest lift-off margin and verdict
        counts, corners, settings) as a dict.

        A property; calling it (``result.summary()``) returns the same dict, for code written
        when it was a method.
        """
        return _Summary(self._summary())

    @property
    def provenance(self) -> dict:
        """What was run: versions, input files with SHA-256, overrides, the resolved car,
        track and solver settings, time (see :mod:`lapbalance.provenance`)."""
        from lapbalance import provenance

        return provenance.for_lap(self)

    def to_frame(self):
        """The channels as a :class:`pandas.DataFrame`, one row per step (``limit`` as names).

        Needs pandas (``pip install 'lapbalance[frames]'``).
        """
        try:
            import pandas as pd
        except ImportError:
            raise ImportError("LapResult.to_frame needs pandas; install it with "
                              "pip install 'lapbalance[frames]' (or pip install pandas)"
                              ) from None
        cols = {k: np.asarray(v) for k, v in self.channels.items()}
        if "limit" in cols:
            cols["limit"] = np.array(self.limit_names(), dtype=object)
        df = pd.DataFrame(cols)
        df.attrs["car"] = self.car.name
        df.attrs["track"] = getattr(self.track, "name", "")
        df.attrs["units"] = {k: CHANNELS[k][0] for k in cols if k in CHANNELS}
        return df

    def _summary(self) -> dict:
        ch = self.channels
        v = ch["speed_mps"]
        return {
            "car": self.car.name,
            "track": getattr(self.track, "name", ""),
            "closed": bool(self.track.closed),
            "length_m": float(self.track.length_m),
            "lap_time_s": float(self.lap_time_s),
            "top_speed_kph": float(v.max() * 3.6),
            "min_speed_kph": float(v.min() * 3.6),
            "mean_speed_kph": float(self.track.length_m / self.lap_time_s * 3.6),
            "aero_balance_front_cg": _nan_none(self.car.aero.balance_cg),
            "aero_balance_front_ground": _nan_none(self.car.aero.balance_ground(
                self.car.chassis.cg_height, self.car.chassis.wheelbase)),
            "aero_net_lift": bool(self.car.aero.downforce_area < 0),
            "downforce_area_front_m2": float(self.car.aero.front_area_cg),
            "downforce_area_rear_m2": float(self.car.aero.rear_area_cg),
            "time_label": self.time_label,
            "air_density_kg_m3": float(self.car.air.density),
            "sectors": self.sectors,
            "liftoff_margin_min": liftoff.smallest_margin(self.corners),
            "liftoff_verdicts": liftoff.verdict_counts(self.corners) if self.corners else {},
            "corners": [{k: _jsonable(v) for k, v in c.items()} for c in self.corners],
            "settings": {k: _jsonable(v) for k, v in self.settings.items()},
            "caution": CAUTION,
        }


class _Summary(dict):
    """The summary dict; calling it returns itself (``summary`` used to be a method)."""

    def __call__(self) -> dict:
        return self


def time_label(track) -> str:
    """``"lap time"`` for a closed track, ``"run time"`` for an open (point-to-point) one."""
    return "lap time" if bool(getattr(track, "closed", True)) else "run time"


CAUTION = ("Quasi-static estimate: confirm every setup change with qualified engineers and "
           "track testing, within the rules of the sanctioning body and local law.")


def _nan_none(x):
    x = float(x)
    return None if not math.isfinite(x) else x


def _jsonable(v):
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float):
        return None if not math.isfinite(v) else v
    return v


def solver_threads(n_steps: int) -> int:
    """Numba threads a lap of ``n_steps`` steps uses: 1 unless it is long
    (:data:`PARALLEL_MIN_STEPS`) and the machine has :data:`PARALLEL_MIN_CORES` cores; then the
    numba thread count, which sweep workers set to 1 (so N workers use N cores)."""
    cores = _cores()
    if n_steps < PARALLEL_MIN_STEPS or cores < PARALLEL_MIN_CORES:
        return 1
    import numba

    return min(numba.get_num_threads(), cores)


@functools.cache
def _cores() -> int:
    """The machine's CPU count (asked once: the call reads /sys, 20 µs a lap)."""
    return os.cpu_count() or 1


@contextlib.contextmanager
def _threads(n: int):
    """Run the parallel kernels on ``n`` numba threads (this thread's setting, restored);
    yields True when they should run (``n`` > 1). With ``n`` = 1 the serial twins run and
    numba's thread pool is never touched: a process that has not started it can fork
    safely (a sweep's workers are forked from it, see :mod:`lapbalance.sweep`)."""
    if n <= 1:
        yield False
        return
    import numba

    before = numba.get_num_threads()
    if n != before:
        numba.set_num_threads(n)
    try:
        yield True
    finally:
        if n != before:
            numba.set_num_threads(before)


def check_start_speed(start_speed_kph: float | None) -> None:
    """Refuse a start speed [km/h] that is not a finite speed >= 0 (None: the default)."""
    if start_speed_kph is not None and not (math.isfinite(start_speed_kph)
                                            and start_speed_kph >= 0.0):
        raise InputError(f"= {start_speed_kph:g} km/h must be a finite speed >= 0 km/h "
                         "(0 = standing start)", "start_speed_kph")


#: A closed lap's trace must arrive at its start speed to this [m/s] (relative, per m/s of
#: speed): then the closing step's a_x matches its speed change to about 1e-7 m/s².
CLOSE_TOL = 1e-9


def _closed_trace(kappa, grade, bank, vlim, ds, p, gears, trpm, tnm) -> np.ndarray:
    """Speed trace [m/s] of a closed lap whose arrays start at its slowest step and repeat it
    at the end: periodic, the speed it arrives with equals the speed it starts with.

    A lap normally starts at its slowest step's corner limit, and arrives there at it (the
    limit caps the speed, the backward pass brakes into it). A car that never reaches that
    limit (power-limited all round, e.g. a banked bowl taken flat) arrives slower than it
    started; then the start speed is the fixed point of arrival(start), found by the secant
    method (a lap forgets most of its start speed, so two or three laps settle it).
    """
    n = len(kappa) - 1
    x = float(vlim[0])

    def run(v0):
        tr = _speed_passes_kernel(kappa, grade, bank, vlim, ds, v0, v0, p, gears, trpm, tnm,
                                  FORCE_TOL)
        return tr, float(tr[n] - tr[0])

    tr, h = run(x)
    if h >= -CLOSE_TOL * max(x, 1.0):
        return tr
    x_prev, h_prev = x, h
    x = float(tr[n])
    for _ in range(40):
        tr, h = run(x)
        if abs(h) <= CLOSE_TOL * max(x, 1.0):
            return tr
        xn = x - h * (x - x_prev) / (h - h_prev) if h != h_prev else x + h
        if not 0.0 < xn <= float(vlim[0]):
            xn = min(max(x + h, 0.0), float(vlim[0]))  # plain fixed-point step
        x_prev, h_prev, x = x, h, xn
    return tr


def simulate_lap(car: Car, track, *, start_speed_kph: float | None = None,
                 liftoff_ay_threshold: float = LIFTOFF_AY_THRESHOLD,
                 assess_liftoff: bool = True) -> LapResult:
    """Run ``car`` over ``track`` with the quasi-static solver.

    Parameters
    ----------
    car : Car
        The car (see :func:`lapbalance.load_car`).
    track : Track
        The track (see :func:`lapbalance.load_track`).
    start_speed_kph : float, optional
        Open tracks only: speed at the start line [km/h]; 0 (default) is a standing start.
        Closed tracks always start at their slowest point so the lap closes on itself.
    liftoff_ay_threshold : float
        Lateral acceleration above which a step counts as cornering for the lift-off check.
        [m/s²]
    assess_liftoff : bool
        Group lift-off results per corner (:mod:`lapbalance.liftoff`).

    Returns
    -------
    LapResult
    """
    check_start_speed(start_speed_kph)
    pt = car.powertrain
    if (pt.power <= 0.0 if pt.mode == "power" else max(pt.torque_curve_nm) <= 0.0):
        key = "power_kw" if pt.mode == "power" else "torque_curve_nm"
        raise InfeasibleError("the engine gives no drive force (zero power or torque), so the "
                              "car cannot drive a lap; give the engine's power or torque",
                              car.source or "car", f"powertrain.{key}")
    p, gears, trpm, tnm = car_parameters(car)
    n = len(track.distance_m)
    if n < 3:
        raise InputError("track has fewer than 3 points after resampling", track.source)
    ds = float(track.step_m)
    kappa = np.ascontiguousarray(track.curvature_1pm, dtype=float)
    grade = np.ascontiguousarray(track.grade_rad, dtype=float)
    bank = np.ascontiguousarray(track.bank_rad, dtype=float)
    for name, arr in (("curvature", kappa), ("grade", grade), ("bank", bank)):
        if not np.all(np.isfinite(arr)):
            raise InputError(f"track {name} has non-finite values", track.source)
    vcap = speed_cap(car)
    nchunks = 8 if n > 400 else 1
    threads = solver_threads(n)
    with _threads(threads) as par:
        vlim = (_corner_limits_parallel if par else _corner_limits_kernel)(
            kappa, grade, bank, vcap, p, SPEED_TOL, nchunks)
    bad = np.flatnonzero(vlim <= 0.0)
    if bad.size:
        i = int(bad[0])
        raise InfeasibleError(
            f"the car cannot hold the track at {track.distance_m[i]:.0f} m even at "
            f"{_k.V_MIN:g} m/s (radius {_radius(kappa[i])}, grade "
            f"{math.degrees(grade[i]):.1f}°): grip too low or the car unloads an axle there; "
            "raise tyres peak_friction or check the track and car", car.source or "car")
    if track.closed:
        start = int(np.argmin(vlim))
        order = np.concatenate([np.arange(start, n), np.arange(0, start)])
        ext = np.concatenate([order, order[:1]])
        vtrace = _closed_trace(kappa[ext], grade[ext], bank[ext], vlim[ext], ds, p, gears,
                               trpm, tnm)
        v = np.empty(n)
        v[order] = vtrace[:n]
        closed_tail_speed = None
    else:
        v0 = 0.0 if start_speed_kph is None else start_speed_kph / 3.6
        v = _speed_passes_kernel(kappa, grade, bank, vlim, ds, v0, math.nan, p, gears, trpm,
                                 tnm, FORCE_TOL)
        closed_tail_speed = math.nan
    if track.closed:
        tail = float(v[0])
    else:
        tail = closed_tail_speed
    with _threads(threads) as par:
        res = (_final_pass_parallel if par else _final_pass_kernel)(
            v, kappa, grade, bank, ds, tail, vcap, p, gears, trpm, tnm, FORCE_TOL,
            liftoff_ay_threshold)
    vnext = np.append(v[1:], v[0] if track.closed else v[-1])
    vsum = v + vnext
    if np.any(vsum[: n if track.closed else n - 1] <= 0.0):
        raise InfeasibleError("the car does not move (zero drive force at standstill); check "
                              "powertrain power/torque", car.source or "car",
                              "powertrain")
    dt = np.where(vsum > 0, 2.0 * ds / np.where(vsum > 0, vsum, 1.0), 0.0)
    if not track.closed:
        dt[-1] = 0.0
    time = np.concatenate([[0.0], np.cumsum(dt)[:-1]])
    lap_time = float(dt.sum())
    with _threads(threads) as par:
        mres = (_liftoff_margins_parallel if par else _liftoff_margins_kernel)(
            kappa, grade, bank, vlim, np.ascontiguousarray(res[:, _k.NOUT + 6]), p, gears,
            MARGIN_TOL, nchunks)
    ch = _channels(car, track, v, vlim, res, time)
    _margin_channels(ch, vlim, mres)
    if np.any(ch["floor_contact"] > 0):
        first = float(track.distance_m[np.argmax(ch["floor_contact"] > 0)])
        warnings.warn(f"the floor touches the ground at {int(np.sum(ch['floor_contact']))} "
                      f"steps (first at {first:.0f} m); aero there is extrapolated",
                      PhysicsWarning, stacklevel=2)
    if np.any(ch["aero_map_outside"] > 0):
        warnings.warn("ride heights leave the aero map's range at "
                      f"{int(np.sum(ch['aero_map_outside']))} steps; the map is held at its "
                      "edge there", PhysicsWarning, stacklevel=2)
    if not np.all(np.isfinite(ch["speed_mps"])) or not math.isfinite(lap_time):
        raise InfeasibleError("the solver produced non-finite speeds; check the car and track",
                              car.source or "car")
    sectors = _sectors(track, time, lap_time)
    corners = corner_table(track, ch)
    result = LapResult(car, track, lap_time, ch, corners, sectors,
                       {"liftoff_ay_threshold_mps2": liftoff_ay_threshold,
                        "step_m": ds, "speed_cap_mps": vcap,
                        "start_speed_kph": start_speed_kph,
                        "line": getattr(track, "line", "centreline"),
                        **({"line_car_width_m": float(track.car_width_m),
                            "line_margin_m": float(track.margin_m)}
                           if getattr(track, "line", "centreline") != "centreline" else {})})
    if assess_liftoff:
        masks = {cr.id: _corner_mask(track, cr) for cr in getattr(track, "corners", ()) or ()}
        result = liftoff.assess(result, masks=masks)
    return result


def _radius(k):
    return "straight" if abs(k) < 1e-9 else f"{1 / abs(k):.0f} m"


def _channels(car: Car, track, v, vlim, res, time) -> dict[str, np.ndarray]:
    K = _k
    c = K.NOUT
    ch: dict[str, np.ndarray] = {}
    ch["distance_m"] = np.asarray(track.distance_m, float)
    ch["time_s"] = time
    ch["x_m"] = np.asarray(track.x_m, float)
    ch["y_m"] = np.asarray(track.y_m, float)
    ch["z_m"] = np.asarray(getattr(track, "z_m", np.zeros_like(v)), float)
    off = getattr(track, "line_offset_m", None)
    ch["line_offset_m"] = np.zeros(len(v)) if off is None else np.asarray(off, float)
    ch["curvature_1pm"] = np.asarray(track.curvature_1pm, float)
    ch["grade_rad"] = np.asarray(track.grade_rad, float)
    ch["bank_rad"] = np.asarray(track.bank_rad, float)
    cid = np.zeros(len(v))
    for j, cr in enumerate(getattr(track, "corners", ()) or ()):
        cid[_corner_mask(track, cr)] = j + 1
    ch["corner_id"] = cid
    ch["speed_mps"] = v
    ch["speed_kph"] = v * 3.6
    ch["speed_limit_mps"] = vlim
    ch["ax_mps2"] = res[:, K.O_AX]
    ch["ay_mps2"] = res[:, K.O_AY]
    ch["gear"] = res[:, c + 0]
    ch["rpm"] = res[:, c + 1]
    ch["drive_force_n"] = res[:, c + 2]
    ch["brake_force_n"] = res[:, c + 3]
    ch["engine_force_n"] = res[:, c + 4]
    ch["rolling_resistance_n"] = res[:, K.O_RR]
    ch["drag_n"] = res[:, K.O_DRAG]
    ch["downforce_n"] = res[:, K.O_DOWNF]
    ch["static_front_n"] = res[:, K.O_STATF]
    ch["static_rear_n"] = res[:, K.O_STATR]
    ch["aero_front_n"] = res[:, K.O_AEROF]
    ch["aero_rear_n"] = res[:, K.O_AEROR]
    ch["ground_transfer_n"] = res[:, K.O_GT]
    ch["lat_transfer_front_n"] = res[:, K.O_LATF]
    ch["lat_transfer_rear_n"] = res[:, K.O_LATR]
    ch["fz_front_n"] = res[:, K.O_FZF]
    ch["fz_rear_n"] = res[:, K.O_FZR]
    ch["fz_front_outer_n"] = res[:, K.O_FZFO]
    ch["fz_front_inner_n"] = res[:, K.O_FZFI]
    ch["fz_rear_outer_n"] = res[:, K.O_FZRO]
    ch["fz_rear_inner_n"] = res[:, K.O_FZRI]
    ch["wheel_lift_front"] = res[:, K.O_LIFTF]
    ch["wheel_lift_rear"] = res[:, K.O_LIFTR]
    ch["fx_front_n"] = res[:, K.O_FXF]
    ch["fx_rear_n"] = res[:, K.O_FXR]
    ch["fy_front_n"] = res[:, K.O_FYF]
    ch["fy_rear_n"] = res[:, K.O_FYR]
    ch["usage_front"] = res[:, K.O_UF]
    ch["usage_rear"] = res[:, K.O_UR]
    ch["balance_index"] = res[:, K.O_UR] - res[:, K.O_UF]
    claf, clar, cda = res[:, K.O_CLAF], res[:, K.O_CLAR], res[:, K.O_CDA]
    tot = claf + clar
    shift = cda * car.chassis.cg_height / car.chassis.wheelbase
    defined = np.abs(tot) > 1e-9  # no downforce: the split is undefined (NaN)
    ch["aero_balance_front"] = np.divide(claf, tot, out=np.full_like(tot, np.nan),
                                         where=defined)
    ch["aero_balance_front_ground"] = np.divide(claf - shift, tot, out=np.full_like(tot, np.nan),
                                                where=defined)
    ch["ride_height_front_mm"] = res[:, K.O_RHF] * 1e3
    ch["ride_height_rear_mm"] = res[:, K.O_RHR] * 1e3
    with np.errstate(invalid="ignore"):
        ch["floor_contact"] = ((res[:, K.O_RHF] <= 0) | (res[:, K.O_RHR] <= 0)).astype(float)
    ch["aero_map_outside"] = res[:, K.O_MAPOUT]
    ch["limit"] = res[:, c + 5]
    ch["liftoff_checked"] = res[:, c + 6]
    ch["overrun_force_n"] = res[:, c + 7]
    ch["liftoff_balance_shift"] = res[:, c + 8]
    ch["liftoff_front_load_shift_n"] = res[:, c + 9]
    ch["liftoff_usage_front"] = res[:, c + 10]
    ch["liftoff_usage_rear"] = res[:, c + 11]
    ch["liftoff_ax_mps2"] = res[:, c + 12]
    ch["coast_balance_shift"] = res[:, c + 14]
    ch["coast_front_load_shift_n"] = res[:, c + 15]
    ch["coast_usage_front"] = res[:, c + 16]
    ch["coast_usage_rear"] = res[:, c + 17]
    return ch


def _margin_channels(ch: dict[str, np.ndarray], vlim: np.ndarray, m: np.ndarray) -> None:
    """Add the lift-off margin channels (kernel columns ``M_*``) to ``ch``."""
    K = _k
    ch["liftoff_step_margin"] = m[:, K.M_LAMBDA]
    ch["liftoff_safe_speed_mps"] = m[:, K.M_VSAFE]
    ch["liftoff_step_speed_margin_kph"] = (vlim - m[:, K.M_VSAFE]) * 3.6
    ch["liftoff_ay_limit_mps2"] = m[:, K.M_AYLIM]
    ch["liftoff_step_rear_reserve"] = m[:, K.M_RESERVE]
    ch["coast_step_margin"] = m[:, K.M_LAMBDA_COAST]
    ch["coast_safe_speed_mps"] = m[:, K.M_VSAFE_COAST]
    ch["coast_step_rear_reserve"] = m[:, K.M_RESERVE_COAST]


def _sectors(track, time, lap_time) -> list[dict]:
    starts = list(getattr(track, "sector_starts_m", ()) or ())
    if not starts:
        L = track.length_m
        starts = [0.0, L / 3, 2 * L / 3]
    d = np.asarray(track.distance_m)
    out = []
    for j, s0 in enumerate(starts):
        s1 = starts[j + 1] if j + 1 < len(starts) else track.length_m
        t0 = float(np.interp(s0, d, time))
        t1 = float(np.interp(s1, d, time)) if j + 1 < len(starts) else lap_time
        out.append({"sector": j + 1, "start_m": float(s0), "end_m": float(s1),
                    "time_s": t1 - t0})
    return out


def corner_table(track, ch: dict[str, np.ndarray]) -> list[dict]:
    """Per-corner figures: min speed and where, limiting axle at the slowest point, balance.

    Returns
    -------
    list of dict
        id, direction, entry_m, apex_m, exit_m, min_radius_m, min_speed_kph,
        min_speed_at_m, limiting_axle, balance_index_at_min, usage_front_at_min,
        usage_rear_at_min, aero_balance_front_at_min, speed_at_apex_kph.
    """
    rows = []
    d = ch["distance_m"]
    for cr in getattr(track, "corners", ()) or ():
        mask = _corner_mask(track, cr)
        if not mask.any():
            continue
        idx = np.flatnonzero(mask)
        j = idx[np.argmin(ch["speed_mps"][idx])]
        lim = int(ch["limit"][j])
        uf, ur = float(ch["usage_front"][j]), float(ch["usage_rear"][j])
        axle = LIMIT_NAMES[lim] if lim in (_k.LIM_FRONT, _k.LIM_REAR) else (
            "front" if uf >= ur else "rear")
        rows.append({
            "id": int(cr.id), "direction": cr.direction, "entry_m": float(cr.entry_m),
            "apex_m": float(cr.apex_m), "exit_m": float(cr.exit_m),
            "min_radius_m": float(cr.min_radius_m),
            "min_speed_kph": float(ch["speed_mps"][j] * 3.6), "min_speed_at_m": float(d[j]),
            "limiting_axle": axle, "balance_index_at_min": float(ch["balance_index"][j]),
            "usage_front_at_min": uf, "usage_rear_at_min": ur,
            "aero_balance_front_at_min": _nan_none(ch["aero_balance_front"][j]),
            "speed_at_apex_kph": float(np.interp(cr.apex_m, d, ch["speed_mps"]) * 3.6),
        })
    return rows


def steady_state(car: Car, speed: float, curvature: float = 0.0, grade: float = 0.0,
                 bank: float = 0.0, ax: float = 0.0) -> dict[str, float]:
    """Evaluate one quasi-static state (for checks and reports).

    Parameters
    ----------
    car : Car
    speed : float
        [m/s]
    curvature : float
        [1/m], left positive.
    grade, bank : float
        [rad]
    ax : float
        Longitudinal acceleration to hold. [m/s²]

    Returns
    -------
    dict
        control force [N] and every state quantity (keys as the ``O_*`` names, lower case).
    """
    p, gears, trpm, tnm = car_parameters(car)
    out = np.full(_k.NOUT, np.nan)
    F = _k.control_for_ax(speed, curvature, grade, bank, ax, p, out)
    d = _state_dict(out)
    d["control_n"] = float(F)
    d["g"] = G0
    return d


def limits_at(car: Car, speed: float, curvature: float = 0.0, grade: float = 0.0,
              bank: float = 0.0) -> dict[str, float]:
    """Longitudinal limits of one quasi-static state.

    Parameters
    ----------
    car : Car
    speed : float
        [m/s]
    curvature : float
        [1/m], left positive.
    grade, bank : float
        [rad]

    Returns
    -------
    dict
        ``max_accel_mps2`` (largest a_x the powertrain and both axles give) [m/s²],
        ``max_decel_mps2`` (largest deceleration with the fixed brake bias, positive) [m/s²],
        ``engine_force_n``, ``max_drive_n``, ``min_control_n`` [N], ``corner_limit_mps``
        (steady corner-speed limit at this curvature) [m/s].
    """
    p, gears, trpm, tnm = car_parameters(car)
    out = np.full(_k.NOUT, np.nan)
    fa = _k.max_accel_control(speed, curvature, grade, bank, p, gears, trpm, tnm,
                              out, FORCE_TOL)
    _k.state_control(speed, curvature, grade, bank, fa, p, out)
    a_acc = float(out[_k.O_AX])
    fb = _k.max_decel_control(speed, curvature, grade, bank, p, out, FORCE_TOL)
    _k.state_control(speed, curvature, grade, bank, fb, p, out)
    a_brk = -float(out[_k.O_AX])
    vl = _k.corner_limit(curvature, grade, bank, 0.0, 0.0, speed_cap(car), p,
                         out, SPEED_TOL)
    return {"max_accel_mps2": a_acc, "max_decel_mps2": a_brk,
            "engine_force_n": float(_k.engine_force(speed, p, gears, trpm, tnm)),
            "max_drive_n": float(fa), "min_control_n": float(fb), "corner_limit_mps": float(vl)}


def evaluate_forces(car: Car, speed: float, curvature: float = 0.0, grade: float = 0.0,
                    bank: float = 0.0, drive_n: float = 0.0, brake_n: float = 0.0
                    ) -> dict[str, float]:
    """Evaluate one state with given forces at the wheels.

    Parameters
    ----------
    drive_n : float
        Drive force split by the torque split; negative = engine overrun. [N]
    brake_n : float
        Brake force (>= 0) split by the brake bias. [N]

    Returns
    -------
    dict
        Every state quantity (keys as the ``O_*`` names in lower case, SI units).
    """
    p, gears, trpm, tnm = car_parameters(car)
    out = np.full(_k.NOUT, np.nan)
    _k.state(speed, curvature, grade, bank, drive_n, brake_n, p, out)
    return _state_dict(out)


#: Kernel state-output index -> lower-case name (``O_FZF`` -> ``"fzf"``).
_STATE_NAMES = {getattr(_k, n): n[2:].lower() for n in dir(_k) if n.startswith("O_")}


def _state_dict(out: np.ndarray) -> dict[str, float]:
    """A kernel state vector as {name: value} (names from the ``O_*`` indices)."""
    return {_STATE_NAMES[i]: float(out[i]) for i in range(_k.NOUT)}
