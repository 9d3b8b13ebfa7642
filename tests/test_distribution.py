"""The whole-recording LAF level distribution carried in every file result."""

from __future__ import annotations

import math

import numpy as np
import pytest
import soundfile as sf

from bandmeter.calibration import from_full_scale_level
from bandmeter.engine import AnalysisSettings, analyse_file
from bandmeter.levels import LevelHistogram

FS = 48000
L_FS = 120.0  # invented chain: a full-scale sine reads 120 dB


def _ramp_file(tmp_path, start_db: float, end_db: float, duration_s: float):
    # a 1 kHz tone whose level rises linearly in dB: its level distribution is uniform
    # between the end levels (definition of the level distribution, ISO 1996-1)
    t = np.arange(int(duration_s * FS)) / FS
    level = start_db + (end_db - start_db) * t / duration_s
    amp = 10 ** ((level - L_FS) / 20)  # peak amplitude: a full-scale sine reads L_FS
    path = tmp_path / "ramp.wav"
    sf.write(path, amp * np.sin(2 * np.pi * 1000 * t), FS, subtype="FLOAT")
    return str(path)


def test_level_ramp_gives_a_uniform_distribution(tmp_path):
    path = _ramp_file(tmp_path, 60.0, 80.0, 20.0)
    result = analyse_file(path, from_full_scale_level(L_FS),
                          AnalysisSettings(percentiles=(10.0, 50.0, 90.0)))
    dist = result.to_dict()["distribution"]
    assert dist["metric"] == "LAF"
    w = dist["bin_width_db"]
    assert w == pytest.approx(0.1)
    counts = np.asarray(dist["counts"], dtype=float)
    lows = dist["first_bin_db"] + w * np.arange(counts.size)
    inner = (lows > 63.0) & (lows < 79.0)  # away from the start-up and the end
    share = counts[inner] / counts.sum()
    # uniform over 20 dB: each 0.1 dB bin holds 1/200 of the values (20 dB at 1 dB/s = 20 s)
    assert share == pytest.approx(np.full(share.size, 1 / 200), rel=0.05)
    # the percentile levels read from the distribution agree with the result's (within a bin)
    total = counts.sum() + dist["below"] + dist["above"]
    from_top = np.cumsum(counts[::-1])[::-1] / total * 100  # % of values >= bin's lower edge
    for n in (10, 50, 90):
        read = lows[np.flatnonzero(from_top >= n)[-1]]
        assert read == pytest.approx(result.overall.metrics[f"LAF{n}"], abs=w), n


def test_uncalibrated_distribution_is_in_dbfs(tmp_path):
    path = _ramp_file(tmp_path, 60.0, 62.0, 2.0)
    dist = analyse_file(path, None, allow_uncalibrated=True).to_dict()["distribution"]
    assert dist["metric"] == "LAF_dBFS"
    top = dist["first_bin_db"] + dist["bin_width_db"] * len(dist["counts"])
    # the ramp ends 58 dB below a full-scale sine (62 - 120 dB); the F detector lags a ramp of
    # 1 dB/s by 10 lg(1 + alpha tau) = 0.125 dB (analytic, exponential averager): the highest
    # level lies in the top bin
    highest = -58.0 - 10 * math.log10(1 + math.log(10) / 10 * 0.125)
    assert highest <= top <= highest + dist["bin_width_db"] + 1e-9


def test_histogram_regrouping_keeps_every_count():
    hist = LevelHistogram(0.01, -100.0, 50.0)
    rng = np.random.default_rng(7)
    levels = np.concatenate([rng.uniform(-20.0, 10.0, 5000), [-math.inf, -math.inf, 80.0]])
    hist.add_levels(levels)
    dist = hist.distribution(0.5, offset_db=3.0)
    assert sum(dist["counts"]) == 5000
    assert (dist["below"], dist["above"]) == (2, 1)
    assert dist["bin_width_db"] == pytest.approx(0.5)
    # numpy's histogram over the same edges (shifted by the offset) gives the same counts
    edges = dist["first_bin_db"] + 0.5 * np.arange(len(dist["counts"]) + 1)
    expected, _ = np.histogram(levels[np.isfinite(levels) & (levels < 50)] + 3.0, bins=edges)
    assert dist["counts"] == expected.tolist()


def test_empty_histogram_distribution():
    dist = LevelHistogram().distribution()
    assert dist["counts"] == [] and math.isnan(dist["first_bin_db"])
