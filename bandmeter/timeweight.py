"""Exponential time weighting F, S and I of a squared (weighted) sound pressure signal.

The stages here take the *squared* signal (any units^2, e.g. Pa^2 or (full scale)^2) and return
the exponentially time-weighted mean square in the same units, sample by sample. The level is
``10 lg(mean_square / p0^2)`` (dB re 20 uPa) and is formed by the caller.

Time constants (REFERENCE_VALUES.md section 4):

- F (Fast): tau = 0.125 s, IEC 61672-1:2013 (rise and decay).
- S (Slow): tau = 1 s, IEC 61672-1:2013.
- I (Impulse): a 35 ms exponential average followed by a peak detector whose hold decays with a
  1.5 s time constant, IEC 60651:1979 and IEC 61672-1:2002. Time weighting I is no longer
  specified in IEC 61672-1:2013 (its foreword lists the deletion); it is offered for legacy
  assessments that still ask for LAI or LAIeq.

Discretisation
--------------
Each exponential stage is the one-pole low-pass

    y[n] = a * y[n-1] + (1 - a) * x[n],   a = exp(-1 / (fs * tau)),

i.e. the exact (step-invariant) solution of ``tau dy/dt = x - y`` for an input held at
``x[n]`` during the sample period that ends at sample n. Its DC gain is exactly 1, a decay after
the input stops follows ``exp(-t/tau)`` exactly at the sample instants (level decay rate
``10 lg(e) / tau`` dB/s: 34.7 dB/s for F, 4.3 dB/s for S), and the step response is
``1 - exp(-(n + 1) / (fs tau))``, that is, the analogue response with the step taken to begin one
sample period before sample 0 (a lead of 1/fs: 21 us at 48 kHz, 0.00017 % of the F time
constant). Its state (the last output) is carried across blocks, so any split of the signal
into blocks gives the same output as one pass (to rounding).

Speed
-----
A sample-by-sample recursion (:func:`scipy.signal.lfilter`, about 5-7 ns per sample on the
development machine) waits for each result before the next. Blocks of at least
``_BLOCK_MIN_SAMPLES`` (256) samples are instead cut into frames of ``m = 8`` samples, and
every output is computed exactly from the output ``Y`` before its frame,

    y[r] = a**(r+1) Y + sum_{i<=r} (1 - a) a**(r-i) x[i],   r = 0 .. m-1,

as one matrix product of all frames with the lower-triangular 8 x 8 Toeplitz matrix of the
sums (8 multiply-adds per sample), plus a rank-1 update for the ``a**(r+1) Y`` term. The
outputs before each frame follow from the frame recurrence ``Y_k = a**8 Y_(k-1) + e_k``
(``e_k`` the sum part of frame k's last output), which is solved the same way over groups of
16 frames, with the 16 x 16 Toeplitz matrix of the powers ``a**(8 j)``; only the groups'
recurrence (pole ``a**128``, 1/128 of the samples) runs through lfilter. The two rank-1
updates (per frame and per group) are matrix products of inner dimension 1 added in place
(BLAS GEMM with beta = 1), and every power of ``a`` is taken from ``a`` itself, so the
coefficients are correctly rounded. Every term is positive (``x >= 0``), so nothing cancels:
each output is within a few tens of units in the last place of the recursion's (within
about 4e-14 relative of lfilter over 8-192 kHz and F, S, I; ``tests/test_timeweight.py``
requires 1e-13). This costs about 1.1-1.4 ns per sample (blocks of 2**17 samples, one
thread), about 1.7 times as fast as the earlier frames of 32 samples with one level (32
multiply-adds per sample). The products are cut to at most 2**18 multiply-adds, which
OpenBLAS runs on the calling thread. Every sample's value is computed: maxima, minima and
the percentile histogram read them all.

The I detector's peak hold needs no per-sample output in the engine, only its maximum per
interval: :meth:`TimeWeighting.segment_maxima` reads it as ``max(max x, d * held)`` over the
segment (``held`` the value before it) and advances the hold with one product per sample,
exactly (module notes of :class:`PeakDetector`).

:class:`TimeWeightingSet` runs several weightings of one signal (the engine's F, S and I)
with the same arithmetic as the single objects (the same bits): it checks the input once,
and forms a maxima-only weighting's per-sample values (the I averager's) in a reused work
array that is never returned.

With the compiled kernels (:mod:`bandmeter.compiled`), :meth:`TimeWeightingSet.extremes`
(the engine's call) runs F, S and I as the recursion itself, the very bits of lfilter, in
one pass that also holds the I detector (as its last value from the averager and its age,
``p d**m`` from the detector's power table, re-based once per table length) and takes every
segment's maxima and minima: about 3 ns per sample for all three weightings and their
extremes, against about 6 ns for the NumPy path's averaging and hold alone, before its
reductions (0.09 s against 0.17 s on the 10-minute benchmark recording). The two paths
agree to 1e-13 relative.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import NamedTuple

import numpy as np
from scipy.linalg import blas
from scipy.signal import lfilter

from .blockfilter import SINGLE_THREAD_MACS, matmul_rows
from .compiled import kernels
from .errors import SettingsError
from .numerics import STATE_FLOOR

#: F (Fast) time constant in s. IEC 61672-1:2013; REFERENCE_VALUES.md 4 (confirmed).
TAU_FAST_S = 0.125
#: S (Slow) time constant in s. IEC 61672-1:2013; REFERENCE_VALUES.md 4 (confirmed).
TAU_SLOW_S = 1.0
#: I (Impulse) averaging time constant in s. IEC 60651:1979, IEC 61672-1:2002;
#: REFERENCE_VALUES.md 4 (confirmed; deleted from IEC 61672-1:2013).
TAU_IMPULSE_S = 0.035
#: Decay time constant in s of the I peak detector. IEC 60651:1979, IEC 61672-1:2002;
#: REFERENCE_VALUES.md 4 (confirmed; deleted from IEC 61672-1:2013).
TAU_IMPULSE_DECAY_S = 1.5

#: Time constants of the exponential averager of each time weighting, in s.
TIME_CONSTANTS_S = {"F": TAU_FAST_S, "S": TAU_SLOW_S, "I": TAU_IMPULSE_S}

# Longest run handled in one piece by the peak detector's scan: d^-n stays below
# exp(16384 / (8000 Hz * 1.5 s)) = 3.9 even at a low sample rate, so nothing overflows.
_DETECTOR_CHUNK = 1 << 14
#: Blocks of at least this many samples take the block formulation, shorter ones lfilter.
_BLOCK_MIN_SAMPLES = 256
#: Samples per frame, and frames per group, of the two-level form (:class:`TimeWeightingSet`).
_GROUP_FRAME = 8
_GROUP_FRAMES = 16
#: Longest block whose work array a :class:`TimeWeightingSet` keeps between blocks (samples).
_KEEP_WORK_SAMPLES = 1 << 18


def _check_fs(fs: float) -> float:
    if not (isinstance(fs, (int, float, np.integer, np.floating)) and math.isfinite(fs) and fs > 0):
        raise SettingsError(f"sample rate must be a finite number of Hz > 0, got {fs!r}")
    return float(fs)


def _check_tau(tau_s: float) -> float:
    if not (
        isinstance(tau_s, (int, float, np.integer, np.floating))
        and math.isfinite(tau_s)
        and tau_s > 0
    ):
        raise SettingsError(f"time constant must be a finite number of s > 0, got {tau_s!r}")
    return float(tau_s)


def _check_initial(initial_mean_square: float) -> float:
    value = initial_mean_square
    if not (
        isinstance(value, (int, float, np.integer, np.floating))
        and math.isfinite(value)
        and value >= 0
    ):
        raise SettingsError(
            f"initial_mean_square must be a finite number >= 0, got {initial_mean_square!r}"
        )
    return float(value)


def _squared_block(squared_block: np.ndarray) -> np.ndarray:
    x = np.asarray(squared_block, dtype=np.float64)
    if x.ndim != 1:
        raise SettingsError(f"expected a 1-D block of squared samples, got shape {x.shape!r}")
    if x.size and not x.min() >= 0:
        raise SettingsError(
            f"squared samples must be >= 0 and not NaN, got minimum {float(x.min())!r}"
        )
    if x.size and x.max() == np.inf:
        raise SettingsError("squared samples must be >= 0 and finite, got infinity")
    return x


def _segment_edges(starts: Sequence[int] | np.ndarray, size: int) -> list[int]:
    """Segment edges ``[*starts, size]``, checked: increasing from 0, inside the block."""
    edges = [int(v) for v in starts] + [size]
    if edges[0] != 0 or any(b <= a for a, b in zip(edges[:-1], edges[1:], strict=True)):
        raise SettingsError(
            f"segment starts must increase from 0 within the block, got {list(starts)!r}"
        )
    return edges


def _toeplitz(a: float, m: int, gain: float, step: int) -> np.ndarray:
    """``(i, r) -> gain * a**(step * (r - i))`` for ``r >= i``, else 0 (``m x m``)."""
    k = np.arange(m)
    lag = k[None, :] - k[:, None]
    power = a ** (step * np.maximum(lag, 0)).astype(np.float64)
    return np.where(lag >= 0, gain * power, 0.0)


def _add_outer(out: np.ndarray, row: np.ndarray, column: np.ndarray) -> None:
    """``out[i, r] += row[i] * column[r, 0]`` in place (``out`` C-contiguous ``(len(row), m)``).

    A matrix product of inner dimension 1 added with beta = 1 (one pass over ``out``); faster
    than BLAS GER on these short rows.
    """
    step = max(1, SINGLE_THREAD_MACS // column.shape[0])
    for k in range(0, row.size, step):
        part = out[k : k + step]
        done = blas.dgemm(1.0, column, row[None, k : k + step], beta=1.0, c=part.T,
                          overwrite_c=True)
        if not np.may_share_memory(done, part):  # pragma: no cover - BLAS made a copy
            part[...] = done.T


class _GroupedFrames:
    """Exact outputs of ``y[n] = a y[n-1] + (1 - a) x[n]`` by frames of 8 samples and groups
    of 16 frames (module notes, :class:`TimeWeightingSet`)."""

    def __init__(self, a: float) -> None:
        m, g = _GROUP_FRAME, _GROUP_FRAMES
        self.toeplitz = _toeplitz(a, m, 1.0 - a, 1)  # (i, r): (1 - a) a**(r - i)
        self.carry = np.asfortranarray(a ** np.arange(1.0, m + 1.0)[:, None])  # a**(r+1)
        self.group_toeplitz = _toeplitz(a, g, 1.0, m)  # (j, s): a**(m (s - j))
        self.group_carry = np.asfortranarray(a ** (m * np.arange(1.0, g + 1.0))[:, None])
        self.group_den = np.array([1.0, -(a ** (m * g))])

    def outputs(self, x: np.ndarray, state: float, out: np.ndarray) -> np.ndarray:
        """Outputs of a block (at least one frame) from the output ``state`` before it."""
        m, g = _GROUP_FRAME, _GROUP_FRAMES
        frames, rest = divmod(x.size, m)
        whole = out[: frames * m].reshape(frames, m)
        matmul_rows(x[: frames * m].reshape(frames, m), self.toeplitz, whole)
        ends = np.empty(frames)  # sum part of each frame's last output
        np.copyto(ends, whole[:, -1])
        # frame-end outputs Y_k = a**m Y_(k-1) + ends[k] after Y_(-1) = state, by groups
        frame_out = np.empty(frames + 1)
        frame_out[0] = state
        groups, spare = divmod(frames, g)
        last = state
        if groups:
            grid = frame_out[1 : 1 + groups * g].reshape(groups, g)
            matmul_rows(ends[: groups * g].reshape(groups, g), self.group_toeplitz, grid)
            group_out, _ = lfilter([1.0], self.group_den, grid[:, -1],
                                   zi=[-self.group_den[1] * state])
            before = np.empty(groups)
            before[0] = state
            before[1:] = group_out[:-1]
            _add_outer(grid, before, self.group_carry)
            last = float(group_out[-1])
        if spare:
            tail = ends[groups * g :] @ self.group_toeplitz[:spare, :spare]
            tail += last * self.group_carry[:spare, 0]
            frame_out[1 + groups * g :] = tail
        _add_outer(whole, frame_out[:frames], self.carry)
        if rest:
            tail = x[frames * m :] @ self.toeplitz[:rest, :rest]
            tail += float(frame_out[frames]) * self.carry[:rest, 0]
            out[frames * m :] = tail
        return out


class ExponentialAverager:
    """Exponentially time-weighted mean square (one-pole low-pass of the squared signal).

    Parameters
    ----------
    fs : float
        Sample rate in Hz.
    tau_s : float
        Time constant in s (0.125 for F, 1 for S, 0.035 for the I averager).
    initial_mean_square : float, optional
        Mean square (input units^2) the averager starts from, as if that mean square had been
        applied forever before sample 0. 0 (default) starts from silence.

    Notes
    -----
    ``y[n] = a y[n-1] + (1 - a) x[n]`` with ``a = exp(-1/(fs tau_s))``; see the module notes
    for the properties of this discretisation.

    Examples
    --------
    F-weighted mean square of a 1 Pa rms tone, starting from its own mean square:

    >>> import numpy as np
    >>> fs = 48000
    >>> p = np.sqrt(2) * np.sin(2 * np.pi * 1000 * np.arange(fs) / fs)
    >>> fast = ExponentialAverager(fs, TAU_FAST_S, initial_mean_square=1.0)
    >>> bool(np.allclose(fast.process(p**2), 1.0, atol=2e-3))
    True
    """

    def __init__(self, fs: float, tau_s: float, initial_mean_square: float = 0.0) -> None:
        self.fs = _check_fs(fs)
        self.tau_s = _check_tau(tau_s)
        self.initial_mean_square = _check_initial(initial_mean_square)
        self.a = math.exp(-1.0 / (self.fs * self.tau_s))
        self._b = np.array([1.0 - self.a])
        self._den = np.array([1.0, -self.a])
        self._grouped: _GroupedFrames | None = None  # block formulation, made on first use
        self.reset()

    def reset(self) -> None:
        """Return to the state given at construction (``initial_mean_square``)."""
        self._last = self.initial_mean_square
        self._state = self._last  # output before the next sample (flushed when tiny)

    def _keep(self, last: float) -> None:
        """Carry the last output to the next block."""
        self._last = last
        # keep the state out of slow subnormal numbers
        self._state = last if self.a * last >= STATE_FLOOR else 0.0

    @property
    def mean_square(self) -> float:
        """Output at the last processed sample (the carried state), input units^2."""
        return self._last

    def process(self, squared_block: np.ndarray) -> np.ndarray:
        """Time-weighted mean square of each sample of a block.

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D squared signal (>= 0), any units^2, following the previous block.

        Returns
        -------
        numpy.ndarray
            Time-weighted mean square, same length and units as the input.
        """
        x = _squared_block(squared_block)
        return self._process_grouped(x, np.empty(x.size))

    def _process_grouped(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """:meth:`process` of a checked block into ``out[:x.size]``, long blocks by the
        two-level form (module notes); returns that view."""
        y = out if out.size == x.size else out[: x.size]
        if x.size == 0:
            return y
        if x.size < _BLOCK_MIN_SAMPLES:
            y[...], _ = lfilter(self._b, self._den, x, zi=[self.a * self._state])
        else:
            if self._grouped is None:
                self._grouped = _GroupedFrames(self.a)
            self._grouped.outputs(x, self._state, y)
        self._keep(float(y[-1]))
        return y


class PeakDetector:
    """Peak hold with exponential decay: ``held[n] = max(x[n], d * held[n-1])``.

    Parameters
    ----------
    fs : float
        Sample rate in Hz.
    tau_s : float, optional
        Decay time constant of the hold in s, ``d = exp(-1/(fs tau_s))``; 1.5 s (default) is
        the I (impulse) detector of IEC 60651:1979 / IEC 61672-1:2002.
    initial_mean_square : float, optional
        Held value before sample 0 (input units^2).

    Notes
    -----
    Vectorised exactly, without a per-sample loop. Unrolling the recursion over a run of
    samples ``0..n`` that starts from the held value ``h`` gives

        held[n] = max(h d^(n+1), max_{k<=n} x[k] d^(n-k))
                = d^n max(h d, cummax_{k<=n} x[k] d^-k),

    one cumulative maximum and three products per sample. The powers of ``d`` are tabulated
    once, relative to the start of each run of at most 2^14 samples (longer blocks are cut
    into such runs), so ``d^-k`` stays below 4 at any sample rate >= 8 kHz and nothing
    overflows; ``held >= x`` is enforced exactly afterwards (it holds by definition and
    removes the last-bit rounding of ``d^n d^-n``). The result matches the recursion to a few
    units in the last place (1e-14 relative over millions of samples).
    """

    def __init__(
        self, fs: float, tau_s: float = TAU_IMPULSE_DECAY_S, initial_mean_square: float = 0.0
    ) -> None:
        self.fs = _check_fs(fs)
        self.tau_s = _check_tau(tau_s)
        self.initial_mean_square = _check_initial(initial_mean_square)
        self.log_d = -1.0 / (self.fs * self.tau_s)
        k = np.arange(_DETECTOR_CHUNK, dtype=np.float64)
        self._decay = np.exp(k * self.log_d)  # d^k
        self._grow = np.exp(-k * self.log_d)  # d^-k
        self._decay_reversed = np.ascontiguousarray(self._decay[::-1])  # d^(2^14 - 1 - k)
        # segment_maxima skips what cannot be the largest, which needs a table that never rises
        self._monotone = bool(np.all(np.diff(self._decay) <= 0.0))
        self._work = np.empty(_DETECTOR_CHUNK)
        self._d = math.exp(self.log_d)
        self.reset()

    def reset(self) -> None:
        """Return to the state given at construction."""
        self._held = self.initial_mean_square

    @property
    def mean_square(self) -> float:
        """Held value at the last processed sample, input units^2."""
        return self._held

    def process(self, squared_block: np.ndarray) -> np.ndarray:
        """Held (peak-detected) mean square of each sample of a block.

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D non-negative signal (here the output of the 35 ms averager), units^2.

        Returns
        -------
        numpy.ndarray
            Held values, same length and units as the input.
        """
        return self._process_checked(_squared_block(squared_block))

    def _process_checked(self, x: np.ndarray) -> np.ndarray:
        out = np.empty_like(x)
        for start in range(0, x.size, _DETECTOR_CHUNK):
            stop = min(start + _DETECTOR_CHUNK, x.size)
            out[start:stop] = self._run(x[start:stop])
        return out

    def segment_maxima(self, squared_block: np.ndarray, starts: np.ndarray) -> np.ndarray:
        """Largest held value in each segment of a block, without the per-sample output.

        Equals ``np.maximum.reduceat(self.process(squared_block), starts)`` and leaves the
        same state. Within a segment that starts with the held value ``h``,
        ``held[n] = max(h d**(n+1), max_{k<=n} x[k] d**(n-k))``, and as ``d < 1`` its largest
        value is ``max(h d, max x)``; the hold at the segment's end is
        ``max(h d**L, max_k x[k] d**(L-1-k))`` (L samples; computed by runs of at most 2**14
        samples, like :meth:`process`). One product and two maxima per sample, against a
        cumulative maximum and four passes for the full output. Only the samples from the
        largest of each run on need the product: an earlier sample is no larger and is
        weighted by a smaller power of ``d``, so its product (rounded the same way) is no
        larger either; the result is the same to the last bit.

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D non-negative signal (here the output of the 35 ms averager), units^2.
        starts : numpy.ndarray of int
            Increasing segment starts, the first 0 (as for ``np.maximum.reduceat``).

        Returns
        -------
        numpy.ndarray
            Largest held value of each segment, units^2.
        """
        x = _squared_block(squared_block)
        return self._segment_maxima(x, _segment_edges(starts, x.size))

    def _segment_maxima(self, x: np.ndarray, edges: list[int]) -> np.ndarray:
        """:meth:`segment_maxima` of a checked block, with checked edges ``[*starts, size]``."""
        out = np.empty(len(edges) - 1)
        size = _DETECTOR_CHUNK
        for i in range(out.size):
            part = x[edges[i] : edges[i + 1]]
            start_hold = self._held * self._d
            top = 0.0
            for start in range(0, part.size, size):
                run = part[start : start + size]
                n = run.size
                if self._monotone:
                    k = int(np.argmax(run))
                    peak = float(run[k])
                else:  # pragma: no cover - a table rounded out of order: no skipping
                    k, peak = 0, float(run.max())
                top = max(top, peak)
                if peak > 0.0:  # x[j] d**(n-1-j) from the largest on (docstring)
                    weighted = np.multiply(run[k:], self._decay_reversed[size - n + k :],
                                           out=self._work[: n - k])
                    tail = float(weighted.max())
                else:  # all zero
                    tail = 0.0
                held = max(self._held * self._d * self._decay[n - 1], tail)
                self._held = held if held >= STATE_FLOOR else 0.0
            out[i] = max(top, start_hold)
        return out

    def _run(self, x: np.ndarray) -> np.ndarray:
        n = x.size
        scan = np.multiply(x, self._grow[:n])
        np.maximum.accumulate(scan, out=scan)
        np.maximum(scan, self._held * self._d, out=scan)
        held = np.multiply(scan, self._decay[:n], out=scan)
        np.maximum(held, x, out=held)
        last = float(held[-1])
        self._held = last if last >= STATE_FLOOR else 0.0  # no slow subnormal state
        return held


class TimeWeighting:
    """F, S or I time weighting of a squared signal.

    Parameters
    ----------
    fs : float
        Sample rate in Hz.
    weighting : {"F", "S", "I"}
        ``"F"`` (Fast, tau 0.125 s), ``"S"`` (Slow, tau 1 s), both IEC 61672-1:2013; ``"I"``
        (Impulse): 35 ms exponential averaging followed by a peak detector whose hold decays
        with a 1.5 s time constant, IEC 60651:1979 and IEC 61672-1:2002. I is no longer
        specified in IEC 61672-1:2013 (deleted from that edition); it is kept for legacy
        assessments.
    initial_mean_square : float, optional
        Mean square (input units^2) the weighting starts from, as if applied forever before
        sample 0; the engine seeds it (e.g. with the mean square of the first time constant of
        the recording) so that the minimum level is not -inf at the start of a file. For I it
        seeds both the averager and the detector.

    Examples
    --------
    >>> import numpy as np
    >>> fs = 48000
    >>> p = np.sin(2 * np.pi * 4000 * np.arange(fs // 2) / fs)
    >>> fast = TimeWeighting(fs, "F")
    >>> level_db = 10 * np.log10(fast.process(p**2).max() / 0.5)  # re the steady level
    >>> round(float(level_db), 2)  # 500 ms burst; 10 lg(1 - exp(-0.5/0.125)) = -0.08
    -0.08
    """

    def __init__(self, fs: float, weighting: str, initial_mean_square: float = 0.0) -> None:
        if weighting not in TIME_CONSTANTS_S:
            raise SettingsError(f"time weighting must be 'F', 'S' or 'I', got {weighting!r}")
        self.weighting = weighting
        self.tau_s = TIME_CONSTANTS_S[weighting]
        self._averager = ExponentialAverager(fs, self.tau_s, initial_mean_square)
        self._detector = (
            PeakDetector(fs, TAU_IMPULSE_DECAY_S, initial_mean_square) if weighting == "I" else None
        )
        self.fs = self._averager.fs

    def reset(self) -> None:
        """Return to the state given at construction."""
        self._averager.reset()
        if self._detector is not None:
            self._detector.reset()

    @property
    def mean_square(self) -> float:
        """Time-weighted mean square at the last processed sample, input units^2."""
        stage = self._detector if self._detector is not None else self._averager
        return stage.mean_square

    def process(self, squared_block: np.ndarray) -> np.ndarray:
        """Time-weighted mean square of each sample of a block.

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D squared (frequency-weighted) signal, units^2, following the previous block.

        Returns
        -------
        numpy.ndarray
            Time-weighted mean square, same length and units; the level in dB is
            ``10 lg(mean_square / p0^2)``.
        """
        y = self._averager.process(squared_block)
        if self._detector is not None:
            y = self._detector.process(y)
        return y

    def segment_maxima(self, squared_block: np.ndarray, starts: np.ndarray) -> np.ndarray:
        """Largest time-weighted mean square in each segment of a block.

        Equals ``np.maximum.reduceat(self.process(squared_block), starts)`` (``starts``
        increasing from 0) and advances the state the same way; for I the peak hold's
        maxima are read without forming its output (:meth:`PeakDetector.segment_maxima`).

        Returns
        -------
        numpy.ndarray
            One maximum per segment, units^2 of the input.
        """
        y = self._averager.process(squared_block)
        if self._detector is not None:  # y is an averager output: >= 0, no need to check
            return self._detector._segment_maxima(y, _segment_edges(starts, y.size))
        return np.maximum.reduceat(y, np.asarray(starts, dtype=np.intp))


class TimeWeightedBlock(NamedTuple):
    """What :meth:`TimeWeightingSet.process` returns for one block (unpacks as a pair)."""

    #: Per-sample time-weighted mean square of each weighting not read as maxima only:
    #: contiguous 1-D float64 arrays of the block's length, units^2 of the input.
    full: dict[str, np.ndarray]
    #: Largest time-weighted mean square per segment of each maxima-only weighting, units^2.
    maxima: dict[str, np.ndarray]


class TimeWeightedExtremes(NamedTuple):
    """What :meth:`TimeWeightingSet.extremes` returns for one block (unpacks as a triple)."""

    #: Per-sample time-weighted mean square of each weighting not read as maxima only.
    full: dict[str, np.ndarray]
    #: Largest time-weighted mean square per segment of every weighting, units^2.
    maxima: dict[str, np.ndarray]
    #: Smallest time-weighted mean square per segment of each weighting in ``full``, units^2.
    minima: dict[str, np.ndarray]


class TimeWeightingSet:
    """Several time weightings (F, S, I) of one squared signal, computed together.

    Gives what separate :class:`TimeWeighting` objects give (their :meth:`~TimeWeighting.process`
    and :meth:`~TimeWeighting.segment_maxima`), by the same arithmetic (the same bits), with
    the same states carried across blocks: the input is checked once, and a maxima-only
    weighting's per-sample values go to a reused work array instead of a new one. Every
    output is within a few tens of units in the last place of the sample-by-sample recursion
    (module notes; 1e-13 relative in the tests, typically below 4e-14).

    Parameters
    ----------
    fs : float
        Sample rate in Hz.
    weightings : sequence of {"F", "S", "I"}, optional
        The time weightings, each at most once; default all three.
    initial_mean_square : float or mapping of str to float, optional
        Mean square (input units^2) each weighting starts from, as for
        :class:`TimeWeighting`: one value for all, or one per weighting (a mapping with a
        value for every weighting of the set). Default 0 (silence).
    maxima_only : sequence of str, optional
        Weightings of the set whose per-sample output is not needed, only its largest value
        per segment (default ``("I",)``); the others return their full output.

    Examples
    --------
    The engine's use: F and S per sample, I's maximum per interval piece.

    >>> import numpy as np
    >>> fs = 48000
    >>> rng = np.random.default_rng(0)
    >>> a2 = rng.standard_normal(2 * fs) ** 2  # squared signal, mean square 1
    >>> tw = TimeWeightingSet(fs, ("F", "S", "I"), initial_mean_square={"F": 1, "S": 1, "I": 1})
    >>> full, maxima = tw.process(a2, starts=np.array([0, fs]))
    >>> full["F"].shape, full["S"].shape, maxima["I"].shape
    ((96000,), (96000,), (2,))
    >>> one = TimeWeighting(fs, "S", initial_mean_square=1.0).process(a2)
    >>> bool(np.allclose(full["S"], one, rtol=1e-13, atol=0))
    True
    """

    def __init__(
        self,
        fs: float,
        weightings: Sequence[str] = ("F", "S", "I"),
        initial_mean_square: float | Mapping[str, float] = 0.0,
        maxima_only: Sequence[str] = ("I",),
    ) -> None:
        names = tuple(weightings)
        for name in names:
            if name not in TIME_CONSTANTS_S:
                raise SettingsError(f"time weighting must be 'F', 'S' or 'I', got {name!r}")
        if not names or len(set(names)) != len(names):
            raise SettingsError(f"time weightings must be given once each, got {names!r}")
        maxima = tuple(maxima_only)
        if any(name not in names for name in maxima):
            raise SettingsError(
                f"maxima_only {maxima!r} must name weightings of the set {names!r}"
            )
        if isinstance(initial_mean_square, Mapping):
            missing = [name for name in names if name not in initial_mean_square]
            if missing:
                raise SettingsError(f"initial_mean_square has no value for {missing!r}")
            seeds = {name: initial_mean_square[name] for name in names}
        else:
            seeds = dict.fromkeys(names, initial_mean_square)
        self.weightings = names
        self.maxima_only = tuple(name for name in names if name in maxima)
        self._members = {name: TimeWeighting(fs, name, seeds[name]) for name in names}
        self.fs = self._members[names[0]].fs
        self._work = np.empty(0)  # per-sample values of the maxima-only weightings

    @property
    def members(self) -> dict[str, TimeWeighting]:
        """The single :class:`TimeWeighting` of each weighting; they hold the set's state.

        A block given to a member advances that weighting alone (by the same arithmetic),
        and the set goes on from the state it leaves; the engine's reference computations
        can read them like separate objects.
        """
        return dict(self._members)

    def reset(self) -> None:
        """Return every weighting to the state given at construction."""
        for member in self._members.values():
            member.reset()

    @property
    def mean_square(self) -> dict[str, float]:
        """Time-weighted mean square of each weighting at the last processed sample, units^2
        of the input (the carried state; the I detector's held value for I)."""
        return {name: member.mean_square for name, member in self._members.items()}

    def process(
        self, squared_block: np.ndarray, starts: Sequence[int] | np.ndarray | None = None
    ) -> TimeWeightedBlock:
        """Time-weight the next block of the squared signal with every weighting of the set.

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D squared (frequency-weighted) signal (>= 0), units^2 (e.g. Pa^2 or full
            scale^2), following the previous block.
        starts : sequence of int, optional
            Increasing segment starts within the block, the first 0 (as for
            ``np.maximum.reduceat``), for the maxima-only weightings (ignored without any);
            default one segment, the whole block (none for an empty block).

        Returns
        -------
        TimeWeightedBlock
            ``(full, maxima)``: ``full[name]`` the time-weighted mean square of each sample
            (a new contiguous float64 array, units^2 of the input; the level in dB is
            ``10 lg(mean_square / p0^2)``) for each weighting not in ``maxima_only``, as
            :meth:`TimeWeighting.process` gives it; ``maxima[name]`` the largest
            time-weighted mean square of each segment for each maxima-only weighting, as
            :meth:`TimeWeighting.segment_maxima` gives it.

        Raises
        ------
        SettingsError
            For a block that is not 1-D or has a negative or NaN value, or starts that do not
            increase from 0 within the block; nothing is advanced then.
        """
        x = _squared_block(squared_block)
        edges: list[int] = []
        if self.maxima_only:
            if starts is None:
                starts = [0] if x.size else []
            edges = _segment_edges(starts, x.size)
        full: dict[str, np.ndarray] = {}
        maxima: dict[str, np.ndarray] = {}
        for name, member in self._members.items():
            averager, detector = member._averager, member._detector
            if name not in self.maxima_only:
                y = averager._process_grouped(x, np.empty(x.size))
                full[name] = y if detector is None else detector._process_checked(y)
                continue
            y = averager._process_grouped(x, self._work_array(x.size))
            if detector is not None:
                maxima[name] = detector._segment_maxima(y, edges)
            elif len(edges) > 1:
                maxima[name] = np.maximum.reduceat(y, np.asarray(edges[:-1], dtype=np.intp))
            else:
                maxima[name] = np.empty(0)
        return TimeWeightedBlock(full, maxima)

    def extremes(
        self, squared_block: np.ndarray, starts: Sequence[int] | np.ndarray
    ) -> TimeWeightedExtremes:
        """:meth:`process` with each weighting's largest and smallest value per segment.

        With the compiled kernels (:mod:`bandmeter.compiled`) every weighting runs as the
        sample-by-sample recursion itself, ``y[n] = (1 - a) x[n] + a y[n-1]`` in the
        operations and order of :func:`scipy.signal.lfilter` (so its very bits), all of them
        and the I detector's hold ``max(y[n], d held[n-1])`` in one pass, with the segments'
        extremes taken on the way; the block formulation of the NumPy path agrees with it to
        1e-13 relative (module notes). The hold's segment maxima follow the same rule either
        way, ``max(max y, d held)`` (:meth:`PeakDetector.segment_maxima`).

        Parameters
        ----------
        squared_block : numpy.ndarray
            1-D squared (frequency-weighted) signal (>= 0), units^2, following the previous
            block.
        starts : sequence of int
            Increasing segment starts within the block, the first 0 (one segment at least:
            the block must not be empty).

        Returns
        -------
        TimeWeightedExtremes
            ``(full, maxima, minima)``: ``full`` as from :meth:`process`; ``maxima[name]``
            the largest time-weighted mean square of each segment for every weighting of the
            set, ``minima[name]`` the smallest for each weighting with a full output.

        Raises
        ------
        SettingsError
            As :meth:`process`; nothing is advanced then.
        """
        x = np.asarray(squared_block, dtype=np.float64)
        compiled = kernels()
        if compiled is None or x.ndim != 1 or x.size == 0:
            return self._extremes_numpy(x, starts)
        edges = np.array(_segment_edges(starts, x.size), dtype=np.int64)
        x = np.ascontiguousarray(x)
        members = list(self._members.items())
        coefficients = np.array([
            (m._averager.a, m._averager._b[0], 1.0 if m._detector else 0.0) for _, m in members
        ])
        # the I detector's power table (a set holds each weighting once: one detector at most)
        detectors = [m._detector for _, m in members if m._detector is not None]
        decay = detectors[0]._decay if detectors else np.ones(2)
        states = np.array([m._averager._state for _, m in members])
        held = np.array([m._detector._held if m._detector else 0.0 for _, m in members])
        full = {name: np.empty(x.size) for name, _ in members if name not in self.maxima_only}
        outputs = tuple(full.get(name) for name, _ in members)
        n_segments = edges.size - 1
        top = np.empty((len(members), n_segments))
        bottom = np.empty((len(members), n_segments))
        if not compiled.time_weighting(x, edges, coefficients, states, held, decay, outputs,
                                       top, bottom):
            _squared_block(x)  # raises the NumPy path's error
            raise SettingsError(  # pragma: no cover - _squared_block refuses the same
                "squared samples must be >= 0 and finite")
        for j, (_, member) in enumerate(members):
            member._averager._keep(float(states[j]))
            if member._detector is not None:
                member._detector._held = float(held[j])
        maxima = {name: top[j] for j, (name, _) in enumerate(members)}
        minima = {name: bottom[j] for j, (name, _) in enumerate(members) if name in full}
        return TimeWeightedExtremes(full, maxima, minima)

    def _extremes_numpy(
        self, x: np.ndarray, starts: Sequence[int] | np.ndarray
    ) -> TimeWeightedExtremes:
        """:meth:`extremes` by :meth:`process` and NumPy's segment reductions."""
        full, maxima = self.process(x, starts)
        seg = np.asarray(starts, dtype=np.intp)
        maxima = dict(maxima)
        minima = {}
        for name, y in full.items():
            maxima[name] = np.maximum.reduceat(y, seg)
            minima[name] = np.minimum.reduceat(y, seg)
        maxima = {name: maxima[name] for name in self.weightings}
        return TimeWeightedExtremes(full, maxima, minima)

    def _work_array(self, size: int) -> np.ndarray:
        if self._work.size >= size:
            return self._work
        work = np.empty(size)
        if size <= _KEEP_WORK_SAMPLES:  # a very long block's work array is not kept
            self._work = work
        return work
