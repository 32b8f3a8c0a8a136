r"""Wind-tunnel and CFD balance readings corrected for how the drag was reacted.

A balance under a restrained car reads the axle loads of the aero force system *plus* the
couple between the drag (above the ground) and the restraint that holds the car (at height z:
0 for wheel chocks, brakes or a fixed floor; strut or belt height otherwise). On track the
split that belongs to the aerodynamics alone is the one with the drag reacted at CG height
(the CG convention, docs/method.md), so each reading is corrected by

.. math:: F_{f,cg} = F_{f,meas} + D (h_{cg} - z)/L, \qquad F_{r,cg} = F_{r,meas} - D (h_{cg} - z)/L

(moments about a tyre contact point, Gillespie [1] ch. 1). The total is unchanged. SAE J1594
coefficients [2] (pitching moment about the ground-level mid-wheelbase point) are
ground-referenced, i.e. z = 0.

All functions take and return SI units; forces are positive down (downforce) and drag is
positive rearward.

References
----------
.. [1] T.D. Gillespie, Fundamentals of Vehicle Dynamics, SAE, 1992, ch. 1 (dynamic axle loads).
.. [2] SAE J1594 (2010), Vehicle Aerodynamics Terminology.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lapbalance import aero as _aero
from lapbalance.errors import InputError, PhysicsWarning, clip, closest, did_you_mean
from lapbalance.units import KPH

#: Columns a readings table must have.
REQUIRED_COLUMNS = ("front_n", "rear_n", "drag_n")
#: Columns a readings table may have (used in the output).
OPTIONAL_COLUMNS = ("speed_kph", "ride_height_front_mm", "ride_height_rear_mm")


def _check(value, name, source, lo=None, lo_open=False, unit=""):
    """Raise InputError unless ``value`` is a finite number within the bound."""
    if value is None or not math.isfinite(value):
        raise InputError(f"{name} = {value} must be a finite number {unit}".rstrip(), source,
                         name)
    if lo is not None and (value <= lo if lo_open else value < lo):
        rel = ">" if lo_open else ">="
        raise InputError(f"{name} = {value:g} must be {rel} {lo:g} {unit}".rstrip(), source,
                         name)


@dataclass(frozen=True)
class CorrectedReading:
    """One balance reading, as measured and in the CG convention.

    Attributes
    ----------
    measured_front, measured_rear : float
        Axle downforce as the balance read it (positive down). [N]
    drag : float
        Drag, positive rearward. [N]
    front, rear : float
        Axle downforce in the CG convention. [N]
    correction : float
        Load added to the front and removed from the rear, D (h_cg - z)/L. [N]
    cg_height, wheelbase, restraint_height : float
        CG height, wheelbase, height at which the restraint reacted the drag. [m]
    drag_height : float or None
        Height of the drag's line of action, if known. [m]
    """

    measured_front: float
    measured_rear: float
    drag: float
    front: float
    rear: float
    correction: float
    cg_height: float
    wheelbase: float
    restraint_height: float
    drag_height: float | None = None

    @property
    def total(self) -> float:
        """Total downforce (same in both conventions). [N]"""
        return self.front + self.rear

    @property
    def balance_front(self) -> float:
        """Aero balance, front share of the downforce, CG convention. [-]"""
        return float(_aero.balance(self.front, self.rear))

    @property
    def measured_balance_front(self) -> float:
        """Front share as the restrained balance read it. [-]"""
        return float(_aero.balance(self.measured_front, self.measured_rear))

    @property
    def centre_of_pressure(self) -> float | None:
        """Vertical-force centre of pressure behind the front axle (needs drag height). [m]"""
        if self.drag_height is None:
            return None
        return float(_aero.vertical_centre_of_pressure(
            self.front, self.rear, self.drag, self.cg_height, self.drag_height,
            self.wheelbase))

    def as_dict(self) -> dict:
        """JSON-ready summary; keys carry units (``_n`` [N], ``_m`` [m]); NaN -> None."""
        cp = self.centre_of_pressure

        def clean(v):
            return None if v is None or (isinstance(v, float) and not math.isfinite(v)) \
                else float(v)

        return {
            "front_n": clean(self.front),
            "rear_n": clean(self.rear),
            "balance_front": clean(self.balance_front),
            "convention": "cg",
            "measured_front_n": clean(self.measured_front),
            "measured_rear_n": clean(self.measured_rear),
            "measured_balance_front": clean(self.measured_balance_front),
            "measured_convention": ("ground" if self.restraint_height == 0.0
                                    else "restraint"),
            "drag_n": clean(self.drag),
            "total_downforce_n": clean(self.total),
            "correction_n": clean(self.correction),
            "cg_height_m": clean(self.cg_height),
            "wheelbase_m": clean(self.wheelbase),
            "restraint_height_m": clean(self.restraint_height),
            "drag_height_m": clean(self.drag_height),
            "centre_of_pressure_m": clean(cp),
            "centre_of_pressure_fraction": clean(None if cp is None else cp / self.wheelbase),
        }


def correct_reading(front, rear, drag, cg_height, wheelbase, restraint_height=0.0,
                    drag_height=None, source="tunnel") -> CorrectedReading:
    r"""Correct one balance reading to the CG convention.

    .. math:: \Delta F = D (h_{cg} - z)/L, \quad F_f \mathrel{+}= \Delta F,
              \quad F_r \mathrel{-}= \Delta F

    Parameters
    ----------
    front : float
        Front axle downforce as measured (load change, positive down). [N]
    rear : float
        Rear axle downforce as measured. [N]
    drag : float
        Drag, positive rearward. [N]
    cg_height : float
        CG height of the car on track. [m]
    wheelbase : float
        Wheelbase. [m]
    restraint_height : float
        Height at which the restraint reacted the drag (0 = wheels/ground). [m]
    drag_height : float, optional
        Height of the drag's line of action, for the vertical centre of pressure. [m]
    source : str
        Name used in error messages (file or option).

    Returns
    -------
    CorrectedReading
        Measured and corrected split. Forces [N], heights [m].

    Raises
    ------
    InputError
        For non-finite values, wheelbase or CG height <= 0, negative drag or heights.
    """
    for name, v in (("front_n", front), ("rear_n", rear)):
        _check(v, name, source, unit="N")
    _check(drag, "drag_n", source, lo=0.0, unit="N")
    _check(cg_height, "cg_height_m", source, lo=0.0, lo_open=True, unit="m")
    _check(wheelbase, "wheelbase_m", source, lo=0.0, lo_open=True, unit="m")
    _check(restraint_height, "restraint_height_m", source, lo=0.0, unit="m")
    if drag_height is not None:
        _check(drag_height, "drag_height_m", source, lo=0.0, unit="m")
    corr = float(_aero.restraint_shift(drag, cg_height, wheelbase, restraint_height))  # [1]
    return CorrectedReading(float(front), float(rear), float(drag), float(front) + corr,
                            float(rear) - corr, corr, float(cg_height), float(wheelbase),
                            float(restraint_height),
                            None if drag_height is None else float(drag_height))


def balance_band(front, rear, drag, cg_height_min, cg_height_max, wheelbase,
                 restraint_height=0.0, source="tunnel"):
    """Corrected aero balance at the two ends of a CG-height range.

    The correction is linear in the CG height, so the balance over the range lies between the
    two end values.

    Parameters
    ----------
    front, rear, drag : float
        Measured axle downforce and drag. [N]
    cg_height_min, cg_height_max : float
        Lowest and highest plausible CG height. [m]
    wheelbase, restraint_height : float
        Wheelbase and restraint height. [m]

    Returns
    -------
    tuple
        (balance at cg_height_min, balance at cg_height_max), CG convention. [-]
    """
    if not cg_height_min <= cg_height_max:
        raise InputError(f"CG height range {cg_height_min:g} to {cg_height_max:g} m runs "
                         "backwards; give min:max", source, "cg_height_m")
    lo = correct_reading(front, rear, drag, cg_height_min, wheelbase, restraint_height,
                         source=source)
    hi = correct_reading(front, rear, drag, cg_height_max, wheelbase, restraint_height,
                         source=source)
    return lo.balance_front, hi.balance_front


# --------------------------------------------------------------------------------------------
# Coefficient and CFD input -> ground-referenced (J1594) axle downforce
# --------------------------------------------------------------------------------------------


def reading_from_coefficients(lift_coefficient, drag_coefficient, pitch_moment_coefficient,
                              frontal_area, air_density, speed):
    r"""Axle downforce and drag from SAE J1594 coefficients (ground-referenced).

    ``C_LF = C_L/2 + C_PM``, ``C_LR = C_L/2 - C_PM`` [2]; downforce = -q A C_L(F|R).

    Parameters
    ----------
    lift_coefficient : float
        C_L, positive up. [-]
    drag_coefficient : float
        C_D. [-]
    pitch_moment_coefficient : float
        C_PM about the ground-level mid-wheelbase point, nose-up positive, reference length
        = wheelbase. [-]
    frontal_area : float
        Reference (frontal) area. [m²]
    air_density : float
        Air density. [kg/m³]
    speed : float
        Air speed. [m/s]

    Returns
    -------
    tuple
        (front, rear, drag): axle downforce, ground convention (restraint at z = 0), and
        drag. [N]
    """
    clf, clr = _aero.j1594_axle_lift_coefficients(lift_coefficient, pitch_moment_coefficient)
    return reading_from_axle_coefficients(clf, clr, drag_coefficient, frontal_area,
                                          air_density, speed)


def reading_from_axle_coefficients(front_lift_coefficient, rear_lift_coefficient,
                                   drag_coefficient, frontal_area, air_density, speed):
    """Axle downforce and drag from SAE J1594 axle lift coefficients C_LF, C_LR.

    Parameters
    ----------
    front_lift_coefficient, rear_lift_coefficient : float
        C_LF, C_LR, positive up, ground-referenced. [-]
    drag_coefficient : float
        C_D. [-]
    frontal_area : float
        Reference area. [m²]
    air_density : float
        Air density. [kg/m³]
    speed : float
        Air speed. [m/s]

    Returns
    -------
    tuple
        (front, rear, drag), ground convention. [N]
    """
    qa = float(_aero.dynamic_pressure(air_density, speed)) * frontal_area
    return -front_lift_coefficient * qa, -rear_lift_coefficient * qa, drag_coefficient * qa


def reading_from_force_and_moment(lift, drag, pitch_moment, moment_ref_x, moment_ref_z,
                                  wheelbase):
    """Ground-referenced axle downforce from a total force and a pitching moment (CFD form).

    Parameters
    ----------
    lift : float
        Total lift, positive up (negative for downforce). [N]
    drag : float
        Drag, positive rearward. [N]
    pitch_moment : float
        Pitching moment about the reference point, nose-up positive. [N·m]
    moment_ref_x : float
        Reference point rearward of mid-wheelbase. [m]
    moment_ref_z : float
        Reference point height above ground. [m]
    wheelbase : float
        Wheelbase. [m]

    Returns
    -------
    tuple
        (front, rear, drag), ground convention (restraint at z = 0). [N]
    """
    pm_mid = _aero.pitch_moment_about_mid(pitch_moment, lift, drag, moment_ref_x, moment_ref_z)
    front, rear = _aero.ground_split_from_force_and_moment(lift, pm_mid, wheelbase)
    return float(front), float(rear), float(drag)


# --------------------------------------------------------------------------------------------
# Tables of readings
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ReadingsTable:
    """Readings read from a CSV file.

    ``columns`` maps the known column names to float arrays (SI conversion not applied: the
    names carry the unit, ``_n`` [N], ``_kph`` [km/h], ``_mm`` [mm]); ``extra`` holds other
    columns as text, carried through to the output; ``lines`` are the file line numbers.
    """

    columns: dict
    extra: dict
    lines: np.ndarray
    source: str


def read_readings(path: str | Path) -> ReadingsTable:
    """Read and validate a readings CSV (``front_n, rear_n, drag_n`` [N] required).

    Optional columns: ``speed_kph`` [km/h], ``ride_height_front_mm``, ``ride_height_rear_mm``
    [mm]. Other columns are carried through as text, unless their name is close to a known
    one (then it is treated as a typo). Lines starting with ``#`` are comments.

    Raises
    ------
    InputError
        Missing file or column, misspelt column, text/NaN cell, negative drag or speed.
    """
    path = Path(path)
    try:
        head = path.read_bytes()[:2] if path.is_file() else b""
        if head in (b"\xff\xfe", b"\xfe\xff"):  # UTF-16 "Unicode text" export
            from lapbalance.textio import decode_text

            text = decode_text(path.read_bytes(), path, "a CSV of readings",
                               "save the file as UTF-8 CSV")
        else:
            text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("readings file not found; check the path", path) from None
    except (IsADirectoryError, UnicodeDecodeError, OSError):
        raise InputError("cannot be read as UTF-8 CSV text", path) from None
    records = [(n, s) for n, s in enumerate(text.splitlines(), start=1)
               if s.strip() and not s.lstrip().startswith("#")
               and not (n == 1 and s.strip().lower() == "sep=,")]  # a spreadsheet's hint
    if not records:
        raise InputError("has no header line; give columns " + ", ".join(REQUIRED_COLUMNS),
                         path)
    hline, header = records[0]
    if "\x00" in text:
        raise InputError("is a binary file, not a CSV of readings", path)
    names = [c.strip() for c in next(csv.reader(io.StringIO(header)))]
    if len(names) == 1:
        for sep, what in ((";", "semicolons"), ("\t", "tabs")):
            if sep in header:
                raise InputError(f"the header is separated by {what}; save the file with "
                                 "commas (front_n,rear_n,drag_n)", path, f"line {hline}")
    known = REQUIRED_COLUMNS + OPTIONAL_COLUMNS
    for n in names:
        if n not in known and closest(n, known):
            raise InputError(f'unknown column "{n}"; {did_you_mean(n, known)}', path,
                             f"line {hline}")
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise InputError(f'column "{dup}" appears twice; keep one', path, f"line {hline}")
    for c in REQUIRED_COLUMNS:
        if c not in names:
            raise InputError(f'missing column "{c}"; the header needs '
                             + ", ".join(REQUIRED_COLUMNS), path, f"line {hline}")
    rows = records[1:]
    if not rows:
        raise InputError("has a header but no readings", path)
    cols = {n: np.empty(len(rows)) for n in names if n in known}
    extra = {n: [] for n in names if n not in known}
    for r, (lineno, line) in enumerate(rows):
        cells = [c.strip() for c in next(csv.reader(io.StringIO(line)))]
        if len(cells) != len(names):
            hint = ("; write decimals with a point (0.5, not 0,5)"
                    if len(cells) > len(names) else "; fill in the missing values")
            raise InputError(f"has {len(cells)} values but the header has {len(names)} "
                             f"columns{hint}", path, f"line {lineno}")
        for n, cell in zip(names, cells, strict=True):
            if n in extra:
                extra[n].append(cell)
                continue
            try:
                v = float(cell)
            except ValueError:
                raise InputError(f'{n} = "{clip(cell)}" is not a number; give a number with a '
                                 "'.' decimal point", path, f"line {lineno}") from None
            if not math.isfinite(v):
                raise InputError(f"{n} = {cell} is not a finite number", path,
                                 f"line {lineno}")
            if v < 0 and n in ("drag_n", "speed_kph"):
                raise InputError(f"{n} = {cell} is negative; drag is positive rearward and "
                                 "speed >= 0", path, f"line {lineno}")
            cols[n][r] = v
    lines = np.array([n for n, _ in rows])
    zero = (cols["front_n"] == 0) & (cols["rear_n"] == 0) & (cols["drag_n"] == 0)
    if zero.all():
        raise InputError("every reading is zero (front_n, rear_n and drag_n); give the "
                         "readings with the wind on, tare already subtracted", path)
    if zero.any():
        import warnings

        at = ", ".join(str(int(x)) for x in lines[zero][:5]) + (", ..." if zero.sum() > 5
                                                                 else "")
        warnings.warn(f"{path}: line {at}: front_n, rear_n and drag_n are all zero (a tare "
                      "or wind-off row?); the row is left out (subtract the tare from the "
                      "readings, then delete the row)", PhysicsWarning, stacklevel=2)
        keep = ~zero
        cols = {k: v[keep] for k, v in cols.items()}
        extra = {k: [x for x, z in zip(v, zero, strict=True) if not z] for k, v in extra.items()}
        lines = lines[keep]
    if "speed_kph" in cols and (cols["speed_kph"] == 0).any():
        import warnings

        still = cols["speed_kph"] == 0
        at = ", ".join(str(int(x)) for x in lines[still][:5]) + (", ..." if still.sum() > 5
                                                                  else "")
        warnings.warn(f"{path}: line {at}: speed_kph = 0 with loads on the balance (a "
                      "wind-off or tare row?); its areas are left empty: subtract the tare "
                      "from the readings and delete the row", PhysicsWarning, stacklevel=2)
    return ReadingsTable(cols, extra, lines, str(path))


#: Drag area above which readings are no longer a road vehicle's, with speeds <= 100 [m²].
_CDA_SUSPECT_M2 = 5.0


def check_speed_unit(table: ReadingsTable, air_density: float,
                     expected_drag_area: float | None = None) -> None:
    """Refuse ``speed_kph`` values that are in m/s (areas would come out 13 times too big).

    With speeds read as km/h, the median drag area ``D / q`` is compared with the car's drag
    area ``expected_drag_area`` [m²] (a ratio near 3.6² = 12.96 is the slip), or without it
    with :data:`_CDA_SUSPECT_M2` when no speed exceeds 100.
    """
    c = table.columns
    if "speed_kph" not in c:
        return
    v = c["speed_kph"] * KPH
    ok = (v > 0) & (c["drag_n"] > 0)
    if not ok.any():
        return
    cda = float(np.median(c["drag_n"][ok] / _aero.dynamic_pressure(air_density, v[ok])))
    if expected_drag_area is not None and expected_drag_area > 0:
        slip = 0.5 * 3.6**2 <= cda / expected_drag_area <= 2.0 * 3.6**2
    else:
        slip = cda > _CDA_SUSPECT_M2 and float(np.max(c["speed_kph"])) <= 100.0
    if slip:
        ref = (f"the car's is {expected_drag_area:.3g} m²" if expected_drag_area
               else "a road vehicle has about 0.3 to 2 m²")
        raise InputError(f"the speeds look like m/s, not km/h: read as km/h they give a drag "
                         f"area of {cda:.3g} m² ({ref}), as m/s {cda / 3.6**2:.3g} m²; "
                         "multiply the speeds by 3.6", table.source, "speed_kph")


def correct_table(table: ReadingsTable, cg_height, wheelbase, restraint_height=0.0,
                  air_density=None, drag_height=None, expected_drag_area=None) -> dict:
    """Correct every reading of a table to the CG convention.

    Parameters
    ----------
    table : ReadingsTable
        From :func:`read_readings`.
    cg_height, wheelbase, restraint_height : float
        CG height, wheelbase and restraint height. [m]
    air_density : float, optional
        Air density, for the downforce and drag areas when ``speed_kph`` is given. [kg/m³]
    drag_height : float, optional
        Drag line height, for the vertical centre of pressure. [m]
    expected_drag_area : float, optional
        The car's drag area, to catch speeds given in m/s (:func:`check_speed_unit`). [m²]

    Returns
    -------
    dict
        Ordered output columns (name with unit -> list or array): carried-through columns,
        ``front_n_measured``, ``rear_n_measured``, ``drag_n``, ``front_n_cg``,
        ``rear_n_cg``, ``correction_n``, ``balance_front_measured``, ``balance_front_cg``,
        with ``speed_kph``: ``front_downforce_area_cg_m2``, ``rear_downforce_area_cg_m2``,
        ``drag_area_m2``; with a drag height: ``centre_of_pressure_m``.
    """
    c = table.columns
    if air_density is not None:
        check_speed_unit(table, air_density, expected_drag_area)
    out: dict = {}
    for n in OPTIONAL_COLUMNS:
        if n in c:
            out[n] = c[n]
    out.update(table.extra)
    readings = [correct_reading(f, r, d, cg_height, wheelbase, restraint_height, drag_height,
                                source=table.source)
                for f, r, d in zip(c["front_n"], c["rear_n"], c["drag_n"], strict=True)]
    out["front_n_measured"] = c["front_n"]
    out["rear_n_measured"] = c["rear_n"]
    out["drag_n"] = c["drag_n"]
    out["front_n_cg"] = np.array([x.front for x in readings])
    out["rear_n_cg"] = np.array([x.rear for x in readings])
    out["correction_n"] = np.array([x.correction for x in readings])
    out["balance_front_measured"] = np.array([x.measured_balance_front for x in readings])
    out["balance_front_cg"] = np.array([x.balance_front for x in readings])
    if "speed_kph" in c and air_density is not None:
        q = _aero.dynamic_pressure(air_density, c["speed_kph"] * KPH)
        with np.errstate(divide="ignore", invalid="ignore"):
            qs = np.where(q > 0, q, np.nan)
            out["front_downforce_area_cg_m2"] = out["front_n_cg"] / qs
            out["rear_downforce_area_cg_m2"] = out["rear_n_cg"] / qs
            out["drag_area_m2"] = c["drag_n"] / qs
    if drag_height is not None:
        out["centre_of_pressure_m"] = np.array([x.centre_of_pressure for x in readings])
    return out
