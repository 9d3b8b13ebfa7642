"""Long recordings without shipping large files: sparse RF64 files (a valid header declaring
the whole duration, the data a hole that reads back as zeros, a few bursts of noise), built by
``scripts/long_memory.py``, which also runs the full 24-hour measurement.

Memory is checked with tracemalloc (numpy reports its arrays to it), in this process, after a
warm-up run: that peak is deterministic, where a child's ru_maxrss also counts the pages of
shared libraries and varied by tens of MB between identical runs on the test machine.
"""

from __future__ import annotations

import importlib.util
import math
import os
import tracemalloc

import numpy as np
import pytest

from bandmeter.audio import Recording, read_info
from bandmeter.engine import AnalysisSettings, analyse_file

_SPEC = importlib.util.spec_from_file_location(
    "long_memory", os.path.join(os.path.dirname(__file__), "..", "scripts", "long_memory.py"))
long_memory = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(long_memory)

FS = long_memory.FS


def sparse(tmp_path, name, seconds):
    path = str(tmp_path / name)
    bursts = long_memory.write_sparse_rf64(path, seconds, long_memory.hourly_bursts(seconds))
    if os.stat(path).st_blocks * 512 > 64e6:  # pragma: no cover - depends on the file system
        os.unlink(path)
        pytest.skip("the temporary folder's file system does not keep sparse files")
    return path, bursts


def test_a_24_hour_file_opens_and_seeks_past_4_gb(tmp_path):
    path, bursts = sparse(tmp_path, "day.wav", 86400.0)
    assert os.path.getsize(path) > 2**32  # beyond what a plain RIFF/WAV can hold
    info = read_info(path)
    assert (info.format, info.subtype, info.sample_rate) == ("RF64", "PCM_16", FS)
    assert info.frames == 86400 * FS and not info.truncated
    assert info.duration_s == 86400.0
    # the last burst, 8.3 GB into the file, reads back sample for sample
    start, codes = bursts[-1]
    assert start == 86399 * FS
    with Recording(path) as rec:
        tail = rec.read(start, start + codes.size)
        before = rec.read(start - 1000, start)
    np.testing.assert_array_equal(tail, codes / 32768.0)
    assert not before.any()  # the hole is digital silence


def _expected_lzeq(bursts, frames, interval_frames):
    """LZeq per interval, dBFS, from the samples written (full-scale sine = 0 dBFS:
    10 lg(2 mean(x^2)), the level convention of bandmeter.engine)."""
    energy = np.zeros(math.ceil(frames / interval_frames))
    for start, codes in bursts:
        x = codes / 32768.0
        for k in range(start // interval_frames, (start + x.size - 1) // interval_frames + 1):
            lo = max(k * interval_frames - start, 0)
            hi = min((k + 1) * interval_frames - start, x.size)
            energy[k] += float(np.sum(x[lo:hi] ** 2))
    sizes = np.minimum(interval_frames, frames - np.arange(energy.size) * interval_frames)
    return 10 * np.log10(2 * energy / sizes)


def test_memory_does_not_grow_with_the_duration(tmp_path):
    settings = AnalysisSettings(interval_s=900.0)
    warm, _ = sparse(tmp_path, "warm.wav", 60.0)
    short, _ = sparse(tmp_path, "short.wav", 300.0)
    long_path, bursts = sparse(tmp_path, "long.wav", 1800.0)
    tracemalloc.start()
    try:
        analyse_file(warm, None, settings, allow_uncalibrated=True)  # one-time tables, caches
        peaks = {}
        for name, path in (("short", short), ("long", long_path)):
            tracemalloc.reset_peak()
            result = analyse_file(path, None, settings, allow_uncalibrated=True)
            peaks[name] = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    # six times the duration, 1650 blocks of 65536 samples (0.5 MB each as float64) instead
    # of 275: keeping anything per block of more than about 300 bytes would show
    assert peaks["long"] - peaks["short"] < 0.5e6, peaks
    assert peaks["long"] < 64e6, peaks  # the streaming state: a few blocks and the filters
    # and the whole 30 minutes were analysed: the LZeq of each 15-minute interval is the
    # energy of the noise bursts written into it (exact, Z weighting is the raw samples)
    assert result.frames == 1800 * FS
    expected = _expected_lzeq(bursts, 1800 * FS, 900 * FS)
    got = [iv.metrics["LZeq_dBFS"] for iv in result.intervals]
    np.testing.assert_allclose(got, expected, atol=1e-9)
    assert result.overall.metrics["LAFmin_dBFS"] == -math.inf  # the silence between bursts
    assert result.warnings == []
