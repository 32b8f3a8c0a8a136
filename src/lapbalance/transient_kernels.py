r"""Numba kernels of the single-track (bicycle) lift-off model: float arrays in and out.

The car arrives as the lap solver's parameter vector ``p`` (:func:`lapbalance.lap.car_parameters`)
plus a short transient vector ``q`` (indices ``Q_*``, filled by
:func:`lapbalance.transient.model_parameters`). Vertical loads, axle capacities and the
longitudinal demand per axle come from the lap's own state evaluation
(:func:`lapbalance.kernels.state`), called at every instant with the current speed, the current
lateral acceleration and the current drive force, so the load decomposition (static, aero at
the current speed in the CG convention, ground transfer ``X h/L``, lateral transfer with wheel
lift) and the load-sensitive capacities are exactly the lap's.

States ``y`` (indices ``Y_*``): body velocities ``v_x, v_y`` [m/s], yaw rate ``r`` [rad/s],
axle lateral forces ``F_yf, F_yr`` [N] with a first-order lag, and for the path only: heading
``psi`` [rad], position ``X, Y`` [m] and the heading of the reference car ``psi_ref`` [rad]
that stays on the initial radius at the actual speed.

Equations (ISO 8855 axes; ``a`` front axle to CG, ``b`` CG to rear axle; Pacejka [1] ch. 1,
Gillespie [2] ch. 6; the steer-angle projections of the front forces kept):

.. math::

    m(\dot v_x - v_y r) &= F_{xf}\cos\delta - F_{yf}\sin\delta + F_{xr} - D\,v_x/v \\
    m(\dot v_y + v_x r) &= F_{xf}\sin\delta + F_{yf}\cos\delta + F_{yr} - D\,v_y/v \\
    I_z \dot r &= a(F_{xf}\sin\delta + F_{yf}\cos\delta) - b F_{yr} \\
    \frac{\sigma}{|v_x|}\dot F_{y} + F_y &= F_{y,ss}(\alpha), \quad
    \alpha_f = \delta - \arctan\frac{v_y + a r}{v_x}, \quad
    \alpha_r = -\arctan\frac{v_y - b r}{v_x}

``F_y,ss`` is a Magic-Formula-shaped curve (Pacejka [1] ch. 4, ``E = 0``):
``F = e D sin(C arctan(B alpha))`` with peak ``D`` = the lap's axle lateral capacity at the
current wheel loads, ``B C D`` = the axle cornering stiffness (given at the static axle load,
scaled by ``(F_z/F_z,static)^n`` with the current axle load), and
``e = sqrt(1 - (F_x/F_x,cap)^2)`` the friction-ellipse reduction for the axle's longitudinal
demand (drive, or overrun on the driven axle, plus that axle's rolling resistance). A
relaxation length of zero removes the lag (the axle forces are then algebraic).

References
----------
.. [1] H.B. Pacejka, Tire and Vehicle Dynamics, 2nd ed., Butterworth-Heinemann, 2006, ch. 1
       (single-track model, eqs. of motion) and ch. 4 (Magic Formula).
.. [2] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE, 1992, ch. 6.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from lapbalance.kernels import (
    NOUT,
    O_CAPXF,
    O_CAPXR,
    O_CAPYF,
    O_CAPYR,
    O_DRAG,
    O_FXF,
    O_FXR,
    O_FZF,
    O_FZR,
    O_X,
    P_A,
    P_B,
    P_DRIVEF,
    P_MASS,
    state,
)

# ---- transient parameter vector --------------------------------------------------------------
Q_IZ = 0  # yaw inertia [kg m2]
Q_CF = 1  # front axle cornering stiffness at the static axle load [N/rad]
Q_CR = 2
Q_SIGF = 3  # relaxation length, front [m] (0 = no lag)
Q_SIGR = 4
Q_SHAPE = 5  # Magic Formula shape factor C [-]
Q_FZSF = 6  # static front axle load [N] (reference of the cornering stiffness)
Q_FZSR = 7
Q_DELTA = 8  # road-wheel steer angle, held [rad]
Q_F0 = 9  # drive force before the lift [N]
Q_F1 = 10  # drive force after the ramp [N] (negative = engine overrun)
Q_RAMP = 11  # duration of the ramp from Q_F0 to Q_F1 [s]
Q_R0 = 12  # radius of the initial steady turn [m] (reference yaw rate v/R0)
Q_CEXP = 13  # exponent of the cornering stiffness's growth with axle load [-]
Q_NQ = 14

# ---- state vector -------------------------------------------------------------------------------
Y_VX = 0
Y_VY = 1
Y_R = 2
Y_FYF = 3
Y_FYR = 4
Y_PSI = 5
Y_X = 6
Y_Y = 7
Y_PSIREF = 8
NY = 9

# ---- auxiliary outputs of one derivative evaluation (also the history columns 1..) ------------
A_V = 0  # speed [m/s]
A_BETA = 1  # sideslip at the CG atan2(v_y, v_x) [rad]
A_AX = 2  # body longitudinal acceleration dv_x/dt - v_y r [m/s2]
A_AY = 3  # body lateral acceleration dv_y/dt + v_x r [m/s2]
A_FYF = 4  # axle lateral forces in use [N]
A_FYR = 5
A_FYSF = 6  # steady-state (target) lateral forces [N]
A_FYSR = 7
A_FZF = 8  # axle loads [N]
A_FZR = 9
A_UF = 10  # friction-ellipse usage with the forces in use [-]
A_UR = 11
A_ALF = 12  # slip angles [rad]
A_ALR = 13
A_FD = 14  # drive force [N]
A_KAPPA = 15  # path curvature (r + dbeta/dt)/v [1/m]
A_STATUS = 16  # load status of the lap state (0 = both axles loaded)
NA = 17

# history columns: time, then the auxiliary outputs, then the states
H_T = 0
H_AUX = 1
H_Y = 1 + NA
NH = 1 + NA + NY

# run status
RUN_OK = 0
RUN_STOPPED = 1  # sideslip beyond the stop angle or the car nearly stopped: rest is NaN

# steady-state status
SS_OK = 0
SS_NO_CONVERGENCE = 1
SS_PAST_PEAK = 2  # converged on the falling side of a tyre curve (not a steady turn)
SS_UNLOADED = 3


@njit(cache=True, error_model="numpy")
def drive_force(t, q):
    """Drive force at time t [s] after the lift [N]: linear ramp from Q_F0 to Q_F1."""
    if t <= 0.0:
        return q[Q_F0]
    T = q[Q_RAMP]
    if t >= T:
        return q[Q_F1]
    return q[Q_F0] + (q[Q_F1] - q[Q_F0]) * t / T


@njit(cache=True, error_model="numpy")
def lateral_force_ss(alpha, fz, fz_static, c_static, c_exp, shape, cap_y, fx, cap_x):
    """Steady-state axle lateral force [N] at slip angle ``alpha`` [rad].

    Magic Formula shape with E = 0: peak ``cap_y`` [N] (the lap's load-sensitive axle
    capacity), initial slope ``c_static (fz / fz_static)^c_exp`` [N/rad], scaled by the
    friction ellipse for the longitudinal demand ``fx`` [N] against capacity ``cap_x`` [N].
    """
    if cap_y <= 0.0 or fz <= 0.0:
        return 0.0
    calpha = c_static * (fz / fz_static) ** c_exp
    B = calpha / (shape * cap_y)
    e = 1.0
    if cap_x > 0.0:
        w = 1.0 - (fx / cap_x) ** 2
        e = math.sqrt(w) if w > 0.0 else 0.0
    elif fx != 0.0:
        e = 0.0
    return e * cap_y * math.sin(shape * math.atan(B * alpha))


@njit(cache=True, error_model="numpy")
def peak_slip(fz, fz_static, c_static, c_exp, shape, cap_y):
    """Slip angle [rad] at the peak of :func:`lateral_force_ss` (B alpha = tan(pi/(2C)))."""
    if cap_y <= 0.0 or fz <= 0.0:
        return 0.0
    B = c_static * (fz / fz_static) ** c_exp / (shape * cap_y)
    return math.tan(0.5 * math.pi / shape) / B


@njit(cache=True, error_model="numpy")
def _usage(fx, fy, cx, cy):
    if cx <= 0.0 or cy <= 0.0:
        return 1e9
    return math.sqrt((fx / cx) ** 2 + (fy / cy) ** 2)


@njit(cache=True, error_model="numpy")
def deriv(t, y, q, p, out, dy, aux):
    """Time derivative ``dy`` of the state ``y`` at time ``t`` [s] after the lift.

    ``out`` (length ``kernels.NOUT``) receives the lap state at this instant; ``aux``
    (length ``NA``) the auxiliary outputs. Returns the lap state's load status.
    """
    return _deriv(t, y, q, p, out, dy, aux, True)


@njit(cache=True, error_model="numpy")
def _deriv_lean(t, y, q, p, out, dy, aux):
    """:func:`deriv` without the outputs only the recorded steps need (the RK4 inner
    stages); one compiled copy called three times per step, not inlined three times."""
    return _deriv(t, y, q, p, out, dy, aux, False)


@njit(cache=True, inline="always", error_model="numpy")
def _deriv(t, y, q, p, out, dy, aux, full):
    """:func:`deriv`; with ``full`` False only the forces of the aux outputs are filled."""
    m = p[P_MASS]
    a = p[P_A]
    b = p[P_B]
    vx = y[Y_VX]
    vy = y[Y_VY]
    r = y[Y_R]
    delta = q[Q_DELTA]
    cd = math.cos(delta)
    sd = math.sin(delta)
    fd = drive_force(t, q)
    v = math.sqrt(vx * vx + vy * vy)
    alf = delta - math.atan2(vy + a * r, vx)
    alr = -math.atan2(vy - b * r, vx)
    lag_f = q[Q_SIGF] > 0.0
    lag_r = q[Q_SIGR] > 0.0
    fyf = y[Y_FYF]
    fyr = y[Y_FYR]
    C = q[Q_SHAPE]
    # lateral acceleration for the lateral load transfer, from the axle forces in use; without
    # lag the forces are algebraic and depend on it through the loads: a short fixed point
    n_iter = 1 if (lag_f and lag_r) else 4
    fysf = 0.0
    fysr = 0.0
    st = 0
    sf = p[P_DRIVEF]
    fxf = 0.0
    fxr = 0.0
    for _ in range(n_iter):
        ay_est = (fyf * cd + fyr) / m
        # the lap state with the net ground force of all tyre forces along the body x axis:
        # drive, rolling resistance and the steered front axle's components (the front drive
        # share of them rotated by the steer angle, the front lateral force's -F_yf sin(delta))
        f_eff = fd - fyf * sd - sf * fd * (1.0 - cd)
        st = state(v, ay_est / (v * v), 0.0, 0.0, f_eff, 0.0, p, out)
        # each axle's own longitudinal demand (wheel axes): drive share and rolling resistance
        fxf = out[O_FXF] + sf * (fd - f_eff)
        fxr = out[O_FXR] + (1.0 - sf) * (fd - f_eff)
        fysf = lateral_force_ss(alf, out[O_FZF], q[Q_FZSF], q[Q_CF], q[Q_CEXP], C,
                                out[O_CAPYF], fxf, out[O_CAPXF])
        fysr = lateral_force_ss(alr, out[O_FZR], q[Q_FZSR], q[Q_CR], q[Q_CEXP], C,
                                out[O_CAPYR], fxr, out[O_CAPXR])
        if not lag_f:
            fyf = fysf
        if not lag_r:
            fyr = fysr
    drag = out[O_DRAG]
    dx = drag * vx / v
    dyr = drag * vy / v
    # body x: the same ground force the loads were computed with (drive - rolling resistance
    # - F_yf sin(delta) - front drive share (1 - cos(delta))), minus drag along the velocity
    fx_b = out[O_X] - dx
    fy_b = fxf * sd + fyf * cd + fyr - dyr
    mz = a * (fxf * sd + fyf * cd) - b * fyr
    ax = fx_b / m
    ay = fy_b / m
    dy[Y_VX] = ax + vy * r
    dy[Y_VY] = ay - vx * r
    dy[Y_R] = mz / q[Q_IZ]
    dy[Y_FYF] = abs(vx) / q[Q_SIGF] * (fysf - fyf) if lag_f else 0.0
    dy[Y_FYR] = abs(vx) / q[Q_SIGR] * (fysr - fyr) if lag_r else 0.0
    psi = y[Y_PSI]
    c = math.cos(psi)
    s = math.sin(psi)
    dy[Y_PSI] = r
    dy[Y_X] = vx * c - vy * s
    dy[Y_Y] = vx * s + vy * c
    dy[Y_PSIREF] = v / q[Q_R0]
    aux[A_FYF] = fyf
    aux[A_FYR] = fyr
    aux[A_FYSF] = fysf
    aux[A_FYSR] = fysr
    aux[A_ALF] = alf
    aux[A_ALR] = alr
    if not full:
        return st
    aux[A_V] = v
    aux[A_BETA] = math.atan2(vy, vx)
    aux[A_AX] = ax
    aux[A_AY] = ay
    aux[A_FZF] = out[O_FZF]
    aux[A_FZR] = out[O_FZR]
    aux[A_UF] = _usage(fxf, fyf, out[O_CAPXF], out[O_CAPYF])
    aux[A_UR] = _usage(fxr, fyr, out[O_CAPXR], out[O_CAPYR])
    aux[A_FD] = fd
    beta_dot = (vx * dy[Y_VY] - vy * dy[Y_VX]) / (v * v)
    aux[A_KAPPA] = (r + beta_dot) / v
    aux[A_STATUS] = st
    return st


@njit(cache=True, error_model="numpy")
def integrate(y0, q, p, dt, n_steps, stop_beta, v_stop, hist):
    """Fixed-step classical Runge-Kutta (RK4) from t = 0 for ``n_steps`` steps of ``dt`` [s].

    Row ``i`` of ``hist`` (shape ``(n_steps + 1, NH)``) holds time, the auxiliary outputs and
    the state at ``t = i dt``. The run stops (rows after it NaN) when |sideslip| exceeds
    ``stop_beta`` [rad] or the speed falls below ``v_stop`` [m/s]. Returns (status, rows).
    """
    out = np.full(NOUT, np.nan)
    aux = np.empty(NA)
    k1 = np.empty(NY)
    k2 = np.empty(NY)
    k3 = np.empty(NY)
    k4 = np.empty(NY)
    yt = np.empty(NY)
    y = y0.copy()
    for i in range(n_steps + 1):
        t = i * dt
        deriv(t, y, q, p, out, k1, aux)
        hist[i, H_T] = t
        for j in range(NA):
            hist[i, H_AUX + j] = aux[j]
        for j in range(NY):
            hist[i, H_Y + j] = y[j]
        if abs(aux[A_BETA]) > stop_beta or aux[A_V] < v_stop or y[Y_VX] <= 0.0:
            for k in range(i + 1, n_steps + 1):
                for j in range(NH):
                    hist[k, j] = np.nan
            return RUN_STOPPED, i + 1
        if i == n_steps:
            break
        h2 = 0.5 * dt
        for j in range(NY):
            yt[j] = y[j] + h2 * k1[j]
        _deriv_lean(t + h2, yt, q, p, out, k2, aux)
        for j in range(NY):
            yt[j] = y[j] + h2 * k2[j]
        _deriv_lean(t + h2, yt, q, p, out, k3, aux)
        for j in range(NY):
            yt[j] = y[j] + dt * k3[j]
        _deriv_lean(t + dt, yt, q, p, out, k4, aux)
        for j in range(NY):
            y[j] += dt / 6.0 * (k1[j] + 2.0 * k2[j] + 2.0 * k3[j] + k4[j])
    return RUN_OK, n_steps + 1


@njit(cache=True, error_model="numpy")
def _steady_residual(x, speed, radius, q, p, out, dy, aux, y, res):
    """Residual of the steady turn for unknowns x = (steer, sideslip, drive, F_yf, F_yr)."""
    q[Q_DELTA] = x[0]
    q[Q_F0] = x[2]
    beta = x[1]
    y[Y_VX] = speed * math.cos(beta)
    y[Y_VY] = speed * math.sin(beta)
    y[Y_R] = speed / radius
    y[Y_FYF] = x[3]
    y[Y_FYR] = x[4]
    y[Y_PSI] = 0.0
    y[Y_X] = 0.0
    y[Y_Y] = 0.0
    y[Y_PSIREF] = 0.0
    st = deriv(-1.0, y, q, p, out, dy, aux)
    m = p[P_MASS]
    res[0] = dy[Y_VX]
    res[1] = dy[Y_VY]
    res[2] = dy[Y_R] * q[Q_IZ] / (m * (p[P_A] + p[P_B]))
    res[3] = (aux[A_FYSF] - x[3]) / m
    res[4] = (aux[A_FYSR] - x[4]) / m
    return st


@njit(cache=True, error_model="numpy")
def solve_small(A, b):
    """Solve A x = b in place for a small dense square system: Gaussian elimination with
    partial pivoting (Golub & Van Loan, *Matrix Computations*, alg. 3.4.1). ``A`` is
    overwritten by its factors, ``b`` by the solution. Returns False (``b`` then undefined)
    when a pivot is zero or not finite (a singular or broken matrix).

    Written out instead of ``np.linalg.solve``, whose compiled LAPACK binding (with its
    error-message formatting) cost several seconds of every first run.
    """
    n = A.shape[0]
    for k in range(n):
        piv = k
        big = abs(A[k, k])
        for i in range(k + 1, n):
            if abs(A[i, k]) > big:
                big = abs(A[i, k])
                piv = i
        if not (big > 0.0) or not math.isfinite(big):
            return False
        if piv != k:
            for j in range(n):
                t = A[k, j]
                A[k, j] = A[piv, j]
                A[piv, j] = t
            t = b[k]
            b[k] = b[piv]
            b[piv] = t
        for i in range(k + 1, n):
            f = A[i, k] / A[k, k]
            if f != 0.0:
                for j in range(k + 1, n):
                    A[i, j] -= f * A[k, j]
                b[i] -= f * b[k]
    for k in range(n - 1, -1, -1):
        s = b[k]
        for j in range(k + 1, n):
            s -= A[k, j] * b[j]
        b[k] = s / A[k, k]
        if not math.isfinite(b[k]):
            return False
    return True


@njit(cache=True, error_model="numpy")
def steady_turn(speed, radius, x0, q, p, x):
    """Steady circular run at ``speed`` [m/s] on ``radius`` [m] (left turn, ISO 8855).

    Damped Newton on x = (road-wheel steer [rad], sideslip [rad], drive force [N],
    F_yf, F_yr [N]) from the guess ``x0``; the yaw rate is speed/radius. ``q`` is used as
    scratch for the steer and drive entries (left at the solution). Returns a status
    (``SS_*``) and leaves the solution in ``x``.
    """
    out = np.full(NOUT, np.nan)
    aux = np.empty(NA)
    dy = np.empty(NY)
    y = np.empty(NY)
    res = np.empty(5)
    rt = np.empty(5)
    J = np.empty((5, 5))
    xt = np.empty(5)
    step = np.empty(5)
    for j in range(5):
        x[j] = x0[j]
    scale = np.empty(5)
    m = p[P_MASS]
    scale[0] = 1e-3
    scale[1] = 1e-3
    scale[2] = 0.1 * m
    scale[3] = 0.1 * m
    scale[4] = 0.1 * m
    st = _steady_residual(x, speed, radius, q, p, out, dy, aux, y, res)
    norm = 0.0
    for j in range(5):
        norm += res[j] * res[j]
    converged = False
    for _ in range(60):
        if norm < 1e-26:
            converged = True
            break
        for k in range(5):
            h = 1e-7 * (abs(x[k]) + scale[k])
            for j in range(5):
                xt[j] = x[j]
            xt[k] += h
            _steady_residual(xt, speed, radius, q, p, out, dy, aux, y, rt)
            for j in range(5):
                J[j, k] = (rt[j] - res[j]) / h
        ok = True
        for j in range(5):
            if not math.isfinite(res[j]):
                ok = False
        if not ok:
            break
        for j in range(5):
            step[j] = -res[j]
        if not solve_small(J, step):
            break  # singular Jacobian: not converged
        lam = 1.0
        improved = False
        for _ls in range(30):
            for j in range(5):
                xt[j] = x[j] + lam * step[j]
            _steady_residual(xt, speed, radius, q, p, out, dy, aux, y, rt)
            nt = 0.0
            for j in range(5):
                nt += rt[j] * rt[j]
            if math.isfinite(nt) and nt < norm:
                improved = True
                break
            lam *= 0.5
        if not improved:
            break
        small = True
        for j in range(5):
            if abs(lam * step[j]) > 1e-12 * (abs(x[j]) + scale[j]):
                small = False
            x[j] = xt[j]
            res[j] = rt[j]
        norm = nt
        if small:
            converged = norm < 1e-16
            break
    st = _steady_residual(x, speed, radius, q, p, out, dy, aux, y, res)
    if not converged:
        return SS_NO_CONVERGENCE
    if st != 0:
        return SS_UNLOADED
    C = q[Q_SHAPE]
    apf = peak_slip(out[O_FZF], q[Q_FZSF], q[Q_CF], q[Q_CEXP], C, out[O_CAPYF])
    apr = peak_slip(out[O_FZR], q[Q_FZSR], q[Q_CR], q[Q_CEXP], C, out[O_CAPYR])
    if abs(aux[A_ALF]) > apf or abs(aux[A_ALR]) > apr:
        return SS_PAST_PEAK
    return SS_OK
