"""Access to the optional compiled kernels (``bandmeter/_kernels.c``).

The extension is built by ``pip install`` where a C compiler is available. Each of its
functions repeats a NumPy path of the package with the same floating-point operations in the
same order, so the results are the same to the last bit (``tests/test_compiled.py`` compares
the two); without the extension, or with the environment variable ``BANDMETER_NUMPY_ONLY``
set to ``1``, the NumPy paths run. :func:`kernels` tells which is in use, and
:func:`numpy_only` switches the kernels off for a block of code (tests, comparisons).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from types import ModuleType

try:
    from . import _kernels as _extension
except ImportError:  # not built (no C compiler at install): the NumPy paths
    _extension = None

_disabled = os.environ.get("BANDMETER_NUMPY_ONLY", "") == "1"


def kernels() -> ModuleType | None:
    """The compiled kernels module, or None when the NumPy paths are to run."""
    return None if _disabled else _extension


def available() -> bool:
    """True when the extension is built and importable (whether or not switched off)."""
    return _extension is not None


@contextmanager
def numpy_only() -> Iterator[None]:
    """Run the NumPy paths inside the ``with`` block (not thread-safe: a process setting)."""
    global _disabled
    previous = _disabled
    _disabled = True
    try:
        yield
    finally:
        _disabled = previous
