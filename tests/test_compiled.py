"""Tests of the optional compiled kernels (bandmeter/_kernels.c) against the NumPy paths.

Reference: the package's own NumPy implementations of the same steps, which the other test
modules check against standards and scipy. The tile maxima and the histogram counting repeat
their floating-point operations in the same order, so those comparisons are exact
(``array_equal``, ``==``), not within a tolerance; the time weightings run as the recursion
itself, checked in ``tests/test_timeweight.py`` against scipy's lfilter (the same bits) and
the NumPy block formulation (1e-13 relative), so the time-weighted levels of a whole
analysis are compared within 1e-12 dB here. The NumPy side of the tile maxima is checked
once more against a plain per-tile ``max`` over ``np.abs`` and a written-out second
difference (numpy itself).

Where the extension is not built these tests skip, unless ``BANDMETER_REQUIRE_KERNELS=1``
(set by CI, which builds it), where its absence is a failure; they skip too in a run with
the kernels switched off (``BANDMETER_NUMPY_ONLY=1``), which tests the NumPy paths alone.
"""

from __future__ import annotations

import os
import sys

import numpy as np
import pytest
from scipy import signal

import bandmeter.filterbank as fb
from bandmeter import compiled
from bandmeter.blockfilter import MultiSosFilter
from bandmeter.engine import AnalysisSettings, analyse_array
from bandmeter.errors import AudioError, SettingsError
from bandmeter.filterbank import FractionalOctaveBank
from bandmeter.intervals import IntervalPlan
from bandmeter.levels import LevelHistogram
from bandmeter.peak import TruePeakMeter
from bandmeter.weighting import MultiWeightingFilter, design_sos

FS = 48000

if os.environ.get("BANDMETER_NUMPY_ONLY") == "1":
    pytestmark = pytest.mark.skip(reason="compiled kernels switched off (BANDMETER_NUMPY_ONLY)")
elif os.environ.get("BANDMETER_REQUIRE_KERNELS") != "1":
    pytestmark = pytest.mark.skipif(not compiled.available(),
                                    reason="compiled kernels not built")


def test_extension_is_built_and_passes_its_self_check() -> None:
    assert compiled.available(), "bandmeter._kernels is not built (no C compiler at install?)"
    assert compiled.self_check(compiled._extension) == []
    assert compiled.kernels() is not None


def test_a_kernel_failing_its_self_check_is_not_used(monkeypatch: pytest.MonkeyPatch) -> None:
    # a module whose histogram counting is off by one: the check names it, kernels() warns
    # once and the NumPy paths run
    real = compiled._extension

    class Broken:
        tile_maxima = staticmethod(real.tile_maxima)
        time_weighting = staticmethod(real.time_weighting)
        sos_bands = staticmethod(real.sos_bands)

        @staticmethod
        def count_levels(levels, low, res, nbins, counts):
            span = real.count_levels(levels, low, res, nbins, counts)
            counts[1] += 1
            return span

    assert compiled.self_check(Broken) == ["count_levels"]
    monkeypatch.setattr(compiled, "_extension", Broken)
    monkeypatch.setattr(compiled, "_self_check_passed", None)
    with pytest.warns(RuntimeWarning, match="count_levels.*NumPy paths run"):
        assert compiled.kernels() is None
    assert compiled.kernels() is None  # decided once


def test_numpy_only_switch_and_provenance() -> None:
    from bandmeter.provenance import tool_stamp

    assert compiled.describe().startswith("compiled kernels (")
    assert tool_stamp()["kernels"] == compiled.describe()
    with compiled.numpy_only():
        assert compiled.kernels() is None
        assert compiled.describe() == "NumPy paths (compiled kernels switched off)"
        assert tool_stamp()["kernels"] == compiled.describe()
    assert compiled.kernels() is not None
    assert compiled.kernels().lane_width() in (1, 2, 4)


# -- tile maxima of the true-peak meter ---------------------------------------------------


def _numpy_tile_pass(x: np.ndarray, start: int, n_tiles: int) -> tuple[np.ndarray, ...]:
    meter = TruePeakMeter(FS, IntervalPlan(None))
    tiles = np.full((2, n_tiles), -1.0)
    near = np.full(n_tiles - 2, -1.0)
    with compiled.numpy_only():
        meter._tile_pass(x, start, n_tiles, tiles, near)
    return tiles, near


def _compiled_tile_pass(x: np.ndarray, start: int, n_tiles: int) -> tuple[np.ndarray, ...]:
    tiles = np.full((2, n_tiles), -1.0)
    near = np.full(n_tiles - 2, -1.0)
    assert compiled.kernels().tile_maxima(x, start, n_tiles, tiles[0], tiles[1], near)
    return tiles, near


@pytest.mark.parametrize("kind", ["noise", "tiny", "mixed", "zeros", "steps"])
@pytest.mark.parametrize("start,n_tiles", [(1, 2), (16, 3), (17, 40), (33, 4097), (5, 9000)])
def test_tile_maxima_identical_to_numpy(kind: str, start: int, n_tiles: int) -> None:
    rng = np.random.default_rng(start * 7 + n_tiles)
    n = start + 16 * n_tiles + 1 + int(rng.integers(0, 5))
    x = {
        "noise": rng.standard_normal(n),
        "tiny": rng.standard_normal(n) * 1e-310,  # subnormal
        "mixed": rng.standard_normal(n) * 10.0 ** rng.uniform(-300, 300, n),
        "zeros": np.zeros(n),
        "steps": np.repeat(rng.choice([-1.0, 0.0, 1.0], n // 7 + 1), 7)[:n],
    }[kind]
    tiles_np, near_np = _numpy_tile_pass(x, start, n_tiles)
    tiles_c, near_c = _compiled_tile_pass(x, start, n_tiles)
    assert np.array_equal(tiles_c, tiles_np)
    assert np.array_equal(near_c, near_np)
    # and the NumPy side against a plain per-tile maximum (numpy's abs, diff and max)
    i = np.arange(start, start + 16 * n_tiles)
    d2 = np.abs((x[i - 1] - 2.0 * x[i]) + x[i + 1])
    assert np.array_equal(tiles_np[0], np.abs(x[i]).reshape(n_tiles, 16).max(axis=1))
    assert np.array_equal(tiles_np[1], d2.reshape(n_tiles, 16).max(axis=1))


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
@pytest.mark.parametrize("where", [0, 1, 40, 16 * 10 + 1])  # the sample before, inside, after
def test_tile_maxima_reports_non_finite(bad: float, where: int) -> None:
    x = np.random.default_rng(3).standard_normal(16 * 10 + 2)
    x[where] = bad
    tiles = np.empty((2, 10))
    assert not compiled.kernels().tile_maxima(x, 1, 10, tiles[0], tiles[1], np.empty(8))


def test_tile_maxima_refuses_bad_arguments() -> None:
    k = compiled.kernels()
    x = np.zeros(16 * 4 + 2)
    t = np.empty((2, 4))
    with pytest.raises(ValueError):
        k.tile_maxima(x, 1, 5, t[0], t[1], np.empty(3))  # x too short for 5 tiles
    with pytest.raises(ValueError):
        k.tile_maxima(x, 0, 4, t[0], t[1], np.empty(2))  # no sample before the first tile
    with pytest.raises(ValueError):
        k.tile_maxima(x, 1, 4, t[0], t[1], np.empty(1))  # near too short
    with pytest.raises(TypeError):
        k.tile_maxima(x.astype(np.float32), 1, 4, t[0], t[1], np.empty(2))
    with pytest.raises(ValueError, match="contiguous"):
        k.tile_maxima(np.zeros(200)[::2], 1, 4, t[0], t[1], np.empty(2))  # not contiguous
    with pytest.raises(ValueError):  # a start whose tile end overflows the index type
        k.tile_maxima(x, sys.maxsize - 20, 2, t[0], t[1], np.empty(0))


def _meter_peaks(x: np.ndarray, interval_s: float | None) -> dict[int, float]:
    plan = IntervalPlan(round(interval_s * FS) if interval_s else None)
    meter = TruePeakMeter(FS, plan)
    for block in np.array_split(x, 7):
        meter.process(block)
    return meter.finish()


@pytest.mark.parametrize("interval_s", [None, 0.1, 0.25])
def test_true_peaks_identical_with_and_without_kernels(interval_s: float | None) -> None:
    rng = np.random.default_rng(11)
    t = np.arange(FS) / FS
    x = np.concatenate([
        rng.standard_normal(FS // 2) * 0.1,  # noise
        0.5 * np.sin(2 * np.pi * 8000 * t[: FS // 4] + 0.3),  # a steady tone: many ties
        np.zeros(FS // 8),  # digital silence
        np.cumsum(rng.standard_normal(FS // 8)) * 1e-3,  # low-frequency wander
    ])
    with compiled.numpy_only():
        expected = _meter_peaks(x, interval_s)
    assert _meter_peaks(x, interval_s) == expected


def test_non_finite_sample_still_refused_with_kernels() -> None:
    x = np.random.default_rng(5).standard_normal(FS // 2)
    x[FS // 4] = np.nan
    with pytest.raises(AudioError, match="non-finite"):
        _meter_peaks(x, 0.1)


# -- level histogram ------------------------------------------------------------------------


def _levels_with_edge_cases(rng: np.random.Generator, low: float, res: float,
                            nbins: int) -> np.ndarray:
    edges = low + res * rng.integers(-3, nbins + 3, 2000)  # exactly on (rounded) bin edges
    return np.concatenate([
        rng.uniform(low - 5.0, low + res * nbins + 5.0, 20000),  # beyond both ends too
        edges, np.nextafter(edges, -np.inf), np.nextafter(edges, np.inf),
        np.repeat(rng.uniform(low, low + 1.0, 30), 200),  # runs of one bin
        [-np.inf, np.inf, low, low + res * nbins, -1e308, 1e308, -0.0],
    ])


@pytest.mark.parametrize("low,res,nbins", [(-400.0, 0.01, 46000), (-20.0, 0.1, 300),
                                           (0.0, 1.0, 1), (-3.0, 0.37, 17)])
def test_count_levels_identical_to_level_histogram(low: float, res: float, nbins: int) -> None:
    rng = np.random.default_rng(nbins)
    levels = _levels_with_edge_cases(rng, low, res, nbins)
    reference = LevelHistogram(res, low, low + res * nbins)
    assert reference.nbins == nbins
    with np.errstate(over="ignore"):  # 1e308 - low overflows to inf: the overflow bin
        reference.add_levels(levels)
    counts = np.zeros(nbins + 2, dtype=np.int64)
    lowest, highest = compiled.kernels().count_levels(levels, low, res, nbins, counts)
    assert np.array_equal(counts, reference.counts)
    occupied = np.flatnonzero(reference.counts)
    assert (lowest, highest) == (occupied[0], occupied[-1])
    # counts are added to what is there
    compiled.kernels().count_levels(levels[:100], low, res, nbins, counts)
    reference.add_levels(levels[:100])
    assert np.array_equal(counts, reference.counts)


def test_count_levels_reports_nan_and_refuses_bad_arguments() -> None:
    k = compiled.kernels()
    counts = np.zeros(12, dtype=np.int64)
    assert k.count_levels(np.array([1.0, np.nan, 2.0]), 0.0, 1.0, 10, counts) is None
    with pytest.raises(ValueError):
        k.count_levels(np.zeros(3), 0.0, 1.0, 11, counts)  # counts too short
    with pytest.raises(ValueError):
        k.count_levels(np.zeros(3), 0.0, 0.0, 10, counts)  # no bin width
    with pytest.raises(ValueError):  # nbins + 2 overflows the index type
        k.count_levels(np.array([1e6]), 0.0, 1.0, sys.maxsize, np.zeros(3, dtype=np.int64))
    with pytest.raises(ValueError, match="no levels"):
        k.count_levels(np.zeros(0), 0.0, 1.0, 10, counts)
    with pytest.raises(TypeError):
        k.count_levels(np.zeros(3), 0.0, 1.0, 10, counts.astype(np.int32))
    with pytest.raises(TypeError):
        k.count_levels(np.zeros(3, dtype=np.float32), 0.0, 1.0, 10, counts)


# -- band filters of a filter-bank stage ---------------------------------------------------


def _random_band_passes(rng: np.random.Generator, n_bands: int, order: int) -> np.ndarray:
    soss = []
    for _ in range(n_bands):
        lo = rng.uniform(0.001, 0.3)
        soss.append(signal.butter(order, [lo, lo * rng.uniform(1.1, 1.6)], btype="bandpass",
                                  output="sos"))
    return np.ascontiguousarray(np.stack(soss))


@pytest.mark.parametrize("lanes", [1, 2, 4])
@pytest.mark.parametrize("n_bands,order,n", [(1, 4, 1000), (2, 2, 3), (3, 4, 517),
                                             (4, 4, 4096), (5, 3, 257), (8, 1, 1031),
                                             (9, 4, 600)])
def test_sos_bands_identical_to_sosfilt(lanes: int, n_bands: int, order: int, n: int) -> None:
    # reference: scipy.signal.sosfilt of each band with its own initial state: the same
    # outputs and final states to the last bit, in any lane width (the kernel picks the
    # widest the processor has when asked for more)
    rng = np.random.default_rng(n_bands * 100 + n)
    sos = _random_band_passes(rng, n_bands, order)
    x = rng.standard_normal(n)
    zi = rng.standard_normal((n_bands, order, 2)) * 0.1
    zi_start = zi.copy()
    stride = n + 3
    out = np.full((n_bands, stride), 7.0)
    used = compiled.kernels().sos_bands(x, sos, zi, order, out, stride, lanes)
    assert used in (1, 2, 4) and used <= lanes
    for b in range(n_bands):
        ref, z_ref = signal.sosfilt(sos[b], x, zi=zi_start[b])
        assert np.array_equal(out[b, :n], ref), b
        assert np.array_equal(zi[b], z_ref), b
        assert np.all(out[b, n:] == 7.0)  # nothing written past the outputs


def test_sos_bands_flush_tiny_states_in_silence() -> None:
    # after digital silence the states are exact zeros and no output is subnormal (the NumPy
    # paths flush below 1e-200 too), where sosfilt would go on in subnormal arithmetic
    rng = np.random.default_rng(1)
    sos = _random_band_passes(rng, 4, 4)
    zi = np.zeros((4, 4, 2))
    k = compiled.kernels()
    out = np.empty((4, 1 << 15))
    k.sos_bands(rng.standard_normal(1 << 15), sos, zi, 4, out, 1 << 15)
    tiny = np.finfo(np.float64).tiny
    for _ in range(80):
        k.sos_bands(np.zeros(1 << 15), sos, zi, 4, out, 1 << 15)
        assert np.all((out == 0.0) | (np.abs(out) >= tiny))
    assert np.all(zi == 0.0)


def test_sos_bands_refuses_bad_arguments() -> None:
    k = compiled.kernels()
    sos = _random_band_passes(np.random.default_rng(2), 2, 4)
    zi = np.zeros((2, 4, 2))
    out = np.empty((2, 100))
    with pytest.raises(ValueError):
        k.sos_bands(np.zeros(100), sos, zi, 3, out, 100)  # sections do not divide
    with pytest.raises(ValueError):
        k.sos_bands(np.zeros(100), sos, np.zeros((2, 3, 2)), 4, out, 100)
    with pytest.raises(ValueError):
        k.sos_bands(np.zeros(101), sos, zi, 4, out, 100)  # stride below the length
    with pytest.raises(ValueError):
        k.sos_bands(np.zeros(100), sos, zi, 4, np.empty(150), 100)  # out too short
    with pytest.raises(ValueError):
        k.sos_bands(np.zeros(100), sos, zi, 4, out, 100, 3)  # no such lane width
    with pytest.raises(TypeError):
        k.sos_bands(np.zeros(100, dtype=np.float32), sos, zi, 4, out, 100)
    with pytest.raises(ValueError):  # a stride whose last row overflows the index type
        k.sos_bands(np.zeros(8), sos, zi, 4, np.empty(8), sys.maxsize)
    scaled = sos.copy()
    scaled[1, 2, :] *= 2.0  # a0 = 2: sosfilt's arithmetic assumes a0 = 1
    with pytest.raises(ValueError, match="a0 = 1"):
        k.sos_bands(np.zeros(100), scaled, zi, 4, out, 100)


@pytest.mark.parametrize("lanes", [1, 2, 4])
@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_sos_bands_carry_non_finite_samples_as_sosfilt_does(lanes: int, bad: float) -> None:
    # reference: scipy.signal.sosfilt; a NaN or infinite sample makes the states NaN for
    # good, in every lane width (the flush of tiny states leaves NaN alone)
    sos = _random_band_passes(np.random.default_rng(6), 3, 2)
    x = np.ones(600)
    x[10] = bad
    zi = np.zeros((3, 2, 2))
    out = np.empty((3, 600))
    compiled.kernels().sos_bands(x, sos, zi, 2, out, 600, lanes)
    for b in range(3):
        ref, z_ref = signal.sosfilt(sos[b], x, zi=np.zeros((2, 2)))
        assert np.array_equal(out[b], ref, equal_nan=True)
        assert np.array_equal(zi[b], z_ref, equal_nan=True)


def test_time_weighting_kernel_refuses_infinity_and_survives_shared_memory() -> None:
    k = compiled.kernels()
    coef = np.array([[0.5, 0.5, 0.0]])
    state = np.array([0.25])
    args = (np.array([0, 4], dtype=np.int64), coef, state, np.zeros(1), np.ones(4), (None,),
            np.empty(1), np.empty(1))
    assert not k.time_weighting(np.array([1.0, np.inf, 1.0, 1.0]), *args)
    assert state[0] == 0.25  # nothing advanced
    # outputs sharing memory with the segment edges: the kernel reads its own copy of them
    # (the values written are meaningless here; what matters is no access out of bounds)
    shared = np.zeros(8)
    edges = shared[0:3].view(np.int64)
    edges[:] = [0, 4, 8]
    assert k.time_weighting(np.ones(8), edges, coef, np.zeros(1), np.zeros(1), np.ones(4),
                            (None,), shared[2:4], np.empty(2))


@pytest.mark.parametrize("fs,b", [(48000.0, 3), (44100.0, 1), (96000.0, 6)])
def test_bank_identical_to_its_sosfilt_path(monkeypatch: pytest.MonkeyPatch, fs: float,
                                             b: int) -> None:
    # the bank's outputs with the compiled stage kernel and with its NumPy sosfilt path (the
    # block kernel switched off): the same bits, over blocks of several lengths
    x = np.random.default_rng(int(fs)).standard_normal(int(2.5 * fs))
    cuts = [0, 1000, 1001, 40000, int(fs), x.size]
    blocks = [x[lo:hi] for lo, hi in zip(cuts[:-1], cuts[1:], strict=True)]
    bank = FractionalOctaveBank(fs, b, hold_samples=4096)
    got = [bank.process(v) for v in blocks] + [bank.drain()]
    monkeypatch.setattr(fb, "_BLOCK_MIN_SAMPLES", 1 << 62)
    with compiled.numpy_only():
        ref_bank = FractionalOctaveBank(fs, b, hold_samples=4096)
        want = [ref_bank.process(v) for v in blocks] + [ref_bank.drain()]
    for g, w in zip(got, want, strict=True):
        for i, (gy, wy) in enumerate(zip(g, w, strict=True)):
            assert np.array_equal(gy, wy), bank.bands[i].label
    assert np.array_equal(bank._zi, ref_bank._zi)


@pytest.mark.parametrize("fs", [8000.0, 44100.0, 48000.0, 96000.0, 192000.0])
def test_weighting_filters_identical_to_sosfilt(fs: float) -> None:
    # reference: scipy.signal.sosfilt of the A and C designs over the whole signal in one
    # call: the compiled path gives its bits, across blocks of any length
    rng = np.random.default_rng(int(fs))
    x = rng.standard_normal(int(0.7 * fs)) + 3.0 * np.sin(2 * np.pi * 5.0 * np.arange(
        int(0.7 * fs)) / fs)  # with infrasound: the poles near z = 1
    f = MultiWeightingFilter(("A", "Z", "C"), fs)
    cuts = [0, 1, 5, 300, 301, 20000, x.size]
    parts = [f.process(x[lo:hi]) for lo, hi in zip(cuts[:-1], cuts[1:], strict=True)]
    assert f._filter.compiled_path is True
    for j, letter in enumerate("AZC"):
        got = np.concatenate([p[j] for p in parts])
        want = x if letter == "Z" else signal.sosfilt(design_sos(letter, fs), x)
        assert np.array_equal(got, want), letter


def test_cascades_of_different_lengths_identical_to_sosfilt() -> None:
    rng = np.random.default_rng(9)
    soss = [signal.butter(order, 0.05 * order, output="sos") for order in (1, 4, 7, 10)]
    x = rng.standard_normal(5000)
    f = MultiSosFilter(soss)
    first, second = f.process(x[:1234]), f.process(x[1234:])
    for j, sos in enumerate(soss):
        assert np.array_equal(np.concatenate([first[j], second[j]]), signal.sosfilt(sos, x))
    assert f.compiled_path is True and f.block_path == [False] * 4


def test_filter_keeps_the_path_chosen_on_its_first_sample() -> None:
    # its state is held in that path's layout: switching the kernels off later changes
    # nothing for a filter already running, and a filter started without them stays so
    sos = signal.butter(4, [0.1, 0.2], btype="bandpass", output="sos")
    x = np.random.default_rng(3).standard_normal(6000)
    on = MultiSosFilter([sos])
    on.process(x[:3000])
    with compiled.numpy_only():
        off = MultiSosFilter([sos])
        off.process(x[:3000])
        tail_on = on.process(x[3000:])[0]
    tail_off = off.process(x[3000:])[0]
    assert on.compiled_path is True and off.compiled_path is False
    assert np.array_equal(tail_on, signal.sosfilt(sos, x)[3000:])
    np.testing.assert_allclose(tail_off, signal.sosfilt(sos, x)[3000:], rtol=0, atol=1e-12)


# -- the whole analysis ---------------------------------------------------------------------


def _analysis(x: np.ndarray, fs: float = FS, **settings: object) -> list[dict]:
    options = {"interval_s": 0.25, "bands": 3, **settings}
    overall, intervals = analyse_array(x, fs, AnalysisSettings(**options),
                                       full_scale_level_db=120.0)
    return [overall.to_dict()] + [r.to_dict() for r in intervals]


def _assert_same_levels(expected: list[dict], got: list[dict], tol_db: float) -> None:
    """Every broadband level within ``tol_db``; each band's energy within 1e-12 of the
    row's total band energy (a filter's rounding is relative to its whole output, so a band
    60 dB below the others differs more in dB); everything else equal."""
    assert len(got) == len(expected)
    for want, have in zip(expected, got, strict=True):
        assert want.keys() == have.keys()
        for key, value in want.items():
            if key == "bands":
                assert [band["label"] for band in have[key]] == [w["label"] for w in value]
                for k in (k for k in value[0] if k.startswith("L")) if value else ():
                    e_want = 10.0 ** (np.array([w[k] for w in value]) / 10.0)
                    e_have = 10.0 ** (np.array([band[k] for band in have[key]]) / 10.0)
                    assert np.max(np.abs(e_have - e_want)) <= 1e-12 * e_want.sum(), k
                for band, w in zip(have[key], value, strict=True):
                    assert band.keys() == w.keys()
                    assert {k: v for k, v in band.items() if not k.startswith("L")} == {
                        k: v for k, v in w.items() if not k.startswith("L")}
            elif isinstance(value, float) and key.startswith("L"):
                assert have[key] == pytest.approx(value, abs=tol_db), key
            else:
                assert have[key] == value, key


def test_analysis_identical_with_and_without_kernels() -> None:
    rng = np.random.default_rng(2)
    t = np.arange(3 * FS) / FS
    x = 0.05 * rng.standard_normal(t.size) + 0.2 * np.sin(2 * np.pi * 1000 * t)
    x[FS : FS + FS // 4] *= 8.0  # an event
    x[2 * FS : 2 * FS + 4800] = 0.0  # a dropout
    with compiled.numpy_only():
        expected = _analysis(x)
    got = _analysis(x)
    assert len(got) == 13
    # The compiled A, C and band filters are sosfilt's arithmetic, which the NumPy block
    # kernels match to 1e-11 of the output (their first-use probe) and 4.5e-14 of a band's
    # RMS; the compiled time weightings are lfilter's recursion, the NumPy block formulation
    # 1e-13 relative: every broadband level within 1e-9 dB (a percentile could move further
    # only if a level lay within that of a 0.01 dB bin edge; the true peak only if the
    # signal's last bits changed which samples its bounds skip, by at most its 0.01 dB
    # tolerance), each band's energy within 1e-12 of the bands' total (measured: at most
    # 1.9e-13, A-weighted bands at 96 kHz). Counts, flags and band labels are the same.
    _assert_same_levels(expected, got, 1e-9)


@pytest.mark.parametrize("fs,settings", [
    (44100.0, {"bands": 1, "interval_s": 0.5}),
    (96000.0, {"bands": 3, "band_weighting": "A", "band_max": True}),
    (48000.0, {"bands": 3, "history_s": 0.125, "band_weighting": "C"}),
    (32000.0, {"bands": None, "interval_s": None, "block_frames": 4096}),
])
def test_analysis_with_other_settings_the_same_with_and_without_kernels(
    fs: float, settings: dict
) -> None:
    # the engine's other configurations (rates, octave bands, weighted bands with maxima,
    # time history, no bands, short blocks) on both paths: as above
    rng = np.random.default_rng(int(fs))
    n = int(1.6 * fs)
    t = np.arange(n) / fs
    x = 0.05 * rng.standard_normal(n) + 0.1 * np.sin(2 * np.pi * 250.0 * t)
    x[n // 2 : n // 2 + n // 8] *= 6.0
    with compiled.numpy_only():
        expected = _analysis(x, fs, **settings)
    _assert_same_levels(expected, _analysis(x, fs, **settings), 1e-9)


def test_nan_level_still_refused_with_kernels() -> None:
    x = np.random.default_rng(4).standard_normal(FS)
    x[FS // 2] = np.nan
    with pytest.raises((SettingsError, AudioError)):
        _analysis(x)
