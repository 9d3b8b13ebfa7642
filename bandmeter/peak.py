"""True (inter-sample) peak of a sampled signal, per reporting interval.

The peak of a band-limited signal lies between its samples: one cycle of 8 kHz at 48 kHz has
six samples and the largest of them can miss the waveform's peak by more than 1 dB, and a sine
at 19.2 kHz can have samples 10 dB below its peak. LCpeak and LZpeak are therefore read from the
reconstructed continuous waveform

    x(t) = sum_k x[k] h(t - k),     t in samples,

where ``h`` is a Kaiser-windowed sinc (half-width 16 samples, beta = 10). ``h`` is 1 at 0 and 0
at every other integer, so ``x(k) = x[k]`` exactly and the result is never below the sample
peak. For content up to 0.8 x Nyquist (19.2 kHz at 48 kHz) this reconstruction differs from the
ideal band-limited one by at most 2.1e-5 of a sine's amplitude (0.0002 dB; the error of
``sum_j h(mu - j) exp(i w j)`` against ``exp(i w mu)`` for |w| <= 0.8 pi, all fractional
positions ``mu``).

Edges of the recording. The reconstruction near a sample needs the 16 samples on either
side. A recording starts and ends in the middle of a sound, and the waveform outside it is
unknown: counting it as zero reads the sudden switch-on as a sinc overshoot (up to 1 dB on a
tone cut at its steepest point), and a mirror image adds a corner that overshoots at high
frequencies. So within 16 samples of the first and of the last sample (0.33 ms at 48 kHz)
only the sample values count: nothing is invented there, and a true peak in those edge
samples may read low by at most the inter-sample excess of the signal.

Method: bound first, interpolate only where it can matter
--------------------------------------------------------
Each sample n "owns" the positions ``n - 1/2 <= t <= n + 1/2``; the peak of a reporting
interval of samples ``[start, stop)`` is the largest ``|x(t)|`` over
``start - 1/2 <= t <= stop - 1/2``. A peak between the last sample of one interval and the
first sample of the next therefore belongs to the interval of the nearer sample; the point
exactly half way belongs to both (it is the limit of both intervals' waveform).

Two upper bounds decide where the reconstruction needs evaluating. Both are exact identities
for ``h``, not assumptions about the signal: the difference between ``x(n + mu)`` and a low
order interpolant of the neighbouring samples is written, for every ``|mu| <= 1/2``, as a
combination of higher differences of the samples within 16 samples of n (coefficients solved
at import on 1025 positions, worst case over ``mu``, enlarged by 5 %):

1. Linear bound, evaluated for every sample:
   ``|x(t)| <= (1 + e2) max(|x[n]|, (|x[n-1]| + |x[n]|)/2, (|x[n]| + |x[n+1]|)/2)
   + C2 max|D2|``, with ``D2`` the second difference of the samples, its maximum taken per
   tile of 16 samples over the tile and its two neighbours; ``C2 = 0.441``,
   ``e2 = 1.1e-4`` (the kernel's error in reproducing a straight line).
2. Quadratic bound, at the samples that fail to clear 1:
   ``|x(t)| <= max|q| + C3 max|D3| + 6e-6 |x[n]| + 1.1e-4 |x[n+1] - x[n-1]|/2
   + 8.6e-4 |D2[n]|``, with ``q`` the parabola through ``x[n-1], x[n], x[n+1]``, ``D3`` the
   third difference over ``n-15 .. n+15`` and ``C3 = 0.220``.

A sample whose bound does not exceed the interval's running peak times ``1 + tol``
(``tolerance_db``, 0.01 dB by default) cannot raise the interval's peak by more than ``tol``
and is skipped. The others, and always the sample with the largest ``max|q|``, are evaluated:
``x(n + mu)`` at ``mu = -1/2, -7/16, ..., 1/2`` (16 steps) and a parabolic refinement of the
largest value, within 0.0002 dB of the continuous maximum for content up to 0.8 x Nyquist.
Because the bounds hold whatever the signal, skipping costs at most ``tolerance_db`` (0.0008 dB
measured against a brute-force evaluation, including white noise up to Nyquist).

Accuracy. Content up to 0.8 x Nyquist: within ``tolerance_db`` plus 0.0003 dB of the ideal
band-limited peak. Measured (tests, exact references): sines from 31.5 Hz to 19.2 kHz with
random phases within 0.0002 dB of the amplitude; band-limited single 8 kHz cycle and 500 Hz
half cycles within 0.0001 dB; band-limited noise per interval 0.0002 dB below to 0.003 dB
above an FFT interpolation on a 1/32-sample grid (that grid's own error).

Content above 0.8 x Nyquist: ``h`` rolls off between 0.8 x Nyquist and 1.2 x Nyquist, so such
content is not reconstructed in full. The result is never below the sample peak, and that is
the only guarantee there: a short burst near Nyquist can have all its samples far below its
crest (a single crest of a sine at f half way between two samples reads ``cos(pi f / fs)`` of
the amplitude: -1.25 dB at 8 kHz, -10.2 dB at 0.8 x Nyquist, -30 dB at 0.98 x Nyquist, fs =
48 kHz), and a sine exactly at Nyquist can be sampled at its zero crossings. Measured under-read
of this meter (``scripts/bench_peak.py``): steady sines up to 0.98 x Nyquist within 0.02 dB;
24-sample bursts within 0.02 dB up to 0.95 x Nyquist and up to 1.6 dB low at 0.98 x Nyquist;
the raw 6-sample 8 kHz cycle (content up to Nyquist) 0.074 dB below its ideal sinc
reconstruction (and 0.01 dB above the ``resample_poly``-by-32 reading). Recordings pass an
anti-alias filter, so content above 0.8 x Nyquist is normally small.

Cost: a few vectorised passes over the samples (absolute value, second difference, tile
maxima) plus work proportional to the samples that fail bound 1 (bound 2) and to those that
fail bound 2 (about 600 multiply-adds each). Bound 1 is tested per tile first: a tile whose
largest ``|x|``, with the sample on either side, is below the tile's threshold has no
candidate (``(|x[n-1]| + |x[n]|)/2`` cannot exceed the larger of the two), so the per-sample
test runs on the failing tiles only, with the same comparisons: the candidates, and so the
results, are exactly those of the per-sample test everywhere (``tests/test_peak.py``). On
the benchmark's pink noise 2.4 % of the tiles of the Z signal and 0.3 % of the C-weighted
signal fail; when more than a quarter fail (white noise up to Nyquist), every sample is
tested directly. For noise and speech the candidates are a small fraction of the samples;
for a steady tone all crests tie, and above about 1 kHz bound 2 cannot clear them within
0.01 dB, so every crest is evaluated: steady tones of 2 to 8 kHz cost several times more
than noise (``scripts/bench_peak.py``).

A cruder pruning, ``|x(t)| <= sum_j |h(t - j)| max |x|`` over the kernel's 33-sample
window, is exact too but weaker: ``sum_j |h|`` reaches 2.32 at half-sample offsets, so a
sample can be skipped only where its whole window is below 43 % of the interval's peak. On
the benchmark's pink noise that holds for about half of the samples (47 % for Z, 52 % for
C), where bound 1 clears 97.6 % and 99.7 % of the tiles; and it would not save the passes
that bound 1 needs for the rest, so it is not used.

Processing is organised in fixed frames aligned to absolute sample indices (and split at
interval boundaries), so the result does not depend on how the stream is cut into blocks: any
split gives identical numbers.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .blockfilter import matmul_rows
from .errors import AudioError, SettingsError
from .intervals import IntervalPlan

#: Half-width of the interpolation kernel in samples.
KERNEL_HALF_WIDTH = 16
#: Kaiser window parameter of the interpolation kernel (chosen to minimise the reconstruction
#: error for content up to 0.8 x Nyquist: 2.1e-5 of the amplitude).
KERNEL_BETA = 10.0
#: Fractional positions evaluated per sample when a candidate is refined.
REFINE_STEPS = 16
#: Default pruning tolerance in dB: the largest under-read the pruning can cause.
DEFAULT_TOLERANCE_DB = 0.01
#: Default frame length in samples (processing granularity; results depend on it only within
#: the tolerance).
DEFAULT_FRAME_SAMPLES = 65536

_TILE = 16  # tile length for the local difference maxima (>= the kernel half-width)
_CONTEXT = 48  # samples needed before and after a frame (kernel, differences, tiles)
_MARGIN = 1.05  # safety factor on the bound constants (computed on a grid of positions)
_D2_KERNEL = np.array([1.0, -2.0, 1.0])  # second difference
_GATHER_MAX = 4096  # above this many candidates, gather windows through a strided view
_LOCAL_WINDOW_COST = 64  # per-candidate cost of a local |D3| window, in full-segment passes
_FIRST_REFINE = 64  # above this many open candidates, raise the running peak with the best first
_SPARSE_TILES = 4  # with more than 1/4 of the tiles failing the tile test, test every sample
_TILE_WINDOW = np.arange(_TILE + 2)  # a tile and the sample on either side


def kernel(u: np.ndarray) -> np.ndarray:
    """Interpolation kernel: Kaiser-windowed sinc, zero for ``|u| >= 16`` samples.

    Parameters
    ----------
    u : numpy.ndarray
        Offsets in samples.

    Returns
    -------
    numpy.ndarray
        ``sinc(u) I0(beta sqrt(1 - (u/16)^2)) / I0(beta)`` inside the support, 0 outside.
    """
    u = np.atleast_1d(np.asarray(u, dtype=np.float64))
    inside = np.abs(u) < KERNEL_HALF_WIDTH
    arg = np.sqrt(np.clip(1.0 - (u / KERNEL_HALF_WIDTH) ** 2, 0.0, None))
    window = np.where(inside, np.i0(KERNEL_BETA * arg) / np.i0(KERNEL_BETA), 0.0)
    h = np.sinc(u) * window
    integer = u == np.round(u)
    h[integer] = u[integer] == 0  # exactly 1 at 0 and 0 at the other integers
    return h


class _Bounds:
    """Kernel table for the refinement and the constants of the two bounds."""

    def __init__(self) -> None:
        w = KERNEL_HALF_WIDTH
        self.taps = np.arange(-w, w + 1)  # samples n + j, j = -16..16, reach positions |mu| < 1
        # refinement grid: mu = -1/2 - 1/16, -1/2, ..., 1/2, 1/2 + 1/16 (owned: |mu| <= 1/2)
        self.mu = -0.5 + (np.arange(REFINE_STEPS + 3) - 1) / REFINE_STEPS
        self.table = kernel(self.mu[None, :] - self.taps[:, None])  # (33, 19)
        mus = np.linspace(-0.5, 0.5, 1025)
        h = kernel(mus[None, :] - self.taps[:, None])  # (33, n_mu)
        self.c2, self.e2 = self._linear_bound(h, mus)
        self.c3, self.a3, self.b3, self.d3 = self._quadratic_bound(h, mus)

    def _column(self, offsets: dict[int, float]) -> np.ndarray:
        col = np.zeros(self.taps.size)
        for j, v in offsets.items():
            col[j + KERNEL_HALF_WIDTH] += v
        return col

    def _linear_bound(self, h: np.ndarray, mus: np.ndarray) -> tuple[float, float]:
        # h_mu - l_mu = sum_m g[m] D2(n+m) + a x[n] + b (x[n+1] - x[n-1])/2, m = -15..15
        cols = [self._column({m - 1: 1.0, m: -2.0, m + 1: 1.0}) for m in range(-15, 16)]
        cols += [self._column({0: 1.0}), self._column({1: 0.5, -1: -0.5})]
        basis = np.array(cols).T
        lin = np.zeros_like(h)
        c = KERNEL_HALF_WIDTH
        pos = mus >= 0
        lin[c] = np.where(pos, 1 - mus, 1 + mus)
        lin[c + 1] = np.where(pos, mus, 0.0)
        lin[c - 1] = np.where(pos, 0.0, -mus)
        sol = np.linalg.solve(basis, h - lin)
        c2 = np.abs(sol[:31]).sum(axis=0).max()
        e2 = (np.abs(sol[31]) + np.abs(sol[32])).max()
        return _MARGIN * float(c2), 2.0 * float(e2)

    def _quadratic_bound(self, h: np.ndarray, mus: np.ndarray) -> tuple[float, ...]:
        # h_mu - q_mu = sum_m g[m] D3(n+m) + a x[n] + b (x[n+1]-x[n-1])/2 + d D2(n),
        # D3(k) = x[k+2] - 3x[k+1] + 3x[k] - x[k-1], m = -15..14
        cols = [
            self._column({m - 1: -1.0, m: 3.0, m + 1: -3.0, m + 2: 1.0}) for m in range(-15, 15)
        ]
        cols += [
            self._column({0: 1.0}),
            self._column({1: 0.5, -1: -0.5}),
            self._column({1: 1.0, 0: -2.0, -1: 1.0}),
        ]
        basis = np.array(cols).T
        quad = np.zeros_like(h)
        c = KERNEL_HALF_WIDTH
        quad[c] = 1 - mus**2
        quad[c + 1] = (mus + mus**2) / 2
        quad[c - 1] = (-mus + mus**2) / 2
        sol = np.linalg.solve(basis, h - quad)
        c3 = np.abs(sol[:30]).sum(axis=0).max()
        a3, b3, d3 = (2.0 * float(np.abs(sol[30 + i]).max()) for i in range(3))
        return _MARGIN * float(c3), a3, b3, d3


@lru_cache(maxsize=1)
def _bounds() -> _Bounds:
    return _Bounds()


def _tile_max(abs_values: np.ndarray, n_tiles: int) -> np.ndarray:
    """Max of ``abs_values`` (>= 0) over each tile and its two neighbours.

    ``abs_values`` covers ``n_tiles + 2`` tiles of 16: one before the first tile of interest
    and one after the last (a short last tile is padded with 0).
    """
    need = (n_tiles + 2) * _TILE
    t = abs_values
    if t.size < need:
        t = np.concatenate([t, np.zeros(need - t.size)])
    while t.size > n_tiles + 2:  # pairwise maxima: 16 -> 8 -> 4 -> 2 -> 1 per tile
        t = np.maximum(t[0::2], t[1::2])
    return np.maximum(np.maximum(t[:-2], t[1:-1]), t[2:])


def _tile_peaks(abs_values: np.ndarray) -> np.ndarray:
    """Max of ``abs_values`` over each tile of 16 (the length is a whole number of tiles)."""
    t = abs_values
    while t.size > abs_values.size // _TILE:  # pairwise maxima: 16 -> 8 -> 4 -> 2 -> 1
        t = np.maximum(t[0::2], t[1::2])
    return t


def _refine(x: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """Largest |x(t)| over the range owned by each sample ``x[pos]`` (exact evaluation)."""
    b = _bounds()
    w = KERNEL_HALF_WIDTH
    if pos.size > _GATHER_MAX:
        windows = sliding_window_view(x, 2 * w + 1)[pos - w]  # (n, 33): x[pos-16 .. pos+16]
    else:
        windows = x[pos[:, None] + b.taps]
    v = np.abs(matmul_rows(windows, b.table))  # (n, 19): |x(pos + mu)|
    last = REFINE_STEPS + 1  # grid index of mu = +1/2
    i = np.argmax(v[:, 1 : last + 1], axis=1) + 1
    rows = np.arange(pos.size)
    v0, vm, vp = v[rows, i], v[rows, i - 1], v[rows, i + 1]
    den = vm - 2.0 * v0 + vp  # <= 0 at a maximum of the three
    delta = np.zeros(pos.size)
    np.divide(0.5 * (vm - vp), den, out=delta, where=den < 0)
    # grid points 1 and `last` are the ends of the owned range: do not extrapolate past them
    delta = np.clip(delta, np.where(i == 1, 0.0, -0.5), np.where(i == last, 0.0, 0.5))
    return np.maximum(v0, v0 - 0.25 * (vm - vp) * delta)


def _local_d3_max(x: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """Max |D3(k)| over k = pos-15 .. pos+14, D3(k) = x[k+2] - 3x[k+1] + 3x[k] - x[k-1]."""
    w = _bounds().taps  # x[pos-16 .. pos+16]
    win = x[pos[:, None] + w]
    d3 = win[:, 3:] - win[:, :-3]
    d3 -= 3.0 * (win[:, 2:-1] - win[:, 1:-2])
    return np.abs(d3).max(axis=1)


def _candidate_bound(
    x: np.ndarray, pos: np.ndarray, m3: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Estimate and upper bound of |x(t)| over the owned ranges of samples ``pos``.

    The estimate is the largest |q| over ``mu in [-1/2, 1/2]`` of the parabola
    ``q(mu) = x0 + s mu + (d2/2) mu^2`` through the three samples (``s`` the central first
    difference, ``d2`` the second difference); the upper bound adds the remainder terms of
    bound 2.
    """
    b = _bounds()
    xm, x0, xp = x[pos - 1], x[pos], x[pos + 1]
    slope = 0.5 * (xp - xm)
    d2 = xp + xm
    d2 -= 2.0 * x0
    base = x0 + 0.125 * d2  # q(+-1/2) = base +- slope/2
    q_max = np.abs(base) + 0.5 * np.abs(slope)  # = max(|q(-1/2)|, |q(1/2)|)
    inside = np.flatnonzero(np.abs(slope) < 0.5 * np.abs(d2))  # vertex -s/d2 inside
    if inside.size:
        vertex = np.abs(x0[inside] - 0.5 * slope[inside] ** 2 / d2[inside])
        q_max[inside] = np.maximum(q_max[inside], vertex)
    upper = b.a3 * np.abs(x0)
    upper += b.b3 * np.abs(slope)
    upper += b.d3 * np.abs(d2)
    upper += b.c3 * m3
    upper += q_max
    return q_max, upper


def _check_fs(fs: float) -> float:
    if not (isinstance(fs, (int, float, np.integer, np.floating)) and math.isfinite(fs) and fs > 0):
        raise SettingsError(f"sample rate must be a finite number of Hz > 0, got {fs!r}")
    return float(fs)


class TruePeakMeter:
    """Per-interval true (inter-sample) peak of a stream of blocks.

    Parameters
    ----------
    fs : float
        Sample rate in Hz (the method works in samples; ``fs`` sets the band the accuracy
        statement refers to: up to 0.8 x fs/2).
    plan : IntervalPlan
        How absolute sample indices (0 = first sample of the stream) map to intervals.
    tolerance_db : float, optional
        Largest under-read, in dB, that skipping samples may cause (default 0.01 dB; must be
        in [0, 1]). 0 evaluates every sample whose bound reaches the running peak.
    frame_samples : int, optional
        Internal frame length in samples (default 65536, at least 64). Frames are aligned to
        absolute sample indices, so results do not depend on the block sizes given to
        :meth:`process`.
    origin : int, optional
        Absolute sample index (in the plan's numbering) of the first sample given to
        :meth:`process` (default 0): lets the meter start part-way into a recording, e.g.
        after the filters' settling time. The stream's edges are at ``origin`` and at its
        last sample.

    Notes
    -----
    See the module notes for the reconstruction, the bounds and the accuracy. An interval is
    final once the stream has passed its end by 48 samples (the reconstruction looks 16
    samples ahead) and the frame holding its end has been processed.

    Examples
    --------
    Peak of a 1 kHz tone of amplitude 1 (unit: whatever the samples are in, e.g. Pa) in
    intervals of 1 s:

    >>> import numpy as np
    >>> from bandmeter.intervals import IntervalPlan
    >>> fs = 48000
    >>> x = np.sin(2 * np.pi * 1000 * np.arange(3 * fs) / fs + 0.3)
    >>> meter = TruePeakMeter(fs, IntervalPlan(fs))
    >>> for block in np.array_split(x, 7):
    ...     meter.process(block)
    >>> peaks = {**meter.completed(), **meter.finish()}
    >>> {k: round(v, 4) for k, v in peaks.items()}
    {0: 1.0, 1: 1.0, 2: 1.0}
    """

    def __init__(
        self,
        fs: float,
        plan: IntervalPlan,
        *,
        tolerance_db: float = DEFAULT_TOLERANCE_DB,
        frame_samples: int = DEFAULT_FRAME_SAMPLES,
        origin: int = 0,
    ) -> None:
        self.fs = _check_fs(fs)
        if not isinstance(origin, (int, np.integer)) or origin < 0:
            raise SettingsError(f"origin must be an integer >= 0, got {origin!r}")
        self.origin = int(origin)
        if not isinstance(plan, IntervalPlan):
            raise SettingsError(f"plan must be an IntervalPlan, got {plan!r}")
        if (
            not (isinstance(tolerance_db, (int, float)) and math.isfinite(tolerance_db))
            or not 0 <= tolerance_db <= 1
        ):
            raise SettingsError(f"tolerance_db must be in [0, 1] dB, got {tolerance_db!r}")
        if not isinstance(frame_samples, (int, np.integer)) or frame_samples < 64:
            raise SettingsError(f"frame_samples must be an integer >= 64, got {frame_samples!r}")
        self.plan = plan
        self.tolerance_db = float(tolerance_db)
        self.frame_samples = int(frame_samples)
        self._slack = 10.0 ** (self.tolerance_db / 20.0)
        _bounds()  # build the tables now, not in the first block
        self.reset()

    def reset(self) -> None:
        """Forget the stream: the next block is sample 0 again."""
        self._buf = np.zeros(max(4 * _CONTEXT, 1024))
        self._len = _CONTEXT  # placeholder context before sample 0 (never interpolated over)
        self._buf_start = -_CONTEXT  # absolute index of self._buf[0]
        self._received = 0
        self._next = 0  # first sample not yet processed
        self._ready_at = self._segment_end(0) + _CONTEXT  # samples needed for the next segment
        self._interval: int | None = None
        self._running = 0.0
        self._done: dict[int, float] = {}
        self._finished = False

    def process(self, block: np.ndarray) -> None:
        """Consume the next block of samples (1-D, any length, any units).

        The samples are copied: the caller may reuse the block's buffer.
        """
        if self._finished:
            raise SettingsError("finish() was called; reset() before processing a new stream")
        x = np.asarray(block, dtype=np.float64)
        if x.ndim != 1:
            raise SettingsError(f"expected a 1-D block of samples, got shape {x.shape!r}")
        if x.size == 0:
            return
        self._append(x)
        self._received += x.size
        if self._received >= self._ready_at:
            self._run(final=False)

    def completed(self) -> dict[int, float]:
        """Peaks of the intervals that are final now, ``{interval: peak}``; then forget them.

        Returns
        -------
        dict of int to float
            Largest absolute value of the reconstructed waveform in each interval, in the
            units of the input.
        """
        done, self._done = self._done, {}
        return done

    def finish(self) -> dict[int, float]:
        """End of stream: process the rest and return the remaining intervals' peaks.

        The last interval may be partial; intervals without samples are not reported.
        """
        if not self._finished:
            self._run(final=True)
            if self._interval is not None:
                self._done[self._interval] = self._running
                self._interval = None
            self._finished = True
        return self.completed()

    # -- internals ------------------------------------------------------------------------

    def _segment_end(self, start: int) -> int:
        """End of the frame/interval segment that starts at ``start``."""
        end = (start // self.frame_samples + 1) * self.frame_samples
        if self.plan.interval_samples is not None:
            k = int(self.plan.interval_index(start + self.origin))
            end = min(end, self.plan.interval_start(k + 1) - self.origin)
        return end

    def _append(self, x: np.ndarray) -> None:
        """Copy samples to the end of the buffer, dropping what is no longer needed."""
        if self._len + x.size > self._buf.size:
            keep_from = max(self._next - _CONTEXT - self._buf_start, 0)
            kept = self._len - keep_from
            size = max(self._buf.size, 2 * (kept + x.size))
            new = np.empty(size) if size > self._buf.size else self._buf
            new[:kept] = self._buf[keep_from : self._len]
            self._buf, self._len = new, kept
            self._buf_start += keep_from
        self._buf[self._len : self._len + x.size] = x
        self._len += x.size

    def _run(self, final: bool) -> None:
        if final:
            self._append(np.zeros(_CONTEXT))  # placeholder context after the end
        while self._next < self._received:
            start = self._next
            stop = self._segment_end(start)
            if final:
                stop = min(stop, self._received)
            elif stop + _CONTEXT > self._received:
                break
            self._segment(start, stop, final)
            self._next = stop
        self._ready_at = self._segment_end(self._next) + _CONTEXT

    def _segment(self, start: int, stop: int, final: bool = False) -> None:
        k = int(self.plan.interval_index(start + self.origin))
        if k != self._interval:
            if self._interval is not None:
                self._done[self._interval] = self._running
            self._interval, self._running = k, 0.0
        o = start - self._buf_start
        x = self._buf[o - _CONTEXT : stop - self._buf_start + _CONTEXT]  # a view
        self._running = self._segment_peak(x, stop - start, self._running, k, start, final)
        if (
            self.plan.interval_samples is not None
            and stop == self.plan.interval_start(k + 1) - self.origin
        ):
            self._done[k] = self._running
            self._interval = None

    def _segment_peak(
        self, x: np.ndarray, n: int, running: float, k: int, start: int = 0, final: bool = False
    ) -> float:
        """Running peak after the segment ``x[_CONTEXT : _CONTEXT + n]`` (context around).

        ``start`` is the absolute index of the segment's first sample; with ``final`` the
        stream ends ``self._received`` samples after sample 0. Samples within the kernel
        half-width of either end of the stream are not interpolated (module notes).
        """
        b = _bounds()
        c = _CONTEXT
        n_tiles = -(-n // _TILE)
        n16 = n_tiles * _TILE  # whole tiles; candidates past the segment end are dropped
        ax = np.abs(x[c - 1 : c + n16 + 1])  # samples s-1 .. s+n16
        tile_peak = _tile_peaks(ax[1:-1])  # per tile (the last one may reach past n)
        last = (n_tiles - 1) * _TILE
        sample_peak = float(np.maximum(tile_peak[:-1].max(initial=0.0),  # NaN propagates
                                       ax[last + 1 : n + 1].max()))
        if not math.isfinite(sample_peak):
            raise AudioError(f"non-finite sample (nan or inf) in interval {k}")
        running = max(running, sample_peak)
        # |D2| centred on s-16 .. s+n16+15: covers +/-15 around every sample of every tile
        seg = x[c - _TILE - 1 : c + n16 + _TILE + 1]
        d2 = np.convolve(seg, _D2_KERNEL, mode="valid")
        m2 = _tile_max(np.abs(d2), n_tiles)
        # bound 1, per tile: the linear interpolant over the range owned by sample n is at
        # most max(|x[n]|, (|x[n-1]| + |x[n]|)/2, (|x[n]| + |x[n+1]|)/2)
        thr = (running * self._slack - b.c2 * m2) / (1.0 + b.e2)
        if max(sample_peak, float(ax[0]), float(ax[n + 1 :].max())) <= float(thr.min()):
            return running  # nothing can pass (ax[n + 1:] are look-ahead samples)
        # the same test per tile first: a tile none of whose samples (nor the one on either
        # side) exceeds its threshold has no candidate, as |x[n-1]| + |x[n]| <= 2 max
        near = np.maximum(np.maximum(tile_peak, ax[0:n16:_TILE]), ax[_TILE + 1 :: _TILE])
        failing = np.flatnonzero(near > thr)
        if failing.size == 0:
            return running
        # bound 1 per sample: |x[n]| > thr or (|x[n-1]| + |x[n]|)/2 > thr or (|x[n]| +
        # |x[n+1]|)/2 > thr, i.e. |x[n]| + max(|x[n-1]|, |x[n]|, |x[n+1]|) > 2 thr (the same
        # comparisons exactly: rounding is monotonic and 2 |x[n]| is exact)
        if failing.size * _SPARSE_TILES > n_tiles:  # most tiles: test every sample
            mid = ax[1:-1]  # index i <-> sample s + i
            near = np.maximum(np.maximum(ax[:-2], mid), ax[2:])
            near += mid
            hit = (near.reshape(n_tiles, _TILE) > (2.0 * thr)[:, None]).ravel()
            cand = np.flatnonzero(hit[:n])  # segment-relative sample numbers
        else:  # the failing tiles only, with the same comparisons
            win = ax[(failing * _TILE)[:, None] + _TILE_WINDOW]  # samples s-1+16t .. s+16t+16
            mid = win[:, 1:-1]
            near = np.maximum(np.maximum(win[:, :-2], mid), win[:, 2:])
            near += mid
            hit = near > (2.0 * thr[failing])[:, None]
            rows, cols = np.nonzero(hit)
            cand = failing[rows] * _TILE + cols
            cand = cand[cand < n]
        lo = KERNEL_HALF_WIDTH - start
        hi = self._received - KERNEL_HALF_WIDTH - start if final else n
        if lo > 0 or hi < n:
            cand = cand[(cand >= lo) & (cand < hi)]
        if cand.size == 0:
            return running
        pos = cand + c
        # bound 2 at the candidates, with |D3| (D3(k) = D2(k+1) - D2(k)) over the window
        if cand.size * _LOCAL_WINDOW_COST < n:
            m3 = _local_d3_max(x, pos)
        else:
            m3 = _tile_max(np.abs(np.subtract(d2[1:], d2[:-1])), n_tiles)[cand // _TILE]
        estimate, upper = _candidate_bound(x, pos, m3)
        # evaluate the most promising sample always, and every sample that could still
        # exceed the running peak; with many of those, raise the running peak first
        best = int(np.argmax(estimate))
        open_ = upper > running * self._slack
        open_[best] = True
        if np.count_nonzero(open_) > _FIRST_REFINE:
            running = max(running, float(_refine(x, pos[best : best + 1])[0]))
            open_ &= upper > running * self._slack
            open_[best] = False
        if open_.any():
            running = max(running, float(_refine(x, pos[open_]).max()))
        return running


def true_peak(x: np.ndarray, fs: float, *, tolerance_db: float = DEFAULT_TOLERANCE_DB) -> float:
    """True (inter-sample) peak of a whole signal.

    Parameters
    ----------
    x : numpy.ndarray
        1-D signal, any units.
    fs : float
        Sample rate in Hz.
    tolerance_db : float, optional
        As for :class:`TruePeakMeter`.

    Returns
    -------
    float
        Largest absolute value of the band-limited reconstruction, in the units of ``x``
        (0.0 for an empty signal).

    Examples
    --------
    One cycle of 8 kHz at 48 kHz, phase chosen so no sample hits the crest, with silence
    around it (within 16 samples of the ends only sample values count):

    >>> import numpy as np
    >>> fs = 48000
    >>> x = np.r_[np.zeros(20), np.sin(2 * np.pi * 8000 * np.arange(6) / fs), np.zeros(20)]
    >>> round(float(np.max(np.abs(x))), 3), round(true_peak(x, fs), 3)
    (0.866, 1.062)
    """
    meter = TruePeakMeter(fs, IntervalPlan(None), tolerance_db=tolerance_db)
    meter.process(x)
    return max(meter.finish().values(), default=0.0)
