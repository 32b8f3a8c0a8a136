"""Correlation with a logged lap: read, split, align, compare, fit a few factors.

The first thing an engineer does with a lap model is hold it against a logged lap. This module
reads a logged run (CSV), cuts it into laps, places every logged sample on the track's
distance axis, compares the log with the model lap, and fits a small set of scale factors
(grip, drag area, power) so that the model's corner minimum speeds and straight top speeds
match the log. The fitted factors are written as a car variant (``base`` + overrides) that
every other command reads.

Log format (CSV)
----------------
UTF-8 (a byte-order mark is accepted), comma separated, quoted cells accepted, optional ``#``
comment lines before one header row. Header names carry their unit; columns of other names
are ignored (a logger exports many). Required: ``time_s`` and one of ``speed_kph`` /
``speed_mps``. Optional: ``distance_m`` (logger distance, cumulative; it may drift),
``lap_distance_m`` (distance since the start line, resets each lap), ``x_m,y_m`` (local
plane of the track file) or ``lat_deg,lon_deg`` (WGS-84; needs a track given in lat/lon),
``ay_mps2``, ``ax_mps2``, ``throttle_pct``, ``brake_pct``. Empty optional cells are read as
missing.

Splitting into laps
-------------------
With positions, every sample is projected onto the track line (:func:`project`); the lap
number grows by one each time the projected distance passes the start line. With
``lap_distance_m`` (and no positions) a lap ends where that column falls back by more than
half a lap. Without either, the log is one lap. A lap is *complete* when it covers the line
to the line within ``LAP_END_TOL`` of the track length; partial laps (out-laps, in-laps) are
left out.

Alignment (the distance axis)
-----------------------------
* ``positions``: the projection of the logged positions onto the track line gives the track
  distance of each sample. The logger distance (or the integral of speed over time) is
  mapped onto it by a straight line ``s = k d + c`` (linear least squares; ``k`` is reported
  as the logger's distance scale), and the projections' departure from that line is passed
  through a Gaussian low-pass of ``POSITION_SMOOTH_M`` along the lap and added back: a drift
  of the logger that is not linear is kept, the along-track GPS noise is not.
* ``speed``: for logger distance that drifts and no positions. The scale ``k`` and offset
  ``c`` of ``s = k d + c`` are those that best match the logged speed trace to the model's
  speed over distance: a coarse start from the circular cross-correlation of the two traces
  (FFT), then ``scipy.optimize.least_squares`` on ``v_log(d_i) - v_model(k d_i + c)`` with a
  soft-L1 loss (``f_scale`` = 1 m/s), so that the places where model and car differ most
  weigh less. A third parameter, the ratio of logged to model speed, absorbs a car that is
  uniformly slower or faster than the model: without it, that difference would be read as a
  shift along the braking zones (a speed error divided by the speed gradient) and bias the
  offset by metres. When factors are fitted and the fitted model's speed trace matches the
  log to within ``REALIGN_RMS_FACTOR`` times the log's speed noise (estimated from its second
  differences), the alignment is repeated against the fitted model and the fit once more;
  otherwise (a fitted model that still differs in shape, e.g. grip fitted on a car whose drag
  is wrong) the alignment against the model as given is kept. ``Alignment.reference`` says
  which.

Comparison
----------
The logged speed and time are interpolated onto the track's steps. The time delta is
``(t_log - t_model)`` elapsed since the start of the logged lap (positive: the car was slower
than the model, the model is optimistic). The lap is cut into corners and the straights
between them (:func:`lapbalance.compare.lap_segments`). For each corner the comparison window
is the set of steps around the model's slowest point where the model runs within
``APEX_BAND`` of that minimum (at least ``WINDOW_MIN_HALF_M`` each side); for each straight,
the steps around the model's top speed within ``TOP_BAND`` of it. The logged minimum (top)
speed is the model's minimum (top) speed plus the mean of ``v_log - v_model`` over that
window, with the model seen through the log's sampling (:func:`_as_logged`). A plain
minimum of noisy samples is biased low by about twice the noise (the lowest of many noisy
samples), a plain maximum high; the window mean is not. The lowest (highest)
smoothed logged sample is reported beside it. Peak lateral acceleration is compared the same
way (window around the model's peak ``|a_y|``); without an ``ay_mps2`` column the log's
``v² κ`` is used.

Fit
---
Factors (any subset): ``grip`` (every peak-friction key of both axles), ``grip-front``,
``grip-rear``, ``drag`` (drag area), ``power`` (power or the whole torque curve). Residuals:
per corner ``w_c (v_min,model - v_min,log)`` and per straight ``w_s (v_top,model -
v_top,log)`` in km/h, with the windows above held fixed while the factors move; ``w_c`` and
``w_s`` default to 1 (every corner and every straight counts the same: a documented choice,
not a statistical weight). The model enters as the logger would have recorded it (sampled at
the logged samples' distances, interpolated like the log), so that the interpolation between
samples, which cuts speed peaks at the end of a straight by up to 1 km/h at 10 Hz, biases
neither side. ``scipy.optimize.least_squares`` (trust-region reflective,
bounds ``FACTOR_BOUNDS``, forward differences with relative step ``FIT_DIFF_STEP``) finds the
factors; their covariance is ``s² (JᵀJ)⁻¹`` with ``s² = Σr² / (m - p)`` (m residuals,
p factors) and J the Jacobian at the solution (Gauss-Newton approximation; Nocedal & Wright,
Numerical Optimization, 2nd ed., §10.3; Seber & Wild, Nonlinear Regression, §2.1). The
95 % interval uses Student's t with m - p degrees of freedom. The fit changes only the keys it
names; every other property of the car is taken as right, so a wrong mass or a wrong tyre
load sensitivity shows up as a biased factor, not as an error.

Bad logs raise :class:`~lapbalance.errors.InputError` with one line naming the file, the
column or line, and the fix.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from lapbalance.car import Car
from lapbalance.errors import InputError, did_you_mean
from lapbalance.filters import gaussian_filter1d

# --------------------------------------------------------------------------------------------
# Thresholds (engineering judgement unless a source is named)
# --------------------------------------------------------------------------------------------

#: Longest accepted gap between two logged samples. A logger at 1 Hz or faster never has it;
#: at 50 m/s it is 100 m of track, longer than most corners, so minima would be missed.
#: Engineering judgement. [s]
MAX_GAP_S = 2.0
#: A complete lap's length (logger distance, or speed integrated over time, or the projected
#: positions) may differ from the track length by at most this share; more means a log of
#: another track or a different layout. Common practice: logger distance drifts by 1-3 %. [-]
TRACK_LENGTH_TOL = 0.05
#: A lap counts as complete when it reaches within this share of the track length of the
#: start line at both ends. [-]
LAP_END_TOL = 0.01
#: Distance from speed x time over the reference distance within this share of 1/3.6 (or 3.6)
#: means the speed column's unit is wrong. [-]
UNIT_TOL = 0.2
#: Median distance of the logged positions from the track line above which the log is not of
#: this track (or not in the same coordinates). GPS positions of a car on track lie within
#: the track half-width plus a few metres. Engineering judgement. [m]
MAX_CROSS_TRACK_M = 25.0
#: Low-pass (Gaussian standard deviation, along the lap) of the projected positions' departure
#: from the straight-line map of the logger distance: keeps a logger drift that is not linear,
#: removes the GPS noise along the track. Engineering judgement. [m]
POSITION_SMOOTH_M = 50.0
#: Corner window: steps where the model runs within this share of its corner minimum. [-]
APEX_BAND = 0.03
#: Straight window: steps where the model runs within this share of its top speed. [-]
TOP_BAND = 0.015
#: Smallest half-width of a comparison window. [m]
WINDOW_MIN_HALF_M = 20.0
#: Gaussian smoothing (standard deviation) of the logged traces on the track steps, for the
#: reported lowest/highest logged samples and the figure only. [m]
SMOOTH_SIGMA_M = 3.0
#: A segment whose model and logged speed differ by less than this is "close". [km/h]
CLOSE_KPH = 1.0
#: Realign against the fitted model only when its speed RMS against the log is within this
#: factor of the log's own speed noise. Engineering judgement. [-]
REALIGN_RMS_FACTOR = 1.5
#: Bounds of every fitted factor. [-]
FACTOR_BOUNDS = (0.5, 2.0)
#: Relative finite-difference step of the fit's Jacobian. The lap solver's speed tolerance is
#: 1e-3 m/s; a 2e-3 change of grip moves corner speeds by about 0.03 m/s, well above it. [-]
FIT_DIFF_STEP = 2e-3

#: Factors that can be fitted: name -> what it scales.
FACTORS: dict[str, str] = {
    "grip": "peak friction of both axles (every peak-friction key)",
    "grip-front": "peak friction of the front tyres",
    "grip-rear": "peak friction of the rear tyres",
    "drag": "drag area (aero.drag_area_m2 or aero.drag_coefficient)",
    "power": "engine power (powertrain.power_kw or the whole torque_curve_nm)",
}

_TIME = "time_s"
_SPEEDS = {"speed_kph": 1.0 / 3.6, "speed_mps": 1.0}
_OPTIONAL = ("distance_m", "lap_distance_m", "x_m", "y_m", "lat_deg", "lon_deg", "ay_mps2",
             "ax_mps2", "throttle_pct", "brake_pct")
KNOWN_COLUMNS = (_TIME, *_SPEEDS, *_OPTIONAL)


# --------------------------------------------------------------------------------------------
# Data classes
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LoggedLap:
    """One lap of a log.

    Attributes
    ----------
    number : int
        Lap number in the log (1 = first lap that starts at the line, or the only lap). [-]
    lap_time_s : float
        Line-to-line time (interpolated at the line crossings where they are known). [s]
    time_s : numpy.ndarray
        (M,) time since the start of the lap. [s]
    speed_mps : numpy.ndarray
        (M,) logged speed. [m/s]
    logger_distance_m : numpy.ndarray
        (M,) distance since the start of the lap as the logger measured it (or speed
        integrated over time). [m]
    track_distance_m : numpy.ndarray or None
        (M,) projected track distance since the start line (may run slightly below 0 or above
        the track length at the ends); None without positions. [m]
    cross_track_m : numpy.ndarray or None
        (M,) distance of each position from the track line, left positive. [m]
    channels : dict of str -> numpy.ndarray
        Other logged channels of the lap (``ay_mps2``, ``ax_mps2``, ``throttle_pct``,
        ``brake_pct``), units in the names. [-]
    """

    number: int
    lap_time_s: float
    time_s: np.ndarray
    speed_mps: np.ndarray
    logger_distance_m: np.ndarray
    track_distance_m: np.ndarray | None
    cross_track_m: np.ndarray | None
    channels: dict[str, np.ndarray] = field(default_factory=dict)


@dataclass(frozen=True)
class Log:
    """A logged run cut into laps.

    Attributes
    ----------
    source : str
        File name. [-]
    laps : list of LoggedLap
        Complete laps in order. [-]
    partial : int
        Partial laps left out (out-lap, in-lap). [-]
    rate_hz : float
        Median sample rate. [Hz]
    split_by : str
        ``"positions"``, ``"lap_distance"`` or ``"none"`` (one lap). [-]
    distance_from : str
        ``"logger"`` (distance_m or lap_distance_m) or ``"speed"`` (speed integrated). [-]
    columns : tuple of str
        Recognised columns found in the file. [-]
    ignored : tuple of str
        Other columns (not read). [-]
    """

    source: str
    laps: list[LoggedLap]
    partial: int
    rate_hz: float
    split_by: str
    distance_from: str
    columns: tuple[str, ...]
    ignored: tuple[str, ...] = ()

    @property
    def has_positions(self) -> bool:
        """True when the laps carry projected track distances. [-]"""
        return bool(self.laps) and self.laps[0].track_distance_m is not None

    def fastest(self) -> int:
        """Index (0-based) of the fastest complete lap. [-]"""
        return int(np.argmin([lap.lap_time_s for lap in self.laps]))


@dataclass(frozen=True)
class Alignment:
    """How a logged lap was placed on the track: ``s = scale * d + offset_m``.

    Attributes
    ----------
    method : str
        ``"positions"`` or ``"speed"``. [-]
    scale : float
        Track metres per logger metre (1.015 means the logger reads 1.5 % short). [-]
    offset_m : float
        Track distance at logger distance 0 (the start of the logged lap). [m]
    speed_rms_kph : float
        RMS of logged minus model speed over the lap after alignment. [km/h]
    cross_track_rms_m : float
        RMS distance of the positions from the track line (NaN without positions). [m]
    reference : str
        The lap the speed traces were matched to: ``"model"`` or ``"fitted model"``. [-]
    """

    method: str
    scale: float
    offset_m: float
    speed_rms_kph: float
    cross_track_rms_m: float = math.nan
    reference: str = "model"

    def to_dict(self) -> dict:
        return {k: _json_float(v) for k, v in dataclasses.asdict(self).items()}


@dataclass(frozen=True)
class FitResult:
    """Fitted factors with their confidence.

    Attributes
    ----------
    factors : tuple of str
        Names (see :data:`FACTORS`). [-]
    values : numpy.ndarray
        Fitted scale factors. [-]
    std : numpy.ndarray
        One standard deviation of each factor, from ``s² (JᵀJ)⁻¹``. [-]
    ci95 : numpy.ndarray
        (p, 2) 95 % confidence intervals (Student's t, m - p degrees of freedom). [-]
    correlation : numpy.ndarray
        (p, p) correlation matrix of the factors. [-]
    residual_rms_kph : float
        RMS of the weighted residuals at the solution. [km/h]
    n_residuals : int
        Number of residuals (corners + straights used). [-]
    overrides : dict
        ``"section.key" -> value`` in car-file units: the fitted variant's keys. [-]
    car : Car
        The fitted car. [-]
    weights : dict
        ``{"corner": w_c, "straight": w_s}``. [-]
    """

    factors: tuple[str, ...]
    values: np.ndarray
    std: np.ndarray
    ci95: np.ndarray
    correlation: np.ndarray
    residual_rms_kph: float
    n_residuals: int
    overrides: dict[str, Any]
    car: Car
    weights: dict[str, float]

    def table(self) -> list[dict]:
        """One row per factor: factor, value, std, ci95_low, ci95_high. [-]"""
        return [{"factor": f, "value": float(v), "std": _json_float(s),
                 "ci95_low": _json_float(c[0]), "ci95_high": _json_float(c[1])}
                for f, v, s, c in zip(self.factors, self.values, self.std, self.ci95,
                                      strict=True)]


@dataclass(frozen=True)
class Correlation:
    """Result of :func:`correlate`.

    Attributes
    ----------
    log : Log
    lap : LoggedLap
        The lap compared (and fitted).
    model : LapResult
        The model lap of the car as given.
    fitted : LapResult or None
        The model lap of the fitted car.
    alignment : Alignment
    trace : dict of str -> numpy.ndarray
        On the track steps: ``distance_m``, ``covered`` (1 where the log has data),
        ``speed_log_kph``, ``speed_model_kph``, ``speed_fitted_kph``, ``time_delta_s``
        (log minus model since the lap's first logged point), ``time_delta_fitted_s``,
        ``ay_log_mps2``, ``ay_model_mps2`` (magnitudes).
    segments : list of dict
        Per corner and straight (see :func:`segment_table`), plus ``rank`` (1 = largest
        |model - log|) and, with a fit, ``fitted_kph`` and ``fitted_minus_log_kph``.
    fit : FitResult or None
    laps : list of dict
        One row per complete lap: number, lap time, logger length, alignment scale.
    """

    log: Log
    lap: LoggedLap
    model: Any
    fitted: Any
    alignment: Alignment
    trace: dict[str, np.ndarray]
    segments: list[dict]
    fit: FitResult | None
    laps: list[dict]

    def summary(self) -> dict:
        """Plain-JSON summary."""
        out = {
            "log": self.log.source, "car": self.model.car.name,
            "track": getattr(self.model.track, "name", ""),
            "track_length_m": float(self.model.track.length_m),
            "laps_in_log": len(self.log.laps), "partial_laps_left_out": self.log.partial,
            "split_by": self.log.split_by, "sample_rate_hz": _json_float(self.log.rate_hz),
            "lap_compared": self.lap.number, "logged_lap_time_s": float(self.lap.lap_time_s),
            "model_lap_time_s": float(self.model.lap_time_s),
            "fitted_lap_time_s": (None if self.fitted is None
                                  else float(self.fitted.lap_time_s)),
            "alignment": self.alignment.to_dict(),
            "laps": [{k: _json_float(v) for k, v in r.items()} for r in self.laps],
            "segments": [{k: _json_float(v) for k, v in r.items()} for r in self.segments],
            "fit": None if self.fit is None else {
                "factors": self.fit.table(),
                "correlation": self.fit.correlation.tolist(),
                "residual_rms_kph": _json_float(self.fit.residual_rms_kph),
                "n_residuals": self.fit.n_residuals, "weights": self.fit.weights,
                "overrides": self.fit.overrides},
        }
        return out


def _json_float(v):
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


# --------------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------------


def _read_columns(path: Path) -> tuple[dict[str, np.ndarray], list[int], tuple, tuple]:
    """Columns (float arrays, NaN for empty optional cells), file line of each row."""
    src = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found; check the path", src) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a log file (CSV)", src) from None
    except OSError as e:
        raise InputError(f"cannot read the file ({e.strerror}); check the path", src) from None
    from lapbalance.textio import decode_text

    text = decode_text(raw, src, "a logged run (CSV text); export the log as CSV",
                       "export the log as CSV (UTF-8)")
    lines = text.splitlines()
    i = 0
    while i < len(lines) and (not lines[i].strip() or lines[i].lstrip().startswith("#")):
        i += 1
    if i >= len(lines):
        raise InputError("no header row; give a header such as time_s,speed_kph,distance_m "
                         "and one row per sample", src)
    hline = i + 1
    header = next(csv.reader([lines[i]]))
    if len(header) == 1 and (";" in lines[i] or "\t" in lines[i]):
        raise InputError("the header uses semicolons or tabs between columns; save the log "
                         "with commas", src, f"line {hline}")
    names = [h.strip().lower() for h in header]
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise InputError(f'column "{dup}" appears twice in the header; keep one', src,
                         f"line {hline}")
    if _TIME not in names:
        hint = next((f' ({did_you_mean(n, KNOWN_COLUMNS)} for "{n}")' for n in names
                     if n.startswith("t")), "")
        raise InputError(f"the header needs a time_s column (seconds){hint}; known columns: "
                         f"{', '.join(KNOWN_COLUMNS)}", src, f"line {hline}")
    speeds = [n for n in _SPEEDS if n in names]
    if len(speeds) != 1:
        what = "both speed_kph and speed_mps; keep one" if speeds else \
            "a speed column: speed_kph (km/h) or speed_mps (m/s)"
        raise InputError(f"the header needs {what}", src, f"line {hline}")
    for a, b in (("x_m", "y_m"), ("lat_deg", "lon_deg")):
        if (a in names) != (b in names):
            raise InputError(f"positions need both {a} and {b}", src, f"line {hline}")
    if "x_m" in names and "lat_deg" in names:
        raise InputError("the header has both x_m,y_m and lat_deg,lon_deg; keep one pair",
                         src, f"line {hline}")
    cols = [n for n in names if n in KNOWN_COLUMNS]
    ignored = tuple(n for n in names if n not in KNOWN_COLUMNS)
    idx = [names.index(n) for n in cols]
    required = {_TIME, speeds[0]}
    data = [[] for _ in cols]
    linenos: list[int] = []
    body = lines[i + 1:]
    for j, cells in enumerate(csv.reader(body)):
        lineno = i + 2 + j
        if not cells or (len(cells) == 1 and not cells[0].strip()) or \
                cells[0].lstrip().startswith("#"):
            continue
        if len(cells) != len(names):
            raise InputError(f"{len(cells)} values but the header has {len(names)} columns; "
                             "give one value per column (decimals with a point)", src,
                             f"line {lineno}")
        for k, (n, c) in enumerate(zip(cols, idx, strict=True)):
            cell = cells[c].strip()
            if not cell and n not in required:
                data[k].append(math.nan)
                continue
            try:
                v = float(cell)
            except ValueError:
                raise InputError(f'{n} = "{cell}" is not a number; write a plain number '
                                 "(decimal point, no units)", src, f"line {lineno}") from None
            if not math.isfinite(v):
                raise InputError(f"{n} = {cell} is not a finite number; give a value or "
                                 "remove the row", src, f"line {lineno}")
            data[k].append(v)
        linenos.append(lineno)
    if len(linenos) < 10:
        raise InputError(f"only {len(linenos)} samples; a log needs at least 10 rows below "
                         "the header", src)
    out = {n: np.asarray(d, dtype=float) for n, d in zip(cols, data, strict=True)}
    return out, linenos, tuple(cols), ignored


def _check_time(t: np.ndarray, rows: list[int], src: str) -> None:
    dt = np.diff(t)
    bad = np.flatnonzero(dt <= 0.0)
    if bad.size:
        k = int(bad[0])
        raise InputError(f"time_s goes backwards or repeats ({t[k]:g} s then {t[k + 1]:g} s); "
                         "sort the rows by time and remove repeated rows", src,
                         f"line {rows[k + 1]}")
    k = int(np.argmax(dt))
    if dt[k] > MAX_GAP_S:
        raise InputError(f"gap of {dt[k]:.2f} s in time_s ({t[k]:g} s to {t[k + 1]:g} s), "
                         f"longer than {MAX_GAP_S:g} s: the logger lost data; cut the log at "
                         "the gap or log at 1 Hz or faster", src, f"line {rows[k + 1]}")


def _integrate(t: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Cumulative trapezoid of v over t, starting at 0. [m]"""
    return np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))])


def _fill(a: np.ndarray) -> np.ndarray:
    """Interpolate NaNs (linear in sample index, held at the ends)."""
    ok = np.isfinite(a)
    if ok.all() or not ok.any():
        return a
    i = np.arange(a.size)
    return np.interp(i, i[ok], a[ok])


def load_log(path, track, *, track_latlon_origin: tuple[float, float] | None = None) -> Log:
    """Read a logged run and cut it into laps of ``track``.

    Parameters
    ----------
    path : str or Path
        Log CSV (format in the module docstring). [-]
    track : Track
        The track the log should be of. [-]
    track_latlon_origin : (float, float), optional
        Latitude and longitude of the track's local-plane origin [deg]; needed only for a
        log in ``lat_deg,lon_deg`` (see :func:`track_origin`).

    Returns
    -------
    Log

    Raises
    ------
    InputError
        Time going backwards, gaps longer than :data:`MAX_GAP_S`, a speed column in the wrong
        unit, a log of another track, no complete lap.
    """
    path = Path(path)
    src = str(path)
    cols, rows, names, ignored = _read_columns(path)
    t = cols[_TIME]
    _check_time(t, rows, src)
    sname = next(n for n in _SPEEDS if n in cols)
    v = cols[sname] * _SPEEDS[sname]
    neg = np.flatnonzero(v < 0)
    if neg.size:
        raise InputError(f"{sname} = {cols[sname][neg[0]]:g} is negative; speed is >= 0", src,
                         f"line {rows[neg[0]]}")
    L = float(track.length_m)
    dist_int = _integrate(t, v)
    # positions -> projected track distance
    s_unw = cross = None
    if "x_m" in cols or "lat_deg" in cols:
        if "lat_deg" in cols:
            if track_latlon_origin is None:
                raise InputError("the log has lat_deg,lon_deg positions but the track is not "
                                 "in lat/lon; give the log in x_m,y_m of the track's plane, or "
                                 "drop the position columns", src, "lat_deg")
            from lapbalance.track import latlon_to_local

            lat, lon = _fill(cols["lat_deg"]), _fill(cols["lon_deg"])
            if not (np.all(np.abs(lat) <= 90) and np.all(np.abs(lon) <= 180)):
                raise InputError("lat_deg/lon_deg outside -90..90 / -180..180; check the "
                                 "column order", src, "lat_deg")
            x, y = latlon_to_local(lat, lon, *track_latlon_origin)
        else:
            x, y = _fill(cols["x_m"]), _fill(cols["y_m"])
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
            raise InputError("no position in any row; fill the position columns or drop them",
                             src, "x_m")
        s, cross = project(track, x, y, v, t)
        med = float(np.median(np.abs(cross)))
        if med > MAX_CROSS_TRACK_M:
            raise InputError(f"the logged positions lie {med:.0f} m from the track line "
                             f"(median; more than {MAX_CROSS_TRACK_M:g} m): a log of another "
                             f"track, or positions in another plane; check the track file "
                             f"({track.name})", src, "positions")
        s_unw = _unwrap(s, L) if track.closed else s
    # distance reference for the unit check
    if s_unw is not None:
        ref, ref_what = float(s_unw[-1] - s_unw[0]), "the distance the positions cover"
    elif "lap_distance_m" in cols:
        ld = _fill(cols["lap_distance_m"])
        ref = float(np.sum(np.clip(np.diff(ld), 0, None)))
        ref_what = "lap_distance_m"
    elif "distance_m" in cols:
        dd = _fill(cols["distance_m"])
        ref, ref_what = float(dd[-1] - dd[0]), "distance_m"
    else:
        ref, ref_what = L, f"the track length ({L:.0f} m, for a one-lap log)"
    ratio = dist_int[-1] / ref if ref > 0 else math.nan
    if sname == "speed_kph" and abs(ratio * 3.6 - 1.0) < UNIT_TOL:
        raise InputError(f"speeds look like m/s, not km/h: speed x time gives "
                         f"{dist_int[-1]:.0f} m against {ref:.0f} m from {ref_what}; rename "
                         "the column speed_mps", src, sname)
    if sname == "speed_mps" and abs(ratio / 3.6 - 1.0) < UNIT_TOL:
        raise InputError(f"speeds look like km/h, not m/s: speed x time gives "
                         f"{dist_int[-1]:.0f} m against {ref:.0f} m from {ref_what}; rename "
                         "the column speed_kph", src, sname)
    extra = {n: _fill(cols[n]) for n in ("ay_mps2", "ax_mps2", "throttle_pct", "brake_pct")
             if n in cols}
    if "distance_m" in cols:
        dlog, dfrom = _fill(cols["distance_m"]), "logger"
    elif "lap_distance_m" in cols:
        dlog, dfrom = None, "logger"
    else:
        dlog, dfrom = dist_int, "speed"
    if s_unw is not None:
        laps, partial = _split_positions(t, v, s_unw, cross, dlog, extra, L, track.closed)
        split = "positions"
    elif "lap_distance_m" in cols:
        laps, partial = _split_lap_distance(t, v, _fill(cols["lap_distance_m"]), extra, L)
        split = "lap_distance"
    else:
        laps, partial = [_one_lap(1, t, v, dlog, None, None, extra)], 0
        split = "none"
        span = float(laps[0].logger_distance_m[-1])
        if span > (1.0 + 0.5) * L:
            raise InputError(f"the log covers {span:.0f} m, about {span / L:.1f} laps of "
                             f"{track.name}; add lap_distance_m or positions (x_m,y_m) so it "
                             "can be cut into laps", src, "distance_m" if "distance_m" in cols
                             else sname)
    if not laps:
        raise InputError(f"no complete lap (line to line) in the log ({partial} partial); log "
                         "a whole lap", src, "positions" if split == "positions" else
                         "lap_distance_m")
    for lap in laps:
        length = float(lap.logger_distance_m[-1])
        if lap.track_distance_m is not None and dfrom == "speed":
            length = float(lap.track_distance_m[-1] - lap.track_distance_m[0])
        rel = length / L - 1.0
        if abs(rel) > TRACK_LENGTH_TOL:
            what = {"none": "distance_m" if "distance_m" in cols else f"{sname} x time_s",
                    "lap_distance": "lap_distance_m", "positions": "distance_m"}[split]
            raise InputError(f"lap {lap.number} is {length:.0f} m long but {track.name} is "
                             f"{L:.0f} m ({rel * 100:+.1f} %, more than "
                             f"{TRACK_LENGTH_TOL * 100:g} %): a log of another track? check "
                             "the track file and the log", src, what)
    rate = float(1.0 / np.median(np.diff(t)))
    return Log(src, laps, partial, rate, split, dfrom, names, ignored)


def _unwrap(s: np.ndarray, L: float) -> np.ndarray:
    d = np.diff(s)
    jumps = np.where(d < -0.5 * L, L, np.where(d > 0.5 * L, -L, 0.0))
    return s + np.concatenate([[0.0], np.cumsum(jumps)])


def _one_lap(number, t, v, d, s, cross, extra, t0=None, d0=None, lap_time=None) -> LoggedLap:
    t0 = t[0] if t0 is None else t0
    d0 = d[0] if d0 is None else d0
    tl = t - t0
    return LoggedLap(number, float(lap_time if lap_time is not None else tl[-1]), tl, v,
                     d - d0, s, cross, extra)


def _split_positions(t, v, u, cross, dlog, extra, L, closed):
    """Cut at the start-line crossings of the unwrapped projected distance ``u``."""
    if dlog is None:
        dlog = _integrate(t, v)
    if not closed:
        lap = _one_lap(1, t, v, dlog, u, cross, extra)
        return [lap], 0
    # keep u monotone for interpolation (noise at low speed)
    um = np.maximum.accumulate(u)
    tol = LAP_END_TOL * L
    laps, partial = [], 0
    for m in range(int(math.floor(um[0] / L)) - 1, int(math.floor(um[-1] / L)) + 2):
        a, b = m * L, (m + 1) * L
        covered = min(um[-1], b) - max(um[0], a)
        if covered <= tol:
            continue  # the log touches this lap only at its ends
        if um[0] > a + tol or um[-1] < b - tol:
            partial += 1
            continue
        sel = (um >= a - tol) & (um <= b + tol)
        ta, tb = np.interp([a, b], um, t, left=math.nan, right=math.nan)
        if not math.isfinite(ta):  # the log starts just after the line
            ta = t[0] - (um[0] - a) / max(v[0], 1.0)
        if not math.isfinite(tb):
            tb = t[-1] + (b - um[-1]) / max(v[-1], 1.0)
        da = float(np.interp(ta, t, dlog))
        sub = {k: x[sel] for k, x in extra.items()}
        laps.append(_one_lap(len(laps) + 1, t[sel], v[sel], dlog[sel], u[sel] - a,
                             cross[sel], sub, t0=ta, d0=da, lap_time=tb - ta))
    return laps, partial


def _split_lap_distance(t, v, ld, extra, L):
    """Cut where lap_distance_m falls back by more than half a lap."""
    drops = np.flatnonzero(np.diff(ld) < -0.5 * L) + 1
    edges = np.concatenate([[0], drops, [ld.size]])
    tol = LAP_END_TOL * L
    laps, partial = [], 0
    ends = []
    for j in range(len(edges) - 1):
        a, b = int(edges[j]), int(edges[j + 1])
        if b - a < 3:
            partial += 1
            continue
        starts_at_line = j > 0 or ld[a] <= tol
        ends_at_line = j < len(edges) - 2
        ends.append((a, b, starts_at_line, ends_at_line))
    closed_lengths = [ld[b - 1] for a, b, s0, s1 in ends if s0 and s1]
    ref = float(np.median(closed_lengths)) if closed_lengths else L
    for a, b, s0, s1 in ends:
        if not s1 and ld[b - 1] >= ref - tol:
            s1 = True
        if not (s0 and s1):
            partial += 1
            continue
        # line crossing time from the first sample's lap distance and speed
        ta = t[a] - ld[a] / max(v[a], 1.0)
        if b < ld.size:
            tb = t[b] - ld[b] / max(v[b], 1.0)
        else:
            tb = t[b - 1]
        sub = {k: x[a:b] for k, x in extra.items()}
        laps.append(_one_lap(len(laps) + 1, t[a:b], v[a:b], ld[a:b], None, None, sub,
                             t0=ta, d0=0.0, lap_time=tb - ta))
    return laps, partial


def track_origin(track_file) -> tuple[float, float] | None:
    """Latitude and longitude of a lat/lon track file's local-plane origin [deg], else None.

    :func:`lapbalance.track.load_track` projects lat/lon points onto the tangent plane at
    their centroid (the mean latitude and longitude); a lat/lon log must use the same origin.
    """
    from lapbalance import track as _track

    _, cols, _ = _track._read_csv(Path(track_file))
    if "lat_deg" not in cols:
        return None
    return float(np.mean(cols["lat_deg"])), float(np.mean(cols["lon_deg"]))


# --------------------------------------------------------------------------------------------
# Projection onto the track line
# --------------------------------------------------------------------------------------------


def project(track, x, y, speed_mps=None, time_s=None) -> tuple[np.ndarray, np.ndarray]:
    """Project positions onto the track line.

    Each point goes to its nearest track step (k-d tree) and then along the local tangent:
    ``s = s_i + (p - P_i)·T_i`` and ``n = (p - P_i)·N_i`` (``N`` to the left). Where the
    nearest step jumps implausibly far from the previous sample's distance plus ``v dt``
    (a track that passes close to itself), the nearest of the candidates consistent with the
    travel is taken instead.

    Parameters
    ----------
    track : Track
    x, y : array_like
        (M,) positions in the track's local plane. [m]
    speed_mps, time_s : array_like, optional
        (M,) speed [m/s] and time [s] of the samples, for the continuity check.

    Returns
    -------
    s : numpy.ndarray
        (M,) track distance in [0, L) (closed) or [0, L] (open). [m]
    n : numpy.ndarray
        (M,) signed distance from the track line, left positive. [m]
    """
    from scipy.spatial import cKDTree

    x = np.asarray(x, float)
    y = np.asarray(y, float)
    P = np.column_stack([track.x_m, track.y_m])
    d = np.asarray(track.distance_m, float)
    L = float(track.length_m)
    if track.closed:
        tx = np.roll(P[:, 0], -1) - np.roll(P[:, 0], 1)
        ty = np.roll(P[:, 1], -1) - np.roll(P[:, 1], 1)
    else:
        tx, ty = np.gradient(P[:, 0]), np.gradient(P[:, 1])
    norm = np.hypot(tx, ty)
    tx, ty = tx / norm, ty / norm
    tree = cKDTree(P)
    k = min(8, len(d))
    _, cand = tree.query(np.column_stack([x, y]), k=k)
    cand = np.atleast_2d(cand)

    def sn(i, j):
        dx, dy = x[j] - P[i, 0], y[j] - P[i, 1]
        return d[i] + dx * tx[i] + dy * ty[i], -dx * ty[i] + dy * tx[i]

    rows = np.arange(x.size)
    idx = cand[:, 0].copy()
    if speed_mps is not None and time_s is not None and x.size > 1:
        v = np.asarray(speed_mps, float)
        t = np.asarray(time_s, float)
        s0, _ = sn(idx, rows)
        step = np.diff(s0)
        if track.closed:
            step = (step + 0.5 * L) % L - 0.5 * L
        travel = 0.5 * (v[1:] + v[:-1]) * np.diff(t)
        suspect = np.flatnonzero(np.abs(step - travel) > 25.0 + 0.5 * travel) + 1
        if suspect.size:  # sequential: each choice depends on the previous sample
            sset = set(suspect.tolist())
            s_prev = float(s0[0])
            for j in range(1, x.size):
                if j in sset:
                    pred = s_prev + travel[j - 1]
                    best, best_err = idx[j], math.inf
                    for i in cand[j]:
                        sj, nj = sn(i, j)
                        err = abs(((sj - pred + 0.5 * L) % L - 0.5 * L) if track.closed
                                  else sj - pred) + abs(nj)
                        if err < best_err:
                            best, best_err = i, err
                    idx[j] = best
                s_prev = float(sn(idx[j], j)[0])
    s, n = sn(idx, rows)
    if track.closed:
        s = np.mod(s, L)
    return s, n


# --------------------------------------------------------------------------------------------
# Alignment
# --------------------------------------------------------------------------------------------


def _model_arrays(result):
    """Model distance, speed, time extended by one step to the lap length (closed)."""
    ch = result.channels
    d = np.asarray(ch["distance_m"], float)
    v = np.asarray(ch["speed_mps"], float)
    t = np.asarray(ch["time_s"], float)
    L = float(result.track.length_m)
    if result.track.closed:
        d = np.append(d, L)
        v = np.append(v, v[0])
        t = np.append(t, float(result.lap_time_s))
    return d, v, t, L


def _model_speed_at(result, s):
    d, v, _, L = _model_arrays(result)
    if result.track.closed:
        s = np.mod(s, L)
    return np.interp(s, d, v)


def _model_time_at(result, u):
    """Model elapsed time at unwrapped distance ``u`` (adds a lap time per lap). [s]"""
    d, _, t, L = _model_arrays(result)
    if not result.track.closed:
        return np.interp(u, d, t)
    m = np.floor(u / L)
    return np.interp(u - m * L, d, t) + m * float(result.lap_time_s)


def align_positions(lap: LoggedLap, model) -> Alignment:
    """Alignment from projected positions (see the module notes). [-]"""
    s, dl = lap.track_distance_m, lap.logger_distance_m
    A = np.column_stack([dl, np.ones_like(dl)])
    (k, c), *_ = np.linalg.lstsq(A, s, rcond=None)
    vm = _model_speed_at(model, s)
    rms = float(np.sqrt(np.mean((lap.speed_mps - vm) ** 2)) * 3.6)
    cr = float(np.sqrt(np.mean(lap.cross_track_m ** 2)))
    return Alignment("positions", float(k), float(c), rms, cr)


def align_speed(lap: LoggedLap, model, scale0: float | None = None) -> Alignment:
    """Scale and offset of the logger distance that best match the speed traces.

    Coarse offset from the circular cross-correlation of the speed traces (FFT) at the
    starting scale (track length over the lap's logger length, or ``scale0``), then
    ``scipy.optimize.least_squares`` on ``v_log(d_i) - v_model(k d_i + c)`` over (k, c) with a
    soft-L1 loss (f_scale 1 m/s).

    Parameters
    ----------
    lap : LoggedLap
    model : LapResult
    scale0 : float, optional
        Starting scale. [-]

    Returns
    -------
    Alignment
    """
    from scipy.optimize import least_squares

    dm, vm, _, L = _model_arrays(model)
    closed = bool(model.track.closed)
    dl, vl = lap.logger_distance_m, lap.speed_mps
    span = float(dl[-1] - dl[0])
    k0 = scale0 if scale0 is not None else (L / span if span > 0 else 1.0)
    ds = float(model.track.step_m)
    n = len(model.channels["distance_m"])
    # coarse offset: residual sum of squares over every circular shift, via FFT
    u = np.arange(n) * ds
    a = np.interp(u, k0 * (dl - dl[0]), vl, left=math.nan, right=math.nan)
    w = np.isfinite(a).astype(float)
    a = np.where(w > 0, a, 0.0)
    b = vm[:n]
    if closed:
        fa, fw = np.fft.rfft(a), np.fft.rfft(w)
        fb, fb2 = np.fft.rfft(b), np.fft.rfft(b * b)
        cross = np.fft.irfft(np.conj(fa) * fb, n)
        b2 = np.fft.irfft(np.conj(fw) * fb2, n)
        sse = b2 - 2.0 * cross  # + sum(a²), a constant
        shift = int(np.argmin(sse))
        c0 = shift * ds - k0 * dl[0]
        if c0 > 0.5 * L:
            c0 -= L
    else:
        c0 = -k0 * dl[0]

    def speed_at(k, c):
        return _model_speed_at(model, k * dl + c) if closed else np.interp(k * dl + c, dm, vm)

    def res(p):  # p = (scale, offset, speed ratio log/model)
        return vl - p[2] * speed_at(p[0], p[1])

    sol = least_squares(res, [k0, c0, 1.0], loss="soft_l1", f_scale=1.0,
                        x_scale=[0.01, 10.0, 0.01], method="trf")
    k, c = float(sol.x[0]), float(sol.x[1])
    if closed:
        c = (c + 0.5 * L) % L - 0.5 * L
    rms = float(np.sqrt(np.mean((vl - speed_at(k, c)) ** 2)) * 3.6)
    return Alignment("speed", k, c, rms)


def speed_noise_kph(speed_mps) -> float:
    """Speed noise of a log from its second differences (robust: MAD). [km/h]

    For white noise of standard deviation σ the second difference has variance 6σ²; the
    true speed of a car changes too smoothly between samples at 5 Hz or faster to matter.
    """
    d2 = np.diff(np.asarray(speed_mps, float), 2)
    return float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / math.sqrt(6.0) * 3.6)


def aligned_distance(lap: LoggedLap, al: Alignment) -> np.ndarray:
    """Track distance of every sample of ``lap`` under ``al`` (unwrapped, monotone). [m]"""
    if al.method == "positions":
        d = lap.logger_distance_m
        line = al.scale * d + al.offset_m
        spacing = max(float(np.median(np.diff(d))), 1e-3) if d.size > 1 else 1.0
        s = line + gaussian_filter1d(lap.track_distance_m - line,
                                     POSITION_SMOOTH_M / spacing, mode="nearest")
    else:
        s = al.scale * lap.logger_distance_m + al.offset_m
    return np.maximum.accumulate(np.asarray(s, float))


# --------------------------------------------------------------------------------------------
# Comparison on the track steps
# --------------------------------------------------------------------------------------------


def _on_grid(lap: LoggedLap, s: np.ndarray, model) -> dict[str, np.ndarray]:
    """Logged speed, time and |a_y| on the model's steps (NaN where the log has no data)."""
    g = np.asarray(model.channels["distance_m"], float)
    L = float(model.track.length_m)
    s0, s1 = float(s[0]), float(s[-1])
    if model.track.closed and s0 <= 0.0 and s1 >= (1.0 - LAP_END_TOL) * L:
        s0 = 0.0  # a line-to-line lap (with a few samples beyond the line at each end)
    if model.track.closed:
        u = s0 + np.mod(g - s0, L)
    else:
        u = g.copy()
    cov = (u >= s0) & (u <= s1)
    v = np.where(cov, np.interp(u, s, lap.speed_mps), np.nan)
    t = np.where(cov, np.interp(u, s, lap.time_s), np.nan)
    if "ay_mps2" in lap.channels:
        ay = np.abs(np.interp(u, s, lap.channels["ay_mps2"]))
    else:
        ay = v ** 2 * np.abs(np.asarray(model.track.curvature_1pm, float))
    ay = np.where(cov, ay, np.nan)
    t_start = float(np.interp(s0, s, lap.time_s))
    return {"u": u, "covered": cov.astype(float), "v": v, "t": t - t_start, "ay": ay,
            "s0": s0, "s": s}


def _as_logged(grid, values_at) -> np.ndarray:
    """A model channel as the logger would have recorded it: sampled at the logged samples'
    track distances and interpolated onto the steps the same way as the log.

    Linear interpolation between samples cuts a speed peak (or fills a minimum) by up to
    about ``(slope change) x spacing / 4``: 1 km/h at 10 Hz at the end of a straight. The
    model seen through the same sampling carries the same error, so the difference does not.
    ``values_at`` maps track distances [m] to the channel's values.
    """
    out = np.interp(grid["u"], grid["s"], values_at(grid["s"]))
    return np.where(grid["covered"] > 0, out, np.nan)


def _model_abs_ay_at(result, s):
    d, _, _, L = _model_arrays(result)
    ay = np.abs(np.asarray(result.channels["ay_mps2"], float))
    if result.track.closed:
        ay = np.append(ay, ay[0])
        s = np.mod(s, L)
    return np.interp(s, d, ay)


def _delta(grid, model) -> np.ndarray:
    tm = _model_time_at(model, grid["u"]) - _model_time_at(model, np.array([grid["s0"]]))[0]
    return grid["t"] - tm


def _smooth(a: np.ndarray, sigma_steps: float, closed: bool) -> np.ndarray:
    ok = np.isfinite(a)
    if not ok.any():
        return a
    f = np.where(ok, a, 0.0)
    w = ok.astype(float)
    mode = "wrap" if closed else "nearest"
    num = gaussian_filter1d(f, sigma_steps, mode=mode)
    den = gaussian_filter1d(w, sigma_steps, mode=mode)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    return np.where(ok, out, np.nan)


def _segment_mask(d, seg, L):
    a, b = seg["start_m"], seg["end_m"]
    if b >= a:
        return (d >= a) & (d <= b)
    return (d >= a) | (d <= b)


def _window(vm: np.ndarray, idx: np.ndarray, j: int, band: float, low: bool, half: int
            ) -> np.ndarray:
    """Contiguous steps of ``idx`` (segment, in lap order) around position ``j`` where the
    model speed is within ``band`` of its extreme, at least ``half`` steps each side."""
    ref = vm[idx[j]]
    ok = vm[idx] <= ref * (1 + band) if low else vm[idx] >= ref * (1 - band)
    lo = j
    while lo > 0 and (ok[lo - 1] or j - lo < half):
        lo -= 1
    hi = j
    while hi < len(idx) - 1 and (ok[hi + 1] or hi - j < half):
        hi += 1
    return idx[lo:hi + 1]


def comparison_windows(model) -> list[dict]:
    """Segments of the lap with their comparison windows (step indices) from ``model``.

    Returns
    -------
    list of dict
        ``segment``, ``kind``, ``corner_id``, ``start_m``, ``end_m`` [m], ``window`` (step
        indices), ``ay_window`` (corners: steps around the model's peak |a_y|).
    """
    from lapbalance.compare import lap_segments

    d = np.asarray(model.channels["distance_m"], float)
    vm = np.asarray(model.channels["speed_mps"], float)
    aym = np.abs(np.asarray(model.channels["ay_mps2"], float))
    L = float(model.track.length_m)
    half = max(1, int(round(WINDOW_MIN_HALF_M / float(model.track.step_m))))
    out = []
    for seg in lap_segments(model.track):
        mask = _segment_mask(d, seg, L)
        idx = np.flatnonzero(mask)
        if idx.size < 3:
            continue
        if seg["end_m"] < seg["start_m"]:  # through the start line: lap order
            idx = np.concatenate([idx[d[idx] >= seg["start_m"]], idx[d[idx] < seg["start_m"]]])
        row = dict(seg)
        if seg["kind"] == "corner":
            j = int(np.argmin(vm[idx]))
            row["window"] = _window(vm, idx, j, APEX_BAND, True, half)
            ja = int(np.argmax(aym[idx]))
            row["ay_window"] = _window(aym, idx, ja, APEX_BAND, False, half)
        else:
            j = int(np.argmax(vm[idx]))
            row["window"] = _window(vm, idx, j, TOP_BAND, False, half)
        out.append(row)
    return out


def segment_table(model, grid, windows) -> list[dict]:
    """Per corner (minimum speed, peak |a_y|) and per straight (top speed): model vs log.

    Returns
    -------
    list of dict
        ``segment``, ``kind``, ``corner_id``, ``start_m``, ``end_m``, ``at_m`` (model
        extreme) [m], ``model_kph``, ``log_kph`` (window estimate), ``log_sample_kph``
        (lowest/highest smoothed logged sample), ``model_minus_log_kph``, ``verdict``
        (``optimistic`` = the model is faster, ``pessimistic``, ``close``), corners also
        ``model_ay_mps2``, ``log_ay_mps2``; ``covered`` (share of the window with log
        data).
    """
    vm = np.asarray(model.channels["speed_mps"], float)
    aym = np.abs(np.asarray(model.channels["ay_mps2"], float))
    d = np.asarray(model.channels["distance_m"], float)
    closed = bool(model.track.closed)
    sig = SMOOTH_SIGMA_M / float(model.track.step_m)
    vs = _smooth(grid["v"], sig, closed)
    vm_log = _as_logged(grid, lambda x: _model_speed_at(model, x))
    aym_log = _as_logged(grid, lambda x: _model_abs_ay_at(model, x))
    rows = []
    for w in windows:
        win = w["window"]
        corner = w["kind"] == "corner"
        seg_idx = np.flatnonzero(_segment_mask(d, w, model.track.length_m))
        cov = float(np.mean(np.isfinite(grid["v"][win])))
        diff = grid["v"][win] - vm_log[win]
        j = win[np.argmin(vm[win])] if corner else win[np.argmax(vm[win])]
        ext_m = vm[j]
        log_v = ext_m + np.nanmean(diff) if cov > 0 else math.nan
        seg_v = vs[seg_idx]
        if np.isfinite(seg_v).any():
            sample = float(np.nanmin(seg_v) if corner else np.nanmax(seg_v)) * 3.6
        else:
            sample = math.nan
        mk, lk = float(ext_m * 3.6), float(log_v * 3.6)
        delta = mk - lk
        verdict = ("close" if abs(delta) < CLOSE_KPH else
                   "optimistic" if delta > 0 else "pessimistic") if math.isfinite(delta) \
            else "no data"
        row = {"segment": w["segment"], "kind": w["kind"], "corner_id": w["corner_id"],
               "start_m": float(w["start_m"]), "end_m": float(w["end_m"]),
               "at_m": float(d[j]), "model_kph": mk, "log_kph": lk, "log_sample_kph": sample,
               "model_minus_log_kph": delta, "verdict": verdict, "covered": cov}
        if corner:
            aw = w["ay_window"]
            ja = aw[np.argmax(aym[aw])]
            row["model_ay_mps2"] = float(aym[ja])
            row["log_ay_mps2"] = float(aym[ja] + np.nanmean(grid["ay"][aw] - aym_log[aw])) \
                if np.isfinite(grid["ay"][aw]).any() else math.nan
        rows.append(row)
    return rows


# --------------------------------------------------------------------------------------------
# Fit
# --------------------------------------------------------------------------------------------


def _raw(car: Car, sec: str, key: str):
    v = car.raw.get((sec, key))
    return None if v is None else v[0]


def factor_keys(car: Car, factor: str) -> dict[str, Any]:
    """Car-file keys a factor scales, with their current values (car-file units).

    Raises
    ------
    InputError
        Unknown factor, or a car without a key the factor can scale (e.g. drag area from an
        aero map).
    """
    if factor not in FACTORS:
        raise InputError(f'unknown factor "{factor}"; {did_you_mean(factor, FACTORS)}', "--fit")
    out: dict[str, Any] = {}
    if factor.startswith("grip"):
        axles = ("front", "rear") if factor == "grip" else (factor.split("-")[1],)
        for ax in axles:
            sec = f"tyres.{ax}"
            for key in ("peak_friction", "peak_friction_lateral", "peak_friction_longitudinal",
                        "pdy1", "pdy2", "pdx1", "pdx2"):
                val = _raw(car, sec, key)
                if val is not None:
                    out[f"{sec}.{key}"] = val
    elif factor == "drag":
        if _raw(car, "aero", "map_file") is not None:
            raise InputError("the drag area of a car with an aero map comes from the map; fit "
                             "grip and power only, or scale the map", car.source or "car",
                             "aero.map_file")
        for key in ("drag_area_m2", "drag_coefficient"):
            val = _raw(car, "aero", key)
            if val is not None:
                out[f"aero.{key}"] = val
    elif factor == "power":
        for key in ("power_kw", "torque_curve_nm"):
            val = _raw(car, "powertrain", key)
            if val is not None:
                out[f"powertrain.{key}"] = val
    if not out:
        raise InputError(f'the car has no key that factor "{factor}" scales ({FACTORS[factor]})',
                         car.source or "car", "--fit")
    return out


def _scaled(value, f):
    if isinstance(value, list | tuple):
        return [round(float(x) * f, 6) for x in value]
    return round(float(value) * f, 6)


def factor_overrides(car: Car, factors, values) -> dict[str, Any]:
    """``"section.key" -> scaled value`` for the given factors (car-file units)."""
    out: dict[str, Any] = {}
    for fac, val in zip(factors, values, strict=True):
        for key, base in factor_keys(car, fac).items():
            out[key] = _scaled(out.get(key, base), val)
    return out


def check_factors(factors) -> tuple[str, ...]:
    """Clean a list of factor names (see :data:`FACTORS`); InputError for unknown or clashing
    names."""
    factors = tuple(dict.fromkeys(f.strip().lower() for f in factors if f.strip()))
    for f in factors:
        if f not in FACTORS:
            raise InputError(f'unknown factor "{f}"; {did_you_mean(f, FACTORS)}', "--fit")
    if "grip" in factors and ({"grip-front", "grip-rear"} & set(factors)):
        raise InputError("grip scales both axles; fit either grip or grip-front/grip-rear",
                         "--fit")
    return factors


def fit_factors(car: Car, track, grid, windows, factors, *, corner_weight: float = 1.0,
                straight_weight: float = 1.0, x0=None):
    """Fit scale factors to the logged corner minimum and straight top speeds.

    Parameters
    ----------
    car : Car
    track : Track
    grid : dict
        Logged traces on the track steps (from the alignment).
    windows : list of dict
        From :func:`comparison_windows` (held fixed during the fit).
    factors : sequence of str
        Names from :data:`FACTORS`.
    corner_weight, straight_weight : float
        Residual weights (see the module notes). [-]
    x0 : sequence of float, optional
        Starting factors (default 1). [-]

    Returns
    -------
    FitResult
    """
    from scipy.optimize import least_squares
    from scipy.special import stdtrit

    from lapbalance.lap import simulate_lap

    factors = check_factors(factors)
    if not factors:
        raise InputError("no factor to fit; give --fit grip,drag (any of "
                         f"{', '.join(FACTORS)})", "--fit")
    for f in factors:
        factor_keys(car, f)
    wins, wts = [], []
    for w in windows:
        win = w["window"]
        if np.isfinite(grid["v"][win]).mean() < 0.5:
            continue
        wins.append(win)
        wts.append(corner_weight if w["kind"] == "corner" else straight_weight)
    wts = np.asarray(wts, float)
    if len(wins) <= len(factors):
        raise InputError(f"{len(wins)} corners and straights with log data for "
                         f"{len(factors)} factors; fit fewer factors", "--fit")
    vlog = grid["v"]
    ok = [np.isfinite(vlog[w]) for w in wins]
    target = np.array([np.mean(vlog[w][k]) for w, k in zip(wins, ok, strict=True)])
    cache: dict[tuple, Any] = {}

    def lap_for(x):
        key = tuple(np.round(x, 12))
        if key not in cache:
            c = car.with_overrides(factor_overrides(car, factors, x))
            cache[key] = simulate_lap(c, track, assess_liftoff=False)
        return cache[key]

    def residuals(x):
        r = lap_for(x)
        vm = _as_logged(grid, lambda s: _model_speed_at(r, s))  # same sampling as the log
        model = np.array([np.mean(vm[w][k]) for w, k in zip(wins, ok, strict=True)])
        return wts * (model - target) * 3.6

    x0 = np.ones(len(factors)) if x0 is None else np.asarray(x0, float)
    sol = least_squares(residuals, x0, bounds=FACTOR_BOUNDS, diff_step=FIT_DIFF_STEP,
                        method="trf", x_scale=1.0)
    J = sol.jac
    m, p = J.shape
    dof = m - p
    s2 = float(np.sum(sol.fun ** 2) / dof)
    try:
        cov = s2 * np.linalg.inv(J.T @ J)
    except np.linalg.LinAlgError:
        cov = np.full((p, p), np.inf)
    std = np.sqrt(np.clip(np.diag(cov), 0, None))
    tq = float(stdtrit(dof, 0.975))  # Student's t quantile
    ci = np.column_stack([sol.x - tq * std, sol.x + tq * std])
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(std, std)
    overrides = factor_overrides(car, factors, sol.x)
    fitted_car = car.with_overrides(overrides)
    return FitResult(factors, sol.x.copy(), std, ci, corr,
                     float(np.sqrt(np.mean(sol.fun ** 2))), m, overrides, fitted_car,
                     {"corner": corner_weight, "straight": straight_weight})


# --------------------------------------------------------------------------------------------
# The whole correlation
# --------------------------------------------------------------------------------------------


def correlate(car: Car, track, log: Log, *, lap: int | None = None, align: str = "auto",
              fit=(), corner_weight: float = 1.0, straight_weight: float = 1.0,
              model=None) -> Correlation:
    """Correlate ``car`` on ``track`` with one lap of ``log``.

    Parameters
    ----------
    car : Car
    track : Track
    log : Log
        From :func:`load_log`.
    lap : int, optional
        Lap number in the log (1-based); default the fastest complete lap.
    align : str
        ``"auto"`` (positions when the log has them, else speed), ``"positions"`` or
        ``"speed"``.
    fit : sequence of str
        Factors to fit (:data:`FACTORS`); empty = compare only.
    corner_weight, straight_weight : float
        Fit residual weights. [-]
    model : LapResult, optional
        The lap of ``car`` on ``track`` if already run (default: run it here).

    Returns
    -------
    Correlation
    """
    from lapbalance.lap import simulate_lap

    if align not in ("auto", "positions", "speed"):
        raise InputError(f'unknown alignment "{align}"; use auto, positions or speed',
                         "--align")
    if align == "positions" and not log.has_positions:
        raise InputError("the log has no positions (x_m,y_m or lat_deg,lon_deg); use "
                         "--align speed", log.source, "--align")
    method = "positions" if align == "auto" and log.has_positions else \
        ("speed" if align == "auto" else align)
    factors = check_factors(fit)
    if lap is None:
        j = log.fastest()
    else:
        if not 1 <= lap <= len(log.laps):
            raise InputError(f"= {lap}: the log has {len(log.laps)} complete lap(s); give 1 to "
                             f"{len(log.laps)}", "--lap")
        j = lap - 1
    the_lap = log.laps[j]
    if model is None:
        model = simulate_lap(car, track)

    def do_align(ref):
        al = align_positions(the_lap, ref) if method == "positions" else \
            align_speed(the_lap, ref)
        return al, _on_grid(the_lap, aligned_distance(the_lap, al), ref)

    al, grid = do_align(model)
    windows = comparison_windows(model)
    result = None
    fitted = None
    if factors:
        result = fit_factors(car, track, grid, windows, factors, corner_weight=corner_weight,
                             straight_weight=straight_weight)
        fitted = simulate_lap(result.car, track)
        if method == "speed":
            al2, grid2 = do_align(fitted)
            noise = speed_noise_kph(the_lap.speed_mps)
            if al2.speed_rms_kph <= REALIGN_RMS_FACTOR * noise:
                # the fitted model explains the log down to its noise: align against it
                al = dataclasses.replace(al2, reference="fitted model")
                grid = grid2
                result = fit_factors(car, track, grid, windows, factors,
                                     corner_weight=corner_weight,
                                     straight_weight=straight_weight, x0=result.values)
                fitted = simulate_lap(result.car, track)
    rows = segment_table(model, grid, windows)
    if fitted is not None:
        vf = np.asarray(fitted.channels["speed_mps"], float)
        for r, w in zip(rows, windows, strict=True):
            win = w["window"]
            r["fitted_kph"] = float((vf[win].min() if w["kind"] == "corner"
                                     else vf[win].max()) * 3.6)
            r["fitted_minus_log_kph"] = r["fitted_kph"] - r["log_kph"]
    order = sorted((i for i, r in enumerate(rows) if math.isfinite(r["model_minus_log_kph"])),
                   key=lambda i: -abs(rows[i]["model_minus_log_kph"]))
    for k, i in enumerate(order):
        rows[i]["rank"] = k + 1
    trace = {
        "distance_m": np.asarray(model.channels["distance_m"], float),
        "covered": grid["covered"],
        "speed_log_kph": grid["v"] * 3.6,
        "speed_model_kph": np.asarray(model.channels["speed_kph"], float),
        "time_delta_s": _delta(grid, model),
        "ay_log_mps2": grid["ay"],
        "ay_model_mps2": np.abs(np.asarray(model.channels["ay_mps2"], float)),
    }
    if fitted is not None:
        trace["speed_fitted_kph"] = np.asarray(fitted.channels["speed_kph"], float)
        trace["time_delta_fitted_s"] = _delta(grid, fitted)
    laps = []
    for lp in log.laps:
        row = {"lap": lp.number, "lap_time_s": float(lp.lap_time_s),
               "logger_length_m": float(lp.logger_distance_m[-1]),
               "model_minus_log_s": float(model.lap_time_s - lp.lap_time_s)}
        if lp is the_lap:
            row["distance_scale"] = al.scale
        elif method == "positions":
            row["distance_scale"] = align_positions(lp, model).scale
        else:
            row["distance_scale"] = align_speed(lp, model).scale
        laps.append(row)
    return Correlation(log, the_lap, model, fitted, al, trace, rows, result, laps)


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(float(v)) if isinstance(v, float) else str(v)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    s = str(v).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{s}"'


def variant_text(fit: FitResult, base_file, variant_file, *, name: str | None = None,
                 note: str = "", extra_overrides: dict | None = None) -> str:
    """TOML text of the fitted car variant: ``base`` = the car file, plus the fitted keys.

    Parameters
    ----------
    fit : FitResult
    base_file : str or Path
        The car file that was fitted (written relative to the variant's folder).
    variant_file : str or Path
        Where the variant will be written.
    name : str, optional
        The variant's car name (default: the car's name + " (fitted)").
    note : str
        A comment line (what was fitted, to which log).
    extra_overrides : dict, optional
        ``"section.key" -> value`` applied to the base before the fit (``--set``); written
        too, so the variant is the car that was fitted.
    """
    base_rel = os.path.relpath(Path(base_file).resolve(), Path(variant_file).resolve().parent)
    keys: dict[str, Any] = dict(extra_overrides or {})
    keys.update(fit.overrides)
    sections: dict[str, dict[str, Any]] = {}
    for dotted, val in keys.items():
        sec, key = dotted.rsplit(".", 1) if "." in dotted else ("", dotted)
        sections.setdefault(sec, {})[key] = val
    lines = ["# Car variant fitted by lapbalance correlate. Factors fitted to one log are",
             "# estimates: check them before the car is used for setup decisions."]
    if note:
        lines.append(f"# {note}")
    for f, v, s in zip(fit.factors, fit.values, fit.std, strict=True):
        lines.append(f"# {f}: x{v:.4f} +/- {s:.4f} (1 sigma)")
    top = sections.pop("", {})
    top.pop("base", None)
    lines.append(f"base = {_toml_value(Path(base_rel).as_posix())}")
    car_name = name or top.pop("name", None) or fit.car.name + " (fitted)"
    lines.append(f"name = {_toml_value(car_name)}")
    top.pop("name", None)
    for k, v in top.items():
        lines.append(f"{k} = {_toml_value(v)}")
    for sec in sorted(sections):
        lines += ["", f"[{sec}]"]
        for k, v in sections[sec].items():
            lines.append(f"{k} = {_toml_value(v)}")
    return "\n".join(lines) + "\n"


def trace_columns(corr: Correlation) -> dict[str, np.ndarray]:
    """The comparison on the track steps as CSV columns (units in the names)."""
    return dict(corr.trace)


SEGMENT_COLUMNS = ("segment", "kind", "corner_id", "start_m", "end_m", "at_m", "model_kph",
                   "log_kph", "log_sample_kph", "model_minus_log_kph", "rank", "verdict",
                   "fitted_kph", "fitted_minus_log_kph", "model_ay_mps2", "log_ay_mps2",
                   "covered")


def segments_csv_text(corr: Correlation) -> str:
    """Per-segment comparison as CSV text (``model_kph``: corner minimum or straight top)."""
    from lapbalance.outputs import csv_text

    def cell(v):
        if v is None:
            return ""
        if isinstance(v, float):
            return "" if not math.isfinite(v) else f"{v:.6g}"
        return str(v)

    return csv_text(SEGMENT_COLUMNS, ([cell(r.get(c)) for c in SEGMENT_COLUMNS]
                                      for r in corr.segments))


# --------------------------------------------------------------------------------------------
# Synthetic logs (demos and consistency checks)
# --------------------------------------------------------------------------------------------


def synthetic_log(results, *, rate_hz: float = 20.0, speed_noise_kph: float = 0.0,
                  position_noise_m: float = 0.0, distance_scale: float = 1.0,
                  time_offset_s: float = 0.0, distance_offset_m: float = 0.0,
                  ay_noise_mps2: float = 0.0, seed: int = 0, positions: bool = True,
                  lap_distance: bool = False, decimals: int = 4) -> dict[str, np.ndarray]:
    """A log made from model laps (one per result, driven back to back), for demos and tests.

    This is the tool's own output with noise: it checks that the correlation recovers what
    was put in (a consistency check), never that the model is right.

    Parameters
    ----------
    results : LapResult or sequence of LapResult
        Laps of one closed track, driven one after the other.
    rate_hz : float
        Sample rate. [Hz]
    speed_noise_kph : float
        Standard deviation of the speed noise. [km/h]
    position_noise_m : float
        Standard deviation of the position noise per axis. [m]
    distance_scale : float
        Logger distance = true distance x this (1.015: the logger reads 1.5 % long). [-]
    time_offset_s, distance_offset_m : float
        Logger clock and distance at the first sample. [s], [m]
    ay_noise_mps2 : float
        Standard deviation of the lateral-acceleration noise. [m/s²]
    seed : int
        Random seed.
    positions, lap_distance : bool
        Write x_m,y_m / lap_distance_m columns.
    decimals : int
        Rounding of the written values.

    Returns
    -------
    dict of str -> numpy.ndarray
        Columns ``time_s``, ``speed_kph``, ``distance_m``, (``lap_distance_m``), (``x_m``,
        ``y_m``), ``ay_mps2``, ``ax_mps2``, ``throttle_pct``, ``brake_pct``.
    """
    if not isinstance(results, list | tuple):
        results = [results]
    rng = np.random.default_rng(seed)
    T0, parts = 0.0, []
    for r in results:
        ch = r.channels
        L = float(r.track.length_m)
        tt = np.append(ch["time_s"], r.lap_time_s)
        dd = np.append(ch["distance_m"], L)

        def ext(name, ch=ch):
            a = np.asarray(ch[name], float)
            return np.append(a, a[0])

        ts = np.arange(math.ceil((T0 - 1e-12) * rate_hz), math.floor(
            (T0 + r.lap_time_s - 1e-12) * rate_hz) + 1) / rate_hz
        ts = ts[(ts >= T0) & (ts < T0 + r.lap_time_s)]
        tl = ts - T0
        d = np.interp(tl, tt, dd)
        col = {"tl": tl, "t": ts, "d": d, "L": L,
               "v": np.interp(tl, tt, ext("speed_mps")),
               "x": np.interp(tl, tt, ext("x_m")), "y": np.interp(tl, tt, ext("y_m")),
               "ay": np.interp(tl, tt, ext("ay_mps2")), "ax": np.interp(tl, tt, ext("ax_mps2")),
               "drive": np.interp(tl, tt, ext("drive_force_n")),
               "eng": np.interp(tl, tt, ext("engine_force_n")),
               "brake": np.interp(tl, tt, ext("brake_force_n"))}
        parts.append(col)
        T0 += r.lap_time_s
    cat = {k: np.concatenate([p[k] for p in parts]) for k in ("t", "d", "v", "x", "y", "ay",
                                                               "ax", "drive", "eng", "brake")}
    lap_starts = np.cumsum([0.0] + [p["L"] for p in parts[:-1]])
    true_cum = np.concatenate([p["d"] + s for p, s in zip(parts, lap_starts, strict=True)])
    n = cat["t"].size
    out: dict[str, np.ndarray] = {}
    out["time_s"] = np.round(cat["t"] + time_offset_s, decimals)
    out["speed_kph"] = np.round(np.clip(cat["v"] * 3.6 + rng.normal(0, speed_noise_kph, n)
                                        if speed_noise_kph else cat["v"] * 3.6, 0, None), 2)
    out["distance_m"] = np.round(true_cum * distance_scale + distance_offset_m, 2)
    if lap_distance:
        out["lap_distance_m"] = np.round(np.concatenate([p["d"] for p in parts])
                                         * distance_scale, 2)
    if positions:
        out["x_m"] = np.round(cat["x"] + (rng.normal(0, position_noise_m, n)
                                          if position_noise_m else 0.0), 2)
        out["y_m"] = np.round(cat["y"] + (rng.normal(0, position_noise_m, n)
                                          if position_noise_m else 0.0), 2)
    out["ay_mps2"] = np.round(cat["ay"] + (rng.normal(0, ay_noise_mps2, n)
                                           if ay_noise_mps2 else 0.0), 3)
    out["ax_mps2"] = np.round(cat["ax"] + (rng.normal(0, ay_noise_mps2, n)
                                           if ay_noise_mps2 else 0.0), 3)
    with np.errstate(invalid="ignore", divide="ignore"):
        thr = np.where(cat["eng"] > 0, cat["drive"] / cat["eng"], 0.0)
    out["throttle_pct"] = np.round(np.clip(thr, 0, 1) * 100, 1)
    bmax = max(float(cat["brake"].max()), 1.0)
    out["brake_pct"] = np.round(np.clip(cat["brake"] / bmax, 0, 1) * 100, 1)
    return out


def log_csv_text(columns: dict[str, np.ndarray], comments: tuple[str, ...] = ()) -> str:
    """CSV text of log columns (``#`` comment lines first)."""
    buf = io.StringIO()
    for c in comments:
        buf.write(f"# {c}\n")
    names = list(columns)
    buf.write(",".join(names) + "\n")
    arrs = [np.asarray(columns[n]) for n in names]
    for i in range(arrs[0].size):
        buf.write(",".join(f"{a[i]:.12g}" for a in arrs) + "\n")
    return buf.getvalue()


def write_folder(corr: Correlation, out_dir, *, force: bool = False,
                 extra: dict[str, bytes] | None = None, provenance: dict | None = None) -> Path:
    """Write ``trace.csv``, ``segments.csv``, ``summary.json`` (and ``extra`` files) into
    ``out_dir`` atomically (staged folder; an occupied folder needs ``force``). With a
    ``provenance`` record (:mod:`lapbalance.provenance`) the summary carries it under
    ``provenance`` and ``provenance.json`` lists every file written with its SHA-256."""
    import json

    from lapbalance.outputs import columns_csv_text, staged_dir

    summary = corr.summary()
    if provenance is not None:
        summary = {**summary, "provenance": provenance}
    with staged_dir(out_dir, force) as tmp:
        (tmp / "trace.csv").write_text(columns_csv_text(trace_columns(corr), "{:.6g}"),
                                       encoding="utf-8")
        (tmp / "segments.csv").write_text(segments_csv_text(corr), encoding="utf-8")
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2,
                                                     allow_nan=False) + "\n", encoding="utf-8")
        for name, data in (extra or {}).items():
            (tmp / name).write_bytes(data)
        if provenance is not None:
            from lapbalance.export import write_provenance

            write_provenance(tmp, provenance)
    return Path(out_dir)
