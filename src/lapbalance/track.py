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
``max(3 x median spacing, 10 m)``; a last point that repeats the first is dropped.

Corners are numbered in order of their entry from the start line; on a closed track a corner
that runs over the start line (``exit_m < entry_m``) enters last, so it carries the last id.

CSV format
----------
A header row is required, then one row per point, comma separated. Columns: ``x_m,y_m`` (a
local plane) or ``lat_deg,lon_deg`` (WGS-84, projected onto the local tangent plane at the
trace's centroid); optional ``z_m`` (elevation), ``bank_deg`` and ``width_m``. Comment lines
starting with ``#`` before the header carry metadata of our own::

    # name: Example Park
    # closed: true
    # sectors_m: 0, 1700, 3400

Smoothing
---------
The centreline is interpolated by a cubic spline through the points (periodic for closed
tracks), resampled by arc length, and the curvature (analytic from the spline) is passed
through a short Gaussian low-pass (``CLEAN_CURVATURE_SIGMA_M``). The position noise of the
points is estimated from leave-one-out cubic prediction residuals; a noisy logged trace is
first smoothed with a local cubic (Savitzky-Golay) filter, and the curvature low-pass is
widened, both by amounts that grow with the estimated noise (see :func:`_smoothing_windows`).
A local cubic fit passes a circle with a relative error of order ``(W/R)^4``, and a low-pass of
the curvature keeps a constant curvature exactly, so neither step shrinks a clean circle the
way a penalised smoothing spline does.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.ndimage import gaussian_filter1d

from lapbalance.errors import InputError, clip

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
#: (the spacing itself grows with the noise); a trace that steps sideways by more than this
#: zig-zags point to point and is not a centreline. Engineering judgement. [-], [m]
ZIGZAG_NOISE_SPACINGS = 0.65
ZIGZAG_MIN_M = 0.5
#: Largest |bank| accepted; steeper than the steepest banked ovals (about 30-35 deg). [deg]
MAX_BANK_DEG = 60.0
#: ``bank_deg`` values all below this (and not all zero) look like radians. [deg]
BANK_RADIANS_HINT_DEG = 0.35
#: Largest grade accepted, measured over ``GRADE_SPAN_M`` of road (so that elevation noise of a
#: logged trace does not trip it). Common practice: the steepest public roads are about 35 %
#: over short stretches. [-], [m]
MAX_GRADE = 0.35
GRADE_SPAN_M = 20.0
#: Gaussian low-pass on curvature for a clean trace (standard deviation). [m]
CLEAN_CURVATURE_SIGMA_M = 2.0
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

# WGS-84 ellipsoid. Source: NIMA TR8350.2, Department of Defense World Geodetic System 1984,
# 3rd ed. (2000), table 3.1: a = 6378137 m, 1/f = 298.257223563.
_WGS84_A = 6378137.0
_WGS84_F = 1.0 / 298.257223563

_KNOWN_COLUMNS = ("x_m", "y_m", "lat_deg", "lon_deg", "z_m", "bank_deg", "width_m")


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
        Reference point; default the centroid of the points. [deg]

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
    lat0 = math.radians(lat0_deg) if lat0_deg is not None else float(np.mean(lat))
    lon0 = math.radians(lon0_deg) if lon0_deg is not None else float(np.mean(lon))
    e2 = _WGS84_F * (2.0 - _WGS84_F)

    def ecef(la, lo):
        n = _WGS84_A / np.sqrt(1.0 - e2 * np.sin(la) ** 2)  # [1] eq. 4-15
        return (n * np.cos(la) * np.cos(lo), n * np.cos(la) * np.sin(lo),
                n * (1.0 - e2) * np.sin(la))  # [1] eq. 4-14, h = 0

    X, Y, Z = ecef(lat, lon)
    X0, Y0, Z0 = ecef(lat0, lon0)
    dx, dy, dz = X - X0, Y - Y0, Z - Z0
    sl, cl = math.sin(lon0), math.cos(lon0)
    sp, cp = math.sin(lat0), math.cos(lat0)
    east = -sl * dx + cl * dy
    north = -sp * cl * dx - sp * sl * dy + cp * dz
    return east, north


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


def load_track(path, step_m: float = 1.0, closed: bool | None = None) -> Track:
    """Load a track centreline from our CSV format and resample it.

    Parameters
    ----------
    path : str or Path
        CSV file (see the module docstring for the format). [-]
    step_m : float
        Requested spacing of the resampled points. [m]
    closed : bool, optional
        Force a closed (True) or open (False) track; default: the file's ``# closed:`` line,
        else closed when the ends are close together. [-]

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
        x, y = latlon_to_local(lat, lon)
    else:
        x, y = cols["x_m"], cols["y_m"]
    return _build(x, y, cols.get("z_m"), cols.get("bank_deg"), cols.get("width_m"),
                  closed=closed, step_m=step_m, name=meta.get("name") or path.stem,
                  source=src, sector_starts_m=sectors, rows=linenos)


def make_track(x, y, z=None, bank_deg=None, width=None, *, closed=None, step_m=1.0, name="",
               source="", sector_starts_m=None) -> Track:
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
                  sector_starts_m=sector_starts_m, rows=None)


# --------------------------------------------------------------------------------------------
# Processing
# --------------------------------------------------------------------------------------------


def _where(rows, k: int) -> str:
    return f"line {rows[k]}" if rows is not None else f"point {k}"


def _loo_prediction(u: np.ndarray, cols: list[np.ndarray], closed: bool, period: float):
    """Leave-one-out cubic prediction of each point from its two neighbours on each side.

    Returns the extended columns, the predictions at the interior points and the noise gain
    ``sqrt(1 + sum w²)`` of the prediction residual for white noise.
    """
    if closed:
        ue = np.concatenate([u[-2:] - period, u, u[:2] + period])
        cols = [np.concatenate([c[-2:], c, c[:2]]) for c in cols]
    else:
        ue = u
    t = ue[2:-2]
    nodes = [ue[:-4], ue[1:-3], ue[3:-1], ue[4:]]
    w = []
    for a in range(4):
        num = np.ones_like(t)
        den = np.ones_like(t)
        for b in range(4):
            if a != b:
                num = num * (t - nodes[b])
                den = den * (nodes[a] - nodes[b])
        w.append(num / den)
    preds = [w[0] * c[:-4] + w[1] * c[1:-3] + w[2] * c[3:-1] + w[3] * c[4:] for c in cols]
    gain = np.sqrt(1.0 + sum(wi**2 for wi in w))
    return cols, preds, gain


def _mad_sigma(r: np.ndarray) -> float:
    return float(1.4826 * np.median(np.abs(r - np.median(r))))


def _estimate_noise(x: np.ndarray, y: np.ndarray, u: np.ndarray, closed: bool) -> float:
    """Position noise across the path from leave-one-out cubic residuals (robust MAD). [m]"""
    if u.size < 5:
        return 0.0
    period = u[-1] + math.hypot(x[-1] - x[0], y[-1] - y[0])
    (xe, ye), (px, py), gain = _loo_prediction(u, [x, y], closed, period)
    # only the residual across the path: noise along the path is absorbed by the chord
    # parameter, which is itself built from the noisy points
    tx, ty = xe[3:-1] - xe[1:-3], ye[3:-1] - ye[1:-3]
    tn = np.hypot(tx, ty)
    tn[tn == 0.0] = 1.0
    return _mad_sigma(((xe[2:-2] - px) * ty - (ye[2:-2] - py) * tx) / tn / gain)


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


def _smoothing_windows(noise_m: float, spacing_m: float) -> tuple[float, float]:
    """Pre-smoothing window and curvature low-pass for an estimated position noise.

    Engineering judgement, tuned on circles of radius 80-150 m with 0.3 m Gaussian noise at
    1-5 m spacing (worst error over the lap about 1.7 %, design target 3 %). The curvature error
    of a local fit over a window W holding n points scales as ``noise * sqrt(720 / n) / W²``;
    the curvature low-pass grows with the noise so that this stays near 2e-4 1/m.

    Parameters
    ----------
    noise_m : float
        Estimated position noise (standard deviation, across the path). [m]
    spacing_m : float
        Median spacing of the points. [m]

    Returns
    -------
    tuple of float
        Savitzky-Golay (local cubic) window on the positions, 0 for none [m], and the standard
        deviation of the Gaussian low-pass on curvature [m].
    """
    if noise_m < 0.01 or noise_m / max(spacing_m, 1e-9) < 0.005:
        return 0.0, CLEAN_CURVATURE_SIGMA_M
    w1 = max(7.0 * spacing_m, 100.0 * math.sqrt(noise_m) * spacing_m**0.25)
    target = 2.0e-4
    wk = (noise_m * math.sqrt(720.0 * spacing_m) / target) ** 0.4
    return w1, max(CLEAN_CURVATURE_SIGMA_M, wk / 2.5)


def _build(x, y, z, bank_deg, width, *, closed, step_m, name, source, sector_starts_m, rows):
    src = source or None
    if not (isinstance(step_m, int | float) and math.isfinite(step_m) and step_m > 0):
        raise InputError(f"step = {step_m} must be a positive number of metres; try 1.0",
                         src, "step_m")
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    rows_arr = np.asarray(rows) if rows is not None else None
    if x.size < 2:
        raise InputError(f"only {x.size} point(s); give at least {MIN_POINTS} distinct points "
                         "along the centreline", src)
    # drop consecutive duplicates
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
    if closed is None:
        closed = gap <= max(CLOSE_GAP_SPACINGS * med, CLOSE_GAP_MIN_M)
    if closed:
        if gap <= DUPLICATE_M:  # last point repeats the first
            x, y = x[:-1], y[:-1]
            z, bank_deg, width = (None if a is None else a[:-1] for a in (z, bank_deg, width))
            rws = None if rws is None else rws[:-1]
            gap = math.hypot(x[-1] - x[0], y[-1] - y[0])
        elif gap > jump_lim:
            raise InputError(f"closed track but its ends are {gap:.0f} m apart; mark it open "
                             "(# closed: false / --open) or add the missing points", src)
    _check_bank(bank_deg, src, rws)
    if width is not None and np.any(width <= 0):
        k = int(np.flatnonzero(width <= 0)[0])
        raise InputError(f"width_m = {width[k]:g} must be > 0", src, _where(rws, k))

    # chord-length parameter of the points
    u = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    if z is not None:
        _check_grade(z, u, closed, gap, src, rws)
    noise = _estimate_noise(x, y, u, closed)
    if noise > max(ZIGZAG_NOISE_SPACINGS * med, ZIGZAG_MIN_M):
        raise InputError(f"the points step sideways by about {noise:.1f} m from one to the next "
                         f"(median spacing {med:.2g} m): the trace zig-zags; give the points "
                         "in driving order along the centreline", src)
    w1, sig_k = _smoothing_windows(noise, med)
    xs, ys, us = x, y, u
    if w1 > 0:
        xs, ys, us = _presmooth(x, y, u, closed, gap, med, w1)

    # interpolating cubic spline through (pre-smoothed) points
    if closed:
        period = us[-1] + math.hypot(xs[-1] - xs[0], ys[-1] - ys[0])
        uk = np.append(us, period)
        sx = CubicSpline(uk, np.append(xs, xs[0]), bc_type="periodic")
        sy = CubicSpline(uk, np.append(ys, ys[0]), bc_type="periodic")
    else:
        uk = us
        sx = CubicSpline(uk, xs, bc_type="not-a-knot")
        sy = CubicSpline(uk, ys, bc_type="not-a-knot")
    # arc length by Simpson's rule on each knot interval (split in 4)
    sub = 4
    uf = (uk[:-1, None] + np.diff(uk)[:, None] * (np.arange(sub) / sub)[None, :]).ravel()
    uf = np.append(uf, uk[-1])
    speed = np.hypot(sx(uf, 1), sy(uf, 1))
    um = 0.5 * (uf[:-1] + uf[1:])
    speed_m = np.hypot(sx(um, 1), sy(um, 1))
    ds_f = np.diff(uf) / 6.0 * (speed[:-1] + 4.0 * speed_m + speed[1:])
    sf = np.concatenate([[0.0], np.cumsum(ds_f)])
    length = float(sf[-1])
    if closed:
        n = max(int(round(length / step_m)), MIN_POINTS)
        ds = length / n
    else:
        n = max(int(round(length / step_m)) + 1, MIN_POINTS)
        ds = length / (n - 1)
    dist = np.arange(n, dtype=float) * ds
    if not closed:
        dist[-1] = length
    ui = np.interp(dist, sf, uf)
    xi, yi = sx(ui), sy(ui)
    dx, dy = sx(ui, 1), sy(ui, 1)
    ddx, ddy = sx(ui, 2), sy(ui, 2)
    kappa = (dx * ddy - dy * ddx) / np.hypot(dx, dy) ** 3
    mode = "wrap" if closed else "nearest"
    kappa = gaussian_filter1d(kappa, sig_k / ds, mode=mode, truncate=4.0)
    kmax = np.abs(kappa)
    kk = int(np.argmax(kmax))
    if kmax[kk] > 1.0 / MIN_RADIUS_M:
        raise InputError(f"radius {1.0 / kmax[kk]:.2f} m at {dist[kk]:.0f} m along the track "
                         f"(below {MIN_RADIUS_M:g} m): the trace zig-zags or crosses itself; "
                         "check the points near there", src)

    # per-point channels, interpolated in the original chord parameter
    u_at = _orig_param(ui, us, u, w1)
    period_u = u[-1] + gap if closed else None
    zi = _interp(z, u, u_at, period_u) if z is not None else np.zeros(n)
    if z is not None:
        sig_z = _elevation_sigma(z, u, closed, gap, med)
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
                 corners=corners, sector_starts_m=sectors)


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


def _orig_param(ui, us, u, w1):
    """Map the spline parameter back to the chord parameter of the original points."""
    if w1 <= 0:
        return ui
    # pre-smoothed points are a uniform resample of the original polyline: us spans u
    return ui * (u[-1] / us[-1]) if us[-1] > 0 else ui


def _interp(a, u, ut, period):
    if period is not None:
        return np.interp(ut, np.append(u, period), np.append(a, a[0]))
    return np.interp(ut, u, a)


def _presmooth(x, y, u, closed, gap, spacing, w1):
    """Resample the polyline uniformly and smooth it with a local cubic (Savitzky-Golay)."""
    from scipy.signal import savgol_filter  # only noisy traces need it (a slow import)

    total = u[-1] + (gap if closed else 0.0)
    m = max(int(round(total / spacing)), MIN_POINTS)
    if closed:
        ug = np.arange(m) * (total / m)
        xg = np.interp(ug, np.append(u, total), np.append(x, x[0]))
        yg = np.interp(ug, np.append(u, total), np.append(y, y[0]))
    else:
        ug = np.linspace(0.0, total, m)
        xg, yg = np.interp(ug, u, x), np.interp(ug, u, y)
    h = total / m
    win = int(round(w1 / h)) | 1
    win = max(7, min(win, (m - 1) | 1 if (m - 1) % 2 else m - 2))
    mode = "wrap" if closed else "interp"
    xs = savgol_filter(xg, win, 3, mode=mode)
    ys = savgol_filter(yg, win, 3, mode=mode)
    # chord parameter of the smoothed points
    us = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(xs), np.diff(ys)))])
    return xs, ys, us


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
        if quiet.size == 0:  # no straight anywhere (a circle): one corner, the whole lap
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
