r"""Axle and wheel loads with their parts kept apart (CG convention, docs/method.md).

On a road with grade and banking, with the aero split in the CG convention and ``X`` the sum
of the longitudinal ground forces (drive minus brake minus rolling resistance, positive
forward), moments about the tyre contact points give (Gillespie [1] ch. 1, form (B) of the
two equivalent book-keepings: ground forces at the ground, drag folded into the aero split):

.. math::

    F_{z,f} = m g_n \, b/L + F_{L,f} - X h/L, \qquad
    F_{z,r} = m g_n \, a/L + F_{L,r} + X h/L

where ``a`` is front axle to CG, ``b`` CG to rear axle and ``g_n`` the acceleration normal
to the road (gravity and, on a bank, the centripetal part). Lateral transfer per axle, steady
state, whole mass sprung (Milliken & Milliken [2] ch. 18):

.. math::

    \Delta F_{z,f} = \frac{m a_y}{t_f}\left(\frac{b}{L} z_f + k_f (h - z_{ra})\right), \quad
    \Delta F_{z,r} = \frac{m a_y}{t_r}\left(\frac{a}{L} z_r + (1-k_f)(h - z_{ra})\right)

with ``z_ra = z_f + (z_r - z_f) a/L``. An inner wheel that would go below zero lifts: it carries
zero and the roll moment its axle can no longer take moves to the other axle. Both axles
lifting is a rollover: status :data:`ROLLOVER`.

All functions are numba-compiled scalar functions (usable from kernels); units N, m, m/s².

References
----------
.. [1] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE, 1992, ch. 1 (axle loads).
.. [2] W.F. Milliken, D.L. Milliken, Race Car Vehicle Dynamics, SAE, 1995, ch. 18.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from lapbalance.units import G0

#: Status codes of :func:`lateral_transfer` and the solver's state evaluation.
OK = 0
FRONT_AXLE_UNLOADED = 1
REAR_AXLE_UNLOADED = 2
ROLLOVER = 3

_G = G0


@njit(cache=True, error_model="numpy")
def road_accelerations(v, curvature, grade, bank):
    """Accelerations in the road frame on a graded, banked road.

    Parameters
    ----------
    v : float
        Speed. [m/s]
    curvature : float
        Path curvature, left positive. [1/m]
    grade : float
        Grade angle, positive uphill. [rad]
    bank : float
        Bank angle, positive when the road's left side is lower. [rad]

    Returns
    -------
    tuple
        (a_c, a_y, g_n): centripetal acceleration v²κ (horizontal, left +) [m/s²]; lateral
        acceleration the tyres must supply in the road plane [m/s²]; acceleration normal to
        the road that loads the tyres [m/s²].
    """
    a_c = v * v * curvature
    if bank == 0.0 and grade == 0.0:
        return a_c, a_c, _G
    cb, sb = math.cos(bank), math.sin(bank)
    g_road = _G * math.cos(grade)
    a_y = a_c * cb - g_road * sb
    g_n = g_road * cb + a_c * sb
    return a_c, a_y, g_n


@njit(cache=True, error_model="numpy")
def longitudinal_loads(m, g_n, a, b, L, h, aero_front, aero_rear, x_ground):
    """Axle loads and their parts for net ground force ``x_ground`` [N].

    Returns
    -------
    tuple
        (static_f, static_r, ground_transfer, fz_f, fz_r) [N]; ground_transfer = X h/L is the
        load moved to the rear (negative under braking).
    """
    static_f = m * g_n * b / L
    static_r = m * g_n * a / L
    gt = x_ground * h / L
    return static_f, static_r, gt, static_f + aero_front - gt, static_r + aero_rear + gt


@njit(cache=True, error_model="numpy")
def lateral_transfer(m, a_y, a, b, L, h, t_f, t_r, z_f, z_r, k_f, fz_f, fz_r):
    """Per-axle lateral load transfer with wheel lift [N].

    Parameters
    ----------
    m : float
        Mass. [kg]
    a_y : float
        Lateral acceleration in the road plane (sign ignored). [m/s²]
    a, b, L, h : float
        Front axle to CG, CG to rear axle, wheelbase, CG height. [m]
    t_f, t_r : float
        Track widths. [m]
    z_f, z_r : float
        Roll-centre heights. [m]
    k_f : float
        Front share of the roll stiffness. [-]
    fz_f, fz_r : float
        Axle loads. [N]

    Returns
    -------
    tuple
        (dfz_f, dfz_r, lift_f, lift_r, status): transfer to each axle's outer wheel (>= 0) [N],
        wheel-lift flags (1.0 when the inner wheel lifts), and a status code.
    """
    ay = abs(a_y)
    z_ra = z_f + (z_r - z_f) * a / L
    d = h - z_ra
    dff = m * ay / t_f * ((b / L) * z_f + k_f * d)
    dfr = m * ay / t_r * ((a / L) * z_r + (1.0 - k_f) * d)
    lift_f = 0.0
    lift_r = 0.0
    cap_f = 0.5 * fz_f
    cap_r = 0.5 * fz_r
    if dff > cap_f:
        dfr += t_f * (dff - cap_f) / t_r
        dff = cap_f
        lift_f = 1.0
    if dfr > cap_r:
        excess = t_r * (dfr - cap_r) / t_f
        dfr = cap_r
        lift_r = 1.0
        if lift_f == 1.0:
            return dff, dfr, lift_f, lift_r, ROLLOVER
        dff += excess
        if dff > cap_f * (1.0 + 1e-12):
            return cap_f, dfr, 1.0, lift_r, ROLLOVER
    return dff, dfr, lift_f, lift_r, OK


@njit(cache=True, error_model="numpy")
def axle_loads(m, g_n, a, b, L, h, t_f, t_r, z_f, z_r, k_f, a_y, aero_front, aero_rear,
               x_ground):
    """Axle loads with all parts, wheel loads and lift flags [N].

    Returns
    -------
    tuple
        (static_f, static_r, aero_f, aero_r, ground_transfer, lat_f, lat_r, fz_f, fz_r,
        fz_f_outer, fz_f_inner, fz_r_outer, fz_r_inner, lift_f, lift_r, status).
        ``fz_f = static_f + aero_f - ground_transfer`` and
        ``fz_r = static_r + aero_r + ground_transfer``.
    """
    sf, sr, gt, fzf, fzr = longitudinal_loads(m, g_n, a, b, L, h, aero_front, aero_rear,
                                              x_ground)
    if fzf <= 0.0:
        return (sf, sr, aero_front, aero_rear, gt, 0.0, 0.0, fzf, fzr, 0.0, 0.0, 0.0, 0.0,
                1.0, 0.0, FRONT_AXLE_UNLOADED)
    if fzr <= 0.0:
        return (sf, sr, aero_front, aero_rear, gt, 0.0, 0.0, fzf, fzr, 0.0, 0.0, 0.0, 0.0,
                0.0, 1.0, REAR_AXLE_UNLOADED)
    dff, dfr, lf, lr, st = lateral_transfer(m, a_y, a, b, L, h, t_f, t_r, z_f, z_r, k_f,
                                            fzf, fzr)
    return (sf, sr, aero_front, aero_rear, gt, dff, dfr, fzf, fzr, 0.5 * fzf + dff,
            0.5 * fzf - dff, 0.5 * fzr + dfr, 0.5 * fzr - dfr, lf, lr, st)


def axle_loads_array(car, a_y, aero_front, aero_rear, x_ground, g_n=G0):
    """Vectorised :func:`axle_loads` for a :class:`lapbalance.car.Car` over arrays.

    Parameters
    ----------
    car : Car
        The car (geometry, roll stiffness share, roll centres).
    a_y, aero_front, aero_rear, x_ground : array_like
        Lateral acceleration [m/s²], CG-convention aero loads [N], net ground force [N].
    g_n : array_like
        Acceleration normal to the road [m/s²] (g on a level road).

    Returns
    -------
    dict of numpy arrays
        Keys: static_front_n, static_rear_n, aero_front_n, aero_rear_n, ground_transfer_n,
        lat_transfer_front_n, lat_transfer_rear_n, fz_front_n, fz_rear_n, fz_front_outer_n,
        fz_front_inner_n, fz_rear_outer_n, fz_rear_inner_n, wheel_lift_front,
        wheel_lift_rear, status.
    """
    ch, su = car.chassis, car.suspension
    arrs = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                 (a_y, aero_front, aero_rear, x_ground, g_n)))
    names = ("static_front_n", "static_rear_n", "aero_front_n", "aero_rear_n",
             "ground_transfer_n", "lat_transfer_front_n", "lat_transfer_rear_n", "fz_front_n",
             "fz_rear_n", "fz_front_outer_n", "fz_front_inner_n", "fz_rear_outer_n",
             "fz_rear_inner_n", "wheel_lift_front", "wheel_lift_rear", "status")
    out = {k: np.empty(arrs[0].shape) for k in names}
    for idx in np.ndindex(arrs[0].shape):
        ay, af, ar, x, gn = (float(z[idx]) for z in arrs)
        res = axle_loads(ch.mass, gn, ch.a, ch.b, ch.wheelbase, ch.cg_height, ch.track_front,
                         ch.track_rear, su.roll_centre_front, su.roll_centre_rear,
                         su.roll_stiffness_front_share, ay, af, ar, x)
        for k, val in zip(names, res, strict=True):
            out[k][idx] = val
    return out
