"""Built-in quasi-static handling figures that a targets file can name.

Each figure states its assumptions; all are quasi-static (no transients, no yaw damping).

* :func:`aero_balance_curve` -- aero balance against speed, binned from a lap's channels, in the
  CG convention and as wheel-restrained scales would read it (ground convention).
* :func:`balance_migration` -- aero balance at high speed minus at low speed.
* :func:`corner_leaning` -- understeer- or oversteer-leaning at the limit per corner: the
  balance index at the corner's slowest point and the limiting axle.
* :func:`understeer_gradient` -- the first-order bicycle-model understeer gradient
  ``K = W_f/C_af - W_r/C_ar`` [deg/g] from axle cornering stiffnesses given by the user, with
  :func:`steer_angle` and :func:`characteristic_speed`.
* :func:`constant_radius_run` -- an ISO 4138 constant-radius style run of the car's steady
  states (axle loads, lateral demands and capacities) over rising lateral acceleration, and the
  capacity-based limit understeer index ``u_f - u_r`` at the cornering limit on that radius.

Our tyre model carries peak friction only, no slip-angle stiffness, so the understeer gradient
exists only when the user supplies axle cornering stiffnesses; without them it is reported as
unavailable (``None``), never invented.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from lapbalance.errors import PhysicsWarning
from lapbalance.units import G0

#: Default bin width of the aero balance curve [km/h].
BALANCE_BIN_KPH = 10.0
#: Default percentiles of lap speed that bound the low and high bands of the balance
#: migration (engineering judgement: the slowest quarter of the lap against its fastest tenth).
MIGRATION_LOW_PERCENTILE = 25.0
MIGRATION_HIGH_PERCENTILE = 90.0
#: Default constant radius of :func:`constant_radius_run` [m]: the usual ISO 4138
#: constant-radius choice (ISO 4138:2021, method 1; radius from memory, docs/method.md).
REFERENCE_RADIUS_M = 100.0
#: Lateral-acceleration step of :func:`constant_radius_run` [m/s²]: ISO 4138 steps lateral
#: acceleration by no more than 0.5 m/s² (ISO 4138:2021, steady-state circular driving).
AY_STEP_MPS2 = 0.5
#: Half-width of the band of balance index called neutral by :func:`corner_leaning` [-]
#: (engineering judgement: two per cent of grip).
NEUTRAL_BAND = 0.02

#: Conversion of an understeer gradient of 1 deg/g to rad/(m/s²) (Gillespie ch. 6 units).
DEG_PER_G = math.radians(1.0) / G0


@dataclass(frozen=True)
class BalanceCurve:
    """Aero balance binned by speed.

    Attributes
    ----------
    speed_kph : numpy array
        Bin centres. [km/h]
    balance_cg : numpy array
        Mean front share of downforce in the bin, CG convention. [-]
    balance_ground : numpy array
        The same as wheel-restrained scales would read it (ground convention). [-]
    steps : numpy array
        Number of lap steps in the bin. [-]
    bin_kph : float
        Bin width. [km/h]
    """

    speed_kph: np.ndarray
    balance_cg: np.ndarray
    balance_ground: np.ndarray
    steps: np.ndarray
    bin_kph: float


def aero_balance_curve(result, bin_kph: float = BALANCE_BIN_KPH) -> BalanceCurve:
    """Aero balance against speed from the lap's channels.

    Steps are put into speed bins of width ``bin_kph`` (edges at multiples of the width);
    each bin reports the mean balance of its steps. Steps where the balance is undefined (no
    downforce) are left out; bins with no step are dropped.

    Parameters
    ----------
    result : LapResult
        A lap from :func:`lapbalance.lap.simulate_lap`.
    bin_kph : float
        Width of the speed bins. [km/h]

    Returns
    -------
    BalanceCurve

    Notes
    -----
    With a fixed aero split the curve is flat; it moves only with an aero map (ride heights
    change with speed) or with ride-height-dependent data. The ground-convention figure adds
    the drag couple ``-D h_cg / L`` to the front (docs/method.md, aero conventions), so it drifts
    with speed whenever drag and downforce scale differently.
    """
    v = np.asarray(result.channels["speed_kph"], float)
    bcg = np.asarray(result.channels["aero_balance_front"], float)
    bgr = np.asarray(result.channels["aero_balance_front_ground"], float)
    ok = np.isfinite(bcg) & np.isfinite(bgr)
    idx = np.floor(v[ok] / bin_kph).astype(int)
    centres, mcg, mgr, n = [], [], [], []
    for b in np.unique(idx):
        sel = idx == b
        centres.append((b + 0.5) * bin_kph)
        mcg.append(float(np.mean(bcg[ok][sel])))
        mgr.append(float(np.mean(bgr[ok][sel])))
        n.append(int(sel.sum()))
    return BalanceCurve(np.array(centres, float), np.array(mcg, float), np.array(mgr, float),
                        np.array(n, int), float(bin_kph))


def balance_migration(result, low_band_kph: tuple[float, float] | None = None,
                      high_band_kph: tuple[float, float] | None = None,
                      low_percentile: float = MIGRATION_LOW_PERCENTILE,
                      high_percentile: float = MIGRATION_HIGH_PERCENTILE,
                      convention: str = "cg") -> dict:
    """Aero balance at high speed minus aero balance at low speed.

    Parameters
    ----------
    result : LapResult
        A lap.
    low_band_kph, high_band_kph : (float, float), optional
        Fixed speed bands ``[lo, hi]``. [km/h] When absent, the low band is every step at or
        below the ``low_percentile`` of the lap's speed and the high band every step at or above
        the ``high_percentile``.
    low_percentile, high_percentile : float
        Percentiles of the lap's speed trace (step-weighted, i.e. by distance). [%]
    convention : {"cg", "ground"}
        Which balance channel to use.

    Returns
    -------
    dict
        ``value`` (high minus low; positive = the balance moves forward with speed) [-],
        ``low_mean``, ``high_mean`` [-], ``low_band_kph``, ``high_band_kph`` [km/h],
        ``low_steps``, ``high_steps`` [-]. ``value`` is None when a band holds no step with a
        defined balance (e.g. no downforce).
    """
    v = np.asarray(result.channels["speed_kph"], float)
    key = "aero_balance_front" if convention == "cg" else "aero_balance_front_ground"
    bal = np.asarray(result.channels[key], float)
    if low_band_kph is None:
        low_band_kph = (float(v.min()), float(np.percentile(v, low_percentile)))
    if high_band_kph is None:
        high_band_kph = (float(np.percentile(v, high_percentile)), float(v.max()))
    lo_sel = (v >= low_band_kph[0]) & (v <= low_band_kph[1]) & np.isfinite(bal)
    hi_sel = (v >= high_band_kph[0]) & (v <= high_band_kph[1]) & np.isfinite(bal)
    lo_mean = float(np.mean(bal[lo_sel])) if lo_sel.any() else None
    hi_mean = float(np.mean(bal[hi_sel])) if hi_sel.any() else None
    value = hi_mean - lo_mean if lo_mean is not None and hi_mean is not None else None
    return {"value": value, "low_mean": lo_mean, "high_mean": hi_mean,
            "low_band_kph": [float(x) for x in low_band_kph],
            "high_band_kph": [float(x) for x in high_band_kph],
            "low_steps": int(lo_sel.sum()), "high_steps": int(hi_sel.sum())}


def leaning(balance_index: float, neutral_band: float = NEUTRAL_BAND) -> str:
    """Name the balance: ``understeer``, ``oversteer`` or ``neutral``.

    Parameters
    ----------
    balance_index : float
        ``u_r - u_f``; above zero the rear is nearer its limit. [-]
    neutral_band : float
        Half-width of the band called neutral. [-]
    """
    if balance_index > neutral_band:
        return "oversteer"
    if balance_index < -neutral_band:
        return "understeer"
    return "neutral"


LEANINGS = ("understeer", "neutral", "oversteer")


def corner_leaning(result, neutral_band: float = NEUTRAL_BAND) -> list[dict]:
    """Understeer- or oversteer-leaning at the limit, per corner.

    At each corner's slowest point the car is at (or near) its cornering limit; the balance
    index there says which axle is nearer saturation.

    Parameters
    ----------
    result : LapResult
        A lap.
    neutral_band : float
        Half-width of the balance index called neutral. [-]

    Returns
    -------
    list of dict
        ``id``, ``balance_index_at_min`` [-], ``limiting_axle`` (front/rear), ``limit_leaning``
        (understeer / neutral / oversteer, see :func:`leaning`), ``min_speed_kph`` [km/h].
    """
    return [{"id": c["id"], "balance_index_at_min": c["balance_index_at_min"],
             "limiting_axle": c["limiting_axle"],
             "limit_leaning": leaning(c["balance_index_at_min"], neutral_band),
             "min_speed_kph": c["min_speed_kph"]} for c in result.corners]


def static_axle_weights(car) -> tuple[float, float]:
    """Static front and rear axle weights ``W_f = m g w_f``, ``W_r = m g (1 - w_f)``.

    Parameters
    ----------
    car : Car
        Gives mass [kg] and front weight fraction [-].

    Returns
    -------
    (float, float)
        Front and rear axle weight on a level road. [N]
    """
    w = car.chassis.mass * G0
    wf = car.chassis.front_weight_fraction
    return w * wf, w * (1.0 - wf)


def understeer_gradient(car, cornering_stiffness_front: float,
                        cornering_stiffness_rear: float) -> float:
    r"""First-order bicycle-model understeer gradient.

    .. math:: K = W_f / C_{\alpha f} - W_r / C_{\alpha r}

    Parameters
    ----------
    car : Car
        Gives the static axle weights (mass and front weight fraction).
    cornering_stiffness_front, cornering_stiffness_rear : float
        Axle cornering stiffness (both tyres of the axle). [N/deg]

    Returns
    -------
    float
        Understeer gradient; positive = understeer. [deg/g]

    Notes
    -----
    Linear tyres (lateral force proportional to slip angle), small angles, level road, static
    axle loads: aero load, load transfer and load sensitivity do not enter. Valid at moderate
    lateral acceleration only, far from the limit.

    References
    ----------
    .. [1] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE 1992, ch. 6 (steady-state
       cornering, understeer gradient); docs/method.md, steady-state handling figures.
    """
    wf, wr = static_axle_weights(car)
    return wf / cornering_stiffness_front - wr / cornering_stiffness_rear  # [1]


def steer_angle(wheelbase: float, radius: float, gradient: float, ay: float) -> float:
    r"""Road-wheel steer angle of the bicycle model on a constant radius.

    .. math:: \delta = 57.3 \, L / R + K \, a_y / g

    Parameters
    ----------
    wheelbase : float
        [m]
    radius : float
        Path radius. [m]
    gradient : float
        Understeer gradient. [deg/g]
    ay : float
        Lateral acceleration. [m/s²]

    Returns
    -------
    float
        Road-wheel steer angle. [deg]

    References
    ----------
    .. [1] Gillespie, Fundamentals of Vehicle Dynamics, SAE 1992, ch. 6 (bicycle model).
    """
    return math.degrees(wheelbase / radius) + gradient * ay / G0  # [1]


def characteristic_speed(wheelbase: float, gradient: float) -> float | None:
    r"""Characteristic speed ``sqrt(57.3 L g / K)`` of an understeering car.

    Parameters
    ----------
    wheelbase : float
        [m]
    gradient : float
        Understeer gradient. [deg/g]

    Returns
    -------
    float or None
        The speed at which the steer needed doubles the Ackermann angle [m/s]; None when
        ``K <= 0`` (neutral or oversteering: no characteristic speed).

    References
    ----------
    .. [1] Gillespie, Fundamentals of Vehicle Dynamics, SAE 1992, ch. 6 (bicycle model).
    """
    if gradient <= 0.0:
        return None
    return math.sqrt(math.degrees(1.0) * wheelbase * G0 / gradient)  # [1]


def critical_speed(wheelbase: float, gradient: float) -> float | None:
    r"""Critical speed ``sqrt(-57.3 L g / K)`` of an oversteering car.

    Parameters
    ----------
    wheelbase : float
        [m]
    gradient : float
        Understeer gradient. [deg/g]

    Returns
    -------
    float or None
        Speed above which the bicycle model is unstable [m/s]; None when ``K >= 0``.

    References
    ----------
    .. [1] Gillespie, Fundamentals of Vehicle Dynamics, ch. 6 (same model as
       :func:`characteristic_speed`).
    """
    if gradient >= 0.0:
        return None
    return math.sqrt(-math.degrees(1.0) * wheelbase * G0 / gradient)  # [1]


@dataclass(frozen=True)
class ConstantRadiusRun:
    """Steady states on a constant radius over rising lateral acceleration.

    Attributes
    ----------
    radius_m : float
        [m]
    ay_mps2, speed_mps : numpy array
        Lateral acceleration [m/s²] and speed [m/s] of each state.
    fz_front_n, fz_rear_n, fy_front_n, fy_rear_n, capacity_front_n, capacity_rear_n : array
        Axle loads, lateral demands and lateral capacities. [N]
    usage_front, usage_rear : numpy array
        Axle grip usage (friction ellipse, with the drive force that holds the speed). [-]
    steer_deg : numpy array or None
        Bicycle-model road-wheel steer ``57.3 L/R + alpha_f - alpha_r`` with
        ``alpha = F_y / C_alpha`` from the states' lateral demands [deg]; None without
        cornering stiffnesses.
    limit_ay_mps2, limit_speed_mps : float
        Cornering limit on this radius. [m/s²], [m/s]
    limit_understeer_index : float
        ``u_f - u_r`` at the limit [-]: above zero the front saturates first (understeer at the
        limit), below zero the rear.
    limiting_axle : str
        ``front`` or ``rear``.
    """

    radius_m: float
    ay_mps2: np.ndarray
    speed_mps: np.ndarray
    fz_front_n: np.ndarray
    fz_rear_n: np.ndarray
    fy_front_n: np.ndarray
    fy_rear_n: np.ndarray
    capacity_front_n: np.ndarray
    capacity_rear_n: np.ndarray
    usage_front: np.ndarray
    usage_rear: np.ndarray
    steer_deg: np.ndarray | None
    limit_ay_mps2: float
    limit_speed_mps: float
    limit_understeer_index: float
    limiting_axle: str


def constant_radius_run(car, radius: float = REFERENCE_RADIUS_M,
                        ay_step: float = AY_STEP_MPS2,
                        cornering_stiffness_front: float | None = None,
                        cornering_stiffness_rear: float | None = None) -> ConstantRadiusRun:
    """Run the car's steady states on a constant radius (ISO 4138 constant-radius method).

    Lateral acceleration rises in steps of ``ay_step`` from ``ay_step`` up to the cornering
    limit on the radius (the last state is the limit itself). Each state is a steady speed on
    a level road, left turn, drive force holding the speed against drag and rolling
    resistance (:func:`lapbalance.lap.steady_state`).

    Parameters
    ----------
    car : Car
    radius : float
        Path radius. [m]
    ay_step : float
        Step of lateral acceleration. [m/s²]
    cornering_stiffness_front, cornering_stiffness_rear : float, optional
        Axle cornering stiffness for the steer angle. [N/deg]

    Returns
    -------
    ConstantRadiusRun

    Notes
    -----
    Assumptions: quasi-static, level road, no banking, the car's own tyre, aero and
    load-transfer model; the limit is where one axle's usage reaches 1 (our model has peak
    friction only, so the limit understeer index is a capacity statement, not a slip-angle
    one). The steer angle uses linear axle cornering stiffness with the states' lateral
    demands ``F_yf = m a_y b/L``, ``F_yr = m a_y a/L``, so on a level road its slope is exactly
    the :func:`understeer_gradient`.
    """
    from lapbalance.lap import limits_at, steady_state

    k = 1.0 / radius
    v_lim = limits_at(car, 1.0, k)["corner_limit_mps"]
    ay_lim = v_lim**2 * k
    ays = list(np.arange(ay_step, ay_lim, ay_step))
    if not ays or ays[-1] < ay_lim - 1e-9:
        ays.append(ay_lim)
    rows = []
    for ay in ays:
        v = math.sqrt(ay / k)
        s = steady_state(car, v, k)
        rows.append((ay, v, s["fzf"], s["fzr"], abs(s["fyf"]), abs(s["fyr"]), s["capyf"],
                     s["capyr"], s["uf"], s["ur"]))
    a = np.array(rows, float)
    steer = None
    if cornering_stiffness_front is not None and cornering_stiffness_rear is not None:
        steer = (math.degrees(car.chassis.wheelbase / radius)
                 + a[:, 4] / cornering_stiffness_front - a[:, 5] / cornering_stiffness_rear)
    uf, ur = float(a[-1, 8]), float(a[-1, 9])
    if max(uf, ur) < 0.99:
        warnings.warn(f"on the {radius:g} m radius the car reaches its speed cap "
                      f"({v_lim * 3.6:.0f} km/h) before either axle's grip limit (usage "
                      f"front {uf:.3f}, rear {ur:.3f}); the limit understeer index there is "
                      "not a grip-limit figure", PhysicsWarning, stacklevel=2)
    return ConstantRadiusRun(radius, a[:, 0], a[:, 1], a[:, 2], a[:, 3], a[:, 4], a[:, 5],
                             a[:, 6], a[:, 7], a[:, 8], a[:, 9], steer, float(ay_lim),
                             float(v_lim), uf - ur, "front" if uf >= ur else "rear")


def figures(result, *, cornering_stiffness_front: float | None = None,
            cornering_stiffness_rear: float | None = None,
            radius: float = REFERENCE_RADIUS_M,
            low_band_kph: tuple[float, float] | None = None,
            high_band_kph: tuple[float, float] | None = None) -> dict:
    """The scalar handling figures of a lap and its car, plain JSON.

    Parameters
    ----------
    result : LapResult
        A lap; its car is used for the constant-radius run and the understeer gradient.
    cornering_stiffness_front, cornering_stiffness_rear : float, optional
        Axle cornering stiffness (both tyres). [N/deg]
    radius : float
        Radius of the constant-radius run. [m]
    low_band_kph, high_band_kph : (float, float), optional
        Fixed bands of the balance migration (see :func:`balance_migration`). [km/h]

    Returns
    -------
    dict
        ``balance_migration`` [-], ``balance_migration_ground`` [-],
        ``limit_understeer_index`` [-], ``limit_lateral_accel_g`` [g] (on ``radius``),
        ``limiting_axle_reference_radius``, ``understeer_gradient_deg_per_g`` [deg/g],
        ``characteristic_speed_kph`` [km/h], ``critical_speed_kph`` [km/h],
        ``reference_radius_m`` [m]. Figures that cannot be derived are None (the understeer
        gradient without cornering stiffnesses; the characteristic speed when K <= 0).
    """
    car = result.car
    mig = balance_migration(result, low_band_kph, high_band_kph)
    mig_g = balance_migration(result, low_band_kph, high_band_kph, convention="ground")
    run = constant_radius_run(car, radius)
    out = {"balance_migration": mig["value"], "balance_migration_ground": mig_g["value"],
           "migration_low_band_kph": mig["low_band_kph"],
           "migration_high_band_kph": mig["high_band_kph"],
           "limit_understeer_index": run.limit_understeer_index,
           "limit_lateral_accel_g": run.limit_ay_mps2 / G0,
           "limiting_axle_reference_radius": run.limiting_axle,
           "reference_radius_m": float(radius),
           "understeer_gradient_deg_per_g": None, "characteristic_speed_kph": None,
           "critical_speed_kph": None}
    if cornering_stiffness_front is not None and cornering_stiffness_rear is not None:
        K = understeer_gradient(car, cornering_stiffness_front, cornering_stiffness_rear)
        out["understeer_gradient_deg_per_g"] = K
        vch = characteristic_speed(car.chassis.wheelbase, K)
        vcr = critical_speed(car.chassis.wheelbase, K)
        out["characteristic_speed_kph"] = None if vch is None else vch * 3.6
        out["critical_speed_kph"] = None if vcr is None else vcr * 3.6
    return out
