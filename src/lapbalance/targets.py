"""Handling targets: check a lap against balance and stability targets read from TOML.

A targets file holds ``[[target]]`` tables (name, quantity, condition, optional scope,
aggregate and note) and an optional ``[model]`` table with inputs the handling figures need
(see ``docs/targets.md`` for the full reference). :func:`load_targets` validates the file
strictly; :func:`check` measures each target on a :class:`~lapbalance.lap.LapResult` and
returns one :class:`TargetOutcome` per target.

Quantity kinds
--------------
``channel``  a lap channel (:data:`lapbalance.lap.CHANNELS`), one value per step in scope.
``corner``   a corner-table field, one value per corner in scope.
``curve``    the aero balance binned by speed (:func:`lapbalance.handling.aero_balance_curve`),
             one value per speed bin in scope.
``lap``      one value per lap (summary figures and handling figures); takes no scope.

Aggregation: ``each`` (default) requires every value in scope to meet the condition and reports
the worst one; ``max``, ``min``, ``mean``, ``median`` or ``pNN`` (a percentile, e.g. ``p95``)
reduce the values in scope to one number first, which then must meet the condition.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from lapbalance import handling
from lapbalance.errors import InputError, clip, closest, did_you_mean
from lapbalance.lap import CHANNELS
from lapbalance.liftoff import FLAG_VERDICTS, VERDICTS


@dataclass(frozen=True)
class Quantity:
    """A targetable quantity: name, kind (channel/corner/curve/lap), unit, text-valued, doc."""

    name: str
    kind: str
    unit: str
    text: bool
    doc: str
    choices: tuple[str, ...] = ()


def _q(name, kind, unit, doc, text=False, choices=()):
    return Quantity(name, kind, unit, text, doc, tuple(choices))


CORNER_QUANTITIES = [
    _q("min_speed_kph", "corner", "km/h", "lowest speed in the corner"),
    _q("speed_at_apex_kph", "corner", "km/h", "speed at the geometric apex"),
    _q("min_radius_m", "corner", "m", "tightest radius of the corner"),
    _q("balance_index_at_min", "corner", "-",
       "usage_rear - usage_front at the slowest point (> 0 oversteer-leaning)"),
    _q("usage_front_at_min", "corner", "-", "front grip usage at the slowest point"),
    _q("usage_rear_at_min", "corner", "-", "rear grip usage at the slowest point"),
    _q("aero_balance_front_at_min", "corner", "-",
       "front share of downforce at the slowest point, CG convention"),
    _q("liftoff_margin", "corner", "-",
       "lift-off margin: a_y where a lift keeps the rear / a_y at the limit, smallest over "
       "the corner's checked steps (1 = a lift at the limit keeps the rear; corners checked "
       "for lift-off only)"),
    _q("coast_margin", "corner", "-", "the same when coasting (no engine braking)"),
    _q("liftoff_rear_reserve", "corner", "-",
       "1 - rear usage after a lift at the limit, at the corner's tightest step (< 0 "
       "saturates)"),
    _q("liftoff_speed_margin_kph", "corner", "km/h",
       "limit speed minus the highest safe-lift speed at the corner's tightest step"),
    _q("liftoff_max_shift", "corner", "-",
       "largest balance-index change on lift-off (corners checked for lift-off only)"),
    _q("liftoff_max_usage_rear", "corner", "-",
       "highest rear usage after lift-off (corners checked for lift-off only)"),
    _q("coast_max_shift", "corner", "-",
       "largest balance-index change when coasting without engine braking"),
    _q("overrun_share", "corner", "-",
       "share of the worst lift-off shift due to engine braking"),
    _q("liftoff_verdict", "corner", "", "lift-off verdict", True, VERDICTS),
    _q("limiting_axle", "corner", "", "axle at its limit at the slowest point", True,
       ("front", "rear")),
    _q("limit_leaning", "corner", "",
       "understeer/neutral/oversteer from balance_index_at_min (neutral within "
       "+-leaning_neutral_band)", True, handling.LEANINGS),
    _q("direction", "corner", "", "corner direction", True, ("left", "right")),
]

LAP_QUANTITIES = [
    _q("lap_time_s", "lap", "s", "lap (or run) time"),
    _q("top_speed_kph", "lap", "km/h", "highest speed on the lap"),
    _q("lap_min_speed_kph", "lap", "km/h", "lowest speed on the lap"),
    _q("mean_speed_kph", "lap", "km/h", "length over lap time"),
    _q("car_aero_balance_front_cg", "lap", "-", "car's input aero balance, CG convention"),
    _q("car_aero_balance_front_ground", "lap", "-",
       "car's input aero balance as wheel-restrained scales read it"),
    _q("liftoff_rear_saturates_count", "lap", "-",
       "number of corners where a lift at the limit saturates the rear (rear reserve < 0, "
       "i.e. lift-off margin < 1)"),
    _q("liftoff_flagged_count", "lap", "-",
       "number of corners whose lift-off verdict is lift-critical or lift-marginal"),
    _q("liftoff_critical_count", "lap", "-",
       "number of corners whose lift-off verdict is lift-critical"),
    _q("balance_migration", "lap", "-",
       "aero balance (CG) at high speed minus at low speed (see [model] bands)"),
    _q("balance_migration_ground", "lap", "-", "the same in the ground convention"),
    _q("limit_understeer_index", "lap", "-",
       "u_f - u_r at the cornering limit on the reference radius (> 0 front saturates first)"),
    _q("limit_lateral_accel_g", "lap", "g", "cornering limit on the reference radius"),
    _q("understeer_gradient_deg_per_g", "lap", "deg/g",
       "bicycle-model K = W_f/C_af - W_r/C_ar; needs both cornering stiffnesses in [model]"),
    _q("characteristic_speed_kph", "lap", "km/h",
       "sqrt(57.3 L g / K) for K > 0; needs both cornering stiffnesses in [model]"),
]

CURVE_QUANTITIES = [
    _q("aero_balance_vs_speed", "curve", "-",
       "mean aero balance (CG) per speed bin of width balance_bin_kph"),
    _q("aero_balance_vs_speed_ground", "curve", "-",
       "the same as wheel-restrained scales read it"),
]


def _channel_quantities():
    out = []
    for name, (unit, doc) in CHANNELS.items():
        out.append(_q(name, "channel", unit, doc))
    return out


#: Every targetable quantity by name.
QUANTITIES: dict[str, Quantity] = {}
for _quant in _channel_quantities() + CORNER_QUANTITIES + LAP_QUANTITIES + CURVE_QUANTITIES:
    if _quant.name in QUANTITIES:  # pragma: no cover - guards the tables above
        raise RuntimeError(f"quantity {_quant.name} defined twice")
    QUANTITIES[_quant.name] = _quant

#: Condition kinds and whether they apply to text quantities.
CONDITIONS = {"range": False, "max": False, "min": False, "in": True, "not_in": True}
#: Scope keys.
SCOPE_KEYS = ("speed_kph", "corner_min_speed_kph", "corners", "distance_m")
#: Scope keys each quantity kind accepts.
KIND_SCOPES = {"channel": SCOPE_KEYS, "corner": SCOPE_KEYS, "curve": ("speed_kph",),
               "lap": ()}
_TARGET_KEYS = ("name", "quantity", "condition", "scope", "aggregate", "note")
_AGG_FIXED = ("each", "max", "min", "mean", "median")
_PCT = re.compile(r"^p(\d{1,2}(\.\d+)?)$")


@dataclass(frozen=True)
class Model:
    """Inputs of the handling figures (the ``[model]`` table).

    Attributes
    ----------
    cornering_stiffness_front, cornering_stiffness_rear : float or None
        Axle cornering stiffness. [N/deg]
    reference_radius : float
        Radius of the constant-radius run. [m]
    balance_bin_kph : float
        Bin width of the aero balance curve. [km/h]
    migration_low_speed_kph, migration_high_speed_kph : (float, float) or None
        Fixed speed bands of the balance migration [km/h]; None = percentile bands.
    leaning_neutral_band : float
        Half-width of the balance index called neutral. [-]
    """

    cornering_stiffness_front: float | None = None
    cornering_stiffness_rear: float | None = None
    reference_radius: float = handling.REFERENCE_RADIUS_M
    balance_bin_kph: float = handling.BALANCE_BIN_KPH
    migration_low_speed_kph: tuple[float, float] | None = None
    migration_high_speed_kph: tuple[float, float] | None = None
    leaning_neutral_band: float = handling.NEUTRAL_BAND


_MODEL_KEYS = {
    "cornering_stiffness_front_n_per_deg": "cornering_stiffness_front",
    "cornering_stiffness_rear_n_per_deg": "cornering_stiffness_rear",
    "reference_radius_m": "reference_radius",
    "balance_bin_kph": "balance_bin_kph",
    "migration_low_speed_kph": "migration_low_speed_kph",
    "migration_high_speed_kph": "migration_high_speed_kph",
    "leaning_neutral_band": "leaning_neutral_band",
}


@dataclass(frozen=True)
class Target:
    """One validated target.

    Attributes
    ----------
    index : int
        Position in the file, 1-based (``target[1]`` is the first ``[[target]]``).
    name, quantity, note : str
    condition : tuple
        ``(kind, value)``: ``("range", (lo, hi))``, ``("max", x)``, ``("min", x)``,
        ``("in", (...))`` or ``("not_in", (...))``; numbers in the quantity's unit.
    scope : dict
        Scope keys and values (empty = whole lap).
    aggregate : str
        ``each``, ``max``, ``min``, ``mean``, ``median`` or ``pNN``.
    source : str
        The targets file.
    model : Model
        The file's ``[model]`` table.
    """

    index: int
    name: str
    quantity: str
    condition: tuple
    scope: dict
    aggregate: str
    note: str
    source: str
    model: Model = field(default_factory=Model)

    @property
    def key(self) -> str:
        """``target[i]``, the prefix of this target's keys in messages."""
        return f"target[{self.index}]"

    def limit_text(self) -> str:
        kind, val = self.condition
        unit = QUANTITIES[self.quantity].unit
        u = "" if unit in ("", "-") else f" {unit}"
        if kind == "range":
            return f"{format_value(val[0])} .. {format_value(val[1])}{u}"
        if kind == "max":
            return f"<= {format_value(val)}{u}"
        if kind == "min":
            return f">= {format_value(val)}{u}"
        if kind == "in":
            return "in " + ", ".join(val)
        return "not " + ", ".join(val)

    def scope_text(self) -> str:
        if not self.scope:
            return "whole lap"
        parts = []
        for k, v in self.scope.items():
            if k == "speed_kph":
                parts.append(f"{v[0]:g}-{v[1]:g} km/h")
            elif k == "distance_m":
                parts.append(f"{v[0]:g}-{v[1]:g} m")
            elif k == "corner_min_speed_kph":
                parts.append(f"corners >= {v:g} km/h")
            else:
                parts.append("corners " + ",".join(str(c) for c in v))
        return "; ".join(parts)


def format_value(x) -> str:
    """A number as short text (3 decimals below 1, 3 significant figures above)."""
    if isinstance(x, str):
        return x
    if x is None or not math.isfinite(x):
        return "n/a"
    a = abs(x)
    if a < 5e-4:
        return "0.000"
    if a >= 100:
        return f"{x:.1f}"
    if a >= 10:
        return f"{x:.2f}"
    if a >= 1:
        return f"{x:.3f}"
    return f"{x:.3f}"


def _num(x) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _pair(val, src, fld, what) -> tuple[float, float]:
    if not (isinstance(val, list) and len(val) == 2 and all(_num(x) for x in val)):
        raise InputError(f"{what} must be two numbers [lo, hi], got {clip(repr(val))}", src, fld)
    lo, hi = float(val[0]), float(val[1])
    if lo > hi:
        raise InputError(f"lo {lo:g} > hi {hi:g}; write [{hi:g}, {lo:g}]", src, fld)
    return lo, hi


def load_targets(path: str | Path) -> list[Target]:
    """Read and validate a targets file.

    Parameters
    ----------
    path : str or Path
        TOML file with ``[[target]]`` tables and an optional ``[model]`` table.

    Returns
    -------
    list of Target

    Raises
    ------
    InputError
        One line naming the file, ``target[i].key`` and the fix.
    """
    from lapbalance.textio import decode_text

    src = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError("file not found; give the path of a targets TOML file", src) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a targets TOML file", src) from None
    except OSError as e:
        raise InputError(f"cannot read ({e.strerror}); check the path", src) from None
    text = decode_text(data, src, "a targets TOML file", "save the targets file as UTF-8 "
                       "TOML")
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"not valid TOML ({e})", src) from None
    except (RecursionError, ValueError):  # nesting too deep; integer too long
        raise InputError("is not a plain targets file (lists nested too deeply or a number "
                         "too long); give [[target]] tables with plain numbers", src) from None
    return targets_from_dict(raw, src)


def targets_from_dict(raw: dict, source: str = "targets") -> list[Target]:
    """Validate a parsed targets file (see :func:`load_targets`)."""
    src = source
    for k in raw:
        if k not in ("target", "model", "title", "description"):
            raise InputError(f'unknown top-level key "{k}"; '
                             + did_you_mean(k, ["target", "model", "title", "description"]),
                             src, k)
    model = _model(raw.get("model", {}), src)
    items = raw.get("target")
    if not isinstance(items, list) or not items:
        raise InputError("no targets; add at least one [[target]] table", src, "target")
    out = []
    for i, t in enumerate(items, start=1):
        out.append(_target(t, i, src, model))
    return out


def _model(m, src) -> Model:
    if not isinstance(m, dict):
        raise InputError("must be a table", src, "model")
    kw = {}
    for k, v in m.items():
        fld = f"model.{k}"
        if k not in _MODEL_KEYS:
            raise InputError(f"unknown key; {did_you_mean(k, _MODEL_KEYS)}", src, fld)
        attr = _MODEL_KEYS[k]
        if k.startswith("migration_"):
            kw[attr] = _pair(v, src, fld, "a speed band")
            if kw[attr][0] < 0:
                raise InputError("speeds must be >= 0 km/h", src, fld)
            continue
        if not _num(v) or v <= 0:
            raise InputError(f"= {clip(repr(v))} must be a number > 0", src, fld)
        kw[attr] = float(v)
    if ("cornering_stiffness_front" in kw) != ("cornering_stiffness_rear" in kw):
        missing = ("cornering_stiffness_rear_n_per_deg" if "cornering_stiffness_front" in kw
                   else "cornering_stiffness_front_n_per_deg")
        raise InputError(f"give both axle cornering stiffnesses; add {missing}", src,
                         f"model.{missing}")
    return Model(**kw)


def _target(t, i, src, model) -> Target:
    base = f"target[{i}]"
    if not isinstance(t, dict):
        raise InputError("must be a table ([[target]])", src, base)
    for k in t:
        if k not in _TARGET_KEYS:
            raise InputError(f'unknown key "{k}"; {did_you_mean(k, _TARGET_KEYS)}', src, base)
    for k in ("name", "quantity", "condition"):
        if k not in t:
            raise InputError(f'missing "{k}"', src, f"{base}.{k}")
    name = t["name"]
    if not isinstance(name, str) or not name.strip():
        raise InputError("must be a non-empty string", src, f"{base}.name")
    qn = t["quantity"]
    if not isinstance(qn, str) or qn not in QUANTITIES:
        best = closest(str(qn), QUANTITIES)
        hint = f'did you mean "{best}"? ' if best else ""
        raise InputError(f'unknown quantity "{qn}"; {hint}docs/targets.md lists every '
                         "quantity", src, f"{base}.quantity")
    q = QUANTITIES[qn]
    note = t.get("note", "")
    if not isinstance(note, str):
        raise InputError("must be a string", src, f"{base}.note")
    cond = _condition(t["condition"], q, src, f"{base}.condition")
    scope = _scope(t.get("scope", {}), q, src, f"{base}.scope")
    agg = _aggregate(t.get("aggregate", "each"), q, src, f"{base}.aggregate")
    if qn in ("understeer_gradient_deg_per_g", "characteristic_speed_kph") and \
            model.cornering_stiffness_front is None:
        raise InputError(f"{qn} needs axle cornering stiffnesses (our tyre model has none); "
                         "add cornering_stiffness_front_n_per_deg and "
                         "cornering_stiffness_rear_n_per_deg to [model]", src,
                         f"{base}.quantity")
    return Target(i, name.strip(), qn, cond, scope, agg, note, src, model)


def _condition(c, q: Quantity, src, fld) -> tuple:
    if not isinstance(c, dict) or len(c) != 1:
        raise InputError("must be a table with exactly one of "
                         + ", ".join(CONDITIONS) + ', e.g. { max = 1.0 }', src, fld)
    (kind, val), = c.items()
    if kind not in CONDITIONS:
        raise InputError(f'unknown condition "{kind}"; {did_you_mean(kind, CONDITIONS)}',
                         src, fld)
    if CONDITIONS[kind] != q.text:
        ok = "in, not_in" if q.text else "range, max, min"
        raise InputError(f'"{kind}" does not apply to {q.name} '
                         f"({'text' if q.text else 'a number'}); use {ok}", src, fld)
    f = f"{fld}.{kind}"
    if kind == "range":
        pair = _pair(val, src, f, "range")
        _percent_slip(q, pair, src, f)
        return kind, pair
    if kind in ("max", "min"):
        if not _num(val):
            raise InputError(f"= {clip(repr(val))} must be a number", src, f)
        _percent_slip(q, (float(val),), src, f)
        return kind, float(val)
    if not isinstance(val, list) or not val or not all(isinstance(x, str) for x in val):
        raise InputError("must be a non-empty list of strings", src, f)
    for x in val:
        if x not in q.choices:
            raise InputError(f'"{x}" is not a value of {q.name}; {did_you_mean(x, q.choices)}',
                             src, f)
    return kind, tuple(val)


def is_share(q: Quantity) -> bool:
    """True for quantities that are a share between 0 and 1 (aero balance, grip usage)."""
    return q.unit in ("-", "") and not q.text and (
        "aero_balance" in q.name or q.name.startswith("usage") or "_usage_" in q.name
        or q.name.endswith("_share")) and "migration" not in q.name


def _percent_slip(q: Quantity, values, src, fld) -> None:
    """Refuse limits typed as a percentage for a quantity that is a fraction (0 to 1)."""
    if not is_share(q):
        return
    vals = [float(v) for v in values]
    if any(2.0 < abs(v) <= 100.0 for v in vals) and all(abs(v) <= 100.0 for v in vals):
        fixed = [round(v / 100.0, 6) for v in vals]
        shown = (f"[{', '.join(f'{v:g}' for v in vals)}]" if len(vals) > 1 else f"{vals[0]:g}")
        fix = (f"[{', '.join(f'{v:g}' for v in fixed)}]" if len(vals) > 1 else f"{fixed[0]:g}")
        raise InputError(f"= {shown} looks like a percentage, but {q.name} is a fraction "
                         f"(0 to 1); write {fix}", src, fld)


def _scope(s, q: Quantity, src, fld) -> dict:
    if s in ("whole lap", "lap"):
        return {}
    if not isinstance(s, dict):
        raise InputError('must be "whole lap" or a table, e.g. { speed_kph = [200, 400] }',
                         src, fld)
    out = {}
    allowed = KIND_SCOPES[q.kind]
    for k, v in s.items():
        f = f"{fld}.{k}"
        if k not in SCOPE_KEYS:
            raise InputError(f'unknown scope key "{k}"; {did_you_mean(k, SCOPE_KEYS)}', src,
                             fld)
        if k not in allowed:
            what = ("no scope (one value per lap)" if not allowed else
                    "only " + ", ".join(allowed))
            raise InputError(f'{q.name} takes {what}; remove "{k}"', src, f)
        if k in ("speed_kph", "distance_m"):
            out[k] = _pair(v, src, f, k)
        elif k == "corner_min_speed_kph":
            if not _num(v) or v < 0:
                raise InputError(f"= {clip(repr(v))} must be a speed >= 0 km/h", src, f)
            out[k] = float(v)
        else:
            if not isinstance(v, list) or not v or not all(
                    isinstance(x, int) and not isinstance(x, bool) for x in v):
                raise InputError(f"= {clip(repr(v))} must be a non-empty list of corner numbers, "
                                 "e.g. [3, 7]", src, f)
            out[k] = tuple(v)
    return out


def _aggregate(a, q: Quantity, src, fld) -> str:
    if not isinstance(a, str):
        raise InputError(f"= {a!r} must be a string", src, fld)
    if q.kind == "lap":
        if a != "each":
            raise InputError(f"{q.name} is one value per lap; remove aggregate", src, fld)
        return a
    if q.text and a != "each":
        raise InputError(f'text quantity {q.name} takes only aggregate "each"', src, fld)
    if a in _AGG_FIXED:
        return a
    m = _PCT.match(a)
    if m and 0 < float(m.group(1)) < 100:
        return a
    raise InputError(f'unknown aggregate "{a}"; {did_you_mean(a, _AGG_FIXED)} or pNN '
                     "(percentile, e.g. p95)", src, fld)


# ---------------------------------------------------------------------------- checking


@dataclass(frozen=True)
class TargetOutcome:
    """Result of one target on one lap (plain JSON via :meth:`to_dict`).

    Attributes
    ----------
    name, quantity, unit, scope, aggregate, limit, note : str
    measured : float, str or None
        The aggregated value, or the worst value in scope for ``each`` (in ``unit``); None
        when no value exists (status ``no-data``).
    passed : bool
    status : str
        ``pass``, ``fail`` or ``no-data`` (nothing to measure, e.g. no corner in scope was
        checked for lift-off; counts as not passed).
    worst : dict or None
        Where the worst value sits: ``distance_m`` [m], ``speed_kph`` [km/h], ``corner``
        (id or None); for speed-binned curves ``speed_kph`` is the bin centre.
    count : int
        Values in scope (steps, corners or bins).
    failing : int
        Values that miss the condition (for ``each``), or 0/1.
    detail : str
        One line: how many missed, or why there is no data.
    """

    name: str
    quantity: str
    unit: str
    scope: str
    aggregate: str
    limit: str
    measured: float | str | None
    passed: bool
    status: str
    worst: dict | None
    count: int
    failing: int
    detail: str
    note: str

    def to_dict(self) -> dict:
        d = asdict(self)
        if isinstance(d["measured"], float) and not math.isfinite(d["measured"]):
            d["measured"] = None
        return d


def check(result, targets: list[Target]) -> list[TargetOutcome]:
    """Measure every target on a lap.

    Parameters
    ----------
    result : LapResult
        A lap from :func:`lapbalance.lap.simulate_lap`.
    targets : list of Target
        From :func:`load_targets`.

    Returns
    -------
    list of TargetOutcome

    Raises
    ------
    InputError
        A scope names corners the track lacks, or holds no step (or corner, or speed bin).
    """
    cache: dict = {}
    return [_check_one(result, t, cache) for t in targets]


def _cond_margin(cond, vals: np.ndarray) -> np.ndarray:
    """Signed margin of numeric values to the condition (>= 0 meets it)."""
    kind, c = cond
    if kind == "max":
        return c - vals
    if kind == "min":
        return vals - c
    lo, hi = c
    return np.minimum(vals - lo, hi - vals)


def _text_ok(cond, vals) -> np.ndarray:
    kind, c = cond
    return np.array([(v in c) if kind == "in" else (v not in c) for v in vals], bool)


def _reduce(agg: str, vals: np.ndarray) -> float:
    if agg == "max":
        return float(np.max(vals))
    if agg == "min":
        return float(np.min(vals))
    if agg == "mean":
        return float(np.mean(vals))
    if agg == "median":
        return float(np.median(vals))
    return float(np.percentile(vals, float(agg[1:])))


def _corner_ids(result) -> list[int]:
    return list(_channel_ids(result).values())


def _check_corner_ids(result, t: Target) -> None:
    ids = t.scope.get("corners")
    if not ids:
        return
    have = _corner_ids(result)
    missing = [c for c in ids if c not in have]
    if missing:
        valid = (f"corners on this track: {min(have)}..{max(have)}" if have
                 else "this track has no corners")
        raise InputError(f"corner {', '.join(map(str, missing))} not on "
                         f"{getattr(result.track, 'name', 'the track')}; {valid}",
                         t.source, f"{t.key}.scope.corners")


def _empty(t: Target, what: str, result) -> InputError:
    return InputError(f"scope ({t.scope_text()}) holds no {what} on this lap "
                      f"({getattr(result.track, 'name', 'track')}); widen or remove it",
                      t.source, f"{t.key}.scope")


def _channel_ids(result) -> dict[int, int]:
    """Map the ``corner_id`` channel's values (1-based position) to the track's corner ids."""
    return {j + 1: int(cr.id) for j, cr in enumerate(getattr(result.track, "corners", ())
                                                      or ())}


def _step_where(result, i: int) -> dict:
    ch = result.channels
    cid = _channel_ids(result).get(int(ch["corner_id"][i]))
    return {"distance_m": float(ch["distance_m"][i]), "speed_kph": float(ch["speed_kph"][i]),
            "corner": cid}


def _corner_rows(result, t: Target, cache) -> list[dict]:
    key = ("leaning", t.model.leaning_neutral_band)
    if key not in cache:
        cache[key] = {c["id"]: c["limit_leaning"] for c in
                      handling.corner_leaning(result, t.model.leaning_neutral_band)}
    rows = []
    s = t.scope
    for c in result.corners:
        if "corners" in s and c["id"] not in s["corners"]:
            continue
        v = c["min_speed_kph"]
        if "corner_min_speed_kph" in s and v < s["corner_min_speed_kph"]:
            continue
        if "speed_kph" in s and not (s["speed_kph"][0] <= v <= s["speed_kph"][1]):
            continue
        if "distance_m" in s and not (s["distance_m"][0] <= c["min_speed_at_m"]
                                      <= s["distance_m"][1]):
            continue
        rows.append({**c, "limit_leaning": cache[key][c["id"]]})
    return rows


def _corner_where(row: dict, quantity: str) -> dict:
    """Where a corner's value was found: its lift-off step for lift-off fields, else the
    slowest point."""
    step = None
    if quantity == "liftoff_max_usage_rear":
        step = row.get("liftoff_worst_rear")
    elif quantity in ("liftoff_margin", "liftoff_rear_reserve", "liftoff_speed_margin_kph"):
        step = row.get("liftoff_tightest")
    elif quantity in ("liftoff_max_shift", "coast_max_shift", "overrun_share"):
        step = row.get("liftoff_worst_shift")
    if step:
        return {"distance_m": step["distance_m"], "speed_kph": step["speed_kph"],
                "corner": row["id"]}
    return {"distance_m": row["min_speed_at_m"], "speed_kph": row["min_speed_kph"],
            "corner": row["id"]}


def _step_mask(result, t: Target) -> np.ndarray:
    ch = result.channels
    s = t.scope
    mask = np.ones(len(ch["distance_m"]), bool)
    if "speed_kph" in s:
        lo, hi = s["speed_kph"]
        mask &= (ch["speed_kph"] >= lo) & (ch["speed_kph"] <= hi)
    if "distance_m" in s:
        lo, hi = s["distance_m"]
        mask &= (ch["distance_m"] >= lo) & (ch["distance_m"] <= hi)
    cid = ch["corner_id"].astype(int)
    pos = {i: j for j, i in _channel_ids(result).items()}
    if "corners" in s:
        mask &= np.isin(cid, [pos[c] for c in s["corners"] if c in pos])
    if "corner_min_speed_kph" in s:
        fast = [pos[c["id"]] for c in result.corners
                if c["min_speed_kph"] >= s["corner_min_speed_kph"] and c["id"] in pos]
        mask &= np.isin(cid, fast)
    return mask


def _lap_value(result, name: str, model: Model, cache) -> float | None:
    s = cache.get("summary")
    if s is None:
        s = cache["summary"] = result.summary()
    direct = {"lap_time_s": "lap_time_s", "top_speed_kph": "top_speed_kph",
              "lap_min_speed_kph": "min_speed_kph", "mean_speed_kph": "mean_speed_kph",
              "car_aero_balance_front_cg": "aero_balance_front_cg",
              "car_aero_balance_front_ground": "aero_balance_front_ground"}
    if name in direct:
        return s[direct[name]]
    if name == "liftoff_rear_saturates_count":
        return float(sum((c.get("liftoff_rear_reserve") is not None
                          and c["liftoff_rear_reserve"] < 0.0) for c in result.corners))
    if name == "liftoff_flagged_count":
        return float(sum(c.get("liftoff_verdict") in FLAG_VERDICTS for c in result.corners))
    if name == "liftoff_critical_count":
        return float(sum(c.get("liftoff_verdict") == "lift-critical" for c in result.corners))
    key = ("figures", model)
    f = cache.get(key)
    if f is None:
        f = cache[key] = handling.figures(
            result, cornering_stiffness_front=model.cornering_stiffness_front,
            cornering_stiffness_rear=model.cornering_stiffness_rear,
            radius=model.reference_radius, low_band_kph=model.migration_low_speed_kph,
            high_band_kph=model.migration_high_speed_kph)
    return f[name]


def _outcome(t: Target, measured, passed, status, worst, count, failing, detail):
    q = QUANTITIES[t.quantity]
    return TargetOutcome(t.name, t.quantity, q.unit, t.scope_text(), t.aggregate,
                         t.limit_text(), measured, bool(passed), status, worst, int(count),
                         int(failing), detail, t.note)


def _check_one(result, t: Target, cache) -> TargetOutcome:
    q = QUANTITIES[t.quantity]
    _check_corner_ids(result, t)
    if q.kind == "lap":
        v = _lap_value(result, t.quantity, t.model, cache)
        if v is None:
            why = ("K <= 0: no characteristic speed" if t.quantity == "characteristic_speed_kph"
                   else "figure undefined for this car (e.g. no downforce)")
            return _outcome(t, None, False, "no-data", None, 0, 0, why)
        ok = bool(_cond_margin(t.condition, np.array([v]))[0] >= 0)
        return _outcome(t, float(v), ok, "pass" if ok else "fail", None, 1, int(not ok), "")

    if q.kind == "corner":
        rows = _corner_rows(result, t, cache)
        if not rows:
            raise _empty(t, "corner", result)
        vals = [r.get(t.quantity) for r in rows]
        have = [j for j, v in enumerate(vals) if v is not None]
        if not have:
            return _outcome(t, None, False, "no-data", None, 0, 0,
                            f"no corner in scope has a value of {t.quantity} "
                            "(not checked for lift-off)")
        rows = [rows[j] for j in have]
        vals = [vals[j] for j in have]
        wheres = [_corner_where(r, t.quantity) for r in rows]
        unit_word = "corners"
    elif q.kind == "curve":
        key = ("curve", t.model.balance_bin_kph)
        curve = cache.get(key)
        if curve is None:
            curve = cache[key] = handling.aero_balance_curve(result, t.model.balance_bin_kph)
        arr = curve.balance_cg if t.quantity == "aero_balance_vs_speed" else \
            curve.balance_ground
        sel = np.ones(len(arr), bool)
        if "speed_kph" in t.scope:
            lo, hi = t.scope["speed_kph"]
            sel = (curve.speed_kph >= lo) & (curve.speed_kph <= hi)
        if not sel.any():
            raise _empty(t, "speed bin", result)
        vals = list(arr[sel])
        wheres = [{"distance_m": None, "speed_kph": float(s), "corner": None}
                  for s in curve.speed_kph[sel]]
        unit_word = "speed bins"
    else:
        mask = _step_mask(result, t)
        if not mask.any():
            raise _empty(t, "step", result)
        data = np.asarray(result.channels[t.quantity], float)
        idx = np.flatnonzero(mask & np.isfinite(data))
        if idx.size == 0:
            return _outcome(t, None, False, "no-data", None, 0, 0,
                            f"{t.quantity} is undefined on every step in scope")
        vals = list(data[idx])
        wheres = idx  # resolved lazily below
        unit_word = "steps"

    n = len(vals)
    if q.text:
        ok = _text_ok(t.condition, vals)
        bad = np.flatnonzero(~ok)
        j = int(bad[0]) if bad.size else 0
        failing = int(bad.size)
        measured = vals[j] if bad.size else ", ".join(sorted(set(vals)))
        passed = failing == 0
        detail = (f"{failing} of {n} {unit_word} miss: "
                  + ", ".join(f"{_where_label(_where(result, wheres, k))} {vals[k]}"
                              for k in bad[:6]) + (" ..." if bad.size > 6 else "")
                  if failing else f"all {n} {unit_word} meet it")
        return _outcome(t, measured, passed, "pass" if passed else "fail",
                        _where(result, wheres, j) if failing else None, n, failing, detail)

    arr = np.asarray(vals, float)
    margin = _cond_margin(t.condition, arr)
    j = int(np.argmin(margin))
    if t.aggregate == "each":
        failing = int(np.sum(margin < 0))
        measured = float(arr[j])
        passed = failing == 0
        detail = (f"{failing} of {n} {unit_word} miss" if failing
                  else f"all {n} {unit_word} meet it")
    else:
        measured = _reduce(t.aggregate, arr)
        passed = bool(_cond_margin(t.condition, np.array([measured]))[0] >= 0)
        failing = int(not passed)
        if t.aggregate in ("max", "min"):
            j = int(np.argmax(arr) if t.aggregate == "max" else np.argmin(arr))
        detail = f"{t.aggregate} over {n} {unit_word}"
    return _outcome(t, measured, passed, "pass" if passed else "fail",
                    _where(result, wheres, j), n, failing, detail)


def _where(result, wheres, j: int) -> dict:
    if isinstance(wheres, np.ndarray):
        return _step_where(result, int(wheres[j]))
    return wheres[j]


def _where_label(w: dict | None) -> str:
    """Short text for where a value sits: ``C3 @ 1234 m, 150 km/h``."""
    if not w:
        return ""
    parts = []
    if w.get("corner") is not None:
        parts.append(f"C{w['corner']}")
    if w.get("distance_m") is not None:
        parts.append(f"{w['distance_m']:.0f} m")
    if w.get("speed_kph") is not None:
        parts.append(f"{w['speed_kph']:.0f} km/h")
    return ", ".join(parts)


def where_text(outcome: TargetOutcome) -> str:
    """Where a target's worst value sits, as short text (empty for one-per-lap values)."""
    return _where_label(outcome.worst)


def all_passed(outcomes: list[TargetOutcome]) -> bool:
    """True when every target passed."""
    return all(o.passed for o in outcomes)
