"""Car -> flat kernel arrays (the compiled boundary of the solver).

:func:`car_parameters` flattens a :class:`~lapbalance.car.Car` into the float arrays the numba
kernels of :mod:`lapbalance.kernels` take (indices ``P_*``). It lives apart from the lap solver
so that modules the solver imports (such as :mod:`lapbalance.liftoff`) can call the kernels
without importing :mod:`lapbalance.lap`.
"""

from __future__ import annotations

import math

import numpy as np

from lapbalance import kernels as _k
from lapbalance.car import Car

#: Speed tolerance of the corner-limit search [m/s] and force tolerance of the
#: longitudinal searches [N] (docs/method.md, the solver: stop at a tolerance that matters).
SPEED_TOL = 1e-3
FORCE_TOL = 0.5
#: Speed tolerance of the lift-off margin search [m/s] (the search also stops once the rear
#: usage after the lift is within 1e-5 of 1, which pins the margin to ~1e-5).
MARGIN_TOL = 5e-4


def _bin_table(grid: np.ndarray) -> np.ndarray:
    """Bin table of an increasing grid [m] for the kernels' cell search: 1 / bin width
    [1/m], the bin count, then for each bin the cell holding its start. Bins are as wide as
    the narrowest cell, so every point of a bin lies in that cell or the next."""
    h = float(np.min(np.diff(grid)))
    nb = int(math.floor((grid[-1] - grid[0]) / h)) + 1
    starts = grid[0] + h * np.arange(nb)
    cells = np.clip(np.searchsorted(grid, starts, side="right") - 1, 0, grid.size - 2)
    return np.concatenate([[1.0 / h, float(nb)], cells.astype(float)])


def car_parameters(car: Car) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Flatten a car into the kernel arrays (p, gear ratios, torque-curve rpm, torque N·m).

    ``p`` holds the scalars (``P_*``) and, after them, the aero map (if any) packed as the
    kernels read it (``MAP_*`` in :mod:`lapbalance.kernels`): grid sizes, the front and rear
    ride-height grids [m], then the front, rear and drag area tables [m2] row-major (front
    ride height first), and a bin table per grid for the cell search. One array for the
    whole car keeps every kernel call cheap.
    """
    ch, ae, ty, pt, su = car.chassis, car.aero, car.tyres, car.powertrain, car.suspension
    p = np.zeros(_k.MAP_DATA)  # the scalars, and map sizes 0 (no map) until packed below
    p[_k.P_MASS] = ch.mass
    p[_k.P_L] = ch.wheelbase
    p[_k.P_A] = ch.a
    p[_k.P_B] = ch.b
    p[_k.P_H] = ch.cg_height
    p[_k.P_TF] = ch.track_front
    p[_k.P_TR] = ch.track_rear
    p[_k.P_ZF] = su.roll_centre_front
    p[_k.P_ZR] = su.roll_centre_rear
    p[_k.P_KF] = su.roll_stiffness_front_share
    p[_k.P_CLAF] = ae.front_area_cg
    p[_k.P_CLAR] = ae.rear_area_cg
    p[_k.P_CDA] = ae.drag_area
    p[_k.P_RHO] = car.air.density
    p[_k.P_CRR] = ty.rolling_resistance
    for base, t in ((_k.P_MUXF, ty.front), (_k.P_MUXR, ty.rear)):
        p[base + 0] = t.mu_longitudinal
        p[base + 1] = t.k_longitudinal
        p[base + 2] = t.mu_lateral
        p[base + 3] = t.k_lateral
        p[base + 4] = t.reference_load
    for base, t in ((_k.P_TYF, ty.front), (_k.P_TYR, ty.rear)):
        for off, k in ((0, t.k_lateral), (3, t.k_longitudinal)):
            p[base + off] = 1.0 + k
            p[base + off + 1] = k / t.reference_load
            p[base + off + 2] = (1.0 + k) * t.reference_load / (2.0 * k) if k > 0 else math.inf
    p[_k.P_DRIVEF] = pt.front_drive_share
    p[_k.P_BIASF] = car.brakes.bias_front
    p[_k.P_ETA] = pt.efficiency
    p[_k.P_RW] = pt.wheel_radius
    p[_k.P_FINAL] = pt.final_drive
    p[_k.P_SHIFT] = pt.shift_rpm
    p[_k.P_REVLIM] = pt.rev_limit_rpm
    p[_k.P_POWERMODE] = 1.0 if pt.mode == "power" else 0.0
    p[_k.P_POWER] = pt.power
    p[_k.P_FTMAX] = pt.max_tractive_force
    p[_k.P_OVERRUN] = pt.overrun_torque
    rh_f = su.static_ride_height_front
    rh_r = su.static_ride_height_rear
    p[_k.P_RHF0] = rh_f if rh_f is not None else math.nan
    p[_k.P_RHR0] = rh_r if rh_r is not None else math.nan
    p[_k.P_HEAVEF] = su.heave_rate_front
    p[_k.P_HEAVER] = su.heave_rate_rear
    p[_k.P_CDAMAX] = ae.drag_area
    p[_k.P_CLAMAX] = ae.front_area_cg + ae.rear_area_cg
    amap = ae.aero_map
    if amap is not None:
        p[_k.P_USEMAP] = 1.0
        mx = np.asarray(amap.fine_rh_front_m, dtype=float)
        my = np.asarray(amap.fine_rh_rear_m, dtype=float)
        tables = [np.asarray(t, dtype=float).reshape(mx.size, my.size) for t in
                  (amap.fine_front_area_cg, amap.fine_rear_area_cg, amap.fine_drag_area)]
        # the clamped bilinear map stays within its table entries
        p[_k.P_CDAMAX] = max(float(tables[2].max()), ae.drag_area)
        p[_k.P_CLAMAX] = max(float((tables[0] + tables[1]).max()),
                             ae.front_area_cg + ae.rear_area_cg)
        p = np.concatenate([p[:_k.MAP_NX], [float(mx.size), float(my.size)], mx, my,
                            *[t.ravel() for t in tables], _bin_table(mx), _bin_table(my)])
    gears = np.asarray(pt.gear_ratios, dtype=float)
    trpm = np.asarray(pt.torque_curve_rpm or (0.0, 1.0), dtype=float)
    tnm = np.asarray(pt.torque_curve_nm or (0.0, 0.0), dtype=float)
    return np.ascontiguousarray(p), gears, trpm, tnm


def speed_cap(car: Car) -> float:
    """Highest speed the car can reach [m/s]: the rev limiter in top gear."""
    return car.powertrain.top_speed_rev_limited()
