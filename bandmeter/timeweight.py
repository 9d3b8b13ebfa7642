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
``_BLOCK_MIN_SAMPLES`` samples are instead cut into frames of ``M = 32`` samples, and every
output is computed exactly from the output ``Y`` before its frame,

    y[r] = a**(r+1) Y + sum_{i<=r} (1 - a) a**(r-i) x[i],   r = 0 .. M-1,

as one matrix product of all frames with the lower-triangular Toeplitz matrix of the sums,
plus a rank-1 update for the ``a**(r+1) Y`` term; the outputs before each frame follow from
the frame recurrence ``Y_k = a**M Y_(k-1) + (last column of the product)``, a first-order
recursion over the frames only (1/32 of the samples). Every term is positive (``x >= 0``), so
nothing cancels: each output is within a few tens of units in the last place of the
recursion's (``tests/test_timeweight.py`` compares with lfilter to 1e-13 relative). This
costs about 2-2.5 ns per sample. The products are made 256 frames at a time, small enough
for OpenBLAS to run them on the calling thread. Every sample's value is computed: maxima,
minima and the percentile histogram read them all.

The I detector's peak hold needs no per-sample output in the engine, only its maximum per
interval: :meth:`TimeWeighting.segment_maxima` reads it as ``max(max x, d * held)`` over the
segment (``held`` the value before it) and advances the hold with one product per sample,
exactly (module notes of :class:`PeakDetector`).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.linalg import blas
from scipy.signal import lfilter

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
#: Samples per frame of the block formulation of the exponential averager.
_FRAME = 32
#: Blocks of at least this many samples take the block formulation, shorter ones lfilter.
_BLOCK_MIN_SAMPLES = 8 * _FRAME
#: Frames per matrix product: small products stay single-threaded in OpenBLAS (which
#: threads GEMM above 2**18 multiply-adds and GER above 9216 elements) and in the caches.
_RUN_FRAMES = 256


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
    return x


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
        # block formulation (module notes): frames of _FRAME samples
        k = np.arange(_FRAME)
        lag = k[None, :] - k[:, None]  # r - i for input i (row), output r (column)
        power = self.a ** np.maximum(lag, 0).astype(np.float64)
        self._toeplitz = np.where(lag >= 0, (1.0 - self.a) * power, 0.0)  # (i, r)
        self._carry = self.a ** (k + 1.0)  # a**(r+1): weight of the output before the frame
        self._frame_den = np.array([1.0, -(self.a**_FRAME)])
        self.reset()

    def reset(self) -> None:
        """Return to the state given at construction (``initial_mean_square``)."""
        self._last = self.initial_mean_square
        self._state = self._last  # output before the next sample (flushed when tiny)

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
        if x.size == 0:
            return x.copy()
        if x.size < _BLOCK_MIN_SAMPLES:
            y, _ = lfilter(self._b, self._den, x, zi=[self.a * self._state])
        else:
            y = self._frames(x)
        self._last = float(y[-1])
        # keep the state out of slow subnormal numbers
        self._state = self._last if self.a * self._last >= STATE_FLOOR else 0.0
        return y

    def _frames(self, x: np.ndarray) -> np.ndarray:
        """Outputs of a block by frames of ``_FRAME`` samples (module notes, Speed)."""
        m, run = _FRAME, _RUN_FRAMES
        frames, rest = divmod(x.size, m)
        y = np.empty(x.size)
        whole = y[: frames * m].reshape(frames, m)
        xf = x[: frames * m].reshape(frames, m)
        full = frames // run * run  # runs of whole batches: one stacked product
        if full:
            np.matmul(xf[:full].reshape(-1, run, m), self._toeplitz,
                      out=whole[:full].reshape(-1, run, m))
        if full < frames:
            np.matmul(xf[full:], self._toeplitz, out=whole[full:])
        # output before each frame: Y_k = a**M Y_(k-1) + (sum part of frame k's last output)
        ends, _ = lfilter([1.0], self._frame_den, whole[:, -1],
                          zi=[-self._frame_den[1] * self._state])
        before = np.empty(frames)
        before[0] = self._state
        before[1:] = ends[:-1]
        for k in range(0, frames, run):  # += Y a**(r+1), in place
            part = whole[k : k + run]
            done = blas.dger(1.0, self._carry, before[k : k + run], a=part.T, overwrite_a=True)
            if not np.may_share_memory(done, part):  # pragma: no cover - BLAS made a copy
                part[...] = done.T
        if rest:
            tail = x[frames * m :] @ self._toeplitz[:rest, :rest]
            tail += float(ends[-1]) * self._carry[:rest]
            y[frames * m :] = tail
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
        x = _squared_block(squared_block)
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
        cumulative maximum and four passes for the full output.

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
        edges = [int(v) for v in starts] + [x.size]
        if edges[0] != 0 or any(b <= a for a, b in zip(edges[:-1], edges[1:], strict=True)):
            raise SettingsError(
                f"segment starts must increase from 0 within the block, got {list(starts)!r}"
            )
        out = np.empty(len(edges) - 1)
        for i in range(out.size):
            part = x[edges[i] : edges[i + 1]]
            out[i] = max(float(part.max()), self._held * self._d)
            for start in range(0, part.size, _DETECTOR_CHUNK):
                run = part[start : start + _DETECTOR_CHUNK]
                n = run.size
                tail = float(np.max(run * self._decay[n - 1 :: -1]))  # x[k] d**(n-1-k)
                held = max(self._held * self._d * self._decay[n - 1], tail)
                self._held = held if held >= STATE_FLOOR else 0.0
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
        if self._detector is not None:
            return self._detector.segment_maxima(y, starts)
        return np.maximum.reduceat(y, np.asarray(starts, dtype=np.intp))
