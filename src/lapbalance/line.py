"""Driving line inside the track width: the minimum-curvature line.

The path is the track file's reference line moved sideways along its left unit normals ``n``:
``p_i = r_i + α_i n_i`` (``α`` in metres, left positive). The line minimises the squared
curvature summed along it, ``Σ κ_i² h_i ≈ ∫ κ² ds`` (``h_i`` the length of line around point
``i``; weighting by it keeps the result independent of how the points crowd on the inside
of a bend), subject to the band

    ``-w_right_i + c <= α_i <= w_left_i - c``,   ``c = car width / 2 + margin``,

where ``w_left``, ``w_right`` are the distances from the reference line to the left and right
track edges. Curvature is the discrete (Menger) curvature of three consecutive points,
``κ_i = 2 (a × b) / (|a| |b| |a + b|)`` with ``a = p_i - p_(i-1)``, ``b = p_(i+1) - p_i``,
which is exact for points on a circle. Linearised in ``α`` about the current line it is
``κ ≈ κ(α_k) + J (α - α_k)`` with a sparse tridiagonal Jacobian ``J``, so each step is a
bounded linear least-squares problem (:func:`box_least_squares`, an interior-point method on
the banded normal equations; ``scipy.optimize.lsq_linear`` is its reference in the tests).
Re-linearising about the new line up to three times removes the linearisation error (a
Gauss-Newton iteration; it stops once no offset moves by more than ``OFFSET_TOL_M``).

The method is that of Braghin, Cheli, Melzi and Sabbioni (2008), "Race driver model",
Computers & Structures 86(13-14), 1503-1516, in the quadratic-programming form of Heilmeier
et al. (2020), "Minimum curvature trajectory planning and control for an autonomous race car",
Vehicle System Dynamics 58(10), 1497-1527 (there the curvature comes from a spline through the
points and the heading is held at the reference; here the three-point curvature and its exact
Jacobian are used, which needs no spline and converges in the same few iterations).

The line is turned into a new :class:`lapbalance.track.Track` with
:func:`lapbalance.track.make_track` (resampled at the requested step, its own curvature and
corners), so every command runs on it unchanged. That track is a :class:`LineTrack`: it also
carries the lateral offset of each of its steps from the reference line
(``line_offset_m``), which becomes the lap channel of the same name.

Minimum curvature is not minimum time: it ignores where the car is slow or fast. To bend
less in total it spreads the turning over a longer path, so its apex is tighter than the
largest constant-radius arc through an isolated corner, and on a banked oval with long
straights it makes the turns tighter than the centreline's (tests/test_line.py). It is the
common first approximation of the racing line and needs only the track edges.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from lapbalance.errors import InputError
from lapbalance.track import Track, make_track

#: Names of the lines ``--line`` accepts.
LINES = ("centreline", "min-curvature")
#: Clearance kept between the car's side and the track edge on top of half the car's width
#: [m]. Engineering judgement: drivers place the wheels on the edge, not over it; a quarter
#: metre covers the tyre bulge and the scatter of a real lap.
LINE_MARGIN_M = 0.25
#: Car width added to the wider track width when a car file gives no ``overall_width_m`` [m].
#: Common practice: track widths are measured between tyre centres, so the body's widest
#: point is about one tyre tread (0.25-0.35 m) wider.
CAR_WIDTH_OVER_TRACK_M = 0.30
#: Largest number of linearised solves (the first plus up to three re-linearisations). [-]
ITERATIONS = 4
#: Stop re-linearising when no offset moves by more than this. [m]
OFFSET_TOL_M = 5e-3
#: On the inside of a bend the band is cut at this share of the reference line's radius, so
#: that offset normals never cross (a line inside the centre of curvature would loop). [-]
INSIDE_RADIUS_SHARE = 0.9
#: Largest number of interior-point steps per linearised solve. [-]
BOX_MAX_ITER = 80
#: Interior-point stopping: mean complementarity below BOX_GAP times the largest diagonal of
#: the normal matrix, dual residual below BOX_RESID times (1 + |g|). [-]
BOX_GAP = 1e-13
BOX_RESID = 1e-9
#: Cap on the barrier terms of the interior-point matrix, relative to its largest diagonal. [-]
BOX_BIG = 1e20
#: The polish step fixes bounds within this of the interior-point solution. [m]
BOX_ACTIVE_M = 1e-4
#: Ridge added to the normal matrix, relative to its largest diagonal entry. [-]
BOX_RIDGE = 1e-12


@dataclass(frozen=True)
class Band:
    """Allowed lateral offsets of the car's centre at each reference point.

    Attributes
    ----------
    lo_m, hi_m : numpy.ndarray
        (N,) lowest and highest offset ``α`` (left positive) from the reference line. [m]
    width_left_m, width_right_m : numpy.ndarray
        (N,) distance from the reference line to the left and right track edge. [m]
    clearance_m : float
        ``c``: half the car's width plus the margin. [m]
    """

    lo_m: np.ndarray
    hi_m: np.ndarray
    width_left_m: np.ndarray
    width_right_m: np.ndarray
    clearance_m: float


# --------------------------------------------------------------------------------------------
# Widths
# --------------------------------------------------------------------------------------------


def car_width_m(car) -> float:
    """Overall width of ``car`` [m]: ``chassis.overall_width_m`` or, when absent, the wider
    track width plus :data:`CAR_WIDTH_OVER_TRACK_M`."""
    ch = car.chassis
    w = getattr(ch, "overall_width", None)
    if w is not None:
        return float(w)
    return float(max(ch.track_front, ch.track_rear) + CAR_WIDTH_OVER_TRACK_M)


def edge_widths(track, width_m: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Distances from the reference line to the left and right edges at each point [m].

    Parameters
    ----------
    track : Track
        Needs ``width_m`` (total width) and, optionally, ``width_left_m`` (left part; default
        half the width, a centreline). [m]
    width_m : float, optional
        A constant total width that replaces the track's own (``--width-m``). [m]

    Raises
    ------
    InputError
        When the track has no width and none is given.
    """
    n = len(track.distance_m)
    if width_m is not None:
        if not (math.isfinite(width_m) and width_m > 0):
            raise InputError(f"= {width_m:g} must be a positive track width in metres",
                             "--width-m")
        w = np.full(n, float(width_m))
        return 0.5 * w, 0.5 * w
    w = np.asarray(getattr(track, "width_m", np.full(n, np.nan)), dtype=float)
    if w.shape != (n,) or not np.all(np.isfinite(w)):
        raise InputError("the track has no width, which a driving line needs; add a width_m "
                         "column (or width_left_m and width_right_m) to the track file, or "
                         "give --width-m", getattr(track, "source", None) or "track",
                         "width_m")
    left = getattr(track, "width_left_m", None)
    wl = 0.5 * w if left is None else np.asarray(left, dtype=float)
    return wl, w - wl


def band(track, car_width: float, margin_m: float = LINE_MARGIN_M,
         width_m: float | None = None) -> Band:
    """The band the car's centre may use, ``-w_right + c <= α <= w_left - c``.

    Parameters
    ----------
    track : Track
        Reference line with its widths (see :func:`edge_widths`).
    car_width : float
        Overall width of the car. [m]
    margin_m : float
        Clearance to each edge beyond half the car's width. [m]
    width_m : float, optional
        Constant total track width replacing the track's own. [m]

    Raises
    ------
    InputError
        When the track is narrower than the car plus both margins somewhere.
    """
    if not (math.isfinite(car_width) and car_width > 0):
        raise InputError(f"car width = {car_width:g} m must be positive", "car",
                         "chassis.overall_width_m")
    if not (math.isfinite(margin_m) and margin_m >= 0):
        raise InputError(f"= {margin_m:g} must be a margin >= 0 m", "--line-margin-m")
    wl, wr = edge_widths(track, width_m)
    c = 0.5 * car_width + margin_m
    lo, hi = -wr + c, wl - c
    bad = np.flatnonzero(hi < lo)
    if bad.size:
        i = int(bad[0])
        raise InputError(f"the track is {wl[i] + wr[i]:.2f} m wide at "
                         f"{track.distance_m[i]:.0f} m, narrower than the car "
                         f"({car_width:.2f} m) plus {margin_m:g} m each side; give the width "
                         "in metres or a smaller --line-margin-m",
                         getattr(track, "source", None) or "track", "width_m")
    # never offset beyond the centre of curvature on the inside of a bend
    k = np.asarray(track.curvature_1pm, dtype=float)
    with np.errstate(divide="ignore"):
        reach = np.where(np.abs(k) > 0, INSIDE_RADIUS_SHARE / np.abs(k), np.inf)
    hi = np.where(k > 0, np.minimum(hi, reach), hi)
    lo = np.where(k < 0, np.maximum(lo, -reach), lo)
    lo = np.minimum(lo, hi)
    return Band(lo, hi, wl, wr, c)


# --------------------------------------------------------------------------------------------
# Geometry
# --------------------------------------------------------------------------------------------


def normals(x, y, closed: bool) -> np.ndarray:
    """(N, 2) left unit normals of a polyline (central differences, one-sided at open ends)."""
    p = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    if closed:
        t = np.roll(p, -1, axis=0) - np.roll(p, 1, axis=0)
    else:
        t = np.empty_like(p)
        t[1:-1] = p[2:] - p[:-2]
        t[0] = p[1] - p[0]
        t[-1] = p[-1] - p[-2]
    t /= np.hypot(t[:, 0], t[:, 1])[:, None]
    return np.column_stack([-t[:, 1], t[:, 0]])


def menger_curvature(p: np.ndarray, closed: bool) -> np.ndarray:
    """Signed three-point curvature (left positive) of the points ``p`` (N, 2) [1/m].

    ``κ_i = 2 (a × b) / (|a| |b| |a + b|)``: the inverse radius of the circle through
    ``p_(i-1), p_i, p_(i+1)``. Open ends copy their neighbour.
    """
    k, _ = _curvature_jacobian(p, np.zeros_like(p), closed)
    return k


def _curvature_jacobian(p, nrm, closed):
    """Menger curvature at each point and its derivatives with respect to the offsets of the
    previous, own and next point along their normals ``nrm``.

    Returns ``κ`` (N,) and ``(d_prev, d_self, d_next)`` (each (N,)); open ends have zero rows.
    """
    if closed:
        pm, pp = np.roll(p, 1, axis=0), np.roll(p, -1, axis=0)
        nm, n0, nq = np.roll(nrm, 1, axis=0), nrm, np.roll(nrm, -1, axis=0)
        pc = p
    else:
        pm, pc, pp = p[:-2], p[1:-1], p[2:]
        nm, n0, nq = nrm[:-2], nrm[1:-1], nrm[2:]
    a = pc - pm
    b = pp - pc
    c = pp - pm
    la = np.hypot(a[:, 0], a[:, 1])
    lb = np.hypot(b[:, 0], b[:, 1])
    lc = np.hypot(c[:, 0], c[:, 1])
    den = la * lb * lc
    cross = a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]
    k = 2.0 * cross / den

    def dot(u, v):
        return u[:, 0] * v[:, 0] + u[:, 1] * v[:, 1]

    # d cross = dC/da . da + dC/db . db with dC/da = (b_y, -b_x), dC/db = (-a_y, a_x)
    gca = np.column_stack([b[:, 1], -b[:, 0]])
    gcb = np.column_stack([-a[:, 1], a[:, 0]])

    def deriv(da, db, dc):
        dcross = dot(gca, da) + dot(gcb, db)
        return 2.0 * dcross / den - k * (dot(a, da) / la**2 + dot(b, db) / lb**2
                                         + dot(c, dc) / lc**2)

    zero = np.zeros_like(a)
    d_prev = deriv(-nm, zero, -nm)
    d_self = deriv(n0, -n0, zero)
    d_next = deriv(zero, nq, nq)
    if closed:
        return k, (d_prev, d_self, d_next)
    pad = np.zeros(1)
    kk = np.concatenate([k[:1], k, k[-1:]])
    return kk, tuple(np.concatenate([pad, d, pad]) for d in (d_prev, d_self, d_next))


def _jacobian_matrix(d_prev, d_self, d_next, closed):
    from scipy.sparse import coo_matrix

    n = d_self.size
    i = np.arange(n)
    if closed:
        rows = np.concatenate([i, i, i])
        cols = np.concatenate([(i - 1) % n, i, (i + 1) % n])
        vals = np.concatenate([d_prev, d_self, d_next])
    else:
        m = i[1:-1]
        rows = np.concatenate([m, m, m])
        cols = np.concatenate([m - 1, m, m + 1])
        vals = np.concatenate([d_prev[1:-1], d_self[1:-1], d_next[1:-1]])
    return coo_matrix((vals, (rows, cols)), shape=(n, n)).tocsr()


def box_least_squares(J, b, lo, hi, max_iter: int = BOX_MAX_ITER):
    """Minimise ``|J x - b|²`` subject to ``lo <= x <= hi`` for a sparse, banded ``J``.

    A primal-dual interior-point method with Mehrotra's predictor-corrector (Nocedal and
    Wright, Numerical Optimization, 2nd ed., 2006, section 16.6, algorithm 16.4 written for
    bounds): each step factorises the banded matrix ``JᵀJ + diag(z/s + w/t)`` once (sparse
    LU) and solves it twice; 15-30 steps reach a duality gap of ``BOX_GAP`` whatever the number
    of bounds that change. A final polish fixes the bounds that hold (``x`` within
    ``BOX_ACTIVE_M`` of a bound, with a multiplier pushing outward) and solves the normal
    equations on the free variables exactly, so that a bound that holds is met to rounding.

    ``scipy.optimize.lsq_linear`` solves the same problem, but its sparse path (trust region
    with LSMR) stops far from the optimum on this ill-conditioned operator (condition number
    of order N²: on a 90° corner at 1 m, about 480 points, it returned a cost 60 % above the
    optimum), and its exact paths are dense, O(N³) per step; its dense bounded-variable
    method is the reference for this solver in tests/test_line.py.

    Parameters
    ----------
    J : scipy.sparse matrix
        (M, N) design matrix. [-]
    b : numpy.ndarray
        (M,) target. [-]
    lo, hi : numpy.ndarray
        (N,) bounds, ``lo <= hi``. [-]
    max_iter : int
        Largest number of interior-point steps. [-]

    Returns
    -------
    tuple
        ``x`` (N,) and a dict: ``steps``, ``converged`` (duality gap and residual below
        tolerance), ``polished`` (the exact active-set solve was kept). [-]
    """
    from scipy.sparse import diags, identity
    from scipy.sparse.linalg import splu

    lo = np.asarray(lo, float)
    hi = np.asarray(hi, float)
    n = J.shape[1]
    H = (J.T @ J).tocsc()
    scale = max(float(H.diagonal().max()) if n else 1.0, 1e-300)
    # a vanishing ridge keeps the matrix positive definite on a straight, where a rigid
    # sideways shift leaves every curvature unchanged (it moves the line by < 1e-9 m)
    H = (H + identity(n, format="csc") * (BOX_RIDGE * scale)).tocsc()
    g = np.asarray(J.T @ b, dtype=float)
    fixed = (hi - lo) <= 1e-9
    x = 0.5 * (lo + hi)
    s = np.maximum(x - lo, 0.0)
    t = np.maximum(hi - x, 0.0)
    s[fixed] = t[fixed] = 1.0
    r0 = np.abs(H @ x - g)
    z0 = max(float(r0.max()), 1e-12 * scale)
    z = np.full(n, z0)
    w = np.full(n, z0)
    z[fixed] = w[fixed] = 0.0
    m = max(int(np.count_nonzero(~fixed)), 1)
    free = ~fixed
    steps = 0
    converged = False
    gnorm = 1.0 + float(np.max(np.abs(g))) if n else 1.0

    def step_len(v, dv):
        neg = dv < 0
        if not np.any(neg):
            return 1.0
        return float(min(1.0, np.min(-v[neg] / dv[neg])))

    for steps in range(1, max_iter + 1):
        rd = H @ x - g - z + w
        rd[fixed] = 0.0
        mu = float((s[free] @ z[free] + t[free] @ w[free]) / (2 * m))
        if float(np.max(np.abs(rd))) <= BOX_RESID * gnorm and mu <= BOX_GAP * scale:
            converged = True
            break
        d = np.where(fixed, BOX_BIG * scale, np.minimum(z / s + w / t, BOX_BIG * scale))
        lu = splu((H + diags(d)).tocsc())

        def solve(rs, rt):
            # complementarity targets s z -> rs, t w -> rt; returns (dx, dz, dw)
            rhs = -rd + (rs - s * z) / s - (rt - t * w) / t
            rhs[fixed] = 0.0
            dx = lu.solve(rhs)
            dz = (rs - s * z - z * dx) / s
            dw = (rt - t * w + w * dx) / t
            dz[fixed] = dw[fixed] = 0.0
            return dx, dz, dw

        zero = np.zeros(n)
        dx, dz, dw = solve(zero, zero)
        ap = min(step_len(s, dx), step_len(t, -dx))
        ad = min(step_len(z, dz), step_len(w, dw))
        mu_aff = float(((s + ap * dx)[free] @ (z + ad * dz)[free]
                        + (t - ap * dx)[free] @ (w + ad * dw)[free]) / (2 * m))
        sigma = (mu_aff / mu) ** 3 if mu > 0 else 0.0
        dx, dz, dw = solve(sigma * mu - dx * dz, sigma * mu + dx * dw)
        ap = min(1.0, 0.995 * min(step_len(s, dx), step_len(t, -dx)))
        ad = min(1.0, 0.995 * min(step_len(z, dz), step_len(w, dw)))
        x = x + ap * dx
        x[fixed] = lo[fixed]
        s = np.where(fixed, 1.0, x - lo)
        t = np.where(fixed, 1.0, hi - x)
        s = np.maximum(s, 1e-15)
        t = np.maximum(t, 1e-15)
        z = z + ad * dz
        w = w + ad * dw
    x = np.clip(x, lo, hi)
    # polish: fix the bounds that hold and solve the free variables exactly
    at_lo = fixed | ((x - lo <= BOX_ACTIVE_M) & (z > w))
    at_hi = ~at_lo & (hi - x <= BOX_ACTIVE_M) & (w > z)
    xp = np.where(at_lo, lo, np.where(at_hi, hi, x))
    fi = np.flatnonzero(~(at_lo | at_hi))
    polished = False
    if fi.size:
        fx = np.flatnonzero(at_lo | at_hi)
        rhs = g[fi] - (H[fi][:, fx] @ xp[fx] if fx.size else 0.0)
        try:
            xp[fi] = splu(H[fi][:, fi].tocsc()).solve(rhs)
        except RuntimeError:  # a singular free block: keep the interior-point solution
            xp[fi] = np.nan
    if np.all(xp >= lo - 1e-9) and np.all(xp <= hi + 1e-9):
        def f(v):
            return 0.5 * v @ (H @ v) - g @ v

        xp = np.clip(xp, lo, hi)
        if f(xp) <= f(x) + 1e-12 * abs(f(x)) + 1e-300:
            x, polished = xp, True
    return x, {"steps": steps, "converged": converged, "polished": polished}


def _point_lengths(p, closed):
    """Length of line each point stands for: half of each neighbouring segment [m]."""
    seg = np.hypot(*np.diff(p, axis=0).T)
    if closed:
        last = math.hypot(*(p[0] - p[-1]))
        seg = np.append(seg, last)
        return 0.5 * (seg + np.roll(seg, 1))
    return 0.5 * (np.concatenate([[0.0], seg]) + np.concatenate([seg, [0.0]]))


def min_curvature_offsets(x, y, lo, hi, closed: bool, iterations: int = ITERATIONS,
                          tol_m: float = OFFSET_TOL_M) -> tuple[np.ndarray, dict]:
    """Offsets ``α`` along the left normals that minimise ``Σ κ_i² h_i`` within the bounds.

    ``h_i`` is the length of line point ``i`` stands for (half of each neighbouring segment),
    so the sum approximates ``∫ κ² ds`` whatever the spacing of the points. Each Gauss-Newton
    step solves the bounded linear least-squares problem
    ``min Σ h_i (κ_i(α_k) + J_i (α - α_k))²``, ``lo <= α <= hi`` (weights held at ``α_k``) with
    :func:`box_least_squares`.

    Parameters
    ----------
    x, y : array_like
        (N,) reference line points, in driving order (closed: the last point is not repeated).
        [m]
    lo, hi : array_like
        (N,) bounds on the offset, left positive. [m]
    closed : bool
        Closed circuit (the points wrap). [-]
    iterations : int
        Largest number of linearised solves. [-]
    tol_m : float
        Stop when no offset changes by more than this between two solves. [m]

    Returns
    -------
    tuple
        ``α`` (N,) [m] and a dict of solver figures: ``iterations``, ``last_change_m`` [m],
        ``box_steps`` (interior-point steps in all), ``converged``, ``int_k2_reference``,
        ``int_k2_line`` (``Σ κ² h ≈ ∫ κ² ds`` of the reference and of the line) [1/m].
    """
    r = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    lo = np.asarray(lo, float)
    hi = np.asarray(hi, float)
    nrm = normals(r[:, 0], r[:, 1], closed)
    alpha = np.clip(np.zeros(len(r)), lo, hi)
    mean_h = float(np.mean(_point_lengths(r, closed)))
    k0 = None
    info = {"iterations": 0, "last_change_m": math.nan, "box_steps": 0,
            "converged": True}
    for it in range(max(1, int(iterations))):
        p = r + alpha[:, None] * nrm
        k, (dm, d0, dp) = _curvature_jacobian(p, nrm, closed)
        if not closed:
            k = np.concatenate([[0.0], k[1:-1], [0.0]])
        if k0 is None:
            k0 = float(np.sum(k**2 * _point_lengths(p, closed)))
        # each point stands for the length of line around it: Σ κ² h ≈ ∫ κ² ds, whatever
        # the spacing (the weights are held at the current line, updated every solve)
        sw = np.sqrt(_point_lengths(p, closed) / mean_h)
        J = _jacobian_matrix(dm * sw, d0 * sw, dp * sw, closed)
        new, binfo = box_least_squares(J, J @ alpha - k * sw, lo, hi)
        steps, ok = binfo["steps"], binfo["converged"]
        new = np.clip(new, lo, hi)
        change = float(np.max(np.abs(new - alpha)))
        alpha = new
        info["iterations"] = it + 1
        info["last_change_m"] = change
        info["box_steps"] += steps
        info["converged"] = info["converged"] and ok
        if change < tol_m:
            break
    p = r + alpha[:, None] * nrm
    k = menger_curvature(p, closed)
    h = _point_lengths(p, closed)
    if not closed:
        k, h = k[1:-1], h[1:-1]
    info["int_k2_reference"] = k0
    info["int_k2_line"] = float(np.sum(k**2 * h))
    return alpha, info


# --------------------------------------------------------------------------------------------
# The line as a track
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LineTrack(Track):
    """A :class:`lapbalance.track.Track` resampled along a driving line.

    Every Track attribute refers to the line (distance, position, curvature, corners); the
    widths ``width_m`` / ``width_left_m`` are measured from the line to the track edges.

    Extra attributes
    ----------------
    line : str
        Which line (``"min-curvature"``). [-]
    line_offset_m : numpy.ndarray
        (N,) lateral offset of each step from the track file's reference line, left
        positive. [m]
    reference_length_m : float
        Length of the reference line the offsets are measured from. [m]
    car_width_m, margin_m : float
        Car width and edge margin the band was built with. [m]
    solver : dict
        Figures of the optimisation (iterations, ∫κ² ds of the reference and of the line). [-]
    """

    line: str = "min-curvature"
    line_offset_m: np.ndarray | None = None
    reference_length_m: float = math.nan
    car_width_m: float = math.nan
    margin_m: float = math.nan
    solver: dict | None = None


def _chord(px, py, closed):
    """Cumulative chord length at each point (and the closing chord for a closed line)."""
    seg = np.hypot(np.diff(px), np.diff(py))
    s = np.concatenate([[0.0], np.cumsum(seg)])
    total = s[-1] + (math.hypot(px[0] - px[-1], py[0] - py[-1]) if closed else 0.0)
    return s, total


def _at_steps(values, s_pts, total, dist, length, closed):
    """Interpolate per-point ``values`` at the resampled distances ``dist`` of a track built
    from the points (the chord scale stretched to the track's arc length)."""
    u = s_pts * (length / total)
    if closed:
        return np.interp(dist, np.append(u, length), np.append(values, values[0]))
    return np.interp(dist, u, values)


def min_curvature_line(track, car_width: float, margin_m: float = LINE_MARGIN_M,
                       width_m: float | None = None, step_m: float | None = None,
                       iterations: int = ITERATIONS) -> LineTrack:
    """The minimum-curvature line of ``track`` for a car of ``car_width``, as a track.

    Parameters
    ----------
    track : Track
        Reference line with its width (see :func:`edge_widths`).
    car_width : float
        Overall width of the car. [m]
    margin_m : float
        Clearance to each edge beyond half the car's width. [m]
    width_m : float, optional
        Constant total track width replacing the track's own (``--width-m``). [m]
    step_m : float, optional
        Step of the returned track; default the reference track's step. [m]
    iterations : int
        Largest number of Gauss-Newton re-linearisations. [-]

    Returns
    -------
    LineTrack
        The line resampled to a uniform step with its own curvature, grade, bank and
        corners; ``line_offset_m`` holds the offset of each step from the reference line.

    Raises
    ------
    InputError
        No width, or a track narrower than the car plus the margins.
    """
    bd = band(track, car_width, margin_m, width_m)
    x = np.asarray(track.x_m, float)
    y = np.asarray(track.y_m, float)
    closed = bool(track.closed)
    alpha, info = min_curvature_offsets(x, y, bd.lo_m, bd.hi_m, closed, iterations)
    nrm = normals(x, y, closed)
    px = x + alpha * nrm[:, 0]
    py = y + alpha * nrm[:, 1]
    wl = bd.width_left_m - alpha
    wtot = bd.width_left_m + bd.width_right_m
    s_pts, total = _chord(px, py, closed)
    ds_ref = float(track.step_m)
    sectors = None
    starts = tuple(getattr(track, "sector_starts_m", ()) or ())
    if starts:
        sectors = [float(np.interp(s0 / ds_ref, np.arange(len(s_pts)), s_pts)) for s0 in starts]
    step = float(step_m if step_m is not None else track.step_m)
    name = getattr(track, "name", "") or "track"
    source = getattr(track, "source", "") or ""
    z = np.asarray(getattr(track, "z_m", np.zeros_like(x)), float)
    bank = np.degrees(np.asarray(getattr(track, "bank_rad", np.zeros_like(x)), float))
    has_z = bool(np.any(z != 0.0))
    has_bank = bool(np.any(bank != 0.0))
    base = make_track(px, py, z if has_z else None, bank if has_bank else None, wtot,
                      closed=closed, step_m=step, name=name, source=source,
                      sector_starts_m=None)
    dist, length = base.distance_m, base.length_m
    if sectors is not None:  # the reference's sector starts, carried across to the line
        scale = length / total
        sectors = tuple([0.0] + [s * scale for s in sectors[1:]])
    else:
        sectors = base.sector_starts_m
    off = _at_steps(alpha, s_pts, total, dist, length, closed)
    wl_s = _at_steps(wl, s_pts, total, dist, length, closed)
    fields = {f.name: getattr(base, f.name) for f in dataclasses.fields(Track)}
    fields["sector_starts_m"] = sectors
    fields["width_left_m"] = np.ascontiguousarray(wl_s)
    solver = dict(info)
    solver["max_offset_m"] = float(np.max(np.abs(alpha)))
    return LineTrack(**fields, line="min-curvature", line_offset_m=np.ascontiguousarray(off),
                     reference_length_m=float(track.length_m), car_width_m=float(car_width),
                     margin_m=float(margin_m), solver=solver)


def on_line(track, line: str = "centreline", car=None, car_width: float | None = None,
            margin_m: float = LINE_MARGIN_M, width_m: float | None = None):
    """The track a lap runs on for the chosen ``line``.

    Parameters
    ----------
    track : Track
        The track as loaded (its points are the reference line).
    line : str
        ``"centreline"`` (the track as it is; ``width_m`` replaces its width when given) or
        ``"min-curvature"``. [-]
    car : Car, optional
        Gives the car width (:func:`car_width_m`) when ``car_width`` is not given.
    car_width : float, optional
        Overall car width. [m]
    margin_m : float
        Clearance to each edge beyond half the car's width. [m]
    width_m : float, optional
        Constant total track width replacing the track's own. [m]

    Returns
    -------
    Track
        ``track`` itself, or a :class:`LineTrack`.
    """
    if line not in LINES:
        raise InputError(f'"{line}" is not a line; choose one of {", ".join(LINES)}', "--line")
    if line == "centreline":
        if width_m is not None and isinstance(track, Track):
            edge_widths(track, width_m)  # validates
            return dataclasses.replace(track, width_m=np.full(track.n, float(width_m)),
                                       width_left_m=None)
        return track
    if car_width is None:
        if car is None:
            raise InputError("a driving line needs the car's width; give a car or "
                             "--car-width-m", "--line")
        car_width = car_width_m(car)
    return min_curvature_line(track, car_width, margin_m, width_m)


def edges(track) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """Left and right track edges of a track with a width, for drawing [m].

    Returns ``(x_left, y_left, x_right, y_right)``, or None when the track has no width.
    """
    w = np.asarray(getattr(track, "width_m", []), float)
    if w.size != len(track.x_m) or not np.all(np.isfinite(w)):
        return None
    wl, wr = edge_widths(track)
    nrm = normals(track.x_m, track.y_m, bool(track.closed))
    x, y = np.asarray(track.x_m, float), np.asarray(track.y_m, float)
    return (x + wl * nrm[:, 0], y + wl * nrm[:, 1], x - wr * nrm[:, 0], y - wr * nrm[:, 1])


def reference_line(track):
    """Reference line (x, y) of a line track in its own coordinates, or None [m]."""
    off = getattr(track, "line_offset_m", None)
    if off is None:
        return None
    nrm = normals(track.x_m, track.y_m, bool(track.closed))
    return (np.asarray(track.x_m) - off * nrm[:, 0], np.asarray(track.y_m) - off * nrm[:, 1])


def track_csv_text(track, note: str = "") -> str:
    """A track as our CSV format (readable by :func:`lapbalance.track.load_track`).

    Columns ``x_m, y_m`` (0.1 mm), ``z_m`` and ``bank_deg`` when the track has them, the edges
    as ``width_left_m, width_right_m`` (from these points) when it has a width, and
    ``line_offset_m`` (offset from the original reference line; the reader ignores it).
    """
    lines = [f"# name: {getattr(track, 'name', '') or 'track'}",
             f"# closed: {'true' if track.closed else 'false'}"]
    starts = tuple(getattr(track, "sector_starts_m", ()) or ())
    if starts:
        lines.append("# sectors_m: " + ", ".join(f"{s:.1f}" for s in starts))
    if note:
        lines += [f"# {t}" for t in note.splitlines()]
    cols: dict[str, np.ndarray] = {"x_m": np.asarray(track.x_m, float),
                                   "y_m": np.asarray(track.y_m, float)}
    z = np.asarray(getattr(track, "z_m", np.zeros(track.n)), float)
    if np.any(z != 0.0):
        cols["z_m"] = z
    bank = np.degrees(np.asarray(getattr(track, "bank_rad", np.zeros(track.n)), float))
    if np.any(bank != 0.0):
        cols["bank_deg"] = bank
    w = np.asarray(getattr(track, "width_m", np.full(track.n, np.nan)), float)
    if np.all(np.isfinite(w)):
        wl, wr = edge_widths(track)
        cols["width_left_m"] = wl
        cols["width_right_m"] = wr
    off = getattr(track, "line_offset_m", None)
    if off is not None:
        cols["line_offset_m"] = np.asarray(off, float)
    lines.append(",".join(cols))
    arrays = list(cols.values())
    for row in zip(*arrays, strict=True):
        lines.append(",".join(f"{v:.4f}" for v in row))
    return "\n".join(lines) + "\n"
