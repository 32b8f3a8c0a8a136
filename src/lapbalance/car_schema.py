"""Car-file schema: every key a car file may hold, its unit, SI scale, bounds, default,
likely unit slips and meaning.

Declarative data only: :mod:`lapbalance.car` reads files against it and builds the car;
``lapbalance car --schema`` renders it (:func:`schema_markdown`, docs/car-file.md).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

from lapbalance import aero as _aero
from lapbalance.units import HPA, KW, MM

# --------------------------------------------------------------------------------------------
# Schema
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Key:
    """One key of the car file: name (with unit), SI scale, bounds, default and doc."""

    name: str
    attr: str
    unit: str = ""
    scale: float = 1.0
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    required: bool = False
    default: Any = None
    kind: str = "float"  # float | int | str | floats | bool
    alts: tuple[tuple[str, float, str], ...] = ()  # (key, scale to SI, unit)
    slips: tuple[tuple[float, str], ...] = ()  # (factor on SI value, "looks like ...")
    choices: tuple[str, ...] = ()
    doc: str = ""

    def names(self) -> tuple[str, ...]:
        return (self.name,) + tuple(a[0] for a in self.alts)

    def scale_of(self, key: str) -> float:
        if key == self.name:
            return self.scale
        for k, s, _ in self.alts:
            if k == key:
                return s
        raise KeyError(key)


MM_SLIP = ((1e-3, "millimetres"),)
PCT_SLIP = ((1e-2, "a percentage"),)

SCHEMA: dict[str, tuple[Key, ...]] = {
    "": (
        Key("name", "name", kind="str", required=True, doc="Name of the car (free text)."),
        Key("description", "description", kind="str", default="", doc="Free text."),
        Key("base", "base", kind="str", default=None,
            doc="Path of a base car file this variant overrides (relative to this file)."),
    ),
    "chassis": (
        Key("mass_kg", "mass", "kg", lo=50, hi=20000, required=True,
            slips=((1e3, "tonnes"),), doc="Mass with driver and fuel."),
        Key("wheelbase_m", "wheelbase", "m", lo=0.5, hi=8.0, required=True,
            alts=(("wheelbase_mm", MM, "mm"),), slips=MM_SLIP, doc="Wheelbase."),
        Key("front_weight_fraction", "front_weight_fraction", "-", lo=0, hi=1, lo_open=True,
            hi_open=True, required=True, slips=PCT_SLIP,
            doc="Static share of the weight on the front axle."),
        Key("cg_height_m", "cg_height", "m", lo=0.0, hi=2.0, lo_open=True, required=True,
            alts=(("cg_height_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Height of the centre of gravity above ground."),
        Key("track_front_m", "track_front", "m", lo=0.5, hi=3.5, required=True,
            alts=(("track_front_mm", MM, "mm"),), slips=MM_SLIP, doc="Front track width."),
        Key("track_rear_m", "track_rear", "m", lo=0.5, hi=3.5, required=True,
            alts=(("track_rear_mm", MM, "mm"),), slips=MM_SLIP, doc="Rear track width."),
        Key("overall_width_m", "overall_width", "m", lo=0.5, hi=4.0,
            alts=(("overall_width_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Overall width of the car (body or wheels, whichever is wider); sets how "
                "close to the track edges a driving line runs (--line). Default: the wider "
                "track width + 0.30 m."),
    ),
    "aero": (
        Key("downforce_area_m2", "downforce_area", "m²", lo=-10, hi=20,
            doc="Downforce area -CL·A (positive = downforce). Use with balance_front, or give "
                "front_/rear_downforce_area_m2."),
        Key("front_downforce_area_m2", "front_downforce_area", "m²", lo=-10, hi=20,
            doc="Front-axle downforce area in the stated convention (instead of "
                "downforce_area_m2 + balance_front)."),
        Key("rear_downforce_area_m2", "rear_downforce_area", "m²", lo=-10, hi=20,
            doc="Rear-axle downforce area in the stated convention."),
        Key("balance_front", "balance_front", "-", lo=-1.0, hi=2.0, slips=PCT_SLIP,
            doc="Front share of the downforce, in the stated convention."),
        Key("drag_area_m2", "drag_area", "m²", lo=0, hi=10,
            doc="Drag area CD·A. Required unless the J1594 coefficient form is used."),
        Key("balance_convention", "convention", kind="str", choices=_aero.CONVENTIONS,
            default=None,
            doc="How the split was measured: 'cg' (drag reacted at CG height), 'ground' "
                "(wheel-restrained scales or J1594 ground-referenced data) or 'restraint' "
                "(drag reacted at restraint_height_m). Required with any split."),
        Key("restraint_height_m", "restraint_height", "m", lo=0, hi=3,
            alts=(("restraint_height_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Height at which a strut/sting/belt reacted the drag (convention 'restraint')."),
        Key("drag_height_m", "drag_height", "m", lo=0, hi=3,
            alts=(("drag_height_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Height of the drag's line of action (only for reporting the centre of "
                "pressure of the vertical force)."),
        Key("frontal_area_m2", "frontal_area", "m²", lo=0, hi=15, lo_open=True,
            doc="Reference area for the coefficient form (SAE J1594)."),
        Key("drag_coefficient", "drag_coefficient", "-", lo=0, hi=3,
            doc="CD, coefficient form."),
        Key("front_lift_coefficient", "front_lift_coefficient", "-", lo=-10, hi=10,
            doc="CLF (positive = lift), SAE J1594, ground-referenced."),
        Key("rear_lift_coefficient", "rear_lift_coefficient", "-", lo=-10, hi=10,
            doc="CLR (positive = lift), SAE J1594, ground-referenced."),
        Key("map_file", "map_file", kind="str", default=None,
            doc="CSV aero map over front/rear ride height (path relative to this file)."),
    ),
    "tyres": (
        Key("rolling_resistance", "rolling_resistance", "-", lo=0, hi=0.1, default=0.015,
            doc="Rolling-resistance coefficient, all four tyres."),
    ),
    "tyres.front": (),  # filled below (same keys for both axles)
    "tyres.rear": (),
    "powertrain": (
        Key("drive", "drive", kind="str", choices=("rear", "front", "all"), required=True,
            doc="Driven axle(s)."),
        Key("front_drive_share", "front_drive_share", "-", lo=0, hi=1, slips=PCT_SLIP,
            doc="Share of the drive force on the front axle (drive = 'all')."),
        Key("power_kw", "power", "kW", scale=KW, lo=0, hi=3000 * KW,
            doc="Constant engine power (instead of a torque curve)."),
        Key("max_tractive_force_n", "max_tractive_force", "N", lo=0, hi=1e6, lo_open=True,
            doc="Cap on the drive force at low speed in constant-power mode "
                "(default: the force at 10 m/s)."),
        Key("torque_curve_rpm", "torque_curve_rpm", "rpm", kind="floats",
            doc="Engine speeds of the full-load torque curve, rising."),
        Key("torque_curve_nm", "torque_curve_nm", "N·m", kind="floats",
            doc="Full-load engine torque at torque_curve_rpm."),
        Key("gear_ratios", "gear_ratios", "-", kind="floats", required=True,
            doc="Gearbox ratios, first gear first."),
        Key("final_drive", "final_drive", "-", lo=0.1, hi=40, required=True,
            doc="Final-drive ratio."),
        Key("wheel_radius_m", "wheel_radius", "m", lo=0.1, hi=1.5, required=True,
            alts=(("wheel_radius_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Loaded (rolling) radius of the driven tyres."),
        Key("efficiency", "efficiency", "-", lo=0, hi=1, lo_open=True, default=0.9,
            slips=PCT_SLIP, doc="Driveline efficiency, engine to contact patch."),
        Key("shift_rpm", "shift_rpm", "rpm", lo=500, hi=25000, required=True,
            doc="Engine speed at which the driver shifts up."),
        Key("rev_limit_rpm", "rev_limit_rpm", "rpm", lo=500, hi=25000,
            doc="Rev limiter (default: shift_rpm); no drive above it in top gear."),
        Key("overrun_torque_nm", "overrun_torque", "N·m", lo=0, hi=2000, default=0.0,
            doc="Engine-braking torque at the crank with the throttle closed (positive)."),
    ),
    "brakes": (
        Key("bias_front", "bias_front", "-", lo=0, hi=1, required=True, slips=PCT_SLIP,
            doc="Front share of the brake force."),
    ),
    "suspension": (
        Key("roll_stiffness_front_share", "roll_stiffness_front_share", "-", lo=0, hi=1,
            slips=PCT_SLIP,
            doc="Front share of the total roll stiffness (or give both roll stiffnesses)."),
        Key("roll_stiffness_front_nm_per_deg", "roll_stiffness_front", "N·m/deg", lo=0,
            hi=1e7, doc="Front roll stiffness."),
        Key("roll_stiffness_rear_nm_per_deg", "roll_stiffness_rear", "N·m/deg", lo=0,
            hi=1e7, doc="Rear roll stiffness."),
        Key("roll_centre_height_front_m", "roll_centre_front", "m", lo=-0.5, hi=1.5,
            default=0.0, alts=(("roll_centre_height_front_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Front roll-centre height."),
        Key("roll_centre_height_rear_m", "roll_centre_rear", "m", lo=-0.5, hi=1.5,
            default=0.0, alts=(("roll_centre_height_rear_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Rear roll-centre height."),
        Key("heave_rate_front_n_per_mm", "heave_rate_front", "N/mm", scale=1e3, lo=0,
            hi=1e9, lo_open=True,
            doc="Front axle heave rate at the wheels (both wheels). Needed with an aero map."),
        Key("heave_rate_rear_n_per_mm", "heave_rate_rear", "N/mm", scale=1e3, lo=0,
            hi=1e9, lo_open=True, doc="Rear axle heave rate at the wheels (both wheels)."),
        Key("static_ride_height_front_mm", "static_ride_height_front", "mm", scale=MM,
            lo=-0.05, hi=0.6, slips=((1e3, "metres"),),
            doc="Front ride height at rest (no aero). Needed with an aero map."),
        Key("static_ride_height_rear_mm", "static_ride_height_rear", "mm", scale=MM,
            lo=-0.05, hi=0.6, slips=((1e3, "metres"),), doc="Rear ride height at rest."),
    ),
    "air": (
        Key("density_kg_m3", "density", "kg/m³", lo=0.3, hi=1.6,
            doc="Air density. Default: ISO 2533 sea level (1.225) unless conditions given."),
        Key("altitude_m", "altitude", "m", lo=-500, hi=6000,
            doc="Altitude for the ISO 2533 standard atmosphere (when no pressure given)."),
        Key("temperature_c", "temperature_c", "°C", lo=-40, hi=60,
            doc="Air temperature (with pressure or altitude)."),
        Key("pressure_hpa", "pressure", "hPa", scale=HPA, lo=500 * HPA, hi=1100 * HPA,
            slips=((1e-2, "pascals"),), doc="Air pressure."),
        Key("relative_humidity_pct", "relative_humidity", "%", scale=1e-2, lo=0, hi=1,
            slips=((1e2, "a fraction"),), doc="Relative humidity (CIPM-2007 formula)."),
    ),
    "transient": (
        Key("yaw_inertia_kgm2", "yaw_inertia", "kg·m²", lo=10, hi=1e6, required=True,
            doc="Yaw moment of inertia about the vertical axis through the CG (single-track "
                "lift-off runs)."),
        Key("cornering_stiffness_front_n_per_rad", "cornering_stiffness_front", "N/rad",
            lo=1e3, hi=5e6, required=True,
            alts=(("cornering_stiffness_front_n_per_deg", 180.0 / math.pi, "N/deg"),),
            doc="Front axle (both tyres) cornering stiffness at the static axle load (see "
                "cornering_stiffness_load_exponent for its growth with load on track)."),
        Key("cornering_stiffness_rear_n_per_rad", "cornering_stiffness_rear", "N/rad",
            lo=1e3, hi=5e6, required=True,
            alts=(("cornering_stiffness_rear_n_per_deg", 180.0 / math.pi, "N/deg"),),
            doc="Rear axle (both tyres) cornering stiffness at the static axle load."),
        Key("relaxation_length_m", "relaxation_length", "m", lo=0, hi=3, required=True,
            alts=(("relaxation_length_mm", MM, "mm"),), slips=MM_SLIP,
            doc="Tyre lateral relaxation length (0 = no lag)."),
        Key("steering_ratio", "steering_ratio", "-", lo=1, hi=40, required=True,
            doc="Steering-wheel angle per road-wheel angle."),
        Key("cornering_stiffness_load_exponent", "cornering_stiffness_load_exponent", "-",
            lo=0.0, hi=1.0, default=0.6,
            doc="Exponent n of the cornering stiffness's growth with axle load, C = C_static "
                "(Fz/Fz_static)^n (0 = constant, 1 = in proportion)."),
        Key("shape_factor", "shape_factor", "-", lo=1.0, hi=1.9, default=1.3,
            doc="Magic Formula shape factor C of the axle lateral-force curve (its peak is "
                "the lap's axle capacity)."),
    ),
}

_TYRE_KEYS = (
    Key("peak_friction", "peak_friction", "-", lo=0, hi=4, lo_open=True,
        doc="Peak friction coefficient at the reference load (both directions)."),
    Key("peak_friction_lateral", "peak_friction_lateral", "-", lo=0, hi=4, lo_open=True,
        doc="Lateral peak friction (overrides peak_friction)."),
    Key("peak_friction_longitudinal", "peak_friction_longitudinal", "-", lo=0, hi=4,
        lo_open=True, doc="Longitudinal peak friction (overrides peak_friction)."),
    Key("load_sensitivity", "load_sensitivity", "-", lo=0, hi=0.9, default=0.0,
        doc="Fractional drop of friction per extra reference load: "
            "mu = mu0 (1 - k (Fz - Fz0)/Fz0)."),
    Key("reference_load_n", "reference_load", "N", lo=100, hi=50000, default=4000.0,
        doc="Reference (nominal) load per tyre Fz0 for load sensitivity."),
    Key("model", "model", kind="str", choices=("linear", "magic-formula-peak"),
        default="linear",
        doc="'linear' (mu0, k) or 'magic-formula-peak' (pdy1, pdy2, pdx1, pdx2, Fz0)."),
    Key("pdy1", "pdy1", "-", lo=0, hi=4, lo_open=True, doc="Magic Formula lateral peak factor."),
    Key("pdy2", "pdy2", "-", lo=-2, hi=0.5, doc="Magic Formula lateral load dependency."),
    Key("pdx1", "pdx1", "-", lo=0, hi=4, lo_open=True,
        doc="Magic Formula longitudinal peak factor."),
    Key("pdx2", "pdx2", "-", lo=-2, hi=0.5,
        doc="Magic Formula longitudinal load dependency."),
)
SCHEMA["tyres.front"] = _TYRE_KEYS
SCHEMA["tyres.rear"] = _TYRE_KEYS


@functools.cache
def _key_index(section: str) -> Mapping[str, Key]:
    """Every spelling of a section's keys -> its :class:`Key` (read-only; built once per
    section: a sweep builds a car per point, and each build looks sections up ~60 times)."""
    out = {}
    for k in SCHEMA.get(section, ()):
        for n in k.names():
            out[n] = k
    return MappingProxyType(out)


def schema_markdown() -> str:
    """The car-file key reference as Markdown (docs/car-file.md is generated from this)."""
    lines = ["# Car file reference", "",
             "Generated by `lapbalance car --schema`. Keys carry their unit in the name; "
             "values are converted to SI on load. `required` keys must be present "
             "(conditional requirements are stated in the description).", ""]
    for sec, keys in SCHEMA.items():
        if not keys:
            continue
        lines += [f"## [{sec}]" if sec else "## top level", "",
                  "| key | unit | range | default | description |", "|---|---|---|---|---|"]
        for k in keys:
            rng = ""
            if k.choices:
                rng = " / ".join(f"`{c}`" for c in k.choices)
            elif k.lo is not None or k.hi is not None:
                lo = "" if k.lo is None else f"{k.lo / k.scale:g}"
                hi = "" if k.hi is None else f"{k.hi / k.scale:g}"
                rng = f"{'(' if k.lo_open else '['}{lo}, {hi}{')' if k.hi_open else ']'}"
            dflt = "required" if k.required else ("" if k.default is None else
                                                  f"{k.default / k.scale:g}"
                                                  if isinstance(k.default, float) else
                                                  str(k.default))
            names = "`" + "`, `".join(k.names()) + "`"
            lines.append(f"| {names} | {k.unit} | {rng} | {dflt} | {k.doc} |")
        lines.append("")
    return "\n".join(lines)


#: Keys a lift-off run needs (named in the message when the section is missing).
TRANSIENT_REQUIRED = tuple(k.name for k in SCHEMA["transient"] if k.required)
