"""Accuracy sweep of the digital A and C weighting filters (bandmeter.weighting).

Prints, per common sample rate: sections, worst dB error against the analytic IEC 61672-1
formula, the error at 20 kHz, the margin to the IEC 61672-1:2002 class 1 tolerance limits at the
nominal one-third-octave frequencies below Nyquist (and to those limits narrowed by 0.4 dB, a
stricter 2013-style reading, for information), and design time. Then sweeps many sample rates
(log-spaced plus rates that put a nominal frequency just below Nyquist) for stability, minimum
phase and the class 1 limits, reports the C-weighted peak of single-cycle transients against an
analogue simulation, and times the filter.

Run: ``.venv/bin/python scripts/weighting_accuracy.py [--quick]`` (about 1 min in full).
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy import signal

from bandmeter import weighting as wt

COMMON_RATES_HZ = (8000, 11025, 16000, 22050, 32000, 44100, 48000, 88200, 96000, 176400, 192000)

# Exact one-third-octave frequencies 1000 * 10^(0.1 (n - 30)), n = 10..43 (IEC 61672-1).
EXACT_HZ = 1000.0 * 10.0 ** (0.1 * (np.arange(10, 44) - 30))

# IEC 61672-1:2002 class 1 tolerance limits including the maximum expanded uncertainty
# (GOST 17187-2010 Table 2; REFERENCE_VALUES.md 1.2), (upper, lower) dB, n = 10..43.
CLASS1_LIMITS_DB = [
    (3.5, -np.inf), (3.0, -np.inf), (2.5, -4.5), (2.5, -2.5), (2.5, -2.0), (2.0, -2.0),
    (1.5, -1.5), (1.5, -1.5), (1.5, -1.5), (1.5, -1.5), (1.5, -1.5), (1.5, -1.5),
    (1.5, -1.5), (1.5, -1.5), (1.4, -1.4), (1.4, -1.4), (1.4, -1.4), (1.4, -1.4),
    (1.4, -1.4), (1.4, -1.4), (1.1, -1.1), (1.4, -1.4), (1.6, -1.6), (1.6, -1.6),
    (1.6, -1.6), (1.6, -1.6), (1.6, -1.6), (2.1, -2.1), (2.1, -2.6), (2.1, -3.1),
    (2.6, -3.6), (3.0, -6.0), (3.5, -17.0), (4.0, -np.inf),
]  # fmt: skip
STRICTER_DB = 0.4


def error_db(weighting: str, f_hz: np.ndarray, fs: float) -> np.ndarray:
    """Digital (scipy sosfreqz of design_sos) minus analytic response, dB."""
    _, h = signal.sosfreqz(wt.design_sos(weighting, fs), worN=f_hz, fs=fs)
    return 20 * np.log10(np.abs(h)) - wt.analytic_response_db(weighting, f_hz)


def class1_margins(weighting: str, fs: float) -> tuple[float, float, float]:
    """(worst |error| at nominal frequencies, class 1 margin, 2013-style margin), dB."""
    keep = EXACT_HZ < fs / 2
    err = error_db(weighting, EXACT_HZ[keep], fs)
    upper = np.array([u for u, _ in CLASS1_LIMITS_DB])[keep]
    lower = np.array([lo for _, lo in CLASS1_LIMITS_DB])[keep]
    margin = np.minimum(upper - err, err - lower)
    return float(np.max(np.abs(err))), float(margin.min()), float(margin.min() - STRICTER_DB)


def min_phase_stable(weighting: str, fs: float) -> tuple[float, float]:
    """(largest |pole|, largest |zero| other than the DC zeros)."""
    z, p, _ = signal.sos2zpk(wt.design_sos(weighting, fs))
    z_other = z[np.abs(z - 1.0) > 1e-6]
    return float(np.max(np.abs(p))), float(np.max(np.abs(z_other), initial=0.0))


def table_common_rates() -> None:
    """One line per rate: for A then C, sections, max |e| to 16 kHz, e(20k), max |e| nominal."""
    print(
        "Error = digital - analytic, dB. max|e|: 10 Hz..min(16 kHz, 0.98 fs/2), dense log grid;"
        " e(20k): at 19952.6 Hz;\nnominal: worst |e| at the exact one-third-octave frequencies"
        " below fs/2; margin: smallest (class 1 limit - e)\nover those frequencies "
        "(IEC 61672-1:2002 limits incl. uncertainty; 2013-style = 0.4 dB less).\n"
    )
    print(
        "  fs (Hz) | A: sect  max|e|   e(20k)    nominal | C: sect  max|e|   e(20k)    nominal"
        " | margin (2013-style) | design ms A/C"
    )
    for fs in COMMON_RATES_HZ:
        cells, margins, times = [], [], []
        for weighting in "AC":
            wt._design_cached.cache_clear()
            t0 = time.perf_counter()
            n_sect = wt.design_sos(weighting, fs).shape[0]
            times.append(1e3 * (time.perf_counter() - t0))
            f = np.geomspace(10, min(16000.0, 0.98 * fs / 2), 5000)
            e_band = np.max(np.abs(error_db(weighting, f, fs)))
            e20 = error_db(weighting, np.array([19952.62]), fs)[0] if fs > 40000 else np.nan
            e_nom, m1, m13 = class1_margins(weighting, fs)
            margins += [m1, m13]
            e20s = f"{e20:+.5f}" if np.isfinite(e20) else "    -   "
            cells.append(f"{n_sect:5d}   {e_band:.5f}  {e20s}  {e_nom:.5f}")
        print(
            f"  {fs:7d} | "
            + " | ".join(cells)
            + f" | {min(margins[0::2]):.3f} ({min(margins[1::2]):.3f})     "
            + f"| {times[0]:4.0f} / {times[1]:3.0f}"
        )


def sweep(n_rates: int) -> None:
    rates = np.geomspace(wt.FS_MIN_HZ, wt.FS_MAX_HZ, n_rates)
    # nominal frequency just below Nyquist: the hardest case for the near-Nyquist response
    edge = 2 * EXACT_HZ * 1.0005
    rates = np.unique(np.r_[rates, edge[(edge >= wt.FS_MIN_HZ) & (edge <= wt.FS_MAX_HZ)]])
    worst = {"A": [0.0, np.inf, 0.0, 0.0, 0.0], "C": [0.0, np.inf, 0.0, 0.0, 0.0]}
    count = {"A": {}, "C": {}}
    for fs in rates:
        for weighting in "AC":
            wt._design_cached.cache_clear()
            t0 = time.perf_counter()
            n_sect = wt.design_sos(weighting, fs).shape[0]
            ms = 1e3 * (time.perf_counter() - t0)
            count[weighting][n_sect] = count[weighting].get(n_sect, 0) + 1
            f = np.geomspace(10, min(16000.0, 0.98 * fs / 2), 1500)
            e_band = np.max(np.abs(error_db(weighting, f, fs)))
            _, m1, _ = class1_margins(weighting, fs)
            pmax, zmax = min_phase_stable(weighting, fs)
            w = worst[weighting]
            w[:] = [
                max(w[0], e_band),
                min(w[1], m1),
                max(w[2], pmax),
                max(w[3], zmax),
                max(w[4], ms),
            ]
    print(f"\nSweep over {len(rates)} rates from 8 to 192 kHz:")
    for weighting in "AC":
        w = worst[weighting]
        print(
            f"  {weighting}: worst max|e| (10 Hz..min(16 kHz, 0.98 fs/2)) {w[0]:.5f} dB, "
            f"smallest class-1 margin {w[1]:.3f} dB, largest |pole| {w[2]:.6f}, "
            f"largest |zero| off DC {w[3]:.5f}, slowest design {w[4]:.0f} ms, "
            f"sections used {dict(sorted(count[weighting].items()))}"
        )


def c_peak_db(y: np.ndarray, steady_gain: float) -> float:
    """LCpeak - LC: peak of |y| relative to the rms of the steady weighted sine (amplitude 1)."""
    return float(20 * np.log10(np.max(np.abs(y)) * np.sqrt(2) / steady_gain))


def burst(f_hz: float, cycles: float, t: np.ndarray) -> np.ndarray:
    return np.where(t <= cycles / f_hz + 1e-12, np.sin(2 * np.pi * f_hz * t), 0.0)


def c_peak_table() -> None:
    z, p, k = wt.analog_zpk("C")
    analog = signal.ZerosPolesGain(z, p, k).to_ss()
    print(
        "\nC-weighted peak minus LC (dB), REFERENCE_VALUES.md 3 analogue: 3.46 (8 kHz cycle), "
        "2.33 (500 Hz half cycle)"
    )
    for f_hz, cycles in ((8000.0, 1.0), (500.0, 0.5)):
        gain = abs(wt.analog_response("C", f_hz))
        t = np.arange(0, cycles / f_hz + 3e-3, 1 / (f_hz * 4000))
        ref = c_peak_db(signal.lsim(analog, burst(f_hz, cycles, t), t)[1], gain)
        print(f"  {f_hz:.0f} Hz x {cycles}: analogue (ideal burst) {ref:.4f}")
        for fs in (44100, 48000, 96000, 192000):
            n = np.arange(int(0.01 * fs))
            x = np.r_[np.zeros(256), burst(f_hz, cycles, n / fs)]
            y = wt.WeightingFilter("C", fs).process(x)
            # peak read after 16x band-limited (FFT) oversampling
            dig = c_peak_db(signal.resample(y, 16 * y.size), gain)
            # the same sampled burst, band-limited interpolated to ~3 MHz, through the analogue
            # filter: isolates the filter from the ideal burst's spectrum above Nyquist
            up = 3_000_000 // fs
            xu = signal.resample(x, up * x.size)
            tu = np.arange(xu.size) / (fs * up)
            same_input = c_peak_db(signal.lsim(analog, xu, tu)[1], gain)
            print(
                f"    fs {fs:6d}: digital {dig:.4f} (vs ideal {dig - ref:+.4f}); analogue of the "
                f"sampled burst {same_input:.4f} (digital vs it {dig - same_input:+.4f})"
            )


def speed() -> None:
    x = np.random.default_rng(1).standard_normal(48000 * 20)
    print("\nFilter time (sosfilt, blocks of 65536 samples):")
    for weighting in "ZAC":
        filt = wt.WeightingFilter(weighting, 48000)
        t0 = time.perf_counter()
        for i in range(0, x.size, 65536):
            filt.process(x[i : i + 65536])
        ns = 1e9 * (time.perf_counter() - t0) / x.size
        print(
            f"  {weighting}: {filt.sos.shape[0]} sections, {ns:.1f} ns/sample, "
            f"{ns * 1e-9 * 48000 * 86400:.0f} s per 24 h at 48 kHz"
        )


def main() -> None:
    quick = "--quick" in sys.argv
    print(
        f"f1..f4 = {wt.F1_HZ:.6f}, {wt.F2_HZ:.5f}, {wt.F3_HZ:.5f}, {wt.F4_HZ:.3f} Hz; "
        f"A1000 = {wt.A1000_DB:.4f} dB, C1000 = {wt.C1000_DB:.4f} dB\n"
    )
    table_common_rates()
    sweep(40 if quick else 300)
    c_peak_table()
    speed()


if __name__ == "__main__":
    main()
