"""Noise events and exclusions on the engine's time history."""

from __future__ import annotations

import math

import numpy as np
import pytest

from bandmeter.assess.events import EventCriteria, detect_events
from bandmeter.assess.exclusions import TimeRange, apply_exclusions, read_ranges
from bandmeter.engine import AnalysisSettings, analyse_blocks
from bandmeter.errors import SettingsError

FS = 16000
L_FS = 100.0  # full-scale sine = 100 dB


def _amplitude(level_db):
    return 10 ** ((level_db - L_FS) / 20)  # peak amplitude of a sine of that level


def scene(duration_s=40.0, events=((10.0, 2.0, 80.0), (25.0, 3.0, 75.0)), background=50.0):
    """A 1 kHz sine at ``background`` dB with louder 1 kHz stretches (start, length, level).

    At 1 kHz the A weighting is 0 dB (IEC 61672-1 Table 3), so LA = the sine's level."""
    t = np.arange(int(duration_s * FS)) / FS
    amp = np.full(t.size, _amplitude(background))
    for start, length, level in events:
        amp[(t >= start) & (t < start + length)] = _amplitude(level)
    return amp * np.sin(2 * np.pi * 1000.0 * t)


def history_of(x, step=0.1):
    engine, _, _ = analyse_blocks([x], FS, AnalysisSettings(history_s=step), L_FS)
    return engine.history.result(x.size, L_FS, None, "dB")


def expected_event(start, length, level, background, threshold_end):
    """Analytic event: F decays at 10 lg(e) / 0.125 s = 34.74 dB/s after the sound stops
    (IEC 61672-1 F time constant), so the detector stays above ``threshold_end`` for
    (level - threshold_end) / 34.74 s longer; LAE adds the background energy of that tail."""
    decay = (level - threshold_end) / (10 * math.log10(math.e) / 0.125)
    duration = length + decay
    lae = 10 * math.log10(length * 10 ** (level / 10) + decay * 10 ** (background / 10))
    return duration, lae


def test_events_with_known_exposure_and_duration():
    x = scene()
    result = detect_events(history_of(x), EventCriteria(threshold_db=65.0))
    assert len(result.events) == 2
    for event, (start, length, level) in zip(result.events, [(10.0, 2.0, 80.0),
                                                             (25.0, 3.0, 75.0)], strict=True):
        duration, lae = expected_event(start, length, level, 50.0, 65.0 - 3.0)
        assert event.start_s == pytest.approx(start, abs=0.1)  # one step
        assert event.duration_s == pytest.approx(duration, abs=0.1)
        assert event.LAE == pytest.approx(lae, abs=0.2)
        assert event.LAFmax == pytest.approx(level, abs=0.1)
        # LAeq = LAE - 10 lg(T / 1 s) (IEC 61672-1 definitions)
        assert event.LAeq == pytest.approx(event.LAE - 10 * math.log10(event.duration_s),
                                           abs=1e-9)


def test_default_threshold_follows_the_background():
    x = scene()
    result = detect_events(history_of(x))  # LAF90 of 5 min blocks (here: all) + 10 dB = 60
    assert len(result.events) == 2
    assert result.events[0].threshold_db == pytest.approx(60.0, abs=0.1)
    assert "LAF90" in result.rule


def test_merge_gap_and_minimum_duration():
    x = scene(events=((10.0, 1.5, 80.0), (12.0, 1.5, 80.0), (30.0, 0.3, 80.0)))
    h = history_of(x)
    # the two sounds 0.5 s apart (plus F decay) merge; the 0.3 s blip is dropped at 1.5 s
    found = detect_events(h, EventCriteria(threshold_db=65.0, merge_gap_s=1.0,
                                           min_duration_s=1.5)).events
    assert len(found) == 1 and found[0].start_s == pytest.approx(10.0, abs=0.1)
    apart = detect_events(h, EventCriteria(threshold_db=78.0, merge_gap_s=0.0,
                                           min_duration_s=0.0, hysteresis_db=0.0)).events
    assert len(apart) == 3


def test_exclusions_change_leq_by_the_computed_amount():
    x = scene(events=((10.0, 2.0, 80.0),))
    h = history_of(x)
    out = apply_exclusions(h, [TimeRange(9.0, 14.0, "lorry")])
    # energy arithmetic (definition of Leq): residual = background only over 35 s
    assert out["excluded_s"] == pytest.approx(5.0, abs=1e-9)
    assert out["residual"]["duration_s"] == pytest.approx(35.0, abs=1e-9)
    assert out["residual"]["LAeq"] == pytest.approx(50.0, abs=0.02)
    e_total = 2.0 * 1e8 + 38.0 * 1e5
    assert out["ambient"]["LAeq"] == pytest.approx(10 * math.log10(e_total / 40.0), abs=0.02)
    e_excluded = 2.0 * 1e8 + 3.0 * 1e5
    assert out["excluded"]["LAeq"] == pytest.approx(10 * math.log10(e_excluded / 5.0),
                                                    abs=0.02)
    assert out["residual"]["LAF90"] == pytest.approx(50.0, abs=0.05)


def test_range_table(tmp_path):
    from datetime import datetime, timedelta, timezone

    origin = datetime(2026, 5, 14, 22, 0, tzinfo=timezone(timedelta(hours=1)))
    table = tmp_path / "ranges.csv"
    table.write_text("start,end,label\n10,12.5,operator speech\n"
                     "2026-05-14T22:01:00+01:00,2026-05-14T22:01:30+01:00,rain\n")
    ranges = read_ranges(str(table), origin)
    assert ranges[1].start_s == 60.0 and ranges[1].end_s == 90.0 and ranges[1].label == "rain"
    with pytest.raises(SettingsError, match="needs the recording's start"):
        read_ranges(str(table), None)
    table.write_text("start,end\n5,4\n")
    with pytest.raises(SettingsError, match="end must be after start"):
        read_ranges(str(table))


def test_events_cli(tmp_path):
    import json

    import soundfile as sf
    from click.testing import CliRunner

    from bandmeter.cli import cli

    path = tmp_path / "q9_evening.wav"
    sf.write(path, scene(), FS, subtype="FLOAT")
    ranges = tmp_path / "speech.csv"
    ranges.write_text("start,end,label\n30,35,operator speech\n")
    result = CliRunner().invoke(cli, ["events", str(path), "--full-scale-level", str(L_FS),
                                      "--threshold", "65", "--exclude", str(ranges),
                                      "--start", "2026-05-14T21:59:50+01:00", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["count"] == 2
    first = data["events"][0]
    assert {"start_s", "end_s", "duration_s", "LAFmax", "LAE", "LAeq"} <= set(first)
    assert first["start_time"] == "2026-05-14T22:00:00+01:00"  # 21:59:50 + 10 s
    assert data["exclusions"]["excluded_s"] == pytest.approx(5.0)
    assert data["without_events"]["residual"]["LAeq"] == pytest.approx(50.0, abs=0.05)
    out = tmp_path / "events.csv"
    table = CliRunner().invoke(cli, ["events", str(path), "--full-scale-level", str(L_FS),
                                     "-o", str(out)])
    assert table.exit_code == 0 and "LAF90 of the surrounding" in table.stdout
    assert out.read_text().count("\n") == 1 + 2
    bad = CliRunner().invoke(cli, ["events", str(path)])
    assert bad.exit_code == 1 and "no calibration" in bad.stderr


def test_band_levels_with_and_without_a_range():
    # a 1 kHz background and a 250 Hz stretch: excluding the stretch removes the 250 Hz
    # band's energy and leaves the 1 kHz band's (energy arithmetic, definition of Leq)
    t = np.arange(int(20 * FS)) / FS
    x = _amplitude(60.0) * np.sin(2 * np.pi * 1000.0 * t)
    x += np.where((t >= 5) & (t < 10), _amplitude(70.0), 0.0) * np.sin(2 * np.pi * 250.0 * t)
    engine, _, _ = analyse_blocks([x], FS, AnalysisSettings(history_s=0.1, bands=1), L_FS)
    h = engine.history.result(x.size, L_FS, None, "dB")
    from bandmeter.results import BandInfo

    h.bands = [BandInfo(b.nominal_hz, b.exact_hz, b.label) for b in engine.bank.bands]
    out = apply_exclusions(h, [TimeRange(4.0, 12.0)])
    ambient = {b["label"]: b["LZeq"] for b in out["ambient"]["bands"]}
    residual = {b["label"]: b["LZeq"] for b in out["residual"]["bands"]}
    assert ambient["1k"] == pytest.approx(60.0, abs=0.05)
    assert residual["1k"] == pytest.approx(60.0, abs=0.05)
    assert ambient["250"] == pytest.approx(70.0 + 10 * math.log10(5 / 20), abs=0.1)
    assert residual["250"] < 30.0  # only the filter skirts of the 1 kHz tone remain
