r"""Ride-height aero maps: downforce and drag areas over front and rear ride height.

File format (CSV, our own; one row per grid node, rows in any order)::

    # convention: ground            (cg | ground | restraint; required)
    # restraint_height_m: 0.30      (only with convention: restraint)
    ride_height_front_mm,ride_height_rear_mm,front_downforce_area_m2,rear_downforce_area_m2,drag_area_m2
    10,30,1.41,1.98,1.24
    ...

* Lines starting with ``#`` are comments; ``# key: value`` comment lines before the header are
  metadata (``convention``, ``restraint_height_m``). Blank lines are skipped.
* The five columns are required (any column order); unknown columns are an error.
* The nodes must fill a complete rectangular grid: every front ride height paired with every
  rear ride height exactly once, at least 2 distinct values per axis. Row order is free.
* Downforce areas are axle areas such that ``F = q · area`` (positive down, -C_L·A per axle)
  in the stated convention; every node is converted to the CG convention on load, with the
  node's own drag area: front += CdA (h_cg - z)/L, rear -= the same (areas convert like
  forces, since both scale with q). See :mod:`lapbalance.aero`.

Between nodes the map is interpolated by a bicubic interpolating spline (scipy
``RectBivariateSpline``, degree min(3, n-1) per axis, smoothing 0), so grid values are
reproduced exactly. **Outside the grid the map is clamped**: the value at the nearest edge is
held (no extrapolation), and a :class:`~lapbalance.errors.PhysicsWarning` names how far out the
request was. The fine grid for the compiled solver (``fine_*``) is the same spline sampled at 8
sub-intervals per original interval (original nodes included); the solver interpolates it
bilinearly and clamps to its range, as :func:`bilinear` does.

References
----------
.. [1] P. Dierckx, Curve and Surface Fitting with Splines, Oxford University Press, 1993
       (the FITPACK routines behind ``scipy.interpolate.RectBivariateSpline``).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from lapbalance import aero as _aero
from lapbalance.errors import InputError, PhysicsWarning, clip, closest, did_you_mean
from lapbalance.textio import csv_cells
from lapbalance.units import MM

#: Column names of the map file, in the documented order.
COLUMNS = ("ride_height_front_mm", "ride_height_rear_mm", "front_downforce_area_m2",
           "rear_downforce_area_m2", "drag_area_m2")
#: Metadata keys accepted in ``# key: value`` lines.
METADATA_KEYS = ("convention", "restraint_height_m")
#: Sub-intervals per original grid interval in the fine grid for the solver.
FINE_SUBDIVISIONS = 8


def bilinear(fine_x, fine_y, table, x, y):
    """Clamped bilinear lookup in a rectangular table (reference for the numba kernel).

    Points outside ``[fine_x[0], fine_x[-1]] x [fine_y[0], fine_y[-1]]`` are clamped to the
    edge. The cell is found with ``searchsorted`` (the grid need not be uniform).

    Parameters
    ----------
    fine_x : ndarray, shape (nx,)
        Strictly rising grid along the first axis (front ride height). [m]
    fine_y : ndarray, shape (ny,)
        Strictly rising grid along the second axis (rear ride height). [m]
    table : ndarray, shape (nx, ny)
        Values at the grid nodes. [any unit, e.g. m²]
    x, y : float or ndarray
        Query points (broadcast together). [m]

    Returns
    -------
    float or ndarray
        Interpolated values, in the unit of ``table``.
    """
    fx = np.asarray(fine_x, dtype=float)
    fy = np.asarray(fine_y, dtype=float)
    t = np.asarray(table, dtype=float)
    xq, yq = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
    xc = np.clip(xq, fx[0], fx[-1])
    yc = np.clip(yq, fy[0], fy[-1])
    i = np.clip(np.searchsorted(fx, xc, side="right") - 1, 0, fx.size - 2)
    j = np.clip(np.searchsorted(fy, yc, side="right") - 1, 0, fy.size - 2)
    u = (xc - fx[i]) / (fx[i + 1] - fx[i])
    v = (yc - fy[j]) / (fy[j + 1] - fy[j])
    out = ((1 - u) * (1 - v) * t[i, j] + u * (1 - v) * t[i + 1, j]
           + (1 - u) * v * t[i, j + 1] + u * v * t[i + 1, j + 1])
    return float(out) if out.ndim == 0 else out


def _refine(axis: np.ndarray, n: int = FINE_SUBDIVISIONS) -> np.ndarray:
    """Split every interval of ``axis`` into ``n`` equal parts; original nodes kept exactly."""
    parts = [np.linspace(axis[k], axis[k + 1], n + 1)[:-1] for k in range(axis.size - 1)]
    return np.ascontiguousarray(np.concatenate(parts + [axis[-1:]]), dtype=np.float64)


@dataclass(frozen=True, eq=False)
class AeroMap:
    """An aero map over front and rear ride height, stored in the CG convention.

    Attributes
    ----------
    rh_front_m : ndarray, shape (nf,)
        Front ride heights of the original nodes, rising. [m]
    rh_rear_m : ndarray, shape (nr,)
        Rear ride heights of the original nodes, rising. [m]
    front_area_cg, rear_area_cg : ndarray, shape (nf, nr)
        Axle downforce areas at the nodes in the CG convention (``F = q · area``). [m²]
    drag_area : ndarray, shape (nf, nr)
        Drag area C_D·A at the nodes. [m²]
    fine_rh_front_m, fine_rh_rear_m : ndarray, shapes (Nf,), (Nr,)
        Fine grids, ``Nf = 8 (nf - 1) + 1``; they contain the original nodes. [m]
    fine_front_area_cg, fine_rear_area_cg, fine_drag_area : ndarray, shape (Nf, Nr)
        The spline sampled on the fine grid (float64, C-contiguous), for a clamped bilinear
        lookup in compiled code (:func:`bilinear`). [m²]
    convention : str
        Convention the file was given in (``cg``, ``ground`` or ``restraint``).
    restraint_height : float
        Restraint height used for ``restraint`` (0 for ``ground``/``cg``). [m]
    cg_height, wheelbase : float
        CG height and wheelbase used for the conversion to the CG convention. [m]
    source : str
        Path of the map file.
    """

    rh_front_m: np.ndarray
    rh_rear_m: np.ndarray
    front_area_cg: np.ndarray
    rear_area_cg: np.ndarray
    drag_area: np.ndarray
    fine_rh_front_m: np.ndarray
    fine_rh_rear_m: np.ndarray
    fine_front_area_cg: np.ndarray
    fine_rear_area_cg: np.ndarray
    fine_drag_area: np.ndarray
    convention: str
    restraint_height: float
    cg_height: float
    wheelbase: float
    source: str
    _splines: tuple = field(repr=False, default=())

    def __repr__(self) -> str:
        (f0, f1), (r0, r1) = self.bounds_m
        return (f"AeroMap({self.source!r}, {self.rh_front_m.size} x {self.rh_rear_m.size} "
                f"nodes, front {f0:g}-{f1:g} m, rear {r0:g}-{r1:g} m, given as "
                f"{self.convention!r})")

    @property
    def bounds_m(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """((front min, front max), (rear min, rear max)) ride heights of the grid [m]."""
        return ((float(self.rh_front_m[0]), float(self.rh_front_m[-1])),
                (float(self.rh_rear_m[0]), float(self.rh_rear_m[-1])))

    def outside(self, rh_front_m, rh_rear_m):
        """True where a point lies outside the grid (where the map is clamped). [-]"""
        (f0, f1), (r0, r1) = self.bounds_m
        f, r = np.asarray(rh_front_m, dtype=float), np.asarray(rh_rear_m, dtype=float)
        return (f < f0) | (f > f1) | (r < r0) | (r > r1)

    def areas_at(self, rh_front_m, rh_rear_m):
        """Downforce and drag areas at the given ride heights (spline; clamped outside).

        Parameters
        ----------
        rh_front_m : float or ndarray
            Front ride height. [m]
        rh_rear_m : float or ndarray
            Rear ride height (broadcast with ``rh_front_m``). [m]

        Returns
        -------
        tuple
            (front_area_cg, rear_area_cg, drag_area): floats for scalar input, else arrays
            of the broadcast shape. [m²]

        Warns
        -----
        PhysicsWarning
            Once per call if any point lies outside the grid (the edge value is held).
        """
        f, r = np.broadcast_arrays(np.asarray(rh_front_m, dtype=float),
                                   np.asarray(rh_rear_m, dtype=float))
        if not (np.all(np.isfinite(f)) and np.all(np.isfinite(r))):
            raise ValueError("ride heights must be finite numbers [m]")
        out_mask = self.outside(f, r)
        if np.any(out_mask):
            (f0, f1), (r0, r1) = self.bounds_m
            k = int(np.argmax(out_mask))
            warnings.warn(
                f"{self.source}: ride height (front {f.flat[k] / MM:.1f} mm, rear "
                f"{r.flat[k] / MM:.1f} mm) lies outside the aero map (front {f0 / MM:g}-"
                f"{f1 / MM:g} mm, rear {r0 / MM:g}-{r1 / MM:g} mm) at {int(out_mask.sum())} "
                "point(s); the map's edge values are held there",
                PhysicsWarning, stacklevel=2)
        vals = tuple(s.ev(f.ravel(), r.ravel()).reshape(f.shape) for s in self._splines)
        if f.ndim == 0:
            return tuple(float(v) for v in vals)
        return vals


def _fail(msg: str, path, field_: str | None = None):
    raise InputError(msg, path, field_)


def _read_text(path: Path) -> str:
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError("aero map file not found; check aero.map_file (relative to the car "
                         "file)", path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not an aero map CSV", path) from None
    except OSError as e:
        raise InputError(f"cannot read ({e.strerror})", path) from None
    from lapbalance.textio import decode_text

    return decode_text(data, path, "an aero map CSV", "save the aero map as UTF-8 CSV")


def _parse(text: str, path: Path):
    """Split into metadata and (line number, cells) rows; return meta, header, rows."""
    meta: dict[str, tuple[str, int]] = {}
    header = None
    rows = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s or (lineno == 1 and s.lower() == "sep=,"):  # a spreadsheet's "sep=," hint
            continue
        if s.startswith("#"):
            body = s.lstrip("#").strip()
            if header is None and ":" in body:
                key, val = (p.strip() for p in body.split(":", 1))
                if key in METADATA_KEYS:
                    meta[key] = (val.split()[0] if val.split() else "", lineno)
                elif closest(key, METADATA_KEYS):  # a misspelt key, not a free comment
                    _fail(f'unknown metadata "# {key}:"; '
                          f"{did_you_mean(key, METADATA_KEYS)}", path, f"line {lineno}")
            continue
        cells = csv_cells(s)
        if header is None:
            header = (lineno, cells)
        else:
            rows.append((lineno, cells))
    return meta, header, rows


def load_aero_map(path: str | Path, cg_height: float, wheelbase: float) -> AeroMap:
    """Load, validate and convert an aero-map CSV (format in the module docstring).

    Parameters
    ----------
    path : str or Path
        The map file.
    cg_height : float
        CG height of the car, used to convert to the CG convention. [m]
    wheelbase : float
        Wheelbase of the car. [m]

    Returns
    -------
    AeroMap
        The map in the CG convention, with its spline and fine grid.

    Raises
    ------
    InputError
        One line naming the file, the line/column and the fix (bad metadata, missing or
        unknown column, text/NaN/inf cell, ride heights that look like metres, duplicate or
        missing grid node, fewer than 2 ride heights per axis, negative drag area).
    """
    path = Path(path)
    if not (math.isfinite(cg_height) and cg_height > 0):
        raise InputError(f"cg_height = {cg_height} must be > 0 m", path)
    if not (math.isfinite(wheelbase) and wheelbase > 0):
        raise InputError(f"wheelbase = {wheelbase} must be > 0 m", path)
    meta, header, rows = _parse(_read_text(path), path)

    # metadata -------------------------------------------------------------------------------
    if "convention" not in meta:
        _fail('missing "# convention: cg|ground|restraint" line before the header; say how '
              "the split was measured", path, "convention")
    conv, conv_line = meta["convention"]
    if conv not in _aero.CONVENTIONS:
        _fail(f'convention "{conv}" is not one of {", ".join(_aero.CONVENTIONS)}; '
              f"{did_you_mean(conv, _aero.CONVENTIONS)}", path, f"line {conv_line}")
    z = 0.0
    if conv == "restraint":
        if "restraint_height_m" not in meta:
            _fail('convention "restraint" needs a "# restraint_height_m: <height in m>" line',
                  path, "restraint_height_m")
        txt, zl = meta["restraint_height_m"]
        try:
            z = float(txt)
        except ValueError:
            _fail(f'restraint_height_m = "{clip(txt)}" is not a number; give metres, e.g. 0.3',
                  path, f"line {zl}")
        if not (math.isfinite(z) and 0.0 <= z <= 3.0):
            hint = f"; looks like mm, write {z / 1000:g}" if 3.0 < z <= 3000.0 else ""
            _fail(f"restraint_height_m = {txt} must be between 0 and 3 m{hint}", path,
                  f"line {zl}")
    elif "restraint_height_m" in meta:
        _fail(f'restraint_height_m applies only to "convention: restraint" (convention is '
              f'"{conv}"); remove it or change the convention', path,
              f"line {meta['restraint_height_m'][1]}")

    # header ---------------------------------------------------------------------------------
    if header is None:
        _fail("has no header line; the first non-comment line must name the columns "
              + ", ".join(COLUMNS), path)
    hline, names = header
    for n in names:
        if n not in COLUMNS:
            _fail(f'unknown column "{n}"; {did_you_mean(n, COLUMNS)}', path, f"line {hline}")
    for c in COLUMNS:
        if c not in names:
            _fail(f'missing column "{c}"; the header needs ' + ", ".join(COLUMNS), path,
                  f"line {hline}")
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        _fail(f'column "{dup}" appears twice; keep one', path, f"line {hline}")
    if not rows:
        _fail("has a header but no data rows", path)

    # cells ----------------------------------------------------------------------------------
    data = np.empty((len(rows), len(COLUMNS)))
    for r, (lineno, cells) in enumerate(rows):
        if len(cells) != len(names):
            _fail(f"has {len(cells)} values but the header has {len(names)} columns", path,
                  f"line {lineno}")
        for ci, col in enumerate(COLUMNS):
            cell = cells[names.index(col)]
            try:
                val = float(cell)
            except ValueError:
                hint = "write the number with a '.' decimal point" if "," in cell \
                    or cell.replace(" ", "").isdigit() else "give a number"
                _fail(f'{col} = "{clip(cell)}" is not a number; {hint}', path, f"line {lineno}")
            if not math.isfinite(val):
                _fail(f"{col} = {cell} is not a finite number; fill in the measured value",
                      path, f"line {lineno}")
            data[r, ci] = val
    lines = np.array([ln for ln, _ in rows])
    for ci, col in enumerate(COLUMNS[:2]):
        v = data[:, ci]
        if v.max() < 1.0 and v.max() > 0.0:
            _fail(f"{col} values ({v.min():g} to {v.max():g}) look like metres, but the "
                  f"column is in mm; multiply by 1000", path, col)
        if v.min() < 0.0:
            k = int(np.argmin(v))
            _fail(f"{col} = {v[k]:g} is negative; ride heights are >= 0 mm", path,
                  f"line {lines[k]}")
        if v.max() > 600.0:
            k = int(np.argmax(v))
            _fail(f"{col} = {v[k]:g} mm is not a plausible ride height (0 to 600 mm)", path,
                  f"line {lines[k]}")
    neg = data[:, 4] < 0
    if np.any(neg):
        k = int(np.argmax(neg))
        _fail(f"drag_area_m2 = {data[k, 4]:g} is negative; drag area is >= 0 m²", path,
              f"line {lines[k]}")

    # grid -----------------------------------------------------------------------------------
    fa, ra = np.unique(data[:, 0]), np.unique(data[:, 1])
    for axis, col in ((fa, COLUMNS[0]), (ra, COLUMNS[1])):
        if axis.size < 2:
            _fail(f"{col} has {axis.size} distinct value(s); the map needs at least 2 per "
                  "axis to interpolate", path, col)
    nf, nr = fa.size, ra.size
    grid = np.full((3, nf, nr), np.nan)
    seen: dict[tuple[int, int], int] = {}
    for r in range(data.shape[0]):
        i = int(np.searchsorted(fa, data[r, 0]))
        j = int(np.searchsorted(ra, data[r, 1]))
        if (i, j) in seen:
            _fail(f"duplicate node (front {data[r, 0]:g} mm, rear {data[r, 1]:g} mm), first "
                  f"given on line {seen[(i, j)]}; keep one row per node", path,
                  f"line {lines[r]}")
        seen[(i, j)] = int(lines[r])
        grid[:, i, j] = data[r, 2:]
    if len(seen) != nf * nr:
        i, j = map(int, np.argwhere(np.isnan(grid[0]))[0])
        _fail(f"grid is not complete: {len(seen)} of {nf} x {nr} = {nf * nr} nodes given; "
              f"missing front {fa[i]:g} mm with rear {ra[j]:g} mm (every front ride height "
              "needs every rear ride height)", path, "grid")

    # convert to the CG convention, node by node --------------------------------------------
    front, rear, drag = grid
    front_cg, rear_cg = _aero.to_cg_convention(front, rear, drag, cg_height, wheelbase, conv, z)
    rhf, rhr = fa * MM, ra * MM
    kx, ky = min(3, nf - 1), min(3, nr - 1)
    from scipy.interpolate import RectBivariateSpline  # a slow import: only mapped cars

    splines = tuple(RectBivariateSpline(rhf, rhr, t, kx=kx, ky=ky, s=0)
                    for t in (front_cg, rear_cg, drag))
    ffine, rfine = _refine(rhf), _refine(rhr)
    fine = []
    for s, t in zip(splines, (front_cg, rear_cg, drag), strict=True):
        tf = s(ffine, rfine)
        tf[::FINE_SUBDIVISIONS, ::FINE_SUBDIVISIONS] = t  # original nodes exactly
        fine.append(np.ascontiguousarray(tf, dtype=np.float64))

    def c(a):
        return np.ascontiguousarray(a, dtype=np.float64)

    return AeroMap(c(rhf), c(rhr), c(front_cg), c(rear_cg), c(drag), ffine, rfine,
                   fine[0], fine[1], fine[2], conv, z, float(cg_height), float(wheelbase),
                   str(path), splines)
