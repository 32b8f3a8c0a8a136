"""Lift-off check: which corners move toward oversteer when the driver lifts mid-corner.

At every step where the car corners (|a_y| above a threshold, default 4 m/s² after the
ISO 9816 initial condition) and holds or adds throttle, the solver kernel recomputes the step
at the same speed and curvature with the drive force replaced by the engine's overrun force in
the current gear (and once more coasting, with no engine braking). This module groups those
results per corner and gives a verdict.

Why it matters (DESIGN.md): at steady speed part of the rear axle's load comes from the tyres'
own tractive force (X·h/L). Lifting off removes it at once and engine braking adds more, so
load moves forward, the rear loses capacity and the balance index ``B = u_r - u_f`` rises.

Verdicts (first rule that matches; thresholds are :class:`Thresholds` fields):

``rear-saturates``
    the rear axle's usage after lift-off reaches ``1 + saturation_margin``: the rear cannot
    hold the corner once the driver lifts.
``watch``
    the rear keeps less than ``1 - watch_usage`` of its grip in reserve after lift-off, or the
    balance moves by at least ``watch_shift`` at ``watch_speed_kph`` or faster while the rear
    ends above ``shift_rear_usage`` (a large shift that only frees a driven front axle, with
    the rear far from its limit, is not flagged).
``stable``
    otherwise: the balance may move toward oversteer, but the rear keeps a clear margin.

Corners where no step qualifies (no cornering on throttle) get ``not-checked``.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace

import numpy as np

VERDICTS = ("rear-saturates", "watch", "stable", "not-checked")

#: One wording of every verdict, shown beside the verdict code by the terminal, the JSON
#: output (``liftoff_verdicts``) and the report; keep it in step with :func:`verdict`.
VERDICT_MEANING = {
    "rear-saturates": "the rear axle cannot hold the corner once the driver lifts",
    "watch": "the rear keeps little grip in reserve after lift-off, or the balance moves "
             "far toward oversteer at high speed",
    "stable": "the rear keeps a clear grip reserve after lift-off",
    "not-checked": "no step in the corner corners on throttle, so there is nothing to check",
}


@dataclass(frozen=True)
class Thresholds:
    """Documented defaults of the lift-off verdict.

    saturation_margin : float
        Rear usage above 1 by at least this counts as saturating [-]. Default 0.01: one per
        cent, well above the solver's tolerance (usage within ~1e-4 of the limit) so that a
        rear exactly at its limit in the model is not called saturated (engineering judgement).
    watch_usage : float
        Rear usage after lift-off at or above this is flagged ``watch`` [-]. Default 0.95, a
        5 % grip reserve (engineering judgement; of the order of the tyre-to-tyre spread of
        peak friction).
    watch_shift : float
        Balance-index shift flagged at high speed [-]. Default 0.10 (engineering judgement;
        the first-principles example in REFERENCES.md §6c moves 0.068 at 30 m/s).
    watch_speed_kph : float
        Speed from which a large shift counts [km/h]. Default 150 (engineering judgement:
        fast corners, where a step-out is hardest to catch).
    shift_rear_usage : float
        A large high-speed shift counts only when the rear's usage after lift-off is at least
        this [-]. Default 0.85 (engineering judgement: below it the rear keeps a reserve
        larger than any tyre-to-tyre or day-to-day grip spread).
    """

    saturation_margin: float = 0.01
    watch_usage: float = 0.95
    watch_shift: float = 0.10
    watch_speed_kph: float = 150.0
    shift_rear_usage: float = 0.85


DEFAULT_THRESHOLDS = Thresholds()


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
    }


def verdict(worst_shift: dict | None, worst_rear: dict | None,
            thresholds: Thresholds = DEFAULT_THRESHOLDS) -> tuple[str, str]:
    """Verdict and a one-line reason from a corner's two worst steps (see module doc)."""
    if worst_shift is None or worst_rear is None:
        return "not-checked", "no step in this corner corners on throttle"
    t = thresholds
    u = worst_rear["usage_rear_off"]
    if u >= 1.0 + t.saturation_margin:
        return "rear-saturates", (f"rear usage {u:.3f} after lift-off at "
                                  f"{worst_rear['speed_kph']:.0f} km/h")
    if u >= t.watch_usage:
        if u >= 1.0:
            return "watch", (f"rear at its limit after lift-off (usage {u:.3f}, within the "
                             f"{t.saturation_margin * 100:.0f} % margin)")
        return "watch", f"rear keeps only {(1 - u) * 100:.1f} % grip after lift-off"
    if worst_shift["balance_shift"] >= t.watch_shift and \
            worst_shift["speed_kph"] >= t.watch_speed_kph and \
            worst_shift["usage_rear_off"] >= t.shift_rear_usage:
        return "watch", (f"balance shift {worst_shift['balance_shift']:+.3f} at "
                         f"{worst_shift['speed_kph']:.0f} km/h")
    return "stable", f"rear keeps {max(0.0, 1 - u) * 100:.1f} % grip after lift-off"


def corner_assessment(ch: dict[str, np.ndarray], mask: np.ndarray,
                      thresholds: Thresholds = DEFAULT_THRESHOLDS) -> dict:
    """Lift-off figures of one corner (steps selected by ``mask``).

    Returns
    -------
    dict
        ``liftoff_verdict``, ``liftoff_reason``, ``liftoff_worst_shift`` (step record with the
        largest balance shift), ``liftoff_worst_rear`` (step with the highest rear usage after
        lift-off), ``liftoff_max_shift``, ``liftoff_max_usage_rear``, ``coast_max_shift``,
        ``overrun_share`` (share of the worst shift due to engine braking).
    """
    checked = mask & (ch["liftoff_checked"] > 0)
    idx = np.flatnonzero(checked)
    if idx.size == 0:
        v, why = verdict(None, None, thresholds)
        return {"liftoff_verdict": v, "liftoff_reason": why, "liftoff_worst_shift": None,
                "liftoff_worst_rear": None, "liftoff_max_shift": None,
                "liftoff_max_usage_rear": None, "coast_max_shift": None,
                "overrun_share": None}
    i1 = int(idx[np.argmax(ch["liftoff_balance_shift"][idx])])
    i2 = int(idx[np.argmax(ch["liftoff_usage_rear"][idx])])
    w1, w2 = _step_record(ch, i1), _step_record(ch, i2)
    v, why = verdict(w1, w2, thresholds)
    shift = w1["balance_shift"]
    coast = w1["coast_balance_shift"]
    share = (shift - coast) / shift if shift > 1e-9 else None
    return {"liftoff_verdict": v, "liftoff_reason": why, "liftoff_worst_shift": w1,
            "liftoff_worst_rear": w2, "liftoff_max_shift": shift,
            "liftoff_max_usage_rear": w2["usage_rear_off"],
            "coast_max_shift": float(np.max(ch["coast_balance_shift"][idx])),
            "overrun_share": share}


def assess(result, thresholds: Thresholds = DEFAULT_THRESHOLDS):
    """Return a copy of a :class:`~lapbalance.lap.LapResult` whose corner rows carry the
    lift-off assessment (see :func:`corner_assessment`)."""
    from lapbalance.lap import _corner_mask

    rows = []
    corners = {c.id: c for c in getattr(result.track, "corners", ()) or ()}
    for row in result.corners:
        cr = corners.get(row["id"])
        if cr is None:
            rows.append(row)
            continue
        mask = _corner_mask(result.track, cr)
        rows.append({**row, **corner_assessment(result.channels, mask, thresholds)})
    settings = {**result.settings, "liftoff_thresholds": asdict(thresholds)}
    return replace(result, corners=rows, settings=settings)


def flagged(corners: list[dict]) -> list[dict]:
    """Corners whose verdict is ``rear-saturates`` or ``watch``, worst first."""
    rank = {"rear-saturates": 0, "watch": 1}
    out = [c for c in corners if c.get("liftoff_verdict") in rank]
    return sorted(out, key=lambda c: (rank[c["liftoff_verdict"]],
                                      -(c.get("liftoff_max_usage_rear") or 0.0)))


def verdict_counts(corners: list[dict]) -> dict[str, int]:
    """How many corners got each verdict."""
    counts = {v: 0 for v in VERDICTS}
    for c in corners:
        counts[c.get("liftoff_verdict", "not-checked")] += 1
    return counts


def first_principles_front_shift(drag: float, rolling_resistance: float, overrun: float,
                                 cg_height: float, wheelbase: float) -> float:
    """Front-axle load gained on lift-off from steady speed [N] (Gillespie ch. 1).

    From steady speed (drive = D + R) to overrun force F_o: the ground force changes by
    -(D + R + F_o), so the front gains (D + R + F_o)·h/L.
    """
    return (drag + rolling_resistance + overrun) * cg_height / wheelbase
