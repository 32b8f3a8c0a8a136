"""Numba kernels of the quasi-static lap solver (float arrays in, float arrays out).

No Python objects, no I/O. The car arrives as a flat parameter vector ``p`` (indices ``P_*``
below, filled by :func:`lapbalance.params.car_parameters`) with the aero map (if any) packed
after the scalars as a refined grid for clamped bilinear lookup (``MAP_*``), the gearbox and
torque curve as arrays. Physics comes from :mod:`lapbalance.loads` and :mod:`lapbalance.tyre`
(numba scalar functions).

Call cost matters as much as arithmetic here: the searches make tens of millions of nested
calls per lap, and every array argument costs its share of each call. So the car is one
array, and the entry kernels pass borrowed views (:mod:`lapbalance.views`, no reference
counting) down their call chains.

The control variable of the longitudinal search is one signed force ``F`` at the wheels:
``F >= 0`` is drive (split by the torque split), ``F < 0`` is brake force ``-F`` (split by the
brake bias; engine overrun is folded into the brakes while braking). Lift-off evaluation uses
the explicit (drive, brake) pair instead, with negative drive = engine overrun on the driven
axle(s).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from lapbalance.loads import axle_loads, road_accelerations
from lapbalance.tyre import load_factor, usage
from lapbalance.views import borrowed, keep_alive

G = 9.80665

# ---- parameter vector indices -------------------------------------------------------------
P_MASS = 0
P_L = 1
P_A = 2  # front axle to CG
P_B = 3  # CG to rear axle
P_H = 4
P_TF = 5
P_TR = 6
P_ZF = 7
P_ZR = 8
P_KF = 9
P_CLAF = 10  # front downforce area, CG convention [m2]
P_CLAR = 11
P_CDA = 12
P_RHO = 13
P_CRR = 14
P_MUXF = 15
P_KXF = 16
P_MUYF = 17
P_KYF = 18
P_FZ0F = 19
P_MUXR = 20
P_KXR = 21
P_MUYR = 22
P_KYR = 23
P_FZ0R = 24
P_DRIVEF = 25  # front share of drive force
P_BIASF = 26
P_ETA = 27
P_RW = 28
P_FINAL = 29
P_SHIFT = 30
P_REVLIM = 31
P_POWERMODE = 32
P_POWER = 33
P_FTMAX = 34
P_OVERRUN = 35
P_USEMAP = 36
P_HEAVEF = 37  # N/m
P_HEAVER = 38
P_RHF0 = 39  # m
P_RHR0 = 40
# precomputed tyre constants per axle: 1 + k, k / Fz0, peak load (lateral; longitudinal)
P_TYF = 41  # front: 1+ky, ky/fz0, fz_peak_y, 1+kx, kx/fz0, fz_peak_x
P_TYR = 47  # rear: same layout
# the largest drag area and total downforce area [m2] the car reaches (its constants, or a
# map's largest table entries: the clamped bilinear map never exceeds them), for bounds
P_CDAMAX = 53
P_CLAMAX = 54
P_NPARAM = 55
# the aero map (if any) packed after the scalars, so that every call carries one array for
# the car (each array argument costs its share of every call): grid sizes, then the front
# ride-height grid [m], the rear one [m], the front, rear and drag area tables [m2]
# (row-major, front ride height first), then a bin table per grid for the cell search
# (:func:`_bracket_index`); see :func:`lapbalance.params.car_parameters`
MAP_NX = P_NPARAM
MAP_NY = P_NPARAM + 1
MAP_DATA = P_NPARAM + 2

# ---- state output indices -----------------------------------------------------------------
O_AX = 0
O_AY = 1
O_DRAG = 2
O_DOWNF = 3
O_AEROF = 4
O_AEROR = 5
O_STATF = 6
O_STATR = 7
O_GT = 8
O_LATF = 9
O_LATR = 10
O_FZF = 11
O_FZR = 12
O_FZFO = 13
O_FZFI = 14
O_FZRO = 15
O_FZRI = 16
O_FXF = 17
O_FXR = 18
O_FYF = 19
O_FYR = 20
O_CAPXF = 21
O_CAPYF = 22
O_CAPXR = 23
O_CAPYR = 24
O_UF = 25
O_UR = 26
O_LIFTF = 27
O_LIFTR = 28
O_RHF = 29
O_RHR = 30
O_RR = 31
O_X = 32
O_CLAF = 33
O_CLAR = 34
O_CDA = 35
O_STATUS = 36
O_MAPOUT = 37
O_SPEED = 38  # speed of the evaluation [m/s]
O_CONTROL = 39  # net control force of the evaluation, drive minus brake [N]
NOUT = 40

# ---- limit codes ----------------------------------------------------------------------------
LIM_NONE = 0
LIM_FRONT = 1
LIM_REAR = 2
LIM_ENGINE = 3
LIM_REV = 4
LIM_SPEEDCAP = 5

BIG = 1e9
V_MIN = 0.5  # lowest speed searched for a corner limit [m/s]


@njit(cache=True, error_model="numpy")
def _bracket_index(p, off, n, ti, x):
    """Cell of the increasing grid ``p[off:off + n]`` holding x, and the fraction across it
    (clamped to the first / last cell). ``ti`` is the offset of the grid's bin table in
    ``p`` (1 / bin width [1/m], bin count, then the cell at the start of each bin; bins no
    wider than the narrowest cell, so a cell is at most one step from its bin's entry):
    the same cell as a bisection, without its dozen unpredictable branches."""
    if x <= p[off]:
        return 0, 0.0
    if x >= p[off + n - 1]:
        return n - 2, 1.0
    k = int((x - p[off]) * p[ti])
    nb = int(p[ti + 1])
    k = k if k < nb else nb - 1
    lo = int(p[ti + 2 + k])
    while lo < n - 2 and p[off + lo + 1] <= x:
        lo += 1
    while lo > 0 and p[off + lo] > x:
        lo -= 1
    return lo, (x - p[off + lo]) / (p[off + lo + 1] - p[off + lo])


@njit(cache=True, error_model="numpy")
def map_lookup(p, k, x, y):
    """Clamped bilinear lookup of map table ``k`` (0 front, 1 rear, 2 drag area [m2]) at
    ride heights (x front, y rear) [m]."""
    return map_eval(p, x, y)[k]


@njit(cache=True, error_model="numpy")
def map_eval(p, x, y):
    """All three map tables at ride heights (x front, y rear) [m] with one cell search:
    (front area, rear area, drag area [m2]; d front/dx, d front/dy, d rear/dx, d rear/dy,
    d drag/dx, d drag/dy [m]; the cross derivatives d²/dxdy of front, rear, drag [1]; the
    cell's bounds x_lo, x_hi, y_lo, y_hi [m]). Gradients are zero outside the grid (the
    lookup is clamped); within a cell the bilinear value at (x + dx, y + dy) is exactly
    value + d/dx dx + d/dy dy + d²/dxdy dx dy. The map is packed in ``p`` (:data:`MAP_NX`).
    """
    nx = int(p[MAP_NX])
    ny = int(p[MAP_NY])
    ox = MAP_DATA
    oy = ox + nx
    of = oy + ny
    orr = of + nx * ny
    od = orr + nx * ny
    tix = od + nx * ny
    tiy = tix + 2 + int(p[tix + 1])
    i, tx = _bracket_index(p, ox, nx, tix, x)
    j, ty = _bracket_index(p, oy, ny, tiy, y)
    w00 = (1 - tx) * (1 - ty)
    w10 = tx * (1 - ty)
    w01 = (1 - tx) * ty
    w11 = tx * ty
    k00 = i * ny + j
    k10 = k00 + ny
    k01 = k00 + 1
    k11 = k10 + 1
    f00 = p[of + k00]
    f10 = p[of + k10]
    f01 = p[of + k01]
    f11 = p[of + k11]
    r00 = p[orr + k00]
    r10 = p[orr + k10]
    r01 = p[orr + k01]
    r11 = p[orr + k11]
    fv = w00 * f00 + w10 * f10 + w01 * f01 + w11 * f11
    rv = w00 * r00 + w10 * r10 + w01 * r01 + w11 * r11
    dv = (w00 * p[od + k00] + w10 * p[od + k10] + w01 * p[od + k01]
          + w11 * p[od + k11])
    d00 = p[od + k00]
    d10 = p[od + k10]
    d01 = p[od + k01]
    d11 = p[od + k11]
    fx = 0.0
    fy = 0.0
    rx = 0.0
    ry = 0.0
    dx = 0.0
    dy = 0.0
    fxy = 0.0
    rxy = 0.0
    dxy = 0.0
    xlo = p[ox + i]
    xhi = p[ox + i + 1]
    ylo = p[oy + j]
    yhi = p[oy + j + 1]
    inx = p[ox] < x < p[ox + nx - 1]
    iny = p[oy] < y < p[oy + ny - 1]
    if inx:
        hx = xhi - xlo
        fx = ((1 - ty) * (f10 - f00) + ty * (f11 - f01)) / hx
        rx = ((1 - ty) * (r10 - r00) + ty * (r11 - r01)) / hx
        dx = ((1 - ty) * (d10 - d00) + ty * (d11 - d01)) / hx
    if iny:
        hy = yhi - ylo
        fy = ((1 - tx) * (f01 - f00) + tx * (f11 - f10)) / hy
        ry = ((1 - tx) * (r01 - r00) + tx * (r11 - r10)) / hy
        dy = ((1 - tx) * (d01 - d00) + tx * (d11 - d10)) / hy
    if inx and iny:
        hxy = (xhi - xlo) * (yhi - ylo)
        fxy = (f11 - f10 - f01 + f00) / hxy
        rxy = (r11 - r10 - r01 + r00) / hxy
        dxy = (d11 - d10 - d01 + d00) / hxy
    return fv, rv, dv, fx, fy, rx, ry, dx, dy, fxy, rxy, dxy, xlo, xhi, ylo, yhi


@njit(cache=True, error_model="numpy")
def _state_once(v, kappa, grade, bank, f_drive, f_brake, p, claf, clar, cda, out):
    m = p[P_MASS]
    L = p[P_L]
    a = p[P_A]
    b = p[P_B]
    h = p[P_H]
    q = 0.5 * p[P_RHO] * v * v
    drag = q * cda
    aero_f = q * claf
    aero_r = q * clar
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    rr = p[P_CRR] * (m * g_n + aero_f + aero_r)
    x = f_drive - f_brake - rr
    res = axle_loads(m, g_n, a, b, L, h, p[P_TF], p[P_TR], p[P_ZF], p[P_ZR], p[P_KF], a_y,
                     aero_f, aero_r, x)
    out[O_AX] = (x - drag - (m * G * math.sin(grade) if grade != 0.0 else 0.0)) / m
    out[O_SPEED] = v
    out[O_CONTROL] = f_drive - f_brake
    out[O_AY] = a_y
    out[O_DRAG] = drag
    out[O_DOWNF] = aero_f + aero_r
    out[O_AEROF] = aero_f
    out[O_AEROR] = aero_r
    out[O_STATF] = res[0]
    out[O_STATR] = res[1]
    out[O_GT] = res[4]
    out[O_LATF] = res[5]
    out[O_LATR] = res[6]
    fzf = res[7]
    fzr = res[8]
    out[O_FZF] = fzf
    out[O_FZR] = fzr
    out[O_FZFO] = res[9]
    out[O_FZFI] = res[10]
    out[O_FZRO] = res[11]
    out[O_FZRI] = res[12]
    out[O_LIFTF] = res[13]
    out[O_LIFTR] = res[14]
    status = res[15]
    out[O_RR] = rr
    out[O_X] = x
    out[O_CLAF] = claf
    out[O_CLAR] = clar
    out[O_CDA] = cda
    sf = p[P_DRIVEF]
    bf = p[P_BIASF]
    crr = p[P_CRR]
    fxf = sf * f_drive - bf * f_brake - crr * fzf
    fxr = (1.0 - sf) * f_drive - (1.0 - bf) * f_brake - crr * fzr
    fyf = m * a_y * b / L
    fyr = m * a_y * a / L
    out[O_FXF] = fxf
    out[O_FXR] = fxr
    out[O_FYF] = fyf
    out[O_FYR] = fyr
    if status != 0:
        out[O_CAPXF] = 0.0
        out[O_CAPYF] = 0.0
        out[O_CAPXR] = 0.0
        out[O_CAPYR] = 0.0
        out[O_UF] = BIG
        out[O_UR] = BIG
        out[O_STATUS] = status
        return status
    # axle capacities: sum of the two tyres (tyre.tyre_capacity with constants precomputed)
    t = P_TYF
    gyf = (load_factor(res[9], p[t], p[t + 1], p[t + 2])
           + load_factor(res[10], p[t], p[t + 1], p[t + 2]))
    if p[P_KXF] == p[P_KYF]:
        gxf = gyf
    else:
        gxf = (load_factor(res[9], p[t + 3], p[t + 4], p[t + 5])
               + load_factor(res[10], p[t + 3], p[t + 4], p[t + 5]))
    t = P_TYR
    gyr = (load_factor(res[11], p[t], p[t + 1], p[t + 2])
           + load_factor(res[12], p[t], p[t + 1], p[t + 2]))
    if p[P_KXR] == p[P_KYR]:
        gxr = gyr
    else:
        gxr = (load_factor(res[11], p[t + 3], p[t + 4], p[t + 5])
               + load_factor(res[12], p[t + 3], p[t + 4], p[t + 5]))
    cxf = p[P_MUXF] * gxf
    cyf = p[P_MUYF] * gyf
    cxr = p[P_MUXR] * gxr
    cyr = p[P_MUYR] * gyr
    out[O_CAPXF] = cxf
    out[O_CAPYF] = cyf
    out[O_CAPXR] = cxr
    out[O_CAPYR] = cyr
    out[O_UF] = usage(fxf, fyf, cxf, cyf)
    out[O_UR] = usage(fxr, fyr, cxr, cyr)
    out[O_STATUS] = 0.0
    return 0


@njit(cache=True, error_model="numpy")
def state(v, kappa, grade, bank, f_drive, f_brake, p, out):
    """Evaluate the car at speed v [m/s] on a step (curvature [1/m], grade, bank [rad]) with
    drive force f_drive [N] (negative = engine overrun) and brake force f_brake >= 0 [N].

    Fills ``out`` (indices ``O_*``) and returns a status code (0 = feasible loads). With an
    aero map, ride heights and aero areas are iterated to a fixed point.
    """
    if p[P_USEMAP] == 0.0:
        st = _state_once(v, kappa, grade, bank, f_drive, f_brake, p, p[P_CLAF], p[P_CLAR],
                         p[P_CDA], out)
        out[O_RHF] = p[P_RHF0]
        out[O_RHR] = p[P_RHR0]
        out[O_MAPOUT] = 0.0
        return st
    return _state_map(v, kappa, grade, bank, f_drive, f_brake, p, out,
                      p[P_RHF0], p[P_RHR0], 1e-6)


@njit(cache=True, error_model="numpy")
def _ride_heights(g_n, q, xs, ax_mode, p, rhf, rhr, tol):
    """Ride heights [m] and map areas [m2] at dynamic pressure q [Pa] from a start (rhf, rhr).

    Ride heights from the heave equations rh = rh0 - (Fz - Fz_rest)/k with the axle loads
    depending on the map: two equations solved by Newton's method (bilinear-map gradients),
    the loads written out in closed form inside the loop. ``ax_mode`` 0.0: ``xs`` is the
    control force (drive minus brake) [N]; 1.0: ``xs`` is m a_x + grade force [N] (the
    control then follows from the areas, so a target a_x needs one fixed point, not nested
    ones). Stops when the heave residuals sum below ``tol`` [m].
    Returns (rhf, rhr, front area, rear area, drag area).
    """
    m = p[P_MASS]
    fz_ref_f = m * G * p[P_B] / p[P_L]
    fz_ref_r = m * G * p[P_A] / p[P_L]
    L = p[P_L]
    h = p[P_H]
    crr = p[P_CRR]
    sf = m * g_n * p[P_B] / L
    sr = m * g_n * p[P_A] / L
    kf = p[P_HEAVEF]
    kr = p[P_HEAVER]
    c = 0.0 if ax_mode != 0.0 else h / L * crr * q
    e = q * h / L if ax_mode != 0.0 else 0.0  # axle-load change per drag area [N/m2]
    claf = 0.0
    clar = 0.0
    cda = 0.0
    af_f = af_r = ar_f = ar_r = ad_f = ad_r = fxy = rxy = dxy = 0.0
    xlo = xhi = ylo = yhi = 0.0
    fresh = False  # the areas at (rhf, rhr) already known (an exact in-cell update)
    for _ in range(30):
        if not fresh:
            (claf, clar, cda, af_f, af_r, ar_f, ar_r, ad_f, ad_r, fxy, rxy, dxy, xlo, xhi,
             ylo, yhi) = map_eval(p, rhf, rhr)
        fresh = False
        if ax_mode != 0.0:
            x = xs + q * cda
        else:
            x = xs - crr * (m * g_n + q * (claf + clar))
        fzf = sf + q * claf - x * h / L
        fzr = sr + q * clar + x * h / L
        rf = rhf - p[P_RHF0] + (fzf - fz_ref_f) / kf
        rr = rhr - p[P_RHR0] + (fzr - fz_ref_r) / kr
        if abs(rf) + abs(rr) < tol:
            break
        # Jacobian of the residuals; with a target a_x (ax_mode) the drag moves the load
        # transfer too (e per unit drag area)
        j00 = 1.0 + (q * af_f + c * (af_f + ar_f) - e * ad_f) / kf
        j01 = (q * af_r + c * (af_r + ar_r) - e * ad_r) / kf
        j10 = (q * ar_f - c * (af_f + ar_f) + e * ad_f) / kr
        j11 = 1.0 + (q * ar_r - c * (af_r + ar_r) + e * ad_r) / kr
        det = j00 * j11 - j01 * j10
        if abs(det) > 1e-6:
            dxf = -(j11 * rf - j01 * rr) / det
            dxr = -(-j10 * rf + j00 * rr) / det
        else:
            dxf = -0.5 * rf
            dxr = -0.5 * rr
        lim = 0.01  # at most 10 mm per step
        big = abs(dxf) if abs(dxf) > abs(dxr) else abs(dxr)
        if big > lim:
            dxf *= lim / big
            dxr *= lim / big
        if xlo < rhf + dxf < xhi and ylo < rhr + dxr < yhi and fxy == fxy and \
                xlo < rhf < xhi and ylo < rhr < yhi:
            # still inside the same cell: the bilinear map's value and gradient there are
            # exact updates of these (no second lookup)
            claf += af_f * dxf + af_r * dxr + fxy * dxf * dxr
            clar += ar_f * dxf + ar_r * dxr + rxy * dxf * dxr
            cda += ad_f * dxf + ad_r * dxr + dxy * dxf * dxr
            af_f += fxy * dxr
            af_r += fxy * dxf
            ar_f += rxy * dxr
            ar_r += rxy * dxf
            ad_f += dxy * dxr
            ad_r += dxy * dxf
            fresh = True
        rhf += dxf
        rhr += dxr
    return rhf, rhr, claf, clar, cda


@njit(cache=True, inline="always", error_model="numpy")
def _map_outside(rhf, rhr, p):
    """1.0 when the ride heights (rhf, rhr) [m] lie outside the packed map's grid, else 0.0."""
    if not _map_inside(rhf, rhr, p):
        return 1.0
    return 0.0


@njit(cache=True, inline="always", error_model="numpy")
def _map_inside(rhf, rhr, p):
    nx = int(p[MAP_NX])
    ny = int(p[MAP_NY])
    ox = MAP_DATA
    oy = ox + nx
    return p[ox] <= rhf <= p[ox + nx - 1] and p[oy] <= rhr <= p[oy + ny - 1]


@njit(cache=True, error_model="numpy")
def _state_map(v, kappa, grade, bank, f_drive, f_brake, p, out, rhf, rhr, tol):
    """:func:`state` for a mapped car with the ride-height fixed point started at (rhf, rhr)
    [m] and stopped at residual ``tol`` [m]."""
    q = 0.5 * p[P_RHO] * v * v
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    rhf, rhr, claf, clar, cda = _ride_heights(g_n, q, f_drive - f_brake, 0.0, p,
                                              rhf, rhr, tol)
    st = _state_once(v, kappa, grade, bank, f_drive, f_brake, p, claf, clar, cda, out)
    out[O_RHF] = rhf
    out[O_RHR] = rhr
    out[O_MAPOUT] = _map_outside(rhf, rhr, p)
    return st


#: Ride-height residual [m] of the warm-started evaluations the lap solver uses (the
#: fixed point starts from the last evaluation's ride heights, so a tight stop costs little).
RH_TOL_WARM = 1e-9


@njit(cache=True, inline="always", error_model="numpy")
def _warm_rh(out, p):
    """Start of the ride-height fixed point: the ride heights ``out`` holds from the last
    evaluation when they lie inside the map, else the static ones."""
    rhf = out[O_RHF]
    rhr = out[O_RHR]
    if _map_inside(rhf, rhr, p):
        return rhf, rhr
    return p[P_RHF0], p[P_RHR0]


@njit(cache=True, error_model="numpy")
def _usage_once(v, kappa, grade, bank, f_drive, f_brake, p, claf, clar, cda, out):
    """Lean :func:`_state_once` for the searches: the same arithmetic, but only a_x,
    downforce, the front axle load, the two usages and the status are written to ``out``."""
    m = p[P_MASS]
    L = p[P_L]
    a = p[P_A]
    b = p[P_B]
    h = p[P_H]
    q = 0.5 * p[P_RHO] * v * v
    drag = q * cda
    aero_f = q * claf
    aero_r = q * clar
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    rr = p[P_CRR] * (m * g_n + aero_f + aero_r)
    x = f_drive - f_brake - rr
    res = axle_loads(m, g_n, a, b, L, h, p[P_TF], p[P_TR], p[P_ZF], p[P_ZR], p[P_KF], a_y,
                     aero_f, aero_r, x)
    out[O_AX] = (x - drag - (m * G * math.sin(grade) if grade != 0.0 else 0.0)) / m
    out[O_SPEED] = v
    out[O_CONTROL] = f_drive - f_brake
    out[O_DOWNF] = aero_f + aero_r
    out[O_FZF] = res[7]
    status = res[15]
    if status != 0:
        out[O_UF] = BIG
        out[O_UR] = BIG
        out[O_STATUS] = status
        return status
    fzf = res[7]
    fzr = res[8]
    sf = p[P_DRIVEF]
    bf = p[P_BIASF]
    crr = p[P_CRR]
    fxf = sf * f_drive - bf * f_brake - crr * fzf
    fxr = (1.0 - sf) * f_drive - (1.0 - bf) * f_brake - crr * fzr
    fyf = m * a_y * b / L
    fyr = m * a_y * a / L
    t = P_TYF
    gyf = (load_factor(res[9], p[t], p[t + 1], p[t + 2])
           + load_factor(res[10], p[t], p[t + 1], p[t + 2]))
    if p[P_KXF] == p[P_KYF]:
        gxf = gyf
    else:
        gxf = (load_factor(res[9], p[t + 3], p[t + 4], p[t + 5])
               + load_factor(res[10], p[t + 3], p[t + 4], p[t + 5]))
    t = P_TYR
    gyr = (load_factor(res[11], p[t], p[t + 1], p[t + 2])
           + load_factor(res[12], p[t], p[t + 1], p[t + 2]))
    if p[P_KXR] == p[P_KYR]:
        gxr = gyr
    else:
        gxr = (load_factor(res[11], p[t + 3], p[t + 4], p[t + 5])
               + load_factor(res[12], p[t + 3], p[t + 4], p[t + 5]))
    out[O_UF] = usage(fxf, fyf, p[P_MUXF] * gxf, p[P_MUYF] * gyf)
    out[O_UR] = usage(fxr, fyr, p[P_MUXR] * gxr, p[P_MUYR] * gyr)
    out[O_STATUS] = 0.0
    return 0


@njit(cache=True, error_model="numpy")
def state_usage(v, kappa, grade, bank, f_drive, f_brake, p, out):
    """Lean :func:`state` for the searches: writes only a_x, downforce, the front axle load,
    the usages, the status and (mapped cars) the ride heights to ``out``; returns the status.
    A mapped car's ride heights start from those ``out`` holds (the last evaluation), when
    inside the map.
    """
    if p[P_USEMAP] == 0.0:
        return _usage_once(v, kappa, grade, bank, f_drive, f_brake, p, p[P_CLAF], p[P_CLAR],
                           p[P_CDA], out)
    rhf, rhr = _warm_rh(out, p)
    q = 0.5 * p[P_RHO] * v * v
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    rhf, rhr, claf, clar, cda = _ride_heights(g_n, q, f_drive - f_brake, 0.0, p,
                                              rhf, rhr, RH_TOL_WARM)
    st = _usage_once(v, kappa, grade, bank, f_drive, f_brake, p, claf, clar, cda, out)
    out[O_RHF] = rhf
    out[O_RHR] = rhr
    return st


@njit(cache=True, error_model="numpy")
def _control_for_ax_map(v, kappa, grade, bank, ax, p, out, full):
    """Control [N] giving a_x = ``ax`` [m/s²] for a mapped car: one ride-height fixed point
    with the ground force m a_x + drag + grade force (warm-started); ``out`` holds the full
    state when ``full`` is 1.0, the lean one at 0.0 (flags are floats: a bool constant is a
    numba literal type and would compile one version per value)."""
    m = p[P_MASS]
    rhf, rhr = _warm_rh(out, p)
    q = 0.5 * p[P_RHO] * v * v
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    xs = m * ax + (m * G * math.sin(grade) if grade != 0.0 else 0.0)
    rhf, rhr, claf, clar, cda = _ride_heights(g_n, q, xs, 1.0, p, rhf, rhr,
                                              RH_TOL_WARM)
    F = xs + q * cda + p[P_CRR] * (m * g_n + q * (claf + clar))
    fd = F if F >= 0.0 else 0.0
    fb = -F if F < 0.0 else 0.0
    if full != 0.0:
        _state_once(v, kappa, grade, bank, fd, fb, p, claf, clar, cda, out)
        out[O_MAPOUT] = _map_outside(rhf, rhr, p)
    else:
        _usage_once(v, kappa, grade, bank, fd, fb, p, claf, clar, cda, out)
    out[O_RHF] = rhf
    out[O_RHR] = rhr
    return F


@njit(cache=True, error_model="numpy")
def state_control(v, kappa, grade, bank, F, p, out):
    """:func:`state` with one signed control force F [N] (>= 0 drive, < 0 brake); a mapped
    car's ride heights start from those ``out`` holds (see :func:`state_usage`)."""
    fd = F if F >= 0.0 else 0.0
    fb = -F if F < 0.0 else 0.0
    return state_warm(v, kappa, grade, bank, fd, fb, p, out)


@njit(cache=True, error_model="numpy")
def state_warm(v, kappa, grade, bank, f_drive, f_brake, p, out):
    """:func:`state` whose ride-height fixed point (mapped cars) starts from the ride
    heights ``out`` holds, when inside the map, and stops at :data:`RH_TOL_WARM`: the
    evaluation the solver uses where consecutive calls are close (neighbouring steps or
    trial speeds)."""
    if p[P_USEMAP] == 0.0:
        return state(v, kappa, grade, bank, f_drive, f_brake, p, out)
    rhf, rhr = _warm_rh(out, p)
    return _state_map(v, kappa, grade, bank, f_drive, f_brake, p, out, rhf, rhr,
                      RH_TOL_WARM)


@njit(cache=True, error_model="numpy")
def usage_control(v, kappa, grade, bank, F, p, out):
    """:func:`state_usage` with one signed control force F [N]."""
    if F >= 0.0:
        return state_usage(v, kappa, grade, bank, F, 0.0, p, out)
    return state_usage(v, kappa, grade, bank, 0.0, -F, p, out)


@njit(cache=True, error_model="numpy")
def max_usage(out):
    u = out[O_UF]
    if out[O_UR] > u:
        u = out[O_UR]
    return u


@njit(cache=True, error_model="numpy")
def control_for_ax(v, kappa, grade, bank, ax, p, out):
    """Signed control force [N] that gives longitudinal acceleration ``ax`` [m/s²].

    Leaves ``out`` holding the state at that force.
    """
    if p[P_USEMAP] == 0.0:
        F = p[P_MASS] * ax + _resistance_nomap(v, kappa, grade, bank, p)
        state_control(v, kappa, grade, bank, F, p, out)
        return F
    # with a map: one ride-height fixed point with the ground force the target a_x needs
    return _control_for_ax_map(v, kappa, grade, bank, ax, p, out, 1.0)


@njit(cache=True, error_model="numpy")
def control_for_ax_lean(v, kappa, grade, bank, ax, p, out):
    """:func:`control_for_ax` leaving the lean state (:func:`state_usage`) in ``out``."""
    if p[P_USEMAP] == 0.0:
        F = p[P_MASS] * ax + _resistance_nomap(v, kappa, grade, bank, p)
        usage_control(v, kappa, grade, bank, F, p, out)
        return F
    return _control_for_ax_map(v, kappa, grade, bank, ax, p, out, 0.0)


@njit(cache=True, error_model="numpy")
def gear_and_rpm(v, p, gears):
    """Gear index (0 = first) and engine speed [rpm] at speed v [m/s]: the lowest gear whose
    engine speed does not exceed the shift point, else top gear."""
    w = v / p[P_RW] * p[P_FINAL] * 60.0 / (2.0 * math.pi)
    n = gears.shape[0]
    for g in range(n):
        rpm = w * gears[g]
        if rpm <= p[P_SHIFT]:
            return g, rpm
    return n - 1, w * gears[n - 1]


@njit(cache=True, error_model="numpy")
def engine_force(v, p, gears, trpm, tnm):
    """Largest drive force the powertrain gives at v [m/s], at the wheels [N]."""
    g, rpm = gear_and_rpm(v, p, gears)
    if rpm > p[P_REVLIM] * (1.0 + 1e-9):
        return 0.0
    if p[P_POWERMODE] != 0.0:
        if v <= 0.0:
            return p[P_FTMAX]
        f = p[P_POWER] * p[P_ETA] / v
        return f if f < p[P_FTMAX] else p[P_FTMAX]
    r = rpm
    if r < trpm[0]:
        r = trpm[0]
    torque = _interp(r, trpm, tnm)
    return torque * gears[g] * p[P_FINAL] * p[P_ETA] / p[P_RW]


@njit(cache=True, error_model="numpy")
def _interp(x, xp, fp):
    """np.interp(x, xp, fp) for increasing xp, held at the ends (the same arithmetic as
    numpy's, without compiling its general implementation)."""
    n = xp.shape[0]
    if x <= xp[0]:
        return fp[0]
    if x >= xp[n - 1]:
        return fp[n - 1]
    j = 0
    while xp[j + 1] <= x:
        j += 1
    slope = (fp[j + 1] - fp[j]) / (xp[j + 1] - xp[j])
    return slope * (x - xp[j]) + fp[j]


@njit(cache=True, error_model="numpy")
def overrun_force(v, p, gears):
    """Engine-braking force at the wheels [N] (positive, retarding) in the current gear."""
    g, rpm = gear_and_rpm(v, p, gears)
    return p[P_OVERRUN] * gears[g] * p[P_FINAL] / p[P_RW]


@njit(cache=True, inline="always", error_model="numpy")
def _road_load(v, kappa, grade, bank, p, cda, cla):
    """Drag + rolling resistance + grade force [N] with drag area ``cda`` and total downforce
    area ``cla`` [m2]."""
    m = p[P_MASS]
    q = 0.5 * p[P_RHO] * v * v
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    f = q * cda + p[P_CRR] * (m * g_n + q * cla)
    if grade != 0.0:
        f += m * G * math.sin(grade)
    return f


@njit(cache=True, error_model="numpy")
def _resistance_nomap(v, kappa, grade, bank, p):
    """Drag + rolling resistance + grade force [N] without an aero map (independent of the
    control force, since the total normal load does not depend on it)."""
    return _road_load(v, kappa, grade, bank, p, p[P_CDA], p[P_CLAF] + p[P_CLAR])


@njit(cache=True, error_model="numpy")
def _resistance_bound(v, kappa, grade, bank, p):
    """An upper bound [N] of drag + rolling resistance + grade force at any ride heights:
    the road load at the largest areas (``P_CDAMAX``, ``P_CLAMAX``); exact without a map."""
    return _road_load(v, kappa, grade, bank, p, p[P_CDAMAX], p[P_CLAMAX])


@njit(cache=True, error_model="numpy")
def ax_of_control(v, kappa, grade, bank, F, p, out):
    """Longitudinal acceleration [m/s²] at control F [N] (a closed form without a map)."""
    if p[P_USEMAP] == 0.0:
        return (F - _resistance_nomap(v, kappa, grade, bank, p)) / p[P_MASS]
    usage_control(v, kappa, grade, bank, F, p, out)
    return out[O_AX]


@njit(cache=True, error_model="numpy")
def steady_control(v, kappa, grade, bank, p, out):
    """Control force [N] holding speed (a_x = 0); ``out`` holds that (lean) state."""
    if p[P_USEMAP] != 0.0:
        return _control_for_ax_map(v, kappa, grade, bank, 0.0, p, out, 0.0)
    # without a map drag and rolling resistance do not depend on the control: one evaluation
    F = _resistance_nomap(v, kappa, grade, bank, p)
    usage_control(v, kappa, grade, bank, F, p, out)
    return F


@njit(cache=True, error_model="numpy")
def _g_control(v, kappa, grade, bank, F, p, out):
    """Usage excess max(u_f, u_r) - 1 at control F [N]; BIG when an axle unloads."""
    st = usage_control(v, kappa, grade, bank, F, p, out)
    if st != 0:
        return BIG
    return max_usage(out) - 1.0


@njit(cache=True, error_model="numpy")
def _g_speed(v, kappa, grade, bank, p, out):
    """Usage excess at steady speed v [m/s]; BIG when an axle unloads or the car rolls."""
    steady_control(v, kappa, grade, bank, p, out)
    if out[O_STATUS] != 0.0:
        return BIG
    return max_usage(out) - 1.0


#: Usage margin [-] a braking step keeps below 1 so that the force the final pass
#: recomputes from the speed change (rounding apart) is feasible too.
BRAKE_MARGIN = 1e-7


@njit(cache=True, error_model="numpy")
def _g_brake(vnext, ds, kappa, grade, bank, x, p, out):
    """Usage excess (plus :data:`BRAKE_MARGIN`) of the implicit braking step from speed
    ``x`` [m/s] at this step to ``vnext`` [m/s] at the next, ``ds`` [m] on: the control that
    gives a_x = (vnext² - x²)/(2 ds), applied at x (one lean evaluation, whose ride heights
    a mapped car solves with that a_x); BIG when an axle unloads."""
    a = (vnext * vnext - x * x) / (2.0 * ds)
    control_for_ax_lean(x, kappa, grade, bank, a, p, out)
    if out[O_STATUS] != 0.0:
        return BIG
    return max_usage(out) - 1.0 + BRAKE_MARGIN


@njit(cache=True, error_model="numpy")
def _g_kind(kind, x, v, ds, kappa, grade, bank, p, out):
    if kind == 0.0:
        return _g_speed(x, kappa, grade, bank, p, out)
    if kind == 1.0:
        return _g_control(v, kappa, grade, bank, x, p, out)
    return _g_brake(v, ds, kappa, grade, bank, x, p, out)


@njit(cache=True, error_model="numpy")
def _illinois(kind, x_ok, g_ok, x_bad, g_bad, v, ds, kappa, grade, bank, p, out,
              xtol):
    """Illinois (modified regula falsi) search for the feasibility boundary.

    ``kind`` 0: x is the speed [m/s] (steady state); 1: x is the control force [N] at speed
    ``v``; 2: x is the speed [m/s] of an implicit braking step reaching speed ``v`` [m/s] at
    the end of a step of ``ds`` [m] (:func:`_g_brake`; ``ds`` is unused by the others).
    Kinds are floats (0.0, 1.0, 2.0): an integer constant would make numba compile one
    version per kind (a literal type each), tripling these searches' compile time.
    Requires g(x_ok) <= 0 < g(x_bad); returns a feasible x within ``xtol`` of the boundary
    (or whose usage is within 2e-5 of 1). Falls back to bisection while g(x_bad) is not
    finite (an unloaded axle).
    """
    lo = x_ok
    hi = x_bad
    glo = g_ok
    ghi = g_bad
    wlo = g_ok  # working values (halved by the Illinois rule)
    whi = g_bad
    last = 0
    for _ in range(80):
        if abs(hi - lo) <= xtol or glo > -2e-5:  # usage within 2e-5 of its limit
            break
        w = hi - lo
        if ghi >= 0.5 * BIG:
            x = lo + 0.5 * w
            last = 0
        else:
            x = (lo * whi - hi * wlo) / (whi - wlo)
            a = lo + 0.02 * w
            b = hi - 0.02 * w
            if (x - a) * (x - b) > 0.0:  # outside the inner 96 % of the bracket
                x = lo + 0.5 * w
        gx = _g_kind(kind, x, v, ds, kappa, grade, bank, p, out)
        if gx <= 0.0:
            lo = x
            glo = gx
            wlo = gx
            if last == -1:
                whi *= 0.5
            last = -1
        else:
            hi = x
            ghi = gx
            whi = gx
            if last == 1:
                wlo *= 0.5
            last = 1
    return lo


@njit(cache=True, error_model="numpy")
def largest_feasible_control(v, kappa, grade, bank, f_ok, f_bad, p, out, tol):
    """Feasible control [N] nearest the boundary between a feasible ``f_ok`` and an
    infeasible ``f_bad`` (either side)."""
    g_ok = _g_control(v, kappa, grade, bank, f_ok, p, out)
    g_bad = _g_control(v, kappa, grade, bank, f_bad, p, out)
    if g_bad <= 0.0:
        return f_bad
    return _illinois(1.0, f_ok, g_ok, f_bad, g_bad, v, 0.0, kappa, grade, bank, p, out, tol)


@njit(cache=True, error_model="numpy")
def _bracket_up(lo, glo, step, vcap, kappa, grade, bank, p, out):
    """From a feasible ``lo`` step up (step doubling) to the first infeasible speed or vcap.

    Returns (lo, glo, hi, ghi); ghi <= 0 means every speed up to vcap was feasible."""
    while True:
        hi = lo * (1.0 + step)
        if hi >= vcap:
            hi = vcap
        ghi = _g_speed(hi, kappa, grade, bank, p, out)
        if ghi > 0.0 or hi >= vcap:
            return lo, glo, hi, ghi
        lo = hi
        glo = ghi
        step *= 2.0


@njit(cache=True, error_model="numpy")
def _window_search(kind, x0, slope, v, ds, kappa, grade, bank, p, out, xtol,
                   x_lo, x_hi, x_stop):
    """Secant search from a neighbour's prediction ``x0`` for a feasible point on the
    boundary: one whose usage excess g lies in (-2e-5, 0] (the acceptance of
    :func:`_illinois`), aiming at -1e-5 with the slope dg/dx ``slope`` known from the
    neighbouring step and corrected by each probe. x stays within [x_lo, x_hi]; at
    ``x_stop`` (kind 1: the engine force) a feasible g is accepted. Kinds as
    :func:`_illinois`.

    Returns (x, slope, ok, g) with g the usage excess at x; ok False after 4 probes without
    success or on an unloaded axle (the caller then runs its bracketing search).
    """
    x = x0
    have_ok = False
    have_bad = False
    xo = 0.0
    go = 0.0
    xb = 0.0
    xp = math.nan
    gp = math.nan
    g = math.nan
    for _ in range(4):
        g = _g_kind(kind, x, v, ds, kappa, grade, bank, p, out)
        if g >= 0.5 * BIG:
            return x, slope, False, g
        if g <= 0.0:
            if g > -2e-5 or x == x_stop:
                return x, slope, True, g
            have_ok = True
            xo = x
            go = g
        else:
            have_bad = True
            xb = x
        if have_ok and have_bad and abs(xb - xo) <= xtol:
            return xo, slope, True, go
        if not math.isnan(xp) and x != xp:
            s = (g - gp) / (x - xp)
            if s * slope > 0.0:
                slope = s
        xp = x
        gp = g
        if kind == 0.0 and x > 0.0:
            # usage grows about as a power of speed (v² without aero): step in that model
            e = slope * x / (1.0 + g)
            xn = x * ((1.0 - 1e-5) / (1.0 + g)) ** (1.0 / e) if e > 0.1 else \
                x - (g + 1e-5) / slope
        else:
            xn = x - (g + 1e-5) / slope
        if have_ok and have_bad and (xn - xo) * (xn - xb) >= 0.0:
            xn = 0.5 * (xo + xb)
        xn = x_lo if xn < x_lo else (x_hi if xn > x_hi else xn)
        if xn == x:
            return x, slope, False, g
        x = xn
    return x, slope, False, g


@njit(cache=True, error_model="numpy")
def corner_limit(kappa, grade, bank, guess, lo_known, vcap, p, out, tol):
    """Highest steady speed [m/s] below the first infeasible one (both axles u <= 1).

    ``guess`` is a predicted limit (e.g. a neighbour's, scaled by the curvature ratio);
    ``lo_known`` a speed below which every speed is known feasible (0 if unknown). The search
    brackets around the guess with small, doubling steps, checks half the bracket speed for
    an infeasible band when nothing is known below (usage need not be monotonic in speed; a
    failed check falls back to a scan from the bottom), then refines to ``tol`` [m/s] with
    the Illinois method. Returns ``vcap`` when every speed up to it is feasible, 0 when even
    V_MIN is not.
    """
    step0 = 0.004
    if lo_known > V_MIN:
        lo = lo_known if lo_known < vcap else vcap
        glo = _g_speed(lo, kappa, grade, bank, p, out)
        if glo <= 0.0:
            s = guess / lo - 1.0 + step0 if guess > lo else step0
            lo, glo, hi, ghi = _bracket_up(lo, glo, s, vcap, kappa, grade, bank, p, out)
            if ghi <= 0.0:
                return vcap
            return _illinois(0.0, lo, glo, hi, ghi, 0.0, 0.0, kappa, grade, bank, p, out,
                           tol)
    found = False
    lo = 0.0
    glo = 0.0
    hi = vcap
    ghi = 1.0
    if V_MIN < guess < vcap:
        gg = _g_speed(guess, kappa, grade, bank, p, out)
        if gg <= 0.0:
            lo, glo, hi, ghi = _bracket_up(guess, gg, step0, vcap, kappa, grade, bank, p, out)
        else:
            hi = guess
            ghi = gg
            step = step0
            lo = guess / (1.0 + step)
            glo = _g_speed(lo, kappa, grade, bank, p, out)
            while glo > 0.0 and lo > V_MIN:
                hi = lo
                ghi = glo
                step *= 2.0
                lo = lo / (1.0 + step)
                glo = _g_speed(lo, kappa, grade, bank, p, out)
        found = glo <= 0.0 and lo > V_MIN
        if found and _g_speed(0.5 * lo, kappa, grade, bank, p, out) > 0.0:
            found = False
    elif guess >= vcap:
        ghi = _g_speed(vcap, kappa, grade, bank, p, out)
        if ghi <= 0.0:
            lo = vcap
            glo = ghi
            found = True
    if found and ghi <= 0.0:
        # feasible up to vcap: make sure there is no infeasible band below it
        for f in (0.2, 0.4, 0.6, 0.8):
            if _g_speed(vcap * f, kappa, grade, bank, p, out) > 0.0:
                found = False
                break
        if found:
            return vcap
    if not found:
        lo = V_MIN
        glo = _g_speed(lo, kappa, grade, bank, p, out)
        if glo > 0.0:
            return 0.0
        while True:
            hi = lo * 1.15
            if hi >= vcap:
                hi = vcap
            ghi = _g_speed(hi, kappa, grade, bank, p, out)
            if ghi > 0.0:
                break
            if hi >= vcap:
                return vcap
            lo = hi
            glo = ghi
    return _illinois(0.0, lo, glo, hi, ghi, 0.0, 0.0, kappa, grade, bank, p, out, tol)


@njit(cache=True, parallel=True, error_model="numpy")
def corner_limits(kappa, grade, bank, vcap, p, tol, nchunks):
    """Corner-speed limit [m/s] at every step; chunks run in parallel, each warm-started.

    Between neighbours with the same grade and bank, every state quantity depends on the
    curvature only through a_y = v² κ and usage does not fall as |a_y| rises, so a step with
    no more curvature than its neighbour is feasible at every speed the neighbour was: its
    limit is at least the neighbour's (and equals vcap when the neighbour's did).
    """
    n = kappa.shape[0]
    vlim = np.empty(n)
    size = (n + nchunks - 1) // nchunks
    for c in prange(nchunks):
        _corner_limits_chunk(kappa, grade, bank, vcap, p, tol, c * size,
                             min(n, (c + 1) * size), vlim)
    return vlim


@njit(cache=True, error_model="numpy")
def corner_limits_serial(kappa, grade, bank, vcap, p, tol, nchunks):
    """:func:`corner_limits` on the calling thread: the same chunks one after another (the
    same warm starts, so the same numbers), without starting numba's thread pool."""
    n = kappa.shape[0]
    vlim = np.empty(n)
    size = (n + nchunks - 1) // nchunks
    for c in range(nchunks):
        _corner_limits_chunk(kappa, grade, bank, vcap, p, tol, c * size,
                             min(n, (c + 1) * size), vlim)
    return vlim


#: Largest change of grade or bank [rad] between neighbouring steps for which the corner-limit
#: search still starts from the neighbour's answer (0.002 rad: a 0.2 % grade change per step).
NEAR_ROAD_RAD = 2e-3


@njit(cache=True, inline="always", error_model="numpy")
def _lnln_predict(x, x1, f1, x2, f2, x3, f3):
    """Predicted ln v_lim at x = ln|curvature| from up to three earlier pairs (x_j, ln v_j)
    of the same corner (x1, f1 newest; NaN f = missing).

    On a road of one grade and bank the steady limit depends on the curvature alone: without
    aero v ∝ |curvature|^-1/2 exactly, and aero bends that power law slowly, so a
    low-order polynomial in these logarithms extrapolates it far better than one in distance.
    The quadratic through three pairs is used while its Lagrange weights stay small (the
    pairs not bunched against the target), else the line through two, else the power law
    -1/2 from the newest.
    """
    if not math.isnan(f3):
        d12 = x1 - x2
        d13 = x1 - x3
        d23 = x2 - x3
        if d12 != 0.0 and d13 != 0.0 and d23 != 0.0:
            w1 = (x - x2) * (x - x3) / (d12 * d13)
            w2 = -(x - x1) * (x - x3) / (d12 * d23)
            w3 = (x - x1) * (x - x2) / (d13 * d23)
            if abs(w1) + abs(w2) + abs(w3) < 8.0:
                return w1 * f1 + w2 * f2 + w3 * f3
    if not math.isnan(f2):
        d12 = x1 - x2
        if d12 != 0.0 and abs(x - x1) < 3.5 * abs(d12):
            return f1 + (f1 - f2) * (x - x1) / d12
    return f1 - 0.5 * (x - x1)


@njit(cache=True, inline="always", error_model="numpy")
def _push(h, x, f):
    """Prepend the pair (x, f) to a history ``h`` = [x1, f1, x2, f2, x3, f3] (newest first,
    for :func:`_lnln_predict`); a history reset (``h[1]`` NaN) starts anew with this pair."""
    if math.isnan(h[1]):
        h[3] = math.nan
        h[5] = math.nan
    h[4] = h[2]
    h[5] = h[3]
    h[2] = h[0]
    h[3] = h[1]
    h[0] = x
    h[1] = f


@njit(cache=True, error_model="numpy")
def _corner_limits_chunk(kappa, grade, bank, vcap, p, tol, start, stop, vlim):
    """Corner limits of steps start..stop-1 into ``vlim``, each warm-started from the last.

    Along a corner of one grade and bank the first probe comes from the limits already found
    (:func:`_lnln_predict`, each corrected to its root by the slope of the usage), aimed a
    half window below the boundary, so most steps take one evaluation; the secant search of
    :func:`_window_search` corrects a miss. Where the curvature rises past a step held at
    ``vcap``, one evaluation at the cap settles the step while the car holds it.
    """
    own = np.full(NOUT, np.nan)
    out = borrowed(own)  # no reference counting in the searches (lapbalance.views)
    p = borrowed(p)
    prev_v = 0.0
    prev_k = 0.0
    prev_g = math.nan
    prev_b = math.nan
    elast = math.nan  # v d(usage)/dv at the neighbour's limit [-] (2 without aero)
    k_band = 0.0  # curvature of the last check for an infeasible band below the limit
    since = 0
    # (ln|curvature|, ln v_root) of the last three limits of this corner, newest first
    own_h = np.full(6, np.nan)
    h = borrowed(own_h)
    for i in range(start, stop):
        k = kappa[i]
        same = grade[i] == prev_g and bank[i] == prev_b and prev_v > 0.0
        # a measured road changes grade and bank a little at every step: the neighbour's
        # limit still predicts this one (but bounds it only on the very same road)
        near = same or (prev_v > 0.0 and abs(grade[i] - prev_g) <= NEAR_ROAD_RAD and
                        abs(bank[i] - prev_b) <= NEAR_ROAD_RAD)
        lo_known = 0.0
        guess = prev_v
        if same and abs(k) <= abs(prev_k):
            if prev_v >= vcap:
                vlim[i] = vcap
                prev_k = k
                continue
            lo_known = prev_v
        if near:
            if k != 0.0 and prev_k != 0.0:
                r = math.sqrt(abs(prev_k) / abs(k))
                r = 0.8 if r < 0.8 else (1.25 if r > 1.25 else r)
                guess = prev_v * r
        if not near or k * prev_k <= 0.0:
            h[1] = math.nan  # a new corner (or road): no history
        vl = -1.0
        since += 1
        # an infeasible band below the limit needs a sloped or banked road (on a flat one
        # the usage rises with speed): check less often on the flat
        kfac = 1.25 if grade[i] == 0.0 and bank[i] == 0.0 else 1.05
        if near and prev_v >= vcap:
            # the curvature rose (or the road changed) past a step feasible at the cap:
            # is this one too?
            band_ok = True
            if abs(k) > kfac * k_band or since > 32:
                band_ok = _g_speed(0.5 * vcap, k, grade[i], bank[i], p, out) <= 0.0
                k_band = abs(k)
                since = 0
            if band_ok and _g_speed(vcap, k, grade[i], bank[i], p, out) <= 0.0:
                vl = vcap
        elif near and k != 0.0 and (k * prev_k > 0.0 or bank[i] == 0.0) \
                and prev_k != 0.0 and not math.isnan(elast):
            # the neighbour's limit, scaled, with its slope: a secant step or two; below
            # a rising curvature, look for an infeasible band now and then
            band_ok = True
            if lo_known == 0.0 and (abs(k) > kfac * k_band or since > 32):
                band_ok = _g_speed(0.5 * guess, k, grade[i], bank[i], p, out) <= 0.0
                k_band = abs(k)
                since = 0
            if band_ok:
                xk = math.log(abs(k))
                if not math.isnan(h[1]):
                    vr = math.exp(_lnln_predict(xk, h[0], h[1], h[2], h[3], h[4], h[5]))
                    ge = vr * (1.0 - 1e-5 / elast)  # aim half the acceptance window inside
                    if abs(ge - guess) < 0.05 * guess:
                        guess = ge
                slope = elast / guess  # the elasticity carries over better than the slope
                x, s2, ok, gx = _window_search(0.0, guess, slope, 0.0, 0.0, k, grade[i],
                                               bank[i], p, out, tol, V_MIN, vcap, -1.0)
                if ok and x < vcap and x >= lo_known * (1.0 - 1e-4):
                    # below a known-feasible lo_known (a probe aimed inside the window on an
                    # arc of one radius): lo_known lies between it and the boundary
                    vl = x if x >= lo_known else lo_known
                    elast = s2 * x
                    xr = x - gx / s2  # the root, a Newton step from the accepted probe
                    _push(h, xk, math.log(xr if xr > x else x))
        if vl < 0.0:
            vl = corner_limit(k, grade[i], bank[i], guess, lo_known, vcap, p,
                              out, tol)
            elast = 1.5 if vl > V_MIN else math.nan
            k_band = abs(k)
            since = 0
            h[1] = math.nan
            if V_MIN < vl < vcap:
                _push(h, math.log(abs(k)), math.log(vl))  # restarts the history
        if vl >= vcap:
            h[1] = math.nan
        vlim[i] = vl
        prev_v = vl
        prev_k = k
        prev_g = grade[i]
        prev_b = bank[i]
    keep_alive(own)
    keep_alive(own_h)


@njit(cache=True, error_model="numpy")
def _search_kind(kind, v, ds, kappa, grade, bank, f_ok, g_ok, hint, back, step, direction,
                 f_stop, p, out, ftol):
    """Boundary of the feasible interval beyond a feasible ``f_ok`` in ``direction`` (+1
    more drive or a higher braking speed, -1 more braking), starting near ``hint`` and not
    past ``f_stop`` (returned when everything up to it is feasible), for kinds 1 and 2 (see
    :func:`_illinois`), with the first step back from an infeasible hint ``back`` and the
    first step on ``step`` (both doubling; [N], or [m/s] for kind 2). ``g_ok`` NaN: not
    evaluated yet (it is, if needed; NaN is returned when ``f_ok`` then proves infeasible).
    """
    if not math.isnan(hint) and (hint - f_ok) * direction > 0.0 and \
            (f_stop - hint) * direction > 0.0:
        g_h = _g_kind(kind, hint, v, ds, kappa, grade, bank, p, out)
        if g_h > 0.0:
            # the boundary is just short of the hint: step back from it (doubling) to a
            # feasible point, so the bracket is narrow
            f_bad = hint
            g_bad = g_h
            while True:
                f_try = f_bad - direction * back
                if (f_try - f_ok) * direction <= 0.0:
                    break  # back at f_ok: use the wide bracket
                g_try = _g_kind(kind, f_try, v, ds, kappa, grade, bank, p, out)
                if g_try <= 0.0:
                    f_ok = f_try
                    g_ok = g_try
                    break
                f_bad = f_try
                g_bad = g_try
                back *= 2.0
            if math.isnan(g_ok):
                g_ok = _g_kind(kind, f_ok, v, ds, kappa, grade, bank, p, out)
                if g_ok > 0.0:
                    return math.nan
            return _illinois(kind, f_ok, g_ok, f_bad, g_bad, v, ds, kappa, grade, bank, p, out,
                             ftol)
        f_ok = hint
        g_ok = g_h
    while True:
        f_bad = f_ok + direction * step
        if (f_bad - f_stop) * direction >= 0.0:
            f_bad = f_stop
        g_bad = _g_kind(kind, f_bad, v, ds, kappa, grade, bank, p, out)
        if g_bad > 0.0:
            break
        if f_bad == f_stop:
            return f_stop
        f_ok = f_bad
        g_ok = g_bad
        step *= 2.0
    if math.isnan(g_ok):
        g_ok = _g_kind(kind, f_ok, v, ds, kappa, grade, bank, p, out)
        if g_ok > 0.0:
            return math.nan
    return _illinois(kind, f_ok, g_ok, f_bad, g_bad, v, ds, kappa, grade, bank, p,
                     out, ftol)


@njit(cache=True, error_model="numpy")
def max_accel_control(v, kappa, grade, bank, p, gears, trpm, tnm, out, ftol,
                      hint=math.nan):
    """Largest drive control [N] at v that the powertrain gives and both axles carry."""
    feng = engine_force(v, p, gears, trpm, tnm)
    m = p[P_MASS]
    return _max_accel_feng(v, kappa, grade, bank, feng, p, out, ftol, hint,
                           0.005 * m * G, 0.02 * m * G)


@njit(cache=True, error_model="numpy")
def _max_accel_feng(v, kappa, grade, bank, feng, p, out, ftol, hint, back, step):
    """:func:`max_accel_control` with the engine force ``feng`` [N] already known and the
    search steps [N] of :func:`_search_kind`."""
    if _g_control(v, kappa, grade, bank, feng, p, out) <= 0.0:
        return feng
    fs = steady_control(v, kappa, grade, bank, p, out)
    if out[O_STATUS] != 0.0 or max_usage(out) > 1.0:
        return fs  # should not happen below the corner limit
    gs = max_usage(out) - 1.0
    if feng <= fs:
        # the engine cannot hold speed and less drive is infeasible: least extra drive
        return _illinois(1.0, fs, gs, feng, 1.0, v, 0.0, kappa, grade, bank, p, out, ftol)
    return _search_kind(1.0, v, 0.0, kappa, grade, bank, fs, gs, hint, back, step, 1.0, feng, p,
                        out, ftol)


@njit(cache=True, error_model="numpy")
def max_decel_control(v, kappa, grade, bank, p, out, ftol, hint=math.nan):
    """Smallest control [N] at v that both axles carry (most braking; positive when even
    coasting would saturate an axle and a little throttle is needed)."""
    fs = steady_control(v, kappa, grade, bank, p, out)
    if out[O_STATUS] != 0.0 or max_usage(out) > 1.0:
        return fs
    gs = max_usage(out) - 1.0
    f_stop = -4.0 * p[P_MASS] * G - 4.0 * abs(out[O_DOWNF])
    m = p[P_MASS]
    return _search_kind(1.0, v, 0.0, kappa, grade, bank, fs, gs, hint, 0.005 * m * G,
                        0.02 * m * G, -1.0, f_stop, p, out, ftol)


@njit(cache=True, inline="always", error_model="numpy")
def _extrapolate(h1, h2, h3, h4):
    """Next value of a smooth sequence from its last four (h1 newest; NaN = missing): the
    cubic when four are known, else the quadratic, else linear, else h1; each higher order
    only while its added term stays small against the last difference (a kink, e.g. the
    start of a braking zone, falls back to the lower order)."""
    if math.isnan(h2):
        return h1
    lin = 2.0 * h1 - h2
    if math.isnan(h3):
        return lin
    quad = 3.0 * h1 - 3.0 * h2 + h3
    if abs(quad - lin) >= 0.5 * abs(h1 - h2):
        return lin
    if math.isnan(h4):
        return quad
    cub = 4.0 * h1 - 6.0 * h2 + 4.0 * h3 - h4
    return cub if abs(cub - quad) < 0.5 * abs(h1 - h2) else quad


@njit(cache=True, error_model="numpy")
def speed_passes(kappa, grade, bank, vlim, ds, v_start, v_end, p, gears, trpm, tnm, ftol):
    """Forward (acceleration) and backward (braking) passes; returns the speed trace [m/s].

    ``v_start`` is the speed at step 0 (NaN = the corner limit there); ``v_end`` the speed at
    the last step (NaN = free).
    """
    n = kappa.shape[0]
    own = np.full(NOUT, np.nan)
    out = borrowed(own)  # no reference counting in the searches (lapbalance.views)
    p = borrowed(p)
    gears = borrowed(gears)
    trpm = borrowed(trpm)
    tnm = borrowed(tnm)
    m = p[P_MASS]
    vf = np.empty(n)
    vf[0] = vlim[0] if math.isnan(v_start) else min(v_start, vlim[0])
    hint = math.nan  # the last drive search's boundary force [N] and the three before it
    hint2 = math.nan
    hint3 = math.nan
    hint4 = math.nan
    last = -10  # step of the last search
    slope = math.nan  # d(usage)/dF at the last search's result [1/N]
    ax_last = math.nan  # a_x the last search gave [m/s²]
    eng_last = False  # the last search gave the engine's force
    for i in range(n - 1):
        vi = vf[i]
        vt = vlim[i + 1]
        feng = engine_force(vi, p, gears, trpm, tnm)  # once per step
        # can the car reach the next step's limit? one evaluation settles most steps
        need = (vt * vt - vi * vi) / (2.0 * ds)
        if need <= 0.0 and vi >= vlim[i] and \
                _resistance_bound(vi, kappa[i], grade[i], bank[i], p) <= feng:
            # at this step's limit the car holds its speed (the limit is a feasible steady
            # state, and the engine gives the steady force, whatever the ride heights): the
            # most it can accelerate is at least 0, so its trace reaches the lower next
            # limit, no evaluation needed
            vf[i + 1] = vt
            continue
        # (not while the last step's search gave less than this: the search settles it)
        if need < 50.0 and not (last == i - 1 and need > ax_last):
            fn = control_for_ax_lean(vi, kappa[i], grade[i], bank[i], need, p, out)
            if out[O_STATUS] == 0.0 and max_usage(out) <= 1.0 and fn <= feng:
                vf[i + 1] = vt
                continue
        if last == i - 1 and not math.isnan(hint):
            # warm start: extrapolate the neighbouring searches, with small search steps
            guess = _extrapolate(hint, hint2, hint3, hint4)
            d = 0.5 * abs(hint - hint2) if not math.isnan(hint2) else 0.005 * m * G
            d = d if d > 4.0 * ftol else 4.0 * ftol
            fs = _resistance_nomap(vi, kappa[i], grade[i], bank[i], p)
            F = math.nan
            root = math.nan  # the boundary force, a Newton step from the accepted probe
            # after a step at the engine's force, first try this step's (one evaluation)
            search = guess < feng and fs < feng and not eng_last
            if search and not math.isnan(slope):
                aim = guess - 1e-5 / slope  # half the acceptance window inside
                x, s2, ok, gx = _window_search(1.0, aim if aim > fs else guess, slope, vi,
                                               0.0, kappa[i], grade[i], bank[i], p, out, ftol,
                                               fs, feng, feng)
                if ok:
                    F = x
                    slope = s2
                    if gx > -2e-5 and x < feng:
                        root = x - gx / s2
            if math.isnan(F) and search:
                F = _search_kind(1.0, vi, 0.0, kappa[i], grade[i], bank[i], fs, math.nan, guess,
                                 d, d, 1.0, feng, p, out, ftol)
            if math.isnan(F):
                F = _max_accel_feng(vi, kappa[i], grade[i], bank[i], feng, p, out,
                                    ftol, guess, d, d)
            hint4 = hint3
            hint3 = hint2
            hint2 = hint
        else:
            root = math.nan
            F = _max_accel_feng(vi, kappa[i], grade[i], bank[i], feng, p, out,
                                ftol, math.nan, 0.005 * m * G, 0.02 * m * G)
            hint2 = math.nan
            hint3 = math.nan
            hint4 = math.nan
        if math.isnan(slope):
            slope = 1.0 / (p[P_MUXR] * (m * G + abs(out[O_DOWNF])))  # about 1 / grip
        hint = F if math.isnan(root) else root
        last = i
        eng_last = F >= feng
        if p[P_USEMAP] != 0.0 and out[O_CONTROL] == F and out[O_SPEED] == vi and \
                out[O_STATUS] == 0.0:
            ax = out[O_AX]  # the search's last probe was this force at this step
        else:
            ax = ax_of_control(vi, kappa[i], grade[i], bank[i], F, p, out)
        v2 = vi * vi + 2.0 * ax * ds
        vn = math.sqrt(v2) if v2 > 0.0 else 0.0
        vf[i + 1] = vn if vn < vlim[i + 1] else vlim[i + 1]
        ax_last = ax
    vb = np.empty(n)
    vb[n - 1] = vlim[n - 1] if math.isnan(v_end) else min(v_end, vlim[n - 1])
    hint = math.nan
    hint2 = math.nan
    hint3 = math.nan
    hint4 = math.nan
    last = n + 10
    slope = math.nan
    for i in range(n - 2, -1, -1):
        # braking into the speed the car has at the next step (the slower of the traces)
        vnext = vb[i + 1] if vb[i + 1] < vf[i + 1] else vf[i + 1]
        if vnext >= vlim[i] or vnext >= vf[i]:
            # not braking into step i+1 from here: the limit (or the forward trace) rules
            vb[i] = vlim[i]
            continue
        cap = vf[i]  # the forward trace: no braking speed above it matters
        if last != i + 1 and _g_brake(vnext, ds, kappa[i], grade[i], bank[i], cap, p, out) <= 0.0:
            vb[i] = cap  # the start of a braking zone: the forward trace brakes in time
            continue
        # implicit step: the control is applied at this step's own speed v and takes the car
        # from v to vnext over ds, a_x = (vnext² - v²)/(2 ds): a search over v for the
        # highest speed whose control both axles carry (with BRAKE_MARGIN), not above the
        # forward trace, warm-started from the neighbouring steps' decelerations
        v2n = vnext * vnext
        xtol = ftol * ds / (m * (vnext if vnext > 1.0 else 1.0))  # ftol as a speed [m/s]
        if last == i + 1 and not math.isnan(hint):
            ag = _extrapolate(hint, hint2, hint3, hint4)
            v2g = v2n - 2.0 * ds * ag
            guess = math.sqrt(v2g) if v2g > v2n else math.nan
            d = 0.5 * abs(hint - hint2) if not math.isnan(hint2) else 0.005 * G
            dv = d * ds / (vnext if vnext > 1.0 else 1.0)
            dv = dv if dv > 4.0 * xtol else 4.0 * xtol
            back = dv
            step = dv
        else:
            guess = math.nan
            back = 0.005 * G * ds / (vnext if vnext > 1.0 else 1.0)
            step = 0.2 * G * ds / (vnext if vnext > 1.0 else 1.0)
        X = math.nan
        root = math.nan
        if not math.isnan(guess) and not math.isnan(slope) and vnext < guess < cap:
            aim = guess - 1e-5 / slope  # half the acceptance window inside
            x, s2, ok, gx = _window_search(2.0, aim if aim > vnext else guess, slope, vnext,
                                           ds, kappa[i], grade[i], bank[i], p, out, xtol,
                                           vnext, cap, cap)
            if ok:
                X = x
                slope = s2
                if gx > -2e-5 and x < cap:
                    root = x - gx / s2
        if math.isnan(X):
            X = _search_kind(2.0, vnext, ds, kappa[i], grade[i], bank[i], vnext, math.nan,
                             guess, back, step, 1.0, cap, p, out, xtol)
            # d(usage)/dv: about (v/ds) / (the front axle's grip per unit mass)
            slope = vnext / (ds * p[P_MUXF] * (G + abs(out[O_DOWNF]) / m))
        if not math.isnan(X):
            hint4 = hint3 if last == i + 1 else math.nan
            hint3 = hint2 if last == i + 1 else math.nan
            hint2 = hint if last == i + 1 else math.nan
            xr = X if math.isnan(root) else root
            hint = (v2n - xr * xr) / (2.0 * ds)  # the boundary's a_x [m/s²]
            last = i
            if vnext <= X <= cap:
                vb[i] = X
                continue
        else:
            hint = math.nan
            last = n + 10
        # the braking curve lies above the forward trace: brake from the forward trace if
        # the car can, else from the fastest speed below it it can brake from (bisection)
        if _g_brake(vnext, ds, kappa[i], grade[i], bank[i], cap, p, out) <= 0.0:
            vb[i] = cap
            continue
        lo = vnext
        hi = cap
        for _ in range(40):
            mid = 0.5 * (lo + hi)
            if _g_brake(vnext, ds, kappa[i], grade[i], bank[i], mid, p, out) <= 0.0:
                lo = mid
            else:
                hi = mid
        vb[i] = lo
    v = np.empty(n)
    for i in range(n):
        v[i] = vf[i] if vf[i] < vb[i] else vb[i]
    keep_alive(own)
    return v


NCH = 40  # channels written by final_pass per step
#: Usage [-] above 1 the final pass still takes as the force the passes found feasible: the
#: passes searched at the same speed and force, so only rounding (and the warm-started ride
#: heights, to 1e-9 m) can move the recomputed usage, by far less than this.
USAGE_SLACK = 1e-9


@njit(cache=True, parallel=True, error_model="numpy")
def final_pass(v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm,
               ftol, ay_liftoff):
    """Per-step force balance consistent with the speed trace, all load parts, usages,
    limiting constraint, and the lift-off / coasting re-evaluation.

    Returns (res, ctrl) where ``res[i, :NOUT]`` is the state (``O_*``) and the extra columns
    are listed in :mod:`lapbalance.lap` (gear, rpm, engine force, limit code, lift-off...).
    """
    n = v.shape[0]
    res = np.zeros((n, NOUT + NCH))
    nchunks = 8 if n > 400 else 1
    size = (n + nchunks - 1) // nchunks
    for ch in prange(nchunks):
        _final_chunk(v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm, ftol,
                     ay_liftoff, res, ch * size, min(n, (ch + 1) * size))
    return res


@njit(cache=True, error_model="numpy")
def final_pass_serial(v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm, ftol,
                      ay_liftoff):
    """:func:`final_pass` on the calling thread (the same chunks in turn, the same numbers)."""
    n = v.shape[0]
    res = np.zeros((n, NOUT + NCH))
    nchunks = 8 if n > 400 else 1
    size = (n + nchunks - 1) // nchunks
    for ch in range(nchunks):
        _final_chunk(v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm, ftol,
                     ay_liftoff, res, ch * size, min(n, (ch + 1) * size))
    return res


@njit(cache=True, error_model="numpy")
def _final_chunk(v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm,
                 ftol, ay_liftoff, res, start, stop):
    """Rows start..stop-1 of :func:`final_pass`."""
    own_out = np.full(NOUT, np.nan)
    own_tmp = np.full(NOUT, np.nan)
    out = borrowed(own_out)  # no reference counting in the searches (lapbalance.views)
    tmp = borrowed(own_tmp)
    v = borrowed(v)
    kappa = borrowed(kappa)
    grade = borrowed(grade)
    bank = borrowed(bank)
    res = borrowed(res)
    p = borrowed(p)
    gears = borrowed(gears)
    trpm = borrowed(trpm)
    tnm = borrowed(tnm)
    for i in range(start, stop):
        _final_step(i, v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm, ftol,
                    ay_liftoff, res, out, tmp)
    keep_alive(own_out)
    keep_alive(own_tmp)


@njit(cache=True, error_model="numpy")
def _final_step(i, v, kappa, grade, bank, ds, closed_tail, vcap, p, gears, trpm, tnm, ftol,
                ay_liftoff, res, out, tmp):
    """One step of :func:`final_pass` (fills row ``i`` of ``res``)."""
    n = v.shape[0]
    vi = v[i]
    if i < n - 1:
        a_req = (v[i + 1] ** 2 - vi * vi) / (2.0 * ds)
    elif not math.isnan(closed_tail):
        a_req = (closed_tail ** 2 - vi * vi) / (2.0 * ds)
    else:
        a_req = (vi * vi - v[i - 1] ** 2) / (2.0 * ds) if n > 1 else 0.0
    F = control_for_ax(vi, kappa[i], grade[i], bank[i], a_req, p, out)
    feng = engine_force(vi, p, gears, trpm, tnm)
    if F > feng:
        F = feng
        state_control(vi, kappa[i], grade[i], bank[i], F, p, out)
    if out[O_STATUS] != 0.0 or max_usage(out) > 1.0 + USAGE_SLACK:
        fs = steady_control(vi, kappa[i], grade[i], bank[i], p, tmp)
        if tmp[O_STATUS] == 0.0 and max_usage(tmp) <= 1.0:
            F = largest_feasible_control(vi, kappa[i], grade[i], bank[i], fs, F, p, tmp, ftol)
        state_control(vi, kappa[i], grade[i], bank[i], F, p, out)
    for k in range(NOUT):
        res[i, k] = out[k]
    g, rpm = gear_and_rpm(vi, p, gears)
    c = NOUT
    res[i, c + 0] = g + 1
    res[i, c + 1] = rpm
    res[i, c + 2] = F if F > 0.0 else 0.0  # drive force
    res[i, c + 3] = -F if F < 0.0 else 0.0  # brake force
    res[i, c + 4] = feng
    lim = LIM_NONE
    uf = out[O_UF]
    ur = out[O_UR]
    if uf >= 0.998 or ur >= 0.998:
        lim = LIM_FRONT if uf >= ur else LIM_REAR
    elif F > 0.0 and F >= feng * (1.0 - 1e-6):
        lim = LIM_REV if rpm >= p[P_REVLIM] * (1.0 - 1e-3) else LIM_ENGINE
    elif vi >= vcap * (1.0 - 1e-6):
        lim = LIM_SPEEDCAP
    res[i, c + 5] = lim
    # lift-off: same speed and curvature, drive replaced by engine overrun
    holds = F > 0.0 and abs(out[O_AY]) >= ay_liftoff
    res[i, c + 6] = 1.0 if holds else 0.0
    fo = overrun_force(vi, p, gears)
    res[i, c + 7] = fo
    if holds:
        b_on = ur - uf
        # the lean state holds all these (the same numbers as the full one)
        state_usage(vi, kappa[i], grade[i], bank[i], -fo, 0.0, p, tmp)
        res[i, c + 8] = (tmp[O_UR] - tmp[O_UF]) - b_on  # dB
        res[i, c + 9] = tmp[O_FZF] - out[O_FZF]  # front-load shift
        res[i, c + 10] = tmp[O_UF]
        res[i, c + 11] = tmp[O_UR]
        res[i, c + 12] = tmp[O_AX]
        res[i, c + 13] = tmp[O_STATUS]
        state_usage(vi, kappa[i], grade[i], bank[i], 0.0, 0.0, p, tmp)
        res[i, c + 14] = (tmp[O_UR] - tmp[O_UF]) - b_on
        res[i, c + 15] = tmp[O_FZF] - out[O_FZF]
        res[i, c + 16] = tmp[O_UF]
        res[i, c + 17] = tmp[O_UR]
        res[i, c + 18] = tmp[O_AX]
    else:
        for k in range(8, 19):
            res[i, c + k] = math.nan


# ---- lift-off margin ------------------------------------------------------------------------
# Columns of :func:`liftoff_margins` (per step; NaN where the step is not checked).
M_LAMBDA = 0  # lift-off margin with engine overrun, a_y_safe / a_y_limit [-]
M_VSAFE = 1  # highest speed at or below the limit where that lift keeps u_r <= 1 [m/s]
M_RESERVE = 2  # 1 - u_r after that lift at the limit speed (clamped at -1) [-]
M_LAMBDA_COAST = 3  # the same three, coasting (no engine braking)
M_VSAFE_COAST = 4
M_RESERVE_COAST = 5
M_AYLIM = 6  # lateral acceleration at the limit speed [m/s²]
NMARGIN = 7


@njit(cache=True, error_model="numpy")
def lift_state(v, kappa, grade, bank, coast, p, gears, out):
    """State after a lift at speed v [m/s]: drive replaced by the engine's overrun force in
    the gear of that speed (``coast`` = 0.0) or by nothing (``coast`` = 1.0), no brakes
    (a float, so one compiled version serves both). A mapped car's ride heights start from
    those ``out`` holds (:func:`state_warm`).

    Fills ``out`` and returns the status code (0 = feasible loads)."""
    fo = 0.0 if coast != 0 else overrun_force(v, p, gears)
    return state_warm(v, kappa, grade, bank, -fo, 0.0, p, out)


@njit(cache=True, inline="always", error_model="numpy")
def _g_lift(v, kappa, grade, bank, coast, p, gears, out):
    """Rear usage excess u_r - 1 after a lift at v [m/s] (the lift of :func:`lift_state`,
    evaluated lean by :func:`state_usage` for the margin searches); BIG when an axle
    unloads."""
    fo = 0.0 if coast != 0 else overrun_force(v, p, gears)
    st = state_usage(v, kappa, grade, bank, -fo, 0.0, p, out)
    if st != 0:
        return BIG
    return out[O_UR] - 1.0


@njit(cache=True, error_model="numpy")
def _refine_lift(x_ok, g_ok, x_bad, g_bad, kappa, grade, bank, coast, p, gears,
                 out, xtol):
    """Illinois search (as :func:`_illinois`) for the speed [m/s] where the rear usage after a
    lift crosses 1, between a safe ``x_ok`` and an unsafe ``x_bad`` (either order)."""
    lo = x_ok
    hi = x_bad
    glo = g_ok
    ghi = g_bad
    wlo = g_ok
    whi = g_bad
    last = 0
    for _ in range(80):
        if abs(hi - lo) <= xtol or glo > -1e-5:
            break
        w = hi - lo
        if ghi >= 0.5 * BIG:
            x = lo + 0.5 * w
            last = 0
        else:
            x = (lo * whi - hi * wlo) / (whi - wlo)
            a = lo + 0.02 * w
            b = hi - 0.02 * w
            if (x - a) * (x - b) > 0.0:
                x = lo + 0.5 * w
        gx = _g_lift(x, kappa, grade, bank, coast, p, gears, out)
        if gx <= 0.0:
            lo = x
            glo = gx
            wlo = gx
            if last == -1:
                whi *= 0.5
            last = -1
        else:
            hi = x
            ghi = gx
            whi = gx
            if last == 1:
                wlo *= 0.5
            last = 1
    return lo


@njit(cache=True, error_model="numpy")
def liftoff_safe_speed(kappa, grade, bank, vlim, guess, coast, p, gears, out,
                       tol):
    """Highest speed [m/s] at or below the corner limit ``vlim`` at which a lift keeps the
    rear within its grip (u_r <= 1 after the lift), and u_r after a lift at ``vlim``.

    The search starts at the limit (one evaluation when the lift there is safe), then steps
    down from ``guess`` (a neighbour's answer scaled to this step; <= 0 = unknown) with
    doubling steps to the first safe speed and refines the crossing with the Illinois method
    to ``tol`` [m/s] or rear usage within 1e-5 of 1. Returns (v_safe, u_r at the limit); v_safe
    is 0 when no speed down to V_MIN is safe.
    """
    g_top = _g_lift(vlim, kappa, grade, bank, coast, p, gears, out)
    u_top = g_top + 1.0
    if g_top <= 0.0:
        return vlim, u_top
    return _safe_speed_below(kappa, grade, bank, vlim, g_top, guess, coast, p, gears, out,
                             tol), u_top


@njit(cache=True, error_model="numpy")
def _safe_speed_below(kappa, grade, bank, vlim, g_top, guess, coast, p, gears, out, tol):
    """The search of :func:`liftoff_safe_speed` below a limit ``vlim`` [m/s] where the lift
    is unsafe (rear usage excess ``g_top`` > 0 there); returns v_safe [m/s]."""
    hi = vlim
    ghi = g_top
    lo = vlim
    step = 0.03
    if V_MIN < guess < vlim:
        g_g = _g_lift(guess, kappa, grade, bank, coast, p, gears, out)
        step = 0.003
        if g_g <= 0.0:
            # safe at the guess: step up (doubling) to the first unsafe speed, not past vlim
            lo = guess
            glo = g_g
            while True:
                x = lo * (1.0 + step)
                if x >= vlim:
                    break
                gx = _g_lift(x, kappa, grade, bank, coast, p, gears, out)
                if gx > 0.0:
                    hi = x
                    ghi = gx
                    break
                lo = x
                glo = gx
                step *= 2.0
            return _refine_lift(lo, glo, hi, ghi, kappa, grade, bank, coast, p, gears, out,
                                tol)
        hi = guess
        ghi = g_g
        lo = guess
    while True:  # step down (doubling) to the first safe speed
        lo = lo * (1.0 - step)
        step = step * 2.0 if step < 0.25 else 0.5
        if lo <= V_MIN:
            lo = V_MIN
        glo = _g_lift(lo, kappa, grade, bank, coast, p, gears, out)
        if glo <= 0.0:
            break
        if lo <= V_MIN:
            return 0.0
        hi = lo
        ghi = glo
    return _refine_lift(lo, glo, hi, ghi, kappa, grade, bank, coast, p, gears, out, tol)


@njit(cache=True, error_model="numpy")
def _safe_speed_warm(kappa, grade, bank, vlim, pred, elast, coast, p, gears, out, tol):
    """:func:`liftoff_safe_speed` with a predicted crossing ``pred`` [m/s] (a root, NaN =
    none) and the elasticity ``elast`` = v dg/dv [-] of the rear usage excess there, both
    from the neighbouring steps.

    Secant steps from the prediction, aimed half the acceptance window inside (usage within
    1e-5 of 1 or a bracket of ``tol``), settle most unsafe steps in one or two evaluations
    after the one at the limit; a miss falls back to the bracketing search.
    Returns (v_safe, u_r at the limit, g at v_safe (NaN when no root was found near the
    prediction), the elasticity there).
    """
    g_top = _g_lift(vlim, kappa, grade, bank, coast, p, gears, out)
    u_top = g_top + 1.0
    if g_top <= 0.0:
        return vlim, u_top, math.nan, elast
    guess = pred
    if V_MIN < pred < vlim and elast > 0.0:
        xs = math.nan  # the highest safe probe and its excess
        gs = 0.0
        xu = vlim  # the lowest unsafe one
        gu = g_top
        slope = elast / pred
        xp = math.nan
        gp = 0.0
        x = pred * (1.0 - 0.5e-5 / elast)
        for _ in range(3):
            gx = _g_lift(x, kappa, grade, bank, coast, p, gears, out)
            if gx >= 0.5 * BIG:
                break
            if gx <= 0.0:
                if gx > -1e-5:
                    return x, u_top, gx, slope * x
                if math.isnan(xs) or x > xs:
                    xs = x
                    gs = gx
            elif x < xu:
                xu = x
                gu = gx
            if not math.isnan(xs) and xu - xs <= tol:
                return xs, u_top, gs, slope * xs
            if not math.isnan(xp) and x != xp:
                sl = (gx - gp) / (x - xp)
                if sl > 0.0:
                    slope = sl
            xp = x
            gp = gx
            xn = x - (gx + 0.5e-5) / slope
            lo = xs if not math.isnan(xs) else V_MIN
            if xn <= lo or xn >= xu:
                xn = 0.5 * (lo + xu) if not math.isnan(xs) else 0.5 * (x + lo)
            x = xn
        if not math.isnan(xs):
            return (_refine_lift(xs, gs, xu, gu, kappa, grade, bank, coast, p, gears, out,
                                 tol), u_top, math.nan, elast)
        guess = xu if xu < vlim else pred
    return (_safe_speed_below(kappa, grade, bank, vlim, g_top, guess, coast, p, gears, out,
                              tol), u_top, math.nan, elast)


@njit(cache=True, inline="always", error_model="numpy")
def _signed_ay(v, kappa, grade, bank):
    """Lateral acceleration [m/s²] the tyres supply, positive toward the corner's inside."""
    a_c, a_y, g_n = road_accelerations(v, kappa, grade, bank)
    return a_y if kappa >= 0.0 else -a_y


@njit(cache=True, inline="always", error_model="numpy")
def margin_of(vsafe, vlim, kappa, grade, bank):
    """a_y_safe / a_y_limit, clamped to [0, 1]."""
    if vsafe >= vlim:
        return 1.0
    ay_lim = _signed_ay(vlim, kappa, grade, bank)
    if ay_lim <= 0.0:
        return 1.0
    r = _signed_ay(vsafe, kappa, grade, bank) / ay_lim
    return 0.0 if r < 0.0 else (1.0 if r > 1.0 else r)


@njit(cache=True, parallel=True, error_model="numpy")
def liftoff_margins(kappa, grade, bank, vlim, checked, p, gears, tol, nchunks):
    """Lift-off margin at every checked step (``checked`` > 0), columns ``M_*``.

    At each checked step: the step's curvature, grade and bank, its steady corner limit
    ``vlim`` [m/s]; for trial speeds at or below it the lift state (:func:`lift_state`, the
    gear of that speed) and the rear usage after it. The margin is a_y at the highest safe
    speed over a_y at the limit (0..1; 1 = a lift at the limit keeps the rear). Chunks of
    steps run in parallel, each warm-starting from its previous checked step.
    """
    n = kappa.shape[0]
    res = np.full((n, NMARGIN), np.nan)
    size = (n + nchunks - 1) // nchunks
    for c in prange(nchunks):
        _liftoff_margins_chunk(kappa, grade, bank, vlim, checked, p, gears, tol,
                               c * size, min(n, (c + 1) * size), res)
    return res


@njit(cache=True, error_model="numpy")
def liftoff_margins_serial(kappa, grade, bank, vlim, checked, p, gears, tol,
                           nchunks):
    """:func:`liftoff_margins` on the calling thread (the same chunks in turn)."""
    n = kappa.shape[0]
    res = np.full((n, NMARGIN), np.nan)
    size = (n + nchunks - 1) // nchunks
    for c in range(nchunks):
        _liftoff_margins_chunk(kappa, grade, bank, vlim, checked, p, gears, tol,
                               c * size, min(n, (c + 1) * size), res)
    return res


@njit(cache=True, error_model="numpy")
def _margin_search(k, grade, bank, vl, h, e, adjacent, ratio, coast, p, gears, out, tol):
    """One step's safe speed after a lift (``coast`` as :func:`lift_state`), predicted from
    the history ``h`` of (ln|curvature|, ln v_safe) of the neighbouring steps when there is
    one (else from ``ratio`` v_safe / v_lim of an ``adjacent`` last step); updates ``h`` and
    returns (v_safe, u_r at the limit, elasticity)."""
    xk = math.log(abs(k)) if k != 0.0 else math.nan
    if adjacent and not math.isnan(h[1]) and not math.isnan(xk):
        pred = math.exp(_lnln_predict(xk, h[0], h[1], h[2], h[3], h[4], h[5]))
    elif adjacent:
        pred = ratio * vl
    else:
        pred = math.nan
    if not adjacent:
        h[1] = math.nan
    vs, ut, gs, e2 = _safe_speed_warm(k, grade, bank, vl, pred, e, coast, p, gears, out, tol)
    if vs >= vl or math.isnan(xk):
        h[1] = math.nan  # safe at the limit: no crossing to follow
    elif not math.isnan(gs):
        _push(h, xk, math.log(vs * (1.0 - gs / e2)))  # the root, a Newton step from v_safe
        e = e2
    else:
        h[1] = math.nan  # found by bracketing, not a root: restart from it
        _push(h, xk, math.log(vs) if vs > 0.0 else math.nan)
    return vs, ut, e


@njit(cache=True, error_model="numpy")
def _liftoff_margins_chunk(kappa, grade, bank, vlim, checked, p, gears, tol,
                           start, stop, res):
    """Lift-off margins of steps start..stop-1 into ``res``, each warm-started from the
    previous checked step (:func:`_margin_search`)."""
    own = np.full(NOUT, np.nan)
    out = borrowed(own)  # no reference counting in the searches (lapbalance.views)
    p = borrowed(p)
    gears = borrowed(gears)
    own_h = np.full(12, np.nan)  # the two histories (lift with overrun, coasting)
    h_on = borrowed(own_h[:6])
    h_co = borrowed(own_h[6:])
    prev = -10
    r_on = 1.0
    r_co = 1.0
    e_on = 2.0  # elasticity of the rear usage after a lift (2 without aero)
    e_co = 2.0
    prev_k = 0.0
    for i in range(start, stop):
        if checked[i] <= 0.0 or vlim[i] <= V_MIN:
            continue
        k = kappa[i]
        vl = vlim[i]
        adj = prev == i - 1 and k * prev_k > 0.0
        vs, ut, e_on = _margin_search(k, grade[i], bank[i], vl, h_on, e_on, adj, r_on, 0.0,
                                      p, gears, out, tol)
        res[i, M_LAMBDA] = margin_of(vs, vl, k, grade[i], bank[i])
        res[i, M_VSAFE] = vs
        res[i, M_RESERVE] = 1.0 - (ut if ut < 2.0 else 2.0)
        vc, uc, e_co = _margin_search(k, grade[i], bank[i], vl, h_co, e_co, adj, r_co, 1.0,
                                      p, gears, out, tol)
        res[i, M_LAMBDA_COAST] = margin_of(vc, vl, k, grade[i], bank[i])
        res[i, M_VSAFE_COAST] = vc
        res[i, M_RESERVE_COAST] = 1.0 - (uc if uc < 2.0 else 2.0)
        res[i, M_AYLIM] = _signed_ay(vl, k, grade[i], bank[i])
        r_on = vs / vl
        r_co = vc / vl
        prev = i
        prev_k = k
    keep_alive(own)
    keep_alive(own_h)


@njit(cache=True, error_model="numpy")
def liftoff_response(kappa, grade, bank, speeds, p, gears):
    """States on throttle (steady speed), after a lift with engine overrun and coasting at
    each speed [m/s] on one step (curvature [1/m], grade, bank [rad]).

    Returns an array (len(speeds), 3, NOUT): [:, 0] on throttle, [:, 1] lift with overrun,
    [:, 2] coasting (``O_*`` indices).
    """
    n = speeds.shape[0]
    res = np.empty((n, 3, NOUT))
    out = np.full(NOUT, np.nan)
    for i in range(n):
        v = speeds[i]
        # steady_control leaves a lean state (usages only): evaluate the full one at its force
        F = steady_control(v, kappa, grade, bank, p, out)
        state_control(v, kappa, grade, bank, F, p, out)
        for k in range(NOUT):
            res[i, 0, k] = out[k]
        for mode in range(2):
            lift_state(v, kappa, grade, bank, float(mode), p, gears, out)
            for k in range(NOUT):
                res[i, 1 + mode, k] = out[k]
    return res
