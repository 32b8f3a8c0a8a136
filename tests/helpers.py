"""Shared test helpers: analytic tracks and programmatic cars (no check values here)."""

from __future__ import annotations

import copy
import math
from types import SimpleNamespace

import numpy as np

from lapbalance.car import car_from_dict


def analytic_track(curvature, ds=1.0, closed=False, grade=None, bank=None, name="analytic",
                   corners=()):
    """A Track-like object with exact curvature/grade/bank arrays (no resampling)."""
    k = np.asarray(curvature, float)
    n = len(k)
    th = np.concatenate([[0.0], np.cumsum(k[:-1]) * ds])
    x = np.concatenate([[0.0], np.cumsum(np.cos(th[:-1])) * ds])
    y = np.concatenate([[0.0], np.cumsum(np.sin(th[:-1])) * ds])
    length = n * ds if closed else (n - 1) * ds
    return SimpleNamespace(
        name=name, source=name, closed=closed, step_m=ds, length_m=length,
        distance_m=np.arange(n) * ds, x_m=x, y_m=y, z_m=np.zeros(n), curvature_1pm=k,
        grade_rad=np.zeros(n) if grade is None else np.broadcast_to(grade, n).astype(float),
        bank_rad=np.zeros(n) if bank is None else np.broadcast_to(bank, n).astype(float),
        width_m=np.full(n, np.nan), corners=tuple(corners), sector_starts_m=())


def circle(radius, ds=1.0, left=True):
    """Closed circle of ``radius`` [m] with exact constant curvature."""
    length = 2 * math.pi * radius
    n = int(round(length / ds))
    ds = length / n
    return analytic_track(np.full(n, (1 if left else -1) / radius), ds=ds, closed=True,
                          name=f"circle R{radius:g}")


def straight(length, ds=1.0):
    """Open straight of ``length`` [m]."""
    n = int(round(length / ds)) + 1
    return analytic_track(np.zeros(n), ds=length / (n - 1), closed=False, name="straight")


BASE_CAR = {
    "name": "test car",
    "chassis": {"mass_kg": 1200.0, "wheelbase_m": 2.6, "front_weight_fraction": 1.4 / 2.6,
                "cg_height_m": 0.5, "track_front_m": 1.6, "track_rear_m": 1.58},
    "aero": {"downforce_area_m2": 0.0, "drag_area_m2": 0.0, "balance_convention": "cg"},
    "tyres": {"rolling_resistance": 0.0,
              "front": {"peak_friction": 1.4, "load_sensitivity": 0.0},
              "rear": {"peak_friction": 1.4, "load_sensitivity": 0.0}},
    "powertrain": {"drive": "rear", "power_kw": 400.0, "gear_ratios": [1.0],
                   "final_drive": 1.0, "wheel_radius_m": 0.3, "efficiency": 1.0,
                   "shift_rpm": 20000.0, "max_tractive_force_n": 1e5},
    "brakes": {"bias_front": 0.6},
    "suspension": {"roll_stiffness_front_share": 0.6, "roll_centre_height_front_m": 0.05,
                   "roll_centre_height_rear_m": 0.10},
    "air": {"density_kg_m3": 1.225},
}


def make_car(**sections):
    """BASE_CAR with per-section updates: make_car(aero={...}, chassis={...})."""
    raw = copy.deepcopy(BASE_CAR)
    for sec, upd in sections.items():
        if sec == "name":
            raw["name"] = upd
            continue
        target = raw.setdefault(sec, {})
        for k, v in upd.items():
            if isinstance(v, dict):
                sub = target.setdefault(k, {})
                for kk, vv in v.items():
                    if vv is None:
                        sub.pop(kk, None)
                    else:
                        sub[kk] = vv
            elif v is None:
                target.pop(k, None)
            else:
                target[k] = v
    return car_from_dict(raw, "test car")


def wavy_circuit(length=5000.0, ds=1.0, seed=7, r_min=15.0, name=None):
    """Closed circuit whose curvature varies continuously along the whole lap.

    Curvature [1/m] is a deterministic sum of sines of distance with whole numbers of periods
    per lap (each integrates to zero, so the heading turns exactly 2π) plus the closing turn
    2π/length, scaled so the tightest radius is ``r_min`` [m]; the radius of a bend's apex then
    lies between ``r_min`` and a few hundred metres, with sign changes (esses) between. A
    benchmark and test circuit: no step has the same curvature as its neighbour.
    """
    n = int(round(length / ds))
    s = np.arange(n) * ds
    rng = np.random.default_rng(seed)
    k = np.zeros(n)
    for j in range(3, 30):
        k += rng.normal() / j * np.sin(2 * math.pi * j * s / length + rng.uniform(0, 2 * math.pi))
    base = 2 * math.pi / length
    k *= (1.0 / r_min - base) / np.max(np.abs(k))
    return analytic_track(k + base, ds=ds, closed=True,
                          name=name or f"wavy {length / 1000:g} km (seed {seed})")


def layout_problems(fig, dpi: float = 70.0, tol_px: float = 1.0) -> list[str]:
    """Layout faults of a drawn figure, as readable lines (empty: none found).

    Draws ``fig`` on an Agg canvas at ``dpi`` while recording every text the renderer draws,
    then checks that (1) no text outside an axes clip box reaches past the canvas edge, (2) no
    axes' decorations (tick labels, axis labels, title, legend, child axes) intrude into
    another axes' plotting area, and (3) figure-level legends and the suptitle overlap no
    axes and its decorations. ``tol_px`` [px] absorbs anti-aliasing.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg
    from matplotlib.transforms import Bbox

    canvas = FigureCanvasAgg(fig)
    fig.set_dpi(dpi)
    drawn: list[tuple[str, Bbox]] = []
    original = RendererAgg.draw_text

    def recording(self, gc, x, y, s, prop, angle, ismath=False, mtext=None):
        if s.strip() and gc.get_clip_rectangle() is None:
            w, h, d = self.get_text_width_height_descent(s, prop, ismath)
            # (x, y) is the left end of the baseline, in pixels from the top left
            y = self.height - y
            if abs(angle - 90.0) < 1e-6:
                box = Bbox.from_extents(x - (h - d), y, x + d, y + w)
            else:
                box = Bbox.from_extents(x, y - d, x + w, y + h - d)
            drawn.append((s, box))
        return original(self, gc, x, y, s, prop, angle, ismath=ismath, mtext=mtext)

    RendererAgg.draw_text = recording
    try:
        canvas.draw()
    finally:
        RendererAgg.draw_text = original
    r = canvas.get_renderer()
    width, height = canvas.get_width_height()
    out = []
    for s, b in drawn:
        if b.x0 < -tol_px or b.y0 < -tol_px or b.x1 > width + tol_px or b.y1 > height + tol_px:
            out.append(f"text {s!r} reaches past the canvas ({b.extents.round(1)} in "
                       f"{width}x{height})")

    def overlap(a, b):
        return (min(a.x1, b.x1) - max(a.x0, b.x0) > tol_px
                and min(a.y1, b.y1) - max(a.y0, b.y0) > tol_px)

    axes = [ax for ax in fig.axes if ax.get_visible()]

    def name(ax):
        return ax.get_label() or str(axes.index(ax))

    def decorations(ax):
        """Boxes of the tick labels, axis labels, titles, legend, texts and child axes."""
        out = [axis.get_tightbbox(r) for axis in (ax.xaxis, ax.yaxis) if axis.get_visible()]
        out += [t.get_window_extent(r) for t in (ax.title, ax._left_title, ax._right_title)
                if t.get_visible() and t.get_text()]
        for artist in ax.get_default_bbox_extra_artists():
            out.append(artist.get_tightbbox(r))
        return [b for b in out if b is not None and b.width > 0 and b.height > 0]

    for a in axes:
        area_a = a.get_window_extent(r)
        boxes = decorations(a)
        for b in axes:
            area_b = b.get_window_extent(r)
            if a is b or overlap(area_a, area_b):  # twin axes share their plotting area
                continue
            if any(overlap(box, area_b) for box in boxes):
                out.append(f"decorations of axes {name(a)} overlap the plotting area of axes "
                           f"{name(b)}")
    extras = [("figure legend", leg) for leg in fig.legends]
    if fig._suptitle is not None and fig._suptitle.get_text():
        extras.append(("suptitle", fig._suptitle))
    for what, artist in extras:
        box = artist.get_window_extent(r)
        for ax in axes:
            if any(overlap(box, b) for b in [ax.get_window_extent(r), *decorations(ax)]):
                out.append(f"{what} overlaps axes {name(ax)} or its labels")
    return out
