"""First run: compile the solver kernels explicitly, with progress, when numba's cache is cold.

The kernels (:mod:`lapbalance.kernels`) are compiled by numba on first use and cached on disk
(``__pycache__`` beside the module, or ``NUMBA_CACHE_DIR``); compiling takes 20-40 s on two
cores, and without a word the first command would look hung. :func:`cache_is_cold` checks
cheaply whether the cache holds a current entry for each entry-point kernel: it reads each
kernel's cache index (a few hundred bytes) and compares its source stamp, as numba does when
it loads the cache, without compiling anything. :func:`prepare` then compiles every kernel the
commands use, one stage at a time, on a tiny built-in car and track, reporting each stage.
"""

from __future__ import annotations

import math
import sys
import threading
import time
from collections.abc import Callable

#: Entry-point kernels called from Python (name in :mod:`lapbalance.kernels`). Their callees
#: are compiled with them.
#: The lap runs the serial twins of the parallel loops (``corner_limits_serial``...); the
#: parallel ones compile on first use, only for long laps on many cores
#: (:func:`lapbalance.lap.solver_threads`).
ENTRY_KERNELS = ("corner_limits_serial", "speed_passes", "final_pass_serial",
                 "control_for_ax", "max_accel_control", "max_decel_control", "state_control",
                 "corner_limit", "engine_force", "state", "liftoff_margins_serial",
                 "liftoff_response")
#: Entry-point kernels of the single-track lift-off runs (in
#: :mod:`lapbalance.transient_kernels`); compiled in the same first run, since every command
#: that runs a lap also runs lift-off in time for a car with a ``[transient]`` section.
TRANSIENT_KERNELS = ("integrate", "steady_turn")

#: What the user is told (one wording for every command).
MESSAGE = "preparing the solver, first run only (about half a minute; later runs start at once)"

_TINY_CAR = {
    "name": "warm-up car",
    "chassis": {"mass_kg": 1200.0, "wheelbase_m": 2.6, "front_weight_fraction": 0.5,
                "cg_height_m": 0.5, "track_front_m": 1.6, "track_rear_m": 1.6},
    "aero": {"downforce_area_m2": 1.0, "drag_area_m2": 0.7, "balance_front": 0.45,
             "balance_convention": "cg"},
    "tyres": {"rolling_resistance": 0.01,
              "front": {"peak_friction": 1.4, "load_sensitivity": 0.1},
              "rear": {"peak_friction": 1.4, "load_sensitivity": 0.1}},
    "powertrain": {"drive": "rear", "power_kw": 300.0, "gear_ratios": [3.0, 2.0, 1.4, 1.0],
                   "final_drive": 3.5, "wheel_radius_m": 0.32, "efficiency": 0.9,
                   "shift_rpm": 7000.0, "rev_limit_rpm": 7500.0},
    "brakes": {"bias_front": 0.6},
    "suspension": {"roll_stiffness_front_share": 0.55, "roll_centre_height_front_m": 0.05,
                   "roll_centre_height_rear_m": 0.08},
    "air": {"density_kg_m3": 1.2},
    "transient": {"yaw_inertia_kgm2": 1800.0, "cornering_stiffness_front_n_per_rad": 90000.0,
                  "cornering_stiffness_rear_n_per_rad": 110000.0, "relaxation_length_m": 0.4,
                  "steering_ratio": 14.0},
}


def cold_kernels() -> list[str]:
    """Entry-point kernels without a current on-disk cache entry (empty list: warm)."""
    from lapbalance import kernels as _k
    from lapbalance import transient_kernels as _tk

    cold = []
    for mod, name in [(_k, n) for n in ENTRY_KERNELS] + [(_tk, n) for n in TRANSIENT_KERNELS]:
        d = getattr(mod, name, None)
        if d is None or not hasattr(d, "signatures"):  # absent, or NUMBA_DISABLE_JIT=1
            continue
        if d.signatures:  # already compiled (or loaded) in this process
            continue
        try:
            index = d._cache._cache_file._load_index()
        except Exception:  # noqa: BLE001 - numba internals changed: assume cold, be safe
            index = {}
        if not index:
            cold.append(name)
    return cold


def cache_is_cold() -> bool:
    """True when the first lap would have to compile kernels (see :func:`cold_kernels`)."""
    return bool(cold_kernels())


def _stages():
    import numpy as np

    from lapbalance import lap
    from lapbalance.car import car_from_dict

    car = car_from_dict(_TINY_CAR, "<warm-up car>")
    p, gears, trpm, tnm = lap.car_parameters(car)
    n = 48
    kappa = np.full(n, 1.0 / 60.0)
    kappa[: n // 2] = 0.0
    grade = np.zeros(n)
    bank = np.zeros(n)
    vcap = lap.speed_cap(car)
    box: dict = {}

    def limits():
        box["vlim"] = lap._corner_limits_kernel(kappa, grade, bank, vcap, p,
                                                lap.SPEED_TOL, 1)

    def passes():
        box["v"] = lap._speed_passes_kernel(kappa, grade, bank, box["vlim"], 2.0, 0.0,
                                            math.nan, p, gears, trpm, tnm,
                                            lap.FORCE_TOL)

    def final():
        lap._final_pass_kernel(box["v"], kappa, grade, bank, 2.0, math.nan, vcap, p, gears,
                               trpm, tnm, lap.FORCE_TOL, lap.LIFTOFF_AY_THRESHOLD)

    def margins():
        lap._liftoff_margins_kernel(kappa, grade, bank, box["vlim"], np.ones(n), p, gears,
                                    lap.MARGIN_TOL, 1)
        from lapbalance.liftoff import response_curve

        response_curve(car, 60.0)

    def points():
        lap.steady_state(car, 30.0, 0.01)
        lap.limits_at(car, 30.0, 0.01)
        lap.evaluate_forces(car, 30.0, 0.01, 500.0, 0.0)

    def in_time():
        from lapbalance import transient

        transient.lift_off_run(car, 60.0, 6.0)

    return [("corner speed limits", limits), ("acceleration and braking passes", passes),
            ("force balance and lift-off check", final), ("lift-off margins", margins),
            ("single-state checks", points), ("lift-off runs in time", in_time)]


def prepare(stream=None, show: bool = True) -> float:
    """Compile every kernel the commands use, reporting progress on ``stream`` (stderr).

    On a terminal a spinner with the elapsed time turns while a stage compiles; otherwise one
    line per stage is written. Returns the seconds taken. [s]
    """
    stream = sys.stderr if stream is None else stream
    tty = bool(getattr(stream, "isatty", lambda: False)())
    t0 = time.monotonic()
    stages = _stages()
    say: Callable[[str], None] = (lambda s: (stream.write(s), stream.flush())) if show \
        else (lambda s: None)
    say(f"lapbalance: {MESSAGE}\n")
    for k, (label, fn) in enumerate(stages, start=1):
        head = f"  [{k}/{len(stages)}] {label}"
        stop = threading.Event()
        spin = None
        if tty and show:
            def turn(head=head):
                marks = "|/-\\"
                j = 0
                while not stop.wait(0.25):
                    say(f"\r{head} {marks[j % 4]} {time.monotonic() - t0:.0f} s")
                    j += 1

            spin = threading.Thread(target=turn, daemon=True)
            spin.start()
        else:
            say(f"{head} ...")
        try:
            fn()
        finally:
            stop.set()
            if spin is not None:
                spin.join()
        say(f"\r{head}: done ({time.monotonic() - t0:.0f} s)\n" if tty else
            f" done ({time.monotonic() - t0:.0f} s)\n")
    return time.monotonic() - t0


def ensure_ready(stream=None) -> bool:
    """Compile with progress if the cache is cold; True when it compiled."""
    if not cache_is_cold():
        return False
    prepare(stream)
    return True
