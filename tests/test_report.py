"""The one-file HTML report: its model, its page, its figures and its command (no browser here)."""

from __future__ import annotations

import base64
import html
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from bandcensus.commands._text import display_path
from analysis.compare.core import compare_configurations
from analysis.diagnose.core import summarise_findings
from analysis.errors import BadParameterError, NoDataError
from analysis.noise.workflow import analyse_noise
from analysis.report.build import SECTIONS, build_report, preamp_verdict
from analysis.workflows import NoiseOptions, assess
from analysis.report.html import render_html, write_report
from analysis.report.plots import mpl_text, png_data_uri
from bandcensus.cli import main
from report_fixtures import (
    BAND_HZ, ENR_DB, HOSTILE_BASE, HOSTILE_DEVICE, HOSTILE_NOTES, HOSTILE_TEST, MATCH_HZ, STRONGEST_HZ,
    hostile_db, match_to_scene, scene_carriers_hz, simulated_db,
)

DEMO_SIGMF = Path(__file__).resolve().parent.parent / "recordings_demo" / "sigmf"


class _Page(HTMLParser):
    """Collects tags, attributes, section ids, channel-table rows and text of a page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.rows = 0
        self._in_table = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "table" and a.get("id") == "channel-table":
            self._in_table = True
        if self._in_table and tag == "tr" and "data-freq-hz" in a:
            self.rows += 1

    def handle_endtag(self, tag):
        if tag == "table":
            self._in_table = False

    def handle_data(self, data):
        self.text.append(data)

    def all(self, tag):
        return [a for t, a in self.tags if t == tag]


def _parse(page: str) -> _Page:
    p = _Page()
    p.feed(page)
    return p


@pytest.fixture(scope="module")
def sim(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    db = simulated_db(folder / "sim.db")
    written = write_report(db, "bare", "preamp-peaked", folder / "report.html", enr_db=ENR_DB)
    return db, written


def test_model_reuses_the_analyses(sim):
    db, written = sim
    r = written.report
    assert r.unavailable == {}, r.unavailable
    # the comparison in the report is the comparison module's own result, not a re-derivation
    direct = compare_configurations(db, "bare", "preamp-peaked")
    assert r.comparison.to_dict() == direct.to_dict()
    assert r.noise.to_dict() == analyse_noise(db, "bare", "preamp-peaked", enr_db=ENR_DB).to_dict()
    # one row per station: every census station is a scene transmitter (within 25 kHz of its
    # carrier), each once; 93.2 and 95.9 MHz (C/N about 15 and 7 dB bare) are found; the
    # 94.5 MHz station (-104.5 dBm, about 2 dB C/N bare in a 4 ms dwell) may stay below the
    # emission detector, so it is not required
    assert r.comparison.unit == "station"
    found = match_to_scene([c.freq_hz for c in r.comparison.items], scene_carriers_hz(*BAND_HZ))
    assert {93.2e6, 95.9e6} <= set(found)
    # strongest received station of the invented scene inside the band (quorrelby_hill.toml)
    assert abs(r.series.strongest_hz - STRONGEST_HZ) <= MATCH_HZ
    assert r.series.weakest_hz != r.series.strongest_hz
    # preamp NF of the scene is 1.0 dB (quorrelby_hill.toml): the report carries the workflow's figure
    assert r.noise.summary["preamp_nf_db"] == pytest.approx(1.0, abs=0.6)
    assert r.settings.simulated and "simulation" in r.settings.simulated_because[0]
    titles = [name for name, _ in r.assumptions]
    assert {"Definitions", "Comparison", "Passband", "Noise figures", "Diagnosis"} <= set(titles)
    noise_items = dict(r.assumptions)["Noise figures"]
    assert all(a in noise_items for a in r.noise.assumptions)


def db_path_of(written):
    return written.report.db_path


def test_summary_in_plain_words(sim):
    _, written = sim
    r = written.report
    s = r.comparison.summary
    text = "\n".join(r.summary)
    # the same headlines as `compare`, in the same order, then the verdict sentence
    assessment = assess(db_path_of(written), "bare", "preamp-peaked", options=NoiseOptions(enr_db=ENR_DB))
    assert list(r.summary[:4]) == list(assessment.headlines)
    assert r.summary[4] == preamp_verdict(r.comparison)
    for key in ("gained", "lost", "helped", "hurt"):
        for f in s["frequencies_hz"][key]:
            assert f"{f / 1e6:.1f}" in r.summary[0]
    assert r.summary[1].startswith("Listenable") and r.summary[2].startswith("Could any preamp help")
    assert r.summary[3].startswith("Trouble")
    if r.passband is not None:
        assert r.passband.verdict()[1:] in text


def test_page_is_self_contained(sim):
    _, written = sim
    page = written.path.read_text(encoding="utf-8")
    p = _parse(page)
    assert "<script" not in page.lower()
    assert not p.all("link") and not p.all("iframe") and not p.all("object")
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//|file:)""", page, re.I)
    assert "url(" not in page and "@import" not in page
    imgs = p.all("img")
    assert len(imgs) == 5  # comparison, passband, noise, overnight, time-by-frequency
    for img in imgs:
        assert img["src"].startswith("data:image/png;base64,") and img["alt"]
        png = base64.b64decode(img["src"].split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
    csp = [m for m in p.all("meta") if m.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]["content"]
    ids = [a.get("id") for t, a in p.tags if t == "section"]
    assert ids == [k for k, _ in SECTIONS]
    assert p.rows == len(written.report.comparison.items)  # one table row per census station
    assert "@media print" in page and "break-inside: avoid" in page and "table-header-group" in page


def test_figures_are_not_blank(sim):
    import matplotlib.image as mpimg

    _, written = sim
    p = _parse(written.path.read_text(encoding="utf-8"))
    for img in p.all("img"):
        pixels = mpimg.imread(io.BytesIO(base64.b64decode(img["src"].split(",", 1)[1])), format="png")
        grey = pixels[..., :3].mean(axis=2)
        assert pixels.shape[0] > 200 and pixels.shape[1] > 400
        assert np.mean(grey < 0.95) > 0.02 and grey.std() > 0.05


def test_table_rows_carry_the_comparison_numbers(tmp_path):
    # known truth (compare_truth): channel 88.1 MHz has gain 14 dB and noise rise 9 dB, so +5 dB
    db = hostile_db(tmp_path / "truth.db")
    r = build_report(db, HOSTILE_BASE, HOSTILE_TEST)
    page = render_html(r, {})
    row = re.search(r'<tr class="v-[a-z-]+" data-freq-hz="88100000">(.*?)</tr>', page).group(1)
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
    ch = next(c for c in r.comparison.channels if c.freq_hz == 88_100_000)
    assert cells[0] == "88.10" and float(cells[3]) == pytest.approx(ch.delta_cn_db, abs=0.005)
    assert float(cells[3]) == pytest.approx(5.0, abs=1.0)
    assert float(cells[5]) == pytest.approx(14.0, abs=1.0) and float(cells[6]) == pytest.approx(9.0, abs=0.5)
    assert cells[7] == str(ch.pairs) and cells[8].endswith(ch.verdict)


def test_user_text_is_escaped(tmp_path):
    db = hostile_db(tmp_path / "hostile.db")
    out = write_report(db, HOSTILE_BASE, HOSTILE_TEST, tmp_path / "h.html").path
    page = out.read_text(encoding="utf-8")
    for raw in (HOSTILE_BASE, HOSTILE_TEST, HOSTILE_DEVICE, HOSTILE_NOTES, "<x>.sigmf-meta"):
        assert raw not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "&lt;img src=x onerror=alert(2)&gt;" in page
    p = _parse(page)
    assert not p.all("script") and not [a for a in p.all("img") if a.get("src") == "x"]
    assert len(p.all("h1")) == 1 and len(p.all("table")) == len(re.findall(r"</table>", page))
    text = "".join(p.text)
    assert HOSTILE_BASE in text and HOSTILE_DEVICE in text and HOSTILE_TEST in text


def test_sections_without_data_say_why(tmp_path):
    db = simulated_db(tmp_path / "antenna-only.db", noise_runs=False)
    r = build_report(db, "bare", "preamp-peaked", target_hz=(93e6, 96e6))
    assert set(r.unavailable) == {"noise"}, r.unavailable
    reason = r.unavailable["noise"]
    assert reason.startswith("not available: ") and "\n" not in reason
    page = render_html(r, {})
    assert f'<section id="noise" class="unavailable"><h2>Noise figure and outside noise</h2><p class="na">' in page
    assert r.passband is not None and r.passband.coverage.target_hz == (93e6, 96e6)


def test_not_simulated_runs_carry_no_banner(tmp_path):
    db = hostile_db(tmp_path / "measured.db", source_kind="rtl")
    r = build_report(db, HOSTILE_BASE, HOSTILE_TEST)
    assert not r.settings.simulated
    page = render_html(r, {})
    assert "SIMULATED" not in page
    sim_page = render_html(build_report(hostile_db(tmp_path / "s.db"), HOSTILE_BASE, HOSTILE_TEST), {})
    assert 'id="simulated-banner"' in sim_page


def test_findings_listed_with_summary_lines(sim):
    _, written = sim
    r = written.report
    page = written.path.read_text(encoding="utf-8")
    if r.diagnosis.findings:
        for line in summarise_findings(r.diagnosis.findings):
            assert line in page
    else:
        assert "No clipping, intermodulation, oscillation or added noise found" in page
    for check in r.diagnosis.checked:
        assert html.escape(f"Checked: {check}") in page


def test_refusals(tmp_path, sim):
    db, _ = sim
    with pytest.raises(NoDataError, match=r"it holds: bare \(antenna: 3 sweeps.*preamp-peaked \(antenna"):
        build_report(db, "bare", "preamp-q")
    with pytest.raises(BadParameterError, match="both 'bare'"):
        build_report(db, "bare", "bare")
    with pytest.raises(BadParameterError, match=r"must end in \.html"):
        write_report(db, "bare", "preamp-peaked", tmp_path / "r.pdf")
    with pytest.raises(BadParameterError, match="positive range"):
        build_report(db, "bare", "preamp-peaked", target_hz=(100e6, 90e6))


def test_mpl_text_and_data_uri():
    assert mpl_text("a$b") == r"a\$b"
    assert png_data_uri(b"\x89PNG") == "data:image/png;base64,iVBORw=="


def test_command_writes_and_prints_the_path(sim, tmp_path, capsys):
    db, _ = sim
    out = tmp_path / "cli.html"
    code = main(["report", "--db", str(db), "--base", "bare", "--test", "preamp-peaked", "--out", str(out),
                 "--target", "92-97", "--enr-db", "15"])
    assert code == 0 and capsys.readouterr().out.strip() == f"Report: {display_path(out)}"
    assert out.stat().st_size > 100_000 and "92.00 – 97.00 MHz (target band as given)" in out.read_text("utf-8")


def test_command_errors_are_one_line(sim, tmp_path, capsys):
    db, _ = sim
    code = main(["report", "--db", str(db), "--base", "bare", "--test", "nothing", "--out", str(tmp_path / "x.html")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and err[0].startswith("Error: no complete sweeps of configuration 'nothing'")
    code = main(["report", "--db", str(db), "--base", "bare", "--test", "preamp-peaked", "--out",
                 str(tmp_path / "x.html"), "--target", "97-92"])
    assert code == 2 and "--target" in capsys.readouterr().err
    code = main(["report", "--db", str(tmp_path / "none.db"), "--base", "a", "--test", "b", "--out",
                 str(tmp_path / "x.html")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and "does not exist" in err[0]
    assert main(["report", "--help"]) == 0 and "self-contained" in capsys.readouterr().out
    assert not (tmp_path / "x.html").exists()


@pytest.mark.slow
def test_report_from_replayed_demo_recordings(tmp_path, capsys):
    metas = sorted(DEMO_SIGMF.glob("*_bare_antenna.sigmf-meta"))[:3] + \
        sorted(DEMO_SIGMF.glob("*_preamp-peaked_antenna.sigmf-meta"))[:3]
    if len(metas) < 6:
        pytest.skip("recordings_demo/sigmf holds no bare and preamp-peaked recordings yet "
                    "(regenerate with recordings_demo/generate.py)")
    db = tmp_path / "replay.db"
    assert main(["replay", *map(str, metas), "--db", str(db), "--quiet"]) == 0
    out = tmp_path / "replay.html"
    assert main(["report", "--db", str(db), "--base", "bare", "--test", "preamp-peaked", "--out", str(out),
                 "--target", "88-100"]) == 0
    page = out.read_text(encoding="utf-8")
    p = _parse(page)
    # one table row per census station; each a scene transmitter (quorrelby_hill.toml), each once
    r = build_report(db, "bare", "preamp-peaked")
    found = match_to_scene([c.freq_hz for c in r.comparison.items], scene_carriers_hz())
    assert p.rows == len(r.comparison.items) == len(found) >= 10
    assert 'id="simulated-banner"' in page and "replays recordings marked simulated" in page
    assert 'class="unavailable"' in page  # antenna recordings only: no noise-source runs
    capsys.readouterr()


def test_verdict_rule_and_default_target(tmp_path):
    from dataclasses import replace

    db = hostile_db(tmp_path / "truth.db")
    r = build_report(db, HOSTILE_BASE, HOSTILE_TEST)
    n = r.comparison.summary
    # known truth: 14 stations gain 9.6-14 dB against a 9 dB noise rise, one (2 dB gain) loses
    assert n["helped"] + n["gained"] > n["hurt"] + n["lost"]
    verdict = next(line for line in r.summary if line.startswith("On balance"))
    assert verdict.startswith(f"On balance '{HOSTILE_TEST}' helps: {n['helped']} helped")
    flipped = dict(n, helped=0, gained=0, hurt=5, lost=2)
    assert "makes reception worse: 0 helped, 5 hurt" in preamp_verdict(replace(r.comparison, summary=flipped))
    mixed = dict(flipped, helped=7)
    assert preamp_verdict(replace(r.comparison, summary=mixed)).startswith("The result of")
    # no --target and a band name that is no band plan: the span of the channels compared
    assert r.target_hz == (88_100_000.0, 92_700_000.0) and "span of the channels" in r.target_note
