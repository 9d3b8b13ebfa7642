"""Access to the optional compiled kernels (``bandmeter/_kernels.c``).

The extension is built by ``pip install`` where a C compiler is available. It holds the
inner loops of the analysis:

- the true-peak meter's tile maxima of ``|x|`` and ``|D2|`` (:mod:`bandmeter.peak`) and
- the level histogram's counting (the engine's LAFN), each with the NumPy path's
  floating-point operations in the same order, so the results are the same to the last bit;
- the filter bank's band filters, all bands of a stage side by side in vector lanes, and
  the A and C weightings the same way (:class:`bandmeter.blockfilter.MultiSosFilter`), in
  the arithmetic of ``scipy.signal.sosfilt`` (its very bits), where the NumPy paths' block
  kernels agree with sosfilt to 4.5e-14 of a band's RMS (:mod:`bandmeter.filterbank`) and
  1e-11 of the A or C output (their first-use probe); and
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
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from types import ModuleType

try:
    from . import _kernels as _extension
except ImportError:  # not built (no C compiler at install): the NumPy paths
    _extension = None

_disabled = os.environ.get("BANDMETER_NUMPY_ONLY", "") == "1"


_self_check_passed: bool | None = None  # None: not run yet


def kernels() -> ModuleType | None:
    """The compiled kernels module, or None when the NumPy paths are to run.

    On the first call the kernels are checked once against their references
    (:func:`self_check`); if any differs, a warning says so and the NumPy paths run.
    """
    global _self_check_passed
    if _disabled or _extension is None:
        return None
    if _self_check_passed is None:
        _self_check_passed = not self_check(_extension)
        if not _self_check_passed:
            warnings.warn(
                "bandmeter: the compiled kernels failed their self-check "
                f"({', '.join(self_check(_extension))}); the NumPy paths run instead",
                RuntimeWarning, stacklevel=2,
            )
    return _extension if _self_check_passed else None


def describe() -> str:
    """Which paths compute the results, for provenance and the self-test report, e.g.
    ``"compiled kernels (4 vector lanes)"`` or ``"NumPy paths (compiled kernels not built)"``."""
    if _extension is None:
        return "NumPy paths (compiled kernels not built)"
    if _disabled:
        return "NumPy paths (compiled kernels switched off)"
    if kernels() is None:
        return "NumPy paths (compiled kernels failed their self-check)"
    lanes = _extension.lane_width()
    return f"compiled kernels ({lanes} vector lane{'s' if lanes > 1 else ''})"


def self_check(module: ModuleType) -> list[str]:
    """Names of the kernels of ``module`` that differ from their references on a small
    probe (an empty list when all agree).

    The references are NumPy's own operations (tile maxima, histogram counts: exact),
    ``scipy.signal.lfilter`` for the time weightings' averagers (the same bits) with the
    hold written out (to 1e-14), and ``scipy.signal.sosfilt`` for the band filters (its bits
    on this project's platforms; 1e-13 of the RMS allows for a scipy built with fused
    multiply-adds). A few milliseconds, once per process.
    """
    import numpy as np
    from scipy import signal

    failed = []
    rng = np.random.default_rng(20261204)
    x = rng.standard_normal(16 * 6 + 2) * 10.0 ** rng.uniform(-3, 3, 16 * 6 + 2)
    tiles = np.empty((2, 6))
    near = np.empty(4)
    inner = np.arange(1, 16 * 6 + 1)
    d2 = np.abs((x[inner - 1] - 2.0 * x[inner]) + x[inner + 1])
    wide = np.maximum(np.abs(x[inner]).reshape(6, 16).max(axis=1)[1:-1],
                      np.maximum(np.abs(x[16:65:16]), np.abs(x[33:82:16])))
    if not (module.tile_maxima(x, 1, 6, tiles[0], tiles[1], near)
            and np.array_equal(tiles[0], np.abs(x[inner]).reshape(6, 16).max(axis=1))
            and np.array_equal(tiles[1], d2.reshape(6, 16).max(axis=1))
            and np.array_equal(near, wide)):
        failed.append("tile_maxima")
    levels = np.concatenate([rng.uniform(-12.0, 12.0, 500), [-np.inf, np.inf, -10.0, 0.0]])
    counts = np.zeros(102, dtype=np.int64)
    with np.errstate(invalid="ignore"):
        index = np.clip(np.floor((levels + 10.0) / 0.2), -1, 100).astype(np.int64) + 1
    span = module.count_levels(levels, -10.0, 0.2, 100, counts)
    if not (np.array_equal(counts, np.bincount(index, minlength=102))
            and span == (int(index.min()), int(index.max()))):
        failed.append("count_levels")
    squares = rng.standard_normal(700) ** 2
    a, d = 0.99, 0.9995
    coefficients = np.array([[a, 1.0 - a, 0.0], [a, 1.0 - a, 1.0]])
    states, held = np.array([0.5, 0.5]), np.array([0.0, 0.5])
    out = (np.empty(700), np.empty(700))
    top, bottom = np.empty((2, 2)), np.empty((2, 2))
    ok = module.time_weighting(squares, np.array([0, 300, 700], dtype=np.int64),
                               coefficients, states, held, d ** np.arange(64.0), out,
                               top, bottom)
    want, _ = signal.lfilter([1.0 - a], [1.0, -a], squares, zi=[a * 0.5])
    hold, peak = np.empty(700), 0.5
    for n, v in enumerate(want):
        peak = max(v, peak * d)
        hold[n] = peak
    if not (ok and np.array_equal(out[0], want)
            and np.allclose(out[1], hold, rtol=1e-14, atol=0)
            and np.array_equal(top[0], [want[:300].max(), want[300:].max()])
            and np.allclose(top[1], [hold[:300].max(), hold[300:].max()], rtol=1e-14, atol=0)):
        failed.append("time_weighting")
    soss = np.stack([signal.butter(4, [lo, 1.3 * lo], btype="bandpass", output="sos")
                     for lo in (0.01, 0.1, 0.3)])
    zi = rng.standard_normal((3, 4, 2)) * 0.1
    start = zi.copy()
    filtered = np.empty((3, 700))
    module.sos_bands(squares, soss, zi, 4, filtered, 700)
    for band in range(3):
        ref = signal.sosfilt(soss[band], squares, zi=start[band])[0]
        if np.max(np.abs(filtered[band] - ref)) > 1e-13 * np.sqrt(np.mean(ref**2)):
            failed.append("sos_bands")
            break
    return failed


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
