"""Run a lap again from nothing but its ``summary.json`` (``lapbalance rerun``).

Every input file is found by its recorded path (or by name in ``search`` folders) and must
have the recorded SHA-256; the recorded overrides, track and solver settings are applied; the
rebuilt car's solver parameters must equal the recorded ones. Kept apart from
:mod:`lapbalance.provenance`, which the solver's results use, because a rerun needs the solver
itself.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from lapbalance.errors import InputError
from lapbalance.provenance import _jsonable, car_record, sha256


def _locate(rec: Mapping, search: Sequence[Path], where: Path) -> Path:
    """The recorded input file: at its recorded path, else by name in ``search`` folders;
    its SHA-256 must match the record."""
    cands = [Path(rec["path"])] + [Path(d) / rec["name"] for d in search]
    for p in cands:
        if p.is_file():
            h = sha256(p)
            if h == rec["sha256"]:
                return p
            raise InputError(f"{p} has changed since the run (SHA-256 {h[:12]}..., recorded "
                             f"{str(rec['sha256'])[:12]}...); restore the file or give "
                             "--search with a folder holding the original", where,
                             f"inputs: {rec['role']}")
    raise InputError(f"{rec['role']} file {rec['name']} not found at {rec['path']}"
                     + (f" or in {', '.join(map(str, search))}" if search else "")
                     + "; give --search with the folder that holds it", where,
                     f"inputs: {rec['role']}")


def rerun(summary_path: str | Path, search: Sequence[str | Path] = ()) -> tuple[Any, dict]:
    """Run a lap again from nothing but its ``summary.json``.

    Every input file is found at its recorded path (or by name in ``search``) and must have
    the recorded SHA-256; the recorded overrides and track and solver settings are applied;
    the rebuilt car's resolved parameters must equal the recorded ones.

    Parameters
    ----------
    summary_path : str or Path
        A ``summary.json`` written by ``lapbalance lap --out`` (or :func:`export.summary_json`).
    search : sequence of str or Path
        Folders to look in for inputs that moved (matched by file name and hash).

    Returns
    -------
    (LapResult, dict)
        The new lap, and ``{"lap_time_s": new, "recorded_lap_time_s": old,
        "difference_s": new - old, "inputs_checked": [...]}``.

    Raises
    ------
    InputError
        No provenance in the file, an input missing or changed, or a setting this version
        cannot reproduce.
    """
    from lapbalance.car import load_car
    from lapbalance.lap import simulate_lap
    from lapbalance.liftoff import DEFAULT_THRESHOLDS
    from lapbalance.track import load_track

    path = Path(summary_path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("not found; give the summary.json of a lap", path) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as e:
        raise InputError(f"is not a JSON summary ({e})", path) from None
    prov = data.get("provenance") if isinstance(data, dict) else None
    if not isinstance(prov, dict) or not prov.get("cars") or not prov.get("tracks"):
        raise InputError("has no provenance record (written by an older lapbalance?); rerun "
                         "the lap by hand", path, "provenance")
    search = [Path(s) for s in search] + [path.parent]
    found = {}
    for rec in prov["inputs"]:
        found[rec["path"]] = _locate(rec, search, path)
    car_rec, tr_rec, solver = prov["cars"][0], prov["tracks"][0], prov.get("solver", {})

    def local(p):
        return found.get(str(Path(p).resolve()), found.get(p, Path(p)))

    thr = solver.get("liftoff_thresholds")
    if thr is not None and thr != _jsonable(dataclasses.asdict(DEFAULT_THRESHOLDS)):
        raise InputError("was made with other lift-off thresholds than this version's "
                         "defaults; the verdicts would differ", path, "solver")
    car = load_car(local(car_rec["file"]), [o["text"] for o in car_rec["overrides"]])
    track = load_track(local(tr_rec["file"]), step_m=tr_rec["step_m"], closed=tr_rec["closed"])
    if solver.get("line", "centreline") != "centreline":
        from lapbalance.line import on_line

        track = on_line(track, solver["line"], car_width=solver["line_car_width_m"],
                        margin_m=solver["line_margin_m"])
    res = simulate_lap(car, track, start_speed_kph=solver.get("start_speed_kph"),
                       liftoff_ay_threshold=solver.get("liftoff_ay_threshold_mps2", 4.0))
    now = car_record(car)
    if car_rec.get("solver_parameters") not in (None, now["solver_parameters"]):
        bad = [k for k, v in car_rec["solver_parameters"].items()
               if now["solver_parameters"].get(k) != v]
        raise InputError("the rebuilt car differs from the recorded one in "
                         + ", ".join(bad[:5]) + " (another lapbalance version?)", path,
                         "provenance.cars")
    old = float(data["lap_time_s"])
    return res, {"lap_time_s": float(res.lap_time_s), "recorded_lap_time_s": old,
                 "difference_s": float(res.lap_time_s) - old,
                 "recorded_version": prov.get("lapbalance_version"),
                 "inputs_checked": [{"role": r["role"], "path": str(local(r["path"])),
                                     "sha256": r["sha256"]} for r in prov["inputs"]]}
