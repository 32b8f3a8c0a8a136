"""Figures of the single-track lift-off runs (:mod:`lapbalance.transient`).

Each function takes :class:`~lapbalance.transient.LiftSweep` objects and returns a
:class:`matplotlib.figure.Figure`; no physics is computed here (only unit display and
differences from the initial value, which the runs already define). Same palette and style as
:mod:`lapbalance.plots`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

from lapbalance.plots import (
    PALETTE,
    SEQUENTIAL,
    SERIES,
    _figure,
    _plain,
    _styled,
    _suptitle,
    figure_png,
)


def _runs_colours(n: int):
    return [SEQUENTIAL(0.25 + 0.75 * i / max(n - 1, 1)) for i in range(n)]


@_styled
def histories_figure(sweep, car_name: str = "") -> Figure:
    """Time histories of every run at one radius: yaw-rate ratio r/r_ref, sideslip change,
    lateral acceleration and rear usage after the lift, one line per initial a_y0.
    """
    fig = _figure(9.0, 6.2, left=0.8, bottom=0.5, top=0.4, rows=2, cols=2)
    axs = fig.subplots(2, 2, sharex=True)
    cols = _runs_colours(len(sweep.runs))
    for run, c in zip(sweep.runs, cols, strict=True):
        h = run.history
        t = h["time_s"]
        lab = f"{run.ay0_mps2:.1f}"
        axs[0, 0].plot(t, h["yaw_rate_radps"] / h["yaw_rate_ref_radps"], color=c, label=lab)
        axs[0, 1].plot(t, h["sideslip_deg"] - h["sideslip_deg"][0], color=c)
        axs[1, 0].plot(t, h["ay_mps2"], color=c)
        axs[1, 1].plot(t, h["usage_rear"], color=c)
    axs[0, 0].axhline(1.0, color=PALETTE["muted"], lw=0.8)
    axs[0, 0].axvline(1.0, color=PALETTE["muted"], lw=0.8, ls=":")
    axs[0, 0].set_ylabel("yaw rate / reference [-]")
    axs[0, 0].set_ylim(0.6, min(4.0, max(1.5, axs[0, 0].get_ylim()[1])))
    axs[0, 1].set_ylabel("sideslip change [deg] (< 0 tail out)")
    lo = min([np.nanmin(r.history["sideslip_deg"] - r.history["sideslip_deg"][0])
              for r in sweep.runs] + [-1.0])
    axs[0, 1].set_ylim(max(lo * 1.05, -20.0), None)
    axs[1, 0].set_ylabel("lateral acceleration [m/s²]")
    axs[1, 1].set_ylabel("rear usage [-]")
    axs[1, 1].axhline(1.0, color=PALETTE["rear"], lw=0.8)
    for ax in axs[1]:
        ax.set_xlabel("time after the lift [s]")
    if sweep.runs:
        axs[0, 0].legend(title="a_y0 [m/s²]", ncol=2, fontsize=7, title_fontsize=7)
    _suptitle(fig, _plain(f"{car_name} — power-off in a turn, R = {sweep.radius_m:g} m "
                          "(constant-radius method, wheel held)"), 12.0)
    return fig


@_styled
def figures_figure(sweeps: Sequence, car_name: str = "") -> Figure:
    """The run figures against the initial lateral acceleration a_y0, one line per radius
    (the way ISO 9816 results are read); spins marked with a cross."""
    fig = _figure(9.0, 6.2, left=0.8, bottom=0.5, top=0.4, rows=2, cols=2)
    axs = fig.subplots(2, 2, sharex=True)
    panels = [("yaw_rate_ratio", "yaw-rate ratio at t0+1 s [-]", 1.0),
              ("sideslip_change_deg", "sideslip change at t0+1 s [deg]", 0.0),
              ("path_radius_ratio", "path-radius ratio at t0+1 s [-]", 1.0),
              ("mean_decel_mps2", "mean deceleration 0-1 s [m/s²]", None)]
    for i, sw in enumerate(sweeps):
        c = SERIES[i % len(SERIES)]
        ay = np.array([r.ay0_mps2 for r in sw.runs])
        spin = np.array([bool(r.figures["spin"]) for r in sw.runs])
        for ax, (key, _lab, _ref) in zip(axs.flat, panels, strict=True):
            y = np.array([r.figures[key] for r in sw.runs], float)
            ax.plot(ay, y, color=c, marker="o", ms=3, label=f"R = {sw.radius_m:g} m")
            if spin.any():
                ax.plot(ay[spin], y[spin], ls="none", marker="X", ms=7,
                        color=PALETTE["lift-critical"])
        for ax in axs.flat:
            ax.axvline(sw.ay_limit_mps2, color=c, lw=0.8, ls=":")
    for ax, (_key, lab, ref) in zip(axs.flat, panels, strict=True):
        ax.set_ylabel(lab)
        if ref is not None:
            ax.axhline(ref, color=PALETTE["muted"], lw=0.8)
    axs[0, 0].set_ylim(0.8, min(4.0, max(1.3, axs[0, 0].get_ylim()[1])))
    axs[0, 1].set_ylim(max(axs[0, 1].get_ylim()[0], -15.0), None)
    axs[1, 0].set_ylim(max(axs[1, 0].get_ylim()[0], 0.0), min(axs[1, 0].get_ylim()[1], 2.0))
    for ax in axs[1]:
        ax.set_xlabel("initial lateral acceleration a_y0 [m/s²]")
    axs[0, 0].legend()
    _suptitle(fig, _plain(f"{car_name} — lift-off figures against a_y0 (X = spin; dotted = "
                          "steady limit)"), 12.0)
    return fig


def figures_png(sweeps: Sequence, car_name: str = "", dpi: int = 110) -> dict[str, bytes]:
    """Every lift-off figure as PNG bytes: ``liftrun_figures.png`` and one
    ``liftrun_history_R<radius>.png`` per radius. [-]"""
    out = {"liftrun_figures.png": figure_png(figures_figure(sweeps, car_name), dpi)}
    for sw in sweeps:
        if sw.runs:
            name = f"liftrun_history_R{_tag(sw.radius_m)}.png"
            out[name] = figure_png(histories_figure(sw, car_name), dpi)
    return out


def _tag(radius: float) -> str:
    return f"{radius:g}".replace(".", "p") if math.isfinite(radius) else "x"
