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
constant). It runs through :func:`scipy.signal.lfilter` with its state ``zi`` carried across
blocks, so any split of the signal into blocks gives the same output as one pass.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import lfilter

from .errors import SettingsError
from .numerics import STATE_FLOOR, flush_tiny

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
        self.reset()

    def reset(self) -> None:
        """Return to the state given at construction (``initial_mean_square``)."""
        self._last = self.initial_mean_square
        self._zi = np.array([self.a * self._last])

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
        y, zi = lfilter(self._b, self._den, x, zi=self._zi)
        self._zi = flush_tiny(zi)  # keep the state out of slow subnormal numbers
        self._last = float(y[-1])
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
