r"""Aerodynamic force system, balance conventions and their conversions.

Sign conventions (see DEVELOPERS.md glossary): downforce positive down (= -lift), drag
positive rearward. The front/rear split is stored in the **CG convention**: the axle loads the
aero force system alone produces when its drag is reacted at CG height (the coasting case).

Conversions into the CG convention (moments about a contact point, Gillespie [1] ch. 1):

* ``ground`` (wheel-restrained scales, or SAE J1594 front/rear lift coefficients, whose
  pitching moment is taken about the ground-level mid-wheelbase point [2]):
  front += D h_cg / L, rear -= D h_cg / L.
* restraint reacting drag at height z: front += D (h_cg - z) / L, rear -= same.

References
----------
.. [1] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE, 1992, ch. 1 (dynamic axle loads).
.. [2] SAE J1594 (2010), Vehicle Aerodynamics Terminology: forces and moments resolved at the
       ground-level mid-wheelbase point, moment reference length = wheelbase.
"""

from __future__ import annotations

import numpy as np

CONVENTIONS = ("cg", "ground", "restraint")


def dynamic_pressure(air_density, speed):
    r"""Dynamic pressure q = ½ rho v² [Pa] from density [kg/m³] and speed [m/s]."""
    return 0.5 * air_density * np.square(speed)


def restraint_shift(drag, cg_height, wheelbase, restraint_height=0.0):
    r"""Load [N] to add to the front (and remove from the rear) to go to the CG convention.

    .. math:: \Delta F = D \, (h_{cg} - z) / L

    Parameters
    ----------
    drag : float or array
        Drag force, positive rearward. [N]
    cg_height : float
        Height of the centre of gravity above ground. [m]
    wheelbase : float
        Wheelbase. [m]
    restraint_height : float
        Height at which the restraint reacted the drag (0 for wheels/ground). [m]

    Returns
    -------
    float or array
        Front-axle correction; the rear axle gets minus this. [N]
    """
    return drag * (cg_height - restraint_height) / wheelbase  # [1] moments about contact


def to_cg_convention(front, rear, drag, cg_height, wheelbase, convention="ground",
                     restraint_height=0.0):
    """Convert a measured front/rear downforce split [N] into the CG convention [N].

    Parameters
    ----------
    front, rear : float or array
        Front and rear axle downforce as measured (positive down). [N]
    drag : float or array
        Drag at the same condition, positive rearward. [N]
    cg_height, wheelbase : float
        CG height and wheelbase of the car on track. [m]
    convention : {"cg", "ground", "restraint"}
        How the split was measured (see module docstring).
    restraint_height : float
        Height of the drag restraint, used when ``convention == "restraint"``. [m]

    Returns
    -------
    tuple
        (front, rear) in the CG convention. [N]; the total is unchanged.
    """
    if convention == "cg":
        return front, rear
    z = 0.0 if convention == "ground" else restraint_height
    if convention not in CONVENTIONS:
        raise ValueError(f"unknown convention {convention!r}; valid: {', '.join(CONVENTIONS)}")
    d = restraint_shift(drag, cg_height, wheelbase, z)
    return front + d, rear - d


def from_cg_convention(front, rear, drag, cg_height, wheelbase, convention="ground",
                       restraint_height=0.0):
    """Inverse of :func:`to_cg_convention`: what scales restrained that way would read [N]."""
    if convention == "cg":
        return front, rear
    z = 0.0 if convention == "ground" else restraint_height
    d = restraint_shift(drag, cg_height, wheelbase, z)
    return front - d, rear + d


def j1594_axle_lift_coefficients(lift_coefficient, pitch_moment_coefficient):
    r"""Front and rear axle lift coefficients from total lift and pitching moment (SAE J1594).

    .. math:: C_{LF} = C_L/2 + C_{PM}, \quad C_{LR} = C_L/2 - C_{PM}

    ``pitch_moment_coefficient`` is taken about the ground-level mid-wheelbase point, nose-up
    positive, reference length = wheelbase [2]. Lift coefficients are positive up. [-]
    """
    return (lift_coefficient / 2 + pitch_moment_coefficient,
            lift_coefficient / 2 - pitch_moment_coefficient)


def j1594_total_and_moment(front_lift_coefficient, rear_lift_coefficient):
    """Inverse of :func:`j1594_axle_lift_coefficients`: (C_L, C_PM) from (C_LF, C_LR). [-]"""
    return (front_lift_coefficient + rear_lift_coefficient,
            (front_lift_coefficient - rear_lift_coefficient) / 2)


def balance(front, rear):
    """Front share of the total downforce [-]; NaN when the total is zero."""
    total = front + rear
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total != 0, front / np.where(total != 0, total, 1.0), np.nan) \
            if np.ndim(total) else (front / total if total != 0 else float("nan"))


def vertical_centre_of_pressure(front_cg, rear_cg, drag, cg_height, drag_height, wheelbase):
    r"""Where the vertical aero force alone acts, as a distance behind the front axle [m].

    The CG-convention split folds the drag's moment about the CG into the axle loads; the
    vertical force alone is ``F_Lf,v = F_Lf,cg + D (h_D - h_cg) / L`` (DESIGN.md). Its centre of
    pressure lies ``L * F_Lr,v / (F_Lf,v + F_Lr,v)`` behind the front axle.

    Parameters
    ----------
    front_cg, rear_cg : float
        Axle downforce in the CG convention. [N]
    drag : float
        Drag, positive rearward. [N]
    cg_height, drag_height, wheelbase : float
        CG height, height of the drag's line of action, wheelbase. [m]

    Returns
    -------
    float
        Distance of the vertical-force centre of pressure behind the front axle. [m]
    """
    d = drag * (drag_height - cg_height) / wheelbase
    fv, rv = front_cg + d, rear_cg - d
    total = fv + rv
    if total == 0:
        return float("nan")
    return wheelbase * rv / total
