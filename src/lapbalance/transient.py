r"""Transient lift-off in a turn: a nonlinear single-track model run the ISO 9816 way.

No quasi-static model can say whether a lift at the limit makes the car tuck in, drift wide or
spin: yaw inertia and tyre lag decide that in the first second. This module runs the
single-track (bicycle) model of :mod:`lapbalance.transient_kernels` — the lap's own load
decomposition and axle capacities at every instant, a Magic-Formula-shaped lateral force per
axle with a relaxation-length lag — through the constant-radius procedure of ISO 9816 [1]:

1. steady circular run (left turn) at radius ``R0`` and initial lateral acceleration
   ``a_y0 = v²/R0``: steer angle, sideslip, drive force and axle forces by damped Newton
   iteration (:func:`steady_turn`);
2. at ``t0 = 0`` the throttle is released: the drive force goes linearly, over
   :data:`RAMP_S`, to the engine's overrun in the test gear (:func:`iso_gear`: the lowest
   gear but first with the engine at or below 80 % of its maximum-power speed, ISO 9816),
   held through the run; the steering wheel is held;
3. the model is integrated to ``t0 + 3 s`` with a fixed-step RK4 (:data:`STEP_S`);
4. ``a_y0`` is stepped from 4 m/s² by :data:`AY_STEP` (<= 0.5 m/s²) to the model's own
   steady limit at that radius (:func:`sweep`).

Figures per run (names our own; evaluation time ``t_n = t0 + 1 s``, ISO 9816 [1]):

``yaw_rate_ratio``
    ``r(t_n) / r_ref(t_n)`` with ``r_ref = v(t_n)/R0``, the yaw rate of a car that stays on
    the initial radius at the actual, falling speed. Above 1: the car tucks in (toward
    oversteer).
``yaw_angle_difference_deg``
    heading minus the reference car's heading at ``t_n`` (positive: into the turn).
``sideslip_change_deg``, ``sideslip_peak_change_deg``, ``sideslip_peak_time_s``
    sideslip at the CG minus its initial value at ``t_n``, and the largest tail-out change
    within 0–3 s with its time (ISO 8855 signs, left turn: negative = the tail swings out; a
    car that only tucks in has peak 0 at time 0). The slow positive drift later in a stable
    run is the steady sideslip ``b/R - alpha_r`` of the slower car, not a tail-out.
    ``sideslip_half_time_s`` is the time the tail-out first reaches half its peak (how fast
    it builds).
``path_radius_ratio``
    path radius ``v/(r + dβ/dt)`` at ``t_n`` over ``R0`` (below 1: the path tightens).
``lateral_deviation_m``
    distance of the CG inside the initial circle at ``t_n`` (positive: inside, tightening).
``mean_decel_mps2``
    ``(v(t0) - v(t_n)) / 1 s``.
``spin``
    True when the sideslip change grows past :data:`SPIN_BOUND_DEG` within 0–3 s (or the run
    stopped at :data:`STOP_SIDESLIP_DEG`).

The model is symmetric: a right-hand corner gives the same figures as the left-hand run.

Notes
-----
Validity: single-track (no roll or pitch dynamics; the load transfers are instantaneous),
open-loop (steering wheel held), level road, sideslip below :data:`STOP_SIDESLIP_DEG`. The
axle cornering stiffness grows with axle load as ``(F_z/F_z,static)^n``; the default
``n = 0.6`` is the local exponent of the Magic Formula's cornering-stiffness law
``K_y = p_Ky1 F_z0 sin(2 arctan(F_z/(p_Ky2 F_z0)))`` at nominal load with ``p_Ky2 = 2``
(Pacejka [2] ch. 4; the law and the typical ``p_Ky2`` from memory): ``1 - 2x²/(1 + x²)`` with
``x = 1/2``. The steady limit sits a few per cent below the lap's because the single-track
model carries the tyres' cornering drag (``F_yf sin(delta)`` and ``m v_y r``) and its pitch
transfer, which the point-mass lap leaves out.

References
----------
.. [1] ISO 9816:2018, Passenger cars — Power-off reaction of a vehicle in a turn — Open-loop
       test method (constant-radius method; evaluation at t0 + 1 s).
.. [2] H.B. Pacejka, Tire and Vehicle Dynamics, 2nd ed., 2006, ch. 1 (linear single-track
       model, stability) and ch. 4 (Magic Formula).
.. [3] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE, 1992, ch. 6 (understeer
       gradient, yaw-velocity gain, characteristic speed).
.. [4] W.F. Milliken, D.L. Milliken, Race Car Vehicle Dynamics, SAE, 1995, ch. 5.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from lapbalance import kernels as _k
from lapbalance import transient_kernels as _tk
from lapbalance.car import TRANSIENT_REQUIRED, Car
from lapbalance.errors import InputError
from lapbalance.lap import SPEED_TOL, car_parameters, speed_cap
from lapbalance.transient_kernels import integrate as _integrate_kernel
from lapbalance.transient_kernels import steady_turn as _steady_turn_kernel
from lapbalance.units import G0

#: Duration of the throttle release [s]: drive force to overrun, linearly. ISO 9816 asks for
#: the accelerator to be released as fast as possible; engine torque then falls within about
#: a tenth of a second (engineering judgement).
RAMP_S = 0.1
#: Length of each run after the lift [s] (ISO 9816: sideslip peak within 0–3 s).
DURATION_S = 3.0
#: Evaluation time after the lift [s] (ISO 9816: t_n = t0 + 1 s).
EVAL_S = 1.0
#: Largest integration step [s], shortened to at most LAG_STEPS times the tyre lag's time
#: constant sigma/v (RK4 is stable on the lag mode up to 2.8 of it). Measured on the demo
#: cars against a 0.5 ms run: yaw rate and sideslip
#: within 2e-6 of their range at 4 ms (4e-5 at 8 ms).
STEP_S = 0.004
LAG_STEPS = 1.0
#: First initial lateral acceleration and the step of the sweep [m/s²] (ISO 9816: start at
#: about 4 m/s², steps of at most 0.5 m/s² where the response changes quickly).
AY_START = 4.0
AY_STEP = 0.5
#: Default radii of the initial turn [m] (ISO 9816 practice: 40 m and 100 m).
DEFAULT_RADII = (40.0, 100.0)
#: Sideslip change [deg] that counts as a spin once the sideslip grows through it (engineering
#: judgement: a stable car's lift-off sideslip change stays within a few degrees; past 10° an
#: open-loop car does not come back).
SPIN_BOUND_DEG = 10.0
#: Sideslip [deg] at which the integration stops (the model's tyre curves no longer apply).
STOP_SIDESLIP_DEG = 60.0
#: The sweep's last run sits this far below the model's steady limit [m/s²].
LIMIT_BACKOFF = 0.01

#: History channels: name -> (unit, meaning).
HISTORY: dict[str, tuple[str, str]] = {
    "time_s": ("s", "time after the throttle release"),
    "speed_mps": ("m/s", "speed of the CG"),
    "sideslip_deg": ("deg", "sideslip at the CG (ISO 8855; left turn: negative = tail out)"),
    "yaw_rate_radps": ("rad/s", "yaw rate"),
    "yaw_rate_ref_radps": ("rad/s", "yaw rate on the initial radius at the actual speed"),
    "ax_mps2": ("m/s²", "longitudinal acceleration (body axes)"),
    "ay_mps2": ("m/s²", "lateral acceleration (body axes)"),
    "fy_front_n": ("N", "front axle lateral force"),
    "fy_rear_n": ("N", "rear axle lateral force"),
    "fz_front_n": ("N", "front axle load"),
    "fz_rear_n": ("N", "rear axle load"),
    "usage_front": ("-", "front axle usage (friction ellipse)"),
    "usage_rear": ("-", "rear axle usage (friction ellipse)"),
    "slip_front_deg": ("deg", "front slip angle"),
    "slip_rear_deg": ("deg", "rear slip angle"),
    "drive_force_n": ("N", "drive force at the wheels (negative = overrun)"),
    "path_curvature_1pm": ("1/m", "curvature of the CG's path"),
    "x_m": ("m", "CG position along the initial heading of travel"),
    "y_m": ("m", "CG position toward the turn centre"),
    "lateral_deviation_m": ("m", "distance inside the initial circle"),
}

#: Figures of one run: name -> (unit, meaning).
FIGURES: dict[str, tuple[str, str]] = {
    "yaw_rate_ratio": ("-", "yaw rate at t0+1 s over v/R0 at the actual speed (> 1 tucks in)"),
    "yaw_angle_difference_deg": ("deg", "heading minus the reference heading at t0+1 s"),
    "sideslip_change_deg": ("deg", "sideslip change at t0+1 s (negative = tail out)"),
    "sideslip_peak_change_deg": ("deg", "largest tail-out sideslip change within 0-3 s (<= 0)"),
    "sideslip_peak_deg": ("deg", "sideslip at that peak"),
    "sideslip_peak_time_s": ("s", "time of that peak after the lift"),
    "sideslip_half_time_s": ("s", "time the tail-out change first reaches half its peak"),
    "path_radius_ratio": ("-", "path radius at t0+1 s over R0 (< 1 tightens)"),
    "lateral_deviation_m": ("m", "distance inside the initial circle at t0+1 s"),
    "mean_decel_mps2": ("m/s²", "mean deceleration between t0 and t0+1 s"),
    "ay_at_eval_mps2": ("m/s²", "lateral acceleration at t0+1 s"),
    "usage_rear_peak": ("-", "highest rear usage within 0-3 s"),
    "spin": ("-", "the sideslip change grew past the spin bound within 0-3 s"),
}


def require_transient(car: Car):
    """The car's ``[transient]`` data, or an InputError saying which keys to add."""
    tr = car.transient
    if tr is None:
        raise InputError("has no [transient] section, which lift-off runs need; add "
                         + ", ".join(TRANSIENT_REQUIRED)
                         + " (see docs/car-file.md)", car.source or "car", "transient")
    return tr


@dataclass(frozen=True)
class Model:
    """Kernel arrays of one car: lap parameters ``p`` and friends, transient vector ``q``."""

    car: Car
    p: np.ndarray
    gears: np.ndarray
    q: np.ndarray
    trpm: np.ndarray = None
    tnm: np.ndarray = None


def model_parameters(car: Car, ramp_s: float = RAMP_S) -> Model:
    """Flatten ``car`` into the kernel arrays (the lap's ``p`` plus the transient ``q``).

    Parameters
    ----------
    car : Car
        A car with a ``[transient]`` section.
    ramp_s : float
        Duration of the throttle release. [s]
    """
    tr = require_transient(car)
    p, gears, trpm, tnm = car_parameters(car)
    ch = car.chassis
    q = np.zeros(_tk.Q_NQ)
    q[_tk.Q_IZ] = tr.yaw_inertia
    q[_tk.Q_CF] = tr.cornering_stiffness_front
    q[_tk.Q_CR] = tr.cornering_stiffness_rear
    q[_tk.Q_SIGF] = tr.relaxation_length
    q[_tk.Q_SIGR] = tr.relaxation_length
    q[_tk.Q_SHAPE] = tr.shape_factor
    q[_tk.Q_FZSF] = ch.mass * G0 * ch.b / ch.wheelbase
    q[_tk.Q_FZSR] = ch.mass * G0 * ch.a / ch.wheelbase
    q[_tk.Q_RAMP] = max(float(ramp_s), 1e-9)
    q[_tk.Q_R0] = 1.0
    q[_tk.Q_CEXP] = tr.cornering_stiffness_load_exponent
    return Model(car, p, gears, q, trpm, tnm)


# ------------------------------------------------------------------------------------------------
# Linear single-track model (closed forms)
# ------------------------------------------------------------------------------------------------


def linear_model(car: Car, speed: float) -> dict:
    r"""Closed-form linear single-track figures at ``speed`` [m/s] (static axle loads).

    .. math::

        K = \frac{m}{L}\left(\frac{b}{C_f} - \frac{a}{C_r}\right), \quad
        \frac{r}{\delta} = \frac{v}{L + K v^2}, \quad v_{ch} = \sqrt{L/K}

    and the state matrix of ``(v_y, r)`` (Gillespie [3] ch. 6; Milliken [4] ch. 5; Pacejka
    [2] ch. 1):

    .. math::

        A = \begin{bmatrix} -\frac{C_f + C_r}{m u} & \frac{b C_r - a C_f}{m u} - u \\
        \frac{b C_r - a C_f}{I_z u} & -\frac{a^2 C_f + b^2 C_r}{I_z u} \end{bmatrix}

    Returns
    -------
    dict
        ``understeer_gradient_rad_per_mps2`` [rad/(m/s²)], ``understeer_gradient_deg_per_g``
        [deg/g], ``yaw_gain_per_s`` (r/δ, road wheel) [1/s], ``characteristic_speed_mps``
        (K > 0) or ``critical_speed_mps`` (K < 0) [m/s] (NaN otherwise), ``state_matrix``
        (2x2) [1/s, m/s, 1/(m s), 1/s], ``eigenvalues`` [1/s], ``natural_frequency_hz`` [Hz],
        ``damping_ratio`` [-].
    """
    tr = require_transient(car)
    ch = car.chassis
    m, L, a, b = ch.mass, ch.wheelbase, ch.a, ch.b
    Cf, Cr, Iz = tr.cornering_stiffness_front, tr.cornering_stiffness_rear, tr.yaw_inertia
    K = m / L * (b / Cf - a / Cr)
    u = float(speed)
    A = np.array([[-(Cf + Cr) / (m * u), (b * Cr - a * Cf) / (m * u) - u],
                  [(b * Cr - a * Cf) / (Iz * u), -(a * a * Cf + b * b * Cr) / (Iz * u)]])
    ev = np.linalg.eigvals(A)
    tr_a, det = float(np.trace(A)), float(np.linalg.det(A))
    wn = math.sqrt(det) if det > 0 else math.nan
    zeta = -tr_a / (2 * wn) if det > 0 else math.nan
    return {
        "understeer_gradient_rad_per_mps2": K,
        "understeer_gradient_deg_per_g": math.degrees(K) * G0,
        "yaw_gain_per_s": u / (L + K * u * u),
        "characteristic_speed_mps": math.sqrt(L / K) if K > 0 else math.nan,
        "critical_speed_mps": math.sqrt(-L / K) if K < 0 else math.nan,
        "state_matrix": A,
        "eigenvalues": ev,
        "natural_frequency_hz": wn / (2 * math.pi),
        "damping_ratio": zeta,
    }


# ------------------------------------------------------------------------------------------------
# Steady turn
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SteadyTurn:
    """A steady circular run of the single-track model (left turn, ISO 8855 signs).

    Attributes: radius_m [m], speed_mps [m/s], ay_mps2 (= v²/R) [m/s²], steer_rad
    (road wheel) [rad], steering_wheel_deg [deg], sideslip_rad (at the CG) [rad],
    drive_force_n [N], fy_front_n, fy_rear_n, fz_front_n, fz_rear_n [N], usage_front,
    usage_rear [-], status (0 = a steady turn on the rising side of both tyre curves).
    """

    radius_m: float
    speed_mps: float
    ay_mps2: float
    steer_rad: float
    steering_wheel_deg: float
    sideslip_rad: float
    drive_force_n: float
    fy_front_n: float
    fy_rear_n: float
    fz_front_n: float
    fz_rear_n: float
    usage_front: float
    usage_rear: float
    status: int
    x: np.ndarray = field(repr=False, compare=False, default=None)

    @property
    def ok(self) -> bool:
        return self.status == _tk.SS_OK


def _guess(model: Model, speed: float, radius: float) -> np.ndarray:
    """Starting point of the steady-turn Newton iteration from the lap's steady state."""
    car, p = model.car, model.p
    ch = car.chassis
    tr = car.transient
    out = np.full(_k.NOUT, np.nan)
    F = _k.steady_control(speed, 1.0 / radius, 0.0, 0.0, p, out)
    # steady_control leaves a lean state (usages only): the loads and capacities at that force
    _k.state_control(speed, 1.0 / radius, 0.0, 0.0, F, p, out)
    ay = speed * speed / radius
    fyf = ch.mass * ay * ch.b / ch.wheelbase
    fyr = ch.mass * ay * ch.a / ch.wheelbase

    def inv(fy, fz, fzs, c, cap):
        if cap <= 0 or fz <= 0:
            return 0.0
        B = c * (fz / fzs) ** tr.cornering_stiffness_load_exponent / (tr.shape_factor * cap)
        s = min(fy / cap, 0.98)
        return math.tan(math.asin(s) / tr.shape_factor) / B

    q = model.q
    alf = inv(fyf, out[_k.O_FZF], q[_tk.Q_FZSF], q[_tk.Q_CF], out[_k.O_CAPYF])
    alr = inv(fyr, out[_k.O_FZR], q[_tk.Q_FZSR], q[_tk.Q_CR], out[_k.O_CAPYR])
    beta = ch.b / radius - alr
    delta = alf + beta + ch.a / radius
    return np.array([delta, beta, F, fyf, fyr])


def _steady(model: Model, speed: float, radius: float, guess=None,
            ay: float | None = None) -> SteadyTurn:
    q = model.q
    q[_tk.Q_R0] = radius
    x0 = _guess(model, speed, radius) if guess is None else np.asarray(guess, float)
    x = np.empty(5)
    st = _steady_turn_kernel(speed, radius, x0, q, model.p, x)
    if st == _tk.SS_NO_CONVERGENCE and guess is not None:
        x0 = _guess(model, speed, radius)
        st = _steady_turn_kernel(speed, radius, x0, q, model.p,
                                 x)
    # loads and usages at the solution
    y = _initial_state(x, speed, radius)
    out = np.full(_k.NOUT, np.nan)
    aux = np.empty(_tk.NA)
    dy = np.empty(_tk.NY)
    q[_tk.Q_DELTA], q[_tk.Q_F0] = x[0], x[2]
    _tk.deriv(-1.0, y, q, model.p, out, dy, aux)
    tr = model.car.transient
    if st == _tk.SS_OK and x[2] > 1.0 + _k.engine_force(speed, model.p, model.gears,
                                                          model.trpm, model.tnm):
        st = SS_ENGINE
    ay = speed * speed / radius if ay is None else ay
    return SteadyTurn(radius, speed, ay, float(x[0]),
                      math.degrees(x[0]) * tr.steering_ratio, float(x[1]), float(x[2]),
                      float(aux[_tk.A_FYF]), float(aux[_tk.A_FYR]), float(aux[_tk.A_FZF]),
                      float(aux[_tk.A_FZR]), float(aux[_tk.A_UF]), float(aux[_tk.A_UR]),
                      int(st), x.copy())


#: Steady-turn status (beyond the kernel's ``SS_*``): the engine cannot give the drive force
#: that the turn needs (drag, rolling resistance and the tyres' cornering drag).
SS_ENGINE = 4


def _initial_state(x, speed, radius) -> np.ndarray:
    beta = float(x[1])
    y = np.zeros(_tk.NY)
    y[_tk.Y_VX] = speed * math.cos(beta)
    y[_tk.Y_VY] = speed * math.sin(beta)
    y[_tk.Y_R] = speed / radius
    y[_tk.Y_FYF] = x[3]
    y[_tk.Y_FYR] = x[4]
    # course angle psi + beta = 0 at the origin; the turn centre is at (0, radius)
    y[_tk.Y_PSI] = -beta
    y[_tk.Y_PSIREF] = -beta
    return y


def _check_radius(radius: float) -> float:
    r = float(radius)
    if not (math.isfinite(r) and 5.0 <= r <= 5000.0):
        raise InputError(f"= {radius:g} m must be a turn radius between 5 and 5000 m",
                         "--radius")
    return r


def steady_turn(car: Car, radius: float, ay: float | None = None,
                speed: float | None = None) -> SteadyTurn:
    """Steady circular run of the single-track model on ``radius`` [m].

    Give either ``ay`` (= v²/R) [m/s²] or ``speed`` [m/s]. Check ``.ok``: outside the steady
    limit the iteration fails or lands past a tyre curve's peak.
    """
    radius = _check_radius(radius)
    if (ay is None) == (speed is None):
        raise ValueError("give exactly one of ay and speed")
    v = math.sqrt(ay * radius) if speed is None else float(speed)
    return _steady(model_parameters(car), v, radius, ay=ay)


def steady_limit(car: Car, radius: float, model: Model | None = None,
                 tol: float = 1e-3) -> float:
    """Highest initial lateral acceleration v²/R [m/s²] of a steady turn on ``radius`` [m].

    Bisection on a_y between a steady turn that exists and one that does not (the iteration
    fails, lands past a tyre curve's peak, or needs more drive than the engine gives),
    bracketed from the lap's corner-speed limit at
    the same radius; ``tol`` [m/s²].
    """
    radius = _check_radius(radius)
    model = model or model_parameters(car)
    out = np.full(_k.NOUT, np.nan)
    vcap = speed_cap(car)
    vlap = _k.corner_limit(1.0 / radius, 0.0, 0.0, 0.0, 0.0, vcap, model.p, out, SPEED_TOL)
    if vlap <= 0.0:
        return 0.0
    a_lap = vlap * vlap / radius
    a_cap = vcap * vcap / radius
    lo, hi = 0.0, min(1.05 * a_lap, a_cap)
    lo_x = None
    # a feasible lower end, coming down from the lap's limit
    a = 0.95 * a_lap
    while a > 0.05:
        s = _steady(model, math.sqrt(a * radius), radius)
        if s.ok:
            lo, lo_x = a, s.x
            break
        hi = a
        a *= 0.8
    if lo_x is None:
        return 0.0
    s = _steady(model, math.sqrt(hi * radius), radius, lo_x)
    while s.ok and hi < a_cap:
        lo, lo_x = hi, s.x
        hi = min(hi * 1.05, a_cap)
        s = _steady(model, math.sqrt(hi * radius), radius, lo_x)
    if s.ok:
        return hi
    while hi - lo > tol:
        mid = 0.5 * (lo + hi)
        s = _steady(model, math.sqrt(mid * radius), radius, lo_x)
        if s.ok:
            lo, lo_x = mid, s.x
        else:
            hi = mid
    return lo


# ------------------------------------------------------------------------------------------------
# Lift-off runs
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LiftRun:
    """One power-off-in-a-turn run.

    Attributes: radius_m [m], ay0_mps2 [m/s²], speed0_mps [m/s], steady (the initial
    :class:`SteadyTurn`), gear (held, 1 = first), overrun_force_n [N], step_s [s],
    history (name -> array, see :data:`HISTORY`), figures (see :data:`FIGURES`), stopped
    (the integration stopped at :data:`STOP_SIDESLIP_DEG` or near standstill).
    """

    radius_m: float
    ay0_mps2: float
    speed0_mps: float
    steady: SteadyTurn
    gear: int
    overrun_force_n: float
    step_s: float
    history: dict
    figures: dict
    stopped: bool

    def row(self) -> dict:
        """Flat record of the run (initial state and figures) for tables, CSV and JSON."""
        s = self.steady
        d = {"radius_m": self.radius_m, "ay0_mps2": self.ay0_mps2,
             "speed0_kph": self.speed0_mps * 3.6, "gear": self.gear,
             "steering_wheel_deg": s.steering_wheel_deg,
             "sideslip0_deg": math.degrees(s.sideslip_rad),
             "drive_force0_n": s.drive_force_n, "overrun_force_n": self.overrun_force_n,
             "usage_front0": s.usage_front, "usage_rear0": s.usage_rear}
        d.update(self.figures)
        return d


def _step_for(model: Model, speed: float, step_s: float) -> float:
    sig = model.car.transient.relaxation_length
    if sig <= 0:
        return step_s
    tau = sig / max(speed, 1.0)
    n = max(1, math.ceil(step_s / (LAG_STEPS * tau)))
    return step_s / n


def max_power_rpm(car: Car) -> float:
    """Engine speed of the largest power on the full-load curve [rpm] (constant-power mode:
    the shift point)."""
    pt = car.powertrain
    if pt.mode != "torque":
        return pt.shift_rpm
    rpm = np.asarray(pt.torque_curve_rpm, float)
    return float(rpm[np.argmax(rpm * np.asarray(pt.torque_curve_nm, float))])


def iso_gear(car: Car, speed: float) -> int:
    """Gear index (0 = first) for an ISO 9816 run at ``speed`` [m/s]: the lowest gear, but
    not first, in which the engine turns at or below 80 % of the maximum-power speed (the top
    gear when none does; the only gear of a one-speed car)."""
    pt = car.powertrain
    w = speed / pt.wheel_radius * pt.final_drive * 60.0 / (2.0 * math.pi)
    n = len(pt.gear_ratios)
    lim = 0.8 * max_power_rpm(car)
    for g in range(1 if n > 1 else 0, n):
        if w * pt.gear_ratios[g] <= lim:
            return g
    return n - 1


def _run(model: Model, steady: SteadyTurn, ramp_s: float, duration_s: float,
         step_s: float, gear_rule: str = "iso") -> LiftRun:
    car = model.car
    radius, v0 = steady.radius_m, steady.speed_mps
    q = model.q.copy()
    q[_tk.Q_R0] = radius
    q[_tk.Q_DELTA] = steady.steer_rad
    q[_tk.Q_F0] = steady.drive_force_n
    pt = car.powertrain
    if gear_rule == "iso":
        g = iso_gear(car, v0)
    else:  # the gear the lap solver uses at this speed
        g, _rpm = _k.gear_and_rpm(v0, model.p, model.gears)
    # engine overrun at the wheels in that gear (as kernels.overrun_force), held through the run
    f_over = pt.overrun_torque * pt.gear_ratios[int(g)] * pt.final_drive / pt.wheel_radius
    q[_tk.Q_F1] = -f_over
    q[_tk.Q_RAMP] = max(float(ramp_s), 1e-9)
    dt = _step_for(model, v0, step_s)
    n = int(round(duration_s / dt))
    hist = np.empty((n + 1, _tk.NH))
    y0 = _initial_state(steady.x, v0, radius)
    status, rows = _integrate_kernel(y0, q, model.p, dt, n,
                                     math.radians(STOP_SIDESLIP_DEG), 1.0, hist)
    h = _history(hist, radius)
    figs = _figures(h, radius, dt, rows, status == _tk.RUN_STOPPED)
    return LiftRun(radius, steady.ay_mps2, v0, steady, int(g) + 1, f_over, dt, h, figs,
                   status == _tk.RUN_STOPPED)


def _history(hist: np.ndarray, radius: float) -> dict:
    A, Y = _tk.H_AUX, _tk.H_Y
    h = {
        "time_s": hist[:, _tk.H_T],
        "speed_mps": hist[:, A + _tk.A_V],
        "sideslip_deg": np.degrees(hist[:, A + _tk.A_BETA]),
        "yaw_rate_radps": hist[:, Y + _tk.Y_R],
        "yaw_rate_ref_radps": hist[:, A + _tk.A_V] / radius,
        "ax_mps2": hist[:, A + _tk.A_AX],
        "ay_mps2": hist[:, A + _tk.A_AY],
        "fy_front_n": hist[:, A + _tk.A_FYF],
        "fy_rear_n": hist[:, A + _tk.A_FYR],
        "fz_front_n": hist[:, A + _tk.A_FZF],
        "fz_rear_n": hist[:, A + _tk.A_FZR],
        "usage_front": hist[:, A + _tk.A_UF],
        "usage_rear": hist[:, A + _tk.A_UR],
        "slip_front_deg": np.degrees(hist[:, A + _tk.A_ALF]),
        "slip_rear_deg": np.degrees(hist[:, A + _tk.A_ALR]),
        "drive_force_n": hist[:, A + _tk.A_FD],
        "path_curvature_1pm": hist[:, A + _tk.A_KAPPA],
        "x_m": hist[:, Y + _tk.Y_X],
        "y_m": hist[:, Y + _tk.Y_Y],
        "lateral_deviation_m": radius - np.hypot(hist[:, Y + _tk.Y_X],
                                                 hist[:, Y + _tk.Y_Y] - radius),
        "_heading_rad": hist[:, Y + _tk.Y_PSI],
        "_heading_ref_rad": hist[:, Y + _tk.Y_PSIREF],
    }
    return h


def _figures(h: dict, radius: float, dt: float, rows: int, stopped: bool) -> dict:
    n = int(round(EVAL_S / dt))
    beta = h["sideslip_deg"][:rows]
    d = beta - beta[0]
    k = int(np.argmin(d))  # largest tail-out excursion (left turn: sideslip falls)
    nan = math.nan
    f = {key: nan for key in FIGURES}
    t = h["time_s"]
    tk_, dk = float(t[k]), float(d[k])
    if 0 < k < rows - 1:  # parabola through the three samples around the sampled minimum
        den = d[k - 1] - 2.0 * d[k] + d[k + 1]
        if den > 0:
            off = 0.5 * (d[k - 1] - d[k + 1]) / den
            tk_ = float(t[k] + off * dt)
            dk = float(d[k] - 0.25 * (d[k - 1] - d[k + 1]) * off)
    f["sideslip_peak_change_deg"] = dk
    f["sideslip_peak_deg"] = float(beta[0] + dk)
    f["sideslip_peak_time_s"] = tk_
    if dk < 0:  # first time the tail-out change reaches half its peak (linear interpolation)
        j = int(np.argmax(d[: k + 1] <= 0.5 * dk))
        if j > 0:
            w = (0.5 * dk - d[j - 1]) / (d[j] - d[j - 1])
            f["sideslip_half_time_s"] = float(t[j - 1] + w * dt)
        else:
            f["sideslip_half_time_s"] = float(t[0])
    f["usage_rear_peak"] = float(np.max(h["usage_rear"][:rows]))
    if n < rows:
        v = h["speed_mps"][n]
        f["yaw_rate_ratio"] = float(h["yaw_rate_radps"][n] / (v / radius))
        f["yaw_angle_difference_deg"] = float(np.degrees(h["_heading_rad"][n]
                                                         - h["_heading_ref_rad"][n]))
        f["sideslip_change_deg"] = float(d[n])
        kap = h["path_curvature_1pm"][n]
        f["path_radius_ratio"] = float(1.0 / (kap * radius)) if kap != 0 else math.inf
        f["lateral_deviation_m"] = float(h["lateral_deviation_m"][n])
        f["mean_decel_mps2"] = float((h["speed_mps"][0] - v) / h["time_s"][n])
        f["ay_at_eval_mps2"] = float(h["ay_mps2"][n])
    f["spin"] = bool(stopped or -d[k] >= SPIN_BOUND_DEG)
    return f


def lift_off_run(car: Car, radius: float, ay0: float | None = None, *,
                 speed: float | None = None, ramp_s: float = RAMP_S,
                 duration_s: float = DURATION_S, step_s: float = STEP_S,
                 model: Model | None = None) -> LiftRun:
    """One ISO 9816 constant-radius run: steady turn, throttle released at t0, wheel held.

    Parameters
    ----------
    car : Car
        A car with a ``[transient]`` section.
    radius : float
        Radius of the initial steady turn. [m]
    ay0 : float, optional
        Initial lateral acceleration v²/R. [m/s²]
    speed : float, optional
        Initial speed instead of ``ay0``. [m/s]
    ramp_s, duration_s, step_s : float
        Throttle-release ramp, run length after the lift, largest integration step. [s]

    Raises
    ------
    InputError
        When no steady turn exists at that radius and lateral acceleration.
    """
    radius = _check_radius(radius)
    if (ay0 is None) == (speed is None):
        raise ValueError("give exactly one of ay0 and speed")
    model = model or model_parameters(car, ramp_s)
    v = math.sqrt(ay0 * radius) if speed is None else float(speed)
    s = _steady(model, v, radius, ay=ay0)
    if not s.ok:
        why = ("the engine cannot hold that speed there" if s.status == SS_ENGINE else
               "beyond the car's steady limit there")
        raise InputError(f"no steady turn at {v * v / radius:.2f} m/s² on {radius:g} m ({why}); "
                         "lower the lateral acceleration", car.source or "car")
    return _run(model, s, ramp_s, duration_s, step_s)


@dataclass(frozen=True)
class LiftSweep:
    """The ISO 9816 a_y0 sweep at one radius: runs, the model's steady limit [m/s²] and the
    lap's steady limit at the same radius [m/s²]."""

    radius_m: float
    ay_limit_mps2: float
    lap_ay_limit_mps2: float
    runs: list


def sweep_levels(ay_limit: float, ay_start: float = AY_START,
                 ay_step: float = AY_STEP) -> list[float]:
    """Initial lateral accelerations [m/s²] from ``ay_start`` by ``ay_step`` to just below
    the steady limit (the last one :data:`LIMIT_BACKOFF` under it)."""
    top = ay_limit - LIMIT_BACKOFF
    if top < ay_start:
        return [top] if top > 0 else []
    levels = list(np.arange(ay_start, top, ay_step))
    if top - levels[-1] > 0.05 * ay_step:
        levels.append(top)
    return [float(a) for a in levels]


def sweep(car: Car, radius: float, *, ay_start: float = AY_START, ay_step: float = AY_STEP,
          ramp_s: float = RAMP_S, duration_s: float = DURATION_S,
          step_s: float = STEP_S) -> LiftSweep:
    """Runs at ``radius`` [m] from ``ay_start`` [m/s²] by ``ay_step`` (<= 0.5) [m/s²] to the
    model's steady limit (ISO 9816 stepping)."""
    radius = _check_radius(radius)
    if not (0 < ay_step <= 0.5):
        raise InputError(f"= {ay_step:g} m/s² must be above 0 and at most 0.5 m/s² "
                         "(ISO 9816 stepping)", "--ay-step")
    if not (0 < ay_start <= 50):
        raise InputError(f"= {ay_start:g} m/s² must be between 0 and 50 m/s²", "--ay-start")
    model = model_parameters(car, ramp_s)
    lim = steady_limit(car, radius, model)
    out = np.full(_k.NOUT, np.nan)
    vlap = _k.corner_limit(1.0 / radius, 0.0, 0.0, 0.0, 0.0, speed_cap(car), model.p, out,
                           SPEED_TOL)
    runs = []
    guess = None
    for ay in sweep_levels(lim, ay_start, ay_step):
        v = math.sqrt(ay * radius)
        s = _steady(model, v, radius, guess, ay)
        if not s.ok:
            continue
        guess = s.x
        runs.append(_run(model, s, ramp_s, duration_s, step_s))
    return LiftSweep(radius, lim, vlap * vlap / radius, runs)


def corner_runs(car: Car, corners, *, ramp_s: float = RAMP_S,
                duration_s: float = DURATION_S, step_s: float = STEP_S) -> list[dict]:
    """Lift-off runs at each corner's apex radius and speed (for lap corner tables).

    Parameters
    ----------
    car : Car
        A car with a ``[transient]`` section.
    corners : iterable
        ``(radius_m, speed_mps)`` pairs, or dicts with ``min_radius_m`` (or ``radius_m``) and
        ``min_speed_kph`` / ``speed_kph`` / ``speed_mps`` (the rows of
        :func:`lapbalance.lap.corner_table` work as they are).

    Returns
    -------
    list of dict
        Per corner: ``radius_m``, ``speed_kph`` (asked), ``ay0_mps2`` (used), ``at_limit``
        (True when the model's steady limit at that radius lies below the asked speed, so
        the run starts at that limit instead), ``status`` ("ok" or "no-steady-turn") and the
        figures of :data:`FIGURES` (None when no run was possible), ``gear`` and
        ``overrun_force_n``. The gear is the one the lap solver uses at that speed (not the
        ISO test gear), so the overrun matches the lap's lift-off check.
    """
    model = model_parameters(car, ramp_s)
    rows = []
    limits: dict[float, float] = {}
    for c in corners:
        if isinstance(c, dict):
            radius = c.get("min_radius_m", c.get("radius_m"))
            if "speed_mps" in c:
                v = c["speed_mps"]
            else:
                v = c.get("min_speed_kph", c.get("speed_kph")) / 3.6
        else:
            radius, v = c
        radius = _check_radius(radius)
        v = float(v)
        row = {"radius_m": radius, "speed_kph": v * 3.6, "ay0_mps2": v * v / radius,
               "at_limit": False, "status": "ok"}
        s = _steady(model, v, radius)
        if not s.ok:
            if radius not in limits:
                limits[radius] = steady_limit(car, radius, model)
            lim = limits[radius] - LIMIT_BACKOFF
            row["at_limit"] = True
            if lim > 0:
                row["ay0_mps2"] = lim
                s = _steady(model, math.sqrt(lim * radius), radius)
        if not s.ok:
            row["status"] = "no-steady-turn"
            row.update({k: None for k in FIGURES})
        else:
            run = _run(model, s, ramp_s, duration_s, step_s, gear_rule="lap")
            row["gear"] = run.gear
            row["overrun_force_n"] = run.overrun_force_n
            row.update(run.figures)
        rows.append(row)
    return rows


# ------------------------------------------------------------------------------------------------
# Tables for output (plain data; files are written by the command through lapbalance.outputs)
# ------------------------------------------------------------------------------------------------

#: Columns of :func:`runs_csv` (initial state, then the figures).
RUN_COLUMNS = ("radius_m", "ay0_mps2", "speed0_kph", "gear", "steering_wheel_deg",
               "sideslip0_deg", "drive_force0_n", "overrun_force_n", "usage_front0",
               "usage_rear0") + tuple(FIGURES)


def _plain(v):
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    v = float(v)
    return v if math.isfinite(v) else None


def runs_csv(sweeps) -> str:
    """One CSV row per run of every sweep (columns :data:`RUN_COLUMNS`)."""
    from lapbalance.outputs import csv_text

    rows = []
    for sw in sweeps:
        for run in sw.runs:
            r = run.row()
            rows.append(["" if _plain(r[k]) is None else
                         (int(r[k]) if isinstance(r[k], (bool, np.bool_)) else r[k])
                         for k in RUN_COLUMNS])
    return csv_text(RUN_COLUMNS, rows)


def histories_csv(sweeps, every_s: float = 0.01) -> str:
    """Time histories of every run, long format (radius, a_y0, then :data:`HISTORY`),
    sampled every ``every_s`` [s]."""
    from lapbalance.outputs import csv_text

    names = [k for k in HISTORY]
    header = ["radius_m", "ay0_mps2"] + names
    rows = []
    for sw in sweeps:
        for run in sw.runs:
            k = max(1, int(round(every_s / run.step_s)))
            h = run.history
            n = len(h["time_s"])
            for i in range(0, n, k):
                if not math.isfinite(h["time_s"][i]):
                    break
                rows.append([sw.radius_m, run.ay0_mps2] + [f"{h[c][i]:.6g}" for c in names])
    return csv_text(header, rows)


def sweep_summary(car: Car, sweeps, ramp_s: float = RAMP_S) -> dict:
    """Plain-JSON summary of the sweeps: settings, limits, the linear figures and every run."""
    ch = car.chassis
    v_ref = 20.0
    lm = linear_model(car, v_ref)
    return {
        "car": car.name,
        "method": "ISO 9816 constant-radius method, left turn, steering wheel held",
        "settings": {"ramp_s": ramp_s, "duration_s": DURATION_S, "eval_time_s": EVAL_S,
                     "max_step_s": STEP_S, "spin_bound_deg": SPIN_BOUND_DEG,
                     "stop_sideslip_deg": STOP_SIDESLIP_DEG, "limit_backoff_mps2": LIMIT_BACKOFF},
        "linear": {"understeer_gradient_deg_per_g": lm["understeer_gradient_deg_per_g"],
                   "understeer_gradient_rad_per_mps2": lm["understeer_gradient_rad_per_mps2"],
                   "characteristic_speed_mps": _plain(lm["characteristic_speed_mps"]),
                   "critical_speed_mps": _plain(lm["critical_speed_mps"]),
                   "at_speed_mps": v_ref,
                   "yaw_natural_frequency_hz": _plain(lm["natural_frequency_hz"]),
                   "yaw_damping_ratio": _plain(lm["damping_ratio"]),
                   "static_front_n": ch.mass * G0 * ch.b / ch.wheelbase},
        "radii": [{"radius_m": sw.radius_m, "ay_limit_mps2": sw.ay_limit_mps2,
                   "lap_ay_limit_mps2": sw.lap_ay_limit_mps2,
                   "first_spin_ay0_mps2": next((r.ay0_mps2 for r in sw.runs
                                                if r.figures["spin"]), None),
                   "runs": [{k: _plain(v) for k, v in run.row().items()} for run in sw.runs]}
                  for sw in sweeps],
        "units": {**{k: u for k, (u, _) in FIGURES.items()}},
        "caution": ("Single-track model estimate: confirm every setup change with qualified "
                    "engineers and track testing, within the rules of the sanctioning body "
                    "and local law."),
    }


# ------------------------------------------------------------------------------------------------
# Lift-off runs at a lap's corners (lap corner table, compare, report)
# ------------------------------------------------------------------------------------------------


def spin_onset(car: Car, radius: float, model: Model | None = None, *,
               ay_step: float = AY_STEP) -> dict:
    """The lowest initial lateral acceleration from which a lift spins the car at ``radius``.

    Steps a_y0 from :data:`AY_START` by ``ay_step`` [m/s²] (ISO 9816 stepping) up to the
    model's steady limit and stops at the first run whose tail-out passes
    :data:`SPIN_BOUND_DEG`; the overrun is that of the gear the lap solver uses at each speed.

    Returns
    -------
    dict
        ``ay_limit_mps2`` (the model's steady limit), ``spin_onset_ay_mps2`` (None: no run up
        to the limit spins), ``spin_onset_fraction`` (onset over the limit [-]; 1.0 when no run
        spins — the transient counterpart of the lift-off margin) and ``runs`` (how many runs
        it took).
    """
    model = model_parameters(car) if model is None else model
    lim = steady_limit(car, radius, model)
    guess, onset, n = None, None, 0
    for ay in sweep_levels(lim, AY_START, ay_step):
        s = _steady(model, math.sqrt(ay * radius), radius, guess, ay)
        if not s.ok:
            continue
        guess = s.x
        n += 1
        if _run(model, s, RAMP_S, DURATION_S, STEP_S, gear_rule="lap").figures["spin"]:
            onset = ay
            break
    return {"ay_limit_mps2": lim, "spin_onset_ay_mps2": onset,
            "spin_onset_fraction": 1.0 if onset is None else onset / lim, "runs": n}


def corners_to_run(result) -> list[dict]:
    """The corner rows of a lap whose lift-off is run in time: every flagged corner
    (``lift-critical``, ``lift-marginal``), tightest first; when none is flagged, the one
    corner with the smallest lift-off margin, so that a package comparison always has a
    common point. Corners the lift-off check did not reach are left out."""
    from lapbalance.liftoff import flagged, ranked

    rows = flagged(result.corners)
    if not rows:
        rows = [c for c in ranked(result.corners) if c.get("liftoff_margin") is not None][:1]
    return rows


def _corner_rows(car: Car, rows) -> list[dict]:
    model = model_parameters(car)
    runs = corner_runs(car, rows)
    onsets: dict[float, dict] = {}
    out = []
    for c, r in zip(rows, runs, strict=True):
        radius = float(c["min_radius_m"])
        if radius not in onsets:
            onsets[radius] = spin_onset(car, radius, model)
        o = onsets[radius]
        out.append({"status": r["status"], "at_limit": r["at_limit"], "ay0_mps2": r["ay0_mps2"],
                    **{k: r.get(k) for k in FIGURES},
                    "ay_limit_mps2": o["ay_limit_mps2"],
                    "spin_onset_ay_mps2": o["spin_onset_ay_mps2"],
                    "spin_onset_fraction": o["spin_onset_fraction"]})
    return out


def lap_corner_runs(result, corners=None) -> list[dict]:
    """Lift-off runs in time at a lap's corners.

    At each corner's smallest radius [m] and minimum speed from the lap, one lift-off run
    (:func:`corner_runs`; a speed above the single-track model's steady limit starts at that
    limit, ``at_limit``), and the ISO 9816 stepping at the same radius for the spin onset
    (:func:`spin_onset`). The run at the lap's speed says what the car does after a lift at
    the limit (most cars spin there); the spin onset ranks cars and corners: how far below
    the limit a lift first spins the car.

    Parameters
    ----------
    result : LapResult
        A simulated lap whose car has a ``[transient]`` section (else ``[]``).
    corners : list of dict, optional
        Corner rows to run (default :func:`corners_to_run`).

    Returns
    -------
    list of dict
        Per corner: ``corner`` (its id), ``liftoff_verdict``, ``liftoff_margin``,
        ``radius_m``, ``speed_kph``, the run's ``status``, ``at_limit`` and :data:`FIGURES`,
        and ``ay_limit_mps2``, ``spin_onset_ay_mps2``, ``spin_onset_fraction``.
    """
    if result.car.transient is None:
        return []
    rows = corners_to_run(result) if corners is None else list(corners)
    return [{"corner": c["id"], "liftoff_verdict": c.get("liftoff_verdict"),
             "liftoff_margin": c.get("liftoff_margin"),
             "radius_m": float(c["min_radius_m"]), "speed_kph": float(c["min_speed_kph"]), **r}
            for c, r in zip(rows, _corner_rows(result.car, rows), strict=True)]


def compare_corner_runs(laps, labels) -> list[dict]:
    """The same lift-off runs for every car of a comparison, at the base car's corners.

    Every car is run at the base lap's smallest radius and minimum speed of each corner of
    :func:`corners_to_run` (the base's), so the cars meet one condition; a car without a
    ``[transient]`` section gets None.

    Parameters
    ----------
    laps : sequence of LapResult
        One lap per car on one track, base first.
    labels : sequence of str
        The cars' labels.

    Returns
    -------
    list of dict
        Per corner: ``corner``, ``radius_m``, ``speed_kph`` and ``cars``: label -> the
        figures of :func:`lap_corner_runs` (without the corner's own keys) or None.
    """
    rows = corners_to_run(laps[0])
    if not rows:
        return []
    out = [{"corner": c["id"], "radius_m": float(c["min_radius_m"]),
            "speed_kph": float(c["min_speed_kph"]), "cars": {}} for c in rows]
    for lap, lab in zip(laps, labels, strict=True):
        runs = (_corner_rows(lap.car, rows) if lap.car.transient is not None
                else [None] * len(rows))
        for o, r in zip(out, runs, strict=True):
            o["cars"][lab] = r
    return out
