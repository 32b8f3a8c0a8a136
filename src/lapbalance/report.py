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
from collections.abc import Sequence
from pathlib import Path

from matplotlib.colors import to_rgb

from lapbalance import __version__, plots
from lapbalance.errors import InputError
from lapbalance.lap import CAUTION, LapResult
from lapbalance.liftoff import VERDICTS, verdict_counts
from lapbalance.outputs import write_text_atomic

#: Modelling assumptions and limits listed in every report.
ASSUMPTIONS = (
    "Quasi-static: the car is a point mass on two axles, in equilibrium at every track step; "
    "no transient yaw, roll or pitch dynamics and no tyre relaxation.",
    "Lateral load transfer is the steady-state value from roll-centre heights and the "
    "roll-stiffness split.",
    "Grip is a friction ellipse per axle; each tyre's peak friction falls with load.",
    "Drive torque is shared ideally between the two wheels of a driven axle.",
    "While braking, engine overrun is folded into the brake force (fixed brake bias).",
    "The lift-off check re-evaluates each cornering step at the same speed and path "
    "curvature with the drive force replaced by engine braking (and once coasting).",
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
    return _CSS.format(verdict_css=verdict_css, caution=p["rear-saturates"],
                       caution_bg=_tint(p["rear-saturates"], 0.10), **p)


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


def _img(png: bytes, alt: str, caption: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


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


def _summary_section(result: LapResult) -> str:
    s = result.summary()
    rows = [
        ["car", _e(s["car"])],
        ["track", _e(f"{s['track']} ({s['length_m']:.0f} m, "
                     f"{'closed lap' if s['closed'] else 'open run'})")],
        ["lap time", _num(s["lap_time_s"], ".3f", " s")],
        ["top speed", _num(s["top_speed_kph"], ".1f", " km/h")],
        ["minimum speed", _num(s["min_speed_kph"], ".1f", " km/h")],
        ["mean speed", _num(s["mean_speed_kph"], ".1f", " km/h")],
        ["aero balance, front share on track (CG convention)",
         _pct(s["aero_balance_front_cg"])],
        ["aero balance, front share on wheel-restrained scales (ground convention)",
         _pct(s["aero_balance_front_ground"])],
        ["air density", _num(s["air_density_kg_m3"], ".4f", " kg/m³")],
    ]
    for sec in s["sectors"]:
        rows.append([f"sector {sec['sector']} ({sec['start_m']:.0f}–{sec['end_m']:.0f} m)",
                     _num(sec["time_s"], ".3f", " s")])
    counts = verdict_counts(result.corners)
    rows.append(["lift-off verdicts", _e(", ".join(f"{n} {v}" for v, n in counts.items()
                                                   if n) or "no corners")])
    return _table(["quantity", "value"], rows)


def _verdict_cell(c: dict) -> tuple[str, str]:
    v = c.get("liftoff_verdict", "not-checked")
    cls = f"verdict v-{v}" if v in VERDICTS else "verdict"
    return _e(v), cls


def _corner_section(result: LapResult) -> str:
    if not result.corners:
        return '<p class="note">No corners were detected on this track.</p>'
    rows, classes = [], []
    for c in result.corners:
        vtxt, vcls = _verdict_cell(c)
        bal = c["balance_index_at_min"]
        rows.append([
            _e(c["id"]), _e(c["direction"]), _num(c["apex_m"], ".0f"),
            _num(c["min_radius_m"], ".0f"), _num(c["min_speed_kph"], ".1f"),
            _e(c["limiting_axle"]),
            f'<span class="{"pos" if bal > 0 else "neg"}">{_num(bal, "+.3f")}</span>',
            _num(c["usage_front_at_min"], ".3f"), _num(c["usage_rear_at_min"], ".3f"),
            vtxt, _num(c.get("liftoff_max_shift"), "+.3f"),
            _num(c.get("coast_max_shift"), "+.3f"),
            _num(c.get("liftoff_max_usage_rear"), ".3f"), _e(c.get("liftoff_reason", "")),
        ])
        classes.append([""] * 9 + [vcls] + [""] * 3 + ["why"])
    table = _table(["corner", "dir", "apex [m]", "min radius [m]", "min speed [km/h]",
                    "limiting axle", "balance at min [-]", "u_f at min", "u_r at min",
                    "lift-off verdict", "worst shift [-]", "coasting shift [-]",
                    "u_r after lift-off", "why"], rows, text_cols=(0, 1, 5, 13),
                   cell_classes=classes)
    legend = ('<p class="note">balance = u_r − u_f at the slowest point of the corner '
              "(&gt; 0 oversteer-leaning); worst shift = largest change of the balance index "
              "on lift-off with engine braking, coasting shift = the same without engine "
              "braking; u_r after lift-off = highest rear usage once the driver lifts "
              "(1 = the rear saturates).</p>")
    return table + "\n" + legend + "\n" + _worst_steps(result)


def _worst_steps(result: LapResult) -> str:
    rows, classes = [], []
    for c in result.corners:
        for key, what in (("liftoff_worst_shift", "largest balance shift"),
                          ("liftoff_worst_rear", "highest rear usage after lift-off")):
            w = c.get(key)
            if not w:
                continue
            vtxt, vcls = _verdict_cell(c)
            rows.append([
                _e(c["id"]), vtxt, _e(what), _num(w["distance_m"], ".0f"),
                _num(w["speed_kph"], ".1f"), _num(w["balance_shift"], "+.3f"),
                _num(w["front_load_shift_n"], "+.0f"),
                _num(w["usage_front_on"], ".3f"), _num(w["usage_front_off"], ".3f"),
                _num(w["usage_rear_on"], ".3f"), _num(w["usage_rear_off"], ".3f"),
                _num(w["coast_balance_shift"], "+.3f"), _num(w["coast_usage_rear"], ".3f"),
            ])
            classes.append(["", vcls] + [""] * 11)
    if not rows:
        return ('<p class="note">No corner qualified for the lift-off check (no cornering '
                "on throttle above the lateral-acceleration threshold).</p>")
    return ("<h3>Lift-off: the two worst steps per corner</h3>\n"
            + _table(["corner", "verdict", "step", "at [m]", "speed [km/h]",
                      "balance shift [-]", "front load change [N]", "u_f on", "u_f off",
                      "u_r on", "u_r off", "coasting shift [-]", "u_r coasting"], rows,
                     text_cols=(0, 2), cell_classes=classes))


def _figures(result: LapResult, dpi: int) -> str:
    out = []
    for name, (fn, caption) in plots.LAP_FIGURES.items():
        png = plots.figure_png(fn(result), dpi)
        out.append(_img(png, f"{name.replace('_', ' ')}: {result.car.name}", caption))
    return "\n".join(out)


def _comparison_section(results: Sequence[LapResult], labels: Sequence[str], dpi: int) -> str:
    base = results[0]
    nsec = max(len(r.sectors) for r in results)
    header = (["variant", "lap time [s]", "Δ to base [s]", "top [km/h]", "min [km/h]",
               "mean [km/h]", "aero bal. CG", "aero bal. ground"]
              + [f"S{j + 1} Δ [s]" for j in range(nsec)]
              + ["rear-saturates", "watch"])
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
        rows.append([_e(lab), _num(s["lap_time_s"], ".3f"),
                     _num(s["lap_time_s"] - sb["lap_time_s"], "+.3f"),
                     _num(s["top_speed_kph"], ".1f"), _num(s["min_speed_kph"], ".1f"),
                     _num(s["mean_speed_kph"], ".1f"), _pct(s["aero_balance_front_cg"]),
                     _pct(s["aero_balance_front_ground"])] + dsec
                    + [_e(counts["rear-saturates"]), _e(counts["watch"])])
    parts = ['<h2 id="comparison">Comparison</h2>',
             f'<p class="note">Base: {_e(labels[0])}. Δ = variant − base '
             "(&gt; 0: the variant is slower).</p>", _table(header, rows)]
    ids = [c["id"] for c in base.corners]
    if ids:
        head = ["corner"] + [f"{lab} min [km/h]" for lab in labels] + \
               [f"{lab} verdict" for lab in labels]
        crow, ccls = [], []
        for k, cid in enumerate(ids):
            row, cls = [_e(cid)], [""]
            vcells = []
            for r in results:
                c = r.corners[k] if k < len(r.corners) and r.corners[k]["id"] == cid else None
                row.append(_num(c["min_speed_kph"], ".1f") if c else "–")
                cls.append("")
                vcells.append(_verdict_cell(c) if c else ("–", ""))
            row += [v for v, _ in vcells]
            cls += [c for _, c in vcells]
            crow.append(row)
            ccls.append(cls)
        vcols = tuple(range(1 + len(labels), 1 + 2 * len(labels)))
        parts += ["<h3>Corners</h3>", _table(head, crow, text_cols=(0,) + vcols,
                                             cell_classes=ccls)]
    parts.append(_img(plots.figure_png(plots.overlay_figure(results, labels), dpi),
                      "speed and balance overlay", "Speed and balance index of every "
                      "variant over distance."))
    for r, lab in zip(results[1:], labels[1:], strict=True):
        parts.append(_img(plots.figure_png(plots.delta_figure(base, r, [labels[0], lab]), dpi),
                          f"time delta {lab}", f"Time delta of {lab} against {labels[0]} "
                          "over distance, and where on the track it grows (red) or shrinks "
                          "(blue)."))
    return "\n".join(parts)


def build_report(results: Sequence[LapResult] | LapResult, labels: Sequence[str] | None = None,
                 dpi: int = 100, generated: str | None = None) -> str:
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
    labels = _labels(results, labels)
    track = getattr(results[0].track, "name", "") or "track"
    if generated is None:
        generated = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    if len(results) == 1:
        title = f"Lap balance report: {labels[0]} on {track}"
    else:
        title = f"Lap balance report: {len(results)} variants on {track}"
    tr = results[0].track
    meta = (f"{track}, {float(tr.length_m):.0f} m, "
            f"{'closed lap' if tr.closed else 'open run'}, step "
            f"{float(tr.step_m):.2f} m · generated {generated} by lapbalance {__version__}")
    nav = ["<nav><ul>"]
    if len(results) > 1:
        nav.append('<li><a href="#comparison">Comparison</a></li>')
    for j, lab in enumerate(labels):
        nav.append(f'<li><a href="#lap-{j + 1}">{_e(lab)}</a></li>')
    nav.append('<li><a href="#assumptions">Assumptions and limits</a></li>')
    nav.append("</ul></nav>")
    body = [f"<h1>{_e(title)}</h1>", f'<p class="meta">{_e(meta)}</p>',
            f'<div class="caution" role="note">{_e(CAUTION)}</div>', "\n".join(nav)]
    if len(results) > 1:
        body.append(_comparison_section(results, labels, dpi))
    for j, (r, lab) in enumerate(zip(results, labels, strict=True)):
        body += [f'<h2 id="lap-{j + 1}">{_e(lab)}</h2>', "<h3>Summary</h3>",
                 _summary_section(r), "<h3>Corners and lift-off check</h3>",
                 _corner_section(r), "<h3>Figures</h3>", _figures(r, dpi)]
    body.append('<h2 id="assumptions">Assumptions and limits</h2>')
    body.append('<ul class="assumptions">' + "".join(f"<li>{_e(a)}</li>" for a in ASSUMPTIONS)
                + "</ul>")
    body.append(f"<footer>{_e(CAUTION)}</footer>")
    return ("<!DOCTYPE html>\n"
            '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{_e(title)}</title>\n<style>{_css()}</style>\n</head>\n<body>\n"
            + "\n".join(body) + "\n</body>\n</html>\n")


def write_report(results: Sequence[LapResult] | LapResult, path: str | Path, force: bool = False,
                 labels: Sequence[str] | None = None, dpi: int = 100) -> Path:
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
    return write_text_atomic(path, build_report(results, labels, dpi))
