"""Benchmark the multirate fractional-octave bank against a plain full-rate bank.

Both banks filter the same synthetic white-noise signal in blocks and accumulate the mean
square of every band. The plain bank is what a user would write: one full-rate Butterworth
band-pass per band (same order and edges as the multirate bank's filters, also an order-3
variant) run with ``scipy.signal.sosfilt`` and carried ``zi``. The multirate bank is timed
three times: as shipped (the compiled stage kernel where it is built, ``bandmeter.compiled``),
on its NumPy paths (block state-space kernel for long stage blocks) and with the block path
switched off too (every band through scipy's sosfilt kernel, the bank's first path).
The A and C frequency weightings of the same signal are timed too, together
(``MultiWeightingFilter``, as the level engine uses them: compiled, or on one NumPy block
kernel) against two ``WeightingFilter`` on the NumPy paths.
Single-threaded BLAS is forced so the figures are for one core. The repeats of all variants
are interleaved and the fastest run of each counts, so that the ratios printed compare runs
made under the same machine load.

Usage::

    .venv/bin/python scripts/bench_filterbank.py [--fs 48000] [--b 3] [--seconds 60]
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402
from scipy import signal  # noqa: E402

import bandmeter.filterbank as fb  # noqa: E402
from bandmeter import compiled  # noqa: E402
from bandmeter.bands import G  # noqa: E402
from bandmeter.filterbank import ORDER, FractionalOctaveBank, effective_bandwidth_beta  # noqa: E402
from bandmeter.weighting import MultiWeightingFilter, WeightingFilter  # noqa: E402


def plain_bank(fs: float, bands: list, order: int) -> list[np.ndarray]:
    """Full-rate Butterworth band-passes with the multirate bank's design edges."""
    soss = []
    for band in bands:
        beta = effective_bandwidth_beta(band.b, order)
        q = G ** (beta / (2 * band.b))
        hi = min(band.exact_hz * q, 0.499 * fs)
        soss.append(
            signal.butter(order, [band.exact_hz / q, hi], btype="bandpass", fs=fs, output="sos")
        )
    return soss


def run_plain(x: np.ndarray, block: int, soss: list[np.ndarray]) -> tuple[float, np.ndarray]:
    zis = [np.zeros((s.shape[0], 2)) for s in soss]
    acc = np.zeros(len(soss))
    t0 = time.process_time()
    for start in range(0, x.size, block):
        blk = x[start : start + block]
        for i, sos in enumerate(soss):
            y, zis[i] = signal.sosfilt(sos, blk, zi=zis[i])
            acc[i] += np.dot(y, y)
    return time.process_time() - t0, acc / x.size


def run_bank(x: np.ndarray, block: int, bank: FractionalOctaveBank) -> tuple[float, np.ndarray]:
    bank.reset()
    acc = np.zeros(len(bank.bands))
    cnt = np.zeros(len(bank.bands))
    t0 = time.process_time()
    for start in range(0, x.size, block):
        for i, y in enumerate(bank.process(x[start : start + block])):
            acc[i] += np.dot(y, y)
            cnt[i] += y.size
    return time.process_time() - t0, acc / cnt


def run_bank_numpy(
    x: np.ndarray, block: int, bank: FractionalOctaveBank
) -> tuple[float, np.ndarray]:
    """:func:`run_bank` on the NumPy paths (the compiled kernels switched off)."""
    with compiled.numpy_only():
        return run_bank(x, block, bank)


def run_bank_sosfilt_only(
    x: np.ndarray, block: int, bank: FractionalOctaveBank
) -> tuple[float, np.ndarray]:
    """:func:`run_bank_numpy` with the block path switched off (all bands on sosfilt)."""
    saved = fb._BLOCK_MIN_SAMPLES
    fb._BLOCK_MIN_SAMPLES = 1 << 62
    try:
        return run_bank_numpy(x, block, bank)
    finally:
        fb._BLOCK_MIN_SAMPLES = saved


def run_weightings(x: np.ndarray, block: int, fs: float, together: bool,
                   numpy_only: bool) -> float:
    """CPU time of A and C weighting ``x`` in blocks: together, or a filter each."""
    if numpy_only:
        with compiled.numpy_only():
            return run_weightings(x, block, fs, together, numpy_only=False)
    if together:
        pair = MultiWeightingFilter(("A", "C"), fs)
        pair.process(x[:1])  # the first-use probe is not timed
        t0 = time.process_time()
        for start in range(1, x.size, block):
            pair.process(x[start : start + block])
        return time.process_time() - t0
    a, c = WeightingFilter("A", fs), WeightingFilter("C", fs)
    a.process(x[:1])
    c.process(x[:1])
    t0 = time.process_time()
    for start in range(1, x.size, block):
        blk = x[start : start + block]
        a.process(blk)
        c.process(blk)
    return time.process_time() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fs", type=float, default=48000.0, help="sample rate, Hz")
    parser.add_argument("--b", type=int, default=3, help="bandwidth designator")
    parser.add_argument("--seconds", type=float, default=60.0, help="signal duration, s")
    parser.add_argument("--block-s", type=float, default=1.0, help="block duration, s")
    parser.add_argument("--repeat", type=int, default=3, help="runs; the fastest counts")
    args = parser.parse_args()

    fs = args.fs
    x = np.random.default_rng(2024).standard_normal(int(args.seconds * fs))
    block = int(args.block_s * fs)
    t0 = time.process_time()
    bank = FractionalOctaveBank(fs, b=args.b)
    build = time.process_time() - t0
    plains = {
        f"plain order {ORDER}": plain_bank(fs, bank.bands, ORDER),
        "plain order 3": plain_bank(fs, bank.bands, 3),
    }
    runs: dict[str, Callable[[], tuple[float, np.ndarray]]] = {
        "multirate bank": lambda: run_bank(x, block, bank),
        "  NumPy paths": lambda: run_bank_numpy(x, block, bank),
        "  sosfilt only": lambda: run_bank_sosfilt_only(x, block, bank),
    }
    for name, soss in plains.items():
        runs[name] = lambda soss=soss: run_plain(x, block, soss)
    best = dict.fromkeys(runs, np.inf)
    means: dict[str, np.ndarray] = {}
    weigh = {"A+C together": (True, False), "A+C on one NumPy kernel": (True, True),
             "A, C one each (NumPy)": (False, True)}
    best_w = dict.fromkeys(weigh, np.inf)
    for _ in range(args.repeat):  # interleaved: every variant sees the same machine load
        for name, run in runs.items():
            elapsed, means[name] = run()
            best[name] = min(best[name], elapsed)
        if 8000 <= fs <= 192000:
            for name, (together, numpy_only) in weigh.items():
                best_w[name] = min(best_w[name],
                                   run_weightings(x, block, fs, together, numpy_only))
    print(
        f"fs = {fs:g} Hz, 1/{args.b} octave, {len(bank.bands)} bands "
        f"({bank.bands[0].label}..{bank.bands[-1].label} Hz), {args.seconds:g} s of noise, "
        f"blocks of {args.block_s:g} s, bank built in {build:.2f} s; as shipped: "
        f"{compiled.describe()}"
    )
    t_bank = best["multirate bank"]
    for name, elapsed in best.items():
        line = f"{name:15s}: {elapsed:7.3f} s  -> {args.seconds / elapsed:7.1f} x real time"
        if name != "multirate bank":
            line += f"; multirate is {elapsed / t_bank:.2f} x faster"
        print(line)
    for name in ("multirate bank", "  NumPy paths"):
        dev = np.max(np.abs(means[name] / means["  sosfilt only"] - 1.0))
        print(f"band mean squares, {name.strip()} vs sosfilt only: max relative difference "
              f"{dev:.1e}")
    if 8000 <= fs <= 192000:
        t_two = best_w["A, C one each (NumPy)"]
        for name in ("A+C together", "A+C on one NumPy kernel"):
            print(f"A and C weightings, {name}: {best_w[name]:.3f} s against a NumPy filter "
                  f"each {t_two:.3f} s (ratio {best_w[name] / t_two:.2f})")


if __name__ == "__main__":
    main()
