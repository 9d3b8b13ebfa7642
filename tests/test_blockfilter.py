"""Tests of bandmeter.blockfilter: the block state-space kernel on one SOS cascade.

References: ``scipy.signal.sosfilt`` (public API) on the same sections, and a long-double
(x87 80-bit) evaluation of the same sections in transposed direct form II, which has 11
more bits than float64 and so serves as the exact response here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from bandmeter import blockfilter as bf
from bandmeter import compiled
from bandmeter.blockfilter import MultiSosFilter, SosFilter
from bandmeter.errors import SettingsError
from bandmeter.weighting import WeightingFilter, design_sos

RATES = [8000, 44100, 48000, 96000, 192000]


@pytest.fixture(autouse=True)
def _numpy_paths():
    """This module tests the NumPy block kernel: the compiled kernels are off here (their
    own tests, tests/test_compiled.py, check them against sosfilt)."""
    with compiled.numpy_only():
        yield


def _signals(n: int, fs: float) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(61672)
    noise = rng.standard_normal(n)
    t = np.arange(n) / fs
    pink = signal.lfilter(  # Kellet's economy pinking filter (common practice, no source)
        [0.049922035, -0.095993537, 0.050612699, -0.004408786],
        [1.0, -2.494956002, 2.017265875, -0.522189400], noise)
    return {
        "noise": noise,
        "noise + 3 Hz + DC": noise + 5.0 * np.sin(2 * np.pi * 3.0 * t) + 2.0,  # infrasound
        "pink": pink,
        "0.97 Nyquist": np.cos(np.pi * 0.97 * np.arange(n)),
    }


def _long_double_sosfilt(sos: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Transposed direct form II, section by section, in long double (slow; short x)."""
    y = x.astype(np.longdouble)
    for b0, b1, b2, _, a1, a2 in sos.astype(np.longdouble):
        z1 = z2 = np.longdouble(0.0)
        out = np.empty_like(y)
        for i, v in enumerate(y):
            w = b0 * v + z1
            z1 = b1 * v - a1 * w + z2
            z2 = b2 * v - a2 * w
            out[i] = w
        y = out
    return y


def _in_blocks(f: SosFilter, x: np.ndarray, cuts: list[int]) -> np.ndarray:
    edges = [0, *cuts, x.size]
    return np.concatenate([f.process(x[a:b]) for a, b in zip(edges[:-1], edges[1:],
                                                               strict=True)])


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("letter", ["A", "C"])
def test_weighting_sections_take_the_block_path(fs: int, letter: str) -> None:
    f = SosFilter(design_sos(letter, fs))
    assert f.block_path is None
    f.process(np.zeros(3))
    assert f.block_path is True  # passed the first-use probe against sosfilt
    assert bf._probe_cascades(f._multi._kernel, [f.sos])[0] < 1e-12  # margin to _BLOCK_TOL = 1e-11


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("letter", ["A", "C"])
def test_matches_scipy_sosfilt_on_random_block_splits(fs: int, letter: str) -> None:
    # reference: scipy.signal.sosfilt in one call from rest. Tolerance, relative to the
    # largest output: 2e-12 at 44.1 and 48 kHz; at 8, 96 and 192 kHz sosfilt itself errs by
    # up to 4e-11 (long-double reference, next test), so the two agree to 1e-10 there
    sos = design_sos(letter, fs)
    rng = np.random.default_rng(fs + ord(letter))
    tol = 2e-12 if fs in (44100, 48000) else 1e-10
    for name, x in _signals(3 * 16384 + 77, fs).items():
        ref = signal.sosfilt(sos, x)
        cuts = sorted(rng.integers(0, x.size, 12).tolist())
        cuts += [x.size - 300, x.size - 299, x.size - 44]  # blocks of 1 sample and more
        got = _in_blocks(SosFilter(sos), x, sorted(cuts))
        assert got.shape == ref.shape
        dev = np.max(np.abs(got - ref)) / np.max(np.abs(ref))
        assert dev <= tol, (name, dev)


@pytest.mark.parametrize(("fs", "letter"), [(48000, "A"), (48000, "C"), (192000, "C")])
def test_as_accurate_as_sosfilt_against_long_double(fs: int, letter: str) -> None:
    # the block path's realisation (module notes): its error against the long-double
    # evaluation stays within that of sosfilt (factor 2 and 1e-14 of the output for rounding
    # luck), and below 1e-11 of the output even with strong infrasound
    sos = design_sos(letter, fs)
    for name, x in _signals(12000, fs).items():
        exact = _long_double_sosfilt(sos, x)
        scale = float(np.max(np.abs(exact)))
        err_kernel = float(np.max(np.abs(SosFilter(sos).process(x) - exact))) / scale
        err_sosfilt = float(np.max(np.abs(signal.sosfilt(sos, x) - exact))) / scale
        assert err_kernel <= 2.0 * err_sosfilt + 1e-14, (name, err_kernel, err_sosfilt)
        assert err_kernel < 1e-11, name


def test_streaming_invariance_small_and_odd_blocks() -> None:
    # blocks of 0, 1, 2, sub-frame and frame lengths +-1 and long ones: the same output as one
    # block, to rounding (the kernel regroups the arithmetic by the block's frames)
    sos = design_sos("A", 48000)
    sub, frame = bf._BLOCK_SUB, bf._BLOCK_FRAME
    lengths = [0, 1, 2, sub - 1, sub, sub + 1, frame // 2 - 1, frame // 2, frame - 1, frame,
               frame + 1, 0, 64 * frame + 5, 3]
    x = np.random.default_rng(3).standard_normal(sum(lengths))
    one = SosFilter(sos).process(x)
    got = _in_blocks(SosFilter(sos), x, np.cumsum(lengths)[:-1].tolist())
    assert np.max(np.abs(got - one)) <= 1e-13 * np.max(np.abs(one))


def test_silence_leaves_no_subnormal_numbers() -> None:
    # after a sound, digital silence: the states are flushed below 1e-200 (bandmeter.numerics),
    # so the output decays to exact zeros without passing through subnormal numbers
    f = SosFilter(design_sos("C", 48000))
    f.process(np.random.default_rng(4).standard_normal(48000))
    tiny = np.finfo(np.float64).tiny  # smallest normal number
    for _ in range(40):
        y = f.process(np.zeros(65536))
        assert not np.any((y != 0.0) & (np.abs(y) < tiny))
    assert np.all(f._multi._state == 0.0) and np.all(y == 0.0)
    f.process(np.full(10, 1e-310))  # subnormal input is filtered, not refused
    f.reset()
    np.testing.assert_array_equal(f.process(np.zeros(100)), 0.0)


def test_failed_probe_falls_back_to_sosfilt(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(bf, "_BLOCK_TOL", -1.0)  # no kernel can pass
    sos = design_sos("A", 48000)
    x = np.random.default_rng(5).standard_normal(20000)
    f = SosFilter(sos)
    got = _in_blocks(f, x, [7000, 7001])
    assert f.block_path is False
    np.testing.assert_allclose(got, signal.sosfilt(sos, x), rtol=0, atol=1e-15)


def _double_pole_row(gain: float, p: float) -> list[float]:
    return [gain, -2.0 * gain, gain, 1.0, -2.0 * p, p * p]  # (1 - z^-1)^2 / (1 - p z^-1)^2


@pytest.mark.parametrize("row", [
    [1.25, -2.5, 1.25, 1.0, -1.99461446, 0.99462171],  # DC zeros, real poles near z = 1
    _double_pole_row(0.9, 0.9973),  # DC zeros, double real pole (matched z, as in A and C)
    _double_pole_row(1.1, 0.99933),  # the same at 192 kHz
    [0.5, 0.1, -0.01, 1.0, -0.4, 0.04],  # other zeros: sosfilt's realisation
    [0.3, 0.2, 0.1, 1.0, -1.2, 0.8],  # complex poles
])
def test_section_realisation_has_the_section_response(row: list[float]) -> None:
    # impulse response of the realisation (A, B, C, D) against sosfilt's
    sos = np.array([row])
    a, b, c, d = bf._cascade_state_space(sos)
    s, h = np.zeros(2), []
    for x in [1.0] + [0.0] * 199:
        h.append(c @ s + d * x)
        s = a @ s + b * x
    ref = signal.sosfilt(sos, np.r_[1.0, np.zeros(199)])
    np.testing.assert_allclose(h, ref, rtol=0, atol=1e-13 * np.max(np.abs(ref)))


def test_dc_zero_sections_use_the_low_pass_complement() -> None:
    # A-weighting sections with zeros at DC and real poles: triangular transition matrix with
    # the poles on the diagonal (module notes)
    sos = design_sos("A", 48000)
    a, *_ = bf._cascade_state_space(sos[:1])
    p = -sos[0, 4] / 2.0  # the double pole (matched z)
    np.testing.assert_allclose(np.diag(a), [p, p], rtol=1e-15)
    assert a[0, 1] == 0.0 and a[1, 0] == pytest.approx(-(1.0 - p), rel=1e-12)
    assert np.max(np.abs(np.linalg.matrix_power(a, 4096))) < 1.0  # no transient growth


def test_weighting_filter_runs_on_the_block_path() -> None:
    fs = 48000
    tone = np.sin(2 * np.pi * 1000 * np.arange(fs) / fs)
    w = WeightingFilter("A", fs)
    out = w.process(tone)
    assert w._filter.block_path is True
    # 0 dB at 1 kHz (IEC 61672-1:2013 Table 3): the steady part has the tone's amplitude
    assert math.sqrt(2.0 * np.mean(out[fs // 2 :] ** 2)) == pytest.approx(1.0, abs=1e-4)


def test_bad_sections_raise() -> None:
    with pytest.raises(SettingsError, match="shape"):
        SosFilter(np.ones(6))
    with pytest.raises(SettingsError, match="shape"):
        SosFilter(np.ones((2, 5)))


@pytest.mark.parametrize("m", [1, 7, 418, 419, 5000])
def test_matmul_rows_equals_one_product(m: int) -> None:
    # pieces of rows small enough for one BLAS thread: the same dot products as one call
    # (numpy's matmul reference), also for a strided view like the decimator's
    rng = np.random.default_rng(m)
    a, b = rng.standard_normal((m, 33)), rng.standard_normal((33, 19))
    np.testing.assert_allclose(bf.matmul_rows(a, b), a @ b, rtol=1e-14, atol=1e-14)
    big = rng.standard_normal((2 * m, 66))
    view = big[::2, ::2]
    np.testing.assert_allclose(bf.matmul_rows(view, b), view @ b, rtol=1e-14, atol=1e-14)
    out = np.empty((m, 19))
    assert bf.matmul_rows(a, b, out=out) is out


# ------------------------------------------------------------------------ MultiSosFilter


@pytest.mark.parametrize("fs", RATES)
def test_multi_filter_matches_scipy_sosfilt_on_random_block_splits(fs: int) -> None:
    # A and C on one kernel (C padded with identity sections where it is shorter: 44.1, 48,
    # 96 and 192 kHz). Reference and tolerances as for SosFilter above: scipy.signal.sosfilt
    # in one call, 2e-12 of the largest output at 44.1 and 48 kHz, 1e-10 elsewhere
    soss = [design_sos("A", fs), design_sos("C", fs)]
    rng = np.random.default_rng(fs)
    tol = 2e-12 if fs in (44100, 48000) else 1e-10
    for name, x in _signals(3 * 16384 + 77, fs).items():
        cuts = sorted(rng.integers(0, x.size, 12).tolist() + [x.size - 300, x.size - 299])
        f = MultiSosFilter(soss)
        edges = [0, *cuts, x.size]
        parts = [f.process(x[a:b]) for a, b in zip(edges[:-1], edges[1:], strict=True)]
        assert f.block_path == [True, True]
        for j, sos in enumerate(soss):
            got = np.concatenate([p[j] for p in parts])
            ref = signal.sosfilt(sos, x)
            assert got.shape == ref.shape
            dev = np.max(np.abs(got - ref)) / np.max(np.abs(ref))
            assert dev <= tol, (name, j, dev)


@pytest.mark.parametrize("fs", RATES)
def test_multi_filter_equals_one_filter_per_cascade(fs: int) -> None:
    # the same sections and realisation as SosFilter: the same output up to the rounding of
    # a different grouping of the products (1e-14 of the output, common practice, no source);
    # every cascade passes the first-use probe with the margin SosFilter has
    soss = [design_sos("A", fs), design_sos("C", fs)]
    x = np.random.default_rng(7).standard_normal(70001)
    multi = MultiSosFilter(soss)
    outs = multi.process(x)
    assert np.all(bf._probe_cascades(multi._kernel, soss) < 1e-12)
    for sos, y in zip(soss, outs, strict=True):
        one = SosFilter(sos).process(x)
        assert np.max(np.abs(y - one)) <= 1e-14 * np.max(np.abs(one))


def test_identity_padding_leaves_the_output_unchanged() -> None:
    sos = design_sos("C", 48000)
    padded = bf._pad_sections(sos, 5)
    assert padded.shape == (5, 6)
    np.testing.assert_array_equal(padded[:3], sos)
    x = np.random.default_rng(8).standard_normal(3000)
    np.testing.assert_array_equal(signal.sosfilt(padded, x), signal.sosfilt(sos, x))


def test_multi_filter_cascade_failing_the_probe_uses_sosfilt(monkeypatch: pytest.MonkeyPatch
                                                             ) -> None:
    # one cascade fails its probe: it runs on sosfilt, the other stays on a kernel of its own
    monkeypatch.setattr(bf, "_probe_cascades", lambda kernel, soss: np.array([0.0, math.inf]))
    soss = [design_sos("A", 48000), design_sos("C", 48000)]
    x = np.random.default_rng(9).standard_normal(20000)
    f = MultiSosFilter(soss)
    parts = [f.process(x[a:b]) for a, b in ((0, 7000), (7000, 7001), (7001, 20000))]
    assert f.block_path == [True, False]
    assert f._kernel is not None and f._kernel.n_bands == 1
    for j, sos in enumerate(soss):
        got = np.concatenate([p[j] for p in parts])
        ref = signal.sosfilt(sos, x)
        assert np.max(np.abs(got - ref)) <= 2e-12 * np.max(np.abs(ref))


def test_multi_filter_reset_empty_blocks_and_bad_input() -> None:
    soss = [design_sos("A", 48000), design_sos("C", 48000)]
    f = MultiSosFilter(soss)
    assert [y.size for y in f.process(np.zeros(0))] == [0, 0]
    assert f.block_path is None  # no sample yet
    x = np.random.default_rng(10).standard_normal(5000)
    first = f.process(x)
    f.reset()
    again = f.process(x)
    for a, b in zip(first, again, strict=True):
        np.testing.assert_array_equal(a, b)
    with pytest.raises(SettingsError, match="none"):
        MultiSosFilter([])
    with pytest.raises(SettingsError, match="shape"):
        MultiSosFilter([soss[0], np.ones((2, 5))])


def test_probe_verdicts_are_reused_for_the_same_computation(monkeypatch: pytest.MonkeyPatch
                                                           ) -> None:
    # a second kernel of the same sections takes the first one's verdict; other sections, or
    # the same sections in another realisation, are probed; callers get copies
    monkeypatch.setattr(bf, "_PROBE_CACHE", {})
    calls = []

    def probe(kernel, soss):
        calls.append(len(soss))
        return bf._probe_cascades(kernel, soss)

    a, c = design_sos("A", 48000), design_sos("C", 48000)
    first = bf.probe_once(probe, bf._BlockKernel([a], realise=bf._cascade_state_space), [a])
    first[0] = 99.0  # a copy: the kept verdict is unchanged
    again = bf.probe_once(probe, bf._BlockKernel([a], realise=bf._cascade_state_space), [a])
    assert calls == [1] and again[0] < 1e-12
    bf.probe_once(probe, bf._BlockKernel([c], realise=bf._cascade_state_space), [c])
    bf.probe_once(probe, bf._BlockKernel([a]), [a])  # sosfilt's realisation: another computation
    assert calls == [1, 1, 1]
    # the cache is bounded
    monkeypatch.setattr(bf, "_PROBE_CACHE_SIZE", 2)
    c4 = bf._pad_sections(c, a.shape[0])
    bf.probe_once(probe, bf._BlockKernel([a, c4]), [a, c4])
    assert len(bf._PROBE_CACHE) == 2 and calls == [1, 1, 1, 2]


def test_multi_filters_of_the_same_sections_probe_once(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(bf, "_PROBE_CACHE", {})
    calls = []
    real = bf._probe_cascades
    monkeypatch.setattr(bf, "_probe_cascades", lambda k, s: calls.append(1) or real(k, s))
    x = np.random.default_rng(10).standard_normal(5000)
    outs = [MultiSosFilter([design_sos("A", 44100)]).process(x)[0] for _ in range(3)]
    assert len(calls) == 1
    ref = signal.sosfilt(design_sos("A", 44100), x)
    for y in outs:
        assert np.max(np.abs(y - ref)) <= 2e-12 * np.max(np.abs(ref))


def test_kernels_of_the_same_sections_share_their_matrices(monkeypatch: pytest.MonkeyPatch
                                                          ) -> None:
    # a second kernel of the same computation takes the first one's matrices (read-only) and
    # filters as sosfilt does (scipy.signal.sosfilt as the reference); other sections, or
    # another realisation, build their own; the cache is bounded
    monkeypatch.setattr(bf, "_KERNEL_PARTS", {})
    a, c = design_sos("A", 48000), design_sos("C", 48000)
    c4 = bf._pad_sections(c, a.shape[0])
    first = bf._BlockKernel([a, c4], realise=bf._cascade_state_space)
    second = bf._BlockKernel([a, c4], realise=bf._cascade_state_space)
    assert second.step is first.step and second.final is first.final
    assert not second.step.flags.writeable
    assert bf._BlockKernel([a, c4]).step is not first.step  # sosfilt's realisation
    assert bf._BlockKernel([c4, a], realise=bf._cascade_state_space).step is not first.step
    x = np.random.default_rng(12).standard_normal(70000)
    for kernel in (first, second):
        state = np.zeros((2, kernel.n_states))
        out = np.empty((2, kernel.padded_length(x.size)))
        kernel.process(x, state, out)
        for row, sos in zip(out, (a, c), strict=True):
            ref = signal.sosfilt(sos, x)
            assert np.max(np.abs(row[: x.size] - ref)) <= 2e-12 * np.max(np.abs(ref))
    monkeypatch.setattr(bf, "_KERNEL_PARTS_SIZE", 2)
    bf._BlockKernel([a])
    assert len(bf._KERNEL_PARTS) == 2
