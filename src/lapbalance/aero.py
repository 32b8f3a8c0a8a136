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
    r"""Dynamic pressure q = ½ rho v².

    Parameters
    ----------
    air_density : float or array
        Air density. [kg/m³]
    speed : float or array
        Air speed relative to the car. [m/s]

    Returns
    -------
    float or array
        Dynamic pressure. [Pa]
    """
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
    if convention not in CONVENTIONS:
        raise ValueError(f"unknown convention {convention!r}; valid: {', '.join(CONVENTIONS)}")
    if convention == "cg":
        return front, rear
    z = 0.0 if convention == "ground" else restraint_height
    d = restraint_shift(drag, cg_height, wheelbase, z)
    return front + d, rear - d


def from_cg_convention(front, rear, drag, cg_height, wheelbase, convention="ground",
                       restraint_height=0.0):
    """Inverse of :func:`to_cg_convention`: what scales restrained that way would read.

    Parameters and units as :func:`to_cg_convention`; ``front``, ``rear`` are in the CG
    convention [N] (or areas [m²] with ``drag`` as a drag area), the result is the split that
    a balance restrained per ``convention`` would read, in the same unit.
    """
    if convention not in CONVENTIONS:
        raise ValueError(f"unknown convention {convention!r}; valid: {', '.join(CONVENTIONS)}")
    if convention == "cg":
        return front, rear
    z = 0.0 if convention == "ground" else restraint_height
    d = restraint_shift(drag, cg_height, wheelbase, z)
    return front - d, rear + d


def j1594_axle_lift_coefficients(lift_coefficient, pitch_moment_coefficient):
    r"""Front and rear axle lift coefficients from total lift and pitching moment (SAE J1594).

    .. math:: C_{LF} = C_L/2 + C_{PM}, \quad C_{LR} = C_L/2 - C_{PM}

    Parameters
    ----------
    lift_coefficient : float or array
        Total lift coefficient C_L, positive up. [-]
    pitch_moment_coefficient : float or array
        C_PM about the ground-level mid-wheelbase point, nose-up positive, reference length
        = wheelbase [2]. [-]

    Returns
    -------
    tuple
        (C_LF, C_LR), axle lift coefficients, positive up, ground-referenced. [-]
    """
    return (lift_coefficient / 2 + pitch_moment_coefficient,
            lift_coefficient / 2 - pitch_moment_coefficient)


def j1594_total_and_moment(front_lift_coefficient, rear_lift_coefficient):
    """Inverse of :func:`j1594_axle_lift_coefficients`: (C_L, C_PM) from (C_LF, C_LR). [-]"""
    return (front_lift_coefficient + rear_lift_coefficient,
            (front_lift_coefficient - rear_lift_coefficient) / 2)


def balance(front, rear):
    """Aero balance: front share of the total downforce; NaN when the total is zero.

    Parameters
    ----------
    front, rear : float or array
        Front and rear axle downforce (or downforce areas), same convention. [N] or [m²]

    Returns
    -------
    float or array
        front / (front + rear). [-]
    """
    total = front + rear
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total != 0, front / np.where(total != 0, total, 1.0), np.nan) \
            if np.ndim(total) else (front / total if total != 0 else float("nan"))


def vertical_centre_of_pressure(front_cg, rear_cg, drag, cg_height, drag_height, wheelbase):
    r"""Where the vertical aero force alone acts, as a distance behind the front axle [m].

    The CG-convention split folds the drag's moment about the CG into the axle loads; the
    vertical force alone is ``F_Lf,v = F_Lf,cg + D (h_D - h_cg) / L`` (docs/method.md). Its
    centre of pressure lies ``L * F_Lr,v / (F_Lf,v + F_Lr,v)`` behind the front axle.

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


def pitch_moment_about_mid(pm_p, lift, drag, x_p, z_p):
    r"""Transfer a pitching moment to the SAE J1594 reference point (ground, mid-wheelbase).

    J1594 axes: x rearward, y right, z up [2]; the pitching moment is about +y, so nose-up is
    positive. With the force on the car F = (D, 0, L_ift) and P at r = (x_p, 0, z_p) from the
    mid-wheelbase ground point, M_mid = M_P + r x F, whose y component is:

    .. math:: PM_{mid} = PM_P + z_p D - x_p L_{ift}

    A pure drag at height z_p therefore gives a nose-up moment z_p D, which unloads the front
    axle by D z_p / L (the wheel-restrained reading).

    Parameters
    ----------
    pm_p : float or array
        Pitching moment about P, nose-up positive. [N·m]
    lift : float or array
        Aerodynamic lift on the car, positive up (= -downforce). [N]
    drag : float or array
        Drag, positive rearward. [N]
    x_p : float
        Position of P rearward of the mid-wheelbase point. [m]
    z_p : float
        Height of P above the ground. [m]

    Returns
    -------
    float or array
        Pitching moment about the ground-level mid-wheelbase point, nose-up positive. [N·m]
    """
    return pm_p + z_p * drag - x_p * lift  # r x F, y component, J1594 axes [2]


def ground_split_from_force_and_moment(lift, pm_mid, wheelbase):
    r"""Axle downforce in the ground convention from lift and the J1594 pitching moment.

    Force form of :func:`j1594_axle_lift_coefficients`:
    ``Lift_f = L_ift/2 + PM_mid/L``, ``Lift_r = L_ift/2 - PM_mid/L`` [2]; downforce = -lift.

    Parameters
    ----------
    lift : float or array
        Total lift, positive up. [N]
    pm_mid : float or array
        Pitching moment about the ground-level mid-wheelbase point, nose-up positive. [N·m]
    wheelbase : float
        Wheelbase. [m]

    Returns
    -------
    tuple
        (front, rear) axle downforce, ground convention (positive down). [N]
    """
    return -(lift / 2 + pm_mid / wheelbase), -(lift / 2 - pm_mid / wheelbase)


def split_from_force_and_moment(lift, drag, pm_p, x_p, z_p, wheelbase, cg_height):
    r"""Front/rear downforce in the CG convention from a CFD-style force and moment set.

    The moment is moved to the ground-level mid-wheelbase point
    (:func:`pitch_moment_about_mid`), split as SAE J1594 does (ground convention), then moved to
    the CG convention (front += D h_cg / L, rear -= the same) [1], [2].

    Parameters
    ----------
    lift : float or array
        Total lift on the car, positive up. [N]
    drag : float or array
        Drag, positive rearward. [N]
    pm_p : float or array
        Pitching moment about P, nose-up positive. [N·m]
    x_p : float
        Position of P rearward of the mid-wheelbase ground point. [m]
    z_p : float
        Height of P above the ground. [m]
    wheelbase : float
        Wheelbase. [m]
    cg_height : float
        CG height of the car on track. [m]

    Returns
    -------
    tuple
        (front_cg, rear_cg) axle downforce in the CG convention (positive down). [N]
    """
    pm_mid = pitch_moment_about_mid(pm_p, lift, drag, x_p, z_p)
    front_g, rear_g = ground_split_from_force_and_moment(lift, pm_mid, wheelbase)
    return to_cg_convention(front_g, rear_g, drag, cg_height, wheelbase, "ground")


def split_from_coefficients(lift_coefficient, drag_coefficient, pitch_moment_coefficient,
                            wheelbase, cg_height):
    r"""Front/rear downforce *areas* per unit frontal area in the CG convention (J1594 input).

    ``C_LF = C_L/2 + C_PM``, ``C_LR = C_L/2 - C_PM`` (ground-referenced, lift positive up) [2];
    the downforce coefficients are their negatives; the CG convention adds
    ``C_D h_cg / L`` to the front and removes it from the rear [1]. Multiply by the frontal
    area for downforce areas and by q A for forces.

    Parameters
    ----------
    lift_coefficient : float or array
        C_L, positive up. [-]
    drag_coefficient : float or array
        C_D, positive rearward. [-]
    pitch_moment_coefficient : float or array
        C_PM about the ground-level mid-wheelbase point, nose-up positive, reference length
        = wheelbase. [-]
    wheelbase : float
        Wheelbase. [m]
    cg_height : float
        CG height of the car on track. [m]

    Returns
    -------
    tuple
        (front, rear) downforce coefficients in the CG convention (positive down). [-]
    """
    clf, clr = j1594_axle_lift_coefficients(lift_coefficient, pitch_moment_coefficient)
    return to_cg_convention(-clf, -clr, drag_coefficient, cg_height, wheelbase, "ground")
