r"""Tyre grip: peak friction with load sensitivity, axle capacity, friction ellipse, usage.

Scalar functions are numba-compiled (``cache=True``) so the solver kernels call them directly;
``*_array`` wrappers vectorise them for Python callers. Units: loads and forces [N], friction
coefficients and usage [-].

Model
-----
Per tyre, linear load sensitivity (normalised form; data: Milliken & Milliken, Race Car
Vehicle Dynamics, 1995, Fig. 2.9 data; linear form mu = a + b Fz) [1]:

.. math:: \mu(F_z) = \mu_0 \left(1 - k \frac{F_z - F_{z0}}{F_{z0}}\right)

The force capacity :math:`\mu(F_z) F_z` is held at its peak beyond
:math:`F_z^* = (1 + k) F_{z0} / (2k)`, so capacity never falls as load rises (docs/method.md).
The Magic Formula peak option, :math:`\mu = p_{D1} + p_{D2}\,df_z` with
:math:`df_z = (F_z - F_{z0})/F_{z0}` (Pacejka, Tire and Vehicle Dynamics, ch. 4, from
memory), is the same law with :math:`\mu_0 = p_{D1}`, :math:`k = -p_{D2}/p_{D1}` and is
mapped to it on load.

Axle capacity is the sum over its two tyres (drive and brake torque assumed shared ideally
between the wheels of an axle). Combined slip uses the friction ellipse per axle [2]:
``u = sqrt((Fx/Fx_cap)^2 + (Fy/Fy_cap)^2)``; balance index ``B = u_rear - u_front``.

References
----------
.. [1] W.F. Milliken, D.L. Milliken, Race Car Vehicle Dynamics, SAE, 1995, ch. 2 (load
       sensitivity, Fig. 2.9).
.. [2] Friction ellipse as used in point-mass lap simulation, e.g. Lenzo & Rossi, Applied
       Sciences 10(4):1498, 2020.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, vectorize


@njit(cache=True, error_model="numpy")
def tyre_capacity(fz, mu0, k, fz0):
    """Peak force capacity of one tyre [N] at vertical load ``fz`` [N].

    Parameters
    ----------
    fz : float
        Vertical load on the tyre; zero or negative means the wheel is off the ground. [N]
    mu0 : float
        Peak friction coefficient at the reference load. [-]
    k : float
        Load sensitivity: fractional drop of mu per extra reference load. [-]
    fz0 : float
        Reference load. [N]

    Returns
    -------
    float
        mu(Fz)·Fz, held at its maximum beyond the peak load. [N]
    """
    if fz <= 0.0:
        return 0.0
    if k > 0.0:
        fz_peak = (1.0 + k) * fz0 / (2.0 * k)
        if fz > fz_peak:
            fz = fz_peak
    return mu0 * fz * (1.0 - k * (fz - fz0) / fz0)


@njit(cache=True, error_model="numpy")
def load_factor(fz, one_plus_k, k_over_fz0, fz_peak):
    """mu(Fz)·Fz / mu0 [N] with the constants of :func:`tyre_capacity` precomputed.

    ``one_plus_k = 1 + k``, ``k_over_fz0 = k / Fz0`` [1/N], ``fz_peak`` [N] (inf when k = 0);
    the same law without divisions, for the solver's hot loop.
    """
    if fz <= 0.0:
        return 0.0
    if fz > fz_peak:
        fz = fz_peak
    return fz * (one_plus_k - k_over_fz0 * fz)


@njit(cache=True, error_model="numpy")
def friction_coefficient(fz, mu0, k, fz0):
    """Effective friction coefficient capacity/Fz [-] at load ``fz`` [N]."""
    if fz <= 0.0:
        return 0.0
    return tyre_capacity(fz, mu0, k, fz0) / fz


@njit(cache=True, error_model="numpy")
def axle_capacity(fz_outer, fz_inner, mu0, k, fz0):
    """Axle force capacity [N]: the sum of its two tyres' capacities at their loads [N]."""
    return tyre_capacity(fz_outer, mu0, k, fz0) + tyre_capacity(fz_inner, mu0, k, fz0)


@njit(cache=True, error_model="numpy")
def usage(fx, fy, cap_x, cap_y):
    """Friction-ellipse usage [-] of an axle with demands fx, fy [N] and capacities [N].

    Returns a large number (1e9) when a capacity is zero and the demand is not.
    """
    if cap_x <= 0.0 or cap_y <= 0.0:
        if fx == 0.0 and fy == 0.0:
            return 0.0
        return 1e9
    return math.sqrt((fx / cap_x) ** 2 + (fy / cap_y) ** 2)


@njit(cache=True, error_model="numpy")
def available_longitudinal(fy, cap_x, cap_y):
    """Longitudinal force [N] an axle can still carry with lateral demand fy [N] (ellipse)."""
    if cap_y <= 0.0:
        return 0.0
    r = 1.0 - (fy / cap_y) ** 2
    return cap_x * math.sqrt(r) if r > 0.0 else 0.0


def _capacity_scalar(fz, mu0, k, fz0):
    return tyre_capacity(fz, mu0, k, fz0)


_CAPACITY_UFUNC = []


def tyre_capacity_array(fz, mu0, k, fz0):
    """Vectorised :func:`tyre_capacity` [N] (a numpy ufunc, built on first use so that
    importing this module does not load it)."""
    if not _CAPACITY_UFUNC:
        _CAPACITY_UFUNC.append(vectorize(["float64(float64, float64, float64, float64)"],
                                         cache=True)(_capacity_scalar))
    return _CAPACITY_UFUNC[0](fz, mu0, k, fz0)


def peak_load(k: float, fz0: float) -> float:
    """Load [N] at which mu(Fz)·Fz peaks for load sensitivity k [-] and reference load [N]."""
    return np.inf if k <= 0 else (1.0 + k) * fz0 / (2.0 * k)
