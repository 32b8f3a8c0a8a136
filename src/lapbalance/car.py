"""Car description: TOML files -> frozen dataclasses in SI units.

Every unit conversion happens here, once. A car file has the sections ``chassis``, ``aero``,
``tyres`` (with ``tyres.front`` and ``tyres.rear``), ``powertrain``, ``brakes``,
``suspension`` and ``air``. Keys carry their unit in the name (``mass_kg``, ``power_kw``,
``static_ride_height_front_mm``); a few quantities accept a second unit (``wheelbase_mm``).

A variant file names a ``base`` car (path relative to the variant) and overrides keys.
Command-line overrides use ``section.key=value`` (:func:`apply_overrides`).

The keys themselves (units, bounds, defaults, slips) are declared in
:mod:`lapbalance.car_schema`; run ``lapbalance car --schema`` for the generated reference
(docs/car-file.md).
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lapbalance import aero as _aero
from lapbalance import air as _air
from lapbalance.car_schema import (  # noqa: F401  (re-exported: the schema's public names)
    _TYRE_KEYS,
    MM_SLIP,
    PCT_SLIP,
    SCHEMA,
    TRANSIENT_REQUIRED,
    Key,
    _key_index,
    schema_markdown,
)
from lapbalance.errors import InputError, clip, did_you_mean
from lapbalance.units import G0, MM

# --------------------------------------------------------------------------------------------
# Dataclasses (SI)
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Chassis:
    """Mass and geometry. Units: mass [kg], lengths [m], fraction [-]."""

    mass: float
    wheelbase: float
    front_weight_fraction: float
    cg_height: float
    track_front: float
    track_rear: float
    overall_width: float | None = None

    @property
    def a(self) -> float:
        """Front axle to CG [m]."""
        return (1.0 - self.front_weight_fraction) * self.wheelbase

    @property
    def b(self) -> float:
        """CG to rear axle [m]."""
        return self.front_weight_fraction * self.wheelbase


@dataclass(frozen=True)
class Aero:
    """Aero force system at the static ride heights, split in the CG convention.

    front_area_cg, rear_area_cg : axle downforce areas [m²] such that F_L,axle = q · area.
    drag_area : CD·A [m²]. input_convention / input_balance_front: as given in the file.
    drag_height : height of the drag line [m] or None. aero_map : an AeroMap or None.
    """

    front_area_cg: float
    rear_area_cg: float
    drag_area: float
    input_convention: str
    input_balance_front: float
    restraint_height: float
    drag_height: float | None
    aero_map: Any = None

    @property
    def downforce_area(self) -> float:
        """Total downforce area -CL·A [m²]."""
        return self.front_area_cg + self.rear_area_cg

    @property
    def balance_cg(self) -> float:
        """Aero balance (front share of downforce) in the CG convention [-]."""
        t = self.downforce_area
        return self.front_area_cg / t if t != 0 else float("nan")

    def balance_ground(self, cg_height: float, wheelbase: float) -> float:
        """Front share as wheel-restrained scales (ground convention) would read it [-]."""
        t = self.downforce_area
        shift = self.drag_area * cg_height / wheelbase
        return (self.front_area_cg - shift) / t if t != 0 else float("nan")


@dataclass(frozen=True)
class AxleTyres:
    """Peak friction of one axle's tyres with linear load sensitivity.

    mu(Fz) = mu0 (1 - k (Fz - Fz0)/Fz0), per tyre; capacity mu(Fz)·Fz held at its peak beyond
    the load where it would fall. mu [-], k [-], reference_load Fz0 [N].
    """

    mu_lateral: float
    mu_longitudinal: float
    k_lateral: float
    k_longitudinal: float
    reference_load: float
    model: str = "linear"


@dataclass(frozen=True)
class Tyres:
    """Both axles' tyres and the rolling-resistance coefficient [-]."""

    front: AxleTyres
    rear: AxleTyres
    rolling_resistance: float


@dataclass(frozen=True)
class Powertrain:
    """Engine, gearbox and driveline.

    power [W] (constant-power mode) or torque curve (rpm [rev/min], torque [N·m]);
    wheel_radius [m]; overrun_torque [N·m] at the crank, positive = braking.
    """

    drive: str
    front_drive_share: float
    mode: str  # "power" | "torque"
    power: float
    max_tractive_force: float
    torque_curve_rpm: tuple[float, ...]
    torque_curve_nm: tuple[float, ...]
    gear_ratios: tuple[float, ...]
    final_drive: float
    wheel_radius: float
    efficiency: float
    shift_rpm: float
    rev_limit_rpm: float
    overrun_torque: float

    def top_speed_rev_limited(self) -> float:
        """Speed at the rev limiter in top gear [m/s]."""
        omega = self.rev_limit_rpm * 2 * math.pi / 60
        return omega * self.wheel_radius / (self.gear_ratios[-1] * self.final_drive)


@dataclass(frozen=True)
class Brakes:
    """Fixed brake bias: front share of the brake force [-]."""

    bias_front: float


@dataclass(frozen=True)
class Suspension:
    """Roll and heave. Heights [m], heave rates [N/m] (inf = rigid), shares [-]."""

    roll_stiffness_front_share: float
    roll_centre_front: float
    roll_centre_rear: float
    heave_rate_front: float
    heave_rate_rear: float
    static_ride_height_front: float
    static_ride_height_rear: float


@dataclass(frozen=True)
class Air:
    """Air density [kg/m³] and how it was obtained."""

    density: float
    how: str


@dataclass(frozen=True)
class Transient:
    """Single-track data for lift-off runs (section ``[transient]``).

    yaw_inertia [kg·m²]; cornering_stiffness_front/rear: axle cornering stiffness at the
    static axle load [N/rad]; relaxation_length [m]; steering_ratio [-]; shape_factor:
    Magic Formula C [-]; cornering_stiffness_load_exponent: n in C ∝ Fz^n [-].
    """

    yaw_inertia: float
    cornering_stiffness_front: float
    cornering_stiffness_rear: float
    relaxation_length: float
    steering_ratio: float
    shape_factor: float = 1.3
    cornering_stiffness_load_exponent: float = 0.6


@dataclass(frozen=True)
class Car:
    """A complete car. Every field is in SI units; see the section classes."""

    name: str
    description: str
    chassis: Chassis
    aero: Aero
    tyres: Tyres
    powertrain: Powertrain
    brakes: Brakes
    suspension: Suspension
    air: Air
    source: str = ""
    raw: dict = field(default_factory=dict, repr=False, compare=False)
    transient: Transient | None = None

    @property
    def weight(self) -> float:
        """m·g [N]."""
        return self.chassis.mass * G0

    def with_overrides(self, overrides: list[str] | dict[str, Any]) -> Car:
        """A new Car with ``section.key=value`` overrides applied to the merged raw file."""
        raw = _deep_copy(self.raw)
        apply_overrides(raw, overrides)
        return build_car(raw, self.source, Path(self.source).parent if self.source else
                         Path("."))


# --------------------------------------------------------------------------------------------
# Loading: raw TOML, variants, overrides
# --------------------------------------------------------------------------------------------


def _deep_copy(d):
    if isinstance(d, dict):
        return {k: _deep_copy(v) for k, v in d.items()}
    if isinstance(d, list):
        return [_deep_copy(v) for v in d]
    return d


def _read_toml(path: Path) -> dict:
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found; check the path", path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a car file", path) from None
    except OSError as e:
        raise InputError(f"cannot read ({e.strerror})", path) from None
    from lapbalance.textio import decode_text

    text = decode_text(data, path, "a TOML car file", "save the car file as UTF-8 TOML")
    if not text.strip():
        raise InputError("is empty; a car file needs at least name and the sections "
                         "chassis, aero, tyres, powertrain, brakes", path)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"is not valid TOML ({e}); check quotes, '=' and [section] lines",
                         path) from None
    except (RecursionError, ValueError) as e:  # nesting too deep; integer too long
        what = "nests lists or tables too deeply" if isinstance(e, RecursionError) else \
            "holds a number too long to read"
        raise InputError(f"{what}; a car file needs plain numbers, lists and [section] "
                         "tables", path) from None


def _flatten(raw: dict, source: str, prefix: str = "") -> dict[tuple[str, str], tuple]:
    """(section, key) -> (value, source) for every leaf; sections may nest one level."""
    out = {}
    for k, v in raw.items():
        sec = prefix
        if isinstance(v, dict):
            sub = f"{prefix}.{k}" if prefix else k
            out.update(_flatten(v, source, sub))
        else:
            out[(sec, k)] = (v, source)
    return out


def _merge_into(base: dict, top: dict) -> None:
    """Merge flat {(section, key): (value, source)} ``top`` into ``base``; a key replaces any
    other spelling of the same quantity (e.g. wheelbase_mm replaces wheelbase_m)."""
    for (sec, key), val in top.items():
        spec = _key_index(sec).get(key)
        if spec is not None:
            for other in spec.names():
                if other != key:
                    base.pop((sec, other), None)
        base[(sec, key)] = val


def _load_flat(path: Path, stack: tuple[Path, ...] = ()) -> dict:
    path = path.resolve() if path.exists() else path
    if path in stack:
        chain = " -> ".join(p.name for p in stack + (path,))
        raise InputError(f"variant chain loops ({chain}); make one file the plain base",
                         stack[-1], "base")
    raw = _read_toml(path)
    flat = _flatten(raw, str(path))
    base = raw.get("base")
    if base is None:
        return flat
    if not isinstance(base, str):
        raise InputError("must be a path (string) of the base car file", path, "base")
    base_path = (path.parent / base)
    if not base_path.exists():
        raise InputError(f'base car "{base}" not found (looked for {base_path}); '
                         "give a path relative to this file", path, "base")
    merged = _load_flat(base_path, stack + (path,))
    merged.pop(("", "base"), None)
    _merge_into(merged, flat)
    merged.pop(("", "base"), None)
    return merged


def _parse_override(text: str) -> tuple[str, str, Any]:
    if "=" not in text:
        raise InputError(f'"{text}" is not section.key=value', "--set")
    lhs, rhs = text.split("=", 1)
    lhs = lhs.strip()
    if "." in lhs:
        sec, key = lhs.rsplit(".", 1)
    else:
        sec, key = "", lhs
    rhs = rhs.strip()
    try:
        value = tomllib.loads(f"v = {rhs}")["v"]
    except ValueError as e:  # an integer too long for int(): read it as a float
        try:
            value = float(rhs) if not isinstance(e, tomllib.TOMLDecodeError) else rhs
        except ValueError:
            value = rhs
    except RecursionError:
        value = rhs
    return sec, key, value


def apply_overrides(flat_or_raw: dict, overrides) -> None:
    """Apply ``section.key=value`` overrides (strings) or a {dotted: value} mapping in place.

    ``flat_or_raw`` is the flat mapping {(section, key): (value, source)}.
    """
    if not overrides:
        return
    items = []
    if isinstance(overrides, dict):
        for k, v in overrides.items():
            sec, key = (k.rsplit(".", 1) if "." in k else ("", k))
            items.append((sec, key, v))
    else:
        items = [_parse_override(o) for o in overrides]
    for sec, key, value in items:
        if sec not in SCHEMA:
            raise InputError(f'unknown section "{sec}"; {did_you_mean(sec, SCHEMA)}', "--set",
                             f"{sec}.{key}")
        if key not in _key_index(sec):
            raise InputError(f'unknown key "{sec}.{key}"; '
                             f"{did_you_mean(key, _key_index(sec))}", "--set", f"{sec}.{key}")
        _merge_into(flat_or_raw, {(sec, key): (value, "--set")})


def load_car(path: str | Path, overrides=None) -> Car:
    """Load and validate a car file (following ``base`` variants), with optional overrides.

    Parameters
    ----------
    path : str or Path
        TOML car file.
    overrides : list of str or dict, optional
        ``section.key=value`` strings (as from ``--set``) or {"section.key": value}.

    Returns
    -------
    Car
        Validated car in SI units.

    Raises
    ------
    InputError
        One line naming the file, the key and the fix.
    """
    path = Path(path)
    flat = _load_flat(path)
    apply_overrides(flat, overrides)
    return build_car(flat, str(path), path.parent)


def car_from_dict(raw: dict, source: str = "<dict>", folder: str | Path = ".",
                  overrides=None) -> Car:
    """Build a car from a nested mapping shaped like a car file (same validation).

    Parameters
    ----------
    raw : dict
        {"name": ..., "chassis": {...}, "aero": {...}, "tyres": {"front": {...}, ...}, ...}
    source : str
        Name used in error messages.
    folder : str or Path
        Folder that relative paths (aero map) are resolved against.
    overrides : list of str or dict, optional
        As for :func:`load_car`.
    """
    flat = _flatten(raw, source)
    flat.pop(("", "base"), None)
    apply_overrides(flat, overrides)
    return build_car(flat, source, Path(folder))


# --------------------------------------------------------------------------------------------
# Validation and building
# --------------------------------------------------------------------------------------------


def _fmt_dotted(sec: str, key: str) -> str:
    return f"{sec}.{key}" if sec else key


def _convert(spec: Key, sec: str, key: str, value, src: str):
    dotted = _fmt_dotted(sec, key)
    if spec.kind == "str":
        if not isinstance(value, str):
            raise InputError(f"= {clip(repr(value))} must be text in quotes", src, dotted)
        if spec.choices and value not in spec.choices:
            raise InputError(f'= "{value}" is not one of {", ".join(spec.choices)}; '
                             f"{did_you_mean(value, spec.choices)}", src, dotted)
        return value
    if spec.kind == "floats":
        if not isinstance(value, list) or not value:
            raise InputError("must be a non-empty list of numbers, e.g. [3.2, 2.1, 1.6]",
                             src, dotted)
        out = []
        for i, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise InputError(f"item {i + 1} = {clip(repr(v))} is not a number", src, dotted)
            if not math.isfinite(v):
                raise InputError(f"item {i + 1} = {v} is not finite; give a plain number", src,
                                 dotted)
            out.append(float(v) * spec.scale_of(key))
        return tuple(out)
    if isinstance(value, bool) or not isinstance(value, int | float):
        hint = ""
        if isinstance(value, str):
            hint = "; write the number without quotes"
            try:
                float(value.replace(",", "."))
            except ValueError:
                hint = "; give a number"
        raise InputError(f"= {clip(repr(value))} is not a number{hint}", src, dotted)
    if not math.isfinite(value):
        raise InputError(f"= {value} is not a finite number; give a plain number", src, dotted)
    si = float(value) * spec.scale_of(key)
    unit = next((u for k, s, u in spec.alts if k == key), spec.unit)
    lo_ok = spec.lo is None or (si > spec.lo if spec.lo_open else si >= spec.lo)
    hi_ok = spec.hi is None or (si < spec.hi if spec.hi_open else si <= spec.hi)
    if not (lo_ok and hi_ok):
        scale = spec.scale_of(key)
        for factor, looks in spec.slips:
            cand = si * factor
            c_lo = spec.lo is None or (cand > spec.lo if spec.lo_open else cand >= spec.lo)
            c_hi = spec.hi is None or (cand < spec.hi if spec.hi_open else cand <= spec.hi)
            # a unit slip is off by a large factor: only suggest it when the value is at least
            # 10x beyond the bound it breaks (2.5 m of CG height is not 2.5 mm)
            far = ((factor < 1 and spec.hi is not None and spec.hi > 0 and si >= 10 * spec.hi)
                   or (factor > 1 and spec.lo is not None and spec.lo > 0
                       and 0 < si <= spec.lo / 10))
            if c_lo and c_hi and far:
                alt = next((k for k, s, u in spec.alts if k != key), None)
                also = f" or use {alt}" if alt else ""
                is_in = "a fraction" if unit in ("", "-") else f"in {unit}"
                raise InputError(
                    f"= {value:g} looks like {looks}, but the key is {is_in}; "
                    f"write {cand / scale:g}{also}", src, dotted)
        rng = []
        if spec.lo is not None:
            rng.append(f"{'>' if spec.lo_open else '>='} {spec.lo / spec.scale_of(key):g}")
        if spec.hi is not None:
            rng.append(f"{'<' if spec.hi_open else '<='} {spec.hi / spec.scale_of(key):g}")
        u = "" if unit in ("", "-") else f" {unit}"
        raise InputError(f"= {value:g}{u} is not physical; it must be "
                         f"{' and '.join(rng)}{u}", src, dotted)
    if spec.kind == "int":
        return int(round(si))
    return si


def _section_values(flat: dict, sec: str, default_src: str) -> dict[str, Any]:
    """Validate one section's keys; return {attr: SI value} for the keys present/defaulted."""
    index = _key_index(sec)
    out: dict[str, Any] = {}
    srcs: dict[str, str] = {}
    for (s, key), (value, src) in flat.items():
        if s != sec:
            continue
        spec = index[key]
        if spec.attr in out:
            raise InputError(f'gives the same quantity as "{srcs[spec.attr]}"; keep one',
                             src, _fmt_dotted(sec, key))
        out[spec.attr] = _convert(spec, sec, key, value, src)
        srcs[spec.attr] = key
    for spec in SCHEMA[sec]:
        if spec.attr not in out:
            if spec.required:
                raise InputError(f'missing key "{_fmt_dotted(sec, spec.name)}" '
                                 f"({spec.doc.rstrip('.')}, {spec.unit or 'text'})",
                                 default_src, _fmt_dotted(sec, spec.name))
            out[spec.attr] = spec.default
    out["__src__"] = {a: flat_src(flat, sec, k) for a, k in srcs.items()}
    return out


def flat_src(flat, sec, key):
    return flat[(sec, key)][1]


def _check_structure(flat: dict, src: str) -> None:
    for (sec, key), (_, ksrc) in flat.items():
        if sec not in SCHEMA:
            top = sec.split(".")[0]
            hint = did_you_mean(sec, [s for s in SCHEMA if s])
            raise InputError(f'unknown section [{sec}]; {hint}', ksrc, top)
        if key not in _key_index(sec):
            raise InputError(f'unknown key "{_fmt_dotted(sec, key)}"; '
                             f"{did_you_mean(key, _key_index(sec))}", ksrc,
                             _fmt_dotted(sec, key))
    for sec in ("chassis", "aero", "tyres.front", "tyres.rear", "powertrain", "brakes"):
        if not any(s == sec for (s, _) in flat):
            raise InputError(f"missing section [{sec}]", src, sec)


def build_car(flat: dict, source: str, folder: Path) -> Car:
    """Validate the flat key mapping and build a :class:`Car` (SI)."""
    src = source or "car"
    _check_structure(flat, src)
    top = _section_values(flat, "", src)
    ch = _section_values(flat, "chassis", src)
    chassis = Chassis(ch["mass"], ch["wheelbase"], ch["front_weight_fraction"],
                      ch["cg_height"], ch["track_front"], ch["track_rear"],
                      ch["overall_width"])
    if chassis.overall_width is not None and chassis.overall_width < max(
            chassis.track_front, chassis.track_rear):
        raise InputError(f"overall width {chassis.overall_width:g} m is less than the track "
                         f"width {max(chassis.track_front, chassis.track_rear):g} m; give the "
                         "width over the wheels or body", _src(ch, "overall_width", src),
                         "chassis.overall_width_m")
    sus = _build_suspension(_section_values(flat, "suspension", src), src)
    air = _build_air(_section_values(flat, "air", src), src)
    tyres = _build_tyres(flat, src)
    pt = _build_powertrain(_section_values(flat, "powertrain", src), src)
    br = _section_values(flat, "brakes", src)
    aero = _build_aero(_section_values(flat, "aero", src), chassis, sus, air, src, folder)
    raw = {k: v for k, v in flat.items()}
    return Car(top["name"], top["description"] or "", chassis, aero, tyres, pt,
               Brakes(br["bias_front"]), sus, air, source, raw,
               transient=_build_transient(flat, src))


def _build_transient(flat: dict, src: str) -> Transient | None:
    """The optional ``[transient]`` section, or None when the file has none."""
    if not any(s == "transient" for (s, _) in flat):
        return None
    v = _section_values(flat, "transient", src)
    for axle in ("front", "rear"):
        c = v[f"cornering_stiffness_{axle}"]
        key = f"cornering_stiffness_{axle}_n_per_rad"
        if ("transient", key) in flat and c < 8000.0:  # no car axle is that soft per radian
            raise InputError(f"= {c:g} N/rad looks like N/deg (a car axle has 20 000 N/rad or "
                             f"more); write cornering_stiffness_{axle}_n_per_deg = {c:g} or "
                             f"{c * 180.0 / math.pi:.0f} N/rad",
                             _src(v, f"cornering_stiffness_{axle}", src), f"transient.{key}")
    return Transient(v["yaw_inertia"], v["cornering_stiffness_front"],
                     v["cornering_stiffness_rear"], v["relaxation_length"],
                     v["steering_ratio"], v["shape_factor"],
                     v["cornering_stiffness_load_exponent"])


def _src(vals: dict, attr: str, default: str) -> str:
    return vals["__src__"].get(attr, default)


def _build_aero(v: dict, ch: Chassis, sus: Suspension, air: Air, src: str, folder: Path):
    L, h = ch.wheelbase, ch.cg_height
    coeff_keys = ("frontal_area", "drag_coefficient", "front_lift_coefficient",
                  "rear_lift_coefficient")
    has_coeff = [k for k in coeff_keys if v[k] is not None]
    conv = v["convention"]
    if has_coeff:
        missing = [k for k in coeff_keys if v[k] is None]
        if missing:
            need = ", ".join("aero." + m for m in coeff_keys)
            raise InputError(f"the coefficient form needs {need}; missing aero.{missing[0]}",
                             src, "aero." + missing[0])
        for k in ("downforce_area", "front_downforce_area", "rear_downforce_area",
                  "balance_front", "drag_area"):
            if v[k] is not None:
                raise InputError("give either the coefficient form (frontal_area_m2, "
                                 "drag_coefficient, front/rear_lift_coefficient) or areas, "
                                 "not both", _src(v, k, src), "aero." + k)
        A = v["frontal_area"]
        drag_area = v["drag_coefficient"] * A
        front, rear = -v["front_lift_coefficient"] * A, -v["rear_lift_coefficient"] * A
        if conv not in (None, "ground"):
            raise InputError("SAE J1594 axle lift coefficients are ground-referenced; set "
                             'balance_convention = "ground" or leave it out',
                             _src(v, "convention", src), "aero.balance_convention")
        conv = "ground"
    else:
        if v["drag_area"] is None:
            raise InputError('missing key "aero.drag_area_m2" (CD·A, m²)', src,
                             "aero.drag_area_m2")
        drag_area = v["drag_area"]
        split = v["front_downforce_area"] is not None or v["rear_downforce_area"] is not None
        if split:
            if v["front_downforce_area"] is None or v["rear_downforce_area"] is None:
                raise InputError("give both front_downforce_area_m2 and "
                                 "rear_downforce_area_m2", src, "aero")
            if v["downforce_area"] is not None or v["balance_front"] is not None:
                raise InputError("give either front/rear_downforce_area_m2 or "
                                 "downforce_area_m2 with balance_front, not both",
                                 src, "aero.downforce_area_m2")
            front, rear = v["front_downforce_area"], v["rear_downforce_area"]
        else:
            total = v["downforce_area"] if v["downforce_area"] is not None else 0.0
            bal = v["balance_front"]
            if bal is None:
                if total != 0:
                    raise InputError('missing key "aero.balance_front" (front share of the '
                                     "downforce, with balance_convention)", src,
                                     "aero.balance_front")
                bal = 0.5
            front, rear = total * bal, total * (1 - bal)
        if conv is None:
            if front == 0 and rear == 0 and v["map_file"] is None:
                conv = "cg"
            else:
                raise InputError('missing key "aero.balance_convention"; say how the split '
                                 'was measured: "cg", "ground" (wheel-restrained scales) or '
                                 '"restraint" (with restraint_height_m)', src,
                                 "aero.balance_convention")
    z = 0.0
    if conv == "restraint":
        if v["restraint_height"] is None:
            raise InputError('convention "restraint" needs aero.restraint_height_m', src,
                             "aero.restraint_height_m")
        z = v["restraint_height"]
    # Areas convert like forces (both scale with q): front += CdA (h - z)/L.
    f_cg, r_cg = _aero.to_cg_convention(front, rear, drag_area, h, L, conv, z)
    total = front + rear
    bal_in = front / total if total != 0 else float("nan")
    amap = None
    if v["map_file"] is not None:
        from lapbalance import aeromap

        if not (math.isfinite(sus.heave_rate_front) and math.isfinite(sus.heave_rate_rear)):
            raise InputError("an aero map needs suspension.heave_rate_front_n_per_mm and "
                             "heave_rate_rear_n_per_mm", src, "suspension")
        if sus.static_ride_height_front is None or sus.static_ride_height_rear is None:
            raise InputError("an aero map needs suspension.static_ride_height_front_mm and "
                             "static_ride_height_rear_mm", src, "suspension")
        # relative to the file that names the map (a base file may sit in another folder)
        key_src = _src(v, "map_file", src)
        mfolder = Path(key_src).parent if Path(key_src).is_file() else folder
        mpath = mfolder / v["map_file"]
        if not mpath.is_file():
            raise InputError(f'aero map "{v["map_file"]}" not found (looked for {mpath}); give '
                             "a path relative to the car file that names it", key_src,
                             "aero.map_file")
        amap = aeromap.load_aero_map(mpath, cg_height=h, wheelbase=L)
        fa, ra, da = amap.areas_at(sus.static_ride_height_front, sus.static_ride_height_rear)
        f_cg, r_cg, drag_area = fa, ra, da
        total = fa + ra
        bal_in = float("nan")
        conv = amap.convention
        z = amap.restraint_height if conv == "restraint" else 0.0
    return Aero(
        float(f_cg), float(r_cg), float(drag_area), conv, float(bal_in), z,
        v["drag_height"], amap)


def _build_tyres(flat: dict, src: str) -> Tyres:
    common = _section_values(flat, "tyres", src)
    axles = []
    for axle in ("front", "rear"):
        sec = f"tyres.{axle}"
        v = _section_values(flat, sec, src)
        if v["model"] == "magic-formula-peak":
            need = ("pdy1", "pdy2", "pdx1", "pdx2")
            for k in need:
                if v[k] is None:
                    raise InputError(f'model "magic-formula-peak" needs {sec}.{k}', src,
                                     f"{sec}.{k}")
            for k in ("peak_friction", "peak_friction_lateral", "peak_friction_longitudinal"):
                if v[k] is not None:
                    raise InputError('peak_friction keys belong to model "linear"; with '
                                     '"magic-formula-peak" give pdy1/pdx1', _src(v, k, src),
                                     f"{sec}.{k}")
            muy, mux = v["pdy1"], v["pdx1"]
            ky, kx = -v["pdy2"] / muy, -v["pdx2"] / mux
            for kk, name in ((ky, "pdy2"), (kx, "pdx2")):
                if not 0 <= kk < 0.9:
                    raise InputError(f"gives load sensitivity {kk:.3g}; friction must fall "
                                     "with load by less than 90 % per reference load "
                                     "(pd*2 between -0.9·pd*1 and 0)", src, f"{sec}.{name}")
        else:
            for k in ("pdy1", "pdy2", "pdx1", "pdx2"):
                if v[k] is not None:
                    raise InputError('Magic Formula keys need model = "magic-formula-peak"',
                                     _src(v, k, src), f"{sec}.{k}")
            base = v["peak_friction"]
            muy = v["peak_friction_lateral"] or base
            mux = v["peak_friction_longitudinal"] or base
            if muy is None or mux is None:
                raise InputError(f'missing key "{sec}.peak_friction" (peak friction '
                                 "coefficient at the reference load)", src,
                                 f"{sec}.peak_friction")
            ky = kx = v["load_sensitivity"]
        axles.append(AxleTyres(muy, mux, ky, kx, v["reference_load"], v["model"]))
    return Tyres(axles[0], axles[1], common["rolling_resistance"])


def _build_powertrain(v: dict, src: str) -> Powertrain:
    drive = v["drive"]
    share = v["front_drive_share"]
    if drive == "all":
        if share is None:
            raise InputError('drive = "all" needs powertrain.front_drive_share', src,
                             "powertrain.front_drive_share")
    else:
        if share is not None and share != (1.0 if drive == "front" else 0.0):
            raise InputError(f'front_drive_share applies to drive = "all" (drive is "{drive}")',
                             _src(v, "front_drive_share", src), "powertrain.front_drive_share")
        share = 1.0 if drive == "front" else 0.0
    gears = v["gear_ratios"]
    for i, g in enumerate(gears):
        if not 0.05 < g < 30:
            raise InputError(f"gear {i + 1} ratio {g:g} is not physical (0.05 to 30)",
                             _src(v, "gear_ratios", src), "powertrain.gear_ratios")
    if any(gears[i + 1] >= gears[i] for i in range(len(gears) - 1)):
        raise InputError("ratios must fall from first gear to top gear",
                         _src(v, "gear_ratios", src), "powertrain.gear_ratios")
    has_curve = v["torque_curve_rpm"] is not None or v["torque_curve_nm"] is not None
    if has_curve and v["power"] is not None:
        raise InputError("give either power_kw or a torque curve, not both",
                         _src(v, "power", src), "powertrain.power_kw")
    rpm = nm = ()
    if has_curve:
        rpm, nm = v["torque_curve_rpm"], v["torque_curve_nm"]
        if rpm is None or nm is None:
            raise InputError("a torque curve needs both torque_curve_rpm and torque_curve_nm",
                             src, "powertrain.torque_curve_rpm")
        if len(rpm) != len(nm):
            raise InputError(f"torque_curve_rpm has {len(rpm)} values but torque_curve_nm "
                             f"has {len(nm)}; give one torque per rpm",
                             _src(v, "torque_curve_nm", src), "powertrain.torque_curve_nm")
        if len(rpm) < 2 or any(rpm[i + 1] <= rpm[i] for i in range(len(rpm) - 1)):
            raise InputError("torque_curve_rpm needs at least two rising values",
                             _src(v, "torque_curve_rpm", src), "powertrain.torque_curve_rpm")
        if any(t < 0 or t > 5000 for t in nm):
            raise InputError("torques must lie between 0 and 5000 N·m",
                             _src(v, "torque_curve_nm", src), "powertrain.torque_curve_nm")
        mode, power = "torque", 0.0
    elif v["power"] is not None:
        mode, power = "power", v["power"]
    else:
        raise InputError('missing key "powertrain.power_kw" (or torque_curve_rpm and '
                         "torque_curve_nm)", src, "powertrain.power_kw")
    shift = v["shift_rpm"]
    rev = v["rev_limit_rpm"] if v["rev_limit_rpm"] is not None else shift
    if rev < shift:
        raise InputError(f"rev_limit_rpm {rev:g} is below shift_rpm {shift:g}; the limiter "
                         "must be at or above the shift point", _src(v, "rev_limit_rpm", src),
                         "powertrain.rev_limit_rpm")
    if mode == "torque":
        _check_torque_curve(rpm, nm, shift, rev, v, src)
    ftmax = v["max_tractive_force"]
    if mode == "power" and ftmax is None:
        ftmax = power * v["efficiency"] / 10.0  # force at 10 m/s (documented default)
    if ftmax is None:
        ftmax = math.inf
    return Powertrain(drive, share, mode, power, ftmax, tuple(rpm), tuple(nm), tuple(gears),
                      v["final_drive"], v["wheel_radius"], v["efficiency"], shift, rev,
                      v["overrun_torque"])


def _check_torque_curve(rpm, nm, shift: float, rev: float, v: dict, src: str) -> None:
    """Unit slips and gaps of a torque curve: speeds in rad/s or rev/s (InputError), a curve
    that ends below the rev limit (torque is then held flat: warning), a shift point below
    the engine speed of best torque (every gear is left before its best force: warning)."""
    import warnings

    from lapbalance.errors import PhysicsWarning

    top = float(max(rpm))
    field_ = "powertrain.torque_curve_rpm"
    where = _src(v, "torque_curve_rpm", src)
    if top < 0.3 * rev:
        for factor, unit in ((60.0 / (2.0 * math.pi), "rad/s"), (60.0, "rev/s")):
            if 0.6 <= top * factor / rev <= 1.5:
                raise InputError(f"ends at {top:g}, far below rev_limit_rpm {rev:g}: the "
                                 f"speeds look like {unit} ({top:g} {unit} = "
                                 f"{top * factor:.0f} rpm); multiply them by {factor:.5g} to "
                                 "give rpm", where, field_)
        raise InputError(f"ends at {top:g} rpm, far below rev_limit_rpm {rev:g}; give the "
                         "torque up to the rev limit (rpm)", where, field_)
    if top < 0.97 * rev:
        warnings.warn(f"{where}: {field_}: the curve ends at {top:g} rpm, below "
                      f"rev_limit_rpm {rev:g}; the torque is held at {nm[-1]:g} N·m up to the "
                      "limit: extend the curve to the rev limit", PhysicsWarning, stacklevel=2)
    best = float(rpm[max(range(len(nm)), key=lambda i: nm[i])])
    if shift < 0.97 * best:
        warnings.warn(f"{where}: powertrain.shift_rpm: = {shift:g} rpm is below {best:g} rpm, "
                      "where the engine gives its best torque (force); every gear is left "
                      "before its best force: check shift_rpm", PhysicsWarning, stacklevel=2)


def _build_suspension(v: dict, src: str) -> Suspension:
    share = v["roll_stiffness_front_share"]
    kf, kr = v["roll_stiffness_front"], v["roll_stiffness_rear"]
    if share is None:
        if kf is None or kr is None:
            raise InputError('missing key "suspension.roll_stiffness_front_share" (or both '
                             "roll_stiffness_front/rear_nm_per_deg)", src,
                             "suspension.roll_stiffness_front_share")
        if kf + kr <= 0:
            raise InputError("roll stiffnesses must not both be zero", src,
                             "suspension.roll_stiffness_front_nm_per_deg")
        share = kf / (kf + kr)
    elif kf is not None or kr is not None:
        raise InputError("give roll_stiffness_front_share or the two roll stiffnesses, not "
                         "both", src, "suspension.roll_stiffness_front_share")
    for attr in ("static_ride_height_front", "static_ride_height_rear"):
        rh = v[attr]
        if rh is not None and 0 < abs(rh) < 1e-3:  # under 1 mm: a value in metres
            raise InputError(f"= {rh / MM:g} looks like metres, but the key is in mm; write "
                             f"{rh / MM * 1e3:g}", _src(v, attr, src),
                             f"suspension.{attr}_mm")
    hf = v["heave_rate_front"] if v["heave_rate_front"] is not None else math.inf
    hr = v["heave_rate_rear"] if v["heave_rate_rear"] is not None else math.inf
    return Suspension(share, v["roll_centre_front"], v["roll_centre_rear"], hf, hr,
                      v["static_ride_height_front"], v["static_ride_height_rear"])


def _build_air(v: dict, src: str) -> Air:
    if v["density"] is not None:
        others = [k for k in ("altitude", "temperature_c", "pressure", "relative_humidity")
                  if v[k] is not None]
        if others:
            raise InputError("give either density_kg_m3 or the conditions (altitude, "
                             "temperature, pressure, humidity), not both", src,
                             f"air.{others[0]}")
        return Air(v["density"], "given")
    if all(v[k] is None for k in ("altitude", "temperature_c", "pressure")):
        return Air(_air.isa_density(0.0), "ISO 2533 sea level")
    if v["pressure"] is not None:
        if v["temperature_c"] is None:
            raise InputError("pressure_hpa needs temperature_c", src, "air.temperature_c")
        p = v["pressure"]
    else:
        alt = v["altitude"] or 0.0
        p = _air.isa_pressure(alt)
    T = (v["temperature_c"] + 273.15) if v["temperature_c"] is not None else \
        _air.isa_temperature(v["altitude"] or 0.0)
    rh = v["relative_humidity"] if v["relative_humidity"] is not None else 0.0
    if rh > 0:
        rho = _air.humid_air_density_cipm2007(p, T, rh)
        how = f"CIPM-2007 at {p / 100:.1f} hPa, {T - 273.15:.1f} °C, {rh * 100:.0f} % RH"
    else:
        rho = _air.ideal_gas_density(p, T)
        how = f"ideal gas at {p / 100:.1f} hPa, {T - 273.15:.1f} °C, dry"
    return Air(rho, how)
