"""Held stages of the filter bank (``FractionalOctaveBank(hold_samples=...)``): later, not
different, output."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

import bandmeter.engine as engine
from bandmeter.engine import AnalysisSettings, analyse_array
from bandmeter.errors import SettingsError
from bandmeter.filterbank import HALFBAND_TAPS, FractionalOctaveBank

FS = 48000


def _run(bank: FractionalOctaveBank, x: np.ndarray, cuts: list[int]) -> list[np.ndarray]:
    """Whole output of each band for ``x`` fed in pieces at ``cuts``, drained at the end."""
    pieces: list[list[np.ndarray]] = [[] for _ in bank.bands]
    for lo, hi in zip([0, *cuts], [*cuts, x.size], strict=True):
        for j, y in enumerate(bank.process(x[lo:hi])):
            pieces[j].append(y)
    for j, y in enumerate(bank.drain()):
        pieces[j].append(y)
    return [np.concatenate(p) for p in pieces]


def test_held_stages_give_the_outputs_of_scipy_decimation_and_sosfilt():
    # reference (scipy, independent of the bank's kernels): each stage's input is the
    # previous one convolved with the half-band taps and every other sample kept
    # (output m = sum_k h[k] x[2m - k]), then the band's sections through
    # scipy.signal.sosfilt from the zero state
    rng = np.random.default_rng(7)
    x = rng.standard_normal(3 * 2**17 + 1234)
    bank = FractionalOctaveBank(FS, 3, 20, 20000, hold_samples=32768)
    cuts = list(range(2**17, x.size, 2**17))
    got = _run(bank, x, cuts)
    stage_input = [x]
    while len(stage_input) <= max(int(np.log2(f)) for f in bank.factors):
        v = stage_input[-1]
        stage_input.append(np.convolve(v, HALFBAND_TAPS)[: v.size : 2])
    for j, (sos, factor) in enumerate(zip(bank.band_sos, bank.factors, strict=True)):
        v = stage_input[int(np.log2(factor))]
        ref = signal.sosfilt(sos, v)
        assert got[j].size == ref.size, bank.bands[j].label
        # the block kernel's accuracy against sosfilt (bandmeter.blockfilter, _BLOCK_TOL),
        # with margin for the decimators' different summation order
        assert np.abs(got[j] - ref).max() <= 1e-10 * np.abs(ref).max(), bank.bands[j].label


def test_held_stages_do_not_depend_on_the_block_split():
    rng = np.random.default_rng(8)
    x = rng.standard_normal(400_000)
    plain = _run(FractionalOctaveBank(FS, 3, 20, 20000), x, [2**17, 2**18, 300_000])
    for cuts in ([], [1, 2, 3, 50_000], list(range(4096, x.size, 4096))):
        held = _run(FractionalOctaveBank(FS, 3, 20, 20000, hold_samples=32768), x, cuts)
        for a, b in zip(plain, held, strict=True):
            assert a.size == b.size
            assert np.abs(a - b).max() <= 1e-12 * np.abs(a).max()


def test_held_stages_wait_and_drain_delivers():
    bank = FractionalOctaveBank(FS, 3, 20, 20000, hold_samples=32768)
    first = bank.process(np.ones(2**17))
    # stage 3 (factor 8) got 16384 samples: held; stage 2 (factor 4) got 32768: ran
    sizes = {f: y.size for f, y in zip(bank.factors, first, strict=True)}
    assert sizes[1] == 2**17 and sizes[4] == 2**15 and sizes[8] == 0
    late = bank.drain()
    assert {f: y.size for f, y in zip(bank.factors, late, strict=True)}[8] == 2**14
    assert all(y.size == 0 for y in bank.drain())  # nothing left
    bank.reset()
    assert all(y.size == 0 for y in bank.drain())


@pytest.mark.parametrize("bad", [-1, 1.5, True, "8"])
def test_hold_samples_must_be_a_whole_number(bad):
    with pytest.raises(SettingsError, match="hold_samples"):
        FractionalOctaveBank(FS, 3, hold_samples=bad)


def test_engine_band_levels_are_those_of_an_unheld_bank(monkeypatch):
    # the engine holds the deep stages and drains them at the end: its band levels equal
    # those computed with every stage run at once (same filters, fed sooner)
    rng = np.random.default_rng(9)
    x = 0.1 * rng.standard_normal(int(7.3 * FS))
    st = AnalysisSettings(bands=3, interval_s=1.0)
    held_overall, held = analyse_array(x, FS, st, 100.0)
    monkeypatch.setattr(engine, "BANK_HOLD_SAMPLES", 0)
    plain_overall, plain = analyse_array(x, FS, st, 100.0)
    for a, b in zip([held_overall, *held], [plain_overall, *plain], strict=True):
        for ba, bb in zip(a.bands, b.bands, strict=True):
            assert ba.levels["LZeq"] == pytest.approx(bb.levels["LZeq"], abs=1e-9)
