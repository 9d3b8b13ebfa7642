"""Benchmark of the full standard analysis against decode-only and plain-scipy passes.

Usage (from the project root; run it when the machine is otherwise idle, e.g. under nice)::

    .venv/bin/python scripts/bench.py                      # 10- and 60-minute recordings
    .venv/bin/python scripts/bench.py --minutes 10 --rounds 3 --json /tmp/bench.json

For each length a synthetic 48 kHz 24-bit recording (pink noise with a pass-by every two
minutes, ``bench_levels.make_recording``) is generated into a temporary folder. Then, in one
run and interleaved (round after round, every kind of pass once per round and length), each
of these passes runs in its own fresh child process, restricted to one core
(``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS`` and ``MKL_NUM_THREADS`` set to 1):

decode
    Reading every block of the file, in the analysis' block length (the floor any analysis
    pays).
bandmeter
    The full standard analysis, ``analyse_file`` with the default settings and 1 s intervals:
    LAeq, LCeq, LZeq, LAE, F/S/I maxima and minima, true (inter-sample) C and Z peaks, seven
    percentile levels LAFN (per interval and overall), overload counts, the SHA-256 of the
    file, and one-third-octave bands 20 Hz - 20 kHz (Leq per band and interval), with the
    compiled kernels where they are built (the report names the paths that ran).
bandmeter-numpy
    The same analysis on the NumPy paths alone (``BANDMETER_NUMPY_ONLY=1``), as an
    installation without a C compiler runs it; reported as its time over the first's.
scipy
    A plain-scipy script for the same analysis, what a careful user would write: bandmeter's
    own A and C sections (``design_sos``) through ``scipy.signal.sosfilt`` with ``zi`` per
    1 s block, ``lfilter`` exponentials for F, S and I (LAImax with the 1.5 s hold carried
    across intervals), per-second means, maxima and minima, ``np.percentile`` of the F levels
    per second and a 0.01 dB histogram for the overall LAFN, true C and Z peaks by 4x
    oversampling (``scipy.signal.resample_poly``, as in ITU-R BS.1770), overload counts, and
    one full-rate order-4 Butterworth band-pass per one-third-octave band (the order of
    bandmeter's band filters).
scipy-reduced
    The plain script of ``bench_levels.py --bands``, which does less: bilinear A and C
    filters, no I weighting, sample peaks instead of true peaks, no overall percentiles.

Only the work is timed (``time.perf_counter`` around it in the child, after the imports);
interpreter start-up and imports are excluded. Reported per round: real-time factor (audio
duration / time), the ratios bandmeter / decode-only and plain scipy / bandmeter of that
round, and each pass's peak memory (maximum resident set size). The targets are judged on
each kind of pass at its fastest round (3 rounds by default): load from other work on a
shared machine only ever adds time, and a decode-only pass of a fraction of a second is
the most exposed to it (it varied by up to 40 % between rounds), so a single round's ratio
says as much about the machine as about bandmeter. Peak memory is the largest of the
rounds.
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
#: Single-threaded BLAS and OpenMP in the child processes: one core.
ONE_CORE = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
KINDS = ("decode", "bandmeter", "bandmeter-numpy", "scipy", "scipy-reduced")
#: Extra environment of a kind's child process: bandmeter on its NumPy paths alone.
KIND_ENV = {"bandmeter-numpy": {"BANDMETER_NUMPY_ONLY": "1"}}
#: Issue targets: real-time factor, time relative to decode-only, speed-up over plain scipy,
#: growth of peak memory from 10 to 60 min.
TARGET_REALTIME = 100.0
TARGET_DECODE_RATIO = 15.0
TARGET_SCIPY_SPEEDUP = 5.0
TARGET_RSS_GROWTH = 0.10
PERCENTILES = (1.0, 5.0, 10.0, 50.0, 90.0, 95.0, 99.0)


def run_decode(path: str) -> None:
    from bandmeter.audio import Recording
    from bandmeter.engine import AnalysisSettings

    total = 0.0
    with Recording(path) as rec:  # the blocks the analysis reads
        for block in rec.blocks(AnalysisSettings().block_frames):
            total += float(block[0])


def run_bandmeter(path: str) -> None:
    from bandmeter.calibration import from_full_scale_level
    from bandmeter.engine import AnalysisSettings, analyse_file

    settings = AnalysisSettings(interval_s=1.0, bands=3)  # the defaults otherwise
    analyse_file(path, from_full_scale_level(120.0), settings)


def run_plain_scipy(path: str) -> None:
    """The same analysis as ``run_bandmeter``, written with plain numpy and scipy."""
    import hashlib

    import soundfile as sf
    from scipy import signal

    from bandmeter.weighting import design_sos

    with open(path, "rb") as f:  # the provenance hash, as bandmeter records it
        digest = hashlib.sha256()
        for chunk in iter(lambda: f.read(1 << 20), b""):
            digest.update(chunk)
    sos_a, sos_c = design_sos("A", FS), design_sos("C", FS)
    zi_a, zi_c = np.zeros((sos_a.shape[0], 2)), np.zeros((sos_c.shape[0], 2))
    coef = {k: math.exp(-1.0 / (FS * tau)) for k, tau in (("F", 0.125), ("S", 1.0),
                                                           ("I", 0.035))}
    zi_t = {k: np.zeros(1) for k in coef}
    hold_decay = math.exp(-1.0 / (FS * 1.5))
    held = 0.0
    from bench_levels import third_octave_butterworth

    band_sos = third_octave_butterworth(FS)
    band_zi = [np.zeros((s.shape[0], 2)) for s in band_sos]
    hist = np.zeros(46000, dtype=np.int64)  # 0.01 dB bins from -400 dB re full scale
    ctx_c, ctx_z = np.zeros(16), np.zeros(16)
    rows = []
    with sf.SoundFile(path) as f:
        for block in f.blocks(blocksize=FS, dtype="float64"):  # one block per 1 s interval
            ya, zi_a = signal.sosfilt(sos_a, block, zi=zi_a)
            yc, zi_c = signal.sosfilt(sos_c, block, zi=zi_c)
            a2 = ya * ya
            tw = {}
            for k, a in coef.items():
                tw[k], zi_t[k] = signal.lfilter([1.0 - a], [1.0, -a], a2, zi=zi_t[k])
            n = block.size
            max_i = max(float(tw["I"].max()), held * hold_decay)
            held = max(held * hold_decay**n,
                       float(np.max(tw["I"] * hold_decay ** np.arange(n - 1, -1, -1))))
            lf = 10.0 * np.log10(np.maximum(tw["F"], 1e-300))
            hist += np.bincount(np.clip(((lf + 400.0) / 0.01).astype(np.int64), 0, 45999),
                                minlength=46000)
            peaks = []
            for y, ctx in ((yc, ctx_c), (block, ctx_z)):
                over = signal.resample_poly(np.concatenate([ctx, y]), 4, 1)
                peaks.append(float(np.abs(over[4 * ctx.size :]).max()))
                ctx[:] = y[-16:] if y.size >= 16 else np.r_[ctx, y][-16:]
            row = [np.mean(a2), np.mean(yc * yc), np.mean(block * block), tw["F"].max(),
                   tw["F"].min(), tw["S"].max(), tw["S"].min(), max_i, *peaks,
                   int(np.count_nonzero(np.abs(block) >= 1.0)),
                   *np.percentile(lf, [100.0 - p for p in PERCENTILES])]
            for j, s in enumerate(band_sos):
                yb, band_zi[j] = signal.sosfilt(s, block, zi=band_zi[j])
                row.append(np.mean(yb * yb))
            rows.append(row)
    cum = np.cumsum(hist[::-1])[::-1]  # overall LAFN from the histogram
    overall = [int(np.searchsorted(-cum, -p / 100.0 * cum[0])) for p in PERCENTILES]
    _ = (digest.hexdigest(), np.array(rows), overall)


def run_plain_reduced(path: str) -> None:
    from bench_levels import run_plain_scipy as reduced

    reduced(path, bands=True)


RUNNERS = {"decode": run_decode, "bandmeter": run_bandmeter, "bandmeter-numpy": run_bandmeter,
           "scipy": run_plain_scipy, "scipy-reduced": run_plain_reduced}


def child(kind: str, path: str) -> None:
    """Run one pass and print its time and peak memory as JSON (in a fresh process)."""
    import hashlib  # noqa: F401 - imports are not timed: every module a pass imports
    import resource

    import scipy.signal  # noqa: F401
    import soundfile  # noqa: F401

    import bandmeter.audio  # noqa: F401
    import bandmeter.calibration  # noqa: F401 - about 27 ms, once timed in the bandmeter pass
    import bandmeter.engine  # noqa: F401
    import bandmeter.filterbank  # noqa: F401
    import bandmeter.weighting  # noqa: F401

    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    import bench_levels  # noqa: F401

    run = RUNNERS[kind]
    t0, c0 = time.perf_counter(), time.process_time()
    run(path)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    from bandmeter.compiled import describe

    print(json.dumps({"seconds": seconds, "cpu_seconds": cpu, "rss_mb": rss_mb,
                      "kernels": describe()}))


def measure(kind: str, path: str) -> dict[str, float]:
    env = {**os.environ, **ONE_CORE, **KIND_ENV.get(kind, {})}
    cmd = [sys.executable, os.path.abspath(__file__), "--child", kind, path]
    out = subprocess.run(cmd, check=True, capture_output=True, text=True, env=env).stdout
    return json.loads(out.strip().splitlines()[-1])


def report(minutes: float, rounds: list[dict[str, dict[str, float]]]) -> dict:
    """Print the rounds of one length; return its figures from each pass's fastest round.

    Noise on a shared machine only ever adds time, so each kind of pass is taken at its
    fastest round (the closest estimate of its undisturbed time), and the ratios are those
    of these best times; the ratios of every single round are returned as the spread.
    """
    audio_s = minutes * 60.0
    print(f"\n{minutes:g} min at 48 kHz, 1 s intervals, one-third octaves 20 Hz - 20 kHz")
    print("  round  kind           time s   x real time   CPU s   peak RSS MB")
    for i, res in enumerate(rounds):
        for kind, r in res.items():
            print(f"  {i + 1:5d}  {kind:13s} {r['seconds']:7.2f} {audio_s / r['seconds']:11.1f}"
                  f"  {r['cpu_seconds']:7.2f} {r['rss_mb']:11.1f}")
        bm = res["bandmeter"]["seconds"]
        print(f"         bandmeter / decode-only time {bm / res['decode']['seconds']:.1f}; "
              f"plain scipy / bandmeter {res['scipy']['seconds'] / bm:.2f}; "
              f"reduced plain scipy / bandmeter {res['scipy-reduced']['seconds'] / bm:.2f}; "
              f"NumPy paths / compiled {res['bandmeter-numpy']['seconds'] / bm:.2f}")
    best = {kind: min((res[kind] for res in rounds), key=lambda r: r["seconds"])
            for kind in rounds[0]}
    bm = best["bandmeter"]["seconds"]
    print(f"  best   bandmeter / decode-only time {bm / best['decode']['seconds']:.1f}; "
          f"plain scipy / bandmeter {best['scipy']['seconds'] / bm:.2f}; "
          f"reduced plain scipy / bandmeter {best['scipy-reduced']['seconds'] / bm:.2f}; "
          f"NumPy paths / compiled {best['bandmeter-numpy']['seconds'] / bm:.2f}")
    for kind in ("bandmeter", "bandmeter-numpy"):
        print(f"  {kind}: {rounds[0][kind].get('kernels', '?')}")
    return {
        "minutes": minutes,
        "rounds": rounds,
        "best_seconds": {k: r["seconds"] for k, r in best.items()},
        "realtime": {k: audio_s / r["seconds"] for k, r in best.items()},
        "decode_ratio": bm / best["decode"]["seconds"],
        "scipy_speedup": best["scipy"]["seconds"] / bm,
        "reduced_speedup": best["scipy-reduced"]["seconds"] / bm,
        "numpy_paths_ratio": best["bandmeter-numpy"]["seconds"] / bm,
        "kernels": {k: rounds[0][k].get("kernels") for k in ("bandmeter", "bandmeter-numpy")},
        "rss_mb": {k: max(res[k]["rss_mb"] for res in rounds) for k in best},
        "spread": {
            "realtime": [audio_s / res["bandmeter"]["seconds"] for res in rounds],
            "decode_ratio": [res["bandmeter"]["seconds"] / res["decode"]["seconds"]
                             for res in rounds],
            "scipy_speedup": [res["scipy"]["seconds"] / res["bandmeter"]["seconds"]
                              for res in rounds],
        },
    }


def targets(summary: list[dict]) -> list[str]:
    """Lines stating each issue target as met or missed (each pass at its fastest round;
    peak memory: the largest of the rounds)."""
    lines = []
    def verdict(ok: bool) -> str:
        return "met" if ok else "MISSED"

    for s in summary:
        m = s["minutes"]
        rt, dr, sp = s["realtime"]["bandmeter"], s["decode_ratio"], s["scipy_speedup"]
        lines.append(f"{m:g} min: {rt:.0f}x real time (target >= {TARGET_REALTIME:g}x): "
                     f"{verdict(rt >= TARGET_REALTIME)}")
        lines.append(f"{m:g} min: {dr:.1f}x decode-only time (target <= "
                     f"{TARGET_DECODE_RATIO:g}x): {verdict(dr <= TARGET_DECODE_RATIO)}")
        lines.append(f"{m:g} min: {sp:.2f}x faster than plain scipy (target >= "
                     f"{TARGET_SCIPY_SPEEDUP:g}x): {verdict(sp >= TARGET_SCIPY_SPEEDUP)}")
    by_len = {s["minutes"]: s for s in summary}
    if 10.0 in by_len and 60.0 in by_len:
        a, b = by_len[10.0]["rss_mb"]["bandmeter"], by_len[60.0]["rss_mb"]["bandmeter"]
        growth = b / a - 1.0
        lines.append(f"peak RSS 60 min {b:.1f} MB vs 10 min {a:.1f} MB: {100 * growth:+.1f} % "
                     f"(target within {100 * TARGET_RSS_GROWTH:g} %): "
                     f"{verdict(abs(growth) <= TARGET_RSS_GROWTH)}")
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--minutes", type=float, nargs="*", default=[10.0, 60.0],
                        help="recording lengths, min (default: 10 60)")
    parser.add_argument("--rounds", type=int, default=3,
                        help="interleaved rounds (default 3)")
    parser.add_argument("--json", help="also write the figures to this JSON file")
    parser.add_argument("--child", nargs=2, metavar=("KIND", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], args.child[1])
        return
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from bench_levels import make_recording

    with tempfile.TemporaryDirectory(prefix="bandmeter-bench-") as tmp:
        paths = {}
        for minutes in args.minutes:
            paths[minutes] = os.path.join(tmp, f"bench_{minutes:g}min.wav")
            t0 = time.perf_counter()
            make_recording(paths[minutes], minutes)
            print(f"generated {minutes:g} min in {time.perf_counter() - t0:.1f} s",
                  flush=True)
        rounds: dict[float, list] = {m: [] for m in args.minutes}
        for i in range(args.rounds):  # interleaved: every pass of a round sees similar load
            for minutes, path in paths.items():
                rounds[minutes].append({kind: measure(kind, path) for kind in KINDS})
                print(f"round {i + 1}, {minutes:g} min done", flush=True)
    summary = [report(m, r) for m, r in rounds.items()]
    print("\nTargets (each pass at its fastest round; memory: largest of the rounds):")
    for line in targets(summary):
        print("  " + line)
    if args.json:
        with open(args.json, "w") as f:
            json.dump({"summary": summary, "load": os.getloadavg()}, f, indent=1)


if __name__ == "__main__":
    main()
