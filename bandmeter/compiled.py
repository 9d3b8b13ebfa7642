"""Access to the optional compiled kernels (``bandmeter/_kernels.c``).

The extension is built by ``pip install`` where a C compiler is available. It holds four
inner loops of the analysis:

- the true-peak meter's tile maxima of ``|x|`` and ``|D2|`` (:mod:`bandmeter.peak`) and
- the level histogram's counting (the engine's LAFN), each with the NumPy path's
  floating-point operations in the same order, so the results are the same to the last bit;
- the filter bank's band filters, all bands of a stage side by side in vector lanes, in the
  arithmetic of ``scipy.signal.sosfilt`` (its very bits), where the NumPy path's block
  kernel agrees with sosfilt to 4.5e-14 of a band's RMS (:mod:`bandmeter.filterbank`); and

- the F, S and I time weightings with their extremes per interval
  (:meth:`bandmeter.timeweight.TimeWeightingSet.extremes`), run as the recursion
  ``y[n] = (1 - a) x[n] + a y[n-1]`` itself (the very bits of ``scipy.signal.lfilter``),
  where the NumPy path's block formulation agrees with it to 1e-13 relative (4e-13 dB).

``tests/test_compiled.py`` and ``tests/test_timeweight.py`` compare the two paths. Without
the extension, or with the environment variable ``BANDMETER_NUMPY_ONLY`` set to ``1``, the
NumPy paths run. :func:`kernels` tells which is in use, and :func:`numpy_only` switches the
kernels off for a block of code (tests, comparisons).
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
