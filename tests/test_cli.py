"""The command line, through click's CliRunner: exit codes, messages, effects."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

from bandmeter.calibration import Calibration
from bandmeter.cli import cli
from bandmeter.signals import fade, sine

FS = 48000


def run(*args: str):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture()
def tone_file(tmp_path):
    # a 94 dB calibrator recorded at -26 dBFS: full-scale level 120.00 dB (bandmeter's
    # convention: full-scale sine = full-scale level; 94 - (-26) = 120)
    x = sine(FS, 1000.0, 6.0, 10 ** (-26 / 20)) * fade(6 * FS, FS, 0.5, 0.5)
    path = tmp_path / "cal.wav"
    sf.write(path, x, FS, subtype="PCM_24")
    return path


@pytest.fixture()
def site_file(tmp_path):
    # 3 s of a 1 kHz sine at -40 dBFS (80 dB with the 120 dB chain above)
    path = tmp_path / "site.wav"
    sf.write(path, sine(FS, 1000.0, 3.0, 10 ** (-40 / 20)), FS, subtype="PCM_24")
    return path


def test_every_command_has_help_with_an_example():
    for name, command in cli.commands.items():
        result = run(name, "--help")
        assert result.exit_code == 0, name
        assert "Example" in result.output, name
        assert command.help, name


def test_calibrate_json_and_save(tmp_path, tone_file):
    out = tmp_path / "day1.cal.json"
    result = run("calibrate", tone_file, "--level", "94", "--json", "--save", out)
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["full_scale_level_db"] == pytest.approx(120.0, abs=0.02)
    assert data["frequency_hz"] == pytest.approx(1000.0, abs=0.1)
    assert "stability_db" in data
    assert Calibration.load(out).full_scale_level_db == pytest.approx(120.0, abs=0.02)
    again = run("calibrate", tone_file, "--level", "94", "--save", out)
    assert again.exit_code == 1
    assert "already exists; use --force" in again.stderr
    assert run("calibrate", tone_file, "--level", "94", "--save", out, "--force").exit_code == 0


def test_calibrate_drift(tmp_path, tone_file):
    x, _ = sf.read(tone_file)
    post = tmp_path / "post.wav"
    sf.write(post, x * 10 ** (0.7 / 20), FS, subtype="PCM_24")  # 0.7 dB more sensitive
    result = run("calibrate", tone_file, "--level", "94", "--after", post, "--json")
    assert result.exit_code == 0
    assert json.loads(result.stdout)["drift_db"] == pytest.approx(0.7, abs=0.02)
    # more than 0.5 dB drift is warned about (common practice for field surveys)
    assert "warning:" in result.stderr and "drift" in result.stderr


def _written(path, data: bytes):
    path.write_bytes(data)
    return path


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda d: d / "missing.wav", "no such file"),
        (lambda d: d, "is a folder"),
        (lambda d: _written(d / "empty.wav", b""), "file is empty"),
        (lambda d: _written(d / "notes.wav", b"not audio\n" * 50), "not a readable audio file"),
    ],
)
def test_bad_input_is_one_line_and_nonzero(tmp_path, make, message):
    path = make(tmp_path)
    for args in (("info", path), ("levels", path, "--full-scale-level", "120"),
                 ("calibrate", path, "--level", "94")):
        result = run(*args)
        assert result.exit_code == 1, args
        assert message in result.stderr
        assert "Traceback" not in result.output + result.stderr
        assert len(result.stderr.strip().splitlines()) == 1


def test_zero_length_and_unsupported_and_channel(tmp_path, site_file):
    zero = tmp_path / "zero.wav"
    sf.write(zero, np.zeros(0), FS)
    lossy = tmp_path / "site.ogg"
    sf.write(lossy, np.zeros(FS), FS)
    cases = [
        (("levels", zero, "--full-scale-level", "120"), "contains no audio samples"),
        (("levels", lossy, "--full-scale-level", "120"), "unsupported container 'OGG'"),
        (("levels", site_file, "--full-scale-level", "120", "--channel", "2"),
         "channel 2 out of range"),
    ]
    for args, message in cases:
        result = run(*args)
        assert result.exit_code == 1
        assert message in result.stderr


def test_calibration_without_tone_fails_cleanly(tmp_path):
    path = tmp_path / "wind.wav"
    sf.write(path, np.random.default_rng(0).standard_normal(4 * FS) * 0.01, FS)
    result = run("calibrate", path, "--level", "94")
    assert result.exit_code == 1
    assert "no calibrator tone" in result.stderr
    assert "Traceback" not in result.stderr


def test_debug_shows_the_traceback(tmp_path):
    result = run("--debug", "info", tmp_path / "missing.wav")
    assert result.exit_code != 0
    assert result.exception is not None  # re-raised for the traceback


def test_levels_refuses_without_calibration(site_file):
    result = run("levels", site_file)
    assert result.exit_code == 1
    assert "no calibration given" in result.stderr


def test_levels_json(site_file, tone_file):
    result = run("levels", site_file, "--cal-tone", tone_file, "--cal-level", "94",
                 "--interval", "1s", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    for key in ("file", "sample_rate", "duration_s", "calibration", "warnings", "overall",
                "intervals"):
        assert key in data
    # -40 dBFS with a 120 dB chain -> 80.0 dB (full-scale-level convention)
    assert data["overall"]["LAeq"] == pytest.approx(80.0, abs=0.03)
    assert len(data["intervals"]) == 3
    assert {"start_s", "duration_s", "LAeq", "LAF90", "LCpeak"} <= set(data["intervals"][0])


def test_levels_dbfs_keys(site_file):
    result = run("levels", site_file, "--dbfs", "--json")
    assert result.exit_code == 0
    overall = json.loads(result.stdout)["overall"]
    assert "LAeq" not in overall
    assert overall["LAeq_dBFS"] == pytest.approx(-40.0, abs=0.01)  # full-scale sine = 0 dBFS


def test_levels_csv_atomic_and_no_overwrite(tmp_path, site_file):
    out = tmp_path / "levels.csv"
    result = run("levels", site_file, "--full-scale-level", "120", "--interval", "1s",
                 "-o", out)
    assert result.exit_code == 0, result.stderr
    lines = out.read_text().splitlines()
    header = lines[0].split(",")
    assert {"interval", "start_s", "LAeq", "LAFmax", "LAF90"} <= set(header)
    assert len(lines) == 1 + 1 + 3  # header, whole file, three intervals
    first = dict(zip(header, lines[1].split(","), strict=True))
    assert first["interval"] == "all"
    assert float(first["LAeq"]) == pytest.approx(80.0, abs=0.03)
    before = out.read_text()
    again = run("levels", site_file, "--full-scale-level", "120", "-o", out)
    assert again.exit_code == 1
    assert "already exists" in again.stderr
    assert out.read_text() == before


def test_levels_terminal_table(site_file):
    result = run("levels", site_file, "--full-scale-level", "120", "--interval", "1s")
    assert result.exit_code == 0
    assert "Whole recording" in result.stdout and "Intervals (3)" in result.stdout
    assert "LAF90" in result.stdout


def test_bad_options(site_file):
    cases = [
        (("--interval", "1y"), "cannot read duration"),
        (("--percentiles", "10,abc"), "percentiles must be numbers"),
        (("--percentiles", "100"), "0 < N < 100"),
        (("--start", "2026-05-14T22:00:00"), "needs a time zone"),
    ]
    for extra, message in cases:
        result = run("levels", site_file, "--full-scale-level", "120", *extra)
        assert result.exit_code == 1, extra
        assert message in result.stderr, (extra, result.stderr)
    both = run("levels", site_file, "--full-scale-level", "120", "--cal", "x.json")
    assert both.exit_code == 1 and "give one calibration source" in both.stderr


def test_clock_times_on_intervals(site_file):
    result = run("levels", site_file, "--full-scale-level", "120", "--interval", "1s",
                 "--start", "2026-05-14T23:59:59+01:00", "--json")
    intervals = json.loads(result.stdout)["intervals"]
    assert [iv["start_time"] for iv in intervals] == [
        "2026-05-14T23:59:59+01:00", "2026-05-15T00:00:00+01:00", "2026-05-15T00:00:01+01:00"]


def test_demo_recovers_its_known_scale(tmp_path):
    out = tmp_path / "demo"
    result = run("demo", "--out", out)
    assert result.exit_code == 0, result.stderr
    cal = Calibration.load(out / "mp2.cal.json")
    # the demo synthesises a 120.0 dB chain and a +0.15 dB drift (demo.py constants)
    assert cal.full_scale_level_db == pytest.approx(120.0, abs=0.02)
    assert cal.drift_db == pytest.approx(0.15, abs=0.02)
    assert "Results are indicative" in result.stdout
    # the chiller hum is synthesised at 55.0 dB (demo.CHILLER_DB); in the first 10 s its
    # 0.13 Hz wobble adds 0.07 dB (analytic mean of (1 + 0.05 sin)^2) and the traffic
    # noise in the 100 Hz band (about 37 dB) under 0.1 dB, so the band reads 55.0-55.3 dB
    lines = (out / "mp2_night_bands.csv").read_text().splitlines()
    header = lines[0].split(",")
    rows = [dict(zip(header, line.split(","), strict=True)) for line in lines[1:]]
    hum = next(r for r in rows if r["interval"] == "0" and r["band"] == "100")
    assert 55.0 <= float(hum["LZeq"]) <= 55.3
    assert "loudest band: 100 Hz" in result.stdout
    # the events are the lorry pass-by (35-60 s) and the door bang at 90 s after the start
    # 23:59:45 (demo.py scenario): the bang starts at 00:01:15 (calendar arithmetic)
    assert "00:01:15" in result.stdout.split("4. Noise events")[1].split("5. ")[0]
    assert "Lden" in result.stdout and "LEX,8h" in result.stdout
    assert "Indicative only" in result.stdout
    report = os.path.join(out, "mp2_report.html")
    assert f"7. Report (figures, tables, assessments, provenance): {report}" in result.stdout
    text = open(report, encoding="utf-8").read()
    assert text.startswith("<!DOCTYPE html>") and text.count('<figure class="fig-') == 5
    assert "night events" in text and "LEX,8h" in text and "Results are indicative" in text
    assert run("demo", "--out", out).exit_code == 1  # no overwrite without --force
    assert run("demo", "--out", out, "--force").exit_code == 0
    assert math.isfinite(cal.stability_db)


def test_check_calibrator_pass_and_fail(tmp_path, tone_file):
    cal = tmp_path / "chain.cal.json"
    assert run("calibrate", tone_file, "--level", "94", "--save", cal).exit_code == 0
    x, _ = sf.read(tone_file)
    good, hot = tmp_path / "good.wav", tmp_path / "hot.wav"
    sf.write(good, x * 10 ** (0.1 / 20), FS, subtype="PCM_24")  # 94.1 dB
    sf.write(hot, x * 10 ** (0.6 / 20), FS, subtype="PCM_24")  # 94.6 dB
    # IEC 60942:2017 class 1 level acceptance limit +-0.25 dB (from memory,
    # REFERENCE_VALUES.md 6): 0.1 dB passes, 0.6 dB fails (exit status 1)
    ok = run("check-calibrator", good, "--cal", cal, "--nominal", "94")
    assert ok.exit_code == 0, ok.stderr
    assert ok.stdout.startswith("PASS")
    bad = run("check-calibrator", hot, "--cal", cal, "--nominal", "94")
    assert bad.exit_code == 1
    assert bad.stdout.startswith("FAIL")


@pytest.fixture()
def two_tone_file(tmp_path):
    # 4 s of two sines at -40 dBFS each (80 dB with a 120 dB full-scale level): one at the
    # exact 1 kHz mid-band, one at the exact 125 Hz mid-band frequency 1000 * 10^(-0.9)
    # (IEC 61260-1 base-10 formula, REFERENCE_VALUES.md)
    f125 = 1000.0 * 10 ** -0.9
    x = sine(FS, 1000.0, 4.0, 10 ** (-40 / 20)) + sine(FS, f125, 4.0, 10 ** (-40 / 20))
    path = tmp_path / "two_tone.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    return path


def _band(bands, label):
    return next(b for b in bands if b["label"] == label)


def test_levels_bands_json(two_tone_file):
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "third",
                 "--interval", "2s", "--band-max", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    bands = data["overall"]["bands"]
    # default one-third-octave range 20 Hz - 20 kHz: 31 bands at 48 kHz (IEC 61260-1
    # nominal series 20, 25, 31.5 ... 20k)
    assert [b["nominal_hz"] for b in bands][:4] == [20.0, 25.0, 31.5, 40.0]
    assert len(bands) == 31 and bands[-1]["nominal_hz"] == 20000.0
    for b in bands:
        assert {"nominal_hz", "exact_hz", "LZeq", "LZFmax"} <= set(b)
    # a sine at mid-band passes with 0 dB relative attenuation (class 1 limit +-0.4 dB
    # at mid-band, IEC 61260-1 Table 1; the bank is far better, see test_filterbank)
    assert _band(bands, "1k")["LZeq"] == pytest.approx(80.0, abs=0.05)
    assert _band(bands, "125")["LZeq"] == pytest.approx(80.0, abs=0.05)
    # steady sine: the F-weighted maximum equals the Leq (physics: 1 kHz ripple of an
    # exponential average with 125 ms is < 0.01 dB)
    assert _band(bands, "1k")["LZFmax"] == pytest.approx(80.0, abs=0.05)
    # a band two one-third octaves away sees only the filter skirts (class 1 minimum
    # attenuation at one octave band away is 17.5 dB; two thirds away is well below)
    assert _band(bands, "630")["LZeq"] < 60.0
    assert len(data["intervals"]) == 2
    for iv in data["intervals"]:
        assert _band(iv["bands"], "1k")["LZeq"] == pytest.approx(80.0, abs=0.05)


def test_levels_band_weighting_keys_and_values(two_tone_file):
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "third",
                 "--band-weighting", "A", "--json")
    assert result.exit_code == 0, result.stderr
    bands = json.loads(result.stdout)["overall"]["bands"]
    assert "LAeq" in bands[0] and "LZeq" not in bands[0]
    # IEC 61672-1 Table 3: A weighting 0.0 dB at 1 kHz, -16.1 dB at 125 Hz (table values
    # are rounded to 0.1 dB, hence 0.06 dB)
    assert _band(bands, "1k")["LAeq"] == pytest.approx(80.0, abs=0.05)
    assert _band(bands, "125")["LAeq"] == pytest.approx(80.0 - 16.1, abs=0.06)


def test_levels_band_csv_wide_and_tidy(tmp_path, two_tone_file):
    wide = tmp_path / "wide.csv"
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "octave",
                 "--interval", "2s", "-o", wide)
    assert result.exit_code == 0, result.stderr
    lines = wide.read_text().splitlines()
    header = lines[0].split(",")
    # octave default 31.5 Hz - 16 kHz: ten bands, one column each
    labels = ["31.5", "63", "125", "250", "500", "1k", "2k", "4k", "8k", "16k"]
    assert [h for h in header if h.startswith("LZeq_")] == [f"LZeq_{b}" for b in labels]
    assert len(lines) == 1 + 1 + 2
    row = dict(zip(header, lines[1].split(","), strict=True))
    assert float(row["LZeq_1k"]) == pytest.approx(80.0, abs=0.05)

    tidy = tmp_path / "tidy.csv"
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "octave",
                 "--interval", "2s", "--tidy", "-o", tidy)
    assert result.exit_code == 0, result.stderr
    lines = tidy.read_text().splitlines()
    header = lines[0].split(",")
    assert {"interval", "band", "nominal_hz", "exact_hz", "LZeq"} <= set(header)
    assert len(lines) == 1 + 3 * len(labels)  # (whole file + two intervals) x bands
    rows = [dict(zip(header, line.split(","), strict=True)) for line in lines[1:]]
    assert [r["band"] for r in rows[:len(labels)]] == labels
    assert {r["interval"] for r in rows} == {"all", "0", "1"}


def test_levels_band_terminal_table_and_dbfs(two_tone_file):
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "octave")
    assert result.exit_code == 0, result.stderr
    assert "Bands, whole recording" in result.stdout
    assert "16k" in result.stdout and "LZeq" in result.stdout
    raw = run("levels", two_tone_file, "--dbfs", "--bands", "octave", "--json")
    assert raw.exit_code == 0, raw.stderr
    band = _band(json.loads(raw.stdout)["overall"]["bands"], "1k")
    assert "LZeq" not in band
    assert band["LZeq_dBFS"] == pytest.approx(-40.0, abs=0.05)


def test_band_option_errors(tmp_path, two_tone_file):
    cases = [
        (("--bands", "5"), "--bands must be"),
        (("--fmin", "50"), "need --bands"),
        (("--band-max",), "need --bands"),
        (("--bands", "third", "--tidy"), "--tidy needs"),
        (("--bands", "third", "--fmin", "2000", "--fmax", "1000"), "fmin"),
    ]
    for extra, message in cases:
        result = run("levels", two_tone_file, "--full-scale-level", "120", *extra)
        assert result.exit_code == 1, extra
        assert message in result.stderr, (extra, result.stderr)
        assert "Traceback" not in result.output


def test_levels_third_octaves_carry_the_tone_screen(two_tone_file):
    # pure tones at 125 Hz and 1 kHz: their bands exceed both neighbours by far more than
    # the 15 dB (25-125 Hz) and 5 dB (500 Hz-10 kHz) differences (ISO 1996-2 Annex K, from
    # memory), since the neighbouring bands see only the filter skirts
    result = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "third",
                 "--json")
    tones = json.loads(result.stdout)["tonality"]["overall"]
    assert [t["nominal_hz"] for t in tones] == [125.0, 1000.0]
    text = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "third")
    assert "Tone screen" in text.stdout and "125 Hz" in text.stdout
    octave = run("levels", two_tone_file, "--full-scale-level", "120", "--bands", "octave",
                 "--json")
    assert "tonality" not in json.loads(octave.stdout)
