"""Provenance: what was run, so that every result can be traced to its inputs and rerun.

One record (a plain-JSON dict) says:

``lapbalance_version``, ``python``, ``numpy``, ``numba``
    the software that made the result;
``run_utc``
    when the record was made (ISO 8601, UTC, seconds);
``command``
    the command line when the result came from the ``lapbalance`` CLI (else None);
``inputs``
    every input file with its role, absolute path, size [bytes] and SHA-256: each car file
    and every file it pulls in (``base`` variants, the aero map), the track, and any other
    input (targets, tunnel readings);
``cars``
    per car: name, file, every ``--set`` override (key, value, and the text that reproduces
    it), the raw keys as merged from the files (``keys``, with the file each came from) and
    the fully resolved car in SI (``resolved``: every dataclass field the solver reads, and
    ``solver_parameters``, the flat parameter vector the kernels receive, by name);
``tracks``
    per track: name, file, the processing settings (``step_m`` [m], ``closed``) and the
    corner-detection thresholds [1/m, m, deg];
``solver``
    tolerances, the lift-off threshold and verdict thresholds, the start speed (open runs).

Where it goes: ``summary.json`` (key ``provenance``), the ``--json`` output of every command
(key ``provenance``), the HTML report (a "Provenance" section), and one ``provenance.json``
in every output folder (and ``<file>.provenance.json`` beside a single output file such as
``tunnel --out``). That sidecar also lists every file written with its SHA-256, so a CSV
copied elsewhere can still be matched to its record by hash; the CSV files themselves stay
plain (no comment lines), so spreadsheets and the project's own readers read them unchanged.

:func:`rerun` runs a lap again from nothing but its ``summary.json``: it checks that every
input file still has the recorded hash, applies the recorded overrides and settings, and
returns the new lap with the difference in lap time.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from lapbalance.version import __version__

__all__ = ["SIDECAR", "build", "car_differences", "car_files", "car_record", "file_record",
           "for_lap", "overrides", "setup_rows", "sha256", "sidecar_for",
           "track_record", "with_outputs"]

#: File name of the provenance sidecar in an output folder.
SIDECAR = "provenance.json"

_HASHES: dict[tuple[str, int, int], str] = {}


def sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes (hex); cached per (path, size, mtime)."""
    p = Path(path)
    st = p.stat()
    key = (str(p.resolve()), st.st_size, st.st_mtime_ns)
    if key not in _HASHES:
        h = hashlib.sha256()
        with open(p, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
        _HASHES[key] = h.hexdigest()
    return _HASHES[key]


def file_record(path: str | Path, role: str) -> dict:
    """``{"role", "path" (absolute), "name", "bytes", "sha256"}`` of an existing file."""
    p = Path(path)
    if not p.is_file():
        return {"role": role, "path": str(p), "name": p.name, "bytes": None, "sha256": None}
    return {"role": role, "path": str(p.resolve()), "name": p.name,
            "bytes": p.stat().st_size, "sha256": sha256(p)}


def _is_file_source(src: str) -> bool:
    return bool(src) and not src.startswith("<") and not src.startswith("--") \
        and Path(src).is_file()


def car_files(car) -> list[tuple[str, Path]]:
    """Every file a car was built from: (role, path), the car file first.

    Roles: ``car`` (the file named on the command line), ``car-base`` (a file it names as
    ``base``, directly or through another variant), ``aero-map``.
    """
    out: list[tuple[str, Path]] = []
    seen: set[str] = set()

    def add(role, p):
        rp = str(Path(p).resolve())
        if rp not in seen:
            seen.add(rp)
            out.append((role, Path(p)))

    if _is_file_source(getattr(car, "source", "")):
        add("car", car.source)
    for _key, (_value, src) in (getattr(car, "raw", None) or {}).items():
        if _is_file_source(src):
            add("car-base", src)
    amap = getattr(getattr(car, "aero", None), "aero_map", None)
    if amap is not None and _is_file_source(getattr(amap, "source", "")):
        add("aero-map", amap.source)
    return out


def _toml_value(v) -> str:
    """TOML text of a value such that ``tomllib`` reads back exactly ``v``."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + "}"
    return json.dumps(str(v))


def _abs(src: str) -> str:
    """Absolute path of a file source; other labels unchanged."""
    return str(Path(src).resolve()) if _is_file_source(src) else src


def _dotted(sec: str, key: str) -> str:
    return f"{sec}.{key}" if sec else key


def overrides(car) -> list[dict]:
    """The car's ``--set`` overrides that are in effect, in car-file key order (an override
    of a key's other unit, e.g. ``wheelbase_mm`` after ``wheelbase_m``, replaces it, so the
    order does not change the car).

    Returns
    -------
    list of dict
        ``{"key": "aero.drag_area_m2", "value": 0.85, "text": "aero.drag_area_m2=0.85"}``;
        ``text`` given to ``--set`` (or :func:`lapbalance.load_car`) reproduces the value.
    """
    out = []
    for (sec, key), (value, src) in (getattr(car, "raw", None) or {}).items():
        if src == "--set":
            dotted = _dotted(sec, key)
            out.append({"key": dotted, "value": _jsonable(value),
                        "text": f"{dotted}={_toml_value(value)}"})
    return out


def _jsonable(v):
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, np.ndarray):
        return [_jsonable(x) for x in v.tolist()]
    if isinstance(v, float):
        return v if math.isfinite(v) else (None if math.isnan(v) else
                                            ("inf" if v > 0 else "-inf"))
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_jsonable(x) for x in v]
    if isinstance(v, bool | int | str) or v is None:
        return v
    return str(v)


def _resolved(obj) -> Any:
    """Dataclass fields in SI as plain JSON (the aero map by its file and hash)."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        if type(obj).__name__ == "AeroMap":
            src = getattr(obj, "source", "")
            return {"file": src, "sha256": sha256(src) if _is_file_source(src) else None,
                    "convention": obj.convention,
                    "restraint_height_m": float(obj.restraint_height),
                    "nodes": [int(obj.rh_front_m.size), int(obj.rh_rear_m.size)]}
        out = {}
        for f in dataclasses.fields(obj):
            if f.name in ("raw",):
                continue
            out[f.name] = _resolved(getattr(obj, f.name))
        return out
    return _jsonable(obj)


def solver_parameters(car) -> dict[str, float]:
    """The flat parameter vector the kernels receive, by name (``P_*`` in kernels, SI)."""
    from lapbalance import kernels as _k
    from lapbalance.params import car_parameters

    p = car_parameters(car)[0]
    names = sorted((getattr(_k, n), n[2:].lower()) for n in dir(_k)
                    if n.startswith("P_") and n != "P_NPARAM" and isinstance(getattr(_k, n),
                                                                                  int))
    out = {}
    for i, name in names:
        if name in ("tyf", "tyr"):  # six precomputed tyre constants per axle
            for j in range(6):
                out[f"{name}_{j}"] = _jsonable(float(p[i + j]))
        else:
            out[name] = _jsonable(float(p[i]))
    return out


def car_record(car) -> dict:
    """Provenance of one car: files, overrides, merged keys and the resolved car in SI."""
    keys = {}
    for (sec, key), (value, src) in (getattr(car, "raw", None) or {}).items():
        keys[_dotted(sec, key)] = {"value": _jsonable(value), "from": src}
    rec = {"name": getattr(car, "name", ""), "file": _abs(getattr(car, "source", "")),
           "overrides": overrides(car), "keys": keys}
    try:
        rec["resolved"] = {k: v for k, v in _resolved(car).items()
                           if k not in ("name", "source")}
        rec["solver_parameters"] = solver_parameters(car)
    except (TypeError, AttributeError):  # a car-like object from a test
        rec["resolved"] = None
    return rec


def track_record(track) -> dict:
    """Provenance of one track: file, processing settings and corner-detection thresholds.

    ``step_m`` is the spacing the track was resampled to (the requested step adjusted so the
    length holds a whole number of steps); loading the file again with it gives the same
    points.
    """
    from lapbalance import track as _tr

    return {
        "name": getattr(track, "name", ""), "file": _abs(getattr(track, "source", "")),
        "step_m": float(track.step_m), "closed": bool(track.closed),
        "length_m": float(track.length_m), "points": int(len(track.distance_m)),
        "corners": len(getattr(track, "corners", ()) or ()),
        "corner_detection": {"on_1pm": _tr.CORNER_ON_1PM, "off_1pm": _tr.CORNER_OFF_1PM,
                             "merge_m": _tr.CORNER_MERGE_M,
                             "min_turn_deg": _tr.CORNER_MIN_TURN_DEG},
    }


def solver_record(settings: Mapping | None = None) -> dict:
    """Solver tolerances and the settings of one lap (``LapResult.settings``)."""
    from lapbalance import params as _lap

    out = {"speed_tolerance_mps": _lap.SPEED_TOL, "force_tolerance_n": _lap.FORCE_TOL}
    for k, v in (settings or {}).items():
        out[k] = _jsonable(v)
    if "liftoff_thresholds" not in out:
        from lapbalance.liftoff import DEFAULT_THRESHOLDS

        out["liftoff_thresholds"] = _jsonable(dataclasses.asdict(DEFAULT_THRESHOLDS))
    return out


def _command() -> str | None:
    if sys.argv and "lapbalance" in sys.argv[0]:
        import shlex

        return "lapbalance " + " ".join(shlex.quote(a) for a in sys.argv[1:])
    return None


def now_utc() -> str:
    """Current time, ISO 8601 in UTC to the second (``2026-01-31T12:00:00Z``)."""
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def _versions() -> dict:
    out = {"lapbalance_version": __version__, "python": sys.version.split()[0],
           "numpy": np.__version__}
    nb = sys.modules.get("numba")
    out["numba"] = getattr(nb, "__version__", None)
    return out


def build(cars: Sequence = (), tracks: Sequence = (), *,
          files: Iterable[tuple[str, str | Path]] = (), solver: Mapping | None = None,
          settings: Mapping | None = None) -> dict:
    """Build one provenance record.

    Parameters
    ----------
    cars : sequence of Car
        Every car of the result (base first).
    tracks : sequence of Track
        Every track of the result.
    files : iterable of (role, path)
        Other input files (``targets``, ``tunnel-readings``, ...).
    solver : mapping, optional
        ``LapResult.settings`` of the run (tolerances are added).
    settings : mapping, optional
        Command settings that are not car, track or solver (e.g. tunnel options).

    Returns
    -------
    dict
        Plain JSON (see the module notes).
    """
    inputs: list[dict] = []
    seen: set[str] = set()

    def add(role, path):
        rec = file_record(path, role)
        if rec["path"] not in seen:
            seen.add(rec["path"])
            inputs.append(rec)

    for car in cars:
        for role, p in car_files(car):
            add(role, p)
    for tr in tracks:
        src = getattr(tr, "source", "")
        if _is_file_source(src):
            add("track", src)
    for role, p in files:
        if p:
            add(role, p)
    rec = {**_versions(), "run_utc": now_utc(), "command": _command(), "inputs": inputs,
           "cars": [car_record(c) for c in cars],
           "tracks": [track_record(t) for t in tracks]}
    if solver is not None:
        rec["solver"] = solver_record(solver)
    if settings:
        rec["settings"] = _jsonable(dict(settings))
    return rec


def for_lap(result, files: Iterable[tuple[str, str | Path]] = ()) -> dict:
    """Provenance record of one :class:`~lapbalance.lap.LapResult`."""
    return build([result.car], [result.track], files=files, solver=result.settings)


def with_outputs(record: Mapping, folder: str | Path, names: Iterable[str] | None = None
                 ) -> dict:
    """The record plus ``outputs``: every file in ``folder`` (or ``names``) with its SHA-256."""
    folder = Path(folder)
    if names is None:
        names = sorted(p.name for p in folder.iterdir() if p.is_file() and p.name != SIDECAR
                       and not p.name.startswith("."))
    outs = []
    for n in names:
        p = folder / n
        if p.is_file():
            outs.append({"name": n, "bytes": p.stat().st_size, "sha256": sha256(p)})
    return {**record, "outputs": outs}


def sidecar_for(path: str | Path) -> Path:
    """Sidecar of a single output file: ``corrected.csv`` -> ``corrected.csv.provenance.json``."""
    p = Path(path)
    return p.with_name(p.name + "." + SIDECAR)


# --------------------------------------------------------------------------------------------
# Setup tables
# --------------------------------------------------------------------------------------------

#: Setup table rows: label, unit, function of a Car giving the value in that unit.
SETUP_ROWS: tuple[tuple[str, str, Any], ...] = (
    ("mass", "kg", lambda c: c.chassis.mass),
    ("front weight share", "%", lambda c: 100 * c.chassis.front_weight_fraction),
    ("CG height", "m", lambda c: c.chassis.cg_height),
    ("wheelbase", "m", lambda c: c.chassis.wheelbase),
    ("downforce area -CL·A", "m²", lambda c: c.aero.downforce_area),
    ("front downforce area (CG conv.)", "m²", lambda c: c.aero.front_area_cg),
    ("rear downforce area (CG conv.)", "m²", lambda c: c.aero.rear_area_cg),
    ("drag area CD·A", "m²", lambda c: c.aero.drag_area),
    ("aero map", "", lambda c: Path(c.aero.aero_map.source).name if c.aero.aero_map else "none"),
    ("air density", "kg/m³", lambda c: c.air.density),
    ("front peak friction (lateral)", "-", lambda c: c.tyres.front.mu_lateral),
    ("rear peak friction (lateral)", "-", lambda c: c.tyres.rear.mu_lateral),
    ("front roll-stiffness share", "-", lambda c: c.suspension.roll_stiffness_front_share),
    ("brake bias front", "-", lambda c: c.brakes.bias_front),
    ("drive", "", lambda c: c.powertrain.drive),
    ("power (constant-power mode)", "kW",
     lambda c: c.powertrain.power / 1e3 if c.powertrain.mode == "power" else None),
    ("overrun torque", "N·m", lambda c: c.powertrain.overrun_torque),
)


def setup_rows(cars: Sequence) -> list[list]:
    """The setup table: one row per :data:`SETUP_ROWS` entry, one value per car (SI-ish)."""
    rows = []
    for label, unit, fn in SETUP_ROWS:
        vals = []
        for c in cars:
            try:
                vals.append(fn(c))
            except (AttributeError, TypeError, ZeroDivisionError):
                vals.append(None)
        rows.append([label, unit, *vals])
    return rows


def car_differences(base, other) -> list[tuple[str, Any, Any]]:
    """Car-file keys whose merged value differs between two cars: (key, base, other).

    Keys are the dotted car-file keys as written (with their unit in the name); a key only
    one car sets shows None for the other (the schema default applies there).
    """
    a = {_dotted(s, k): v for (s, k), (v, _src) in (base.raw or {}).items()}
    b = {_dotted(s, k): v for (s, k), (v, _src) in (other.raw or {}).items()}
    out = []
    for key in list(a) + [k for k in b if k not in a]:
        if key in ("name", "description"):
            continue
        va, vb = a.get(key), b.get(key)
        if va != vb:
            out.append((key, va, vb))
    amap_a = getattr(base.aero, "aero_map", None)
    amap_b = getattr(other.aero, "aero_map", None)
    ha = sha256(amap_a.source) if amap_a is not None and _is_file_source(amap_a.source) else None
    hb = sha256(amap_b.source) if amap_b is not None and _is_file_source(amap_b.source) else None
    if ha != hb and not any(k == "aero.map_file" for k, _, _ in out):
        out.append(("aero map contents (SHA-256)", (ha or "none")[:12], (hb or "none")[:12]))
    return out


def format_value(v) -> str:
    """A setup or key value as short text (floats to 6 significant digits)."""
    if v is None:
        return "–"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, list | tuple):
        return "[" + ", ".join(format_value(x) for x in v) + "]"
    return str(v)
