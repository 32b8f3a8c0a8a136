"""HTML report: self-contained, well-formed, escaped, complete; opens in a browser; CLI."""

from __future__ import annotations

import base64
import html
import io
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance import plots, report
from lapbalance.car import load_car
from lapbalance.errors import InputError
from lapbalance.lap import CAUTION, simulate_lap
from lapbalance.plots import LAP_FIGURES, PALETTE
from lapbalance.track import load_track
from tests.helpers import make_car
from tests.test_plots import rounded_loop

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
DPI = 60  # small embedded images keep the tests quick

# https://html.spec.whatwg.org/multipage/syntax.html#void-elements (HTML Living Standard)
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


class _Scan(HTMLParser):
    """Collects tags, URL attributes and nesting errors."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.urls: list[tuple[str, str, str]] = []
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        for k in ("src", "href", "action", "srcset", "poster", "data"):
            if k in a:
                self.urls.append((tag, k, a[k] or ""))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.stack.pop()

    def handle_endtag(self, tag):
        if tag in VOID:
            self.errors.append(f"end tag for void element {tag}")
        elif not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def scan(doc: str) -> _Scan:
    p = _Scan()
    p.feed(doc)
    p.close()
    return p


@pytest.fixture(scope="module")
def loop():
    return rounded_loop()


@pytest.fixture(scope="module")
def ring():
    return load_track(ROOT / "tracks" / "veldmoor_ring.csv", step_m=2.0)


@pytest.fixture(scope="module")
def base_lap(ring):
    return simulate_lap(load_car(ROOT / "examples" / "gt_coupe.toml"), ring)


@pytest.fixture(scope="module")
def wing_lap(ring):
    return simulate_lap(load_car(ROOT / "examples" / "gt_coupe_high_wing.toml"), ring)


@pytest.fixture(scope="module")
def single_doc(base_lap):
    return report.build_report(base_lap, dpi=DPI, generated="test")


@pytest.fixture(scope="module")
def compare_doc(base_lap, wing_lap):
    return report.build_report([base_lap, wing_lap], ["base", "high wing"], dpi=DPI,
                               generated="test")


@pytest.mark.parametrize("which", ["single_doc", "compare_doc"])
def test_report_is_self_contained_and_well_formed(request, which):
    doc = request.getfixturevalue(which)
    assert doc.startswith("<!DOCTYPE html>")
    p = scan(doc)
    assert p.errors == []
    assert p.stack == []  # every non-void element closed
    for tag, attr, url in p.urls:
        assert url.startswith(("data:image/png;base64,", "#")), (tag, attr, url[:40])
    names = {t for t, _ in p.tags}
    assert not names & {"script", "link", "iframe", "object", "embed", "base"}
    low = doc.lower()
    for needle in ("http://", "https://", "@import", "url(", "//cdn", "javascript:"):
        assert needle not in low, needle
    # Every in-page link points at an element that exists.
    ids = {a["id"] for _, a in p.tags if "id" in a}
    for _, _attr, url in p.urls:
        if url.startswith("#"):
            assert url[1:] in ids


def test_embedded_images_are_pngs(compare_doc):
    p = scan(compare_doc)
    imgs = [a for t, a in p.tags if t == "img"]
    # Two laps with every lap figure and the lift-off response curve of their tightest
    # corner, the overlay and one time-delta figure.
    assert len(imgs) == 2 * (len(LAP_FIGURES) + 1) + 2
    for a in imgs:
        assert a.get("alt")
        png = base64.b64decode(a["src"].split(",", 1)[1], validate=True)
        img = mpimg.imread(io.BytesIO(png), format="png")
        assert img.shape[0] > 50 and float(img[..., :3].std()) > 0.02


def test_figures_drawn_in_several_processes_give_the_same_document(base_lap, wing_lap):
    from lapbalance import forkpool, provenance

    if not forkpool.can_fork():
        pytest.skip("needs fork()")
    record = provenance.build([base_lap.car, wing_lap.car], [base_lap.track],
                              solver=base_lap.settings)
    docs = [report.build_report([base_lap, wing_lap], ["base", "high wing"], dpi=40,
                                generated="test", provenance=record, processes=n)
            for n in (1, 2)]
    assert docs[0] == docs[1]
    assert docs[0].count("data:image/png;base64,iVBOR") == 2 * (len(LAP_FIGURES) + 1) + 2
    assert "@@figure-" not in docs[0]  # every placeholder was filled


def test_caution_is_shown_near_the_top(single_doc):
    caution = html.escape(CAUTION)
    i = single_doc.find(caution)
    assert 0 < i < single_doc.find("<h2")
    assert 'class="caution"' in single_doc[:i]


def test_single_report_contents(single_doc, base_lap):
    doc = single_doc
    s = base_lap.summary()
    assert f"{s['lap_time_s']:.3f} s" in doc
    assert f"{s['top_speed_kph']:.1f} km/h" in doc
    assert f"{s['aero_balance_front_cg'] * 100:.1f} %" in doc
    assert f"{s['aero_balance_front_ground'] * 100:.1f} %" in doc
    assert f"{s['air_density_kg_m3']:.4f} kg/m³" in doc
    for sec in s["sectors"]:
        assert f"{sec['time_s']:.3f} s" in doc
    for a in report.ASSUMPTIONS:
        assert html.escape(a) in doc
    assert 'id="comparison"' not in doc
    p = scan(doc)
    # One corner-table row per corner, plus the two worst lift-off steps of each flagged corner.
    verdict_cells = [a for t, a in p.tags if t == "td" and "verdict" in a.get("class", "")]
    flagged = [c for c in base_lap.corners
               if c["liftoff_verdict"] in ("lift-critical", "lift-marginal")]
    assert len(verdict_cells) == len(base_lap.corners) + 2 * len(flagged)


def test_verdict_cells_are_colour_coded(single_doc, base_lap):
    verdicts = {c["liftoff_verdict"] for c in base_lap.corners}
    assert verdicts  # the demo lap has corners with verdicts
    for v in verdicts:
        assert f'class="verdict v-{v}"' in single_doc
        assert f"td.v-{v} {{ background: " in single_doc
        assert f"border-left-color: {PALETTE[v]}" in single_doc


def test_comparison_section(compare_doc, base_lap, wing_lap):
    doc = compare_doc
    assert 'id="comparison"' in doc
    delta = wing_lap.lap_time_s - base_lap.lap_time_s
    assert f"{delta:+.3f}" in doc
    assert doc.count('<h2 id="lap-') == 2


def test_text_is_escaped(loop, monkeypatch):
    # Two figures suffice here: the names reach every figure title through the same helper.
    monkeypatch.setattr(plots, "LAP_FIGURES", {k: plots.LAP_FIGURES[k]
                                               for k in ("track_map", "liftoff")})
    r = simulate_lap(make_car(name='<b>R&D "$5" car</b>'), loop)
    doc = report.build_report(r, dpi=30, generated="<now>")
    assert "<b>R&D" not in doc
    assert "&lt;b&gt;R&amp;D &quot;$5&quot; car&lt;/b&gt;" in doc
    assert "&lt;now&gt;" in doc
    assert scan(doc).errors == []


def test_write_report_refuses_to_overwrite(tmp_path, monkeypatch, base_lap):
    monkeypatch.setattr(report, "build_report",
                        lambda results, labels, dpi, **kw: "<!DOCTYPE html>")
    out = tmp_path / "sub" / "r.html"
    assert report.write_report(base_lap, out) == out
    assert out.read_text() == "<!DOCTYPE html>"
    out.write_text("mine")
    with pytest.raises(InputError, match="already exists; pass --force"):
        report.write_report(base_lap, out)
    assert out.read_text() == "mine"
    report.write_report(base_lap, out, force=True)
    assert out.read_text() == "<!DOCTYPE html>"
    with pytest.raises(InputError, match="is a folder"):
        report.write_report(base_lap, tmp_path, force=True)
    assert [p.name for p in out.parent.iterdir()] == ["r.html"]  # no temporary files left


def test_report_opens_in_headless_chromium(tmp_path, compare_doc):
    if not Path(CHROMIUM).exists() and shutil.which("chromium") is None:
        pytest.skip("no browser installed")
    exe = CHROMIUM if Path(CHROMIUM).exists() else shutil.which("chromium")
    page = tmp_path / "report.html"
    page.write_text(compare_doc, encoding="utf-8")
    shot = tmp_path / "shot.png"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}",
           f"--screenshot={shot}", "--window-size=1200,2000", page.as_uri()]
    proc = subprocess.run(cmd, capture_output=True, timeout=90, check=False)
    assert shot.exists(), proc.stderr.decode(errors="replace")[-2000:]
    img = mpimg.imread(shot)
    rgb = img[..., :3]
    assert rgb.shape[0] >= 1000 and rgb.shape[1] >= 1000
    assert float(rgb.std()) > 0.05  # text, tables and figures drawn
    assert not np.all(rgb > 0.99)  # not a white page
    # The caution box is drawn in its tint near the top of the page.
    r, g, b = (int(PALETTE["lift-critical"][i:i + 2], 16) / 255 for i in (1, 3, 5))
    top = rgb[:400]
    assert np.any((np.abs(top[..., 0] - r) < 0.05) & (np.abs(top[..., 1] - g) < 0.05)
                  & (np.abs(top[..., 2] - b) < 0.05))


def test_report_command(tmp_path, monkeypatch):
    from lapbalance.cli import main

    # The figures are tested above; one lap figure keeps this plumbing test quick.
    monkeypatch.setattr(plots, "LAP_FIGURES", {"speed": plots.LAP_FIGURES["speed"]})
    base = str(ROOT / "examples" / "gt_coupe.toml")
    wing = str(ROOT / "examples" / "gt_coupe_high_wing.toml")
    track = str(ROOT / "tracks" / "oranby_bowl.csv")
    out = tmp_path / "report.html"
    runner = CliRunner()
    res = runner.invoke(main, ["report", base, track, "--variant", wing, "--out", str(out),
                               "--step-m", "4"])
    assert res.exit_code == 0, res.output
    assert "[1/2] Halden GT coupe" in res.stderr and "[2/2]" in res.stderr
    assert f"wrote {out}" in res.stdout
    doc = out.read_text(encoding="utf-8")
    assert 'id="comparison"' in doc and html.escape(CAUTION) in doc
    res = runner.invoke(main, ["report", base, track, "--out", str(out)])
    assert res.exit_code == 2
    assert "already exists; pass --force" in res.stderr
    assert out.read_text(encoding="utf-8") == doc
    res = runner.invoke(main, ["report", base, track, "--out", str(out), "--force",
                               "--step-m", "4", "--set", "aero.drag_area_m2=0.9"])
    assert res.exit_code == 0, res.output
    assert 'id="comparison"' not in out.read_text(encoding="utf-8")
    res = runner.invoke(main, ["report", base, track, "--out", str(out), "--force",
                               "--variant", str(tmp_path / "missing.toml")])
    assert res.exit_code == 2 and "missing.toml" in res.stderr
