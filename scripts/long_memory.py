"""Constant memory on long recordings: a 24-hour 48 kHz file analysed in one streaming pass.

Usage (from the project root)::

    nice .venv/bin/python scripts/long_memory.py                  # 1 h and 24 h
    .venv/bin/python scripts/long_memory.py --hours 0.1 2         # any durations, in hours
    .venv/bin/python scripts/long_memory.py --interval 1min --bands octave

For each duration it writes a *sparse* RF64 file (16-bit mono, 48 kHz) into a temporary
folder: a valid header declaring the whole duration, the data extended with ``truncate()``
so the file system stores no blocks for it (24 h is 8.3 GB on paper and about 1 MB on disk),
and one second of low-level noise at the start of every hour and at the very end, so the
levels are finite. It then runs ``bandmeter levels FILE --dbfs --interval 15min --json`` in a
fresh child process (a peak RSS does not mix between runs) and reports the duration, wall
time, real-time factor and the child's peak resident memory, plus the ratio of the peak RSS
of the longest to the shortest run. Streaming means that ratio stays near 1: the blocks are
65536 samples whatever the length, and what grows with the duration is only the per-interval
results (about 20 numbers per interval: 96 intervals in 24 h at 15 min).

Digital silence between the noise bursts is part of the test: it gives LAFmin = -inf (null in
JSON) and must not upset the engine.

``write_sparse_rf64`` is also used by ``tests/test_long.py``.
"""

from __future__ import annotations

import argparse
import json
import os
import struct
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence

import numpy as np

FS = 48000
#: Bytes of the RF64 header written by :func:`write_sparse_rf64` (RF64/WAVE, ds64, fmt, data).
HEADER_BYTES = 12 + (8 + 28) + (8 + 16) + 8


def write_sparse_rf64(path: str, seconds: float, bursts_s: Sequence[float], fs: int = FS,
                      burst_s: float = 1.0, rms: float = 0.003, seed: int = 0
                      ) -> list[tuple[int, np.ndarray]]:
    """Write a sparse 16-bit mono RF64 file of digital silence with noise bursts.

    Parameters
    ----------
    path : str
        File to create.
    seconds : float
        Duration the header declares and the file holds, s.
    bursts_s : sequence of float
        Start of each burst of Gaussian noise, s (clipped to fit in the file).
    fs : int
        Sampling rate, Hz.
    burst_s : float
        Length of each burst, s.
    rms : float
        rms of the noise on the +-1 full-scale scale (0.003: about -47 dBFS).
    seed : int
        Seed of the noise.

    Returns
    -------
    list of (int, numpy.ndarray)
        Start frame and the int16 codes of each burst as written (for exact checks).

    Notes
    -----
    RF64 (EBU Tech 3306): ``RF64`` with size 0xFFFFFFFF, a ``ds64`` chunk holding the 64-bit
    RIFF size, data size and sample count, then ``fmt `` (PCM, 16 bytes) and ``data`` with
    size 0xFFFFFFFF. The data is extended with ``truncate()``, which reads back as zeros.
    """
    frames = int(round(fs * seconds))
    data_bytes = 2 * frames
    fmt = struct.pack("<HHIIHH", 1, 1, fs, 2 * fs, 2, 16)  # PCM, mono, 16-bit
    ds64 = struct.pack("<QQQI", HEADER_BYTES - 8 + data_bytes, data_bytes, frames, 0)
    head = (b"RF64" + struct.pack("<I", 0xFFFFFFFF) + b"WAVE"
            + b"ds64" + struct.pack("<I", len(ds64)) + ds64
            + b"fmt " + struct.pack("<I", len(fmt)) + fmt
            + b"data" + struct.pack("<I", 0xFFFFFFFF))
    assert len(head) == HEADER_BYTES
    rng = np.random.default_rng(seed)
    n = int(round(burst_s * fs))
    written = []
    with open(path, "wb") as handle:
        handle.write(head)
        handle.truncate(HEADER_BYTES + data_bytes)
        for start_s in bursts_s:
            start = min(max(int(round(start_s * fs)), 0), frames - n)
            codes = np.clip(np.round(rng.standard_normal(n) * rms * 32768), -32768, 32767)
            codes = codes.astype("<i2")
            handle.seek(HEADER_BYTES + 2 * start)
            handle.write(codes.tobytes())
            written.append((start, codes))
    return written


def hourly_bursts(seconds: float) -> list[float]:
    """A burst at the start of every hour and one ending at the end of the file, s."""
    return [3600.0 * h for h in range(int(seconds // 3600) + 1) if 3600.0 * h < seconds - 1] + [
        seconds - 1.0]


def run_levels(path: str, extra: Sequence[str] = ()) -> dict:
    """Run ``bandmeter levels`` on ``path`` in a child process; time and peak RSS.

    Returns
    -------
    dict
        ``wall_s``, ``peak_rss_mb`` (the child's ``ru_maxrss``), ``result`` (the JSON).
    """
    cmd = [sys.executable, "-c", "from bandmeter.cli import main; main()", "levels", path,
           "--dbfs", "--json", *extra]
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        started = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out, stderr=err)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - started
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        stdout, stderr = out.read().decode(), err.read().decode()
    if proc.returncode != 0:
        raise RuntimeError(f"bandmeter levels failed ({proc.returncode}): {stderr.strip()}")
    # ru_maxrss is in KiB on Linux (bytes on macOS)
    scale = 1 / 1024 if sys.platform != "darwin" else 1 / 2**20
    return {"wall_s": wall, "peak_rss_mb": usage.ru_maxrss * scale,
            "result": json.loads(stdout), "stderr": stderr}


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--hours", type=float, nargs="+", default=[1.0, 24.0],
                        help="durations to analyse, hours (default: 1 24)")
    parser.add_argument("--interval", default="15min", help="reporting interval")
    parser.add_argument("--bands", help="also a band analysis (octave, third...)")
    parser.add_argument("--dir", help="folder for the sparse files (default: system temp)")
    args = parser.parse_args(argv)
    extra = ["--interval", args.interval] + (["--bands", args.bands] if args.bands else [])
    rows = []
    with tempfile.TemporaryDirectory(dir=args.dir, prefix="bandmeter-long-") as folder:
        for hours in args.hours:
            seconds = hours * 3600.0
            path = os.path.join(folder, f"long_{hours:g}h.wav")
            write_sparse_rf64(path, seconds, hourly_bursts(seconds))
            stat = os.stat(path)
            run = run_levels(path, extra)
            os.unlink(path)
            data = run["result"]
            assert data["frames"] == int(round(seconds * FS)), data["frames"]
            rows.append((hours, run, stat.st_size, stat.st_blocks * 512))
            print(f"{hours:6g} h  {data['duration_s']:9.0f} s of audio  "
                  f"{len(data['intervals']):5d} intervals  wall {run['wall_s']:7.1f} s  "
                  f"{data['duration_s'] / run['wall_s']:6.0f}x real time  peak RSS "
                  f"{run['peak_rss_mb']:6.1f} MB  (file {stat.st_size / 1e9:.2f} GB, "
                  f"{stat.st_blocks * 512 / 1e6:.1f} MB on disk)  "
                  f"LAeq {data['overall']['LAeq_dBFS']:.2f} dBFS", flush=True)
    if len(rows) > 1:
        short, long_ = min(rows, key=lambda r: r[0]), max(rows, key=lambda r: r[0])
        ratio = long_[1]["peak_rss_mb"] / short[1]["peak_rss_mb"]
        print(f"peak RSS {long_[0]:g} h / {short[0]:g} h: {ratio:.3f} "
              f"({long_[1]['peak_rss_mb'] - short[1]['peak_rss_mb']:+.1f} MB for "
              f"{long_[0] / short[0]:g} times the duration)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
