"""Benchmark of the broadband level analysis: speed against baselines, memory against length.

Usage (from the project root)::

    .venv/bin/python scripts/bench_levels.py            # 10-minute and 60-minute files
    .venv/bin/python scripts/bench_levels.py --minutes 10 --bands   # with one-third octaves

In one run, for a synthetic 48 kHz 24-bit recording (pink noise with passing events) generated
into a temporary folder, it times, excluding interpreter start-up and imports:

- decode-only: reading every block of the file (the floor any analysis pays);
- bandmeter: ``analyse_file`` with 1 s intervals and otherwise default settings (A/C/Z Leq,
  F/S/I, true C and Z peaks, percentiles; plus one-third-octave bands 20 Hz - 20 kHz with
  ``--bands``);
- plain scipy: what a user would script for the same broadband metrics: bilinear A and C
  filters (scipy.signal.bilinear_zpk of the analog IEC 61672-1 poles), sosfilt with zi per
  block, lfilter exponentials for F and S, per-second means, maxima, minima, np.percentile
  of the F levels per second, and the sample peak (no inter-sample peak, no I); with
  ``--bands`` also one full-rate order-4 Butterworth band-pass per band (the order of
  bandmeter's band filters).

and reports real-time factors, the ratios, and the peak memory (RSS) of each analysis, each
run in a fresh child process so the figures do not mix. ``scripts/bench.py`` is the full
benchmark of the issue (both lengths, one core, interleaved rounds, a plain-scipy script of
the whole analysis including true peaks).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

FS = 48000
BLOCK = 65536


def make_recording(path: str, minutes: float, seed: int = 1) -> None:
    """Pink-ish noise (Kellet's 3-pole approximation, streamed) with events, 24-bit."""
    import soundfile as sf
    from scipy import signal

    rng = np.random.default_rng(seed)
    # pinking filter (Paul Kellet's economy 3-pole approximation, -3 dB/octave within 0.5 dB)
    b = [0.049922035, -0.095993537, 0.050612699, -0.004408786]
    a = [1, -2.494956002, 2.017265875, -0.522189400]
    zi = np.zeros(3)
    n_total = int(minutes * 60 * FS)
    with sf.SoundFile(path, "w", FS, 1, subtype="PCM_24") as out:
        done = 0
        while done < n_total:
            n = min(FS * 10, n_total - done)
            y, zi = signal.lfilter(b, a, rng.standard_normal(n), zi=zi)
            t = (done + np.arange(n)) / FS
            swell = 1.0 + 8.0 * np.exp(-0.5 * (((t % 120.0) - 60.0) / 6.0) ** 2)  # a pass-by
            out.write(np.clip(0.02 * y * swell, -1, 1))
            done += n


def run_decode(path: str) -> float:
    from bandmeter.audio import Recording

    t0 = time.perf_counter()
    total = 0.0
    with Recording(path) as rec:
        for block in rec.blocks(BLOCK):
            total += float(block[0])
    return time.perf_counter() - t0


def run_bandmeter(path: str, bands: bool) -> float:
    from bandmeter.calibration import from_full_scale_level
    from bandmeter.engine import AnalysisSettings, analyse_file

    settings = AnalysisSettings(interval_s=1.0, bands=3 if bands else None)  # default blocks
    cal = from_full_scale_level(120.0)
    t0 = time.perf_counter()
    analyse_file(path, cal, settings)
    return time.perf_counter() - t0


def third_octave_butterworth(fs: float) -> list[np.ndarray]:
    """Order-4 Butterworth band-passes (bandmeter's order), one-third octaves 20 Hz - 20 kHz
    (base 10), as a user would write them: one full-rate filter per band."""
    from scipy import signal

    soss = []
    for x in range(-17, 14):
        fm = 1000.0 * 10.0 ** (0.1 * x)
        lo, hi = fm * 10.0**-0.05, fm * 10.0**0.05
        if hi < fs / 2:
            soss.append(signal.butter(4, [lo, hi], btype="bandpass", fs=fs, output="sos"))
    return soss


def run_plain_scipy(path: str, bands: bool) -> float:
    import soundfile as sf
    from scipy import signal

    from bandmeter.weighting import analog_zpk

    def bilinear_sos(name: str) -> np.ndarray:
        z, p, k = analog_zpk(name)
        zd, pd, kd = signal.bilinear_zpk(z, p, k, FS)
        return signal.zpk2sos(zd, pd, kd)

    t0 = time.perf_counter()
    sos_a, sos_c = bilinear_sos("A"), bilinear_sos("C")
    zi_a = np.zeros((sos_a.shape[0], 2))
    zi_c = np.zeros((sos_c.shape[0], 2))
    fa, sa = math.exp(-1 / (FS * 0.125)), math.exp(-1 / (FS * 1.0))
    zf, zs = np.zeros(1), np.zeros(1)
    band_sos = third_octave_butterworth(FS) if bands else []
    band_zi = [np.zeros((s.shape[0], 2)) for s in band_sos]
    rows = []
    with sf.SoundFile(path) as f:
        for block in f.blocks(blocksize=FS, dtype="float64"):  # one block per 1 s interval
            ya, zi_a = signal.sosfilt(sos_a, block, zi=zi_a)
            yc, zi_c = signal.sosfilt(sos_c, block, zi=zi_c)
            a2 = ya * ya
            yf, zf = signal.lfilter([1 - fa], [1, -fa], a2, zi=zf)
            ys, zs = signal.lfilter([1 - sa], [1, -sa], a2, zi=zs)
            lf = 10 * np.log10(yf + 1e-30)
            row = [np.mean(a2), np.mean(yc * yc), np.mean(block * block), lf.max(), lf.min(),
                   ys.max(), ys.min(), np.abs(yc).max(), np.abs(block).max(),
                   *np.percentile(lf, [1, 5, 10, 50, 90, 95, 99])]
            for j, s in enumerate(band_sos):
                yb, band_zi[j] = signal.sosfilt(s, block, zi=band_zi[j])
                row.append(np.mean(yb * yb))
            rows.append(row)
    return time.perf_counter() - t0


def child(kind: str, path: str, bands: bool) -> None:
    """Run one analysis and print its time and peak RSS as JSON (in a fresh process)."""
    import resource

    fn = {"decode": lambda: run_decode(path), "bandmeter": lambda: run_bandmeter(path, bands),
          "scipy": lambda: run_plain_scipy(path, bands)}[kind]
    seconds = fn()
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"seconds": seconds, "rss_mb": rss_mb}))


def measure(kind: str, path: str, bands: bool) -> dict[str, float]:
    cmd = [sys.executable, __file__, "--child", kind, path] + (["--bands"] if bands else [])
    one_core = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    out = subprocess.run(cmd, check=True, capture_output=True, text=True,
                         env={**os.environ, **one_core}).stdout
    return json.loads(out.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--minutes", type=float, nargs="*", default=[10.0, 60.0])
    parser.add_argument("--bands", action="store_true")
    parser.add_argument("--child", nargs=2, metavar=("KIND", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], args.child[1], args.bands)
        return
    with tempfile.TemporaryDirectory(prefix="bandmeter-bench-") as tmp:
        for minutes in args.minutes:
            path = os.path.join(tmp, f"bench_{minutes:g}min.wav")
            make_recording(path, minutes)
            audio_s = minutes * 60
            res = {k: measure(k, path, args.bands) for k in ("decode", "bandmeter", "scipy")}
            bm, dec, sp = res["bandmeter"], res["decode"], res["scipy"]
            print(f"{minutes:g} min at 48 kHz{' with 1/3-octave bands' if args.bands else ''}:")
            for kind, r in res.items():
                print(f"  {kind:10s} {r['seconds']:8.2f} s  {audio_s / r['seconds']:8.1f}x "
                      f"real time  peak RSS {r['rss_mb']:7.1f} MB")
            print(f"  bandmeter / decode-only time: {bm['seconds'] / dec['seconds']:.2f}")
            print(f"  plain scipy / bandmeter time: {sp['seconds'] / bm['seconds']:.2f}")
            os.unlink(path)


if __name__ == "__main__":
    main()
