"""One-third-octave tone screen (ISO 1996-2:2017 Annex K / BS 4142:2014 Annex C).

The level differences 15 / 8 / 5 dB are quoted in REFERENCE_VALUES.md 8 "from memory,
unconfirmed"; the tests check the module applies them as stated, not that they are right.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bandmeter.assess.tonality import (
    DEFAULT_CRITERIA,
    required_difference,
    screen_result,
    screen_third_octaves,
)
from bandmeter.engine import AnalysisSettings, analyse_array
from bandmeter.errors import SettingsError
from bandmeter.results import BandLevels, LevelResult
from bandmeter.signals import pink_noise, sine

FS = 48000
THIRDS = (20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800,
          1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000,
          20000)


def flat(level: float = 50.0, **raised: float) -> list[tuple[float, float]]:
    """Flat one-third-octave spectrum; ``raised`` maps "f<Hz>" to a level."""
    out = []
    for f in THIRDS:
        out.append((float(f), raised.get(f"f{f:g}".replace(".", "_"), level)))
    return out


def _result(x: np.ndarray, bands: int | None = 3) -> LevelResult:
    settings = AnalysisSettings(interval_s=1.0, bands=bands)
    overall, intervals = analyse_array(x, FS, settings, 100.0)
    return LevelResult(file="synthetic", channel=1, sample_rate=FS, frames=len(x),
                       unit="dB re 20 uPa", overall=overall, intervals=intervals,
                       settings=settings.to_dict(), calibration=None, recording={},
                       provenance={})


@pytest.fixture(scope="module")
def pink() -> np.ndarray:
    return 0.02 * pink_noise(3 * FS, FS, seed=1)


def test_tone_in_pink_noise_is_flagged(pink):
    # pink noise at 0.02 RMS gives ~52 dB per band; a 0.1-amplitude 100 Hz sine gives
    # ~80 dB in the 100 Hz band, > 15 dB above both neighbours despite filter leakage.
    screening = screen_result(_result(pink + sine(FS, 100.0, 3.0, 0.1)))
    assert [t.nominal_hz for t in screening.overall] == [100.0]
    tone = screening.overall[0]
    assert tone.required_db == 15.0
    assert tone.margin_db == pytest.approx(min(tone.lower_difference_db,
                                               tone.upper_difference_db) - 15.0)
    assert tone.margin_db > 3.0
    # bandmeter's scale: a full-scale sine reads the full-scale level, so amplitude 0.1 reads
    # 100 + 20 lg 0.1 = 80 dB (plus the ~52 dB of noise in the band: +0.03 dB)
    assert tone.level_db == pytest.approx(100.0 + 20 * math.log10(0.1), abs=0.3)
    assert screening.assessed_intervals == 3
    assert screening.band_counts() == {100.0: 3}


def test_pink_noise_alone_has_no_tone(pink):
    # physics: pink noise has equal energy in every one-third-octave band, so no band can
    # stand out from its neighbours by 5 dB or more (only random scatter, ~1 dB here).
    screening = screen_result(_result(pink))
    assert screening.overall == []
    assert screening.intervals == []
    assert screening.assessed_intervals == 3


def test_2k_tone_6_db_flagged_4_db_not():
    tones = screen_third_octaves(flat(f2000=56.0))
    assert len(tones) == 1
    t = tones[0]
    assert (t.nominal_hz, t.level_db, t.required_db) == (2000.0, 56.0, 5.0)
    assert (t.lower_difference_db, t.upper_difference_db) == (6.0, 6.0)
    assert t.margin_db == pytest.approx(1.0)
    assert screen_third_octaves(flat(f2000=54.0)) == []


def test_both_neighbours_must_be_exceeded():
    bands = dict(flat(f2000=56.0))
    bands[2500.0] = 53.0  # only 3 dB above the upper neighbour
    assert screen_third_octaves(list(bands.items())) == []


def test_ranges_and_their_differences():
    assert required_difference(25.0) == 15.0
    assert required_difference(125.0) == 15.0
    assert required_difference(160.0) == 8.0
    assert required_difference(400.0) == 8.0
    assert required_difference(500.0) == 5.0
    assert required_difference(10000.0) == 5.0
    assert required_difference(20.0) is None
    assert required_difference(12500.0) is None
    assert screen_third_octaves(flat(f125=64.0)) == []  # 14 < 15 dB
    assert [t.nominal_hz for t in screen_third_octaves(flat(f125=65.0))] == [125.0]
    assert [t.nominal_hz for t in screen_third_octaves(flat(f160=58.0))] == [160.0]
    assert screen_third_octaves(flat(f400=57.0)) == []  # 7 < 8 dB
    assert screen_third_octaves(flat(f12500=80.0)) == []  # outside every range
    assert DEFAULT_CRITERIA[0] == (25.0, 125.0, 15.0)


def test_edges_nan_and_gaps_are_not_assessed():
    # 25 Hz is in range but is the lowest band given: no lower neighbour
    bands = [(25.0, 90.0), (31.5, 50.0), (40.0, 50.0)]
    assert screen_third_octaves(bands) == []
    nan_neighbour = dict(flat(f1000=70.0))
    nan_neighbour[800.0] = math.nan
    assert screen_third_octaves(list(nan_neighbour.items())) == []
    gap = [(f, lv) for f, lv in flat(f1000=70.0) if f != 1250.0]  # 1250 Hz missing
    assert screen_third_octaves(gap) == []
    nan_band = dict(flat())
    nan_band[1000.0] = math.nan
    assert screen_third_octaves(list(nan_band.items())) == []


def test_band_levels_input_any_order_and_key():
    spectrum = flat(f630=60.0)[::-1]
    bands = [BandLevels(f, f * 1.001, f"{f:g}", {"LZeq": lv, "LAeq": 0.0})
             for f, lv in spectrum]
    assert [t.nominal_hz for t in screen_third_octaves(bands)] == [630.0]
    assert screen_third_octaves(bands, key="LAeq") == []
    with pytest.raises(SettingsError, match="no 'LCeq' level"):
        screen_third_octaves(bands, key="LCeq")


def test_only_third_octave_bands_are_accepted():
    octaves = [(f, 50.0) for f in (63, 125, 250, 500, 1000, 2000, 4000)]
    with pytest.raises(SettingsError, match="one-third-octave"):
        screen_third_octaves(octaves)
    sixths = [(1000.0 * 2 ** (k / 6), 50.0) for k in range(6)]
    with pytest.raises(SettingsError, match="one-third-octave"):
        screen_third_octaves(sixths)
    with pytest.raises(SettingsError, match="distinct"):
        screen_third_octaves([(1000.0, 1.0), (1000.0, 2.0)])
    with pytest.raises(SettingsError):
        screen_third_octaves([(1000.0,)])


def test_screen_result_needs_third_octave_bands():
    x = 0.01 * sine(FS, 1000.0, 0.5)
    with pytest.raises(SettingsError, match="no band analysis"):
        screen_result(_result(x, bands=None))
    with pytest.raises(SettingsError, match="1/1-octave"):
        screen_result(_result(x, bands=1))
