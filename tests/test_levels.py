"""Energy arithmetic and percentile histograms (bandmeter.levels)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bandmeter.errors import SettingsError
from bandmeter.levels import (
    P0_PA,
    LevelHistogram,
    average_levels,
    combine_levels,
    exceeded_levels,
    leq_from_sel,
    pressure_from_spl,
    sel_from_leq,
    spl_from_pressure,
    subtract_level,
)


def test_reference_pressure():
    assert P0_PA == 20e-6  # ISO 1683 / IEC 61672-1: p0 = 20 uPa in air


def test_spl_of_one_pascal():
    # 1 Pa rms = 93.98 dB re 20 uPa (physics; REFERENCE_VALUES.md 6)
    assert spl_from_pressure(1.0) == pytest.approx(93.979, abs=0.001)
    # 94 dB = 1.0024 Pa rms (computed 20e-6 * 10^(94/20))
    assert pressure_from_spl(94.0) == pytest.approx(1.0024, abs=0.0001)
    # 0.036 Pa rms gives about 65 dB (common practice, no source; computed 65.10 dB)
    assert spl_from_pressure(0.036) == pytest.approx(65.1, abs=0.05)


def test_combine_levels_worked_example():
    # 80 + 80 + 90 dB = 10 lg(2e8 + 1e9) = 90.79 dB (energy sum, physics); 91 dB by the
    # integer rule of thumb: 80 + 80 -> 83, then 7 dB apart -> add 1 -> 91 (common practice,
    # no source)
    total = combine_levels([80, 80, 90])
    assert total == pytest.approx(10 * math.log10(2 * 10**8 + 10**9), abs=1e-12)
    assert total == pytest.approx(90.79, abs=0.005)
    assert round(total) == 91


def test_combine_equal_levels_adds_3_01_db():
    # two equal incoherent sources: +10 lg 2 = 3.01 dB (physics)
    assert combine_levels([60.0, 60.0]) == pytest.approx(63.0103, abs=1e-4)


def test_combine_with_silence():
    assert combine_levels([-math.inf, 70.0]) == pytest.approx(70.0)
    assert combine_levels([-math.inf]) == -math.inf


def test_average_levels_time_weighted():
    # 4 h at 90 dB + 4 h at silence -> 86.99 dB over 8 h (ISO 9612 LEX,8h example,
    # REFERENCE_VALUES.md 7.2: 4 h at 90 dB(A) -> 86.99 dB(A))
    assert average_levels([90.0, -math.inf], [4.0, 4.0]) == pytest.approx(86.99, abs=0.005)
    # 2 h at 95 + 6 h at 80 -> 89.37 (REFERENCE_VALUES.md 7.2, ISO 9612 formula, computed)
    assert average_levels([95.0, 80.0], [2.0, 6.0]) == pytest.approx(89.37, abs=0.005)


def test_average_is_not_arithmetic_mean():
    # energy mean of 60 and 80 dB is 77.04 dB, not 70 (physics)
    assert average_levels([60.0, 80.0]) == pytest.approx(10 * math.log10((1e6 + 1e8) / 2))


def test_subtract_level():
    # 63.01 dB total with 60 dB background leaves 60 dB (physics: energy difference)
    assert subtract_level(combine_levels([60, 60]), 60.0) == pytest.approx(60.0, abs=1e-9)
    with pytest.raises(SettingsError, match="must be lower"):
        subtract_level(60.0, 60.0)


def test_sel_worked_examples():
    # REFERENCE_VALUES.md 4 (IEC 61672-1 definition, computed):
    # 60 s at 80.0 dB -> LE 97.78 dB; LAE 100 dB over 1 h -> LAeq,1h 64.44 dB
    assert sel_from_leq(80.0, 60.0) == pytest.approx(97.78, abs=0.005)
    assert leq_from_sel(100.0, 3600.0) == pytest.approx(64.44, abs=0.005)
    # LAE of a 1 s, 94 dB tone = 94.0 dB; of 10 s = 104.0 dB (REFERENCE_VALUES.md 10)
    assert sel_from_leq(94.0, 1.0) == pytest.approx(94.0)
    assert sel_from_leq(94.0, 10.0) == pytest.approx(104.0)


def test_bad_levels():
    with pytest.raises(SettingsError):
        combine_levels([])
    with pytest.raises(SettingsError):
        combine_levels([float("nan")])
    with pytest.raises(SettingsError):
        average_levels([60, 70], [1.0])


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-50, 150), min_size=1, max_size=12), st.randoms())
def test_combine_is_commutative_and_associative(levels, rnd):
    shuffled = list(levels)
    rnd.shuffle(shuffled)
    assert combine_levels(shuffled) == pytest.approx(combine_levels(levels), abs=1e-9)
    k = len(levels) // 2
    if 0 < k < len(levels):
        nested = combine_levels([combine_levels(levels[:k]), combine_levels(levels[k:])])
        assert nested == pytest.approx(combine_levels(levels), abs=1e-9)


def test_histogram_uniform_distribution():
    # levels uniform in [40, 60) dB: LN = 60 - 0.2 N (definition of LN, ISO 1996-1)
    rng = np.random.default_rng(1)
    levels = rng.uniform(40.0, 60.0, 400_000)
    hist = LevelHistogram(0.01, -50, 150)
    hist.add_levels(levels)
    n = np.array([1, 5, 10, 50, 90, 95, 99])
    got = hist.exceeded(n)
    np.testing.assert_allclose(got, 60.0 - 0.2 * n, atol=0.02)


def test_histogram_matches_numpy_percentile():
    # LN is the (100 - N)th percentile of the level samples; numpy as independent reference
    rng = np.random.default_rng(7)
    levels = rng.normal(55.0, 6.0, 200_001)
    hist = LevelHistogram(0.01, -50, 150)
    hist.add_levels(levels[:100_000])
    hist.add_levels(levels[100_000:])
    n = np.array([0.0, 1, 10, 50, 90, 99, 100])
    np.testing.assert_allclose(hist.exceeded(n), np.percentile(levels, 100 - n), atol=0.011)


def test_histogram_monotone_and_bounds():
    hist = LevelHistogram(0.1, 0, 100)
    hist.add_levels(np.array([-np.inf, 10.0, 20.0, 30.0, 200.0]))
    assert hist.total == 5
    lv = hist.exceeded([0, 10, 50, 90, 100])
    assert np.all(lv[:-1] >= lv[1:])
    assert lv[0] == pytest.approx(hist.high_db)  # overflow bin reports the range bound
    assert lv[-1] == -math.inf  # digital silence counted in the underflow bin
    assert np.isnan(LevelHistogram().exceeded([50])).all()
    with pytest.raises(SettingsError):
        hist.exceeded([101])


def test_histogram_merge():
    a, b = LevelHistogram(), LevelHistogram()
    a.add_levels(np.array([1.0, 2.0]))
    b.add_levels(np.array([3.0]))
    a.merge(b)
    assert a.total == 3
    with pytest.raises(SettingsError):
        a.merge(LevelHistogram(0.1))


def test_exceeded_levels_through_a_window_of_the_occupied_bins():
    # the engine reads each interval's percentiles from the occupied bins of its histogram,
    # in place (bandmeter.engine LevelEngine._interval_percentiles): the counts just
    # outside the window, zero, stand for the underflow and overflow bins. Reference: the
    # whole histogram's LN (same interpolation; the bin edges differ by rounding only)
    rng = np.random.default_rng(3)
    hist = LevelHistogram(0.01, -400.0, 60.0)
    hist.add_levels(rng.normal(-35.0, 4.0, 20_000))
    occupied = np.flatnonzero(hist.counts)
    first, last = int(occupied[0]), int(occupied[-1])
    window = hist.counts[first - 1 : last + 2]
    low = hist.low_db + (first - 1) * hist.resolution_db
    n = [0.0, 1.0, 10.0, 50.0, 90.0, 99.0, 100.0]
    got = exceeded_levels(window, low, hist.resolution_db, n)
    np.testing.assert_allclose(got, hist.exceeded(n), rtol=0, atol=1e-9)
    assert math.isnan(exceeded_levels(np.zeros(5, dtype=np.int64), 0.0, 1.0, [50.0])[0])
