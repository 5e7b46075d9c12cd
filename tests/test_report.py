"""HTML/PDF report: valid, self-contained, escaped, complete; rendered by headless Chromium."""

from __future__ import annotations

import base64
import html.parser
import json
import re
import shutil
import struct
import subprocess
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest

from benchfit.cli import main
from benchfit.data import FrequencyResponse, read_sweep, write_sweep_csv
from benchfit.fitting import fit
from benchfit.fitting.model import PlantModel
from benchfit.loop.design import Design, design
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Targets
from benchfit.numfmt import db, deg, eng
from benchfit.output.assemble import assemble
from benchfit.output.report import render_html, render_pdf, write_report
from benchfit.output.report_figures import report_figures
from benchfit.output.report_inputs import ReportInputs
from benchfit.output.spread_draws import spread_draws

W = 2 * np.pi
EVIL = "<script>alert(1)</script>.csv"
VOID = {"meta", "img", "br", "hr", "link", "input", "col", "wbr", "source", "area", "base", "embed"}


def _buck() -> PlantModel:
    w0, q, wz = W * 5e3, 2.0, W * 80e3
    return PlantModel(zeros=[-wz], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / wz, delay_s=1.5e-7)


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    """A measured sweep saved under a hostile file name, its fit, and a design from it."""
    folder = tmp_path_factory.mktemp("job")
    f = np.logspace(1, 6, 201)
    rng = np.random.default_rng(5)
    h = _buck().response(f) * (1 + 0.01 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    path = folder / EVIL
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=h, quantity="plant",
                                      meta={"instrument": "bench analyzer <b>SN 42</b>"}), path)
    sweep = read_sweep(path)
    fr = fit(sweep)
    lp = LoopPlant(fr.model, Sensing.divider(10e3, 3.24e3), name="buck", band_hz=(f[0], f[-1]),
                   draws=fr.draw_responses)
    d = design(lp, "type3", Targets(crossover_hz=20e3, phase_margin_deg=50, gain_margin_db=10),
               opamp=OpAmp(10e6), draws=300, seed=11, sources=(str(path),))
    return {"folder": folder, "sweep": sweep, "fit": fr, "design": d, "path": path}


class _Checker(html.parser.HTMLParser):
    """Collects tags and checks that every element closes in order (the parser itself is lenient)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.errors: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def _parse(text: str) -> _Checker:
    c = _Checker()
    c.feed(text)
    c.close()
    return c


@pytest.fixture(scope="module")
def report(job, tmp_path_factory):
    out = tmp_path_factory.mktemp("rep")
    inputs = ReportInputs(design=job["design"], fit=job["fit"], sweep=job["sweep"])
    res = write_report(inputs, out / "report.html", pdf_path=out / "report.pdf")
    return {"res": res, "html": (out / "report.html").read_text(encoding="utf-8"), "dir": out}


def test_html_is_well_formed_and_self_contained(report):
    text = report["html"]
    assert text.startswith("<!DOCTYPE html>")
    c = _parse(text)
    assert not c.errors and not c.stack, (c.errors, c.stack)
    names = [t for t, _ in c.tags]
    assert "script" not in names and "link" not in names and "iframe" not in names
    imgs = [a for t, a in c.tags if t == "img"]
    assert len(imgs) == len(report["res"]["figures"]) >= 4
    for a in imgs:
        assert a["src"].startswith("data:image/png;base64,")
        assert base64.b64decode(a["src"].split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    # no network: no URL anywhere in an attribute
    assert not any(re.match(r"[a-z]+://", str(v)) for _, a in c.tags for v in a.values())


def test_hostile_file_name_and_metadata_are_escaped(report):
    text = report["html"]
    assert "<script>" not in text and "<b>SN 42</b>" not in text
    assert html_escaped(EVIL) in text
    assert "&lt;b&gt;SN 42&lt;/b&gt;" in text   # instrument identity from the file, shown as text
    words = "".join(_parse(text).text)
    assert EVIL in words   # a reader sees the name as it is


def html_escaped(s: str) -> str:
    import html

    return html.escape(s, quote=True)


def test_part_list_and_margins_are_in_the_report(report, job):
    d: Design = job["design"]
    words = " ".join(_parse(report["html"]).text)
    for name, value in d.snapped.network.parts.items():
        assert eng(value, "Ω" if name.startswith("R") else "F") in words
    for name, value in d.ideal.network.parts.items():
        assert eng(value, "Ω" if name.startswith("R") else "F", 4) in words
    m = d.snapped.worst_margins()
    # one spacing rule (benchfit.numfmt): "52.0°" without a space, "32.8 dB" with one (was "52.0 °")
    assert deg(m.phase_margin_deg) in words and db(m.gain_margin_db) in words
    assert f"Yield {d.spread.yield_fraction * 100:.1f} %" in words
    assert "Plant fit" in words and "gain" in words   # parameter table
    for p in job["fit"].parameters:
        assert p.name in words


def test_pdf_has_a_text_page_and_every_figure(report):
    pdf = Path(report["res"]["pdf"]).read_bytes()
    assert pdf.startswith(b"%PDF")
    pages = len(re.findall(rb"/Type\s*/Page\b", pdf))
    assert pages >= len(report["res"]["figures"]) + 1


def test_spread_histogram_uses_the_designs_own_draws(job):
    # Same seed, count, tolerances and plant covariance: the yield must be the design's exactly.
    d = job["design"]
    sd = spread_draws(d, plant_draws=job["fit"].draw_responses)
    assert sd.pm_deg.size == d.spread.draws
    assert sd.yield_fraction == pytest.approx(d.spread.yield_fraction, abs=1e-12)
    assert np.percentile(sd.pm_deg, 50, method="inverted_cdf") == pytest.approx(d.spread.percentiles["pm_deg"]["p50"])


def test_report_without_fit_or_sweep_still_shows_design(job):
    d = Design.from_dict(json.loads(json.dumps(job["design"].to_dict(), default=str)))
    figs = report_figures(ReportInputs(design=d))
    assert [f.key for f in figs] == ["crossing", "loop", "nyquist", "spread"]
    text = render_html(ReportInputs(design=d), figs)
    assert not _parse(text).errors
    assert render_pdf(ReportInputs(design=d), figs[:1]).startswith(b"%PDF")


def test_assembled_predictions_overlay_measured_step(job):
    from benchfit.data import TimeTrace

    # a second-order step of our own with 20 % overshoot, as a scope would record it
    t = np.linspace(-1e-4, 9e-4, 1001)
    zeta, wn = 0.456, W * 8e3
    wd = wn * np.sqrt(1 - zeta ** 2)
    tt = np.maximum(t, 0)
    y = 3.3 + 0.2 * np.where(t >= 0, 1 - np.exp(-zeta * wn * tt) * (np.cos(wd * tt) + zeta / np.sqrt(1 - zeta ** 2)
                                                                      * np.sin(wd * tt)), 0)
    y = y + np.random.default_rng(2).normal(0, 1e-3, t.size)
    trace = TimeTrace(time_s=t, channels={"out": y})
    inp = assemble(job["design"], step_trace=trace, step_channel="out")
    step, meas = inp.curve("step"), inp.curve("step_measured")
    # the prediction is made the size of the measured output step: final value = step_v
    # (an integrator in T gives zero steady-state error: final-value theorem)
    assert step.y[-1] == pytest.approx(inp.step.measurement.step_v, rel=0.02)
    assert meas.y[np.argmin(abs(meas.x))] == pytest.approx(0.0, abs=0.01)
    # the step fit reads zeta back (the trace is exactly second order)
    assert inp.step.phase_margin.zeta == pytest.approx(zeta, abs=0.02)
    figs = report_figures(inp)
    assert "step" in [f.key for f in figs]


def test_cli_report_and_errors(job, tmp_path, capsys):
    dj = tmp_path / "design.json"
    job["design"].to_json(dj)
    fj = tmp_path / "fit.json"
    job["fit"].to_json(fj)
    assert main(["report", str(dj), "--fit", str(fj), "--sweep", str(job["path"]), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["html"] == str(tmp_path / "report.html") and out["pdf"] is None
    assert "fit" in out["figures"]
    assert out["summary"]["phase_margin_deg"] == pytest.approx(
        job["design"].snapped.worst_margins().phase_margin_deg)
    assert main(["report", str(fj)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchfit: error:") and "not a design file" in err and err.count("\n") == 1


def _png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def test_rendered_in_headless_chromium(report, tmp_path):
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip("chromium is not installed (.ci/run installs Debian's package; it could not here)")
    shot = tmp_path / "shot.png"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1200,3000",
           (report["dir"] / "report.html").resolve().as_uri()]
    subprocess.run(cmd, capture_output=True, timeout=180, check=False)
    assert shot.is_file(), "chromium wrote no screenshot"
    data = shot.read_bytes()
    assert _png_size(data) == (1200, 3000)
    px = np.asarray(matplotlib.image.imread(shot))[:, :, :3] * 255.0
    non_white = np.mean(np.any(px < 240, axis=2))
    assert non_white > 0.05, f"only {non_white:.1%} of the page is drawn"
    # the blue rule under each section heading (#0072B2) is on the page: the style sheet applied
    blue = np.all(np.abs(px - np.array([0x00, 0x72, 0xB2])) < 12, axis=2)
    assert blue.sum() > 500


def test_spread_draws_json_round_trip(job):
    from benchfit.fileio import to_json_text
    from benchfit.output.spread_draws import SpreadDraws

    sd = spread_draws(job["design"], plant_draws=job["fit"].draw_responses)
    back = SpreadDraws.from_dict(json.loads(to_json_text(sd.to_dict())))
    np.testing.assert_array_equal(back.pm_deg, sd.pm_deg)
    np.testing.assert_array_equal(back.passed, sd.passed)
    assert back.provenance.step == "spread_draws" and back.seed == sd.seed


def test_loop_picture_margins_match_the_corner_drawn():
    # Two load corners; the light load (higher Q) is the worst. In memory the worst corner is drawn;
    # read back from JSON only the nominal loop is kept, so the nominal corner (and its margins) is drawn.
    def plant(q):
        w0 = W * 5e3
        return PlantModel(zeros=[-W * 80e3], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / (W * 80e3))

    corners = [LoopPlant(plant(2.0), name="heavy"), LoopPlant(plant(8.0), name="light")]
    d = design(corners, "type3", Targets(crossover_hz=20e3, phase_margin_deg=45), draws=0)
    assert d.snapped.worst == 1
    for des, idx in ((d, 1), (Design.from_dict(json.loads(json.dumps(d.to_dict(), default=str))), 0)):
        figs = {f.key: f for f in report_figures(ReportInputs(design=des))}
        m = des.snapped.corners[idx]
        text = " ".join(t.get_text() for ax in figs["loop"].figure.axes for t in ax.texts)
        assert f"phase margin {m.phase_margin_deg:.1f}°" in text
        assert des.corners[idx].name in figs["loop"].caption
