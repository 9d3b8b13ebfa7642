"""The self-contained HTML report: structure, content, nothing external, CLI behaviour."""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

from bandmeter import report as report_mod
from bandmeter.batch import BatchOptions, run_batch
from bandmeter.calibration import calibrate
from bandmeter.cli import cli
from bandmeter.engine import AnalysisSettings
from bandmeter.signals import fade, pink_noise, sine

FS = 16000
# HTML void elements (WHATWG HTML, "void elements"): they have no end tag
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


class _Checker(HTMLParser):
    """Collects tags, attributes and text; checks that elements nest properly."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(text: str) -> _Checker:
    checker = _Checker()
    checker.feed(text)
    checker.close()
    assert not checker.errors, checker.errors[:5]
    assert checker.stack == [], checker.stack
    return checker


def assert_self_contained(text: str, checker: _Checker) -> None:
    for tag, attrs in checker.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed"), tag
        for name in ("src", "href", "data", "poster"):
            value = attrs.get(name)
            if value is not None:
                assert value.startswith("data:") or value.startswith("#"), (tag, name, value)
    assert not re.search(r"https?://", text), "an address in the report"
    assert not re.search(r"url\((?!\s*['\"]?data:)", text), "a CSS url() to a file"
    assert "@import" not in text and "@font-face" not in text


def _tone(path, seconds=6.0, gain_db=0.0):
    # a 94 dB calibrator at -26 dBFS: full-scale level 120 dB (94 - (-26), the project's
    # convention that a full-scale sine reads the full-scale level)
    x = sine(FS, 1000.0, seconds, 10 ** ((-26 + gain_db) / 20)) * fade(int(seconds * FS), FS,
                                                                        0.5, 0.5)
    sf.write(path, x, FS, subtype="PCM_24")
    return str(path)


def _site(path, seconds, seed, clip_at_s=None):
    x = 0.02 * pink_noise(int(seconds * FS), FS, seed=seed) + sine(FS, 1000.0, seconds, 0.05)
    if clip_at_s is not None:
        i = int(clip_at_s * FS)
        x[i : i + 40] = 1.0  # samples at full scale: possible overload in that interval
    sf.write(path, x, FS, subtype="PCM_24")
    return str(path)


@pytest.fixture(scope="module")
def batch_dir(tmp_path_factory):
    """An invented survey folder analysed with one-third octaves; one file is not audio."""
    tmp_path = tmp_path_factory.mktemp("report")
    root = tmp_path / "survey"
    root.mkdir()
    _site(root / "pos_a.wav", 3.0, 1)
    _site(root / "pos_b.wav", 2.0, 2, clip_at_s=1.2)
    (root / "pos_c.wav").write_bytes(b"RIFF not really a wav file")
    cal = calibrate(_tone(tmp_path / "pre.wav"), 94.0, after_path=_tone(tmp_path / "post.wav",
                                                                          gain_db=0.2))
    out = str(tmp_path / "out")
    run_batch([str(root)], out, BatchOptions(
        settings=AnalysisSettings(interval_s=0.5, bands=3), calibration=cal))
    return out


def test_batch_report_structure_and_content(batch_dir, tmp_path):
    out = tmp_path / "report.html"
    path = report_mod.report_path(batch_dir, out)
    text = open(path, encoding="utf-8").read()
    checker = parse(text)
    assert_self_contained(text, checker)
    words = " ".join(checker.text)
    # the summary names every analysed recording and the failed one with its error
    for name in ("pos_a.wav", "pos_b.wav", "pos_c.wav"):
        assert name in words
    assert "Failed" in words
    # one inline PNG per figure kind, for each of the two recordings
    images = [a["src"] for t, a in checker.tags if t == "img"]
    assert all(src.startswith("data:image/png;base64,") for src in images)
    for kind in ("time", "spectrum", "bandmap", "distribution", "calibration"):
        figures = [a for t, a in checker.tags if t == "figure" and a.get("class") ==
                   f"fig-{kind}"]
        assert len(figures) == 2, kind
    import base64

    png = base64.b64decode(images[0].split(",", 1)[1])
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, 5.2)
    # provenance: the SHA-256 of each recording, computed here with hashlib
    for name in ("pos_a.wav", "pos_b.wav"):
        digest = hashlib.sha256(open(os.path.join(os.path.dirname(batch_dir), "survey", name),
                                     "rb").read()).hexdigest()
        assert digest in words
    # drift of the invented chain: +0.2 dB between the tones (set when they were made)
    assert re.search(r"drift dB \(post - pre\)\s*0\.20\d", words)
    # cautions
    assert "Results are indicative" in words and "local codes" in words
    # tables: summary, whole-recording metrics, bands, intervals
    assert sum(1 for t, _ in checker.tags if t == "table") >= 8
    assert "Bands, whole recording" in words and "Intervals (6)" in words


def test_overload_rows_are_flagged(batch_dir, tmp_path):
    text = open(report_mod.report_path(batch_dir, tmp_path / "r.html"), encoding="utf-8").read()
    summary = text.split("<h2>Summary</h2>", 1)[1].split("</table>", 1)[0]
    rows = re.findall(r"<tr( class=\"flag\")?><td class=\"t\">([^<]+)</td>", summary)
    assert ("", "pos_a.wav") in rows and (' class="flag"', "pos_b.wav") in rows
    # pos_b's interval table flags the interval holding t = 1.2 s (1.0-1.5 s) and only it
    section = text.split("<h2>pos_b.wav</h2>", 1)[1].split("<h3>Intervals", 1)[1]
    table = section.split("</table>", 1)[0]
    flagged = re.findall(r"<tr class=\"flag\"><td class=\"t\">[^<]*</td><td class=\"\">"
                         r"([\d.]+)</td>", table)
    assert flagged == ["1.0"]
    assert "possible overload" in section or "possible overload" in text


def test_levels_report_and_includes(tmp_path):
    site = _site(tmp_path / "mp4.wav", 4.0, 3)
    cal = tmp_path / "c.cal.json"
    runner = CliRunner()
    ok = runner.invoke(cli, ["calibrate", _tone(tmp_path / "t.wav"), "--level", "94",
                             "--save", str(cal)])
    assert ok.exit_code == 0, ok.output
    html_path = tmp_path / "mp4.html"
    res = runner.invoke(cli, ["levels", site, "--cal", str(cal), "--interval", "1s",
                              "--bands", "third", "--report", str(html_path)])
    assert res.exit_code == 0, res.output
    assert f"report: {html_path}" in res.output
    text = html_path.read_text(encoding="utf-8")
    assert_self_contained(text, parse(text))
    assert "Tone screen" in text and "1000 Hz" in text  # the 1 kHz tone over pink noise
    # a second run refuses to replace the report, and leaves it intact
    again = runner.invoke(cli, ["levels", site, "--cal", str(cal), "--report", str(html_path)])
    assert again.exit_code != 0 and "--force" in again.output
    assert html_path.read_text(encoding="utf-8") == text
    # report from the JSON result, with an exposure and an events output included
    js = tmp_path / "mp4.json"
    res = runner.invoke(cli, ["levels", site, "--cal", str(cal), "--interval", "1s", "--json"])
    js.write_text(res.output)
    exp = tmp_path / "exp.json"
    res = runner.invoke(cli, ["exposure", "--task", "grinding:91:2h:130", "--task",
                              "assembly:80:6h", "--json"])
    assert res.exit_code == 0, res.output
    exp.write_text(res.output)
    # LEX,8h = 10 lg[(2/8) 10^9.1 + (6/8) 10^8.0] = 86.1 dB(A) (ISO 9612 formula, by hand)
    lex = 10 * np.log10(2 / 8 * 10**9.1 + 6 / 8 * 10**8.0)
    out = tmp_path / "with.html"
    res = runner.invoke(cli, ["report", str(js), "-o", str(out), "--include", str(exp),
                              "--figures", "time,distribution"])
    assert res.exit_code == 0, res.output
    text = out.read_text(encoding="utf-8")
    assert f"{lex:.2f}" in text and "Exposure" in text
    kinds = re.findall(r'<figure class="fig-(\w+)"', text)
    assert kinds == ["time", "distribution"]
    assert not [n for n in os.listdir(tmp_path) if n.endswith((".tmp", ".part"))]


def test_report_errors_are_one_line(tmp_path, batch_dir):
    runner = CliRunner()
    junk = tmp_path / "junk.json"
    junk.write_text(json.dumps({"hello": 1}))
    cases = [
        (["report", str(junk), "-o", str(tmp_path / "a.html")], "not a level result"),
        (["report", batch_dir, "-o", str(tmp_path / "b.html"), "--include", str(junk)],
         "not an events, rating or exposure"),
        (["report", batch_dir, "-o", str(tmp_path / "c.html"), "--figures", "pie"],
         "unknown kind"),
        (["report", str(tmp_path), "-o", str(tmp_path / "d.html")], "no manifest.json"),
    ]
    for args, message in cases:
        res = runner.invoke(cli, args)
        assert res.exit_code != 0, args
        assert message in res.output, res.output
        assert "Traceback" not in res.output and len(res.output.strip().splitlines()) == 1
    assert not list(tmp_path.glob("*.html"))


def test_long_interval_tables_are_cut_with_a_note(batch_dir, tmp_path, monkeypatch):
    monkeypatch.setattr(report_mod, "MAX_INTERVAL_ROWS", 2)
    text = open(report_mod.report_path(batch_dir, tmp_path / "r.html", figure_kinds=()),
                encoding="utf-8").read()
    assert "First 2 of 6 intervals" in text and "First 2 of 4 intervals" in text
    assert "<figure" not in text


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(CHROMIUM is None, reason="no Chromium on this machine")
def test_headless_browser_renders_and_prints_a4(batch_dir, tmp_path):
    html_path = report_mod.report_path(batch_dir, tmp_path / "r.html")
    url = "file://" + os.path.abspath(html_path)
    base = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
            f"--user-data-dir={tmp_path / 'profile'}"]
    shot, pdf = tmp_path / "shot.png", tmp_path / "r.pdf"
    subprocess.run([*base, f"--screenshot={shot}", "--window-size=900,1400", url],
                   capture_output=True, timeout=120, check=False)
    subprocess.run([*base, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", url],
                   capture_output=True, timeout=120, check=False)
    png = shot.read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    pixels = np.frombuffer(png, dtype=np.uint8)
    assert pixels.size > 20000  # a rendered page with figures, not a blank one
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-"
    # A4 is 210 x 297 mm = 595.3 x 841.9 pt (ISO 216; 1 pt = 1/72 in)
    boxes = re.findall(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", data)
    assert boxes, "no page size in the PDF"
    width, height = (float(v) for v in boxes[0])
    assert width == pytest.approx(595.3, abs=1.0) and height == pytest.approx(841.9, abs=1.0)
    assert len(boxes) >= 3  # summary, two recordings (each from a new page), provenance
