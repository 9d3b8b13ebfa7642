"""Compare the block state-space kernel of the filter bank with scipy's sosfilt, every band.

For every sample rate and bandwidth designator given, a bank from 1 Hz up is built and each
band filter is run on seeded white noise (at the band's own rate) by the block path
(``bandmeter.filterbank._BlockKernel``, in the groups the bank uses) and by the reference,
``scipy.signal.sosfilt`` with the same second-order sections. The noise is fed in three
blocks of uneven length (a partial frame and a partial sub-frame included) with the state
carried. Printed per configuration: the number of bands, how many the construction probe left
on the sosfilt path, and the largest deviation relative to the band output's RMS and to its
largest magnitude.

Usage::

    .venv/bin/python scripts/check_filterbank_block_kernel.py [--fs 44100 48000 96000]
        [--b 1 3 6 12 24] [--frames 12]
"""

from __future__ import annotations

import argparse

import numpy as np
from scipy import signal

from bandmeter.filterbank import FractionalOctaveBank, _StagePlan


def check_group(soss: list[np.ndarray], kernel, x: np.ndarray, cuts: list[int]) -> np.ndarray:
    """Return ``(dev_rms, dev_max)`` rows (one per band) of the kernel against sosfilt."""
    state = np.zeros((len(soss), kernel.n_states))
    parts = []
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        out = np.empty((len(soss), kernel.padded_length(b - a)))
        kernel.process(x[a:b], state, out)
        parts.append(out[:, : b - a].copy())
    got = np.concatenate(parts, axis=1)
    devs = []
    for j, sos in enumerate(soss):
        ref = signal.sosfilt(sos, x)  # reference: scipy's public sosfilt
        err = np.max(np.abs(got[j] - ref))
        devs.append((err / np.sqrt(np.mean(ref**2)), err / np.max(np.abs(ref))))
    return np.array(devs)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fs", type=float, nargs="+", default=[44100.0, 48000.0, 96000.0])
    parser.add_argument("--b", type=int, nargs="+", default=[1, 3, 6, 12, 24])
    parser.add_argument("--frames", type=int, default=80, help="signal length in frames")
    args = parser.parse_args()
    rng = np.random.default_rng(2014)
    worst = 0.0
    for fs in args.fs:
        for b in args.b:
            bank = FractionalOctaveBank(fs, b, fmin_hz=1.0)
            n_bands = n_single = 0
            dev = np.zeros((0, 2))
            for members in bank._by_stage:
                soss = [bank._filters[i].sos for i in members]
                plan = _StagePlan(soss)
                n_bands += len(soss)
                n_single += len(plan.singles)
                for idx, _, kernel in plan.groups:
                    frame = kernel.frame_for(1 << 62)
                    length = args.frames * frame + kernel.sub + 5
                    x = rng.standard_normal(length)
                    # a long block (long frames), a short one (short frames), a tail
                    cuts = [0, 64 * frame + 3, length - kernel.sub - 3, length]
                    dev = np.vstack([dev, check_group([soss[j] for j in idx], kernel, x, cuts)])
            worst = max(worst, float(dev.max()))
            print(
                f"fs {fs:7g} Hz, 1/{b:<2d} octave: {n_bands:3d} bands, {n_single} on sosfilt; "
                f"max deviation {dev[:, 0].max():.2e} of RMS, {dev[:, 1].max():.2e} of max |y|"
            )
    print(f"largest deviation: {worst:.2e}")


if __name__ == "__main__":
    main()
