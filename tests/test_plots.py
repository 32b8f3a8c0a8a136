"""Figures: every figure renders for every example car; stacking signs; time delta; --plots."""

from __future__ import annotations

import io
import math
import warnings
from pathlib import Path
from types import SimpleNamespace

import matplotlib.image as mpimg
import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.figure import Figure

from lapbalance import plots
from lapbalance.car import load_car
from lapbalance.errors import PhysicsWarning
from lapbalance.lap import simulate_lap
from lapbalance.track import load_track
from tests.helpers import analytic_track

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE_CARS = sorted(p.stem for p in (ROOT / "examples").glob("*.toml")
                      if not p.stem.startswith("targets"))
#: The aero-map variant takes ~1 s per lap; it is drawn on one demo circuit below instead.
SLOW_CARS = ("single_seater_mapped",)
FULL_CARS = [c for c in EXAMPLE_CARS if c not in SLOW_CARS]
TRACKS = sorted(p.stem for p in (ROOT / "tracks").glob("*.csv"))
MAIN_TRACK = "veldmoor_ring"  # closed, 11 corners: every car renders every figure here
STEP_M = 2.0  # coarse resampling keeps the laps quick
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
TEST_DPI = 40  # small images: the tests check that figures render, not how they look


def rounded_loop(ds: float = 2.0, name: str = "test loop"):
    """Closed rounded rectangle (600 m x 400 m) with four left corners of 30, 80, 50, 120 m.

    The straights are chosen so that the outline closes: 120 + 450 + 30 = 80 + 470 + 50 and
    30 + 290 + 80 = 50 + 230 + 120 (up to rounding each arc to whole steps).
    """
    segments = [("straight", 450), ("corner", 30), ("straight", 290), ("corner", 80),
                ("straight", 470), ("corner", 50), ("straight", 230), ("corner", 120)]
    k, corners, d = [], [], 0.0
    for kind, v in segments:
        if kind == "straight":
            n = int(round(v / ds))
            k += [0.0] * n
        else:
            n = int(round(v * math.pi / 2 / ds))
            k += [1.0 / v] * n
            corners.append(SimpleNamespace(id=len(corners) + 1, direction="left", entry_m=d,
                                           apex_m=d + n * ds / 2, exit_m=d + n * ds,
                                           min_radius_m=float(v)))
        d += n * ds
    return analytic_track(k, ds=ds, closed=True, name=name, corners=corners)


def track_file(name: str) -> Path:
    return ROOT / "tracks" / f"{name}.csv"


def car_file(name: str) -> Path:
    return ROOT / "examples" / f"{name}.toml"


@pytest.fixture(scope="module")
def loop():
    return rounded_loop()


@pytest.fixture(scope="module")
def laps():
    track = load_track(track_file(MAIN_TRACK), step_m=STEP_M)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhysicsWarning)  # mapped car: map edge warnings
        return {name: simulate_lap(load_car(car_file(name)), track) for name in FULL_CARS}


def _decoded(png: bytes) -> np.ndarray:
    assert png.startswith(PNG_SIGNATURE)
    return mpimg.imread(io.BytesIO(png), format="png")


def _check_all_figures(result):
    pngs = plots.lap_figures_png(result, dpi=TEST_DPI)
    assert set(pngs) == {f"{name}.png" for name in plots.LAP_FIGURES}
    for name, png in pngs.items():
        img = _decoded(png)
        assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100, name
        # Not blank: something other than the white background was drawn.
        assert float(img[..., :3].std()) > 0.02, name


@pytest.mark.parametrize("car", FULL_CARS)
def test_every_lap_figure_renders_for_every_example_car(laps, car):
    _check_all_figures(laps[car])


#: Figures whose content depends on the track (geometry, corners, limits); rendered for every
#: demo circuit. The others are built (not rendered) there to keep the test quick.
TRACK_FIGURES = ("track_map", "speed", "liftoff")


@pytest.mark.parametrize("track", [t for t in TRACKS if t != MAIN_TRACK])
def test_figures_render_for_every_track(track):
    # A different example car on each circuit (slow ones first), so that cars x tracks is
    # sampled too and every car is drawn somewhere.
    others = [t for t in TRACKS if t != MAIN_TRACK]
    order = list(SLOW_CARS) + FULL_CARS[::-1]
    car = order[others.index(track) % len(order)]
    tr = load_track(track_file(track), step_m=STEP_M)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhysicsWarning)
        result = simulate_lap(load_car(car_file(car)), tr)
    assert result.corners  # every demo circuit has corners to label
    from tests.helpers import layout_problems

    for name, (fn, _) in plots.LAP_FIGURES.items():
        fig = fn(result)
        if name in TRACK_FIGURES:
            assert layout_problems(fig, TEST_DPI) == [], name
            img = _decoded(plots.figure_png(fig, TEST_DPI))
            assert float(img[..., :3].std()) > 0.02, name


def test_titles_name_car_and_track(laps):
    r = laps["gt_coupe"]
    for name, (fn, _) in plots.LAP_FIGURES.items():
        fig = fn(r)
        assert isinstance(fig, Figure)
        titles = [ax.get_title() for ax in fig.axes]
        titles.append(fig._suptitle.get_text() if fig._suptitle else "")
        assert any(r.car.name in t and r.track.name in t for t in titles), name


def test_track_map_colourbar_is_centred_on_zero_and_labelled(laps):
    fig = plots.track_map_figure(laps["gt_coupe"])
    labels = [ax.get_ylabel() for ax in fig.axes]
    assert "balance index u_r - u_f [-] where |a_y| >= 4 m/s²\nand |a_x| <= |a_y|/2 " \
        "(> 0 oversteer-leaning; grey: not cornering)" in labels
    (lc,) = [c for c in fig.axes[0].collections if c.get_array() is not None]
    assert lc.norm.vcenter == 0.0
    assert lc.norm.vmin == pytest.approx(-lc.norm.vmax)


def test_track_map_marks_flagged_corners_by_verdict(laps):
    r = laps["gt_coupe"]
    verdicts = {c["liftoff_verdict"] for c in r.corners}
    fig = plots.track_map_figure(r)
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    for v in ("lift-critical", "lift-marginal"):
        assert (f"lift-off: {v}" in legend) == (v in verdicts)


def test_usage_figure_shades_the_limiting_constraint(laps):
    r = laps["gt_coupe"]
    names = set(r.limit_names())
    fig = plots.usage_figure(r)
    labels = set(fig.legends[0].texts[i].get_text() for i in range(len(fig.legends[0].texts)))
    for lim in ("front", "rear"):
        assert (f"{lim} axle limits" in labels) == (lim in names)
    assert ("engine limits" in labels) == ("engine" in names)


def _band(coll) -> tuple[float, float]:
    y = np.concatenate([p.vertices[:, 1] for p in coll.get_paths()])
    return float(y.min()), float(y.max())


def test_stacked_parts_sum_to_the_total_with_signs():
    # Source: docs/method.md load decomposition, Fz_f = static + aero - X h/L (the parts' sum);
    # the drawing must end at that sum: 10 + 2 - 3 = 9.
    fig = Figure()
    ax = fig.add_subplot()
    x = np.array([0.0, 1.0])
    plots._stack_signed(ax, x, [("static", np.array([10.0, 10.0]), "k"),
                                ("aero", np.array([2.0, 2.0]), "g"),
                                ("ground", np.array([-3.0, -3.0]), "b")])
    by_label = {c.get_label(): c for c in ax.collections}
    assert set(by_label) == {"static", "aero", "ground, removed"}
    assert _band(by_label["static"]) == (0.0, 10.0)
    assert _band(by_label["aero"]) == (10.0, 12.0)
    assert _band(by_label["ground, removed"]) == (9.0, 12.0)


def test_axle_loads_front_loses_and_rear_gains_ground_transfer(laps):
    r = laps["gt_coupe"]
    gt = r.channels["ground_transfer_n"]
    assert gt.max() > 0 and gt.min() < 0  # the lap both drives and brakes
    front, rear = plots.axle_loads_figure(r).axes[:2]

    def labels(ax):
        return {c.get_label() for c in ax.collections}

    # Driving (X > 0) takes X h/L off the front (hatched, removed) and adds it to the rear.
    assert "ground transfer -X h/L, removed" in labels(front)
    assert "ground transfer +X h/L" in labels(rear)
    # Braking (X < 0) is the mirror image.
    assert "ground transfer -X h/L" in labels(front)
    assert "ground transfer +X h/L, removed" in labels(rear)
    line = [ln for ln in front.get_lines() if ln.get_label() == "axle load"][0]
    np.testing.assert_array_equal(line.get_ydata(), r.channels["fz_front_n"])


def test_time_delta_of_a_lap_with_itself_is_zero_and_matches_time_channels(laps):
    base, other = laps["gt_coupe"], laps["gt_coupe_high_wing"]
    d, dt = plots.time_delta(base, base)
    assert np.all(dt == 0.0)
    d, dt = plots.time_delta(base, other)
    # Same distance grid: the interpolation returns the other lap's own times.
    np.testing.assert_allclose(dt, other.channels["time_s"] - base.channels["time_s"],
                               atol=1e-12)


def test_overlay_and_delta_figures_render(laps):
    rs = [laps["gt_coupe"], laps["gt_coupe_high_wing"], laps["fwd_hatch"]]
    fig = plots.overlay_figure(rs, ["base", "wing", "hatch"])
    assert [ln.get_label() for ln in fig.axes[1].get_lines()][:3] == ["base", "wing", "hatch"]
    _decoded(plots.figure_png(fig, TEST_DPI))
    fig = plots.delta_figure(rs[0], rs[1], ["base", "wing"])
    assert "base" in fig._suptitle.get_text() and "wing" in fig._suptitle.get_text()
    _decoded(plots.figure_png(fig, TEST_DPI))
    with pytest.raises(ValueError, match="labels"):
        plots.overlay_figure(rs, ["only one"])


def test_figures_without_corners_or_downforce(loop):
    # A track with no corner table and a car without aero: no crash, figures still render.
    from tests.helpers import make_car

    bare = analytic_track(loop.curvature_1pm, ds=loop.step_m, closed=True, name="no corners")
    r = simulate_lap(make_car(), bare)
    assert r.corners == []
    assert np.all(np.isnan(r.channels["aero_balance_front"]))
    for name, (fn, _) in plots.LAP_FIGURES.items():
        fig = fn(r)
        if name in ("track_map", "aero_balance", "liftoff"):  # the branches for missing data
            _decoded(plots.figure_png(fig, TEST_DPI))


def test_lap_command_writes_plots(tmp_path, monkeypatch):
    from lapbalance.cli import main

    # The figures are tested above; two keep this plumbing test quick.
    monkeypatch.setattr(plots, "LAP_FIGURES", {k: plots.LAP_FIGURES[k]
                                               for k in ("track_map", "usage")})
    out = tmp_path / "lap"
    res = CliRunner().invoke(main, ["lap", str(car_file("fwd_hatch")),
                                    str(track_file("oranby_bowl")), "--step-m", "4",
                                    "--out", str(out), "--plots"])
    assert res.exit_code == 0, res.output
    for name in ("track_map", "usage"):
        assert (out / f"{name}.png").read_bytes().startswith(PNG_SIGNATURE)


# --------------------------------------------------------------------------------------------
# Fixed layouts: nothing reaches past the canvas, nothing overlaps another panel
# --------------------------------------------------------------------------------------------


def _layout_cases(laps):
    from lapbalance.liftoff import corner_response

    r, wing = laps["gt_coupe"], laps["gt_coupe_high_wing"]
    cases = [(f"{name} {car}", lambda fn=fn, res=res: fn(res))
             for car, res in laps.items() for name, (fn, _) in plots.LAP_FIGURES.items()]
    curve = corner_response(r)
    cases += [
        ("track_map by speed", lambda: plots.track_map_figure(r, "speed_kph")),
        ("track_map by ax", lambda: plots.track_map_figure(r, "ax_mps2")),
        ("response", lambda: plots.liftoff_response_figure(curve, r.car.name)),
        ("overlay of 2", lambda: plots.overlay_figure([r, wing], ["base", "wing"])),
        ("overlay of 5", lambda: plots.overlay_figure(list(laps.values())[:5])),
        ("delta", lambda: plots.delta_figure(r, wing, ["base", "wing"])),
        ("curvature", lambda: plots.track_curvature_figure(r.track)),
    ]
    return cases


def test_every_figure_has_a_fixed_layout_that_fits(laps):
    from tests.helpers import layout_problems

    problems = []
    for name, make in _layout_cases(laps):
        fig = make()
        # no layout engine: one drawing pass per figure (a layout engine adds a second one)
        assert fig.get_layout_engine() is None, name
        problems += [f"{name}: {p}" for p in layout_problems(fig, dpi=70)]
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("dpi", [40, 110])
def test_fixed_layouts_fit_at_other_resolutions(laps, dpi):
    from tests.helpers import layout_problems

    r = laps["gt_coupe"]
    problems = []
    for name, (fn, _) in plots.LAP_FIGURES.items():
        problems += [f"{name}: {p}" for p in layout_problems(fn(r), dpi=dpi)]
    assert not problems, "\n".join(problems)


def test_layout_check_finds_clipped_and_overlapping_labels():
    # The check above must be able to fail: a y label in a margin of no width leaves the
    # canvas, and a figure legend laid over the plotting area overlaps it.
    from tests.helpers import layout_problems

    fig = plots._figure(4.0, 3.0, left=0.0, bottom=0.6)
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1], label="a line")
    ax.set_ylabel("a label with no room")
    assert any("a label with no room" in p and "canvas" in p for p in layout_problems(fig))
    fig = plots._figure(4.0, 3.0)
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1], label="a line")
    fig.legend(loc="center")
    assert any("figure legend overlaps" in p for p in layout_problems(fig))
    fig = plots._figure(4.0, 3.0, rows=2, hgap=0.0)
    top, bottom = fig.subplots(2, 1)
    bottom.set_title("a title on the panel above")
    assert any("overlap the plotting area" in p for p in layout_problems(fig))


# --------------------------------------------------------------------------------------------
# Colour runs of the track maps: same colour per segment with fewer paths
# --------------------------------------------------------------------------------------------

_values = st.lists(st.one_of(st.floats(-3.0, 3.0), st.just(math.nan), st.just(math.inf),
                             st.just(-math.inf)), min_size=0, max_size=300)


@settings(max_examples=150, deadline=None)
@given(_values, st.floats(0.01, 2.0))
def test_colour_runs_give_every_value_its_own_colour(values, m):
    from matplotlib.colors import TwoSlopeNorm

    v = np.array(values, float)
    cmap = plots.DIVERGING.with_extremes(bad="#e1e4e8")
    norm = TwoSlopeNorm(0.0, -m, m)
    starts = plots.colour_runs(v, cmap, norm)
    if v.size == 0:
        assert starts.size == 0
        return
    assert starts[0] == 0 and np.all(np.diff(starts) > 0) and starts[-1] < v.size
    colours = np.asarray(cmap(norm(v)))
    run = np.searchsorted(starts, np.arange(v.size), side="right") - 1
    # every value has the colour of its run's first value ...
    np.testing.assert_array_equal(colours, colours[starts[run]])
    # ... and neighbouring runs differ (no run is split needlessly)
    assert np.all(np.any(colours[starts[1:]] != colours[starts[1:] - 1], axis=1))


def test_track_line_draws_every_segment_in_its_own_colour(laps):
    from matplotlib.colors import TwoSlopeNorm

    r = laps["gt_coupe"]
    x, y = r.channels["x_m"], r.channels["y_m"]
    v = np.where(plots.cornering_mask(r), r.channels["balance_index"], np.nan)
    cmap = plots.DIVERGING.with_extremes(bad="#e1e4e8")
    norm = TwoSlopeNorm(0.0, -0.2, 0.2)
    fig = Figure()
    lc = plots._track_line(fig.add_subplot(), x, y, v, cmap, norm)
    paths = lc.get_paths()
    assert len(paths) < (len(x) - 1) / 3  # the runs merge many segments
    seg_colours = []
    points = [paths[0].vertices[0]]
    for path, rgba in zip(paths, lc.to_rgba(lc.get_array()), strict=True):
        n = len(path.vertices) - 1
        seg_colours += [rgba] * n
        points += list(path.vertices[1:])
    # the polylines pass through every point once, in order, and each segment i is drawn in
    # the colour of values[i]
    np.testing.assert_array_equal(np.array(points), np.column_stack([x, y]))
    np.testing.assert_array_equal(np.array(seg_colours), cmap(norm(v[:-1])))


def test_long_names_shrink_the_titles_to_fit(laps):
    import dataclasses

    from tests.helpers import layout_problems

    r = laps["gt_coupe"]
    long = dataclasses.replace(r, car=dataclasses.replace(
        r.car, name="An invented coupe with a very long name, variant with the steeper wing"))
    problems = []
    for name in ("track_map", "speed", "axle_loads", "liftoff"):
        fig = plots.LAP_FIGURES[name][0](long)
        problems += [f"{name}: {p}" for p in layout_problems(fig, dpi=70)]
        sizes = [t.get_fontsize() for t in [*(ax.title for ax in fig.axes), fig._suptitle]
                 if t is not None and long.car.name in t.get_text()]
        assert sizes and max(sizes) <= 10.5, name
        if name == "track_map":  # the narrowest of them: shrunk from the usual size
            assert max(sizes) < 10.5
    assert not problems, "\n".join(problems)
