"""A self-contained HTML report of one lap or of several variants on the same track.

The document is one HTML5 file: inline CSS, every figure embedded as a ``data:image/png;base64``
URI, no scripts, no external links or fonts, so it can be mailed or archived as is. All text
from the inputs (car and track names, labels, reasons) is escaped with :func:`html.escape`.
Nothing here computes physics: tables show fields of :class:`~lapbalance.lap.LapResult` and the
figures come from :mod:`lapbalance.plots`.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import re
import secrets
from collections.abc import Sequence
from pathlib import Path

from matplotlib.colors import to_rgb

from lapbalance import plots
from lapbalance.errors import InputError
from lapbalance.lap import CAUTION, LapResult
from lapbalance.liftoff import (
    FLAG_VERDICTS,
    VERDICTS,
    corner_response,
    ranked,
    smallest_margin,
    verdict_counts,
)
from lapbalance.outputs import write_text_atomic
from lapbalance.version import __version__

#: Modelling assumptions and limits listed in every report.
ASSUMPTIONS = (
    "Quasi-static: the car is a point mass on two axles, in equilibrium at every track step; "
    "no transient yaw, roll or pitch dynamics and no tyre relaxation (except in the lift-off "
    "runs in time, a single-track model with yaw inertia and tyre lag but no roll or pitch "
    "dynamics).",
    "Lateral load transfer is the steady-state value from roll-centre heights and the "
    "roll-stiffness split.",
    "Grip is a friction ellipse per axle; each tyre's peak friction falls with load.",
    "Drive torque is shared ideally between the two wheels of a driven axle.",
    "While braking, engine overrun is folded into the brake force (fixed brake bias).",
    "The lift-off check re-evaluates each cornering step at the same speed and path "
    "curvature with the drive force replaced by engine braking (and once coasting); its "
    "margin repeats that for steady turns at the step's curvature up to the corner limit. "
    "Both are quasi-static: the rear's usage after the lift, not the car's yaw response.",
    "The aero split is stored and applied in the CG convention (drag reacted at CG height); "
    "the ground-convention figure is what wheel-restrained scales would read.",
    "Every number is an estimate for comparing setups, not a prediction of the real car.",
)

_CSS = """
:root {{ --ink: {ink}; --muted: {muted}; --grid: {grid}; --panel: {panel};
  --front: {front}; --rear: {rear}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0 auto; max-width: 1180px; padding: 24px 28px 48px; color: var(--ink);
  font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
  sans-serif; background: #fff; }}
h1 {{ font-size: 24px; margin: 0 0 4px; }}
h2 {{ font-size: 19px; margin: 36px 0 10px; padding-bottom: 4px;
  border-bottom: 2px solid var(--ink); }}
h3 {{ font-size: 15px; margin: 22px 0 8px; }}
p.meta {{ color: var(--muted); margin: 0 0 14px; }}
.caution {{ border-left: 6px solid {caution}; background: {caution_bg}; padding: 10px 14px;
  margin: 12px 0 18px; font-weight: 600; }}
nav ul {{ margin: 0; padding-left: 20px; columns: 2; }}
table {{ border-collapse: collapse; margin: 6px 0 10px; font-variant-numeric: tabular-nums; }}
th, td {{ padding: 4px 9px; border-bottom: 1px solid var(--grid); text-align: right;
  vertical-align: top; }}
th {{ background: var(--panel); font-weight: 600; font-size: 12.5px; }}
td.l, th.l {{ text-align: left; }}
tr:hover td {{ background: #fafbfc; }}
td.verdict {{ text-align: left; font-weight: 600; white-space: nowrap;
  border-left: 5px solid transparent; }}
{verdict_css}
td.why {{ min-width: 16em; }}
.neg {{ color: var(--front); }}
.pos {{ color: var(--rear); }}
figure {{ margin: 14px 0 22px; }}
figure img {{ max-width: 100%; height: auto; border: 1px solid var(--grid); }}
figcaption {{ color: var(--muted); font-size: 12.5px; margin-top: 4px; }}
.note {{ color: var(--muted); font-size: 12.5px; }}
ul.assumptions li {{ margin-bottom: 3px; }}
footer {{ margin-top: 36px; color: var(--muted); font-size: 12px; }}
code {{ font-size: 12px; word-break: break-all; }}
details {{ margin: 8px 0; }}
"""


def _tint(color: str, amount: float) -> str:
    r, g, b = to_rgb(color)
    mix = [1.0 - amount * (1.0 - c) for c in (r, g, b)]
    return "#" + "".join(f"{round(c * 255):02x}" for c in mix)


def _css() -> str:
    p = plots.PALETTE
    verdict_css = "\n".join(
        f"td.v-{v} {{ background: {_tint(p[v], 0.22)}; border-left-color: {p[v]}; }}"
        for v in VERDICTS)
    return _CSS.format(verdict_css=verdict_css, caution=p["lift-critical"],
                       caution_bg=_tint(p["lift-critical"], 0.10), **p)


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _num(x, fmt: str, unit: str = "") -> str:
    if x is None:
        return "–"
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return _e(x)
    if xf != xf:
        return "–"
    return format(xf, fmt) + unit


def _table(header: Sequence[str], rows: Sequence[Sequence[str]],
           text_cols: Sequence[int] = (0,),
           cell_classes: Sequence[Sequence[str]] | None = None) -> str:
    """HTML table; ``header`` is plain text, ``rows`` are already-escaped cell HTML.

    Columns in ``text_cols`` are left-aligned (numbers are right-aligned).
    """
    out = ["<table>", "<thead><tr>"]
    out += [f'<th class="l">{_e(h)}</th>' if i in text_cols else f"<th>{_e(h)}</th>"
            for i, h in enumerate(header)]
    out.append("</tr></thead>")
    out.append("<tbody>")
    for j, row in enumerate(rows):
        cells = []
        for i, c in enumerate(row):
            cls = []
            if i in text_cols:
                cls.append("l")
            if cell_classes is not None and cell_classes[j][i]:
                cls.append(cell_classes[j][i])
            attr = f' class="{" ".join(cls)}"' if cls else ""
            cells.append(f"<td{attr}>{c}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def _img(png, alt: str, caption: str) -> str:
    """``<figure>`` of a PNG: its bytes, or a placeholder of :class:`_Figures`."""
    data = png if isinstance(png, str) else base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


class _Figures:
    """The figures of one document: recorded while the HTML is written, with a placeholder
    in their place, then drawn together (:func:`lapbalance.plots.render_figures`, on every
    core) and filled in. The placeholder carries a random key, so no input text can match it.
    """

    def __init__(self, dpi: int, processes: int | None = None):
        self.dpi = dpi
        self.processes = processes
        self.jobs: list[tuple] = []
        self._key = secrets.token_hex(12)

    def add(self, fn, *args) -> str:
        """Record figure ``fn(*args)``; returns its placeholder. [-]"""
        self.jobs.append((fn, args))
        return f"@@figure-{self._key}-{len(self.jobs) - 1}@@"

    def fill(self, doc: str) -> str:
        """``doc`` with every placeholder replaced by its base64 PNG. [-]"""
        if not self.jobs:
            return doc
        pngs = plots.render_figures(self.jobs, "png", self.dpi, self.processes)
        data = [base64.b64encode(p).decode("ascii") for p in pngs]
        return re.sub(f"@@figure-{self._key}-([0-9]+)@@", lambda m: data[int(m.group(1))], doc)


def _labels(results: Sequence[LapResult], labels: Sequence[str] | None) -> list[str]:
    if labels is None:
        labels = [r.car.name for r in results]
    elif len(labels) != len(results):
        raise ValueError(f"{len(labels)} labels for {len(results)} results")
    out, seen = [], {}
    for lab in labels:
        lab = str(lab)
        seen[lab] = seen.get(lab, 0) + 1
        out.append(lab if seen[lab] == 1 else f"{lab} ({seen[lab]})")
    return out


def _pct(x) -> str:
    return "–" if x is None else f"{x * 100:.1f} %"


def _summary_section(result: LapResult, disp=None) -> str:
    from lapbalance.units import METRIC

    d = disp or METRIC
    su, lu = d.unit("speed"), d.unit("length")
    s = result.summary
    rows = [
        ["car", _e(s["car"])],
        ["track", _e(f"{s['track']} ({d.length(s['length_m']):.0f} {lu}, "
                     f"{'closed lap' if s['closed'] else 'open run'})")],
        [result.time_label, _num(s["lap_time_s"], ".3f", " s")],
        ["top speed", _num(d.speed_kph(s["top_speed_kph"]), ".1f", f" {su}")],
        ["minimum speed", _num(d.speed_kph(s["min_speed_kph"]), ".1f", f" {su}")],
        ["mean speed", _num(d.speed_kph(s["mean_speed_kph"]), ".1f", f" {su}")],
    ]
    if s.get("aero_net_lift"):
        rows += [
            ["aero: net lift (a front share of a negative total means nothing)", "–"],
            ["front axle downforce area, CG convention (&lt; 0 = lift)",
             _num(s["downforce_area_front_m2"], "+.3f", " m²")],
            ["rear axle downforce area, CG convention (&lt; 0 = lift)",
             _num(s["downforce_area_rear_m2"], "+.3f", " m²")],
        ]
    else:
        rows += [
            ["aero balance, front share on track (CG convention)",
             _pct(s["aero_balance_front_cg"])],
            ["aero balance, front share on wheel-restrained scales (ground convention)",
             _pct(s["aero_balance_front_ground"])],
        ]
    rows.append(["air density", _num(s["air_density_kg_m3"], ".4f", " kg/m³")])
    for sec in s["sectors"]:
        rows.append([f"sector {sec['sector']} ({d.length(sec['start_m']):.0f}–"
                     f"{d.length(sec['end_m']):.0f} {lu})", _num(sec["time_s"], ".3f", " s")])
    counts = verdict_counts(result.corners)
    rows.append(["lift-off verdicts", _e(", ".join(f"{n} {v}" for v, n in counts.items()
                                                   if n) or "no corners")])
    rows.append(["smallest lift-off margin (a_y,safe / a_y,limit)",
                 _num(smallest_margin(result.corners), ".3f")])
    return _table(["quantity", "value"], rows)


def summary_table_html(result: LapResult) -> str:
    """The summary table of one lap as an HTML fragment (``LapResult._repr_html_``)."""
    return (f"<div><strong>{_e(result.car.name)}</strong> on "
            f"{_e(getattr(result.track, 'name', '') or 'track')}"
            + _summary_section(result) + "</div>")


def _verdict_legend() -> str:
    from lapbalance.liftoff import VERDICT_MEANING

    items = "".join(f"<li><strong>{_e(v)}</strong>: {_e(m)}</li>"
                    for v, m in VERDICT_MEANING.items())
    return f'<ul class="note">{items}</ul>'


def _setup_section(results: Sequence[LapResult], labels: Sequence[str]) -> str:
    """Setup table of every car and, per variant, the car-file keys that differ from the base."""
    from lapbalance import provenance as prov

    cars = [r.car for r in results]
    rows = [[_e(label), _e(unit)] + [_e(prov.format_value(v)) for v in vals]
            for label, unit, *vals in prov.setup_rows(cars)]
    parts = ["<h3>Setup</h3>",
             '<p class="note">Car values as the solver uses them (SI, whatever --units '
             "says).</p>", _table(["quantity", "unit", *labels], rows, text_cols=(0, 1))]
    for car, lab in zip(cars[1:], labels[1:], strict=True):
        diff = prov.car_differences(cars[0], car)
        parts.append(f"<h3>What differs from the base: {_e(lab)}</h3>")
        if not diff:
            parts.append('<p class="note">No car-file key differs from the base.</p>')
            continue
        parts.append(_table(["key", f"base ({labels[0]})", lab],
                            [[_e(k), _e(prov.format_value(a)), _e(prov.format_value(b))]
                             for k, a, b in diff], text_cols=(0,)))
    return "\n".join(parts)


def _provenance_section(record: dict) -> str:
    """What was run: versions, input files with SHA-256, overrides, settings."""
    import json as _json

    meta = [["lapbalance", _e(record.get("lapbalance_version"))],
            ["run (UTC)", _e(record.get("run_utc"))],
            ["Python / numpy / numba", _e(f"{record.get('python')} / {record.get('numpy')} / "
                                          f"{record.get('numba')}")]]
    if record.get("command"):
        meta.append(["command", f"<code>{_e(record['command'])}</code>"])
    parts = ['<h2 id="provenance">Provenance</h2>',
             '<p class="note">What was run, so the results can be traced and rerun '
             "(<code>lapbalance rerun summary.json</code> for a lap written with "
             "<code>--out</code>).</p>", _table(["", "value"], meta, text_cols=(0, 1))]
    files = [[_e(f["role"]), _e(f["path"]), _e(f["bytes"]),
              f"<code>{_e(f['sha256'])}</code>"] for f in record.get("inputs", [])]
    parts += ["<h3>Input files</h3>",
              _table(["role", "path", "bytes", "SHA-256"], files, text_cols=(0, 1, 3))]
    ov = [[_e(c["name"]), f"<code>--set {_e(o['text'])}</code>"]
          for c in record.get("cars", []) for o in c.get("overrides", [])]
    parts += ["<h3>Overrides</h3>", _table(["car", "override"], ov, text_cols=(0, 1)) if ov
              else '<p class="note">No --set overrides.</p>']
    tr = [[_e(t["name"]), _e(t["step_m"]), _e("closed" if t["closed"] else "open"),
           _e(f"{t['length_m']:.1f}"), _e(t["points"])] for t in record.get("tracks", [])]
    parts += ["<h3>Track processing</h3>",
              _table(["track", "step [m]", "kind", "length [m]", "points"], tr,
                     text_cols=(0, 2))]
    solver = record.get("solver") or {}
    parts += ["<h3>Solver settings and thresholds</h3>",
              _table(["setting", "value"], [[_e(k), _e(_json.dumps(v))]
                                           for k, v in solver.items()], text_cols=(0, 1))]
    for c in record.get("cars", []):
        res = c.get("resolved")
        if not res:
            continue
        flat = []

        def walk(prefix, obj, flat=flat):
            if isinstance(obj, dict):
                for k, v in obj.items():
                    walk(f"{prefix}.{k}" if prefix else k, v)
            else:
                flat.append([_e(prefix), _e(_json.dumps(obj))])

        walk("", res)
        parts.append(f"<details><summary>Resolved car in SI: {_e(c['name'])} "
                     f"({len(flat)} parameters)</summary>"
                     + _table(["parameter", "value (SI)"], flat, text_cols=(0, 1))
                     + "</details>")
    return "\n".join(parts)


def _verdict_cell(c: dict) -> tuple[str, str]:
    v = c.get("liftoff_verdict", "not-checked")
    cls = f"verdict v-{v}" if v in VERDICTS else "verdict"
    return _e(v), cls


def _corner_section(result: LapResult, figs: _Figures, disp=None) -> str:
    from lapbalance.units import METRIC

    d = disp or METRIC
    su, lu = d.unit("speed"), d.unit("length")
    if not result.corners:
        return '<p class="note">No corners were detected on this track.</p>'
    rows, classes = [], []
    for k, c in enumerate(ranked(result.corners)):
        vtxt, vcls = _verdict_cell(c)
        bal = c["balance_index_at_min"]
        rows.append([
            _e(k + 1), _e(c["id"]), _e(c["direction"]), _num(d.length(c["apex_m"]), ".0f"),
            _num(d.length(c["min_radius_m"]), ".0f"), _num(d.speed_kph(c["min_speed_kph"]),
                                                           ".1f"),
            _e(c["limiting_axle"]),
            f'<span class="{"pos" if bal > 0 else "neg"}">{_num(bal, "+.3f")}</span>',
            vtxt, _num(c.get("liftoff_margin"), ".3f"), _num(c.get("coast_margin"), ".3f"),
            _num(c.get("liftoff_speed_margin_kph"), ".1f"),
            _num(c.get("liftoff_rear_reserve"), "+.3f"),
            _num(c.get("liftoff_max_shift"), "+.3f"), _e(c.get("liftoff_reason", "")),
        ])
        classes.append([""] * 8 + [vcls] + [""] * 5 + ["why"])
    table = _table(["rank", "corner", "dir", f"apex [{lu}]", f"min radius [{lu}]",
                    f"min speed [{su}]", "limiting axle", "balance at min [-]",
                    "lift-off verdict", "margin [-]", "coasting margin [-]",
                    f"speed margin [{su}]", "rear reserve [-]", "worst shift [-]", "why"],
                   rows, text_cols=(1, 2, 6, 14),
                   cell_classes=classes)
    legend = ('<p class="note">Ranked by lift-off margin, tightest first. margin = lateral '
              "acceleration up to which a lift (engine braking in the gear of that speed) "
              "keeps the rear within its grip, over the corner-limit lateral acceleration at "
              "the corner's tightest step (1 = a lift at the very limit is safe); coasting "
              "margin = the same without engine braking; speed margin = limit speed minus "
              "the highest safe-lift speed; rear reserve = 1 − rear usage after a lift at the "
              "limit (&lt; 0: the rear saturates); balance = u_r − u_f at the slowest point "
              "(&gt; 0 oversteer-leaning); worst shift = largest change of the balance index "
              "on lift-off at the lap's own state.</p>")
    return (table + "\n" + legend + "\n" + _verdict_legend() + "\n" + _response(result, figs)
            + "\n" + _worst_steps(result, d) + "\n" + _runs_section(result, d))


_RUNS_NOTE = ("yaw ratio = yaw rate 1 s after the lift over that of a car staying on the "
              "radius at its actual speed (&gt; 1 tucks in); tail-out = largest sideslip change "
              "within 3 s (&lt; 0: tail out); spin from = lowest initial lateral acceleration, "
              "as a share of the single-track model's steady limit at that radius, from which "
              "a lift spins the car (ISO 9816 stepping from 4 m/s² by 0.5 m/s²; none = no spin "
              "up to the limit; higher = more forgiving). Single-track model with yaw inertia "
              "and tyre lag, steering wheel held, engine overrun in the lap's gear "
              "(docs/method.md, transient).")


def _runs_section(result: LapResult, d) -> str:
    """Lift-off runs in time at the lap's flagged corners (car files with [transient])."""
    if result.car.transient is None:
        return ""
    from lapbalance.transient import lap_corner_runs

    runs = lap_corner_runs(result)
    if not runs:
        return ""
    rows = []
    for r in runs:
        ok = r["status"] == "ok"
        rows.append([_e(r["corner"]), _e(r.get("liftoff_verdict") or ""),
                     _num(d.length(r["radius_m"]), ".0f"),
                     _num(d.speed(math.sqrt(r["ay0_mps2"] * r["radius_m"])), ".0f")
                     + (" *" if r["at_limit"] else ""),
                     _num(r["yaw_rate_ratio"] if ok else None, ".2f"),
                     _num(r["sideslip_peak_change_deg"] if ok else None, "+.1f"),
                     _e(("spins" if r["spin"] else "holds") if ok else r["status"]),
                     "none" if r["spin_onset_ay_mps2"] is None
                     else _num(r["spin_onset_fraction"], ".2f")])
    return ("<h3>Lift-off in time at the flagged corners</h3>\n"
            + _table(["corner", "verdict", f"radius [{d.unit('length')}]",
                      f"speed [{d.unit('speed')}]", "yaw ratio [-]", "tail-out [deg]",
                      "after 3 s", "spin from [-]"], rows, text_cols=(0, 1, 6))
            + f'\n<p class="note">{_RUNS_NOTE} * = the lap\'s speed is above the model\'s '
            "steady limit, so the run starts at that limit. When no corner is flagged, the "
            "tightest corner is run.</p>")


def _compare_runs_section(results: Sequence[LapResult], labels: Sequence[str], d) -> str:
    """Every car's lift-off run in time at the base car's corners."""
    if not any(r.car.transient is not None for r in results):
        return ""
    from lapbalance.transient import compare_corner_runs

    runs = compare_corner_runs(results, labels)
    if not runs:
        return ""
    rows = []
    for r in runs:
        row = [_e(r["corner"]), _num(d.length(r["radius_m"]), ".0f"),
               _num(d.speed_kph(r["speed_kph"]), ".0f")]
        for lab in labels:
            c = r["cars"].get(lab)
            row.append("–" if c is None or c["status"] != "ok" else
                       _num(c["yaw_rate_ratio"], ".2f") + (" spins" if c["spin"] else ""))
        for lab in labels:
            c = r["cars"].get(lab)
            row.append("–" if c is None else ("none" if c["spin_onset_ay_mps2"] is None
                                              else _num(c["spin_onset_fraction"], ".2f")))
        rows.append(row)
    head = (["corner", f"radius [{d.unit('length')}]", f"speed [{d.unit('speed')}]"]
            + [f"{lab} yaw ratio" for lab in labels] + [f"{lab} spin from" for lab in labels])
    return ("<h3>Lift-off in time, every car at the base's corners</h3>\n"
            + _table(head, rows) + f'\n<p class="note">{_RUNS_NOTE}</p>')


def _response(result: LapResult, figs: _Figures) -> str:
    curve = corner_response(result)
    if curve is None or curve.columns["ay_initial_mps2"].size == 0:
        return ""
    png = figs.add(plots.liftoff_response_figure, curve, result.car.name)
    return ("<h3>Lift-off response of the tightest corner</h3>\n"
            + _img(png, f"lift-off response: corner {curve.corner_id}",
                   f"Corner {curve.corner_id}: steady turns at its apex radius "
                   f"({curve.radius_m:.0f} m) from 4 m/s² to the limit in steps of at most "
                   "0.5 m/s² (the ISO 9816 stepping of the initial lateral acceleration); at "
                   "each, the balance shift, the rear usage after the lift, the front-load "
                   "change and the front share of the vertical load, with engine braking "
                   "and coasting. Dotted: the highest safe-lift lateral acceleration."))


def _worst_steps(result: LapResult, d=None) -> str:
    from lapbalance.units import METRIC

    d = d or METRIC
    rows, classes = [], []
    for c in ranked(result.corners):
        if c.get("liftoff_verdict") not in FLAG_VERDICTS:
            continue
        for key, what in (("liftoff_worst_shift", "largest balance shift"),
                          ("liftoff_worst_rear", "highest rear usage after lift-off")):
            w = c.get(key)
            if not w:
                continue
            vtxt, vcls = _verdict_cell(c)
            rows.append([
                _e(c["id"]), vtxt, _e(what), _num(d.length(w["distance_m"]), ".0f"),
                _num(d.speed_kph(w["speed_kph"]), ".1f"), _num(w["balance_shift"], "+.3f"),
                _num(d.force(w["front_load_shift_n"]), "+.0f"),
                _num(w["usage_front_on"], ".3f"), _num(w["usage_front_off"], ".3f"),
                _num(w["usage_rear_on"], ".3f"), _num(w["usage_rear_off"], ".3f"),
                _num(w["coast_balance_shift"], "+.3f"), _num(w["coast_usage_rear"], ".3f"),
            ])
            classes.append(["", vcls] + [""] * 11)
    if not rows:
        return ('<p class="note">No corner is flagged by the lift-off check (none '
                "lift-critical or lift-marginal).</p>")
    return ("<h3>Flagged corners: the two worst steps at the lap's own state</h3>\n"
            + _table(["corner", "verdict", "step", f"at [{d.unit('length')}]",
                      f"speed [{d.unit('speed')}]", "balance shift [-]",
                      f"front load change [{d.unit('force')}]", "u_f on", "u_f off",
                      "u_r on", "u_r off", "coasting shift [-]", "u_r coasting"], rows,
                     text_cols=(0, 2), cell_classes=classes))


def _figures(result: LapResult, figs: _Figures) -> str:
    out = []
    for name, (fn, caption) in plots.LAP_FIGURES.items():
        png = figs.add(fn, result)
        out.append(_img(png, f"{name.replace('_', ' ')}: {result.car.name}", caption))
    return "\n".join(out)


def _comparison_section(results: Sequence[LapResult], labels: Sequence[str], figs: _Figures,
                        disp=None) -> str:
    from lapbalance.units import METRIC

    d = disp or METRIC
    su = d.unit("speed")
    base = results[0]
    nsec = max(len(r.sectors) for r in results)
    header = (["variant", f"{base.time_label} [s]", "Δ to base [s]", f"top [{su}]",
               f"min [{su}]", f"mean [{su}]", "aero bal. CG", "aero bal. ground"]
              + [f"S{j + 1} Δ [s]" for j in range(nsec)]
              + ["lift-critical", "lift-marginal", "smallest margin", "Δ margin"])
    rows = []
    for r, lab in zip(results, labels, strict=True):
        s = r.summary()
        sb = base.summary()
        dsec = []
        for j in range(nsec):
            if j < len(s["sectors"]) and j < len(sb["sectors"]):
                dsec.append(_num(s["sectors"][j]["time_s"] - sb["sectors"][j]["time_s"],
                                 "+.3f"))
            else:
                dsec.append("–")
        counts = verdict_counts(r.corners)
        lift = s.get("aero_net_lift")
        rows.append([_e(lab), _num(s["lap_time_s"], ".3f"),
                     _num(s["lap_time_s"] - sb["lap_time_s"], "+.3f"),
                     _num(d.speed_kph(s["top_speed_kph"]), ".1f"),
                     _num(d.speed_kph(s["min_speed_kph"]), ".1f"),
                     _num(d.speed_kph(s["mean_speed_kph"]), ".1f"),
                     "net lift" if lift else _pct(s["aero_balance_front_cg"]),
                     "net lift" if lift else _pct(s["aero_balance_front_ground"])] + dsec
                    + [_e(counts["lift-critical"]), _e(counts["lift-marginal"]),
                       _num(smallest_margin(r.corners), ".3f"),
                       _num(_delta(smallest_margin(r.corners), smallest_margin(base.corners)),
                            "+.3f")])
    parts = ['<h2 id="comparison">Comparison</h2>',
             f'<p class="note">Base: {_e(labels[0])}. Δ = variant − base '
             "(&gt; 0: the variant is slower).</p>", _table(header, rows),
             _setup_section(results, labels)]
    ids = [c["id"] for c in base.corners]
    if ids:
        head = ["corner"] + [f"{lab} min [{su}]" for lab in labels] + \
               [f"{lab} margin" for lab in labels] + \
               [f"{lab} Δ margin" for lab in labels[1:]] + \
               [f"{lab} verdict" for lab in labels]
        crow, ccls = [], []
        for k, cid in enumerate(ids):
            row, cls = [_e(cid)], [""]
            vcells, margins = [], []
            for r in results:
                c = r.corners[k] if k < len(r.corners) and r.corners[k]["id"] == cid else None
                row.append(_num(d.speed_kph(c["min_speed_kph"]), ".1f") if c else "–")
                cls.append("")
                vcells.append(_verdict_cell(c) if c else ("–", ""))
                margins.append(c.get("liftoff_margin") if c else None)
            row += [_num(m, ".3f") for m in margins]
            row += [_num(_delta(m, margins[0]), "+.3f") for m in margins[1:]]
            cls += [""] * (2 * len(results) - 1)
            row += [v for v, _ in vcells]
            cls += [c for _, c in vcells]
            crow.append(row)
            ccls.append(cls)
        vcols = tuple(range(1 + 3 * len(labels) - 1, 1 + 4 * len(labels) - 1))
        parts += ["<h3>Corners</h3>", _table(head, crow, text_cols=(0,) + vcols,
                                             cell_classes=ccls)]
    parts.append(_compare_runs_section(results, labels, d))
    parts.append(_img(figs.add(plots.overlay_figure, results, labels),
                      "speed and balance overlay", "Speed and balance index of every "
                      "variant over distance."))
    for r, lab in zip(results[1:], labels[1:], strict=True):
        parts.append(_img(figs.add(plots.delta_figure, base, r, [labels[0], lab]),
                          f"time delta {lab}", f"Time delta of {lab} against {labels[0]} "
                          "over distance, and where on the track it grows (red) or shrinks "
                          "(blue)."))
    return "\n".join(parts)


def _delta(x, base):
    return None if x is None or base is None else x - base


def build_report(results: Sequence[LapResult] | LapResult, labels: Sequence[str] | None = None,
                 dpi: int = 100, generated: str | None = None, *, units: str = "metric",
                 provenance: dict | None = None, correlation=None,
                 processes: int | None = None) -> str:
    """Build the HTML report of one lap or of several variants.

    Parameters
    ----------
    results : LapResult or sequence of LapResult
        One lap, or variants on the same track (the first is the base of the comparison). [-]
    labels : sequence of str, optional
        Names of the results (default: car names; repeated names get a number). [-]
    dpi : int
        Resolution of the embedded figures. [dots per inch]
    generated : str, optional
        Time stamp printed under the title (default: now, UTC). [-]
    units : str
        Display units of the tables: ``"metric"`` or ``"imperial"`` (mph, lbf, ft); the
        figures stay metric. [-]
    provenance : dict, optional
        Provenance record (:mod:`lapbalance.provenance`) shown in the "Provenance" section
        (default: built from the results). [-]
    correlation : Correlation, optional
        A correlation with a logged lap (:func:`lapbalance.correlate.correlate`); adds the
        section of :func:`correlation_section`. [-]
    processes : int, optional
        Processes that draw the figures (default: one per core, up to four; 1 draws them in
        this process). The document is the same for any number. [-]

    Returns
    -------
    str
        A complete, self-contained HTML5 document. [-]
    """
    if isinstance(results, LapResult):
        results = [results]
    results = list(results)
    if not results:
        raise ValueError("build_report needs at least one lap result")
    from lapbalance import provenance as _prov
    from lapbalance.units import Display

    disp = Display(units)
    labels = _labels(results, labels)
    if provenance is None:
        provenance = _prov.build([r.car for r in results], [results[0].track],
                                 solver=results[0].settings)
    track = getattr(results[0].track, "name", "") or "track"
    if generated is None:
        generated = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    if len(results) == 1:
        title = f"Lap balance report: {labels[0]} on {track}"
    else:
        title = f"Lap balance report: {len(results)} variants on {track}"
    tr = results[0].track
    meta = (f"{track}, {disp.length(float(tr.length_m)):.0f} {disp.unit('length')}, "
            f"{'closed lap' if tr.closed else 'open run'}, step "
            f"{float(tr.step_m):.2f} m · generated {generated} by lapbalance {__version__}")
    nav = ["<nav><ul>"]
    if len(results) > 1:
        nav.append('<li><a href="#comparison">Comparison</a></li>')
    for j, lab in enumerate(labels):
        nav.append(f'<li><a href="#lap-{j + 1}">{_e(lab)}</a></li>')
    if correlation is not None:
        nav.append('<li><a href="#correlation">Correlation with the log</a></li>')
    nav.append('<li><a href="#assumptions">Assumptions and limits</a></li>')
    nav.append('<li><a href="#provenance">Provenance</a></li>')
    nav.append("</ul></nav>")
    body = [f"<h1>{_e(title)}</h1>", f'<p class="meta">{_e(meta)}</p>',
            f'<div class="caution" role="note">{_e(CAUTION)}</div>', "\n".join(nav)]
    figs = _Figures(dpi, processes)
    if len(results) > 1:
        body.append(_comparison_section(results, labels, figs, disp))
    for j, (r, lab) in enumerate(zip(results, labels, strict=True)):
        body += [f'<h2 id="lap-{j + 1}">{_e(lab)}</h2>', "<h3>Summary</h3>",
                 _summary_section(r, disp)]
        if len(results) == 1:
            body.append(_setup_section([r], [lab]))
        body += ["<h3>Corners and lift-off check</h3>",
                 _corner_section(r, figs, disp), "<h3>Figures</h3>", _figures(r, figs)]
    if correlation is not None:
        body.append(correlation_section(correlation, dpi, _figs=figs))
    body.append('<h2 id="assumptions">Assumptions and limits</h2>')
    body.append('<ul class="assumptions">' + "".join(f"<li>{_e(a)}</li>" for a in ASSUMPTIONS)
                + "</ul>")
    body.append(_provenance_section(provenance))
    body.append(f"<footer>{_e(CAUTION)}</footer>")
    return figs.fill("<!DOCTYPE html>\n"
                     '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
                     '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
                     f'<meta name="generator" content="lapbalance {_e(__version__)}">\n'
                     f"<title>{_e(title)}</title>\n<style>{_css()}</style>\n</head>\n"
                     "<body>\n" + "\n".join(body) + "\n</body>\n</html>\n")


def write_report(results: Sequence[LapResult] | LapResult, path: str | Path, force: bool = False,
                 labels: Sequence[str] | None = None, dpi: int = 100, *,
                 units: str = "metric", provenance: dict | None = None,
                 correlation=None) -> Path:
    """Build the report and write it atomically to ``path``.

    Parameters
    ----------
    results : LapResult or sequence of LapResult
        As :func:`build_report`. [-]
    path : str or Path
        Output HTML file. [-]
    force : bool
        Replace an existing file (otherwise :class:`~lapbalance.errors.InputError`). [-]
    labels : sequence of str, optional
        As :func:`build_report`. [-]
    dpi : int
        Resolution of the embedded figures. [dots per inch]
    correlation : Correlation, optional
        As :func:`build_report`. [-]

    Returns
    -------
    Path
        The file written. [-]
    """
    path = Path(path)
    if path.is_dir():
        raise InputError("is a folder; give a file name such as report.html", path, "--out")
    if path.exists() and not force:
        raise InputError("already exists; pass --force to replace it or choose another --out",
                         path)
    return write_text_atomic(path, build_report(results, labels, dpi, units=units,
                                                provenance=provenance, correlation=correlation))



def correlation_section(corr, dpi: int = 100, *, _figs: _Figures | None = None) -> str:
    """HTML section of a correlation with a logged lap (self-contained fragment).

    Parameters
    ----------
    corr : Correlation
        From :func:`lapbalance.correlate.correlate`. [-]
    dpi : int
        Resolution of the embedded figure. [dots per inch]

    Returns
    -------
    str
        ``<h2 id="correlation">`` and its tables and figure. [-]
    """
    from lapbalance.plots_correlate import correlation_figure

    s = corr.summary()
    al = corr.alignment
    parts = ['<h2 id="correlation">Correlation with the log</h2>']
    rows = [["log", _e(Path(s["log"]).name)],
            ["complete laps (partial left out)",
             _e(f"{s['laps_in_log']} ({s['partial_laps_left_out']})")],
            ["lap compared", _e(s["lap_compared"])],
            ["logged lap time", _num(s["logged_lap_time_s"], ".3f", " s")],
            ["model lap time", _num(s["model_lap_time_s"], ".3f", " s")],
            ["alignment", _e(f"{al.method}: distance scale {al.scale:.5f} track m per logger "
                             f"m, offset {al.offset_m:+.2f} m")],
            ["speed RMS, log − model", _num(al.speed_rms_kph, ".2f", " km/h")]]
    if s["fitted_lap_time_s"] is not None:
        rows.append(["fitted model lap time", _num(s["fitted_lap_time_s"], ".3f", " s")])
    parts.append(_table(["quantity", "value"], rows))
    seg_rows, classes = [], []
    for r in corr.segments:
        d = r["model_minus_log_kph"]
        cls = "pos" if r["verdict"] == "optimistic" else (
            "neg" if r["verdict"] == "pessimistic" else "")
        seg_rows.append([_e(r["segment"]), _num(r["at_m"], ".0f"), _num(r["model_kph"], ".1f"),
                         _num(r["log_kph"], ".1f"), f'<span class="{cls}">{_num(d, "+.1f")}'
                         "</span>", _e(r["verdict"]), _num(r.get("fitted_kph"), ".1f"),
                         _num(r.get("model_ay_mps2"), ".1f"), _num(r.get("log_ay_mps2"), ".1f")])
        classes.append([""] * 9)
    parts.append("<h3>Corner minimum and straight top speeds</h3>")
    parts.append(_table(["segment", "at [m]", "model [km/h]", "log [km/h]",
                         "model − log [km/h]", "model is", "fitted [km/h]",
                         "model peak a_y [m/s²]", "log peak a_y [m/s²]"], seg_rows,
                        text_cols=(0, 5), cell_classes=classes))
    parts.append('<p class="note">C = corner (minimum speed), S = straight (top speed). The '
                 "logged value is the model's extreme plus the mean log − model difference "
                 "over the window around it, so sample noise does not bias it; optimistic = "
                 "the model is faster than the car there.</p>")
    if corr.fit is not None:
        f = corr.fit
        frows = [[_e(r["factor"]), _num(r["value"], ".4f"), _num(r["std"], ".4f"),
                  _e(f"{_num(r['ci95_low'], '.4f')} – {_num(r['ci95_high'], '.4f')}")]
                 for r in f.table()]
        parts.append("<h3>Fitted factors</h3>")
        parts.append(_table(["factor", "value", "± 1σ", "95 % interval"], frows))
        parts.append(f'<p class="note">Least squares on {f.n_residuals} corner minimum and '
                     f"straight top speeds (weights corner {f.weights['corner']:g}, straight "
                     f"{f.weights['straight']:g}); residual RMS {f.residual_rms_kph:.2f} km/h; "
                     "confidence from s²(JᵀJ)⁻¹. Every other car value is taken as right, so "
                     "an error elsewhere shows up as a biased factor.</p>")
    figs = _figs if _figs is not None else _Figures(dpi, processes=1)
    parts.append(_img(figs.add(correlation_figure, corr), "correlation with the "
                      "log", "Speed over distance (log, model, fitted model), time delta "
                      "log − model (rising where the model gains on the car), and model − log "
                      "speed per corner and straight."))
    doc = "\n".join(parts)
    return doc if _figs is not None else figs.fill(doc)
