"""Serialise lap results to CSV/JSON text and write result folders atomically."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from lapbalance.lap import LIMIT_NAMES, LapResult
from lapbalance.outputs import columns_csv_text, csv_text, staged_dir

#: Per-corner CSV columns (flat; the two worst lift-off steps are prefixed).
CORNER_COLUMNS = (
    "id", "direction", "entry_m", "apex_m", "exit_m", "min_radius_m", "min_speed_kph",
    "min_speed_at_m", "limiting_axle", "balance_index_at_min", "usage_front_at_min",
    "usage_rear_at_min", "aero_balance_front_at_min", "liftoff_rank", "liftoff_verdict",
    "liftoff_reason", "liftoff_margin", "coast_margin", "liftoff_speed_margin_kph",
    "liftoff_rear_reserve", "liftoff_max_shift", "liftoff_max_usage_rear", "coast_max_shift",
    "overrun_share",
)
_STEP_FIELDS = ("distance_m", "speed_kph", "balance_shift", "front_load_shift_n",
                "usage_front_on", "usage_rear_on", "usage_front_off", "usage_rear_off",
                "coast_balance_shift", "coast_usage_rear")
#: Fields of the tightest lift-off step (prefixed ``tightest_``).
_TIGHT_FIELDS = ("distance_m", "speed_kph", "margin", "coast_margin", "rear_reserve",
                 "limit_speed_kph", "safe_speed_kph", "speed_margin_kph", "ay_limit_mps2")


def channels_csv(result: LapResult) -> str:
    """All channels as CSV text, one row per step (``limit`` as names)."""
    cols = {}
    for k, v in result.channels.items():
        if k == "limit":
            cols[k] = [LIMIT_NAMES[int(c)] for c in v]
        elif k in ("gear", "corner_id", "wheel_lift_front", "wheel_lift_rear",
                   "floor_contact", "aero_map_outside", "liftoff_checked"):
            cols[k] = [str(int(x)) for x in v]
        else:
            cols[k] = np.asarray(v, float)
    return columns_csv_text(cols, "{:.6g}")


def _fmt(v):
    if v is None:
        return ""
    if isinstance(v, float):
        return "" if v != v else f"{v:.6g}"
    return str(v)


def corners_csv(result: LapResult) -> str:
    """The corner table as CSV text."""
    header = list(CORNER_COLUMNS)
    header += [f"tightest_{f}" for f in _TIGHT_FIELDS]
    for pre in ("worst_shift", "worst_rear"):
        header += [f"{pre}_{f}" for f in _STEP_FIELDS]
    rows = []
    for c in result.corners:
        row = [_fmt(c.get(k)) for k in CORNER_COLUMNS]
        rec = c.get("liftoff_tightest") or {}
        row += [_fmt(rec.get(f)) for f in _TIGHT_FIELDS]
        for pre in ("liftoff_worst_shift", "liftoff_worst_rear"):
            rec = c.get(pre) or {}
            row += [_fmt(rec.get(f)) for f in _STEP_FIELDS]
        rows.append(row)
    return csv_text(header, rows)


def summary_dict(result: LapResult, provenance: dict | None = None) -> dict:
    """The lap summary with its provenance record (key ``provenance``)."""
    from lapbalance import provenance as _prov

    return {**result.summary, "provenance": provenance or _prov.for_lap(result)}


def summary_json(result: LapResult, provenance: dict | None = None) -> str:
    """The lap summary, with its provenance record, as JSON text."""
    return json.dumps(summary_dict(result, provenance), indent=2, allow_nan=False) + "\n"


def write_provenance(folder: str | Path, record: dict) -> None:
    """Write ``provenance.json`` into a filled output folder: the record plus every file in
    the folder with its SHA-256 (the CSV files themselves stay plain)."""
    from lapbalance import provenance as _prov

    folder = Path(folder)
    (folder / _prov.SIDECAR).write_text(
        json.dumps(_prov.with_outputs(record, folder), indent=2, allow_nan=False) + "\n",
        encoding="utf-8")


def _prov_record(result, files):
    from lapbalance import provenance as _prov

    return _prov.for_lap(result, files)


def write_lap_files(result: LapResult, folder: str | Path,
                    extra: dict[str, bytes] | None = None,
                    files: tuple[tuple[str, str], ...] = ()) -> None:
    """Write channels.csv, corners.csv, summary.json (and ``extra`` files) and, last,
    provenance.json into ``folder`` (a staging folder of
    :func:`lapbalance.outputs.output_folder`). ``files`` are other inputs for the provenance
    record, as (role, path)."""
    tmp = Path(folder)
    (tmp / "channels.csv").write_text(channels_csv(result), encoding="utf-8")
    (tmp / "corners.csv").write_text(corners_csv(result), encoding="utf-8")
    text = summary_json(result, _prov_record(result, files)) if files else \
        summary_json(result)
    (tmp / "summary.json").write_text(text, encoding="utf-8")
    record = json.loads(text)["provenance"]  # the sidecar repeats the summary's record
    for name, data in (extra or {}).items():
        (tmp / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp / name).write_bytes(data)
    write_provenance(tmp, record)


def write_lap_folder(result: LapResult, out_dir: str | Path, force: bool = False,
                     extra: dict[str, bytes] | None = None,
                     files: tuple[tuple[str, str], ...] = ()) -> Path:
    """Write channels.csv, corners.csv, summary.json, provenance.json (and ``extra`` files)
    into ``out_dir``.

    ``files`` are other inputs for the provenance record, as (role, path). The files are
    staged and moved in only when complete; ``out_dir`` must be new, empty or an earlier
    lapbalance result (replaced only with ``force``; see :mod:`lapbalance.outputs`).
    """
    out_dir = Path(out_dir)
    with staged_dir(out_dir, force=force, command="lap") as tmp:
        write_lap_files(result, tmp, extra, files)
    return out_dir
