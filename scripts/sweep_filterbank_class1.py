"""Exhaustive time-domain check of every band against the IEC 61260-1 class 1 limits.

For each sample rate and bandwidth designator, every band of the default set (and, with
``--low``, the one-third-octave bands down to 1 Hz) is measured through the real streaming
path: steady sines are fed through ``FractionalOctaveBank.process`` (a bank restricted to the
band, which runs exactly the same decimators and band filter as the full bank), the band
output's mean square is read after the start-up transient (Hann-weighted, so a window that is
not an integer number of periods does not bias it), averaged over two input phases (so a tone
folding onto 0 Hz or the output Nyquist frequency is not read low), and converted to
attenuation. Test frequencies per band: every breakpoint on both sides, a dense grid between
consecutive breakpoints, a log grid from ``G**4`` up to ``fs/2``, a tone at 0.499 fs, and the
tones that fold exactly onto the mid-band frequency through the decimators.

The limits are those of REFERENCE_VALUES.md 5.2 (IEC 61260-1:2014 Table 1, class 1; the
``G**(1/2)`` row from memory), applied exactly at each breakpoint and as the staircase envelope
in between; the attenuation is checked both as absolute attenuation (reference attenuation =
the 0 dB design goal) and relative to the band's own measured mid-band attenuation.

Usage::

    .venv/bin/python scripts/sweep_filterbank_class1.py [--fs 44100 48000 96000] [--b 1 3]
        [--per-interval 8] [--low] [--stride 1]
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from bandmeter.bands import Band, G, band_set  # noqa: E402
from bandmeter.filterbank import HALFBAND_TAPS, FractionalOctaveBank, class1_limits  # noqa: E402

BP_EXPONENTS = (0.0, 0.125, 0.25, 0.375, 0.5, 1.0, 2.0, 3.0, 4.0)


def breakpoints(b: int) -> np.ndarray:
    """IEC 61260-1:2014 Annex F mapping of the octave breakpoints (REFERENCE_VALUES.md 5.2)."""
    omega1 = G ** np.asarray(BP_EXPONENTS)
    return 1.0 + (G ** (1.0 / (2 * b)) - 1.0) / (G**0.5 - 1.0) * (omega1 - 1.0)


def test_frequencies(band: Band, fs: float, factor: int, per_interval: int) -> np.ndarray:
    bp = breakpoints(band.b)
    up = [bp]
    for lo, hi in zip(bp[:-1], bp[1:], strict=True):
        up.append(np.geomspace(lo, hi, per_interval + 2)[1:-1])
    om = np.concatenate(up)
    om = np.concatenate([om, 1.0 / om[1:]])
    freqs = list(om * band.exact_hz)
    top = 0.499 * fs
    if bp[-1] * band.exact_hz < top:
        freqs += list(np.geomspace(bp[-1] * band.exact_hz, top, 12))
    freqs += list(np.geomspace(band.exact_hz / bp[-1] / 50.0, band.exact_hz / bp[-1], 4))
    freqs += alias_frequencies(band.exact_hz, fs, factor)
    f = np.asarray(freqs)
    return np.unique(f[(f > 0) & (f < 0.5 * fs)])


def alias_frequencies(fm: float, fs: float, factor: int) -> list[float]:
    """Tones that fold exactly onto ``fm`` at the band's rate, near each decimator's edges."""
    rate = fs / factor
    out = []
    k = int(round(math.log2(factor)))
    for i in range(k):
        r_in = fs / 2**i
        for edge in (0.25 * r_in, 0.3125 * r_in, 0.5 * r_in):
            for sign in (1.0, -1.0):
                n = math.floor((edge - sign * fm) / rate)
                for nn in (n, n + 1):
                    f = nn * rate + sign * fm
                    if 0.0 < f < 0.5 * fs and abs(f - fm) > 1e-9:
                        out.append(f)
    return out


def settle_seconds(bank: FractionalOctaveBank, tol: float) -> float:
    sos = bank.band_sos[0]
    radius = max(np.max(np.abs(np.roots(section[3:]))) for section in sos)
    band_s = math.log(tol) / math.log(radius) / bank.rates_hz[0]
    dec_s = len(HALFBAND_TAPS) * (bank.factors[0] - 1) / bank.fs
    return band_s + dec_s


def attenuation_db(bank: FractionalOctaveBank, f_hz: float, settle_s: float, window: int) -> float:
    """Measured attenuation (dB) of the single band of ``bank`` for a unit-amplitude sine.

    Two input phases (sine and cosine, readings averaged) for tones that may fold through the
    decimators (above 0.375 of the band's rate) or span few cycles of the window.
    """
    fs, rate = bank.fs, bank.rates_hz[0]
    n_out = math.ceil(settle_s * rate) + window
    n_in = n_out * bank.factors[0] + 64
    t = np.arange(n_in) / fs
    w = np.hanning(window + 2)[1:-1]
    ms = []
    two = f_hz > 0.375 * rate or f_hz / rate * window < 20.0
    for phase in (0.0, math.pi / 2) if two else (0.0,):
        bank.reset()
        y = bank.process(np.sin(2 * np.pi * f_hz * t + phase))[0]
        tail = y[y.size - window :]
        ms.append(float(np.dot(w, tail * tail) / w.sum()))
    return -10.0 * math.log10(max(np.mean(ms), 1e-300) / 0.5)


def check_band(fs: float, band: Band, full: FractionalOctaveBank, per_interval: int) -> dict:
    bank = FractionalOctaveBank(fs, band.b, fmin_hz=band.exact_hz, fmax_hz=band.exact_hz)
    i_full = full.bands.index(band) if band in full.bands else None
    if i_full is not None:
        if bank.factors[0] != full.factors[i_full] or not np.array_equal(
            bank.band_sos[0], full.band_sos[i_full]
        ):
            raise RuntimeError(f"restricted bank differs from the full bank for {band.label}")
    settle = settle_seconds(bank, 1e-6)
    window = 128
    att_mid = attenuation_db(bank, band.exact_hz, settle, window)
    worst_abs = (math.inf, None, None)
    worst_rel = (math.inf, None, None)
    worst_stop = (math.inf, None, None)
    freqs = test_frequencies(band, fs, bank.factors[0], per_interval)
    for f in freqs:
        att = attenuation_db(bank, f, settle, window)
        lower, upper = class1_limits(f / band.exact_hz, band.b)
        for value, name in ((att, "abs"), (att - att_mid, "rel")):
            margin = min(value - lower[0], upper[0] - value)
            if name == "abs" and margin < worst_abs[0]:
                worst_abs = (margin, f / band.exact_hz, value)
            if name == "rel" and margin < worst_rel[0]:
                worst_rel = (margin, f / band.exact_hz, value)
            if name == "abs" and lower[0] >= 16.6 and margin < worst_stop[0]:
                worst_stop = (margin, f / band.exact_hz, value)
    return {
        "band": band,
        "factor": bank.factors[0],
        "n": len(freqs),
        "mid_gain_db": -att_mid,
        "worst_abs": worst_abs,
        "worst_rel": worst_rel,
        "worst_stop": worst_stop,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fs", type=float, nargs="+", default=[44100.0, 48000.0, 96000.0])
    parser.add_argument("--b", type=int, nargs="+", default=[1, 3])
    parser.add_argument("--per-interval", type=int, default=8)
    parser.add_argument("--low", action="store_true", help="1/3-octave bands down to 1 Hz too")
    parser.add_argument(
        "--stride", type=int, default=1, help="check every n-th band (plus the first and last)"
    )
    args = parser.parse_args()
    for fs in args.fs:
        for b in args.b:
            t0 = time.perf_counter()
            full = FractionalOctaveBank(fs, b)
            bands = list(full.bands)
            if args.low and b == 3:
                bands = band_set(3, 1.0, bands[0].nominal_hz)[:-1] + bands
                full = FractionalOctaveBank(fs, 3, fmin_hz=1.0)
            if args.stride > 1:
                keep = set(range(0, len(bands), args.stride)) | {len(bands) - 1}
                bands = [band for i, band in enumerate(bands) if i in keep]
            results = []
            for band in bands:
                results.append(check_band(fs, band, full, args.per_interval))
                r = results[-1]
                print(
                    f"    {band.label:>6s} x{r['factor']:<5d} {r['n']:4d} tones  "
                    f"abs {r['worst_abs'][0]:+.3f} @ {r['worst_abs'][1]:.4f}  "
                    f"rel {r['worst_rel'][0]:+.3f}  stop {r['worst_stop'][0]:+.2f} "
                    f"@ {r['worst_stop'][1]:.4f}  mid {r['mid_gain_db']:+.4f} dB",
                    flush=True,
                )
            worst = min(results, key=lambda r: r["worst_abs"][0])
            worst_rel = min(results, key=lambda r: r["worst_rel"][0])
            gains = [abs(r["mid_gain_db"]) for r in results]
            n_tones = sum(r["n"] for r in results)
            print(
                f"fs={fs:g} b={b}: {len(results)} bands, {n_tones} tones, "
                f"{time.perf_counter() - t0:.0f} s; dropped: "
                f"{[d.label for d in full.dropped]}"
            )
            m, om, val = worst["worst_abs"]
            print(
                f"  worst absolute margin {m:+.3f} dB in band {worst['band'].label} "
                f"(factor {worst['factor']}) at f/fm = {om:.5f} (attenuation {val:.3f} dB)"
            )
            m, om, val = worst_rel["worst_rel"]
            print(
                f"  worst relative margin {m:+.3f} dB in band {worst_rel['band'].label} "
                f"at f/fm = {om:.5f} (relative attenuation {val:.3f} dB)"
            )
            worst_stop = min(results, key=lambda r: r["worst_stop"][0])
            m, om, val = worst_stop["worst_stop"]
            print(
                f"  worst stop-band margin (limit >= 16.6 dB) {m:+.3f} dB in band "
                f"{worst_stop['band'].label} at f/fm = {om:.5f} (attenuation {val:.2f} dB)"
            )
            print(f"  largest |mid-band gain error| {max(gains):.4f} dB")
            for r in results:
                if r["worst_abs"][0] < 0 or r["worst_rel"][0] < 0:
                    print(f"  FAIL {r['band'].label}: {r['worst_abs']} {r['worst_rel']}")


if __name__ == "__main__":
    main()
