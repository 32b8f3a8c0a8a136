"""Figures of a lap result: each function takes a :class:`~lapbalance.lap.LapResult` and returns
a :class:`matplotlib.figure.Figure`.

No physics is computed here: every quantity drawn is a channel or a corner field of the result
(the only arithmetic is display work: unit scaling to km/h and g, stacking the axle-load parts
the solver already separated, interpolating one lap's time on another's distance).

Figures are built as bare :class:`~matplotlib.figure.Figure` objects (never through
``pyplot``), so nothing is registered with a GUI backend and nothing needs a display; PNG
rendering goes through the Agg canvas. One palette, :data:`PALETTE`, gives every figure and the
HTML report (:mod:`lapbalance.report`) the same look.
"""

from __future__ import annotations

import functools
import io
import math
import textwrap
from collections.abc import Callable, Sequence

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.colors import LinearSegmentedColormap, TwoSlopeNorm
from matplotlib.figure import Figure

from lapbalance.lap import LIMIT_NAMES, LapResult
from lapbalance.liftoff import VERDICTS, ResponseCurve, ranked
from lapbalance.units import G0

#: The one palette of the project's figures and report (name -> hex colour).
PALETTE: dict[str, str] = {
    "ink": "#1f2933",
    "muted": "#7b8794",
    "grid": "#e4e7eb",
    "paper": "#ffffff",
    "panel": "#f5f7fa",
    "front": "#2b6cb0",  # front axle, understeer-leaning side of the balance scale
    "rear": "#c05621",  # rear axle, oversteer-leaning side
    "engine": "#d69e2e",
    "speed": "#1f2933",
    "limit": "#9aa5b1",
    "static": "#a0aec0",
    "aero": "#2f855a",
    "ground": "#6b46c1",
    "lateral": "#dd6b20",
    "coast": "#718096",
    "lift-critical": "#c53030",
    "lift-marginal": "#c05621",
    "lift-close": "#d69e2e",
    "lift-safe": "#38a169",
    "not-checked": "#a0aec0",
}

#: Colours for overlaid variants (base first).
SERIES = ("#1f2933", "#c05621", "#2b6cb0", "#2f855a", "#6b46c1", "#b83280")

#: Diverging map for the balance index and other signed quantities: front colour below zero,
#: white at zero, rear colour above.
DIVERGING = LinearSegmentedColormap.from_list(
    "lapbalance_diverging", [PALETTE["front"], "#f7f7f7", PALETTE["rear"]])

#: Sequential map (light to dark) for magnitudes such as speed.
SEQUENTIAL = LinearSegmentedColormap.from_list(
    "lapbalance_sequential", ["#d6e4f0", "#5a8fbf", "#2c3e6b", "#1a1a2e"])

_RC = {
    "font.size": 9.0,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.0,
    "axes.edgecolor": PALETTE["muted"],
    "axes.labelcolor": PALETTE["ink"],
    "axes.facecolor": PALETTE["paper"],
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "grid.color": PALETTE["grid"],
    "grid.linewidth": 0.8,
    "xtick.color": PALETTE["ink"],
    "ytick.color": PALETTE["ink"],
    "legend.frameon": False,
    "legend.fontsize": 8.0,
    "figure.facecolor": PALETTE["paper"],
    "lines.linewidth": 1.3,
}

_VERDICT_MARKERS = {"lift-critical": "X", "lift-marginal": "^"}


def _styled(fn: Callable[..., Figure]) -> Callable[..., Figure]:
    """Build the figure under the project's rc settings."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_RC):
            fig = fn(*args, **kwargs)
        _fewer_ticks(fig)
        return fig

    return wrapper


def _fewer_ticks(fig) -> None:
    """At most six major ticks on each automatically ticked linear axis (matplotlib's own
    choice allows up to ten on a wide axis). Each tick is a line and a text that matplotlib
    creates while drawing: the ticks took about 30 % of the time of rendering a figure."""
    from matplotlib.ticker import AutoLocator, MaxNLocator

    for ax in getattr(fig, "axes", ()):
        for axis in (ax.xaxis, ax.yaxis):
            if type(axis.get_major_locator()) is AutoLocator:
                axis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))


def _figure(width: float, height: float, *, left: float = 0.7, right: float = 0.15,
            bottom: float = 0.5, top: float = 0.35, rows: int = 1, cols: int = 1,
            hgap: float = 0.2, wgap: float = 0.8) -> Figure:
    """A bare Agg figure of ``width`` x ``height`` [in] with a fixed layout.

    The margins ``left``, ``right``, ``bottom``, ``top`` and the gaps between the axes of a
    ``rows`` x ``cols`` grid (``hgap`` between rows, ``wgap`` between columns) are in inches,
    so they hold the tick labels, axis labels and titles at every resolution. The figures
    use a fixed layout instead of a layout engine: a layout engine measures every text in an
    extra drawing pass, which took more than half of the time of rendering a figure.
    ``fig.add_subplot()`` and ``fig.subplots(rows, cols)`` place their axes inside it.
    """
    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    ah = (height - top - bottom - (rows - 1) * hgap) / rows
    aw = (width - left - right - (cols - 1) * wgap) / cols
    fig.subplots_adjust(left=left / width, right=1.0 - right / width, bottom=bottom / height,
                        top=1.0 - top / height, hspace=hgap / ah, wspace=wgap / aw)
    return fig


def _axes_at(fig: Figure, left: float, bottom: float, width: float, height: float, **kw):
    """Axes at a fixed place: lower-left corner, width and height in inches. [-]"""
    w, h = fig.get_size_inches()
    return fig.add_axes((left / w, bottom / h, width / w, height / h), **kw)


def _colorbar(fig: Figure, mappable, ax, *, pad: float = 0.15, width: float = 0.2,
              shrink: float = 0.85, **kw):
    """Colour bar right of ``ax`` (``pad`` and ``width`` in inches), ``shrink`` times its
    height and centred on it, in a fixed place (see :func:`_figure`). [-]"""
    w, h = fig.get_size_inches()
    box = ax.get_position()
    hh = box.height * shrink
    cax = fig.add_axes((box.x1 + pad / w, box.y0 + 0.5 * (box.height - hh), width / w, hh))
    return fig.colorbar(mappable, cax=cax, **kw)


def _fitted_size(fig: Figure, text: str, width: float, size: float) -> float:
    """Font size [pt], at most ``size``, at which one line of ``text`` is at most ``width``
    [in] wide (never below 6.5 pt): long car and track names shrink a title instead of
    running past the fixed margins."""
    from matplotlib.font_manager import FontProperties

    longest = max(str(text).split("\n"), key=len)
    w, _, _ = fig.canvas.get_renderer().get_text_width_height_descent(
        longest.replace("\\$", "$"), FontProperties(size=size), ismath=False)
    w_in = w / fig.dpi
    return size if w_in <= width else max(6.5, math.floor(size * width / w_in * 10) / 10)


def _title(ax, text: str, size: float | None = None, **kw):
    """Axes title, shrunk to fit over the figure (see :func:`_fitted_size`)."""
    fig = ax.get_figure()
    size = size if size is not None else matplotlib.rcParams["axes.titlesize"]
    if isinstance(size, str):
        size = 10.5
    w = fig.get_size_inches()[0]
    box = ax.get_position()
    centre = 0.5 * (box.x0 + box.x1) * w
    return ax.set_title(text, fontsize=_fitted_size(fig, text, 2 * min(centre, w - centre)
                                                    - 0.15, size), **kw)


def _suptitle(fig: Figure, text: str, size: float = 10.5):
    """Figure title, shrunk to fit across the figure (see :func:`_fitted_size`)."""
    return fig.suptitle(text, fontsize=_fitted_size(fig, text, fig.get_size_inches()[0] - 0.15,
                                                    size))


def _plain(text: str) -> str:
    """Text drawn literally (a ``$`` would otherwise start matplotlib's math mode)."""
    return str(text).replace("$", r"\$")


def _names(result: LapResult) -> str:
    return _plain(f"{result.car.name} — {getattr(result.track, 'name', '') or 'track'}")


def _distance(result: LapResult) -> np.ndarray:
    return np.asarray(result.channels["distance_m"], float)


def _corner_axis(ax, result: LapResult) -> None:
    """Corner ids as ticks on a top axis at their apexes."""
    if not result.corners:
        return
    top = ax.secondary_xaxis("top")
    top.set_xticks([c["apex_m"] for c in result.corners],
                   labels=[str(c["id"]) for c in result.corners])
    top.tick_params(labelsize=7, colors=PALETTE["muted"], length=2)
    top.set_xlabel("corner", color=PALETTE["muted"], fontsize=8)


def _shade(ax, x: np.ndarray, mask: np.ndarray, color: str, label: str) -> None:
    if np.any(mask):
        ax.fill_between(x, 0, 1, where=mask, transform=ax.get_xaxis_transform(),
                        color=color, alpha=0.16, linewidth=0, step="mid", label=label)


def _symmetric_limit(values: np.ndarray) -> float:
    v = np.abs(values[np.isfinite(values)])
    if v.size == 0:
        return 0.1
    return max(float(np.percentile(v, 99.5)), 0.02)


def colour_runs(values: np.ndarray, cmap, norm) -> np.ndarray:
    """Start indices of the runs of consecutive ``values`` that get the same colour.

    The colour of a value is ``cmap(norm(value))``, as matplotlib colours a collection
    (non-finite values get the colour map's "bad" colour). A colour map holds a finite table
    of colours, so neighbouring steps of a smooth channel often share one; drawing each run
    as one polyline instead of one segment per step draws the same colours with several
    times fewer paths.

    Parameters
    ----------
    values : numpy.ndarray
        Values in order along the line. [any unit]
    cmap : matplotlib.colors.Colormap
        The colour map. [-]
    norm : matplotlib.colors.Normalize
        The normalisation of the values (same unit as ``values``). [-]

    Returns
    -------
    numpy.ndarray of int
        Index of the first value of every run, ascending, starting with 0 (empty for no
        values); run ``k`` ends where run ``k + 1`` starts. [-]
    """
    v = np.asarray(values, float)
    if v.size == 0:
        return np.zeros(0, dtype=np.intp)
    rgba = np.asarray(cmap(norm(v)), float).reshape(v.size, -1)
    change = np.any(rgba[1:] != rgba[:-1], axis=1)
    return np.concatenate([[0], np.flatnonzero(change) + 1]).astype(np.intp)


def _track_line(ax, x, y, values, cmap, norm, width=3.0) -> LineCollection:
    """Line through (x, y) [m], segment i (point i to i + 1) coloured by ``values[i]``.

    Runs of segments of one colour (:func:`colour_runs`) are drawn as one polyline each,
    carrying the first value of the run, so every segment gets the colour of its own value.
    """
    pts = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    v = np.asarray(values, float)[:-1]
    starts = colour_runs(v, cmap, norm)
    ends = np.append(starts[1:], v.size)
    lines = [pts[a:b + 1] for a, b in zip(starts, ends, strict=True)]
    lc = LineCollection(lines, cmap=cmap, norm=norm, linewidths=width, capstyle="round",
                        joinstyle="round")
    lc.set_array(v[starts])
    ax.add_collection(lc)
    ax.set_aspect("equal", adjustable="datalim")
    ax.autoscale_view()
    ax.set_xlabel("x [m]")
    ax.set_ylabel("y [m]")
    return lc


def draw_track_edges(ax, track, color: str | None = None) -> bool:
    """Draw the track edges (thin lines) and, on a driving line, the track file's own line
    (dotted) under a map. Returns True when the track has a width to draw."""
    from lapbalance import line as _line

    e = _line.edges(track)
    if e is None:
        return False
    col = color or PALETTE["muted"]
    closed = bool(getattr(track, "closed", False))

    def close(a):
        return np.append(a, a[0]) if closed else a

    xl, yl, xr, yr = e
    ax.plot(close(xl), close(yl), color=col, lw=0.8, label="track edges")
    ax.plot(close(xr), close(yr), color=col, lw=0.8)
    ref = _line.reference_line(track)
    if ref is not None:
        ax.plot(close(ref[0]), close(ref[1]), color=col, lw=0.6, linestyle=":",
                label="track file's line")
    return True


#: Where the balance map shows the balance index: steps whose lateral acceleration reaches
#: this [m/s²] (the lift-off check's cornering threshold, ISO 9816 start condition) ...
CORNERING_AY_MPS2 = 4.0
#: ... and whose longitudinal acceleration is at most this share of the lateral one, so the
#: car mostly corners. Elsewhere (straights, and corner exits on full throttle, where the
#: drive force loading the rear tyres sets the index) the line is grey.
CORNERING_AX_RATIO = 0.5


def cornering_mask(result: LapResult, ay_threshold: float | None = None,
                   ax_ratio: float = CORNERING_AX_RATIO) -> np.ndarray:
    """Steps where the car mostly corners: ``|a_y| >= ay_threshold`` [m/s²] (default: the
    lap's lift-off threshold, else :data:`CORNERING_AY_MPS2`) and ``|a_x| <= ax_ratio |a_y|``
    [-]."""
    if ay_threshold is None:
        ay_threshold = float(result.settings.get("liftoff_ay_threshold_mps2",
                                                 CORNERING_AY_MPS2))
    ay = np.abs(np.asarray(result.channels["ay_mps2"], float))
    ax = np.abs(np.asarray(result.channels["ax_mps2"], float))
    return (ay >= ay_threshold) & (ax <= ax_ratio * ay)


@_styled
def track_map_figure(result: LapResult, channel: str | None = None) -> Figure:
    """Track map coloured by the cornering balance (or by any channel), corner ids at the
    apexes, lift-off flags.

    By default the colour is the balance index ``u_r - u_f`` on the steps where the car
    mostly corners (``|a_y|`` at or above the lift-off threshold, 4 m/s² by default, and
    ``|a_x| <= |a_y|/2``; see :func:`cornering_mask`); straights, gentle bends and
    full-throttle exits are grey, because there the drive force loading the rear, not the
    handling balance, sets the index. The colour scale is symmetric about zero over the
    cornering steps.

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]
    channel : str, optional
        Colour by this channel instead (any key of ``result.channels``, e.g. ``speed_kph``);
        signed channels get the diverging map centred on zero, others the sequential one.

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch = result.channels
    x, y, d = np.asarray(ch["x_m"]), np.asarray(ch["y_m"]), _distance(result)
    fig = _figure(7.5, 6.0, left=0.7, right=1.55, bottom=0.5, top=0.3)
    ax = fig.add_subplot()
    draw_track_edges(ax, result.track)
    if channel is None:
        bal = np.asarray(ch["balance_index"], float)
        corner = cornering_mask(result)
        shown = np.where(corner, bal, np.nan)
        m = _symmetric_limit(shown)
        cmap = DIVERGING.with_extremes(bad="#e1e4e8")
        lc = _track_line(ax, x, y, np.ma.masked_invalid(shown), cmap, TwoSlopeNorm(0.0, -m, m))
        cb = _colorbar(fig, lc, ax, extend="both")
        thr = float(result.settings.get("liftoff_ay_threshold_mps2", CORNERING_AY_MPS2))
        cb.set_label(f"balance index u_r - u_f [-] where |a_y| >= {thr:g} m/s²\n"
                     "and |a_x| <= |a_y|/2 (> 0 oversteer-leaning; grey: not cornering)")
        title = "cornering balance around the lap"
    else:
        from lapbalance.lap import CHANNELS

        vals = np.asarray(ch[channel], float)
        unit = CHANNELS.get(channel, ("", ""))[0]
        fin = vals[np.isfinite(vals)]
        if fin.size and fin.min() < 0 < fin.max():
            m = _symmetric_limit(vals)
            lc = _track_line(ax, x, y, vals, DIVERGING, TwoSlopeNorm(0.0, -m, m))
        else:
            lo, hi = (float(fin.min()), float(fin.max())) if fin.size else (0.0, 1.0)
            from matplotlib.colors import Normalize

            lc = _track_line(ax, x, y, vals, SEQUENTIAL, Normalize(lo, hi if hi > lo else lo + 1))
        cb = _colorbar(fig, lc, ax)
        cb.formatter.set_useOffset(False)
        cb.set_label(f"{_plain(channel)} [{unit}]" if unit else _plain(channel))
        title = f"{_plain(channel)} around the lap"
    ax.plot(x[0], y[0], marker="s", color=PALETTE["ink"], markersize=6, linestyle="none",
            label="start")
    for c in result.corners:
        xa, ya = np.interp(c["apex_m"], d, x), np.interp(c["apex_m"], d, y)
        ax.annotate(str(c["id"]), (xa, ya), xytext=(6, 6), textcoords="offset points",
                    fontsize=8, fontweight="bold", color=PALETTE["ink"],
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                          "alpha": 0.8})
    for verdict, marker in _VERDICT_MARKERS.items():
        pts = [c["liftoff_tightest"]["distance_m"] for c in result.corners
               if c.get("liftoff_verdict") == verdict and c.get("liftoff_tightest")]
        if pts:
            ax.plot(np.interp(pts, d, x), np.interp(pts, d, y), marker=marker,
                    linestyle="none", markersize=10, color=PALETTE[verdict],
                    markeredgecolor="white", label=f"lift-off: {verdict}")
    ax.legend(loc="best")
    line = getattr(result.track, "line", "centreline")
    on = "" if line == "centreline" else f" ({line} line)"
    _title(ax, f"{_names(result)}: {title}{on}")
    return fig


@_styled
def speed_figure(result: LapResult) -> Figure:
    """Speed over distance with the steady corner-limit speed dashed.

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch, d = result.channels, _distance(result)
    v = np.asarray(ch["speed_kph"], float)
    vlim = np.asarray(ch["speed_limit_mps"], float) * 3.6
    fig = _figure(9.0, 3.6, left=0.65, bottom=0.5, top=0.62)
    ax = fig.add_subplot()
    ax.plot(d, vlim, linestyle="--", color=PALETTE["limit"], linewidth=1.0,
            label="corner-limit speed")
    ax.plot(d, v, color=PALETTE["speed"], label="speed")
    ax.set_ylim(0, max(float(np.nanmax(v)) * 1.15, 10.0))
    ax.set_xlim(d[0], d[-1])
    ax.set_xlabel("distance [m]")
    ax.set_ylabel("speed [km/h]")
    _corner_axis(ax, result)
    ax.legend(loc="lower right", ncols=2)
    _title(ax, f"{_names(result)}: speed, {result.time_label} {result.lap_time_s:.3f} s")
    return fig


@_styled
def usage_figure(result: LapResult) -> Figure:
    """Front and rear grip usage over distance, shaded where an axle or the engine limits.

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch, d = result.channels, _distance(result)
    lim = np.asarray(ch["limit"]).astype(int)
    code = {name: c for c, name in LIMIT_NAMES.items()}
    fig = _figure(9.0, 3.6, left=0.65, bottom=0.8, top=0.62)
    ax = fig.add_subplot()
    _shade(ax, d, lim == code["front"], PALETTE["front"], "front axle limits")
    _shade(ax, d, lim == code["rear"], PALETTE["rear"], "rear axle limits")
    _shade(ax, d, lim == code["engine"], PALETTE["engine"], "engine limits")
    ax.plot(d, ch["usage_front"], color=PALETTE["front"], label="front usage u_f")
    ax.plot(d, ch["usage_rear"], color=PALETTE["rear"], label="rear usage u_r")
    ax.axhline(1.0, color=PALETTE["ink"], linewidth=0.8, linestyle=":")
    ax.set_ylim(0, 1.12)
    ax.set_xlim(d[0], d[-1])
    ax.set_xlabel("distance [m]")
    ax.set_ylabel("grip usage [-]")
    _corner_axis(ax, result)
    fig.legend(loc="lower center", ncols=5)
    _title(ax, f"{_names(result)}: axle grip usage (friction ellipse)")
    return fig


def _stack_signed(ax, x, parts: Sequence[tuple[str, np.ndarray, str]]) -> None:
    """Stack positive parts upward from zero; take negative parts off the top as hatched bands.

    The top of the solid stack minus the hatched bands is the sum of the parts.
    """
    top = np.zeros_like(x)
    for label, values, color in parts:
        up = np.clip(np.asarray(values, float), 0, None)
        if np.any(up > 0):
            ax.fill_between(x, top, top + up, color=color, alpha=0.8, linewidth=0,
                            label=label)
        top = top + up
    for label, values, color in parts:
        dn = np.clip(np.asarray(values, float), None, 0)
        if np.any(dn < 0):
            ax.fill_between(x, top + dn, top, facecolor="none", edgecolor=color, hatch="////",
                            linewidth=0, label=f"{label}, removed")
        top = top + dn


@_styled
def axle_loads_figure(result: LapResult) -> Figure:
    """Axle-load parts over distance, one panel per axle.

    Static weight, aero load (CG convention) and ground-force transfer are stacked with their
    signs (ground transfer ``X h/L`` is taken from the front and added to the rear); their sum
    is the axle load (black line). The lateral transfer moves load from the inner to the outer
    wheel of an axle without changing the axle total, so it is drawn as a line of its own.

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch, d = result.channels, _distance(result)
    gt = np.asarray(ch["ground_transfer_n"], float)
    fig = _figure(10.5, 6.0, left=0.85, right=2.45, bottom=0.5, top=0.62, rows=2)
    axes = fig.subplots(2, 1, sharex=True)
    for ax, axle, sign in ((axes[0], "front", -1.0), (axes[1], "rear", 1.0)):
        _stack_signed(ax, d, [
            ("static", ch[f"static_{axle}_n"], PALETTE["static"]),
            ("aero (CG convention)", ch[f"aero_{axle}_n"], PALETTE["aero"]),
            ("ground transfer " + ("-X h/L" if sign < 0 else "+X h/L"), sign * gt,
             PALETTE["ground"]),
        ])
        ax.plot(d, ch[f"fz_{axle}_n"], color=PALETTE["ink"], linewidth=1.1,
                label="axle load")
        ax.plot(d, ch[f"lat_transfer_{axle}_n"], color=PALETTE["lateral"], linewidth=1.1,
                label="lateral transfer (inner to outer wheel)")
        ax.axhline(0.0, color=PALETTE["muted"], linewidth=0.7)
        ax.set_ylabel(f"{axle} axle load [N]")
        ax.set_xlim(d[0], d[-1])
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=7)
    axes[1].set_xlabel("distance [m]")
    _corner_axis(axes[0], result)
    _suptitle(fig, f"{_names(result)}: axle-load parts")
    return fig


def _binned(x: np.ndarray, y: np.ndarray, width: float) -> tuple[np.ndarray, np.ndarray]:
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if x.size == 0:
        return x, y
    idx = np.floor(x / width).astype(int)
    keys = np.unique(idx)
    xm = np.array([x[idx == k].mean() for k in keys])
    ym = np.array([y[idx == k].mean() for k in keys])
    return xm, ym


@_styled
def aero_balance_figure(result: LapResult) -> Figure:
    """Aero balance (front share of downforce) against speed in both conventions.

    The CG convention is the split that acts on track; the ground convention is what
    wheel-restrained scales read (apparent front lift by ``D h/L``).

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch = result.channels
    v = np.asarray(ch["speed_kph"], float)
    net_lift = result.car.aero.downforce_area < 0
    fig = _figure(7.0, 4.2, left=1.0 if net_lift else 0.7, bottom=0.5, top=0.32)
    ax = fig.add_subplot()
    if net_lift:
        # Net lift: a share of a negative total means nothing; show the axle loads instead.
        for key, label, color in (("aero_front_n", "front axle", PALETTE["front"]),
                                  ("aero_rear_n", "rear axle", PALETTE["rear"])):
            f = np.asarray(ch[key], float)
            ax.scatter(v, f, s=4, color=color, alpha=0.25, linewidths=0)
            xb, yb = _binned(v, f, 10.0)
            ax.plot(xb, yb, color=color, marker="o", markersize=3, label=label)
        ax.axhline(0.0, color=PALETTE["muted"], linewidth=0.7)
        ax.set_xlabel("speed [km/h]")
        ax.set_ylabel("aero load on the axle [N]\n(CG convention, < 0 = lift)")
        ax.legend(loc="best")
        _title(ax, f"{_names(result)}: net lift, axle aero loads vs speed")
        return fig
    series = (("aero_balance_front", "on track (CG convention)", PALETTE["aero"]),
              ("aero_balance_front_ground", "wheel-restrained scales (ground convention)",
               PALETTE["ground"]))
    any_finite = False
    for key, label, color in series:
        b = np.asarray(ch[key], float) * 100.0
        ok = np.isfinite(b)
        any_finite |= bool(ok.any())
        ax.scatter(v[ok], b[ok], s=4, color=color, alpha=0.25, linewidths=0)
        xb, yb = _binned(v, b, 10.0)
        ax.plot(xb, yb, color=color, marker="o", markersize=3, label=label)
    if not any_finite:
        ax.text(0.5, 0.5, "no downforce: aero balance undefined", transform=ax.transAxes,
                ha="center", color=PALETTE["muted"])
    ax.set_xlabel("speed [km/h]")
    ax.set_ylabel("front share of downforce [%]")
    ax.legend(loc="best")
    _title(ax, f"{_names(result)}: aero balance vs speed")
    return fig


@_styled
def gg_figure(result: LapResult) -> Figure:
    """Longitudinal against lateral acceleration (in g), coloured by speed.

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    ch = result.channels
    ax_g = np.asarray(ch["ax_mps2"], float) / G0
    ay_g = np.asarray(ch["ay_mps2"], float) / G0
    fig = _figure(5.8, 5.0)
    # square plotting area (equal scales over equal limits), colour bar right of it
    ax = _axes_at(fig, 0.85, 0.5, 4.0, 4.0)
    sc = ax.scatter(ay_g, ax_g, c=ch["speed_kph"], cmap=SEQUENTIAL, s=6, linewidths=0)
    cb = _colorbar(fig, sc, ax)
    cb.set_label("speed [km/h]")
    lim = max(float(np.nanmax(np.abs(np.concatenate([ax_g, ay_g])))) * 1.1, 0.2)
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.axhline(0, color=PALETTE["muted"], linewidth=0.7)
    ax.axvline(0, color=PALETTE["muted"], linewidth=0.7)
    ax.set_xlabel("lateral acceleration a_y [g]  (left +)")
    ax.set_ylabel("longitudinal acceleration a_x [g]  (forward +)")
    _title(ax, f"{_names(result)}: g-g", 10)
    return fig


def _field(c: dict, key: str) -> float:
    v = c.get(key)
    return math.nan if v is None else float(v)


@_styled
def liftoff_figure(result: LapResult) -> Figure:
    """Per corner, tightest first: the lift-off margin (with engine braking and coasting),
    coloured by verdict, and the rear reserve after a lift at the limit (< 0 saturates).

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    cs = ranked(result.corners)
    fig = _figure(9.0, 5.6, left=1.0, bottom=1.2, top=0.62, rows=2)
    axes = fig.subplots(2, 1, sharex=True)
    if not cs:
        for ax in axes:
            ax.text(0.5, 0.5, "no corners on this track", transform=ax.transAxes,
                    ha="center", color=PALETTE["muted"])
        _suptitle(fig, f"{_names(result)}: lift-off check")
        return fig
    pos = np.arange(len(cs))
    w = 0.38
    margin = [_field(c, "liftoff_margin") for c in cs]
    coast = [_field(c, "coast_margin") for c in cs]
    colors = [PALETTE.get(c.get("liftoff_verdict", "not-checked"), PALETTE["not-checked"])
              for c in cs]
    t = result.settings.get("liftoff_thresholds", {})
    ax = axes[0]
    ax.bar(pos - w / 2, margin, w, color=colors, label="with engine braking")
    ax.bar(pos + w / 2, coast, w, color=PALETTE["coast"], label="coasting")
    lo = np.nanmin(np.asarray(margin + coast + [1.0]))
    for key, text in (("critical_margin", "critical below"), ("marginal_margin",
                                                              "marginal below")):
        if key in t:
            ax.axhline(t[key], color=PALETTE["ink"], linewidth=0.8, linestyle=":")
            ax.text(1.0, t[key], f" {text} {t[key]:g} ", transform=ax.get_yaxis_transform(),
                    ha="right", va="bottom", fontsize=7, color=PALETTE["ink"])
            lo = min(lo, t[key])
    ax.set_ylim(max(0.0, lo - 0.05), 1.02)
    ax.set_ylabel("lift-off margin\na_y,safe / a_y,limit [-]")
    ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), ncols=2)
    ax = axes[1]
    reserve = [_field(c, "liftoff_rear_reserve") for c in cs]
    ax.bar(pos, reserve, 0.6, color=colors)
    ax.axhline(0.0, color=PALETTE["ink"], linewidth=1.0, linestyle="--")
    ax.text(1.0, 0.0, " below: rear saturates ", transform=ax.get_yaxis_transform(),
            ha="right", va="top", fontsize=7, color=PALETTE["ink"])
    ax.set_ylabel("rear reserve after a\nlift at the limit [-]")
    for verdict in VERDICTS:
        ax.bar([0], [0], 0, color=PALETTE[verdict], label=verdict)
    fig.legend(*ax.get_legend_handles_labels(), loc="lower center", ncols=5,
               title="verdict", title_fontsize=7.5)
    ax.set_xticks(pos, labels=[f"{c['id']}\n{c['direction']}" for c in cs])
    ax.set_xlabel("corner (tightest margin first)")
    _suptitle(fig, f"{_names(result)}: lift-off margin per corner")
    return fig


@_styled
def liftoff_response_figure(curve: ResponseCurve, title: str = "") -> Figure:
    """Lift-off response against the initial lateral acceleration (ISO 9816 stepping):
    balance shift, rear usage after the lift, front-load change and the front share of the
    vertical load, with engine braking and coasting.

    Parameters
    ----------
    curve : ResponseCurve
        From :func:`lapbalance.liftoff.response_curve` or
        :func:`lapbalance.liftoff.corner_response`. [-]
    title : str
        Figure title (car and track names, say). [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    c = curve.columns
    ay = np.asarray(c["ay_initial_mps2"], float)
    fig = _figure(9.5, 6.4, left=0.85, bottom=0.5, top=0.4, rows=2, cols=2, wgap=0.9)
    axes = fig.subplots(2, 2, sharex=True).ravel()
    where = (f"corner {curve.corner_id}, " if curve.corner_id is not None else "") + \
        f"radius {curve.radius_m:.0f} m"
    _suptitle(fig, (f"{_plain(title)}: " if title else "") + f"lift-off response, {where}; "
              f"margin {curve.margin:.3f}")
    if ay.size == 0:
        for ax in axes:
            ax.text(0.5, 0.5, "the limit is below 4 m/s² here", transform=ax.transAxes,
                    ha="center", color=PALETTE["muted"])
        return fig
    ay_safe = curve.margin * ay[-1]
    panels = (
        (("balance_shift", "with engine braking", PALETTE["rear"]),
         ("coast_balance_shift", "coasting", PALETTE["coast"]),
         "balance shift B_off - B_on [-]"),
        (("usage_rear_off", "after lift, engine braking", PALETTE["rear"]),
         ("usage_rear_coast", "after lift, coasting", PALETTE["coast"]),
         "rear usage u_r [-]"),
        (("front_load_change_n", "engine braking", PALETTE["rear"]),
         ("coast_front_load_change_n", "coasting", PALETTE["coast"]),
         "front-load change on the lift [N]"),
        (("front_share_off", "after lift, engine braking", PALETTE["rear"]),
         ("front_share_coast", "after lift, coasting", PALETTE["coast"]),
         "front share of vertical load [-]"),
    )
    for ax, (one, two, ylabel) in zip(axes, panels, strict=True):
        for key, label, color in (one, two):
            ax.plot(ay, c[key], marker="o", markersize=3, color=color, label=label)
        ax.set_ylabel(ylabel)
        if curve.margin < 1.0:
            ax.axvline(ay_safe, color=PALETTE["lift-critical"], linewidth=0.9, linestyle=":")
    axes[1].plot(ay, c["usage_rear_on"], color=PALETTE["ink"], linewidth=1.0,
                 label="on throttle")
    axes[1].axhline(1.0, color=PALETTE["ink"], linewidth=1.0, linestyle="--")
    axes[3].plot(ay, c["front_share_on"], color=PALETTE["ink"], linewidth=1.0,
                 label="on throttle")
    for ax in axes:
        ax.legend(loc="best")
    for ax in axes[2:]:
        ax.set_xlabel("initial lateral acceleration a_y [m/s²]")
    if curve.margin < 1.0:
        axes[1].text(ay_safe, 1.0, " safe-lift limit ", ha="right", va="bottom", fontsize=7,
                     color=PALETTE["lift-critical"])
    return fig


def _labels(results: Sequence[LapResult], labels: Sequence[str] | None) -> list[str]:
    if labels is not None:
        if len(labels) != len(results):
            raise ValueError(f"{len(labels)} labels for {len(results)} results")
        return [_plain(s) for s in labels]
    return [_plain(r.car.name) for r in results]


@_styled
def overlay_figure(results: Sequence[LapResult], labels: Sequence[str] | None = None) -> Figure:
    """Speed and balance index over distance for several results, overlaid.

    Parameters
    ----------
    results : sequence of LapResult
        Laps to overlay (the first is drawn as the base). [-]
    labels : sequence of str, optional
        Legend labels (default: car names). [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    labels = _labels(results, labels)
    track = _plain(getattr(results[0].track, "name", "") or "track")
    title = textwrap.wrap(f"{' vs '.join(labels)} — {track}: speed and balance", 100)
    legend_rows = -(-len(results) // 3)
    fig = _figure(9.0, 5.6, left=1.0, bottom=0.55 + 0.22 * legend_rows,
                  top=0.65 + 0.18 * (len(title) - 1), rows=2)
    axes = fig.subplots(2, 1, sharex=True)
    for j, (r, lab) in enumerate(zip(results, labels, strict=True)):
        color = SERIES[j % len(SERIES)]
        d = _distance(r)
        axes[0].plot(d, r.channels["speed_kph"], color=color, label=f"{lab} "
                     f"({r.time_label} {r.lap_time_s:.3f} s)", linewidth=1.4 if j == 0 else 1.1)
        axes[1].plot(d, r.channels["balance_index"], color=color, label=lab,
                     linewidth=1.4 if j == 0 else 1.1)
    axes[0].set_ylabel("speed [km/h]")
    fig.legend(*axes[0].get_legend_handles_labels(), loc="lower center",
               ncols=min(len(results), 3))
    axes[1].axhline(0, color=PALETTE["muted"], linewidth=0.7)
    axes[1].set_ylabel("balance index u_r - u_f [-]\n(> 0 oversteer-leaning)")
    axes[1].set_xlabel("distance [m]")
    axes[1].set_xlim(0, max(float(_distance(r)[-1]) for r in results))
    _corner_axis(axes[0], results[0])
    _suptitle(fig, "\n".join(title))
    return fig


def time_delta(base: LapResult, other: LapResult) -> tuple[np.ndarray, np.ndarray]:
    """Elapsed-time difference ``other - base`` on the base's distance grid.

    Parameters
    ----------
    base, other : LapResult
        Two laps on the same track. [-]

    Returns
    -------
    distance : numpy.ndarray
        Base distances within the range both laps cover. [m]
    delta : numpy.ndarray
        Time of ``other`` minus time of ``base`` at that distance (> 0: other is behind). [s]
    """
    db, tb = _distance(base), np.asarray(base.channels["time_s"], float)
    do, to = _distance(other), np.asarray(other.channels["time_s"], float)
    keep = db <= do[-1]
    d = db[keep]
    return d, np.interp(d, do, to) - tb[keep]


@_styled
def delta_figure(base: LapResult, other: LapResult, labels: Sequence[str] | None = None
                 ) -> Figure:
    """Time delta over distance (other minus base) and a track map coloured by its rate.

    Parameters
    ----------
    base, other : LapResult
        Two laps on the same track. [-]
    labels : sequence of two str, optional
        Names of base and other (default: car names). [-]

    Returns
    -------
    matplotlib.figure.Figure
    """
    lb, lo = _labels([base, other], labels)
    d, dt = time_delta(base, other)
    rate = np.gradient(dt, d) * 1e3 if d.size > 1 else np.zeros_like(d)
    fig = _figure(11.0, 4.6)
    ax = _axes_at(fig, 0.95, 0.5, 5.15, 3.48)
    axm = _axes_at(fig, 6.85, 0.5, 3.2, 3.48)
    ax.fill_between(d, 0, dt, where=dt >= 0, color=PALETTE["rear"], alpha=0.25, linewidth=0)
    ax.fill_between(d, 0, dt, where=dt < 0, color=PALETTE["front"], alpha=0.25, linewidth=0)
    ax.plot(d, dt, color=PALETTE["ink"])
    ax.axhline(0, color=PALETTE["muted"], linewidth=0.7)
    ax.set_xlim(d[0], d[-1])
    ax.set_xlabel("distance [m]")
    ax.set_ylabel("time delta, other - base [s]\n(> 0: other behind)")
    _corner_axis(ax, base)
    n = d.size
    x = np.asarray(base.channels["x_m"], float)[:n]
    y = np.asarray(base.channels["y_m"], float)[:n]
    m = _symmetric_limit(rate)
    lc = _track_line(axm, x, y, rate, DIVERGING, TwoSlopeNorm(0.0, -m, m), width=2.5)
    cb = _colorbar(fig, lc, axm, width=0.15, extend="both")
    cb.set_label("time delta rate [ms/m]  (> 0: losing)")
    axm.set_title("where the time goes", fontsize=9)
    track = _plain(getattr(base.track, "name", "") or "track")
    total = other.lap_time_s - base.lap_time_s
    _suptitle(fig, f"{lo} (other) vs {lb} (base) — {track}: {base.time_label} delta "
              f"{total:+.3f} s")
    return fig


#: Figures of one lap: file stem -> (function, caption).
LAP_FIGURES: dict[str, tuple[Callable[[LapResult], Figure], str]] = {
    "track_map": (track_map_figure, "Balance index where the car mostly corners (|a_y| at "
                  "or above the lift-off threshold, 4 m/s² by default, and |a_x| at most half "
                  "of it; grey elsewhere, where drive force on the rear sets the index), "
                  "corner numbers at the apexes, lift-off flags (critical, marginal) at the "
                  "corner's tightest step."),
    "speed": (speed_figure, "Speed over distance; dashed: steady corner-limit speed."),
    "usage": (usage_figure, "Front and rear grip usage; shaded where the front axle, the "
              "rear axle or the engine sets the speed."),
    "axle_loads": (axle_loads_figure, "Axle-load parts with their signs: static, aero (CG "
                   "convention), ground-force transfer; lateral transfer moves load between "
                   "the wheels of an axle."),
    "aero_balance": (aero_balance_figure, "Aero balance vs speed on track (CG convention) "
                     "and as wheel-restrained scales read it (ground convention); for a car "
                     "with net lift, the axle aero loads instead."),
    "gg": (gg_figure, "Longitudinal vs lateral acceleration, coloured by speed."),
    "liftoff": (liftoff_figure, "Lift-off margin per corner, tightest first (with engine "
                "braking and coasting), and the rear reserve after a lift at the limit "
                "(< 0 = the rear saturates)."),
}


def figure_png(fig: Figure, dpi: int = 110) -> bytes:
    """Render ``fig`` to PNG bytes.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure (left as drawn: dropping the last reference frees it, which is cheaper
        than clearing it, since clearing builds new ticks). [-]
    dpi : int
        Resolution. [dots per inch]

    Returns
    -------
    bytes
        PNG file contents. [-]
    """
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def figure_bytes(fig: Figure, fmt: str = "png", dpi: int = 110) -> bytes:
    """Render ``fig`` as ``png``, ``svg`` or ``pdf`` bytes.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure (left as drawn, as by :func:`figure_png`). [-]
    fmt : str
        ``"png"``, ``"svg"`` or ``"pdf"``. [-]
    dpi : int
        Resolution of PNG output (and of raster parts of the others). [dots per inch]
    """
    if fmt not in ("png", "svg", "pdf"):
        raise ValueError(f"figure format {fmt!r} is not png, svg or pdf")
    buf = io.BytesIO()
    meta = {"Date": None} if fmt == "pdf" else ({"Date": None} if fmt == "svg" else None)
    fig.savefig(buf, format=fmt, dpi=dpi, metadata=meta)
    return buf.getvalue()


def _draw(fn: Callable[..., Figure], args: tuple, fmt: str, dpi: int) -> bytes:
    return figure_bytes(fn(*args), fmt, dpi)


def render_figures(jobs: Sequence[tuple[Callable[..., Figure], tuple]], fmt: str = "png",
                   dpi: int = 110, processes: int | None = None) -> list[bytes]:
    """Build and render several figures, on every core where that pays.

    Parameters
    ----------
    jobs : sequence of (function, args)
        Figure functions (returning a :class:`~matplotlib.figure.Figure`) and their
        positional arguments. [-]
    fmt : str
        ``"png"``, ``"svg"`` or ``"pdf"``. [-]
    dpi : int
        Resolution. [dots per inch]
    processes : int, optional
        Processes that draw (default: one per core, see
        :func:`lapbalance.forkpool.default_processes`); 1 draws them here, in order. [-]

    Returns
    -------
    list of bytes
        The files' contents, in the order of ``jobs`` (the same bytes for any ``processes``). [-]
    """
    from lapbalance import forkpool

    return forkpool.run([functools.partial(_draw, fn, tuple(args), fmt, dpi)
                         for fn, args in jobs], processes)


def lap_figures(result: LapResult, fmt: str = "png", dpi: int = 110,
                map_channel: str | None = None, processes: int | None = None,
                curve: ResponseCurve | None = None) -> dict[str, bytes]:
    """Every lap figure of :data:`LAP_FIGURES` as file bytes (``lapbalance lap --plots``).

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]
    fmt : str
        ``"png"``, ``"svg"`` or ``"pdf"``. [-]
    dpi : int
        Resolution. [dots per inch]
    map_channel : str, optional
        Channel that colours the track map (default: the cornering balance). [-]
    processes : int, optional
        As :func:`render_figures`. [-]
    curve : ResponseCurve, optional
        Also draw this lift-off response (:func:`liftoff_response_figure`, titled with the car
        name) as ``liftoff_response.<fmt>``. [-]

    Returns
    -------
    dict of str -> bytes
        File name (``<figure>.<fmt>``) -> contents. [-]
    """
    names = list(LAP_FIGURES)
    jobs = [(fn, (result, map_channel) if name == "track_map" and map_channel else (result,))
            for name, (fn, _) in LAP_FIGURES.items()]
    if curve is not None:
        names.append("liftoff_response")
        jobs.append((liftoff_response_figure, (curve, result.car.name)))
    files = render_figures(jobs, fmt, dpi, processes)
    return {f"{name}.{fmt}": data for name, data in zip(names, files, strict=True)}


def lap_figures_png(result: LapResult, dpi: int = 110) -> dict[str, bytes]:
    """Every lap figure as PNG bytes (used by ``lapbalance lap --plots``).

    Parameters
    ----------
    result : LapResult
        A simulated lap. [-]
    dpi : int
        Resolution. [dots per inch]

    Returns
    -------
    dict of str -> bytes
        File name (``<figure>.png``) -> PNG contents. [-]
    """
    return lap_figures(result, "png", dpi)


# --------------------------------------------------------------------------------------------
# Track geometry (takes a Track, not a lap result)
# --------------------------------------------------------------------------------------------


def draw_track_curvature(ax, track) -> None:
    """Draw a track's curvature against distance on ``ax``, corners shaded and labelled.

    Curvature is shown in 1/km (left turn positive, ISO 8855); the smallest radius is marked.
    The smoothing length the fit chose at each point (:attr:`lapbalance.track.Track.smoothing_m`)
    is drawn on a right-hand axis when the track carries it.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes to draw on. [-]
    track : lapbalance.track.Track
        The track. [-]
    """
    d = np.asarray(track.distance_m, float)
    k = 1000.0 * np.asarray(track.curvature_1pm, float)  # [1/km]
    for c in track.corners:
        color = PALETTE["front"] if c.direction == "left" else PALETTE["rear"]
        spans = ([(c.entry_m, c.exit_m)] if c.exit_m >= c.entry_m
                 else [(c.entry_m, float(d[-1])), (0.0, c.exit_m)])
        for a, b in spans:
            ax.axvspan(a, b, color=color, alpha=0.10, linewidth=0)
        ax.annotate(str(c.id), (c.apex_m, 1.0), xycoords=("data", "axes fraction"),
                    ha="center", va="bottom", fontsize=7, color=color)
    ax.plot(d, k, color=PALETTE["ink"], lw=1.0)
    ax.axhline(0.0, color=PALETTE["muted"], lw=0.6)
    if np.any(k):
        i = int(np.argmax(np.abs(k)))
        ax.plot(d[i], k[i], "o", ms=4, color=PALETTE["lateral"],
                label=f"smallest radius {1000.0 / abs(k[i]):.1f} m")
        ax.legend(loc="lower right", fontsize=7, frameon=False)
    ax.set_xlabel("distance [m]")
    ax.set_ylabel("curvature [1/km] (left +)")
    ax.set_xlim(float(d[0]), float(track.length_m))
    sm = getattr(track, "smoothing_m", None)
    if sm is not None:
        ax2 = ax.twinx()
        ax2.plot(d, sm, color=PALETTE["muted"], lw=0.7, alpha=0.7)
        ax2.set_yscale("log")
        ax2.set_ylabel("smoothing length [m]", color=PALETTE["muted"], fontsize=8)
        ax2.tick_params(axis="y", colors=PALETTE["muted"], labelsize=7)


@_styled
def track_curvature_figure(track) -> Figure:
    """Curvature against distance of a :class:`~lapbalance.track.Track` (see
    :func:`draw_track_curvature`), titled with its estimated position noise.

    Parameters
    ----------
    track : lapbalance.track.Track
        The track. [-]

    Returns
    -------
    matplotlib.figure.Figure
        The figure. [-]
    """
    fig = _figure(7.0, 3.2, left=0.75, right=0.6, bottom=0.5, top=0.3)
    ax = fig.add_subplot(1, 1, 1)
    draw_track_curvature(ax, track)
    noise = getattr(track, "noise_m", float("nan"))
    how = "given" if getattr(track, "noise_given", False) else "estimated"
    _title(ax, _plain(f"{track.name}: curvature; position noise {noise * 1000:.0f} mm "
                      f"({how})"), 9)
    return fig
