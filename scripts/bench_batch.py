"""Batch throughput: audio hours analysed per wall-clock hour, 1 vs 2 workers (and Dask).

Usage (from the project root)::

    .venv/bin/python scripts/bench_batch.py [--files 8] [--minutes 5] [--bands]

Generates ``--files`` synthetic 48 kHz 24-bit recordings of ``--minutes`` each (pink noise
with pass-bys) in a temporary folder and runs ``bandmeter.batch.run_batch`` on them with
1 s intervals (and one-third-octave bands with ``--bands``), once with one worker (in
process), once with two local worker processes and once on a two-worker Dask LocalCluster,
each into a fresh output folder. Prints wall time, audio hours per hour and the speed-up
over one worker, all from the same run.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(__file__))

from bench_levels import make_recording  # noqa: E402

from bandmeter.batch import BatchOptions, run_batch  # noqa: E402
from bandmeter.calibration import from_full_scale_level  # noqa: E402
from bandmeter.engine import AnalysisSettings  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--files", type=int, default=8)
    parser.add_argument("--minutes", type=float, default=5.0)
    parser.add_argument("--bands", action="store_true")
    args = parser.parse_args()
    settings = AnalysisSettings(interval_s=1.0, bands=3 if args.bands else None)
    audio_h = args.files * args.minutes / 60
    with tempfile.TemporaryDirectory(prefix="bandmeter-batch-bench-") as tmp:
        src = os.path.join(tmp, "in")
        os.makedirs(src)
        for i in range(args.files):
            make_recording(os.path.join(src, f"rec_{i:03d}.wav"), args.minutes, seed=i)
        print(f"{args.files} files x {args.minutes:g} min at 48 kHz = {audio_h:.2f} h of audio"
              f"{', with 1/3-octave bands' if args.bands else ''}")
        base = None
        for label, workers, dask in (("1 worker", 1, None), ("2 workers", 2, None),
                                     ("Dask local, 2 workers", 2, "local")):
            options = BatchOptions(settings=settings, calibration=from_full_scale_level(120.0),
                                   workers=workers, dask=dask)
            t0 = time.perf_counter()
            report = run_batch([src], os.path.join(tmp, label.replace(" ", "_")), options,
                               progress=False)
            wall = time.perf_counter() - t0
            assert report.ok and report.analysed == args.files
            base = base or wall
            print(f"  {label:22s} {wall:7.1f} s  {audio_h / (wall / 3600):8.0f} audio h per h"
                  f"  speed-up {base / wall:4.2f}")
        print(f"  Dask local cluster start and stop alone: {dask_overhead_s():.1f} s (a fixed "
              "cost per batch run, included above)")


def dask_overhead_s() -> float:
    """Wall time to start and stop a two-worker LocalCluster and its client, s."""
    from distributed import Client, LocalCluster

    t0 = time.perf_counter()
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                           dashboard_address=None)
    client = Client(cluster)
    client.close()
    cluster.close()
    return time.perf_counter() - t0


if __name__ == "__main__":
    main()
