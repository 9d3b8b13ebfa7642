"""keep_freed_memory: freed NumPy work arrays stay with the process (glibc only).

Each case runs in a fresh interpreter, because the setting is one of the whole process and
lasts until it ends. The check is the resident set size read from ``/proc/self/statm``
before and after freeing a 16 MB array: glibc serves an allocation that large with its own
memory mapping and unmaps it on free (default thresholds: dynamic mmap threshold of at most
32 MB on 64-bit, starting at 128 KiB; glibc's malloc documentation, from memory), so the
resident size drops by the array's size, unless the thresholds were raised.
"""

from __future__ import annotations

import os
import platform
import subprocess
import sys
import textwrap

import pytest

pytestmark = pytest.mark.skipif(
    platform.libc_ver()[0] != "glibc" or not os.path.exists("/proc/self/statm"),
    reason="glibc's malloc and /proc are needed",
)

CHILD = textwrap.dedent(
    """
    import os, sys
    import numpy as np
    from bandmeter.engine import keep_freed_memory

    def resident():
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")

    done = keep_freed_memory() if sys.argv[1] == "keep" else False
    work = np.ones(2 << 20)  # 16 MB, every page touched
    before = resident()
    del work
    print(done, (before - resident()) >> 20)
    """
)


def run_child(mode: str, **env: str) -> tuple[str, int]:
    """(what keep_freed_memory returned, MB returned to the system by the free)."""
    out = subprocess.run(
        [sys.executable, "-c", CHILD, mode], capture_output=True, text=True, check=True,
        env={**os.environ, **env},
    ).stdout.split()
    return out[0], int(out[1])


def test_freed_array_returns_to_the_system_by_default():
    assert run_child("plain") == ("False", 16)


def test_kept_memory_stays_with_the_process():
    assert run_child("keep") == ("True", 0)


def test_user_malloc_settings_are_left_alone():
    # a threshold the user set wins: nothing is changed, the memory is returned
    assert run_child("keep", MALLOC_TRIM_THRESHOLD_="65536") == ("False", 16)
