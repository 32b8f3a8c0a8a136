"""Figure of a correlation with a logged lap (:class:`lapbalance.correlate.Correlation`).

Same style and palette as :mod:`lapbalance.plots`; no physics, only drawing of the traces and
tables the correlation already holds. Colours: where the model is optimistic (faster than the
car) in the rear/oversteer colour, pessimistic in the front colour, close in grey.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from lapbalance.plots import PALETTE, _axes_at, _figure, _plain, _styled, _title

#: verdict -> colour of its bar.
VERDICT_COLOURS = {"optimistic": PALETTE["rear"], "pessimistic": PALETTE["front"],
                   "close": PALETTE["muted"], "no data": PALETTE["grid"]}


@_styled
def correlation_figure(corr) -> Figure:
    """Log vs model: speed over distance, cumulative time delta, per-segment speed error.

    Parameters
    ----------
    corr : Correlation
        From :func:`lapbalance.correlate.correlate`. [-]

    Returns
    -------
    matplotlib.figure.Figure
        Three panels: speed [km/h] over distance [m] (log, model, fitted model); time delta
        log minus model [s] (rising = the model gains on the car: optimistic there); model
        minus logged speed [km/h] per corner (minimum) and straight (top speed). [-]
    """
    tr = corr.trace
    d = tr["distance_m"]
    rows = corr.segments
    rotate = len(rows) > 30
    # fixed layout [in]: the speed panel's tick labels under it, the time-delta panel's axis
    # label and the bar panel's title between them, the segment names (upright or turned)
    # at the bottom
    bottom, top, gap1, gap2 = (0.75 if rotate else 0.45), 0.55, 0.3, 0.75
    span = 8.2 - bottom - top - gap1 - gap2
    h1, h2, h3 = (span * r / 5.0 for r in (2.2, 1.3, 1.5))
    fig = _figure(9.0, 8.2)
    ax1 = _axes_at(fig, 0.75, bottom + h3 + gap2 + h2 + gap1, 8.1, h1)
    ax2 = _axes_at(fig, 0.75, bottom + h3 + gap2, 8.1, h2)
    ax3 = _axes_at(fig, 0.75, bottom, 8.1, h3)
    ax1.plot(d, tr["speed_log_kph"], color=PALETTE["lateral"], linewidth=1.0,
             label=f"log (lap {corr.lap.number})")
    ax1.plot(d, tr["speed_model_kph"], color=PALETTE["speed"], linewidth=1.1, label="model")
    if "speed_fitted_kph" in tr:
        ax1.plot(d, tr["speed_fitted_kph"], color=PALETTE["aero"], linewidth=1.0,
                 linestyle="--", label="fitted model")
    ax1.set_ylabel("speed [km/h]")
    ax1.legend(loc="lower right", ncol=3)
    al = corr.alignment
    _title(ax1, _plain(f"{corr.model.car.name} — {getattr(corr.model.track, 'name', '')}: "
                       f"log {corr.lap.lap_time_s:.2f} s, model {corr.model.lap_time_s:.2f} s"
                       f"\naligned by {al.method}, distance scale {al.scale:.4f}"))
    ax2.axhline(0.0, color=PALETTE["ink"], linewidth=0.8, linestyle=":")
    ax2.plot(d, tr["time_delta_s"], color=PALETTE["speed"], label="log − model")
    if "time_delta_fitted_s" in tr:
        ax2.plot(d, tr["time_delta_fitted_s"], color=PALETTE["aero"], linestyle="--",
                 label="log − fitted model")
    ax2.set_ylabel("time delta [s]")
    ax2.set_xlabel("distance [m]")
    ax2.legend(loc="upper left")
    ax2.sharex(ax1)
    for ax in (ax1, ax2):
        for r in corr.segments:
            if r["kind"] == "corner":
                ax.axvline(r["at_m"], color=PALETTE["grid"], linewidth=0.8, zorder=0)
    names = [r["segment"] for r in rows]
    vals = np.array([r["model_minus_log_kph"] for r in rows], float)
    cols = [VERDICT_COLOURS.get(r["verdict"], PALETTE["muted"]) for r in rows]
    x = np.arange(len(rows))
    ax3.bar(x, np.nan_to_num(vals), color=cols, width=0.7)
    ax3.axhline(0.0, color=PALETTE["ink"], linewidth=0.8)
    ax3.set_xticks(x, labels=names, fontsize=7, rotation=90 if rotate else 0)
    ax3.set_ylabel("model − log [km/h]")
    ax3.set_title("corner minimum (C) and straight top (S) speed: above 0 the model is "
                  "optimistic, below pessimistic", fontsize=9)
    return fig
