"""Benchmark and accuracy sweep of bandmeter.peak.TruePeakMeter.

Speed: cost of the true-peak meter (ns per sample) and relative to one pass of a 6-section
``sosfilt`` (with state, in the same blocks) and to a plain ``np.max(np.abs(x))``, on 60 s at
48 kHz of pink noise, a 1 kHz tone and, for information, white noise, speech-like noise and
steady tones of 2, 4 and 8 kHz. Timings are the minimum of several interleaved runs (the
machine may be shared). With ``--recording`` the meter instead runs as in the level engine's
analysis: on a WAV file's samples (Z) and on its C-weighted signal, in blocks of 2**17
samples with 1 s intervals (e.g. the recording ``scripts/bench_levels.py`` makes).

``--save FILE`` writes the ns-per-sample figures as JSON; ``--baseline FILE`` prints each
signal's figure against a saved one (saved / now: above 1 is faster now). Compare only
figures taken on the same machine in the same conditions; for changes of a few per cent,
run the old and the new code interleaved in one process instead.

Accuracy: under-read of the meter for sines above 0.8 x Nyquist (where no guarantee beyond
the sample peak is given), steady and as 24-sample bursts in the middle of 0.1 s of silence
(away from the signal's edges, where only sample values count), worst case over random
phases.

Usage::

    .venv/bin/python scripts/bench_peak.py [--seconds 60] [--repeats 5]
    .venv/bin/python scripts/bench_peak.py --recording rec.wav --save peak.json
    .venv/bin/python scripts/bench_peak.py --recording rec.wav --baseline peak.json
"""

from __future__ import annotations

import argparse
import json
import time
from collections.abc import Callable

import numpy as np
from scipy import signal

from bandmeter.intervals import IntervalPlan
from bandmeter.peak import TruePeakMeter, true_peak

FS = 48000
BLOCK = 1 << 17  # the level engine's analysis blocks (bandmeter.engine.ANALYSIS_BLOCK_FRAMES)


def pink_noise(n: int, rng: np.random.Generator) -> np.ndarray:
    spectrum = np.fft.rfft(rng.standard_normal(n))
    f = np.fft.rfftfreq(n, 1 / FS)
    f[0] = f[1]
    x = np.fft.irfft(spectrum / np.sqrt(f), n)
    return x / x.std()


def speech_like(n: int, rng: np.random.Generator) -> np.ndarray:
    """Pink noise band-passed 100 Hz - 4 kHz, 4 Hz syllabic modulation, pauses."""
    sos = signal.butter(4, [100, 4000], btype="bandpass", fs=FS, output="sos")
    carrier = signal.sosfilt(sos, pink_noise(n, rng))
    t = np.arange(n) / FS
    syllables = np.clip(np.sin(2 * np.pi * 4 * t), 0, None) ** 2
    pauses = np.repeat(rng.random(n // FS + 1) > 0.3, FS)[:n]
    return carrier * syllables * pauses


def signals(seconds: float) -> dict[str, np.ndarray]:
    n = int(seconds * FS)
    rng = np.random.default_rng(1)
    t = np.arange(n) / FS
    return {
        "pink noise": pink_noise(n, rng),
        "1 kHz tone": np.sin(2 * np.pi * 1000 * t + 0.1),
        "white noise": rng.standard_normal(n),
        "speech-like": speech_like(n, rng),
        "2 kHz tone": np.sin(2 * np.pi * 2000.3 * t + 0.1),
        "4 kHz tone": np.sin(2 * np.pi * 4000.3 * t + 0.1),
        "8 kHz tone": np.sin(2 * np.pi * 8000.3 * t + 0.1),
    }


def run_meter(x: np.ndarray, fs: float = FS) -> None:
    meter = TruePeakMeter(fs, IntervalPlan(int(fs)))  # 1 s intervals
    for i in range(0, x.size, BLOCK):
        meter.process(x[i : i + BLOCK])
        meter.completed()
    meter.finish()


SOS = signal.butter(12, 1000, fs=FS, output="sos")  # 6 second-order sections


def run_sosfilt(x: np.ndarray) -> None:
    zi = np.zeros((SOS.shape[0], 2))
    for i in range(0, x.size, BLOCK):
        _, zi = signal.sosfilt(SOS, x[i : i + BLOCK], zi=zi)


def run_absmax(x: np.ndarray) -> None:
    np.max(np.abs(x))


def best_times(x: np.ndarray, runs: list[Callable[[np.ndarray], None]], repeats: int) -> list:
    best = [np.inf] * len(runs)
    for _ in range(repeats):
        for j, fn in enumerate(runs):
            t0 = time.perf_counter()
            fn(x)
            best[j] = min(best[j], time.perf_counter() - t0)
    return best


def speed(seconds: float, repeats: int) -> dict[str, float]:
    """Print the speed table; return the meter's ns per sample per signal."""
    sigs = signals(seconds)
    # the sosfilt reference runs on pink noise: on signals with digital silence (the
    # speech-like pauses) its state decays into subnormal numbers and it runs far slower
    t_sos = best_times(sigs["pink noise"], [run_sosfilt], repeats)[0]
    t_sos_silence = best_times(sigs["speech-like"], [run_sosfilt], 1)[0]
    print(f"Speed, {seconds:g} s at {FS} Hz, blocks of {BLOCK}, min of {repeats} runs")
    print(f"one 6-section sosfilt pass (pink noise): {t_sos:.3f} s")
    print(f"(the same on the speech-like signal with digital silence: {t_sos_silence:.3f} s)")
    print(f"{'signal':<14} {'meter s':>8} {'ns/sample':>9} {'abs-max s':>9} {'/sosfilt':>8} "
          f"{'/abs-max':>8}")
    figures = {}
    for name, x in sigs.items():
        t_meter, t_absmax = best_times(x, [run_meter, run_absmax], repeats)
        figures[name] = 1e9 * t_meter / x.size
        print(
            f"{name:<14} {t_meter:8.3f} {figures[name]:9.2f} {t_absmax:9.3f} "
            f"{t_meter / t_sos:8.2f} {t_meter / t_absmax:8.1f}"
        )
    return figures


def speed_recording(path: str, repeats: int) -> dict[str, float]:
    """The meter as the level engine runs it, on a recording's Z and C-weighted signals."""
    import soundfile as sf

    from bandmeter.weighting import WeightingFilter

    x, fs = sf.read(path, dtype="float64", always_2d=True)
    x = np.ascontiguousarray(x[:, 0])
    weighting = WeightingFilter("C", fs)
    c = np.concatenate([weighting.process(x[i : i + BLOCK]) for i in range(0, x.size, BLOCK)])
    runs = [lambda s: run_meter(s, fs)]
    print(f"Speed on {path} ({x.size / fs:g} s at {fs:g} Hz), 1 s intervals, blocks of {BLOCK}, "
          f"min of {repeats} runs")
    figures = {}
    for name, signal_ in (("Z", x), ("C", c)):
        figures[name] = 1e9 * best_times(signal_, runs, repeats)[0] / signal_.size
        print(f"{name}: {figures[name]:.2f} ns per sample")
    return figures


def compare(figures: dict[str, float], baseline: str) -> None:
    with open(baseline) as f:
        saved = json.load(f)
    print(f"\nAgainst {baseline} (saved / now, above 1 is faster now)")
    for name, now in figures.items():
        if name in saved:
            print(f"{name:<14} {saved[name]:7.2f} -> {now:7.2f} ns/sample: {saved[name] / now:.2f}")


def accuracy_above_08_nyquist() -> None:
    print("\nUnder-read (dB) re the sine amplitude above 0.8 x Nyquist, worst of 200 phases")
    print(f"{'f / Nyquist':>11} {'steady':>8} {'24-sample burst':>16} {'its sample peak':>16}")
    rng = np.random.default_rng(0)
    for ratio in (0.8, 0.85, 0.9, 0.95, 0.98):
        f = ratio * FS / 2
        worst = [0.0, 0.0, 0.0]
        for phase in rng.uniform(0, 2 * np.pi, 200):
            steady = np.sin(2 * np.pi * f * np.arange(4800) / FS + phase)
            burst = np.zeros_like(steady)  # away from the edges (16 samples each)
            burst[2400:2424] = steady[:24]
            worst[0] = min(worst[0], 20 * np.log10(true_peak(steady, FS)))
            worst[1] = min(worst[1], 20 * np.log10(true_peak(burst, FS)))
            worst[2] = min(worst[2], 20 * np.log10(np.max(np.abs(burst))))
        print(f"{ratio:11.2f} {worst[0]:8.3f} {worst[1]:16.3f} {worst[2]:16.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=60.0)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--recording", help="time the engine's workload on this WAV file")
    parser.add_argument("--save", help="write the ns-per-sample figures to this JSON file")
    parser.add_argument("--baseline", help="compare with figures saved by --save")
    args = parser.parse_args()
    if args.recording:
        figures = speed_recording(args.recording, args.repeats)
    else:
        figures = speed(args.seconds, args.repeats)
        accuracy_above_08_nyquist()
    if args.save:
        with open(args.save, "w") as f:
            json.dump(figures, f, indent=1)
    if args.baseline:
        compare(figures, args.baseline)


if __name__ == "__main__":
    main()
