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
of this meter (``scripts/bench_peak.py``, worst of 200 random phases): steady sines up to
0.98 x Nyquist within 0.025 dB; 24-sample bursts in silence (away from the edges) within
0.02 dB up to 0.95 x Nyquist and 1.3 dB low at 0.98 x Nyquist (their sample peaks: up to
0.43 dB and 3.2 dB low); a burst within 16 samples of an edge reads its sample peak;
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

Cruder prunings are exact too but weaker. ``|x(t)| <= sum_j |h(t - j)| max |x|`` over the
kernel's 33-sample window: ``sum_j |h|`` reaches 2.32 at half-sample offsets, so a sample
can be skipped only where its whole window is below 43 % of the interval's peak; on the
benchmark's pink noise that holds for about half of the samples (47 % for Z, 52 % for C).
A pre-screen of bound 1 without the second difference, ``|D2| <= 4 max|x|`` or ``|D2| <= 2
(max x - min x)`` over the tile's window, clears 21 % and 46 % of the tiles for Z, 26 % and
54 % for C (measured), where bound 1 clears 97.6 % and 99.7 %: the second difference would
still be needed for most tiles, and the maxima and minima cost as much as it, so neither
is used.

Processing is organised in frames of 2**18 samples aligned to absolute sample indices
(:data:`DEFAULT_FRAME_SAMPLES`); a frame is cut at interval boundaries into segments, each
with tiles aligned to its first sample and its own running peak. A frame is processed as
one batch once it and its look-ahead are there: the passes over the samples segment by
segment (in chunks), then the tile tests, the candidates and bound 2 of all its segments in
the same NumPy calls, every decision with its segment's running peak (the segments'
intervals are distinct, so they do not wait for each other), and the exact evaluation of
the open candidates of all segments in one matrix product (two when a segment has more
than 64 open: its best candidate first raises its running peak; a segment with candidates
at more than 1/64 of its samples is evaluated on its own, with tile-wide ``|D3|``). As
frames are fixed, the result does not depend on how the stream is cut into blocks: any
split gives identical numbers. The frame length changes a result only within the tolerance
(fewer intervals are cut, and rows are grouped differently in the matrix product, 1e-16);
on the benchmark's recording, 2**18 against 2**16 changed no interval's peak by more than
4e-15 dB.

Measured cost (one core, the 48 kHz pink-noise recording of ``scripts/bench_levels.py``,
1 s intervals, blocks of 2**17 as the level engine gives them; ``scripts/bench_peak.py
--recording``): at best about 6 ns per sample for the Z signal and 5 ns for the C-weighted
one, 35 to 45 % less time than with frames of 2**16 processed segment by segment (old/new
1.6 to 1.9 in interleaved runs; the per-call overhead of NumPy on the candidates' small
arrays dominated there). Of that, about 1.3 ns is the five passes for ``|x|`` and ``|D2|``
(the second difference by slices, in the order of ``np.convolve``'s dot products, so with
the same values), 1.4 ns the tile maxima (both rows in each call: maxima of neighbouring
pairs over contiguous slices, then strided pairwise maxima) and 0.4 ns the copy of the
blocks into the meter's buffer; the rest is the tile tests, the candidates and their
evaluation. The per-sample passes run in chunks of 2**16 samples through work arrays of
2.4 MB, reused; the buffer holds up to a frame and a block of samples.

With the compiled kernels (:mod:`bandmeter.compiled`) the tile pass (``|x|``, ``|D2|``, their
tile maxima and the tile test's maxima with the neighbouring samples) is one SSE2 loop with
the same operations, 0.7 ns per sample against 3.2 ns for the NumPy passes (131072-sample
arrays, one run), the same values to the last bit; on the 10-minute benchmark recording the
meter's share of the analysis fell from 0.37 to 0.23 s (both signals).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .blockfilter import matmul_rows
from .compiled import kernels
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
#: Default frame length in samples (processing granularity and batch; results depend on it
#: only within the tolerance; see the module notes for the choice).
DEFAULT_FRAME_SAMPLES = 1 << 18

_TILE = 16  # tile length for the local difference maxima (>= the kernel half-width)
_CONTEXT = 48  # samples needed before and after a frame (kernel, differences, tiles)
_MARGIN = 1.05  # safety factor on the bound constants (computed on a grid of positions)
_GATHER_MAX = 4096  # above this many candidates, gather windows through a strided view
_LOCAL_WINDOW_COST = 64  # per-candidate cost of a local |D3| window, in full-segment passes
_FIRST_REFINE = 64  # above this many open candidates, raise the running peak with the best first
_SPARSE_TILES = 4  # with more than 1/4 of the tiles failing the tile test, test every sample
_TILE_WINDOW = np.arange(_TILE + 2)  # a tile and the sample on either side
_CHUNK = 1 << 16  # samples per pass of the per-sample work (whole tiles; bounds the memory)
_NEIGHBOURS = np.array([-1, 0, 1])  # a grid point and its two neighbours
# bounds of the parabolic step from refinement grid point i (ends of the owned range: none
# outwards)
_DELTA_LOWER = np.where(np.arange(REFINE_STEPS + 3) == 1, 0.0, -0.5)
_DELTA_UPPER = np.where(np.arange(REFINE_STEPS + 3) == REFINE_STEPS + 1, 0.0, 0.5)


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
        # per row of _candidate_bound's magnitudes |s|, |d2|, |x0|
        self.coefficients = np.array([[self.b3], [self.d3], [self.a3]])

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


class _Work:
    """Work arrays of one meter for a chunk of up to ``_CHUNK`` samples, reused throughout.

    ``rows`` holds ``|x|`` (row 0, from the sample before the chunk to the one after it) and
    ``|D2|`` (row 1, at the chunk's samples, from index 1); ``pairs``, ``half`` and
    ``quarter`` take the steps of the tile reduction (:func:`_tile_maxima`).
    """

    def __init__(self) -> None:
        self.rows = np.empty((2, _CHUNK + 2))
        self.pairs = np.empty((2, _CHUNK))
        self.half = np.empty((2, _CHUNK // 4))
        self.quarter = np.empty((2, _CHUNK // 8))


def _tile_maxima(rows: np.ndarray, work: _Work, out: np.ndarray) -> np.ndarray:
    """Max over each tile of 16 along both rows of ``rows`` (shape ``(2, 16 m)``) into ``out``
    (shape ``(2, m)``).

    The maxima of neighbouring pairs first, over contiguous slices (fast, vectorised), then
    pairwise maxima of every fourth of those (4 -> 2 -> 1 per tile) on strided slices: both
    rows in each NumPy call, through ``work``'s buffers. Maxima are exact, so the result does
    not depend on the order.
    """
    w = rows.shape[1]
    pairs = np.maximum(rows[:, :-1], rows[:, 1:], out=work.pairs[:, : w - 1])  # x[i], x[i+1]
    fours = np.maximum(pairs[:, 0:-1:4], pairs[:, 2::4], out=work.half[:, : w // 4])
    eights = np.maximum(fours[:, 0::2], fours[:, 1::2], out=work.quarter[:, : w // 8])
    return np.maximum(eights[:, 0::2], eights[:, 1::2], out=out)


def _second_difference(x: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """``x[i] - 2 x[i+1] + x[i+2]`` for i = 0 .. x.size - 3, in the order of np.convolve's
    dot products, ``(x[i] - 2 x[i+1]) + x[i+2]`` (so the same to the last bit)."""
    d2 = np.multiply(x[1:-1], -2.0, out=out)
    d2 += x[:-2]
    d2 += x[2:]
    return d2


def _windows(x: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """The kernel's windows ``x[pos - 16 .. pos + 16]``, one row (33 samples) per position."""
    if pos.size > _GATHER_MAX:
        return sliding_window_view(x, 2 * KERNEL_HALF_WIDTH + 1)[pos - KERNEL_HALF_WIDTH]
    return x[pos[:, None] + _bounds().taps]


def _refine(x: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """Largest |x(t)| over the range owned by each sample ``x[pos]`` (exact evaluation)."""
    return _refine_windows(_windows(x, pos))


def _refine_windows(windows: np.ndarray) -> np.ndarray:
    """:func:`_refine` from the kernel windows of the samples (rows of :func:`_windows`)."""
    v = matmul_rows(windows, _bounds().table)  # (n, 19): x(pos + mu)
    np.abs(v, out=v)
    i = np.argmax(v[:, 1 : REFINE_STEPS + 2], axis=1)
    i += 1  # grid index of the largest value in the owned range (1 .. REFINE_STEPS + 1)
    flat = np.arange(0, v.size, v.shape[1])
    flat += i  # v.ravel()[flat] = v[rows, i]
    g = v.ravel()[flat[:, None] + _NEIGHBOURS]  # v[rows, i - 1], v[rows, i], v[rows, i + 1]
    vm, v0, vp = g[:, 0], g[:, 1], g[:, 2]
    den = vm - 2.0 * v0 + vp  # <= 0 at a maximum of the three
    delta = np.zeros(i.size)
    np.divide(0.5 * (vm - vp), den, out=delta, where=den < 0)
    # the ends of the owned range (grid points 1 and REFINE_STEPS + 1): no extrapolation
    # past them (np.clip(delta, lower, upper) is this maximum and minimum)
    np.maximum(delta, _DELTA_LOWER[i], out=delta)
    np.minimum(delta, _DELTA_UPPER[i], out=delta)
    return np.maximum(v0, v0 - 0.25 * (vm - vp) * delta)


def _d3_max(windows: np.ndarray) -> np.ndarray:
    """Max |D3(k)| over k = pos-15 .. pos+14, D3(k) = x[k+2] - 3x[k+1] + 3x[k] - x[k-1], from
    the kernel windows ``x[pos-16 .. pos+16]`` (rows of :func:`_windows`, C-contiguous).

    The differences run over the flattened windows (contiguous, one pass each); the last
    three of each row, which would mix two windows, are left out of the maximum.
    """
    flat = windows.ravel()
    d3 = np.empty(windows.size)
    np.subtract(flat[3:], flat[:-3], out=d3[:-3])
    inner = flat[2:-1] - flat[1:-2]
    inner *= 3.0
    d3[:-3] -= inner
    mag = np.abs(d3.reshape(windows.shape)[:, : windows.shape[1] - 3])
    return mag.max(axis=1)


def _candidate_bound(
    xm: np.ndarray, x0: np.ndarray, xp: np.ndarray, m3: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Estimate and upper bound of |x(t)| over the owned ranges of samples ``x0``.

    ``xm`` and ``xp`` are the samples before and after. The estimate is the largest |q| over
    ``mu in [-1/2, 1/2]`` of the parabola ``q(mu) = x0 + s mu + (d2/2) mu^2`` through the
    three samples (``s`` the central first difference, ``d2`` the second difference); the
    upper bound adds the remainder terms of bound 2 (``m3`` the local max |D3|).
    """
    b = _bounds()
    t = np.empty((4, x0.size))  # s, d2, x0 and x0 + d2/8: their magnitudes in one call
    slope, d2, base = t[0], t[1], t[3]
    np.subtract(xp, xm, out=slope)
    slope *= 0.5
    np.add(xp, xm, out=d2)
    d2 -= 2.0 * x0
    t[2] = x0
    np.multiply(d2, 0.125, out=base)
    base += x0  # q(+-1/2) = base +- slope/2
    mag = np.abs(t)
    q_max = mag[3] + 0.5 * mag[0]  # = max(|q(-1/2)|, |q(1/2)|)
    inside = np.flatnonzero(mag[0] < 0.5 * mag[1])  # vertex -s/d2 inside
    if inside.size:
        vertex = np.abs(x0[inside] - 0.5 * slope[inside] ** 2 / d2[inside])
        q_max[inside] = np.maximum(q_max[inside], vertex)
    terms = mag[:3] * b.coefficients  # b3 |s|, d3 |d2|, a3 |x0|
    upper = terms[2] + terms[0]  # in the order a3 |x0| + b3 |s| + d3 |d2| + c3 m3 + q_max
    upper += terms[1]
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
        Internal frame length in samples (default 2**18 = 262144, at least 64), processed as
        one batch. Frames are aligned to absolute sample indices, so results do not depend
        on the block sizes given to :meth:`process`.
    origin : int, optional
        Absolute sample index (in the plan's numbering) of the first sample given to
        :meth:`process` (default 0): lets the meter start part-way into a recording, e.g.
        after the filters' settling time. The stream's edges are at ``origin`` and at its
        last sample.

    Notes
    -----
    See the module notes for the reconstruction, the bounds, the accuracy and the cost. An
    interval is final once the stream has passed the end of the frame holding the interval's
    end by 48 samples (the reconstruction looks 16 samples ahead; a frame is processed as a
    whole), or at :meth:`finish`.

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
        self._ready_at = self.frame_samples + _CONTEXT  # samples for the first frame
        self._pending: np.ndarray | None = None  # samples after the buffer's (in process())
        self._interval: int | None = None
        self._running = 0.0
        self._done: dict[int, float] = {}
        self._finished = False
        self._work: _Work | None = None

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
        self._received += x.size
        # segments read the block in place where they can (_samples); what the later
        # segments need is copied to the buffer afterwards
        self._pending = x
        try:
            if self._received >= self._ready_at:
                self._run(final=False)
        finally:
            x, self._pending = self._pending, None
            self._append(x)

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

    def _segment_end(self, start: int) -> tuple[int, int]:
        """End of the frame/interval segment that starts at ``start``, and its interval."""
        end = (start // self.frame_samples + 1) * self.frame_samples
        k = int(self.plan.interval_index(start + self.origin))
        if self.plan.interval_samples is not None:
            end = min(end, self.plan.interval_start(k + 1) - self.origin)
        return end, k

    def _append(self, x: np.ndarray) -> None:
        """Copy the samples that follow the buffer's to its end, keeping only those from
        ``_CONTEXT`` before the next unprocessed sample on."""
        first = self._next - _CONTEXT  # first sample still needed
        end = self._buf_start + self._len
        if first > end:  # neither the buffer nor the start of x is needed any more
            x = x[first - end :]
            self._buf_start, self._len = first, 0
        if self._len + x.size > self._buf.size:
            keep_from = max(first - self._buf_start, 0)
            kept = self._len - keep_from
            size = max(self._buf.size, 2 * (kept + x.size))
            new = np.empty(size) if size > self._buf.size else self._buf
            new[:kept] = self._buf[keep_from : self._len]
            self._buf, self._len = new, kept
            self._buf_start += keep_from
        self._buf[self._len : self._len + x.size] = x
        self._len += x.size

    def _samples(self, a: int, b: int) -> np.ndarray:
        """Samples ``a .. b-1`` (absolute indices), a view of the buffer or of the block.

        The buffer holds the samples up to the block being processed (``_pending``); a range
        that spans both first moves the block's samples up to ``b`` into the buffer.
        """
        end = self._buf_start + self._len
        pending = self._pending
        if pending is not None and b > end:
            if a >= end:
                return pending[a - end : b - end]
            self._append(pending[: b - end])
            self._pending = pending[b - end :]
        return self._buf[a - self._buf_start : b - self._buf_start]

    def _run(self, final: bool) -> None:
        """Process the frames that are complete (with their look-ahead), or all at the end."""
        if final:
            self._append(np.zeros(_CONTEXT))  # placeholder context after the end
        f = self.frame_samples
        while self._next < self._received:
            start = self._next
            end = (start // f + 1) * f
            if final:
                end = min(end, self._received)
            elif end + _CONTEXT > self._received:
                break
            segs = []  # the frame's pieces in each interval
            while start < end:
                stop, k = self._segment_end(start)
                stop = min(stop, end)
                segs.append((start, stop, k))
                start = stop
            self._batch(segs, final)
        self._ready_at = (self._next // f + 1) * f + _CONTEXT

    def _batch(self, segs: list[tuple[int, int, int]], final: bool) -> None:
        """Process one frame: its segments ``(start, stop, interval)``, one per interval.

        The tile maxima are computed segment by segment (:meth:`_tile_pass`); the tile and
        candidate quantities for the whole frame at once, by the same element-wise
        operations as for each segment alone, and so are the decisions, each with its own
        segment's running peak (the segments' intervals are distinct, so these do not depend
        on each other); the exact evaluation takes the open candidates of all segments
        together (:meth:`_evaluate_batch`).
        """
        c = _CONTEXT
        a0 = segs[0][0]
        m = len(segs)
        n = [stop - start for start, stop, _ in segs]
        n_tiles = [-(-nj // _TILE) for nj in n]
        n16 = [t * _TILE for t in n_tiles]
        x = self._samples(a0 - c, segs[-1][1] + c)  # x[i] is sample a0 - 48 + i
        first = [start - a0 + c for start, _, _ in segs]  # index in x of a segment's start
        # per segment: maxima of |x| and |D2| over its tiles (aligned to its first sample)
        # and the tile on either side, one after the other in `tiles` from offset o[j]; and
        # the tile test's max |x| over each tile and the sample on either side
        o = np.cumsum([0] + [t + 2 for t in n_tiles])
        tiles = np.empty((2, o[-1]))
        near = np.zeros(o[-1] - 2)  # tile q (in `tiles`) at q - 1, as in _candidates
        for j in range(m):
            self._tile_pass(x, first[j] - _TILE, n_tiles[j] + 2, tiles[:, o[j] : o[j + 1]],
                            near[o[j] : o[j] + n_tiles[j]])
        sample_peaks = []
        for j in range(m):
            last = first[j] + n16[j] - _TILE  # the last tile, which may be short
            sample_peaks.append(float(np.maximum(  # NaN propagates
                tiles[0, o[j] + 1 : o[j + 1] - 2].max(initial=0.0),
                np.abs(x[last : first[j] + n[j]]).max())))
        if not all(math.isfinite(v) for v in sample_peaks):
            if m > 1:  # report the intervals before the bad one, then raise
                for seg in segs:
                    self._batch([seg], final)
            raise AudioError(f"non-finite sample (nan or inf) in interval {segs[0][2]}")
        carry = self._running if segs[0][2] == self._interval else 0.0
        running = [max(carry if j == 0 else 0.0, v) for j, v in enumerate(sample_peaks)]
        reach = [r * self._slack for r in running]  # what a sample must be able to exceed
        # within the kernel half-width of either end of the stream only samples count
        lo = KERNEL_HALF_WIDTH - (a0 - c)  # sample 16
        hi = self._received - KERNEL_HALF_WIDTH - (a0 - c) if final else x.size
        pos = self._candidates(x, tiles, near, o, first, n, n_tiles, reach, lo, hi)
        # candidates per segment: pos is ascending, so segment j has pos[cb[j]:cb[j + 1]]
        cb = np.searchsorted(pos, np.array(first + [x.size]))
        counts = np.diff(cb)
        # bound 2 with each candidate's own |D3| window, and the evaluation, for all segments
        # together; a segment with many candidates (> 1/64 of its samples) on its own
        local = [counts[j] * _LOCAL_WINDOW_COST < n[j] for j in range(m)]
        peaks = list(running)
        in_batch = np.where(local, counts, 0)
        if in_batch.any():
            windows = _windows(x, pos if all(local) else pos[np.repeat(local, counts)])
            w = KERNEL_HALF_WIDTH
            estimate, upper = _candidate_bound(
                windows[:, w - 1], windows[:, w], windows[:, w + 1], _d3_max(windows)
            )
            cb_batch = np.concatenate([[0], np.cumsum(in_batch)])
            peaks = self._evaluate_batch(windows, estimate, upper, cb_batch, running)
        for j in range(m):
            if counts[j] and not local[j]:
                sl = slice(cb[j], cb[j + 1])
                d2 = _second_difference(x[first[j] - _TILE - 1 : first[j] + _TILE + 1 + n16[j]])
                peaks[j] = self._evaluate(x, pos[sl], *self._bound_alone(
                    x, pos[sl], pos[sl] - first[j], n[j], d2), running[j])
        for (_, stop, k), peak in zip(segs, peaks, strict=True):
            if k != self._interval and self._interval is not None:
                self._done[self._interval] = self._running
            self._interval, self._running = k, peak
            if (
                self.plan.interval_samples is not None
                and stop == self.plan.interval_start(k + 1) - self.origin
            ):
                self._done[k] = peak
                self._interval = None
            self._next = stop

    def _evaluate_batch(
        self, windows: np.ndarray, estimate: np.ndarray, upper: np.ndarray, cb: np.ndarray,
        running: list[float],
    ) -> list[float]:
        """:meth:`_evaluate` for every segment of a batch, in at most two exact evaluations.

        Segment j's candidates are ``cb[j]:cb[j + 1]``, ``running`` the segments' running
        peaks; returns their running peaks after the evaluation.
        """
        peaks = list(running)
        counts = np.diff(cb)
        open_ = upper > np.repeat(np.array(running) * self._slack, counts)
        best = {j: int(cb[j]) + int(np.argmax(estimate[cb[j] : cb[j + 1]]))
                for j in range(len(running)) if counts[j]}
        open_[list(best.values())] = True  # the most promising sample, always
        total = np.concatenate([[0], np.cumsum(open_)])
        n_open = total[cb[1:]] - total[cb[:-1]]
        # with many open candidates, the best one first raises the running peak
        many = [j for j in best if n_open[j] > _FIRST_REFINE]
        if many:
            first = _refine_windows(windows[[best[j] for j in many]])
            for j, value in zip(many, first, strict=True):
                peaks[j] = max(peaks[j], float(value))
                sl = slice(cb[j], cb[j + 1])
                open_[sl] &= upper[sl] > peaks[j] * self._slack
                open_[best[j]] = False
        rows = np.flatnonzero(open_)
        if rows.size:
            refined = _refine_windows(windows[rows])
            edges = np.searchsorted(rows, cb)
            for j in best:
                if edges[j + 1] > edges[j]:
                    peaks[j] = max(peaks[j], float(refined[edges[j] : edges[j + 1]].max()))
        return peaks

    def _tile_pass(
        self, x: np.ndarray, start: int, n_tiles: int, tiles: np.ndarray, near: np.ndarray
    ) -> None:
        """Tile maxima of |x| and |D2| for ``n_tiles`` tiles from ``x[start]`` into ``tiles``
        (shape ``(2, n_tiles)``), and into ``near`` (``n_tiles - 2``) the max |x| over each
        inner tile and the sample on either side; in chunks of up to ``_CHUNK`` samples.
        """
        compiled = kernels()
        if (
            compiled is not None and n_tiles >= 2 and x.flags.c_contiguous
            and x.dtype == np.float64
            and compiled.tile_maxima(x, start, n_tiles, tiles[0], tiles[1], near)
        ):
            return  # the same values (bandmeter/_kernels.c); else NaN or infinity: below
        work = self._work
        if work is None:
            self._work = work = _Work()
        per_chunk = _CHUNK // _TILE
        for q0 in range(0, n_tiles, per_chunk):
            q1 = min(q0 + per_chunk, n_tiles)
            size = _TILE * (q1 - q0)
            s = start + _TILE * q0
            rows = work.rows[:, : size + 2]  # index i <-> sample s - 1 + i
            np.abs(x[s - 1 : s + size + 1], out=rows[0])
            d2 = _second_difference(x[s - 1 : s + size + 1], out=rows[1, 1 : size + 1])
            np.abs(d2, out=d2)
            _tile_maxima(rows[:, 1 : size + 1], work, out=tiles[:, q0:q1])
            qa, qb = max(q0, 1), min(q1, n_tiles - 1)  # the inner tiles in this chunk
            if qa < qb:
                own = near[qa - 1 : qb - 1]
                i = _TILE * (qa - q0)  # rows index of the sample before tile qa
                np.maximum(tiles[0, qa:qb], rows[0, i : i + _TILE * (qb - qa) : _TILE], out=own)
                i += _TILE + 1  # the sample after it
                np.maximum(own, rows[0, i : i + _TILE * (qb - qa) : _TILE], out=own)

    def _candidates(
        self, x: np.ndarray, tiles: np.ndarray, near: np.ndarray, o: np.ndarray,
        first: list[int], n: list[int], n_tiles: list[int], reach: list[float], lo: int,
        hi: int,
    ) -> np.ndarray:
        """The samples that fail bound 1, as ascending indices into ``x``.

        Segment j has ``n[j]`` samples from ``x[first[j]]``; ``tiles`` holds its tile maxima
        of |x| and |D2| (and those of the tile on either side) from offset ``o[j]``, ``near``
        the max |x| over each tile and the sample on either side, ``reach`` its running peak
        times ``1 + tol``. Only samples ``lo <= i < hi`` are candidates (the stream's edges).
        """
        b = _bounds()
        # the tiles of all segments, q = 1 .. o[-1] - 2, at index q - 1 (the ends are the
        # outer neighbours; each segment's own outer tiles in between are not tested)
        inner = slice(1, o[-1] - 1)
        # bound 1, per tile: the linear interpolant over the range owned by sample n is at
        # most max(|x[n]|, (|x[n-1]| + |x[n]|)/2, (|x[n]| + |x[n+1]|)/2), and the kernel's
        # remainder C2 max|D2| over the tile and its neighbours (+/-15 around each sample)
        thr = np.maximum(tiles[1, :-2], tiles[1, 1:-1])
        np.maximum(thr, tiles[1, 2:], out=thr)
        thr *= b.c2
        np.subtract(np.repeat(np.array(reach), np.diff(o))[inner], thr, out=thr)
        thr /= 1.0 + b.e2
        # the same test per tile first: a tile none of whose samples (nor the one on either
        # side) exceeds its threshold has no candidate, as |x[n-1]| + |x[n]| <= 2 max
        test = near > thr
        test[o[1:-1] - 2] = False  # outer tiles between segments
        test[o[1:-1] - 1] = False
        failing = np.flatnonzero(test)
        # bound 1 per sample: |x[n]| > thr or (|x[n-1]| + |x[n]|)/2 > thr or (|x[n]| +
        # |x[n+1]|)/2 > thr, i.e. |x[n]| + max(|x[n-1]|, |x[n]|, |x[n+1]|) > 2 thr (the same
        # comparisons exactly: rounding is monotonic and 2 |x[n]| is exact)
        if failing.size * _SPARSE_TILES > sum(n_tiles):  # most tiles: test every sample
            found = []
            for j in range(len(n)):
                s0 = first[j]
                n16 = n_tiles[j] * _TILE
                ax = np.abs(x[s0 - 1 : s0 + n16 + 1])  # the tiles and the sample either side
                mid = ax[1:-1]
                level = np.maximum(ax[:-2], mid)
                np.maximum(level, ax[2:], out=level)
                level += mid
                limit = 2.0 * thr[o[j] : o[j] + n_tiles[j]]
                hit = (level.reshape(n_tiles[j], _TILE) > limit[:, None]).ravel()
                found.append(np.flatnonzero(hit[: n[j]]) + s0)
            cand = np.concatenate(found)
        else:  # the failing tiles only, with the same comparisons
            segment = np.searchsorted(o, failing, side="right") - 1
            start = np.array(first)[segment]
            start += _TILE * (failing - o[segment])  # index in x of the tile's first sample
            win = np.abs(x[(start - 1)[:, None] + _TILE_WINDOW])  # before .. after the tile
            mid = win[:, 1:-1]
            level = np.maximum(win[:, :-2], mid)
            np.maximum(level, win[:, 2:], out=level)
            level += mid
            rows_hit, cols = np.nonzero(level > (2.0 * thr[failing])[:, None])
            cand = start[rows_hit]
            cand += cols
            if any(t * _TILE > nj for t, nj in zip(n_tiles, n, strict=True)):  # short
                stop = np.array([fj + nj for fj, nj in zip(first, n, strict=True)])
                cand = cand[cand < stop[segment[rows_hit]]]
        if cand.size and (cand[0] < lo or cand[-1] >= hi):
            cand = cand[(cand >= lo) & (cand < hi)]
        return cand

    def _bound_alone(
        self, x: np.ndarray, pos: np.ndarray, cand: np.ndarray, n: int, d2: np.ndarray
    ) -> tuple[np.ndarray | None, np.ndarray, np.ndarray]:
        """Bound 2 for the candidates of one segment (``cand`` relative to its first
        sample, ``d2`` its signed second difference from 16 samples before it)."""
        if cand.size * _LOCAL_WINDOW_COST < n:
            windows = _windows(x, pos)
            w = KERNEL_HALF_WIDTH
            return windows, *_candidate_bound(
                windows[:, w - 1], windows[:, w], windows[:, w + 1], _d3_max(windows)
            )
        n_tiles = d2.size // _TILE - 2
        m3 = _tile_max(np.abs(np.subtract(d2[1:], d2[:-1])), n_tiles)[cand // _TILE]
        return None, *_candidate_bound(x[pos - 1], x[pos], x[pos + 1], m3)

    def _evaluate(
        self, x: np.ndarray, pos: np.ndarray, windows: np.ndarray | None,
        estimate: np.ndarray, upper: np.ndarray, running: float,
    ) -> float:
        """Running peak after evaluating one segment's candidates that can still matter."""
        # evaluate the most promising sample always, and every sample that could still
        # exceed the running peak; with many of those, raise the running peak first
        best = int(np.argmax(estimate))
        open_ = upper > running * self._slack
        open_[best] = True
        if np.count_nonzero(open_) > _FIRST_REFINE:
            one = slice(best, best + 1)
            first = _windows(x, pos[one]) if windows is None else windows[one]
            running = max(running, float(_refine_windows(first)[0]))
            open_ &= upper > running * self._slack
            open_[best] = False
        if open_.any():
            chosen = _windows(x, pos[open_]) if windows is None else windows[open_]
            running = max(running, float(_refine_windows(chosen).max()))
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
