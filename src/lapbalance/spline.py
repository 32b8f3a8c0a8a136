"""Cubic interpolating splines (C² piecewise cubics through given points).

The track reader resamples its fitted centreline with these. They are written here rather
than taken from ``scipy.interpolate`` because importing that package costs about 0.6 s, more
than the whole of a warm ``lapbalance lap`` run should take; the arithmetic is a tridiagonal
solve for the knot slopes (de Boor, *A Practical Guide to Splines*, Springer, 1978, ch. IV)
and a Hermite evaluation, with the same end conditions as the general-purpose routines:

* open curves: "not-a-knot" (the third derivative is continuous at the second and the
  second-last knot);
* closed curves: periodic (value, slope and curvature match at the join).

Abscissae are in metres of arc length in the track reader, but nothing here depends on units.
"""

from __future__ import annotations

import numpy as np


def _tridiag(lower: np.ndarray, diag: np.ndarray, upper: np.ndarray,
             rhs: np.ndarray) -> np.ndarray:
    """Solve a tridiagonal system (``lower[i]`` multiplies x[i-1] in row i, ``upper[i]``
    multiplies x[i+1]; ``lower[0]`` and ``upper[-1]`` unused) for one or more right-hand
    sides (rows of ``rhs`` along axis 0)."""
    from scipy.linalg import solve_banded

    n = diag.shape[0]
    ab = np.zeros((3, n))
    ab[0, 1:] = upper[:-1]
    ab[1] = diag
    ab[2, :-1] = lower[1:]
    return solve_banded((1, 1), ab, rhs, overwrite_ab=True, check_finite=False)


def _slopes_not_a_knot(h: np.ndarray, m: np.ndarray) -> np.ndarray:
    """Knot slopes of the not-a-knot spline with knot gaps ``h`` and chord slopes ``m``."""
    n = h.shape[0] + 1
    if n == 2:
        return np.repeat(m[:1], 2, axis=0)
    if n == 3:  # one parabola through the three points
        # slopes of the interpolating parabola at the three knots
        a = (m[1] - m[0]) / (h[0] + h[1])
        return np.stack([m[0] - a * h[0], m[0] + a * h[0], m[1] + a * h[1]])
    lower = np.zeros(n)
    diag = np.zeros(n)
    upper = np.zeros(n)
    rhs = np.zeros((n,) + m.shape[1:])
    hs = h[:, None] if m.ndim > 1 else h
    # interior rows: continuity of the second derivative
    lower[1:-1] = h[1:]
    diag[1:-1] = 2.0 * (h[:-1] + h[1:])
    upper[1:-1] = h[:-1]
    rhs[1:-1] = 3.0 * (hs[1:] * m[:-1] + hs[:-1] * m[1:])
    # not-a-knot ends
    d0 = h[0] + h[1]
    diag[0] = h[1]
    upper[0] = d0
    rhs[0] = ((h[0] + 2.0 * d0) * h[1] * m[0] + h[0] ** 2 * m[1]) / d0
    d1 = h[-1] + h[-2]
    lower[-1] = d1
    diag[-1] = h[-2]
    rhs[-1] = (h[-1] ** 2 * m[-2] + (2.0 * d1 + h[-1]) * h[-2] * m[-1]) / d1
    return _tridiag(lower, diag, upper, rhs)


def _slopes_periodic(h: np.ndarray, m: np.ndarray) -> np.ndarray:
    """Knot slopes of the periodic spline (the last knot repeats the first)."""
    n = h.shape[0]  # distinct knots
    if n < 3:
        raise ValueError("a periodic spline needs at least 3 distinct knots")
    hs = h[:, None] if m.ndim > 1 else h
    hp = np.roll(h, 1)  # gap before knot i
    mp = np.roll(m, 1, axis=0)
    hps = np.roll(hs, 1, axis=0)
    # row i: h_i s_{i-1} + 2 (h_{i-1} + h_i) s_i + h_{i-1} s_{i+1} = 3 (h_i m_{i-1} + h_{i-1} m_i)
    lower = h.copy()
    diag = 2.0 * (hp + h)
    upper = hp.copy()
    rhs = 3.0 * (hs * mp + hps * m)
    # cyclic corners (row 0 → s_{n-1}: lower[0]; row n-1 → s_0: upper[n-1]) by
    # Sherman-Morrison with u = (gamma, 0, ..., 0, upper[n-1]), v = (1, 0, ..., 0, lower[0]/gamma)
    gamma = -diag[0]
    corner_lo = lower[0]
    corner_up = upper[n - 1]
    d = diag.copy()
    d[0] -= gamma
    d[-1] -= corner_lo * corner_up / gamma
    u = np.zeros(n)
    u[0] = gamma
    u[-1] = corner_up
    both = _tridiag(lower, d, upper, np.column_stack([rhs.reshape(n, -1), u]))
    y = both[:, :-1]
    z = both[:, -1]
    fac = (y[0] + corner_lo * y[-1] / gamma) / (1.0 + z[0] + corner_lo * z[-1] / gamma)
    s = y - np.outer(z, fac)
    s = s.reshape(rhs.shape)
    return np.concatenate([s, s[:1]], axis=0)


def cubic_spline(x: np.ndarray, y: np.ndarray, at: np.ndarray, periodic: bool = False
                 ) -> np.ndarray:
    """Values at ``at`` of the C² cubic spline through (x, y).

    Parameters
    ----------
    x : array (n,)
        Strictly increasing knots [any unit].
    y : array (n,) or (n, k)
        Values at the knots (k curves share the knots) [any unit].
    at : array
        Where to evaluate; outside [x[0], x[-1]] the end pieces are extended. [unit of x]
    periodic : bool
        Periodic end conditions (``y[-1]`` must equal ``y[0]``); else not-a-knot.

    Returns
    -------
    array
        Spline values, shape ``at.shape`` (+ (k,) for 2-D ``y``). [unit of y]
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    at = np.asarray(at, float)
    h = np.diff(x)
    if h.size < 1 or np.any(h <= 0.0):
        raise ValueError("spline knots must be strictly increasing, at least two")
    hs = h[:, None] if y.ndim > 1 else h
    m = np.diff(y, axis=0) / hs
    s = _slopes_periodic(h, m) if periodic else _slopes_not_a_knot(h, m)
    i = np.clip(np.searchsorted(x, at, side="right") - 1, 0, h.size - 1)
    t = at - x[i]
    if y.ndim > 1:
        t = t[..., None]
    hi = hs[i]
    s0 = s[i]
    s1 = s[i + 1]
    mi = m[i]
    c2 = (3.0 * mi - 2.0 * s0 - s1) / hi
    c3 = (s0 + s1 - 2.0 * mi) / (hi * hi)
    return ((c3 * t + c2) * t + s0) * t + y[i]
