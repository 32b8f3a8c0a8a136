"""Track centreline: CSV import, resampling, smoothing, curvature, grade, banking, corners.

A track is a centreline resampled to a uniform step ``ds`` along its horizontal arc length.
Curvature is signed with a **left** turn positive (ISO 8855: yaw positive counter-clockwise
seen from above). Grade is positive uphill in the direction of travel. Bank is positive when
the road's left side is lower (a bank that helps a left turn).

Point layout
------------
* closed track: ``N`` points spaced exactly ``ds = length / N``; point ``N`` would coincide
  with point 0 and is not stored;
* open track: ``N`` points from 0 to ``length`` inclusive, ``ds = length / (N - 1)``.

``N`` is chosen so that ``ds`` is as close as possible to the requested step. Distance is
measured along the horizontal centreline (x, y); elevation enters only through the grade.

A track is closed when the file or the caller says so, else when its ends are closer than
``max(3 x median spacing, 10 m)`` and the path runs on through the closing segment (it does
not turn back by ``CLOSE_MAX_TURN_DEG`` or more); a last point that repeats the first is
dropped, as are repeated points anywhere.

Corners are numbered in order of their entry from the start line; on a closed track a corner
that runs over the start line (``exit_m < entry_m``) enters last, so it carries the last id.

CSV format
----------
A header row is required, then one row per point, comma separated. Columns: ``x_m,y_m`` (a
local plane) or ``lat_deg,lon_deg`` (WGS-84, projected onto the local tangent plane at the
trace's centroid); optional ``z_m`` (elevation), ``bank_deg`` and ``width_m`` (or
``width_left_m`` and ``width_right_m``: distances from the points to the left and right
edge, for a line that is not the centre of the width). Comment lines starting with ``#``
before the header carry metadata of our own::

    # name: Example Park
    # closed: true
    # sectors_m: 0, 1700, 3400

Curvature from points
---------------------
The curvature must depend on the shape, not on how it was sampled (any spacing from 0.05 m to
10 m, rounding up to 1 cm, GPS-like noise up to 0.5 m), so it is never differentiated from a
curve through the raw points (see :func:`_fit_centreline`):

1. dense points are averaged in bins of about ``FIT_BIN_M`` of arc length (the parameter is the
   chord length of a short moving average, so noise does not inflate it);
2. a light cubic P-spline (Eilers & Marx 1996) through the data gives positions on a uniform
   grid; Gaussian kernels of a ladder of lengths smooth them (periodic for a closed track);
3. the position noise is estimated from the data (leave-one-out residuals across the path), or
   given by the user; a parametric bootstrap gives the curvature's standard deviation at each
   length and place, and rounding adds a term of its own;
4. at each point the longest length whose curvature (and parameter speed) stays inside the
   confidence intervals of all shorter ones is chosen (the intersection of confidence
   intervals rule: Goldenshluger & Nemirovski 1997; Katkovnik 1999). Straights and long
   constant-radius corners get a long length, hairpins a short one;
5. each length's known shrinking of a circle (gain ``exp(-(L/R)²/2)``) is undone, so a clean
   circle comes out at its radius at any length;
6. the fitted curve is resampled at the output step along its own arc length.

The estimated noise is :attr:`Track.noise_m`; the chosen length per point is
:attr:`Track.smoothing_m`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lapbalance.errors import InputError, clip
from lapbalance.filters import gaussian_filter1d, median_filter, next_fast_len, uniform_filter1d
from lapbalance.spline import cubic_spline

# --------------------------------------------------------------------------------------------
# Thresholds (engineering judgement unless a source is named)
# --------------------------------------------------------------------------------------------

#: Ends closer than ``max(CLOSE_GAP_SPACINGS * median spacing, CLOSE_GAP_MIN_M)`` make a closed
#: track when the file does not say. Common practice: a logged lap ends within a few samples of
#: its start. [m]
CLOSE_GAP_SPACINGS = 3.0
CLOSE_GAP_MIN_M = 10.0
#: A gap between consecutive points longer than ``max(JUMP_SPACINGS * median, JUMP_MIN_M)`` is
#: an error (a lost stretch of the log or a typo). Engineering judgement. [m]
JUMP_SPACINGS = 20.0
JUMP_MIN_M = 100.0
#: Consecutive points closer than this are duplicates and are dropped. [m]
DUPLICATE_M = 1e-3
#: Fewest distinct points accepted.
MIN_POINTS = 10
#: Smallest radius a car can drive after smoothing; below it the trace zig-zags or crosses
#: itself. Common practice: the tightest road hairpins are about 5-10 m radius. [m]
MIN_RADIUS_M = 3.0
#: Largest accepted position noise across the path, as a share of the median point spacing
#: (and at least ``ZIGZAG_MIN_M``). Random position noise estimates at most about 0.5 spacings
#: (the spacing itself grows with the noise) when it is larger than the spacing; a trace that
#: steps sideways by more than this zig-zags point to point and is not a centreline. GPS-like
#: noise up to 0.5 m stays below ``ZIGZAG_MIN_M`` at any spacing. Engineering judgement. [-], [m]
ZIGZAG_NOISE_SPACINGS = 0.65
ZIGZAG_MIN_M = 1.5
#: Largest position noise a user may give (``noise_m``). [m]
MAX_NOISE_M = 5.0
#: A closed track must not turn back through its closing segment: the path from the last
#: point to the first may turn by less than this. A logged lap turns by at most a few tens of
#: degrees between consecutive points. Engineering judgement. [deg]
CLOSE_MAX_TURN_DEG = 100.0
#: The path may not turn by more than this between consecutive chords a few point spacings
#: long (a U-turn of radius 3 m over 2 m chords turns about 40 deg). Engineering judgement.
#: [deg]
REVERSAL_TURN_DEG = 135.0
#: x/y spanning less than ``KM_HINT_SPAN_M`` with points closer than ``KM_HINT_SPACING_M`` look
#: like kilometres (real centrelines are sampled 0.05-10 m apart). [m]
KM_HINT_SPAN_M = 50.0
KM_HINT_SPACING_M = 0.02
#: lat/lon within ±pi/2, ±pi whose trace, read as degrees, is shorter than
#: ``RAD_HINT_LENGTH_M`` with points closer than ``RAD_HINT_SPACING_M`` look like radians (a
#: track of 1-100 km typed in radians reads 57.3 times too small). [m]
RAD_HINT_LENGTH_M = 2000.0
RAD_HINT_SPACING_M = 0.2
#: Largest |bank| accepted; steeper than the steepest banked ovals (about 30-35 deg). [deg]
MAX_BANK_DEG = 60.0
#: ``bank_deg`` values all below this (and not all zero) look like radians. [deg]
BANK_RADIANS_HINT_DEG = 0.35
#: Largest grade accepted, measured over ``GRADE_SPAN_M`` of road (so that elevation noise of a
#: logged trace does not trip it). Common practice: the steepest public roads are about 35 %
#: over short stretches. [-], [m]
MAX_GRADE = 0.35
GRADE_SPAN_M = 20.0
#: Centreline fit (see :func:`_fit_centreline`). Dense input is averaged in bins of about
#: ``FIT_BIN_M`` of arc length; the fitted grid is ``FIT_BIN_M`` (dense input) or half the
#: point spacing up to ``FIT_KNOT_MAX_M`` (sparse input). Gaussian smoothing lengths from 1.5
#: grid steps up to ``SMOOTH_MAX_M`` (and a quarter of a closed lap, a sixth of an open one)
#: in steps of ``SMOOTH_RATIO``; confidence intervals ``±ICI_GAMMA`` standard deviations wide
#: (high, so that noise alone rarely stops a long length); tests and choice looked at over
#: ``max(SELECT_SMOOTH_M, 2 spacings)``; rounding to a grid q adds
#: ``ROUNDING_CURVATURE_GAIN q / L²`` to the curvature's standard deviation; ``BOOT_DRAWS``
#: noise draws (2 above ``BOOT_FEW_ABOVE`` grid points); the parameter speed is trusted to
#: ``SPEED_SD_FLOOR``; the noise is estimated on at most ``NOISE_SAMPLE`` points and never
#: taken below ``NOISE_FLOOR_SPACINGS`` of the spacing. Engineering judgement, tuned on circles
#: (15-1000 m), clothoids, 12 m hairpins and 300 m sweepers at 0.05-10 m spacing, 0.1 mm-1 cm
#: rounding and 0-0.5 m noise (tests/test_track_geometry.py). [m], [-]
FIT_BIN_M = 0.5
FIT_KNOT_MAX_M = 1.0
SMOOTH_MAX_M = 200.0
SMOOTH_RATIO = math.sqrt(2.0)
ICI_GAMMA = 4.5
SELECT_SMOOTH_M = 2.0
ROUNDING_CURVATURE_GAIN = 0.03
BOOT_DRAWS = 4
BOOT_FEW_ABOVE = 40000
SPEED_SD_FLOOR = 0.01
NOISE_SAMPLE = 200000
NOISE_FLOOR_SPACINGS = 2e-4
#: Gaussian low-pass on elevation before the grade is taken (standard deviation). [m]
ELEVATION_SIGMA_M = 5.0

#: Corner detection (hysteresis). A corner starts where |curvature| rises above
#: ``CORNER_ON_1PM`` (radius 500 m: 12 m/s² lateral at 280 km/h, a corner for a fast car) and
#: ends where it falls below ``CORNER_OFF_1PM`` (radius 800 m). Same-direction corners closer than
#: ``CORNER_MERGE_M`` merge; corners turning less than ``CORNER_MIN_TURN_DEG`` are dropped.
#: Engineering judgement. [1/m], [m], [deg]
CORNER_ON_1PM = 1.0 / 500.0
CORNER_OFF_1PM = 1.0 / 800.0
CORNER_MERGE_M = 30.0
CORNER_MIN_TURN_DEG = 10.0
#: A closed track turning one way all round whose |curvature| never falls below this share of
#: its largest is one corner (a ring or skid pad of any radius). Engineering judgement. [-]
RING_MIN_SHARE = 0.5

# WGS-84 ellipsoid. Source: NIMA TR8350.2, Department of Defense World Geodetic System 1984,
# 3rd ed. (2000), table 3.1: a = 6378137 m, 1/f = 298.257223563.
_WGS84_A = 6378137.0
_WGS84_F = 1.0 / 298.257223563

_KNOWN_COLUMNS = ("x_m", "y_m", "lat_deg", "lon_deg", "z_m", "bank_deg", "width_m",
                  "width_left_m", "width_right_m")


# --------------------------------------------------------------------------------------------
# Data classes
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Corner:
    """One corner, found on the smoothed curvature by hysteresis.

    Attributes
    ----------
    id : int
        1, 2, ... in driving order from the start line. [-]
    direction : str
        ``"left"`` (curvature > 0) or ``"right"``. [-]
    entry_m : float
        Distance along the track where the corner starts. [m]
    apex_m : float
        Distance of the largest |curvature| in the corner. [m]
    exit_m : float
        Distance where the corner ends; smaller than ``entry_m`` for a corner that wraps over
        the start line of a closed track. [m]
    min_radius_m : float
        ``1 / max |curvature|`` in the corner. [m]
    """

    id: int
    direction: str
    entry_m: float
    apex_m: float
    exit_m: float
    min_radius_m: float


@dataclass(frozen=True)
class Track:
    """A centreline resampled to a uniform step, with its derived channels.

    Attributes
    ----------
    name : str
        Track name (metadata ``# name:`` or the file stem). [-]
    source : str
        File it came from, or a free label. [-]
    closed : bool
        True for a closed circuit (lap), False for an open stage (start to finish). [-]
    step_m : float
        Uniform spacing ``ds`` between consecutive points. [m]
    length_m : float
        Lap (or stage) length along the horizontal centreline. [m]
    distance_m : numpy.ndarray
        (N,) distance of each point from the start: 0, ds, 2 ds, ... [m]
    x_m, y_m : numpy.ndarray
        (N,) horizontal position in the local plane. [m]
    z_m : numpy.ndarray
        (N,) elevation (0 if the file has none). [m]
    curvature_1pm : numpy.ndarray
        (N,) signed path curvature, left turn positive (ISO 8855). [1/m]
    grade_rad : numpy.ndarray
        (N,) road grade, positive uphill in the direction of travel. [rad]
    bank_rad : numpy.ndarray
        (N,) banking, positive when the road's left side is lower. [rad]
    width_m : numpy.ndarray
        (N,) track width, NaN when not given. [m]
    corners : tuple of Corner
        Corners in driving order. [-]
    sector_starts_m : tuple of float
        Start distance of each sector; the first is 0.0. [m]
    width_left_m : numpy.ndarray or None
        (N,) distance from the line to the left edge when the file gives the edges apart
        (``width_left_m``, ``width_right_m``); None when the points are the centre of the
        width. [m]
    noise_m : float
        Position noise of one input point (standard deviation across the path), estimated from
        the points or given by the user; NaN for a track not built from points. [m]
    noise_given : bool
        True when ``noise_m`` was given rather than estimated. [-]
    input_points : int
        Distinct input points used (repeated points dropped). [-]
    input_spacing_m : float
        Median spacing of the input points. [m]
    fit_bin_m : float
        Width of the arc-length bins dense input was averaged in, 0 when not binned. [m]
    fit_knot_m : float
        Knot spacing of the fitted curve. [m]
    smoothing_m : numpy.ndarray or None
        (N,) smoothing length the fit chose at each point (short in tight corners, long on
        straights and long constant-radius corners). [m]
    """

    name: str
    source: str
    closed: bool
    step_m: float
    length_m: float
    distance_m: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    z_m: np.ndarray
    curvature_1pm: np.ndarray
    grade_rad: np.ndarray
    bank_rad: np.ndarray
    width_m: np.ndarray
    corners: tuple[Corner, ...]
    sector_starts_m: tuple[float, ...]
    width_left_m: np.ndarray | None = None
    noise_m: float = float("nan")
    noise_given: bool = False
    input_points: int = 0
    input_spacing_m: float = float("nan")
    fit_bin_m: float = 0.0
    fit_knot_m: float = float("nan")
    smoothing_m: np.ndarray | None = None

    @property
    def n(self) -> int:
        """Number of points N. [-]"""
        return int(self.distance_m.shape[0])


# --------------------------------------------------------------------------------------------
# Geodesy
# --------------------------------------------------------------------------------------------


def latlon_to_local(lat_deg, lon_deg, lat0_deg: float | None = None,
                    lon0_deg: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Project WGS-84 latitude/longitude onto the local tangent plane (east, north).

    The points go to Earth-centred Earth-fixed coordinates on the WGS-84 ellipsoid (height 0)
    and are rotated into the east-north-up frame at the reference point; the up component is
    dropped. Over a few kilometres the horizontal distances agree with geodesic distances to
    better than 1e-5 relative (the tangent plane departs from the ellipsoid by ``d²/(2R)``).

    Parameters
    ----------
    lat_deg, lon_deg : array_like
        Geodetic latitude and longitude. [deg]
    lat0_deg, lon0_deg : float, optional
        Reference point; default the centre of the points on the ellipsoid (the mean of their
        Earth-centred vectors, projected back to the surface), which is right across the
        antimeridian and near a pole, where a mean longitude is not. [deg]

    Returns
    -------
    tuple of numpy.ndarray
        East and north coordinates. [m]

    References
    ----------
    .. [1] NIMA TR8350.2, Department of Defense World Geodetic System 1984, 3rd ed., 2000,
       eq. 4-14 (geodetic to ECEF) and table 3.1 (constants).
    """
    lat = np.radians(np.asarray(lat_deg, dtype=float))
    lon = np.radians(np.asarray(lon_deg, dtype=float))
    e2 = _WGS84_F * (2.0 - _WGS84_F)

    def ecef(la, lo):
        n = _WGS84_A / np.sqrt(1.0 - e2 * np.sin(la) ** 2)  # [1] eq. 4-15
        return (n * np.cos(la) * np.cos(lo), n * np.cos(la) * np.sin(lo),
                n * (1.0 - e2) * np.sin(la))  # [1] eq. 4-14, h = 0

    X, Y, Z = ecef(lat, lon)
    c_lat, c_lon = _centre_latlon(X, Y, Z, e2)
    lat0 = math.radians(lat0_deg) if lat0_deg is not None else c_lat
    lon0 = math.radians(lon0_deg) if lon0_deg is not None else c_lon
    X0, Y0, Z0 = (float(c) for c in ecef(lat0, lon0))
    dx, dy, dz = X - X0, Y - Y0, Z - Z0
    sl, cl = math.sin(lon0), math.cos(lon0)
    sp, cp = math.sin(lat0), math.cos(lat0)
    east = -sl * dx + cl * dy
    north = -sp * cl * dx - sp * sl * dy + cp * dz
    return east, north


def _centre_latlon(X: np.ndarray, Y: np.ndarray, Z: np.ndarray, e2: float) -> tuple[float, float]:
    """Geodetic latitude and longitude (rad) under the mean Earth-centred position of points.

    Averaging Earth-centred vectors has no wrap-around at ±180 deg and no singularity at the
    poles (a mean longitude has both). The latitude uses the surface relation
    ``tan(lat) = Z / ((1 - e²) p)`` (NIMA TR8350.2, eq. 4-14 with h = 0); the mean lies a
    little below the surface, which moves the reference point by far less than the track size
    (any reference point near the track gives the same plane geometry to within d²/R²).
    """
    mx, my, mz = float(np.mean(X)), float(np.mean(Y)), float(np.mean(Z))
    p = math.hypot(mx, my)
    if p < 1e-9 * _WGS84_A:  # centred on a pole: any longitude
        return math.copysign(0.5 * math.pi, mz), 0.0
    return math.atan2(mz, (1.0 - e2) * p), math.atan2(my, mx)


# --------------------------------------------------------------------------------------------
# CSV reading
# --------------------------------------------------------------------------------------------

_META_RE = re.compile(r"^#\s*([A-Za-z_]+)\s*:\s*(.*?)\s*$")


def _parse_bool(text: str, source, field: str) -> bool:
    t = text.strip().lower()
    if t in ("true", "yes", "1"):
        return True
    if t in ("false", "no", "0"):
        return False
    raise InputError(f'"{text}" is not true or false; write true or false', source, field)


def _read_csv(path: Path) -> tuple[dict, dict[str, np.ndarray], list[int]]:
    """Read our CSV: metadata dict, columns (float arrays) and the file line of each row."""
    src = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found; check the path", src) from None
    except OSError as e:
        raise InputError(f"cannot read the file ({e.strerror}); check the path", src) from None
    if not raw.strip():
        raise InputError("the file is empty; give a header row (x_m,y_m or lat_deg,lon_deg) "
                         "and one row per point", src)
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):  # UTF-16 "Unicode text" export
        from lapbalance.textio import decode_text

        raw = decode_text(raw, src, "CSV text", "export the track as CSV (UTF-8)").encode()
    if b"\x00" in raw[:4096]:
        from lapbalance.textio import looks_like_utf16

        if looks_like_utf16(raw):
            raise InputError("the file is UTF-16 text without a byte-order mark; export the "
                             "track as CSV (UTF-8)", src)
        raise InputError("this is a binary file, not CSV text; export the track as CSV", src)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError("the file is not UTF-8 text; export the track as CSV (UTF-8)",
                         src) from None
    lines = text.splitlines()
    if lines and lines[0].strip().lower().strip('"') in ("sep=,", "sep=, "):
        lines[0] = ""  # a spreadsheet's "sep=," hint line
    meta: dict[str, str] = {}
    i = 0
    while i < len(lines) and (not lines[i].strip() or lines[i].lstrip().startswith("#")):
        m = _META_RE.match(lines[i].strip())
        if m:
            meta[m.group(1).lower()] = m.group(2)
        i += 1
    if i >= len(lines):
        raise InputError("no header row and no points; give a header row "
                         "(x_m,y_m or lat_deg,lon_deg) and one row per point", src)
    header_line = lines[i]
    header_lineno = i + 1
    if "," not in header_line:
        for delim, label in ((";", "semicolons"), ("\t", "tabs")):
            if delim in header_line:
                raise InputError(f"the header uses {label} between columns; use commas "
                                 "(x_m,y_m,...)", src, f"line {header_lineno}")
    names = [c.lower() for c in _cells(header_line)]
    if _is_number(names[0]):
        raise InputError("the first row is numbers, not a header; add a header row such as "
                         "x_m,y_m or lat_deg,lon_deg", src, f"line {header_lineno}")
    has_xy = "x_m" in names and "y_m" in names
    has_ll = "lat_deg" in names and "lon_deg" in names
    if not (has_xy or has_ll):
        unknown = [n for n in names if n not in _KNOWN_COLUMNS]
        hint = f" (unknown: {', '.join(unknown)})" if unknown else ""
        raise InputError(f"header needs columns x_m,y_m or lat_deg,lon_deg{hint}; known "
                         f"columns: {', '.join(_KNOWN_COLUMNS)}", src, f"line {header_lineno}")
    if has_xy and has_ll:
        raise InputError("header has both x_m,y_m and lat_deg,lon_deg; keep one pair", src,
                         f"line {header_lineno}")
    if len(set(names)) != len(names):
        raise InputError("a column name appears twice in the header; keep one", src,
                         f"line {header_lineno}")
    cols = [n for n in names if n in _KNOWN_COLUMNS]
    idx = {n: names.index(n) for n in cols}
    data: dict[str, list[float]] = {n: [] for n in cols}
    linenos: list[int] = []
    for j in range(i + 1, len(lines)):
        line = lines[j]
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        cells = _cells(line)
        if len(cells) != len(names):
            if len(cells) == 1 and (";" in line or "\t" in line):
                raise InputError("values are separated by semicolons or tabs; use commas", src,
                                 f"line {j + 1}")
            raise InputError(f"{len(cells)} values but the header has {len(names)} columns; "
                             "give one value per column", src, f"line {j + 1}")
        for n in cols:
            cell = cells[idx[n]].strip()
            try:
                v = float(cell)
            except ValueError:
                raise InputError(f'column {n} = "{clip(cell)}" is not a number; write a plain '
                                 "number (decimal point, no units)", src, f"line {j + 1}"
                                 ) from None
            if not math.isfinite(v):
                raise InputError(f"column {n} = {cell} is not a finite number; give a value "
                                 "or remove the row", src, f"line {j + 1}")
            data[n].append(v)
        linenos.append(j + 1)
    if not linenos:
        raise InputError("the header has no rows of points below it; add one row per point",
                         src)
    return meta, {n: np.asarray(v, dtype=float) for n, v in data.items()}, linenos


def _cells(line: str) -> list[str]:
    """Cells of a CSV line; quoted cells (a spreadsheet export quoting every cell) too."""
    if '"' not in line:
        return [c.strip() for c in line.split(",")]
    from lapbalance.textio import csv_cells

    return csv_cells(line)


def _is_number(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


# --------------------------------------------------------------------------------------------
# Public entry points
# --------------------------------------------------------------------------------------------


def load_track(path, step_m: float = 1.0, closed: bool | None = None,
               noise_m: float | None = None) -> Track:
    """Load a track centreline from our CSV format and resample it.

    Parameters
    ----------
    path : str or Path
        CSV file (see the module docstring for the format). [-]
    step_m : float
        Requested spacing of the resampled points. [m]
    closed : bool, optional
        Force a closed (True) or open (False) track; default: the file's ``# closed:`` line,
        else closed when the ends are close together and the path runs on through the closing
        segment (it does not turn back). [-]
    noise_m : float, optional
        Position noise of the points (standard deviation); default: estimated from the
        points. 0 trusts the points as exact. [m]

    Returns
    -------
    Track
        The resampled track. [-]
    """
    path = Path(path)
    src = str(path)
    meta, cols, linenos = _read_csv(path)
    if closed is None and "closed" in meta:
        closed = _parse_bool(meta["closed"], src, "# closed")
    sectors = None
    if "sectors_m" in meta:
        try:
            sectors = [float(v) for v in meta["sectors_m"].replace(";", ",").split(",")
                       if v.strip()]
        except ValueError:
            raise InputError(f'"{meta["sectors_m"]}" is not a list of numbers; write e.g. '
                             "# sectors_m: 0, 1700, 3400", src, "# sectors_m") from None
    if "lat_deg" in cols:
        lat, lon = cols["lat_deg"], cols["lon_deg"]
        bad = np.flatnonzero(np.abs(lat) > 90.0)
        if bad.size:
            raise InputError(f"lat_deg = {lat[bad[0]]:g} is outside -90..90; check the column "
                             "order (lat_deg before lon_deg?)", src, f"line {linenos[bad[0]]}")
        bad = np.flatnonzero(np.abs(lon) > 180.0)
        if bad.size:
            raise InputError(f"lon_deg = {lon[bad[0]]:g} is outside -180..180; give degrees "
                             "east in -180..180", src, f"line {linenos[bad[0]]}")
        _check_radians(lat, lon, src)
        x, y = latlon_to_local(lat, lon)
    else:
        x, y = cols["x_m"], cols["y_m"]
        _check_units_xy(x, y, src)
    width, left = _split_widths(cols, src, linenos)
    tr = _build(x, y, cols.get("z_m"), cols.get("bank_deg"), width,
                closed=closed, step_m=step_m, name=meta.get("name") or path.stem,
                source=src, sector_starts_m=sectors, rows=linenos, noise_m=noise_m)
    if left is not None:
        tr = _with_left_width(tr, x, y, left)
    return tr


def _split_widths(cols, src, linenos):
    """Total width and the left part from ``width_m`` or ``width_left_m``/``width_right_m``."""
    has_l, has_r = "width_left_m" in cols, "width_right_m" in cols
    if not (has_l or has_r):
        return cols.get("width_m"), None
    if "width_m" in cols:
        raise InputError("give width_m or width_left_m and width_right_m, not both", src,
                         "width_m")
    if has_l != has_r:
        raise InputError("width_left_m and width_right_m go together; give both (distances "
                         "from the points to the left and right edges)", src,
                         "width_right_m" if has_l else "width_left_m")
    wl, wr = cols["width_left_m"], cols["width_right_m"]
    for name, w in (("width_left_m", wl), ("width_right_m", wr)):
        bad = np.flatnonzero(w < 0)
        if bad.size:
            raise InputError(f"{name} = {w[bad[0]]:g} must be >= 0", src,
                             f"line {linenos[bad[0]]}")
    return wl + wr, wl


def _with_left_width(tr: Track, x, y, left) -> Track:
    """Carry the left edge distance of the file's points onto the resampled steps (by the
    chord length of the points, stretched to the track's length)."""
    import dataclasses

    x, y, left = (np.asarray(a, dtype=float) for a in (x, y, left))
    seg = np.hypot(np.diff(x), np.diff(y))
    keep = np.concatenate([[True], seg > DUPLICATE_M])
    x, y, left = x[keep], y[keep], left[keep]
    if tr.closed and math.hypot(x[-1] - x[0], y[-1] - y[0]) <= DUPLICATE_M:
        x, y, left = x[:-1], y[:-1], left[:-1]
    u = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    if tr.closed:
        total = u[-1] + math.hypot(x[-1] - x[0], y[-1] - y[0])
        wl = np.interp(tr.distance_m * (total / tr.length_m), np.append(u, total),
                       np.append(left, left[0]))
    else:
        wl = np.interp(tr.distance_m * (u[-1] / tr.length_m), u, left)
    return dataclasses.replace(tr, width_left_m=np.ascontiguousarray(np.minimum(wl, tr.width_m)))


def make_track(x, y, z=None, bank_deg=None, width=None, *, closed=None, step_m=1.0, name="",
               source="", sector_starts_m=None, noise_m=None) -> Track:
    """Build a track from centreline points given in memory.

    Parameters
    ----------
    x, y : array_like
        (M,) centreline points in a local plane, in driving order. [m]
    z : array_like, optional
        (M,) elevation. [m]
    bank_deg : array_like, optional
        (M,) banking, positive when the left side is lower. [deg]
    width : array_like, optional
        (M,) track width. [m]
    closed : bool, optional
        Closed circuit or open stage; default closed when the ends are close. [-]
    step_m : float
        Requested spacing of the resampled points. [m]
    name, source : str
        Labels. [-]
    sector_starts_m : sequence of float, optional
        Sector start distances, first 0; default three equal sectors. [m]
    noise_m : float, optional
        Position noise of the points (standard deviation); default: estimated. [m]

    Returns
    -------
    Track
        The resampled track. [-]
    """
    arrs = []
    for label, a in (("x", x), ("y", y), ("z", z), ("bank_deg", bank_deg), ("width", width)):
        if a is None:
            arrs.append(None)
            continue
        a = np.asarray(a, dtype=float).ravel()
        if not np.all(np.isfinite(a)):
            k = int(np.flatnonzero(~np.isfinite(a))[0])
            raise InputError(f"{label}[{k}] is not finite; give finite numbers",
                             source or None, label)
        arrs.append(a)
    n = arrs[0].size
    for label, a in zip(("y", "z", "bank_deg", "width"), arrs[1:], strict=True):
        if a is not None and a.size != n:
            raise InputError(f"{label} has {a.size} values but x has {n}; give one per point",
                             source or None, label)
    return _build(*arrs, closed=closed, step_m=step_m, name=name, source=source,
                  sector_starts_m=sector_starts_m, rows=None, noise_m=noise_m)


# --------------------------------------------------------------------------------------------
# Centreline fit
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Fit:
    """Result of :func:`_fit_centreline` on a uniform knot grid (internal)."""

    v: np.ndarray          # (K,) knot parameter (chord-length parameter of the input) [m]
    s: np.ndarray          # (K,) arc length of the fitted curve at the knots [m]
    x: np.ndarray          # (K,) fitted position [m]
    y: np.ndarray
    kappa: np.ndarray      # (K,) curvature [1/m]
    smooth: np.ndarray     # (K,) smoothing length chosen at each knot [m]
    length: float          # curve length (closed: the full lap) [m]
    noise_m: float         # position noise of one input point (estimated or given) [m]
    bin_m: float           # bin width of dense input, 0 when not binned [m]
    knot_m: float          # knot spacing g [m]


def _bspline_basis(tau: np.ndarray):
    """Uniform cubic B-spline basis on one knot interval, local coordinate ``tau`` in [0, 1).

    Source: de Boor, *A Practical Guide to Splines*, rev. ed., Springer 2001, ch. IX
    (uniform cubic B-spline pieces).
    """
    t2 = tau * tau
    t3 = t2 * tau
    return ((1.0 - tau) ** 3 / 6.0, (3.0 * t3 - 6.0 * t2 + 4.0) / 6.0,
            (-3.0 * t3 + 3.0 * t2 + 3.0 * tau + 1.0) / 6.0, t3 / 6.0)


class _PSpline:
    """Penalised regression spline (P-spline) on a uniform knot grid, any number of columns.

    Minimises ``sum_i w_i |p_i - f(t_i)|² + lam sum_k (Δ³ a_k)²`` over the cubic B-spline
    coefficients ``a`` (Eilers & Marx 1996, eq. 6 with a third-order difference penalty). The
    same ``lam`` for every column keeps the fit invariant to rotation of the plane. The normal
    equations are banded (half-bandwidth 3) and solved by banded Cholesky.

    References
    ----------
    .. [1] P.H.C. Eilers and B.D. Marx, "Flexible smoothing with B-splines and penalties",
       Statistical Science 11(2), 1996, 89-121.
    """

    def __init__(self, t: np.ndarray, w: np.ndarray, cols: np.ndarray, t0: float, g: float,
                 m: int):
        # m knot intervals from t0, m + 3 coefficients; data t in [t0, t0 + m g]
        self.g, self.m, self.t0 = g, m, t0
        nc = m + 3
        r = (t - t0) / g
        i = np.clip(np.floor(r).astype(np.int64), 0, m - 1)
        b = _bspline_basis(r - i)
        self.btwb = np.zeros((4, nc))  # upper banded form: row 3 - d holds offset d
        for p in range(4):
            for q in range(p, 4):
                self.btwb[3 - (q - p)] += np.bincount(i + q, weights=w * b[p] * b[q],
                                                      minlength=nc)
        self.rhs = np.zeros((nc, cols.shape[1]))
        for p in range(4):
            for c in range(cols.shape[1]):
                self.rhs[:, c] += np.bincount(i + p, weights=w * b[p] * cols[:, c],
                                              minlength=nc)
        # D3' D3 in the same banded form
        d3 = np.array([1.0, -3.0, 3.0, -1.0])
        rows = np.arange(nc - 3)
        self.dtd = np.zeros((4, nc))
        for p in range(4):
            for q in range(p, 4):
                self.dtd[3 - (q - p)] += np.bincount(rows + q, weights=np.full(
                    rows.size, d3[p] * d3[q]), minlength=nc)

    def solve(self, lam: float) -> np.ndarray:
        from scipy.linalg import solveh_banded

        ab = self.btwb + lam * self.dtd
        # a tiny ridge keeps the system regular where knots have no data (not scaled by lam)
        ab[3] += 1e-10 * max(float(np.max(self.btwb[3])), 1e-30)
        return solveh_banded(ab, self.rhs, check_finite=False)

    def evaluate(self, a: np.ndarray, t: np.ndarray):
        """Value, first and second derivative at parameters ``t`` (per column)."""
        r = (t - self.t0) / self.g
        i = np.clip(np.floor(r).astype(np.int64), 0, self.m - 1)
        tau = (r - i)[:, None]
        b = _bspline_basis(tau)
        t2 = tau * tau
        db = (-0.5 * (1.0 - tau) ** 2, 1.5 * t2 - 2.0 * tau, -1.5 * t2 + tau + 0.5, 0.5 * t2)
        ddb = (1.0 - tau, 3.0 * tau - 2.0, 1.0 - 3.0 * tau, tau)
        f = d1 = d2 = 0.0
        for p in range(4):
            ap = a[i + p]
            f = f + b[p] * ap
            d1 = d1 + db[p] * ap
            d2 = d2 + ddb[p] * ap
        return f, d1 / self.g, d2 / self.g**2


def _moving_average(a: np.ndarray, m: int, closed: bool) -> np.ndarray:
    return uniform_filter1d(a, m, mode="wrap" if closed else "nearest")


def _index_noise(x: np.ndarray, y: np.ndarray) -> float:
    """Rough position noise from sixth differences of consecutive points (robust MAD). [m]

    For white noise of standard deviation s the sixth difference has standard deviation
    ``s sqrt(924)`` (the sum of squared binomial coefficients C(12, 6)). Used only to choose the
    pre-averaging window of the parameter.
    """
    if x.size < 8:
        return 0.0
    d = []
    for a in (x, y):
        r = np.diff(a, 6)
        d.append(_mad_sigma(r) / math.sqrt(924.0))
    return float(math.sqrt(0.5 * (d[0] ** 2 + d[1] ** 2)))


def _chord_parameter(x: np.ndarray, y: np.ndarray, closed: bool) -> tuple[np.ndarray, float]:
    """Chord-length parameter of the points, taken on a moving average when the points are
    noisy compared with their spacing (so that noise does not inflate it). Returns the
    parameter and the closing chord (closed tracks). [m]"""
    seg = np.hypot(np.diff(x), np.diff(y))
    h = float(np.median(seg))
    s0 = _index_noise(x, y)
    m = 1
    if h > 0 and s0 > 0.05 * h:
        # window of m points: the noise of the averaged step (s0 sqrt(2) / m) stays below 10 %
        # of the true step, so the parameter is within 0.5 % of arc length
        m = min(int(math.ceil(10.0 * math.sqrt(2.0) * s0 / h)), max(x.size // 8, 1))
    if m > 1:
        xa, ya = _moving_average(x, m, closed), _moving_average(y, m, closed)
    else:
        xa, ya = x, y
    u = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(xa), np.diff(ya)))])
    close = math.hypot(xa[-1] - xa[0], ya[-1] - ya[0]) if closed else 0.0
    return u, close


def _bin_points(x, y, u, period, closed, width):
    """Average the points in bins of the parameter ``u`` (width about ``width``).

    Returns bin mean x, y, mean parameter and count (empty bins dropped).
    """
    total = period if closed else u[-1]
    nb = max(int(round(total / width)), 1)
    b = total / nb
    k = np.minimum((u / b).astype(np.int64), nb - 1)
    cnt = np.bincount(k, minlength=nb).astype(float)
    ok = cnt > 0
    sx = np.bincount(k, weights=x, minlength=nb)[ok]
    sy = np.bincount(k, weights=y, minlength=nb)[ok]
    su = np.bincount(k, weights=u, minlength=nb)[ok]
    c = cnt[ok]
    return sx / c, sy / c, su / c, c, b


def _fit_centreline(x, y, u, closed, period, noise_m=None, grid_m=0.0) -> _Fit:
    """Fit a smooth curve to the points and choose its smoothing length at every point.

    Method
    ------
    1. Dense points (spacing below ``FIT_BIN_M``) are averaged in bins of the chord parameter
       about ``FIT_BIN_M`` long. This averages rounding error and costs O(points).
    2. A cubic P-spline (Eilers & Marx 1996, third-difference penalty, a light penalty of about
       one knot spacing) through the (binned) points gives positions on a uniform grid of
       spacing ``g``; closed tracks are padded with wrapped copies so that it is periodic.
    3. Gaussian kernels of standard deviation ``L`` on a ladder (``SMOOTH_RATIO`` apart, up to
       ``SMOOTH_MAX_M``) smooth the grid positions and give their derivatives, by FFT
       (periodic for a closed track; an open one is extended by point reflection). A
       Gaussian kernel is positive, so a step in curvature does not overshoot.
    4. The position noise (per input point) is estimated by :func:`_estimate_noise` on the
       binned points, unless given. White noise across the path, drawn with a fixed seed,
       rides through the same fit: its curvature gives the standard deviation of the
       curvature at each length and place (a parametric bootstrap: Efron & Tibshirani, An
       Introduction to the Bootstrap, 1993, ch. 6). Rounding to a grid adds a term
       ``ROUNDING_CURVATURE_GAIN q / L²``.
    5. Each length's shrinking of a circle is undone: a Gaussian passes the wavenumber 1/R
       with the gain ``H = exp(-(L/R)²/2)``, so the fitted curvature is divided by ``1/H`` and
       the speed along the parameter by ``H`` (exact for a circle at any length).
    6. At every grid point the longest length whose curvature and parameter speed lie inside
       the confidence intervals (``±ICI_GAMMA`` standard deviations) of all shorter lengths is
       chosen: the intersection of confidence intervals rule (Goldenshluger & Nemirovski 1997;
       Katkovnik 1999). A test must fail on the majority of a short stretch to count, the
       choice is median-filtered over that stretch, and a length too noisy to tell a radius of
       ``2 MIN_RADIUS_M`` is never chosen. Straights and long constant-radius corners get a
       long length and tight hairpins a short one, so one trace can hold both.

    Returns the fit on the uniform grid (its own arc length ``s``); the caller resamples it.

    References
    ----------
    .. [1] P.H.C. Eilers and B.D. Marx, "Flexible smoothing with B-splines and penalties",
       Statistical Science 11(2), 1996, 89-121.
    .. [2] A. Goldenshluger and A. Nemirovski, "On spatially adaptive estimation of
       nonparametric regression", Mathematical Methods of Statistics 6(2), 1997, 135-170.
    .. [3] V. Katkovnik, "A new method for varying adaptive bandwidth selection", IEEE
       Transactions on Signal Processing 47(9), 1999, 2567-2571.
    """
    n = x.size
    total = period if closed else float(u[-1])
    h_in = total / (n if closed else max(n - 1, 1))
    if h_in < FIT_BIN_M:
        bx, by, bu, bw, bin_m = _bin_points(x, y, u, period, closed, FIT_BIN_M)
    else:
        bx, by, bu, bw, bin_m = x, y, u, np.ones(n), 0.0
    nb = bx.size
    h_fit = total / (nb if closed else max(nb - 1, 1))  # mean spacing of the fitted data
    if noise_m is None:
        s_b = _estimate_noise(bx, by, bu, closed, period)
        noise = s_b * math.sqrt(float(np.mean(bw)))  # per input point (white-noise scaling)
    else:
        noise = float(noise_m)
    # knots
    g_target = FIT_BIN_M if bin_m > 0 else min(max(0.5 * h_fit, FIT_BIN_M), FIT_KNOT_MAX_M)
    if closed:
        # a grid length with small prime factors keeps the periodic FFTs fast
        k_per = next_fast_len(max(int(round(total / g_target)), 8))
        g = total / k_per
    else:
        k_per = max(int(math.ceil(total / g_target)), 8)
        g = total / k_per
    # base fit: a light P-spline (length about half the data spacing) through the data gives
    # positions on the uniform grid ``tq``; two draws of white noise (one unit per unit weight)
    # ride along as extra columns: their fitted curvature gives the curvature standard
    # deviation at each smoothing length and place (a parametric bootstrap: Efron &
    # Tibshirani 1993, ch. 6)
    l_base = g
    rng = np.random.default_rng(20240601)
    draws = BOOT_DRAWS if k_per < BOOT_FEW_ABOVE else 2  # long tracks: long windows suffice
    # the noise is drawn across the path (which alone moves the curvature to first order),
    # so that the fit stays invariant to rotating or mirroring the plane
    if closed:
        tx, ty = np.roll(bx, -1) - np.roll(bx, 1), np.roll(by, -1) - np.roll(by, 1)
    else:
        tx, ty = np.gradient(bx), np.gradient(by)
    tn = np.hypot(tx, ty)
    tn[tn == 0.0] = 1.0
    nx, ny = -ty / tn, tx / tn
    z = rng.standard_normal((bw.size, draws)) / np.sqrt(bw)[:, None]
    eps = np.empty((bw.size, 2 * draws))
    eps[:, 0::2] = z * nx[:, None]
    eps[:, 1::2] = z * ny[:, None]
    data = np.column_stack([bx, by, eps])
    if closed:
        pad = 5.0 * l_base + 4.0 * g
        reps = int(math.ceil(pad / total))
        shifts = np.arange(-reps, reps + 1) * total
        t = (bu[None, :] + shifts[:, None]).ravel()
        keep = (t >= -pad) & (t <= total + pad)
        t = t[keep]
        data = np.tile(data, (shifts.size, 1))[keep]
        w = np.tile(bw, shifts.size)[keep]
        tq = np.arange(k_per) * g  # fine grid: one lap
        padk = int(math.ceil(pad / g))
        t0, mm = -padk * g, k_per + 2 * padk
    else:
        t, w = bu, bw
        tq = np.arange(k_per + 1) * g
        t0, mm = 0.0, k_per
    count = tq.size
    # noise used for the confidence intervals: at least a small share of the data spacing
    # (the base fit's own error between sparse points), never zero
    noise_fit = max(noise, NOISE_FLOOR_SPACINGS * h_fit, 1e-6)
    ps = _PSpline(t, w, data, t0, g, mm)
    rho = float(np.sum(w)) / mm  # mean weight per knot interval
    base, _, _ = ps.evaluate(ps.solve(rho * (l_base / g) ** 6), tq)
    # ladder of Gaussian smoothing lengths (standard deviation of the kernel)
    l_min = 1.5 * g
    l_max = min(SMOOTH_MAX_M, total / (4.0 if closed else 6.0))
    l_max = max(l_max, l_min)
    nlev = int(math.floor(math.log(l_max / l_min) / math.log(SMOOTH_RATIO))) + 1
    lens = l_min * SMOOTH_RATIO ** np.arange(nlev)
    # Gaussian smoothing and its derivatives by FFT: periodic for a closed track; an open one
    # is extended at both ends by point reflection (keeps a straight line straight)
    if closed:
        ext, lead = base, 0
    else:
        # the reflected stretches cover the kernel to 6 L (L <= length / 6), so the jump where
        # the FFT wraps round stays out of reach
        lead = min(int(math.ceil(6.0 * lens[-1] / g)) + 1, count - 1)
        left = 2.0 * base[0] - base[lead:0:-1]
        right = 2.0 * base[-1] - base[-2:-lead - 2:-1]
        ext = np.concatenate([left, base, right])
    nfft = ext.shape[0] if closed else next_fast_len(ext.shape[0] + 8)
    if not closed:
        ext = np.concatenate([ext, np.repeat(ext[-1:], nfft - ext.shape[0], axis=0)])
    spec = np.fft.rfft(ext, n=nfft, axis=0)
    om = 2.0 * math.pi * np.fft.rfftfreq(nfft, g)[:, None]
    mode = "wrap" if closed else "nearest"
    ks, xs, ys, sp, sd, sds = [], [], [], [], [], []
    for L in lens:
        gk = np.exp(-0.5 * (om * L) ** 2)
        f = np.fft.irfft(spec[:, :2] * gk, n=nfft, axis=0)[lead:lead + count]
        d1 = np.fft.irfft(spec * (1j * om * gk), n=nfft, axis=0)[lead:lead + count]
        d2 = np.fft.irfft(spec * (-(om**2) * gk), n=nfft, axis=0)[lead:lead + count]
        x1, y1, x2, y2 = d1[:, 0], d1[:, 1], d2[:, 0], d2[:, 1]
        sp2 = np.maximum(x1 * x1 + y1 * y1, 1e-24)
        speed = np.sqrt(sp2)
        num = x1 * y2 - y1 * x2
        kap = num / (sp2 * speed)
        var = np.zeros(count)
        var_s = np.zeros(count)
        for c in range(2, 2 + 2 * draws, 2):
            ex1, ey1, ex2, ey2 = d1[:, c], d1[:, c + 1], d2[:, c], d2[:, c + 1]
            dnum = ex1 * y2 + x1 * ey2 - ey1 * x2 - y1 * ex2
            dsp2 = 2.0 * (x1 * ex1 + y1 * ey1)
            dk = dnum / (sp2 * speed) - 1.5 * num * dsp2 / (sp2 * sp2 * speed)
            var += dk * dk / draws
            # the same noise along the path would move the speed by its derivative across
            # (isotropic noise): relative speed deviation
            dn = (ey1 * x1 - ex1 * y1) / sp2
            var_s += dn * dn / draws
        win = int(min(count, max(20.0, 6.0 * L / g)))
        var = uniform_filter1d(var, max(win, 1), mode=mode)
        var_s = uniform_filter1d(var_s, max(win, 1), mode=mode)
        sds.append(np.sqrt(noise_fit**2 * var_s + (ROUNDING_CURVATURE_GAIN * grid_m / L) ** 2
                           + SPEED_SD_FLOOR**2))
        # rounding to a grid q is not white noise where the path runs nearly along an axis:
        # there its error is a slow saw-tooth of amplitude q/2, whose curvature after a
        # smoothing length L is of order q / L² (Widrow & Kollar, Quantization Noise, 2008,
        # ch. 4: the error is bounded, not white, for slowly varying inputs)
        sq = ROUNDING_CURVATURE_GAIN * grid_m / L**2
        sd.append(np.sqrt(noise_fit**2 * var + sq * sq))
        # bias correction: a Gaussian of standard deviation L passes a circle of radius R run
        # at parameter speed c with the gain H = exp(-(L c / R)² / 2) (its transfer function
        # at wavenumber c/R); the fit shows speed c H and curvature 1 / (R H), so
        # L c / R = L * fitted speed * fitted curvature, and the fitted curvature is 1 / H
        # times too large and the arc H times too short; undone while H is above 1/2
        hk = np.clip(np.exp(-0.5 * (L * speed * kap) ** 2), 0.5, 1.0)
        ks.append(kap * hk)
        # the same gain pulls the points toward the centre of curvature (radius R H instead
        # of R): move them back along the normal by 1/kappa_true - 1/kappa_fit (signed)
        big = np.abs(kap) > 1e-12
        shift = np.where(big, (hk - 1.0) / np.where(big, kap * hk, 1.0), 0.0)
        xs.append(f[:, 0] - y1 / speed * shift)
        ys.append(f[:, 1] + x1 / speed * shift)
        sp.append(speed / hk)
    K = np.array(ks)
    sd = np.array(sd)
    # the same rule on the (relative) speed along the parameter: a long kernel that reaches
    # round a hairpin onto the other leg pulls the legs together, which leaves their
    # curvature near zero but slows the fitted curve there
    S = np.array(sp)
    S = S / np.median(S[0])
    sds = np.array(sds)
    ok = np.ones_like(K, dtype=bool)
    for val, err in ((K, sd), (S, sds)):
        lo = np.maximum.accumulate(val - ICI_GAMMA * err, axis=0)
        hi = np.minimum.accumulate(val + ICI_GAMMA * err, axis=0)
        ok &= lo <= hi
    # a test that fails at a few isolated points is a false alarm of the noise; a bias fails
    # it over a stretch: keep the majority vote over the selection window
    near = max(1, int(round(max(SELECT_SMOOTH_M, 2.0 * h_fit) / g)))
    ok = uniform_filter1d(ok.astype(float), 2 * near + 1, axis=1, mode=mode) > 0.5
    jstar = np.sum(np.logical_and.accumulate(ok, axis=0), axis=0) - 1
    # never a length whose curvature is too noisy to tell a drivable radius from noise
    useful = ICI_GAMMA * sd < 0.5 / MIN_RADIUS_M
    jfloor = np.where(useful.any(axis=0), np.argmax(useful, axis=0), nlev - 1)
    jstar = np.maximum(jstar, jfloor)
    jstar = np.maximum(jstar, 0).astype(float)
    # the chosen level steps from knot to knot: take the median nearby (a lone false alarm
    # goes; a stretch that needs a short length, such as either side of a kink in the
    # curvature, keeps it) and smooth it a little
    jsel = median_filter(jstar.astype(float), 2 * near + 1, mode=mode)
    jsel = gaussian_filter1d(jsel, 0.5 * near, mode=mode)
    j0 = np.clip(np.floor(jsel).astype(np.int64), 0, nlev - 1)
    j1 = np.minimum(j0 + 1, nlev - 1)
    fr = jsel - j0
    cols_idx = np.arange(count)

    def blend(arr):
        A = np.array(arr)
        return (1.0 - fr) * A[j0, cols_idx] + fr * A[j1, cols_idx]

    kappa = (1.0 - fr) * K[j0, cols_idx] + fr * K[j1, cols_idx]
    xb, yb, spb = blend(xs), blend(ys), blend(sp)
    smooth = lens[0] * SMOOTH_RATIO ** jsel
    # arc length at the knots (trapezoid on the speed)
    if closed:
        seg = 0.5 * g * (spb + np.roll(spb, -1))
        s = np.concatenate([[0.0], np.cumsum(seg[:-1])])
        length = float(np.sum(seg))
    else:
        seg = 0.5 * g * (spb[:-1] + spb[1:])
        s = np.concatenate([[0.0], np.cumsum(seg)])
        length = float(s[-1])
    v = tq
    return _Fit(v=v, s=s, x=xb, y=yb, kappa=kappa, smooth=smooth, length=length,
                noise_m=noise, bin_m=bin_m, knot_m=g)


# --------------------------------------------------------------------------------------------
# Processing
# --------------------------------------------------------------------------------------------


def _where(rows, k: int) -> str:
    return f"line {rows[k]}" if rows is not None else f"point {k}"


def _loo_prediction(u: np.ndarray, cols: list[np.ndarray], closed: bool, period: float,
                    side: int = 2):
    """Leave-one-out polynomial prediction of each point from ``side`` neighbours on each side
    (Lagrange interpolation of degree ``2 side - 1``).

    Returns the extended columns, the predictions at the interior points and the noise gain
    ``sqrt(1 + sum w²)`` of the prediction residual for white noise.
    """
    if closed:
        ue = np.concatenate([u[-side:] - period, u, u[:side] + period])
        cols = [np.concatenate([c[-side:], c, c[:side]]) for c in cols]
    else:
        ue = u
    n = ue.size
    t = ue[side:n - side]
    offs = [o for o in range(-side, side + 1) if o != 0]
    nodes = [ue[side + o:n - side + o] for o in offs]
    w = []
    for a in range(len(offs)):
        num = np.ones_like(t)
        den = np.ones_like(t)
        for b in range(len(offs)):
            if a != b:
                num = num * (t - nodes[b])
                den = den * (nodes[a] - nodes[b])
        w.append(num / den)
    preds = [sum(wi * c[side + o:n - side + o] for wi, o in zip(w, offs, strict=True))
             for c in cols]
    gain = np.sqrt(1.0 + sum(wi**2 for wi in w))
    return cols, preds, gain


def _mad_sigma(r: np.ndarray) -> float:
    return float(1.4826 * np.median(np.abs(r - np.median(r))))


def _estimate_noise(x: np.ndarray, y: np.ndarray, u: np.ndarray, closed: bool,
                    period: float | None = None) -> float:
    """Position noise across the path from leave-one-out quintic residuals (robust MAD). [m]

    Each point is predicted from three neighbours on each side by the quintic through them;
    the residual across the path, divided by its white-noise gain, estimates the noise (median
    absolute deviation scaled by 1.4826 for a normal distribution: Hampel, J. Am. Stat. Assoc.
    69, 1974). A quintic passes a smooth curve with an error of order ``h^6`` (a circle of
    radius 15 m sampled every 5 m: about 1 mm), so the estimate sees the noise, not the shape.
    Long traces are estimated on every k-th point (at most ``NOISE_SAMPLE`` of them).
    """
    side = 3
    if u.size < 2 * side + 2:
        return 0.0
    if period is None:
        period = u[-1] + math.hypot(x[-1] - x[0], y[-1] - y[0])
    if closed:
        ue = np.concatenate([u[-side:] - period, u, u[:side] + period])
        xe = np.concatenate([x[-side:], x, x[:side]])
        ye = np.concatenate([y[-side:], y, y[:side]])
    else:
        ue, xe, ye = u, x, y
    n = ue.size
    every = max(1, (n - 2 * side) // NOISE_SAMPLE)
    centre = np.arange(side, n - side, every)
    offs = [o for o in range(-side, side + 1) if o != 0]
    t = ue[centre]
    nodes = [ue[centre + o] for o in offs]
    px = np.zeros(centre.size)
    py = np.zeros(centre.size)
    w2 = np.zeros(centre.size)
    for a, oa in enumerate(offs):
        num = np.ones_like(t)
        den = np.ones_like(t)
        for b in range(len(offs)):
            if a != b:
                num = num * (t - nodes[b])
                den = den * (nodes[a] - nodes[b])
        wa = num / den
        px += wa * xe[centre + oa]
        py += wa * ye[centre + oa]
        w2 += wa * wa
    gain = np.sqrt(1.0 + w2)
    # only the residual across the path: noise along the path is absorbed by the chord
    # parameter, which is itself built from the points
    tx, ty = xe[centre + 1] - xe[centre - 1], ye[centre + 1] - ye[centre - 1]
    tn = np.hypot(tx, ty)
    tn[tn == 0.0] = 1.0
    r = ((xe[centre] - px) * ty - (ye[centre] - py) * tx) / tn / gain
    return _mad_sigma(r)


def _elevation_sigma(z: np.ndarray, u: np.ndarray, closed: bool, gap: float,
                     spacing_m: float) -> float:
    """Gaussian low-pass width for elevation, widened for a noisy elevation trace. [m]

    The grade noise of Gaussian-smoothed white noise (standard deviation ``s_z`` at spacing
    ``h``) is ``sqrt(s_z² h / (4 sqrt(pi) sigma³))``; sigma is chosen so that it stays near
    0.5 % grade, never below ``ELEVATION_SIGMA_M``. Engineering judgement.
    """
    if u.size < 5:
        return ELEVATION_SIGMA_M
    (ze,), (pz,), gain = _loo_prediction(u, [z], closed, u[-1] + gap)
    s_z = _mad_sigma((ze[2:-2] - pz) / gain)
    sig = (s_z**2 * spacing_m / (4.0 * math.sqrt(math.pi) * 0.005**2)) ** (1.0 / 3.0)
    return max(ELEVATION_SIGMA_M, sig)


def _rounding_grid(a: np.ndarray) -> float:
    """Largest power-of-ten grid (1e-9 .. 1) that all values lie on, 0 for none. [unit of a]"""
    a = np.asarray(a, dtype=float)
    if a.size > 20000:
        a = a[:: a.size // 20000]
    scale = max(float(np.max(np.abs(a))), 1.0)
    for k in range(0, 10):
        f = a * 10.0**k
        if np.max(np.abs(f - np.rint(f))) <= max(1e-3, 1e-12 * scale * 10.0**k):
            return 10.0**-k
    return 0.0


def _check_units_xy(x, y, src):
    """x/y that span a few metres with points millimetres apart were typed in kilometres."""
    seg = np.hypot(np.diff(x), np.diff(y))
    seg = seg[seg > 0]
    if seg.size == 0:
        return
    span = max(float(np.ptp(x)), float(np.ptp(y)))
    med = float(np.median(seg))
    if span < KM_HINT_SPAN_M and med < KM_HINT_SPACING_M:
        raise InputError(f"x_m/y_m span only {span:.3g} m with points {1000 * med:.2g} mm "
                         "apart: looks like kilometres; multiply by 1000 to give metres",
                         src, "x_m")


def _check_radians(lat, lon, src):
    """lat/lon that all fit in ±pi/2, ±pi and make a tiny trace as degrees are radians."""
    if not (np.all(np.abs(lat) <= 0.5 * math.pi) and np.all(np.abs(lon) <= math.pi)):
        return
    e, nn = latlon_to_local(lat, lon)
    seg = np.hypot(np.diff(e), np.diff(nn))
    seg = seg[seg > 0]
    if seg.size == 0:
        return
    length = float(np.sum(seg))
    med = float(np.median(seg))
    if length < RAD_HINT_LENGTH_M and med < RAD_HINT_SPACING_M:
        raise InputError(f"lat_deg/lon_deg all lie within ±1.571/±3.142 and the trace is only "
                         f"{length:.3g} m long as degrees: looks like radians; multiply by "
                         "57.2958 to give degrees", src, "lat_deg")


def _check_reversal(x, y, u, noise, spacing, src, rows):
    """Error where the path turns back on itself (a turn above ``REVERSAL_TURN_DEG`` between
    chords a few spacings long, longer than the noise): a smoothed fit would hide it."""
    reach = max(spacing, 10.0 * noise, 1.0)
    if u[-1] < 3.0 * reach:
        return
    k = np.unique(np.searchsorted(u, np.arange(0.0, u[-1], reach)))
    if k.size < 3:
        return
    cx, cy = np.diff(x[k]), np.diff(y[k])
    cn = np.hypot(cx, cy)
    ok = cn > 0.25 * reach  # a chord across the turning point itself may be very short
    cn[~ok] = 1.0
    cos1 = np.where(ok[:-1] & ok[1:], (cx[:-1] * cx[1:] + cy[:-1] * cy[1:])
                    / (cn[:-1] * cn[1:]), 1.0)
    cos2 = np.ones_like(cos1)
    if cx.size > 2:
        # across a short middle chord (the turning point itself)
        cos2[:-1] = np.where(ok[:-2] & ok[2:] & ~ok[1:-1], (cx[:-2] * cx[2:] + cy[:-2] * cy[2:])
                             / (cn[:-2] * cn[2:]), 1.0)
    cosang = np.minimum(cos1, cos2)
    bad = np.flatnonzero(cosang < math.cos(math.radians(REVERSAL_TURN_DEG)))
    if bad.size:
        j = int(k[bad[0] + 1])
        turn = math.degrees(math.acos(max(-1.0, min(1.0, float(cosang[bad[0]])))))
        raise InputError(f"radius 0 m at {u[j]:.0f} m along the track (near {_where(rows, j)}; "
                         f"the path turns back by {turn:.0f} deg within {2 * reach:.1f} m): the "
                         "trace zig-zags or crosses itself; check the points near there", src)


def _end_tangents(x, y, reach):
    """Unit directions of travel at the end and at the start, over about ``reach`` metres."""
    d_end = np.hypot(x - x[-1], y - y[-1])
    far = np.flatnonzero(d_end >= reach)
    j = int(far[-1]) if far.size else 0
    te = np.array([x[-1] - x[j], y[-1] - y[j]])
    d_st = np.hypot(x - x[0], y - y[0])
    far = np.flatnonzero(d_st >= reach)
    k = int(far[0]) if far.size else x.size - 1
    ts = np.array([x[k] - x[0], y[k] - y[0]])
    return te / (np.linalg.norm(te) or 1.0), ts / (np.linalg.norm(ts) or 1.0)


def _closing_turn_deg(x, y, reach, noise=0.0) -> float:
    """Largest turn (deg) of the path through the closing segment (last point -> first).

    The closing chord is compared with the direction of travel at the end and at the start; a
    chord shorter than a tenth of ``reach`` (or than 5 noise standard deviations, when its
    direction is mostly noise) is skipped and the two directions are compared.
    """
    te, ts = _end_tangents(x, y, reach)
    c = np.array([x[0] - x[-1], y[0] - y[-1]])
    cn = float(np.linalg.norm(c))

    def ang(a, b):
        return math.degrees(math.acos(max(-1.0, min(1.0, float(np.dot(a, b))))))

    if cn < max(0.1 * reach, 5.0 * noise):
        return ang(te, ts)
    c = c / cn
    return max(ang(te, c), ang(c, ts))


def _build(x, y, z, bank_deg, width, *, closed, step_m, name, source, sector_starts_m, rows,
           noise_m=None, grid_m=None):
    src = source or None
    if not (isinstance(step_m, int | float) and math.isfinite(step_m) and step_m > 0):
        raise InputError(f"step = {step_m} must be a positive number of metres; try 1.0",
                         src, "step_m")
    if noise_m is not None and not (isinstance(noise_m, int | float) and
                                    math.isfinite(noise_m) and 0 <= noise_m <= MAX_NOISE_M):
        raise InputError(f"noise = {noise_m} must be a number of metres from 0 to "
                         f"{MAX_NOISE_M:g}; leave it out to estimate it from the points",
                         src, "noise_m")
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    rows_arr = np.asarray(rows) if rows is not None else None
    if x.size < 2:
        raise InputError(f"only {x.size} point(s); give at least {MIN_POINTS} distinct points "
                         "along the centreline", src)
    # drop repeated points (consecutive duplicates)
    seg = np.hypot(np.diff(x), np.diff(y))
    keep = np.concatenate([[True], seg > DUPLICATE_M])
    idx = np.flatnonzero(keep)
    if idx.size < MIN_POINTS:
        raise InputError(f"only {idx.size} distinct point(s); give at least {MIN_POINTS} "
                         "distinct points along the centreline", src)

    def take(a):
        return None if a is None else np.asarray(a, dtype=float)[idx]

    x, y, z, bank_deg, width = take(x), take(y), take(z), take(bank_deg), take(width)
    rws = None if rows_arr is None else rows_arr[idx]
    seg = np.hypot(np.diff(x), np.diff(y))
    med = float(np.median(seg))
    jump_lim = max(JUMP_SPACINGS * med, JUMP_MIN_M)
    big = np.flatnonzero(seg > jump_lim)
    if big.size:
        k = int(big[0]) + 1
        raise InputError(f"jump of {seg[k - 1]:.0f} m from the previous point (median spacing "
                         f"{med:.2g} m); fill the gap or remove the stray point",
                         src, _where(rws, k))
    gap = math.hypot(x[-1] - x[0], y[-1] - y[0])
    if gap <= DUPLICATE_M and x.size > MIN_POINTS:  # last point repeats the first
        if closed is None or closed:
            x, y = x[:-1], y[:-1]
            z, bank_deg, width = (None if a is None else a[:-1] for a in (z, bank_deg, width))
            rws = None if rws is None else rws[:-1]
            gap = math.hypot(x[-1] - x[0], y[-1] - y[0])
            repeated_end = True
        else:
            repeated_end = False
    else:
        repeated_end = False
    # direction of travel over a few spacings (and beyond the noise) at both ends
    s0 = _index_noise(x, y)
    reach = max(3.0 * med, 10.0 * s0, 1.0, 1.5 * gap)
    turn = _closing_turn_deg(x, y, reach, s0)
    if closed is None:
        closed = (gap <= max(CLOSE_GAP_SPACINGS * med, CLOSE_GAP_MIN_M) or repeated_end) \
            and turn < CLOSE_MAX_TURN_DEG
    elif closed:
        if gap > jump_lim:
            raise InputError(f"closed track but its ends are {gap:.0f} m apart; mark it open "
                             "(# closed: false / --open) or add the missing points", src)
        if turn >= CLOSE_MAX_TURN_DEG:
            raise InputError(f"closed track but the path turns back by {turn:.0f} deg from the "
                             "last point to the first; mark it open (# closed: false / --open) "
                             "or give the points of a full lap", src)
    _check_bank(bank_deg, src, rws)
    if width is not None and np.any(width <= 0):
        k = int(np.flatnonzero(width <= 0)[0])
        raise InputError(f"width_m = {width[k]:g} must be > 0", src, _where(rws, k))

    noise_raw = _estimate_noise(x, y, np.concatenate(
        [[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))]), closed)
    if noise_m is None and noise_raw > max(ZIGZAG_NOISE_SPACINGS * med, ZIGZAG_MIN_M):
        raise InputError(f"the points step sideways by about {noise_raw:.1f} m from one to the "
                         f"next (median spacing {med:.2g} m): the trace zig-zags; give the "
                         "points in driving order along the centreline", src)
    # parameter of the points (chord length, robust to noise)
    u, close_u = _chord_parameter(x, y, closed)
    period = u[-1] + close_u if closed else None
    if closed and close_u <= 0.0:
        period = u[-1] + max(gap, med)
    if z is not None:
        _check_grade(z, u, closed, (period - u[-1]) if closed else gap, src, rws)
    if grid_m is None:
        grid_m = max(_rounding_grid(x), _rounding_grid(y))
    _check_reversal(x, y, u, s0, med, src, rws)
    fit = _fit_centreline(x, y, u, closed, period, noise_m, grid_m)
    length = fit.length

    if closed:
        n = max(int(round(length / step_m)), MIN_POINTS)
        ds = length / n
    else:
        n = max(int(round(length / step_m)) + 1, MIN_POINTS)
        ds = length / (n - 1)
    dist = np.arange(n, dtype=float) * ds
    if not closed:
        dist[-1] = length
    xi, yi, kappa, u_at, smooth = _resample(fit, dist, closed, period)
    kmax = np.abs(kappa)
    kk = int(np.argmax(kmax))
    if kmax[kk] > 1.0 / MIN_RADIUS_M:
        near = min(int(np.searchsorted(u, u_at[kk])), u.size - 1)
        raise InputError(f"radius {1.0 / kmax[kk]:.2f} m at {dist[kk]:.0f} m along the track "
                         f"(near {_where(rws, near)}; below {MIN_RADIUS_M:g} m): the trace "
                         "zig-zags or crosses itself; check the points near there", src)

    # per-point channels, interpolated in the chord parameter of the points
    period_u = period if closed else None
    zi = _interp(z, u, u_at, period_u) if z is not None else np.zeros(n)
    if z is not None:
        sig_z = _elevation_sigma(z, u, closed, (period - u[-1]) if closed else gap, med)
        if closed:
            zs = gaussian_filter1d(zi, sig_z / ds, mode="wrap", truncate=4.0)
            dz = (np.roll(zs, -1) - np.roll(zs, 1)) / (2.0 * ds)
        else:
            zs = _smooth_open(zi, sig_z / ds)
            dz = np.gradient(zs, ds)
        grade = np.arctan(dz)
    else:
        grade = np.zeros(n)
    bank = (np.radians(_interp(bank_deg, u, u_at, period_u)) if bank_deg is not None
            else np.zeros(n))
    wid = _interp(width, u, u_at, period_u) if width is not None else np.full(n, np.nan)

    sectors = _sectors(sector_starts_m, length, src)
    corners = detect_corners(dist, kappa, closed)
    c = np.ascontiguousarray
    return Track(name=name, source=source, closed=bool(closed), step_m=float(ds),
                 length_m=length, distance_m=c(dist), x_m=c(xi), y_m=c(yi), z_m=c(zi),
                 curvature_1pm=c(kappa), grade_rad=c(grade), bank_rad=c(bank), width_m=c(wid),
                 corners=corners, sector_starts_m=sectors, noise_m=float(fit.noise_m),
                 noise_given=noise_m is not None, input_points=int(x.size),
                 input_spacing_m=med, fit_bin_m=float(fit.bin_m), fit_knot_m=float(fit.knot_m),
                 smoothing_m=c(smooth))


def _resample(fit: _Fit, dist: np.ndarray, closed: bool, period):
    """Positions, curvature, chord parameter and smoothing length of the fitted curve at the
    output distances (cubic interpolation of the fitted curve along its arc length)."""
    if closed:
        s = np.append(fit.s, fit.length)

        def per(a):
            return np.append(a, a[0])

        xyk = cubic_spline(s, np.column_stack([per(fit.x), per(fit.y), per(fit.kappa)]),
                           dist, periodic=True)
        u_at = np.interp(dist, s, np.append(fit.v, period))
        sm = np.interp(dist, s, per(fit.smooth))
    else:
        xyk = cubic_spline(fit.s, np.column_stack([fit.x, fit.y, fit.kappa]), dist)
        u_at = np.interp(dist, fit.s, fit.v)
        sm = np.interp(dist, fit.s, fit.smooth)
    return xyk[:, 0], xyk[:, 1], xyk[:, 2], u_at, sm


def _smooth_open(a: np.ndarray, sigma: float) -> np.ndarray:
    """Gaussian low-pass of an open trace, padded by point reflection at both ends so that a
    straight-line trend (a constant grade) passes unchanged up to the ends."""
    pad = min(int(4.0 * sigma) + 1, a.size - 1)
    if pad < 1:
        return a.copy()
    # reflect about a straight-line fit of the end stretch, not the (noisy) end point
    m = np.arange(pad + 1, dtype=float)
    c0 = np.polyfit(m, a[:pad + 1], 1)
    c1 = np.polyfit(m, a[-1:-pad - 2:-1], 1)
    left = 2.0 * c0[1] - a[pad:0:-1]
    right = 2.0 * c1[1] - a[-2:-pad - 2:-1]
    ext = np.concatenate([left, a, right])
    return gaussian_filter1d(ext, sigma, mode="nearest", truncate=4.0)[pad:pad + a.size]


def _interp(a, u, ut, period):
    if period is not None:
        return np.interp(ut, np.append(u, period), np.append(a, a[0]))
    return np.interp(ut, u, a)


def _check_bank(bank_deg, src, rows):
    if bank_deg is None:
        return
    a = np.abs(bank_deg)
    if np.any(a > MAX_BANK_DEG):
        k = int(np.flatnonzero(a > MAX_BANK_DEG)[0])
        raise InputError(f"bank_deg = {bank_deg[k]:g} is beyond ±{MAX_BANK_DEG:g} deg; give "
                         "the bank angle in degrees", src, _where(rows, k))
    if np.any(a > 0) and np.all(a < BANK_RADIANS_HINT_DEG):
        raise InputError(f"bank_deg values are all below {BANK_RADIANS_HINT_DEG} deg: looks "
                         "like radians; multiply by 57.2958 to give degrees", src, "bank_deg")


def _check_grade(z, u, closed, gap, src, rows):
    """Error on an elevation step steeper than MAX_GRADE over GRADE_SPAN_M of road."""
    uu, zz = u, z
    if closed:
        uu = np.append(u, u[-1] + gap)
        zz = np.append(z, z[0])
    j = np.searchsorted(uu, uu + GRADE_SPAN_M)
    ok = j < uu.size
    i = np.flatnonzero(ok)
    if i.size == 0:
        i, j = np.array([0]), np.array([uu.size - 1])
    else:
        j = j[ok]
    g = np.abs(zz[j] - zz[i]) / (uu[j] - uu[i])
    bad = np.flatnonzero(g > MAX_GRADE)
    if bad.size:
        a, b = int(i[bad[0]]), int(j[bad[0]])
        k = a + int(np.argmax(np.abs(np.diff(zz[a:b + 1]))))  # steepest step in the span
        dz, du = zz[k + 1] - zz[k], uu[k + 1] - uu[k]
        raise InputError(f"z_m changes by {zz[b] - zz[a]:+.1f} m over {uu[b] - uu[a]:.0f} m "
                         f"(grade {100 * g[bad[0]]:.0f} %, above {100 * MAX_GRADE:.0f} %; "
                         f"steepest step {dz:+.1f} m over {du:.1f} m here); check the "
                         "elevation unit (metres) and the row", src,
                         _where(rows, (k + 1) % z.size))


def _sectors(starts, length, src):
    if starts is None:
        return (0.0, length / 3.0, 2.0 * length / 3.0)
    s = [float(v) for v in starts]
    if not s or s[0] != 0.0:
        raise InputError(f"sector starts {s} must begin with 0; write e.g. "
                         f"# sectors_m: 0, {length / 3:.0f}, {2 * length / 3:.0f}", src,
                         "sectors_m")
    if any(b <= a for a, b in zip(s, s[1:], strict=False)) or s[-1] >= length:
        raise InputError(f"sector starts {s} must increase and stay below the length "
                         f"{length:.0f} m", src, "sectors_m")
    return tuple(s)


# --------------------------------------------------------------------------------------------
# Corners
# --------------------------------------------------------------------------------------------


def detect_corners(distance_m, curvature_1pm, closed, on_1pm: float = CORNER_ON_1PM,
                   off_1pm: float = CORNER_OFF_1PM, merge_m: float = CORNER_MERGE_M,
                   min_turn_deg: float = CORNER_MIN_TURN_DEG) -> tuple[Corner, ...]:
    """Find corners on a curvature trace by hysteresis.

    A corner starts where |curvature| rises above ``on_1pm`` and ends where it falls below
    ``off_1pm`` or changes sign. Same-direction corners separated by less than ``merge_m`` merge;
    corners whose heading change is below ``min_turn_deg`` are dropped. On a closed track a
    corner may run over the start line (then ``exit_m < entry_m``). The defaults are
    engineering judgement (see the module constants).

    Parameters
    ----------
    distance_m : array_like
        (N,) uniform distances from the start. [m]
    curvature_1pm : array_like
        (N,) signed curvature, left positive. [1/m]
    closed : bool
        Closed circuit (the trace wraps). [-]
    on_1pm, off_1pm : float
        Enter and leave thresholds on |curvature|. [1/m]
    merge_m : float
        Largest straight between two same-direction corners that merge. [m]
    min_turn_deg : float
        Smallest heading change of a kept corner. [deg]

    Returns
    -------
    tuple of Corner
        Corners in driving order, ids from 1. [-]
    """
    d = np.asarray(distance_m, dtype=float)
    k = np.asarray(curvature_1pm, dtype=float)
    n = d.size
    if n < 2:
        return ()
    ds = (d[-1] - d[0]) / (n - 1)
    shift = 0
    if closed:
        quiet = np.flatnonzero(np.abs(k) < off_1pm)
        ak = np.abs(k)
        ring = (ak.max() > 0 and (np.all(k > 0) or np.all(k < 0))
                and ak.min() >= RING_MIN_SHARE * ak.max())
        if quiet.size == 0 or ring:
            # no straight anywhere (a circle, or a ring whose curvature never falls below
            # RING_MIN_SHARE of its largest): one corner, the whole lap
            j = int(np.argmax(np.abs(k)))
            return (Corner(1, "left" if k[j] > 0 else "right", 0.0, float(d[j]),
                           float(d[-1]), float(1.0 / abs(k[j]))),)
        shift = int(quiet[0])
        k = np.roll(k, -shift)
    # hysteresis into [start, end) index runs
    runs: list[list[int]] = []
    inside = False
    sign = 0
    for i in range(n):
        a = k[i]
        if inside:
            if abs(a) < off_1pm or a * sign < 0:
                runs[-1][1] = i
                inside = False
        if not inside and abs(a) > on_1pm:
            inside = True
            sign = 1 if a > 0 else -1
            runs.append([i, n, sign])
    # merge same-direction neighbours separated by a short gap
    merged: list[list[int]] = []
    for r in runs:
        if merged and r[2] == merged[-1][2] and (r[0] - merged[-1][1]) * ds < merge_m:
            merged[-1][1] = r[1]
        else:
            merged.append(r)
    corners = []
    for a, b, sgn in merged:
        seg = k[a:b]
        if abs(np.sum(seg)) * ds < math.radians(min_turn_deg):
            continue
        j = a + int(np.argmax(np.abs(seg)))

        def pos(i):
            return ((i + shift) % n) * ds if closed else float(d[min(i, n - 1)])

        corners.append(Corner(len(corners) + 1, "left" if sgn > 0 else "right", pos(a), pos(j),
                              pos(b - 1) if not closed else ((b - 1 + shift) % n) * ds,
                              float(1.0 / abs(k[j]))))
    if closed and corners:
        # driving order from the start line: sort by entry, a wrapping corner last
        corners.sort(key=lambda c: c.entry_m)
        corners = [Corner(i + 1, c.direction, c.entry_m, c.apex_m, c.exit_m, c.min_radius_m)
                   for i, c in enumerate(corners)]
    return tuple(corners)
