r"""Lift-off check: how far below the limit a driver must be for a lift to be safe.

Why it matters (docs/method.md, lift-off): at steady speed part of the rear axle's load comes
from the tyres' own tractive force (X·h/L, Gillespie, Fundamentals of Vehicle Dynamics, ch. 1).
Lifting off removes it at once and engine braking adds more, so load moves forward, the rear
loses capacity and the balance index ``B = u_r - u_f`` rises.

The quasi-static lap puts one axle at usage 1 at every apex by construction, so "rear usage
after a lift at the lap's own state" mostly says which axle limits there. The check therefore
grades a **margin**:

``liftoff_margin`` λ = a_y,safe / a_y,limit (0..1)
    at a checked step's curvature, grade and bank (cornering on throttle, |a_y| at or above
    the threshold), for trial speeds at or below the step's steady corner limit: the "on"
    state is the steady-speed throttle at that speed, the "off" state the same speed with the
    drive force replaced by the engine overrun force of the gear at that speed
    (:func:`lapbalance.kernels.lift_state`). λ is a_y at the highest speed whose lift keeps
    ``u_r <= 1``, over a_y at the limit. λ = 1: a lift at the very limit keeps the rear.
    Solved on speed by bracketing down from the limit and the Illinois method
    (:func:`lapbalance.kernels.liftoff_safe_speed`): the answer is the first safe speed
    below the limit, so a band of unsafe speeds further down (a lower gear with stronger
    engine braking, say) does not lower it. The same again coasting (no engine braking) gives
    ``coast_margin``.
``liftoff_rear_reserve``
    ``1 - u_r`` after a lift at the limit speed: negative = the rear saturates. It ranks the
    corners where λ = 1 (λ < 1 exactly when the reserve is negative).

Why the fraction and not only the speed: where the front axle sets the limit, moving the aero
balance rearward or adding rear downforce can only raise λ, and more engine overrun can only
lower it. Where the rear sets the limit on throttle, added rear downforce raises the limit
relatively more than the safe-lift speed, so λ can fall slightly while the safe-lift speed
rises (tests/test_liftoff_margin.py derives this in closed form); compare both when judging
a rear-limited package.
``liftoff_speed_margin_kph``
    limit speed minus the safe-lift speed.

A corner's margin is the smallest over its checked steps; its reserve is the one at that
step (the "tightest" step). Corners rank by (margin, reserve), smallest first.

Verdicts (thresholds are :class:`Thresholds` fields, all engineering judgement):

``lift-critical``
    λ < ``critical_margin`` (default 0.90): a lift saturates the rear even with the driver
    10 % below the limit lateral acceleration (about 5 % below the limit speed).
``lift-marginal``
    λ < ``marginal_margin`` (default 0.95): a lift saturates the rear in the last 5-10 % of
    the lateral grip.
``lift-close``
    otherwise, when the rear reserve after a lift at the limit is below ``reserve_margin``
    (default 0.05): the rear ends within about 5 % of its grip, either side -- inside the
    spread of tyre grip, so the quasi-static model cannot call it either way.
``lift-safe``
    a lift at the very limit leaves the rear at least 5 % of its grip.
``not-checked``
    no step of the corner corners on throttle.

Flagged corners are ``lift-critical`` and ``lift-marginal``, tightest first.

The two worst steps at the lap's own state are kept as detail: the step with the largest
balance shift (often the exit, on full throttle) and the step with the highest rear usage
after the lift (often the apex).

This module never imports :mod:`lapbalance.lap` (the solver imports it).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from lapbalance import kernels as _k
from lapbalance.params import car_parameters, speed_cap

VERDICTS = ("lift-critical", "lift-marginal", "lift-close", "lift-safe", "not-checked")
#: Verdicts that flag a corner (worst first).
FLAG_VERDICTS = ("lift-critical", "lift-marginal")

#: One wording of every verdict, shown beside the verdict code by the terminal, the JSON
#: output (``liftoff_verdicts``) and the report; keep it in step with :func:`verdict`.
VERDICT_MEANING = {
    "lift-critical": "a lift saturates the rear even with the driver 10 % or more below the "
                     "limit lateral acceleration (margin below 0.90)",
    "lift-marginal": "a lift saturates the rear in the last 5-10 % of the lateral grip "
                     "(margin 0.90 to 0.95)",
    "lift-close": "a lift at the limit leaves the rear within 5 % of its grip, either side: "
                  "inside the spread of tyre grip, the model cannot call it",
    "lift-safe": "a lift at the very limit leaves the rear at least 5 % of its grip",
    "not-checked": "no step in the corner corners on throttle, so there is nothing to check",
}


@dataclass(frozen=True)
class Thresholds:
    """Documented defaults of the lift-off verdict (all engineering judgement).

    critical_margin : float
        Margin λ below this is ``lift-critical`` [-]. Default 0.90: a lift saturates the rear
        with the driver 10 % below the limit lateral acceleration, about 5 % below the limit
        speed -- more than the few per cent by which a committed driver runs under the limit
        in a fast corner, so such a lift is likely in normal driving.
    marginal_margin : float
        Margin λ below this is ``lift-marginal`` [-]. Default 0.95: the lift saturates the
        rear only in the last 5 % of the lateral grip, of the order of the tyre-to-tyre and
        day-to-day spread of peak friction; beyond that spread the margin is real.
    reserve_margin : float
        With λ at or above ``marginal_margin``, a rear reserve after a lift at the limit below
        this is ``lift-close``, at or above it ``lift-safe`` [-]. Default 0.05, the same
        spread of peak friction.
    """

    critical_margin: float = 0.90
    marginal_margin: float = 0.95
    reserve_margin: float = 0.05


DEFAULT_THRESHOLDS = Thresholds()

#: λ counts as 1 (a lift at the limit is safe) from here [-] (the search stops at 1 exactly).
_ONE = 1.0 - 1e-9


def _step_record(ch, i: int) -> dict:
    return {
        "distance_m": float(ch["distance_m"][i]),
        "speed_kph": float(ch["speed_mps"][i] * 3.6),
        "ay_mps2": float(ch["ay_mps2"][i]),
        "drive_force_n": float(ch["drive_force_n"][i]),
        "balance_shift": float(ch["liftoff_balance_shift"][i]),
        "front_load_shift_n": float(ch["liftoff_front_load_shift_n"][i]),
        "usage_front_on": float(ch["usage_front"][i]),
        "usage_rear_on": float(ch["usage_rear"][i]),
        "usage_front_off": float(ch["liftoff_usage_front"][i]),
        "usage_rear_off": float(ch["liftoff_usage_rear"][i]),
        "coast_balance_shift": float(ch["coast_balance_shift"][i]),
        "coast_usage_rear": float(ch["coast_usage_rear"][i]),
        "coast_front_load_shift_n": float(ch["coast_front_load_shift_n"][i]),
        "margin": float(ch["liftoff_step_margin"][i]),
        "coast_margin": float(ch["coast_step_margin"][i]),
        "rear_reserve": float(ch["liftoff_step_rear_reserve"][i]),
        "limit_speed_kph": float(ch["speed_limit_mps"][i] * 3.6),
        "safe_speed_kph": float(ch["liftoff_safe_speed_mps"][i] * 3.6),
        "speed_margin_kph": float(ch["liftoff_step_speed_margin_kph"][i]),
        "ay_limit_mps2": float(ch["liftoff_ay_limit_mps2"][i]),
    }


def corner_mask(track, cr) -> np.ndarray:
    """Steps of ``track`` inside corner ``cr`` (entry to exit; a corner over the start line of
    a closed track wraps), as a boolean array over ``track.distance_m``."""
    d = np.asarray(track.distance_m)
    if cr.exit_m >= cr.entry_m:
        return (d >= cr.entry_m) & (d <= cr.exit_m)
    return (d >= cr.entry_m) | (d <= cr.exit_m)


def verdict(margin: float | None, reserve: float | None,
            thresholds: Thresholds = DEFAULT_THRESHOLDS) -> tuple[str, str]:
    """Verdict and a one-line reason from a corner's margin λ [-] and rear reserve [-]."""
    if margin is None or reserve is None:
        return "not-checked", "no step in this corner corners on throttle"
    t = thresholds
    if margin < t.critical_margin:
        return "lift-critical", (f"a lift saturates the rear above {margin * 100:.0f} % of "
                                 "the limit lateral acceleration")
    if margin < t.marginal_margin:
        return "lift-marginal", (f"a lift saturates the rear above {margin * 100:.1f} % of "
                                 "the limit lateral acceleration")
    if reserve < t.reserve_margin:
        if margin < _ONE:
            return "lift-close", (f"safe below {margin * 100:.1f} % of the limit lateral "
                                  f"acceleration; at the limit the rear needs "
                                  f"{(1 - reserve) * 100:.1f} % of its grip")
        return "lift-close", (f"a lift at the limit keeps only {reserve * 100:.1f} % of "
                              "the rear grip")
    return "lift-safe", f"a lift at the limit keeps {reserve * 100:.0f} % of the rear grip"


def corner_assessment(ch: dict[str, np.ndarray], mask: np.ndarray,
                      thresholds: Thresholds = DEFAULT_THRESHOLDS) -> dict:
    """Lift-off figures of one corner (steps selected by ``mask``).

    Returns
    -------
    dict
        ``liftoff_verdict``, ``liftoff_reason``, ``liftoff_margin`` [-] (smallest λ),
        ``coast_margin`` [-], ``liftoff_rear_reserve`` [-] and ``liftoff_speed_margin_kph``
        [km/h] at the tightest step, ``liftoff_tightest`` (its step record),
        ``liftoff_worst_shift`` (step with the largest balance shift at the lap's state),
        ``liftoff_worst_rear`` (step with the highest rear usage after lift-off),
        ``liftoff_max_shift`` [-], ``liftoff_max_usage_rear`` [-], ``coast_max_shift`` [-],
        ``overrun_share`` [-] (share of the worst shift due to engine braking).
    """
    checked = mask & (ch["liftoff_checked"] > 0) & np.isfinite(ch["liftoff_step_margin"])
    idx = np.flatnonzero(checked)
    if idx.size == 0:
        v, why = verdict(None, None, thresholds)
        return {"liftoff_verdict": v, "liftoff_reason": why, "liftoff_margin": None,
                "coast_margin": None, "liftoff_rear_reserve": None,
                "liftoff_speed_margin_kph": None, "liftoff_tightest": None,
                "liftoff_worst_shift": None, "liftoff_worst_rear": None,
                "liftoff_max_shift": None, "liftoff_max_usage_rear": None,
                "coast_max_shift": None, "overrun_share": None}
    lam = ch["liftoff_step_margin"][idx]
    res = ch["liftoff_step_rear_reserve"][idx]
    it = int(idx[np.lexsort((res, lam))[0]])
    i1 = int(idx[np.argmax(ch["liftoff_balance_shift"][idx])])
    i2 = int(idx[np.argmax(ch["liftoff_usage_rear"][idx])])
    wt, w1, w2 = _step_record(ch, it), _step_record(ch, i1), _step_record(ch, i2)
    v, why = verdict(wt["margin"], wt["rear_reserve"], thresholds)
    shift = w1["balance_shift"]
    coast = w1["coast_balance_shift"]
    share = (shift - coast) / shift if shift > 1e-9 else None
    return {"liftoff_verdict": v, "liftoff_reason": why, "liftoff_margin": wt["margin"],
            "coast_margin": float(np.min(ch["coast_step_margin"][idx])),
            "liftoff_rear_reserve": wt["rear_reserve"],
            "liftoff_speed_margin_kph": wt["speed_margin_kph"], "liftoff_tightest": wt,
            "liftoff_worst_shift": w1, "liftoff_worst_rear": w2, "liftoff_max_shift": shift,
            "liftoff_max_usage_rear": w2["usage_rear_off"],
            "coast_max_shift": float(np.max(ch["coast_balance_shift"][idx])),
            "overrun_share": share}


def assess(result, thresholds: Thresholds = DEFAULT_THRESHOLDS, masks: dict | None = None):
    """Return a copy of a lap result whose corner rows carry the lift-off assessment
    (:func:`corner_assessment`).

    ``masks`` maps corner id -> boolean step mask; by default the steps whose
    ``corner_id`` channel is the corner's position in ``result.track.corners`` (+1)."""
    ch = result.channels
    if masks is None:
        masks = {cr.id: ch["corner_id"] == j + 1
                 for j, cr in enumerate(getattr(result.track, "corners", ()) or ())}
    rows = []
    for row in result.corners:
        mask = masks.get(row["id"])
        if mask is None:
            rows.append(row)
            continue
        rows.append({**row, **corner_assessment(ch, mask, thresholds)})
    order = ranked(rows)
    rank = {id(c): k + 1 for k, c in enumerate(order)}
    rows = [{**c, "liftoff_rank": rank[id(c)]} for c in rows]
    settings = {**result.settings, "liftoff_thresholds": asdict(thresholds)}
    return replace(result, corners=rows, settings=settings)


def rank_key(corner: dict) -> tuple[float, float]:
    """Sort key of a corner row: (margin, rear reserve), smallest first; unchecked last."""
    m = corner.get("liftoff_margin")
    r = corner.get("liftoff_rear_reserve")
    return (math.inf if m is None else m, math.inf if r is None else r)


def ranked(corners: list[dict]) -> list[dict]:
    """Corner rows sorted by lift-off margin, then rear reserve (tightest first)."""
    return sorted(corners, key=rank_key)


def flagged(corners: list[dict]) -> list[dict]:
    """Corners whose verdict is ``lift-critical`` or ``lift-marginal``, tightest first."""
    return ranked([c for c in corners if c.get("liftoff_verdict") in FLAG_VERDICTS])


def verdict_counts(corners: list[dict]) -> dict[str, int]:
    """How many corners got each verdict."""
    counts = {v: 0 for v in VERDICTS}
    for c in corners:
        counts[c.get("liftoff_verdict", "not-checked")] += 1
    return counts


def smallest_margin(corners: list[dict]) -> float | None:
    """Smallest lift-off margin over the corners [-] (None when no corner was checked)."""
    ms = [c["liftoff_margin"] for c in corners if c.get("liftoff_margin") is not None]
    return min(ms) if ms else None


def first_principles_front_shift(drag: float, rolling_resistance: float, overrun: float,
                                 cg_height: float, wheelbase: float) -> float:
    """Front-axle load gained on lift-off from steady speed [N] (Gillespie ch. 1).

    From steady speed (drive = D + R) to overrun force F_o: the ground force changes by
    -(D + R + F_o), so the front gains (D + R + F_o)·h/L.
    """
    return (drag + rolling_resistance + overrun) * cg_height / wheelbase


def margin_at(car, curvature: float, grade: float = 0.0, bank: float = 0.0,
              coast: bool = False, tol: float = 2e-4) -> dict[str, float]:
    """Lift-off margin of one steady-cornering situation.

    Parameters
    ----------
    car : Car
    curvature : float
        Path curvature, left positive. [1/m]
    grade, bank : float
        [rad]
    coast : bool
        Lift with no engine braking instead of the gear's overrun force.
    tol : float
        Speed tolerance of the search. [m/s]

    Returns
    -------
    dict
        ``margin`` [-], ``limit_speed_mps``, ``safe_speed_mps`` [m/s], ``rear_reserve`` [-]
        (1 - u_r after a lift at the limit, clamped at -1), ``ay_limit_mps2`` [m/s²],
        ``limiting_axle`` ("front" or "rear": the axle with the higher usage on throttle at
        the limit).
    """
    p, gears, trpm, tnm = car_parameters(car)
    out = np.full(_k.NOUT, np.nan)
    vl = _k.corner_limit(curvature, grade, bank, 0.0, 0.0, speed_cap(car), p,
                         out, 1e-4)
    vs, ut = _k.liftoff_safe_speed(curvature, grade, bank, vl, 0.0, 1.0 if coast else 0.0, p,
                                   gears, out, tol)
    a_c, ay, g_n = _k.road_accelerations(vl, curvature, grade, bank)
    lam = float(_k.margin_of(vs, vl, curvature, grade, bank))
    _k.steady_control(vl, curvature, grade, bank, p, out)
    axle = "front" if out[_k.O_UF] >= out[_k.O_UR] else "rear"
    return {"margin": lam, "limit_speed_mps": float(vl), "safe_speed_mps": float(vs),
            "rear_reserve": float(1.0 - min(ut, 2.0)), "ay_limit_mps2": float(abs(ay)),
            "limiting_axle": axle}


@dataclass(frozen=True)
class ResponseCurve:
    """Lift-off response against the initial lateral acceleration (ISO 9816 stepping).

    Attributes
    ----------
    radius_m : float
        Path radius. [m]
    grade_rad, bank_rad : float
        [rad]
    limit_speed_mps : float
        Steady corner limit at this radius. [m/s]
    margin : float
        Lift-off margin at this radius (with overrun). [-]
    columns : dict of str -> numpy array
        One value per initial lateral acceleration; names carry their units (see
        :data:`RESPONSE_COLUMNS`).
    corner_id : int or None
        The lap corner this curve belongs to.
    """

    radius_m: float
    grade_rad: float
    bank_rad: float
    limit_speed_mps: float
    margin: float
    columns: dict
    corner_id: int | None = None

    def csv_text(self) -> str:
        """The curve as CSV text (one row per initial lateral acceleration)."""
        names = list(RESPONSE_COLUMNS)
        lines = [",".join(names)]
        for i in range(len(self.columns[names[0]])):
            lines.append(",".join(_csv_num(self.columns[k][i]) for k in names))
        return "\n".join(lines) + "\n"


def _csv_num(x) -> str:
    x = float(x)
    return "" if not math.isfinite(x) else f"{x:.6g}"


#: Columns of :class:`ResponseCurve` (name -> (unit, description)).
RESPONSE_COLUMNS: dict[str, tuple[str, str]] = {
    "ay_initial_mps2": ("m/s²", "initial steady lateral acceleration"),
    "speed_kph": ("km/h", "initial speed"),
    "balance_shift": ("-", "B_off - B_on with engine overrun (> 0 toward oversteer)"),
    "coast_balance_shift": ("-", "B_off - B_on coasting"),
    "usage_front_on": ("-", "front usage on throttle (steady speed)"),
    "usage_rear_on": ("-", "rear usage on throttle"),
    "usage_rear_off": ("-", "rear usage after a lift with overrun"),
    "usage_rear_coast": ("-", "rear usage coasting"),
    "front_load_change_n": ("N", "front axle load change on the lift with overrun"),
    "coast_front_load_change_n": ("N", "front axle load change coasting"),
    "front_share_on": ("-", "front share of the vertical load on throttle (static + aero + "
                       "longitudinal transfer)"),
    "front_share_off": ("-", "front share of the vertical load after the lift with overrun"),
    "front_share_coast": ("-", "front share of the vertical load coasting"),
    "ax_off_mps2": ("m/s²", "longitudinal acceleration after the lift with overrun"),
}


def response_curve(car, radius_m: float, grade: float = 0.0, bank: float = 0.0, *,
                   ay_start: float = 4.0, ay_step: float = 0.5,
                   corner_id: int | None = None) -> ResponseCurve:
    """Lift-off response of ``car`` on a steady turn of ``radius_m``, against the initial
    lateral acceleration: from ``ay_start`` to the limit in equal steps of at most
    ``ay_step`` (ISO 9816: start at about 4 m/s², steps of at most 0.5 m/s² where the
    response changes quickly), the limit itself included.

    Parameters
    ----------
    car : Car
    radius_m : float
        Path radius (> 0; the turn is taken to the left). [m]
    grade, bank : float
        Road grade and banking. [rad]
    ay_start, ay_step : float
        First initial lateral acceleration and the largest step. [m/s²]

    Returns
    -------
    ResponseCurve
        Empty columns when the limit is below ``ay_start``.
    """
    if not (radius_m > 0 and math.isfinite(radius_m)):
        raise ValueError(f"radius_m = {radius_m} must be a positive finite radius [m]")
    kappa = 1.0 / radius_m
    m = margin_at(car, kappa, grade, bank)
    vl = m["limit_speed_mps"]
    ay_lim = m["ay_limit_mps2"]
    if ay_lim > ay_start:
        n = int(math.ceil((ay_lim - ay_start) / ay_step - 1e-9)) + 1
        ays = np.linspace(ay_start, ay_lim, n)
    else:
        ays = np.zeros(0)
    # speed for each a_y in closed form: a_y = v² κ cos(bank) - g cos(grade) sin(bank)
    g_road = _k.G * math.cos(grade)
    v2 = (ays + g_road * math.sin(bank)) / (kappa * math.cos(bank))
    speeds = np.sqrt(np.clip(v2, 0.0, None))
    if speeds.size:
        speeds[-1] = vl
    p, gears, trpm, tnm = car_parameters(car)
    st = _k.liftoff_response(kappa, grade, bank, np.ascontiguousarray(speeds), p, gears)
    on, off, co = st[:, 0, :], st[:, 1, :], st[:, 2, :]
    K = _k

    def bal(s):
        return s[:, K.O_UR] - s[:, K.O_UF]

    def share(s):
        return s[:, K.O_FZF] / (s[:, K.O_FZF] + s[:, K.O_FZR])

    cols = {
        "ay_initial_mps2": ays, "speed_kph": speeds * 3.6,
        "balance_shift": bal(off) - bal(on), "coast_balance_shift": bal(co) - bal(on),
        "usage_front_on": on[:, K.O_UF], "usage_rear_on": on[:, K.O_UR],
        "usage_rear_off": off[:, K.O_UR], "usage_rear_coast": co[:, K.O_UR],
        "front_load_change_n": off[:, K.O_FZF] - on[:, K.O_FZF],
        "coast_front_load_change_n": co[:, K.O_FZF] - on[:, K.O_FZF],
        "front_share_on": share(on), "front_share_off": share(off),
        "front_share_coast": share(co), "ax_off_mps2": off[:, K.O_AX],
    }
    return ResponseCurve(radius_m, grade, bank, vl, m["margin"], cols, corner_id)


def corner_response(result, corner_id: int | None = None, **kw) -> ResponseCurve | None:
    """:func:`response_curve` for one corner of a lap (its apex radius, grade and bank at the
    apex); by default the corner with the smallest lift-off margin. None without corners."""
    rows = [c for c in result.corners if c.get("liftoff_margin") is not None]
    if corner_id is None:
        if not rows:
            return None
        row = ranked(rows)[0]
    else:
        found = [c for c in result.corners if c["id"] == corner_id]
        if not found:
            raise KeyError(f"no corner {corner_id} on this track")
        row = found[0]
    ch = result.channels
    i = int(np.argmin(np.abs(ch["distance_m"] - row["apex_m"])))
    side = 1.0 if ch["curvature_1pm"][i] >= 0.0 else -1.0  # the curve is drawn as a left turn
    return response_curve(result.car, row["min_radius_m"], float(ch["grade_rad"][i]),
                          side * float(ch["bank_rad"][i]), corner_id=row["id"], **kw)
