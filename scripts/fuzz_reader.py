"""Fuzz the reader and `bandmeter levels` with mutated fixtures and random files.

Usage (from the project root)::

    .venv/bin/python scripts/fuzz_reader.py [--count 2000] [--timeout 20] [--seed 1]

Each case runs `bandmeter levels FILE --dbfs --json` in a fresh process with a time limit
(so a hang is caught, not waited for). A case fails when the process times out, exits with
a status other than 0 or 1, prints a traceback, or prints an error of more than one line.
The mutations are those of tests/test_fuzz.py (header bytes, chunk sizes, format codes,
channel counts, truncation, random tails). Prints a summary and the failing files.
"""

from __future__ import annotations

import argparse
import os
import random
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, os.path.join(ROOT, "tests"))

from test_fuzz import mutations  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--count", type=int, default=2000)
    parser.add_argument("--timeout", type=float, default=20.0)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    rng = random.Random(args.seed)
    fixtures = [os.path.join(ROOT, "fixtures", n) for n in sorted(os.listdir(
        os.path.join(ROOT, "fixtures"))) if not n.startswith(".")]
    failures = []
    cmd = [sys.executable, "-c", "from bandmeter.cli import main; main()", "levels"]
    with tempfile.TemporaryDirectory(prefix="bandmeter-fuzz-") as tmp:
        for i in range(args.count):
            source = rng.choice(fixtures)
            with open(source, "rb") as handle:
                blob = next(mutations(handle.read(), rng, 1))
            path = os.path.join(tmp, f"case{i}{os.path.splitext(source)[1]}")
            with open(path, "wb") as handle:
                handle.write(blob)
            try:
                done = subprocess.run(cmd + [path, "--dbfs", "--json"], capture_output=True,
                                      text=True, timeout=args.timeout)
            except subprocess.TimeoutExpired:
                failures.append((path, "timeout"))
                continue
            bad = (done.returncode not in (0, 1) or "Traceback" in done.stderr
                   or (done.returncode == 1 and done.stderr.count("\n") != 1))
            if bad:
                kept = os.path.join(ROOT, f"fuzz_failure_{i}{os.path.splitext(source)[1]}")
                with open(kept, "wb") as handle:
                    handle.write(blob)
                failures.append((kept, done.stderr.strip().splitlines()[-1:]))
            if (i + 1) % 100 == 0:
                print(f"{i + 1} cases, {len(failures)} failures", flush=True)
    print(f"done: {args.count} cases, {len(failures)} failures")
    for path, why in failures:
        print(f"  {path}: {why}")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
