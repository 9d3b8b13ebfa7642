"""Streaming multirate fractional-octave filter bank, class 1 (IEC 61260-1:2014).

Structure
---------
The input runs through a chain of decimate-by-2 stages. Stage ``k`` runs at
``fs / 2**k``. Every band runs at the lowest stage rate at which its upper band edge ``f2``
is at most ``RHO = 0.375`` times that rate (75 % of the stage's Nyquist frequency); bands whose
upper edge exceeds that limit at ``fs / 2`` stay at the full rate ``fs``. With this rule each
decimated stage holds exactly one octave of bands (upper edges between 0.1875 and 0.375 of
the stage rate). At 48 kHz the one-third-octave bands 10 kHz..20 kHz run at 48 kHz,
5 kHz..8 kHz at 24 kHz, 2.5 kHz..4 kHz at 12 kHz, and so on down to the 20 Hz band at
93.75 Hz (factor 512).

Decimators
    Linear-phase half-band FIR, 43 taps, equiripple (Parks-McClellan), pass band up to 0.1875
    of the input rate (so up to every band edge of the next stage), stop band from 0.3125 of
    the input rate with 91 dB attenuation, pass-band ripple +/-0.0003 dB. Because the stop
    band starts at ``R/2 - 0.1875 R``, nothing that aliases onto the pass band of a band
    downstream is attenuated by less than 91 dB, far below the 70 dB class 1 requirement.
    Frequencies in the transition band alias only into the range above every band edge of the
    next stage, where the band filters themselves attenuate them (verified by the time-domain
    tests and ``scripts/sweep_filterbank_class1.py``). Each decimator keeps its history and the
    parity of a global sample counter, so the decimated sample phase survives any block split.

Band filters
    Butterworth band-pass, order 4 per side (8 poles, 4 second-order sections), designed by the
    bilinear transform at the stage rate with pre-warped edges. Order 3 meets the analog mask
    but, after the bilinear transform, misses the 60 dB requirement at ``G**-3`` for bands whose
    upper edge lies above a quarter of the stage rate; order 4 meets every limit up to
    ``f2 = 0.48 fs`` for b >= 3. The design edges are ``fm * G**(+-beta/(2b))`` with ``beta``
    slightly below 1 (0.975 for b = 3) chosen so that the analog prototype's normalised
    effective bandwidth (pink-noise weighting, log-frequency integral of the squared
    magnitude) equals the nominal bandwidth: a plain Butterworth band-pass of order 4 would
    read 0.11 dB high on broadband noise (order 3: 0.20 dB). The gain is normalised to exactly
    0 dB at the exact mid-band frequency. Bands in the full-rate stage whose design margin to
    the class 1 limits (checked analytically up to ``fs/2``) is below 0.3 dB get their two
    pre-warped edges re-optimised (Nelder-Mead, maximising the smallest margin); a band whose
    upper edge is not below ``fs/2`` or whose best design still misses class 1 is dropped.

Group delay and interval boundaries
    The decimators delay stage ``k`` by ``21 (2**k - 1) / fs`` seconds and each band filter
    adds its own group delay at mid-band (about ``2.6 / (pi * bandwidth)`` for order 4), so
    low bands lag high bands: at 48 kHz about 0.41 s for the 20 Hz one-third-octave band and
    7.3 s for the 1 Hz band, against 0.3 ms at 10 kHz. ``FractionalOctaveBank.delays_s``
    gives the delay at each band's mid-band frequency. Output sample ``m`` of a band with
    decimation factor ``F`` carries sample time ``m * F / fs``; the level engine assigns it
    to the time ``m * F / fs - delays_s`` so band energy lands in the interval of the sound,
    and flushes the bank with zeros at the end of a recording so the delayed energy of the
    last moments is counted. What remains is the spread of each filter's response, about
    1 / bandwidth: negligible for intervals of minutes, noticeable for short intervals in
    the lowest bands (the engine warns when bandwidth x interval < 10).

Speed
    The band filters dominate the cost. Where the compiled kernels are built
    (:mod:`bandmeter.compiled`), one kernel runs every band of a stage:

    Compiled stage kernel (``sos_bands`` in ``bandmeter/_kernels.c``)
        The bands of a stage run side by side in the lanes of vector registers (4 with AVX2,
        chosen at run time, else 2 with SSE2), each in the arithmetic of
        ``scipy.signal.sosfilt`` (transposed direct form II, the same operations in the same
        order), so every band's output and final state are sosfilt's to the last bit
        (``tests/test_compiled.py``, any lane width). One cascade alone waits on each of its
        results, which is what limits sosfilt (about 6.4 ns per band-sample here); four in
        lanes keep the arithmetic units busy instead: 1.6 ns per band-sample for the four
        48 kHz bands and 2.1 ns for a stage of three (one lane idle), against 3.1 - 3.7 ns
        for the block state-space kernel below (one run, 131072-sample blocks). States
        below 1e-200 are set to 0 every 256 samples, so digital silence never runs in slow
        subnormal arithmetic (outputs differ from sosfilt's only below that, more than
        4000 dB down).

    Without the extension (or with ``BANDMETER_NUMPY_ONLY=1``) two NumPy-based kernels run
    them on the same state (the layout of sosfilt's ``zi``), so the bank can switch between
    them at any block:

    sosfilt
        The compiled kernel behind ``scipy.signal.sosfilt``
        (``scipy.signal._sosfilt._sosfilt``, a private scipy function), called directly to
        save some 35 us of argument validation per call. It is checked against the public
        ``sosfilt`` on first use, and the public function is used when it is missing or
        differs. It takes stage blocks shorter than ``_BLOCK_MIN_SAMPLES`` (2048) samples at
        the stage's rate, and any band that fails the block path's probe. With it alone the
        bank filters 7 full-rate band-equivalents (one-third octaves at 48 kHz: 4 bands at
        48 kHz, 3 per lower octave) instead of 31, so it cannot be more than about 4.4 times
        faster than one full-rate band-pass per band with the same kernel; sosfilt is
        latency-bound at about 7 ns per band-sample on the development machine.
    Block state-space kernel (:class:`bandmeter.blockfilter._BlockKernel`)
        Shared with the A and C weightings since it moved to :mod:`bandmeter.blockfilter`
        (the bank uses it unchanged, with sosfilt's state layout and its own probe,
        ``_probe_deviation``, and groups, ``_StagePlan``, here). It takes the longer stage
        blocks and makes each band-sample cheaper instead. The bands of
        a stage (up to ``_GROUP_MAX`` = 8 at a time) are filtered together by matrix products.
        The stage input is cut into frames of 256 samples (128 for stage blocks shorter than
        16384 samples), each frame into sub-frames of 32. Per block: (1) the state input of
        every frame, ``Gamma x_frame``, for all frames and bands in one product; (2) the
        frame-to-frame recurrence ``s_{k+1} = A**256 s_k + Gamma x_k`` of each band's 8
        states: in the stacked states it is a lower-triangular band system (bandwidth 9, as
        ``A`` is upper Hessenberg in the reversed-section state order), solved for all frames
        and bands by one BLAS ``dtbsv`` call, so there is no Python loop over frames and no
        diagonalisation (the band filters' eigenvector matrices have condition numbers up to
        1e6 at b = 24, too many digits to lose); (3) the states at the sub-frame starts,
        one product per sub-frame of a frame, each over all frames and bands; (4) the outputs
        of all sub-frames, ``y = O s + T x`` (``T`` the lower-triangular Toeplitz matrix of
        the impulse response), as 4 products of 8 output columns each, which skip most of
        the zero triangle of ``T``. The frames are read from the stage input in place; the
        tail of a block is zero padded (surplus outputs are discarded) and the state at the
        true end of the block is computed from the last sub-frame start, so block lengths
        need not be multiples of anything. This costs about 46 multiply-adds per
        band-sample against sosfilt's 20, but at BLAS throughput: in one run (blocks of
        131072 samples) 3.1 ns per band-sample for the 4 full-rate bands at 48 kHz and
        3.2 ns for the 3 bands at 24 kHz, against sosfilt's 7.2 ns in the same run; the
        block path's parameters are the fastest measured (module notes of
        :mod:`bandmeter.blockfilter`). It is the same arithmetic as sosfilt, regrouped:
        the measured deviation from ``scipy.signal.sosfilt`` is at most 4.5e-14 of the band's
        RMS over every band at 44.1, 48 and 96 kHz for b = 1, 3, 6, 12 and 24 from 1 Hz up
        (``scripts/check_filterbank_block_kernel.py``). Still, on first use every band is
        checked on a noise probe against ``scipy.signal.sosfilt`` and stays on sosfilt if it
        deviates by more than 1e-11 of the probe output (no band does).

    Decimators
        The 22 even taps run as matrix products of windows of every other input sample with
        a banded Toeplitz matrix; the windows overlap, which BLAS cannot take as one matrix,
        so they are taken in interleaved sets that do not overlap (``_HalfbandDecimator``).
        On long blocks this takes 0.75 of the time of one product over the overlapping
        windows (which NumPy runs in its own loop, not BLAS); the 9 decimators of a
        131072-sample block at 48 kHz take 0.7 of that time (interleaved runs, caches
        evicted between blocks).

    With the compiled stage kernel, ``scripts/bench_filterbank.py`` (below) gave 1014 x real
    time at 48 kHz against 650 x for the NumPy paths, 380 x for sosfilt alone and 94.5 x for
    the plain full-rate order-4 bank (10.7 times), in one run; the figures that follow are
    of the NumPy paths.

    Measured with ``scripts/bench_filterbank.py`` (one core, 60 s of noise in 1 s blocks,
    one-third octaves, band mean squares accumulated) on the development machine, a shared
    2-core virtual machine whose figures vary by some +-20 % between runs (the script
    interleaves the runs it compares), in one run on a busy machine: at 48 kHz the bank runs
    at 541 x real time against 79 x for the plain full-rate order-4 bank, 6.8 times faster
    (with sosfilt alone: 322 x, 4.1 times); at 44.1 kHz 457 x against 94 x (4.9 times); at
    96 kHz 434 x against 44 x (10.0 times); earlier runs gave 5.7 to 6.2 at 48 kHz and 5.5
    at 44.1 kHz. Against the previous version (decimators by NumPy's loop, the frames
    copied into a padded buffer), interleaved in one process, a 131072-sample block takes
    0.90-0.96 of the time at 44.1, 48 and 96 kHz (medians of several runs). Blocks of 0.1 s
    leave the stages too short for the block path to gain much (4.9 times at 48 kHz); the
    level engine therefore reads blocks of 2**17 samples (2.7 s at 48 kHz) by default (6.2
    times in the same benchmark), which keeps every stage down to 750 Hz on the block path.
    Filter states below 1e-200 are flushed after each block, and the frame states of the
    block path within a block, so that digital silence does not leave them in slow
    subnormal arithmetic.

Set-up
    The designs are cached per process, but every fresh process (a CLI run, a benchmark
    child) designs its bank once. ``_butter_bandpass`` repeats the steps of
    ``scipy.signal.butter(..., output="sos")`` for the band-pass (prototype poles,
    pre-warping, band-pass and bilinear transforms, "nearest" pairing) with the same
    floating-point operations but without scipy's per-call overhead, and ``_sos_response``
    the arithmetic of ``sosfreqz``; ``_MaskCheck`` computes a band's check frequencies and
    limits once, so the Nelder-Mead search pays one response per trial. The sections and
    margins are the same to the last bit (all bands of b = 1 .. 24 at 8 - 192 kHz, 6568
    cases, and 6000 random band-passes were compared); ``_fast_design_ok`` checks one design
    per process against scipy and falls back to scipy itself if a scipy release computes
    differently. The one-third-octave bank at 48 kHz then takes 22-24 ms to build in a
    fresh process instead of 80-99 ms (medians, alternated runs); about a third of what is
    left is the group delays (``scipy.signal.group_delay``).

Input units are preserved: a band's mean square is in input units squared (Pa**2 after
calibration).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from types import ModuleType

import numpy as np
from scipy import integrate, optimize, signal

from bandmeter.bands import Band, G, band_set
from bandmeter.blockfilter import (  # noqa: F401 - re-exported: the bank's kernel and its knobs
    _BLOCK_FRAME,
    _BLOCK_SUB,
    _BLOCK_TOL,
    _OUT_COLS,
    _WORK_BYTES,
    SINGLE_THREAD_MACS,
    _BlockKernel,
    _frame_matrices,
    _FrameLevel,
    _probe_deviation,
    _state_space,
    matmul_rows,
    probe_once,
)
from bandmeter.compiled import kernels
from bandmeter.errors import SettingsError
from bandmeter.numerics import flush_tiny

__all__ = [
    "ORDER",
    "RHO",
    "MIN_FS_HZ",
    "MAX_FS_HZ",
    "HALFBAND_TAPS",
    "class1_limits",
    "effective_bandwidth_beta",
    "FractionalOctaveBank",
]

#: Butterworth order per side of every band filter.
ORDER: int = 4
#: A band runs at the lowest stage rate R with upper edge f2 <= RHO * R.
RHO: float = 0.375
#: Accepted sample-rate range, Hz.
MIN_FS_HZ: float = 1000.0
MAX_FS_HZ: float = 768_000.0
#: Full-rate bands with a smaller analytic class 1 margin than this get re-optimised, dB.
_OPTIMISE_BELOW_DB: float = 0.3
#: A band whose analytic class 1 margin stays below this is dropped, dB.
_MIN_MARGIN_DB: float = 0.05
#: Maximum number of samples handled in one piece by band_mean_square.
_PIECE: int = 1 << 18

# --------------------------------------------------------------------------------------------
# IEC 61260-1:2014 class 1 acceptance limits of relative attenuation (dB), REFERENCE_VALUES.md
# 5.2 = GOST R 70024 Table B.1 (= IEC 61260-1:2014 Table 1); the G^(1/2) row is from memory,
# unconfirmed; above G^4 the 70 dB minimum is assumed to continue (from memory).
# Octave breakpoints as powers of G: 0, 1/8, 1/4, 3/8, 1/2, 1, 2, 3, 4.
_BP_EXPONENTS = (0.0, 0.125, 0.25, 0.375, 0.5, 1.0, 2.0, 3.0, 4.0)
_BP_LOWER = (-0.4, -0.4, -0.4, -0.4, 1.2, 16.6, 40.5, 60.0, 70.0)
_BP_UPPER = (0.4, 0.5, 0.7, 1.4, 5.3, math.inf, math.inf, math.inf, math.inf)


@functools.cache
def _breakpoints(b: int) -> np.ndarray:
    """Upper breakpoints Omega_b for a 1/b-octave filter (IEC 61260-1:2014 Annex F mapping).

    ``Omega_b = 1 + (G**(1/(2b)) - 1) / (G**(1/2) - 1) * (Omega_1 - 1)``; lower breakpoints are
    ``1 / Omega_b`` (REFERENCE_VALUES.md 5.2). Cached, read-only.
    """
    omega1 = G ** np.asarray(_BP_EXPONENTS)
    bp = 1.0 + (G ** (1.0 / (2 * b)) - 1.0) / (G**0.5 - 1.0) * (omega1 - 1.0)
    bp.setflags(write=False)
    return bp


# Limits between breakpoint k and k + 1 (the staircase envelope), and beyond the last one.
_NEXT_BP = np.minimum(np.arange(len(_BP_EXPONENTS)) + 1, len(_BP_EXPONENTS) - 1)
_LOWER_TAB = np.asarray(_BP_LOWER)
_UPPER_TAB = np.asarray(_BP_UPPER)
_ENV_LOWER = np.minimum(_LOWER_TAB, _LOWER_TAB[_NEXT_BP])
_ENV_UPPER = np.maximum(_UPPER_TAB, _UPPER_TAB[_NEXT_BP])


def class1_limits(omega: np.ndarray | float, b: int) -> tuple[np.ndarray, np.ndarray]:
    """Class 1 limits of relative attenuation at normalised frequencies ``omega = f / fm``.

    Exactly at a breakpoint the breakpoint's own limits apply; between two breakpoints the
    staircase envelope applies (lower limit = the smaller, upper limit = the larger of the two
    adjacent limits); beyond ``G**4`` the minimum attenuation is 70 dB. The limits are
    symmetric in ``log(omega)``.

    Parameters
    ----------
    omega : array_like
        Frequency divided by the exact mid-band frequency, > 0.
    b : int
        Bandwidth designator.

    Returns
    -------
    lower_db, upper_db : ndarray
        Minimum and maximum relative attenuation, dB (``upper_db`` may be ``inf``).
    """
    om = np.atleast_1d(np.asarray(omega, dtype=float))
    u = np.where(om >= 1.0, om, 1.0 / om)
    bp = _breakpoints(b)
    k = np.clip(np.searchsorted(bp, u, side="right") - 1, 0, len(bp) - 1)
    inside = u < bp[-1]
    lower = np.where(inside, _ENV_LOWER[k], _BP_LOWER[-1])
    upper = np.where(inside, _ENV_UPPER[k], math.inf)
    # at a breakpoint (to 1e-9) its own limits: only the breakpoints on either side of u,
    # k and k + 1, can be that close (they lie much further apart)
    for j in (k, _NEXT_BP[k]):
        on = np.abs(u / bp[j] - 1.0) < 1e-9
        lower = np.where(on, _LOWER_TAB[j], lower)
        upper = np.where(on, _UPPER_TAB[j], upper)
    return lower, upper


# --------------------------------------------------------------------------------------------
# Band-filter design


def _analog_attenuation(omega: np.ndarray, b: int, beta: float, order: int) -> np.ndarray:
    q = G ** (beta / (2 * b))
    x = (omega - 1.0 / omega) / (q - 1.0 / q)
    return 10.0 * np.log10(1.0 + x ** (2 * order))


@functools.cache
def effective_bandwidth_beta(b: int, order: int = ORDER) -> float:
    """Edge scaling ``beta`` giving the analog Butterworth band-pass its nominal bandwidth.

    Solves ``integral |H(Omega)|**2 d(ln Omega) = ln(G**(1/b))`` for the band-pass with -3 dB
    edges ``G**(+-beta/(2b))``: the normalised effective bandwidth (log-frequency weighting) of
    the prototype is then exactly 1 (0 dB).
    """

    def excess(beta: float) -> float:
        def power(u: float) -> float:
            return 10.0 ** (-_analog_attenuation(np.exp(u), b, beta, order) / 10.0)

        val, _ = integrate.quad(power, 0.0, 12.0, limit=400, points=[math.log(G) / b])
        return 2.0 * val - math.log(G) / b

    return float(optimize.brentq(excess, 0.8, 1.0, xtol=1e-12))


@functools.cache
def _mask_grid(b: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The parts of :func:`_mask_points` that depend on ``b`` only (cached, read-only).

    Returns the breakpoints, the breakpoints with the dense grid between them (``G**0`` to
    ``G**4``) and the grid below ``1 / G**4``.
    """
    bp = _breakpoints(b)
    pieces = [bp]
    for lo, hi in zip(bp[:-1], bp[1:], strict=True):
        pieces.append(np.geomspace(lo, hi, 42)[1:-1])
    parts = (bp, np.concatenate(pieces), np.geomspace(1.0 / bp[-1], 1e-3, 30))
    for part in parts:
        part.setflags(write=False)
    return parts


def _mask_points(fm: float, rate: float, b: int) -> np.ndarray:
    """Normalised check frequencies: every breakpoint plus a dense grid, below rate/2."""
    bp, inner, tail = _mask_grid(b)
    nyq = 0.5 * rate / fm
    up = np.concatenate([inner, np.geomspace(bp[-1], nyq, 40)]) if nyq > bp[-1] else inner
    om = np.concatenate([up, 1.0 / up[1:], tail])
    return np.unique(om[(om * fm < 0.5 * rate * (1.0 - 1e-9)) & (om > 0)])


def _unit_points(f_hz: np.ndarray, rate: float) -> np.ndarray:
    """``exp(-1j w)`` at the frequencies ``f_hz``, as ``scipy.signal.sosfreqz`` computes it."""
    return np.exp(-1j * (2 * math.pi * np.asarray(f_hz, dtype=np.float64) / float(rate)))


def _sos_response(sos: np.ndarray, zm1: np.ndarray) -> np.ndarray:
    """Complex response of the sections ``sos`` at the points ``zm1 = exp(-1j w)`` (1-D).

    The arithmetic of ``scipy.signal.sosfreqz`` operation by operation (each section's
    numerator and denominator by Horner's rule in ``exp(-1j w)``, their quotient, the product
    over the sections in section order), with the same operand order and array shapes: NumPy's
    complex multiplication (SIMD loops with fused multiply-adds, not symmetric in its operands)
    can round differently for other layouts, so only the same calls give the same last bit.
    What is saved is scipy's validation and the points, computed once per grid by the caller.
    """
    h = 1.0
    for row in sos:
        h *= (row[0] + (row[1] + row[2] * zm1) * zm1) / (row[3] + (row[4] + row[5] * zm1) * zm1)
    return h


def _response(sos: np.ndarray, zm1: np.ndarray, f_hz: Sequence[float], rate: float) -> np.ndarray:
    """``scipy.signal.sosfreqz(sos, worN=f_hz, fs=rate)[1]``; ``zm1 = _unit_points(f_hz, rate)``."""
    if _fast_design_ok():
        return _sos_response(sos, zm1)
    return signal.sosfreqz(sos, worN=f_hz, fs=rate)[1]


class _MaskCheck:
    """The class 1 check of trial designs of one band at one rate.

    Everything :func:`_mask_margins` needs that does not depend on the design (the points
    ``exp(-1j w)`` of the check frequencies ``om`` and their limits) is computed once, so
    the Nelder-Mead search of :func:`_design` pays only the response of each trial. The
    points are held in pass-band-first order, which leaves every margin unchanged.
    """

    def __init__(self, fm: float, rate: float, b: int, om: np.ndarray) -> None:
        lower, upper = class1_limits(om, b)
        finite = np.isfinite(upper)
        order = np.concatenate([np.flatnonzero(finite), np.flatnonzero(~finite)])
        self.n_pass = int(np.count_nonzero(finite))
        self.rate = rate
        self.f_hz = (om * fm)[order]
        self.zm1 = _unit_points(self.f_hz, rate)
        self.zm1_fm = _unit_points([fm], rate)
        self.lower_pass = lower[order[: self.n_pass]]
        self.upper_pass = upper[order[: self.n_pass]]
        self.lower_stop = lower[order[self.n_pass :]]

    def margins(self, sos: np.ndarray) -> tuple[float, float]:
        """``(pass_margin, stop_margin)`` of ``sos``, dB, as :func:`_mask_margins`."""
        h = _response(sos, self.zm1, self.f_hz, self.rate)
        att = -20.0 * np.log10(np.maximum(np.abs(h), 1e-300))
        a_pass = att[: self.n_pass]
        m_pass = np.min(np.minimum(a_pass - self.lower_pass, self.upper_pass - a_pass))
        m_stop = np.min(att[self.n_pass :] - self.lower_stop)
        return float(m_pass), float(m_stop)


def _mask_margins(
    sos: np.ndarray, fm: float, rate: float, b: int, om: np.ndarray
) -> tuple[float, float]:
    """Smallest distances (dB) of the digital response to the class 1 limits at ``om``.

    Returns ``(pass_margin, stop_margin)``: the first over the points with a finite upper
    limit (pass band and skirts up to ``G**(1/2)``), the second over the stop band.
    """
    return _MaskCheck(fm, rate, b, om).margins(sos)


# ``scipy.signal.butter(ORDER, [lo, hi], "bandpass", fs=rate, output="sos")`` without scipy's
# per-call overhead: the same steps (buttap, pre-warping, lp2bp_zpk, bilinear_zpk, zpk2sos
# with its default "nearest" pairing) with the same floating-point operations, so the
# sections are the same to the last bit (checked on first use, _fast_design_ok, and by the
# tests). zpk2sos pairs the digital zeros (ORDER at -1, ORDER at +1) with the poles, the pole
# closest to the unit circle first, into the last section; for a band-pass of complex poles
# each section gets the two remaining zeros nearest its pole pair, both at +1 or both at -1.
# Anything else (a real pole, a pole equally far from both zeros) goes to scipy itself.

#: Poles of the analog Butterworth prototype, computed as ``scipy.signal.buttap`` does.
_PROTO_POLES = -np.exp(1j * np.pi * np.arange(-ORDER + 1, ORDER, 2, dtype=np.float64) / (2 * ORDER))
#: ``prod(fs2 - z)`` of scipy's bilinear transform for the band-pass's ORDER zeros at s = 0.
_ZEROS_PROD = np.prod(4.0 - np.zeros(ORDER, dtype=np.complex128))
#: The two numerators of the sections: zeros at z = -1 (index 0) and z = +1 (index 1).
_SECTION_NUM = np.array([[1.0, 2.0, 1.0], [1.0, -2.0, 1.0]])
_ZERO_PAIR = np.array([-1.0, 1.0])


def _cplxreal(z: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """scipy's own ``_cplxreal`` (the split of ``zpk2sos``, private); None where it raises
    or is missing (the caller then takes ``scipy.signal.butter`` itself)."""
    try:
        from scipy.signal._filter_design import _cplxreal as split
    except ImportError:  # pragma: no cover - another scipy layout
        return None
    try:
        return split(z)
    except ValueError:
        return None


def _conjugate_poles(p_z: np.ndarray) -> np.ndarray | None:
    """The poles of positive imaginary part when ``p_z`` holds exact conjugate pairs only.

    Then ``_cplxreal(p_z)`` returns these same values (its averages of each pole and its
    partner's conjugate are exact), in an order of its own; None otherwise (a real or nearly
    real pole, a pair that is not exact).
    """
    tol = 100 * np.finfo(np.float64).eps
    if np.any(abs(p_z.imag) <= tol * abs(p_z)):
        return None
    up = p_z[p_z.imag > 0]
    if 2 * len(up) != len(p_z):
        return None
    key = _re_im
    if sorted(up.tolist(), key=key) != sorted(p_z[p_z.imag < 0].conj().tolist(), key=key):
        return None
    return up


def _re_im(c: complex) -> tuple[float, float]:
    return c.real, c.imag


def _butter_bandpass(lo: float, hi: float, rate: float) -> np.ndarray:
    """``scipy.signal.butter(ORDER, [lo, hi], "bandpass", fs=rate, output="sos")``."""
    fs = float(rate)
    wn = np.asarray([lo, hi], dtype=np.float64) / (fs / 2)
    if not 0.0 < wn[0] < wn[1] < 1.0:
        return _scipy_butter(lo, hi, rate)  # scipy's error
    # iirfilter: pre-warping at fs = 2, then lp2bp_zpk
    warped = 2 * 2.0 * np.tan(np.pi * wn / 2.0)
    bw = float(warped[1] - warped[0])
    wo = float(np.sqrt(warped[0] * warped[1]))
    p_lp = _PROTO_POLES * bw / 2
    root = np.sqrt(p_lp**2 - wo**2)
    p_bp = np.concatenate((p_lp + root, p_lp - root))
    k_bp = 1.0 * bw**ORDER
    # bilinear_zpk at fs = 2
    p_z = (4.0 + p_bp) / (4.0 - p_bp)
    k = np.asarray(k_bp * np.real(_ZEROS_PROD / np.prod(4.0 - p_bp))).real
    # zpk2sos, pairing "nearest": the poles one of each conjugate pair, ranked by distance
    # to the unit circle (np.argmin takes the first of equal values: a stable sort); the
    # ranking does not depend on the poles' order unless two distances are equal
    p = _conjugate_poles(p_z)
    worst = None if p is None else np.abs(1 - np.abs(p))
    if worst is None or len(set(worst.tolist())) < len(worst):
        split = _cplxreal(p_z)
        if split is None or len(split[1]) or len(split[0]) != ORDER:
            return _scipy_butter(lo, hi, rate)
        p = split[0]
        worst = np.abs(1 - np.abs(p))
    n = len(p)
    order = sorted(range(n), key=worst.__getitem__)
    dist = np.abs(_ZERO_PAIR[:, None] - p).tolist()  # to the zeros at -1 and +1
    left = [ORDER, ORDER]  # zeros at -1, +1 not yet paired
    sos = np.empty((n, 6))
    for si, i in zip(range(n - 1, -1, -1), order, strict=True):
        if left[0] and left[1]:  # the nearer zeros (a tie goes to scipy's sort)
            if dist[0][i] == dist[1][i]:
                return _scipy_butter(lo, hi, rate)
            side = 0 if dist[0][i] < dist[1][i] else 1
        else:  # the zeros that are left (always an even number of each)
            side = 0 if left[0] else 1
        left[side] -= 2
        sos[si, :3] = _SECTION_NUM[side]
    # denominators: poly([p1, conj(p1)]) = [1, -2 Re p1, Re(p1)**2 + Im(p1)**2]
    pr, pim = p.real[order[::-1]], p.imag[order[::-1]]
    sos[:, 3] = 1.0
    sos[:, 4] = -2.0 * pr
    sos[:, 5] = pr * pr + pim * pim
    sos[0][:3] *= k
    return sos


def _scipy_butter(lo: float, hi: float, rate: float) -> np.ndarray:
    return signal.butter(ORDER, [lo, hi], btype="bandpass", fs=rate, output="sos")


@functools.lru_cache(maxsize=1)
def _fast_design_ok() -> bool:
    """True when :func:`_butter_bandpass` and :func:`_sos_response` reproduce scipy exactly.

    Checked once per process on one design, the way :func:`_kernel_ok` checks the private
    sosfilt kernel: if this platform's arithmetic differs, the designs and their responses
    are taken from ``scipy.signal.butter`` and ``sosfreqz`` themselves.
    """
    lo, hi, rate, f = 11300.0, 14200.0, 48000.0, [1.0, 1000.0, 12600.0, 23999.0]
    sos = _butter_bandpass(lo, hi, rate)
    if not np.array_equal(sos, _scipy_butter(lo, hi, rate)):
        return False
    _, h = signal.sosfreqz(sos, worN=f, fs=rate)
    return bool(np.array_equal(_sos_response(sos, _unit_points(f, rate)), h))


def _butter_sos(
    fm: float, lo: float, hi: float, rate: float, zm1_fm: np.ndarray | None = None
) -> np.ndarray:
    """Butterworth band-pass with edges ``lo``, ``hi`` at ``rate``, 0 dB at ``fm``.

    ``zm1_fm`` is ``_unit_points([fm], rate)`` when the caller has it.
    """
    fast = _fast_design_ok()
    sos = _butter_bandpass(lo, hi, rate) if fast else _scipy_butter(lo, hi, rate)
    if zm1_fm is None:
        zm1_fm = _unit_points([fm], rate)
    h = _response(sos, zm1_fm, [fm], rate)
    sos[0, :3] /= abs(h[0])
    return np.ascontiguousarray(sos)


@functools.lru_cache(maxsize=4096)
def _design(band: Band, rate: float, optimise: bool) -> tuple[np.ndarray | None, float]:
    """Design one band filter at ``rate``; return ``(sos, class 1 margin dB)`` (cached)."""
    nyq = 0.5 * rate
    beta = effective_bandwidth_beta(band.b)
    q = G ** (beta / (2 * band.b))
    lo, hi = band.exact_hz / q, band.exact_hz * q
    if band.upper_hz >= nyq or hi >= nyq:
        return None, -math.inf
    check = _MaskCheck(band.exact_hz, rate, band.b, _mask_points(band.exact_hz, rate, band.b))
    sos = _butter_sos(band.exact_hz, lo, hi, rate, check.zm1_fm)
    margin = min(check.margins(sos))
    if not optimise or margin >= _OPTIMISE_BELOW_DB:
        return sos, margin

    def cost(p: np.ndarray) -> float:
        lo_p, hi_p = lo * math.exp(p[0]), hi * math.exp(p[1])
        if not 0.0 < lo_p < hi_p < nyq * (1.0 - 1e-6):
            return 10.0
        m_pass, m_stop = check.margins(_butter_sos(band.exact_hz, lo_p, hi_p, rate, check.zm1_fm))
        # worst-case margin first (it cannot exceed 0.4 dB, the tolerance at fm), then as
        # much stop-band margin as the pass band allows
        return -(min(m_pass, m_stop, 0.4) + 0.01 * min(m_stop, 6.0))

    res = optimize.minimize(
        cost, np.zeros(2), method="Nelder-Mead", options={"xatol": 1e-6, "fatol": 1e-7}
    )
    lo_b, hi_b = lo * math.exp(res.x[0]), hi * math.exp(res.x[1])
    best = _butter_sos(band.exact_hz, lo_b, hi_b, rate, check.zm1_fm)
    best_margin = min(check.margins(best))
    if best_margin > margin:
        return best, best_margin
    return sos, margin


# --------------------------------------------------------------------------------------------
# Filtering kernels


try:  # the compiled kernel behind scipy.signal.sosfilt, without the per-call validation
    from scipy.signal._sosfilt import _sosfilt as _SOSFILT_KERNEL
except ImportError:  # pragma: no cover - depends on the scipy build
    _SOSFILT_KERNEL = None


@functools.lru_cache(maxsize=1)
def _kernel_ok() -> bool:
    """True when scipy's private sosfilt kernel reproduces the public ``sosfilt`` exactly."""
    if _SOSFILT_KERNEL is None:
        return False
    rng = np.random.default_rng(7)
    sos = signal.butter(2, [0.1, 0.2], btype="bandpass", output="sos")
    x = rng.standard_normal(64)
    zi = rng.standard_normal((sos.shape[0], 2))
    ref, zref = signal.sosfilt(sos, x, zi=zi)
    try:
        y = x[None, :].copy()
        z = zi[None, :, :].copy()
        _SOSFILT_KERNEL(sos, y, z)
    except Exception:  # noqa: BLE001 - any failure of a private API means: do not use it
        return False
    return bool(np.array_equal(y[0], ref) and np.array_equal(z[0], zref))


class _SosState:
    """One band filter: SOS coefficients and their state, in the layout of the kernel."""

    def __init__(self, sos: np.ndarray, zi: np.ndarray | None = None) -> None:
        self.sos = np.array(sos, dtype=np.float64, order="C")
        self.zi = np.zeros((1, self.sos.shape[0], 2)) if zi is None else zi

    def reset(self) -> None:
        self.zi[...] = 0.0

    def process_into(self, x: np.ndarray, out: np.ndarray, flush: bool = True) -> None:
        """Filter ``x`` into ``out`` (a C-contiguous row of shape ``(1, len(x))``).

        With ``flush`` (default) tiny state values are flushed afterwards; without it the
        caller does so.
        """
        if x.size == 0:
            return
        out[0] = x
        if _kernel_ok():
            _SOSFILT_KERNEL(self.sos, out, self.zi)
        else:
            y, zf = signal.sosfilt(self.sos, x, zi=self.zi[0])
            self.zi[0] = zf
            out[0] = y
        if flush:
            flush_tiny(self.zi)  # no subnormal state after digital silence (slow arithmetic)


# --------------------------------------------------------------------------------------------
# Block state-space kernel (the fast path of the band filters; bandmeter.blockfilter)

#: A stage's bands take the block path for blocks of at least this many samples at its rate.
_BLOCK_MIN_SAMPLES: int = 2048
#: At most this many bands of one stage are filtered together (bounds the work array).
_GROUP_MAX: int = 8



class _StagePlan:
    """Which bands of a stage take the block path, in groups with their kernels.

    Built on the first block long enough for the block path. Every band is checked on a probe
    against ``scipy.signal.sosfilt`` (:func:`_probe_deviation`); a band deviating by more than
    ``_BLOCK_TOL`` stays on the sosfilt path (``singles``).

    Parameters
    ----------
    soss : sequence of ndarray
        Second-order sections of the stage's bands, in stage order.
    scratch : dict, optional
        Scratch memory shared by the kernels (see :class:`_BlockKernel`).

    Attributes
    ----------
    groups : list of (list of int, slice or ndarray, _BlockKernel)
        Positions (in the stage) of the bands of each group, the same as an index into the
        stage's state array (a slice when they are consecutive), and the group's kernel.
    singles : list of int
        Positions of the bands left on the sosfilt path.
    """

    def __init__(
        self, soss: Sequence[np.ndarray], scratch: dict[str, np.ndarray] | None = None
    ) -> None:
        self.groups: list[tuple[list[int], slice | np.ndarray, _BlockKernel]] = []
        accepted: list[int] = []
        for start in range(0, len(soss), _GROUP_MAX):
            idx = list(range(start, min(start + _GROUP_MAX, len(soss))))
            kernel = _BlockKernel([soss[j] for j in idx], scratch=scratch)
            dev = probe_once(_probe_deviation, kernel, [soss[j] for j in idx])
            good = [j for j, d in zip(idx, dev, strict=True) if d <= _BLOCK_TOL]
            if good and len(good) < len(idx):
                kernel = _BlockKernel([soss[j] for j in good], scratch=scratch)
            if good:
                consecutive = good == list(range(good[0], good[-1] + 1))
                index = slice(good[0], good[-1] + 1) if consecutive else np.array(good)
                self.groups.append((good, index, kernel))
                accepted += good
        self.singles = [j for j in range(len(soss)) if j not in accepted]


def _halfband_taps() -> np.ndarray:
    """43-tap equiripple half-band low-pass: pass 0..0.1875, stop 0.3125..0.5 (fs = 1)."""
    h = signal.remez(43, [0.0, 0.1875, 0.3125, 0.5], [1.0, 0.0], fs=1.0)
    centre = len(h) // 2
    h[1::2] = 0.0  # odd indices: zero taps of a half-band filter (remez leaves ~1e-14)
    h[centre] = 0.5
    return h


#: Half-band decimation filter (input-rate taps, linear phase, delay 21 input samples).
HALFBAND_TAPS: np.ndarray = _halfband_taps()
HALFBAND_TAPS.setflags(write=False)


def _toeplitz_chunk(taps: np.ndarray, chunk: int) -> np.ndarray:
    """Matrix T with ``(A @ T)[j, r] = sum_i taps[i] e[j*chunk + r + len(taps) - 1 - i]``."""
    n = taps.size
    t = np.zeros((chunk + n - 1, chunk))
    for r in range(chunk):
        t[r : r + n, r] = taps[::-1]
    return t


class _HalfbandDecimator:
    """Stateful decimate-by-2 with :data:`HALFBAND_TAPS`.

    Output sample ``m`` is ``sum_k h[k] x[2m - k]`` where ``x`` is indexed by a global input
    counter, so the result is independent of how the input is split into blocks. The odd
    taps are zero except the centre one (0.5), so each output is 22 even taps applied to
    every other input sample plus half of one sample of the other parity. The samples the
    even taps see are copied into one contiguous array ``e``, and the even taps applied as
    matrix products of windows of ``e`` (``_CHUNK + 21`` samples, one per ``_CHUNK``
    outputs) with a banded Toeplitz matrix. Consecutive windows overlap, which BLAS cannot
    take as one matrix (NumPy would run its own, several times slower loop), so the windows
    are taken in ``_SETS`` interleaved sets, every ``_SETS``-th window, which do not
    overlap: each set is a plain strided matrix. The last windows run over zero padding and
    their surplus outputs are dropped.
    """

    _N = len(HALFBAND_TAPS)
    _EVEN = np.ascontiguousarray(HALFBAND_TAPS[0::2])
    _CENTRE = float(HALFBAND_TAPS[len(HALFBAND_TAPS) // 2])
    _CHUNK = 16
    _T = _toeplitz_chunk(_EVEN, _CHUNK)
    #: Interleaved sets of windows: windows of one set start ``_SETS * _CHUNK`` apart.
    _SETS = -(-(_CHUNK + len(_EVEN) - 1) // _CHUNK)
    #: Fewer windows than this are taken as one set (NumPy's loop; fewer calls).
    _SETS_FROM = 128

    def __init__(self) -> None:
        self.reset()

    def reset(self) -> None:
        self.hist = np.zeros(self._N - 1)
        self.count = 0

    @staticmethod
    def output_length(count: int, n: int) -> int:
        """Number of outputs produced by ``n`` new inputs after ``count`` earlier ones."""
        return max(0, (n - count % 2 + 1) // 2)

    def process(self, x: np.ndarray) -> np.ndarray:
        n = x.size
        if n == 0:
            return np.zeros(0)
        nh, chunk = self._N - 1, self._CHUNK
        span = chunk + self._EVEN.size - 1  # window length
        # in the stream ext = [hist, x], output m is centred on ext[nh // 2 + par + 2 m]: its
        # even taps see ext[par + 2 m + 2 j] (j = 0..21), its centre tap the other parity
        par = self.count % 2
        m = self.output_length(self.count, n)
        hist = self.hist
        self.hist = x[n - nh :].copy() if n >= nh else np.concatenate([hist, x])[-nh:]
        self.count += n
        if m == 0:
            return np.zeros(0)
        # windows: pieces of ``per`` windows of each of the ``sets`` sets, at most
        # SINGLE_THREAD_MACS per product (see matmul_rows); the window count is rounded up
        # to whole pieces
        windows = -(-m // chunk)
        sets = self._SETS if windows >= self._SETS_FROM else 1
        per_max = max(1, SINGLE_THREAD_MACS // (span * chunk))
        pieces = -(-windows // (sets * per_max))
        per = -(-windows // (sets * pieces))
        windows = pieces * sets * per
        e = np.empty(windows * chunk + span - chunk)
        head = nh // 2  # ext[par::2] = [hist[par::2] (21 samples), x[par::2]]
        e[:head] = hist[par::2]
        e[head : head + m] = x[par::2]
        e[head + m :] = 0.0
        y = np.empty(windows * chunk)
        step = e.strides[0]
        shape = (pieces, sets, per)
        strides = (sets * per * chunk * step, chunk * step, sets * chunk * step)
        frames = np.ndarray(shape + (span,), np.float64, e, 0, strides + (step,))
        np.matmul(frames, self._T, out=np.ndarray(shape + (chunk,), np.float64, y, 0,
                                                  strides + (step,)))
        y = y[:m]
        # centre tap, ext[nh // 2 + par + 2 m]: in hist for the first few outputs
        k = min(m, (nh // 2 - par + 1) // 2)
        y[:k] += self._CENTRE * hist[nh // 2 + par :: 2][:k]
        y[k:] += self._CENTRE * x[1 - par :: 2][: m - k]
        return y


# --------------------------------------------------------------------------------------------
# The bank


def _check_fs(fs: object) -> float:
    if isinstance(fs, bool) or not isinstance(fs, (int, float)):
        raise SettingsError(f"sample rate must be a number in Hz, got {fs!r}")
    value = float(fs)
    if not math.isfinite(value) or not MIN_FS_HZ <= value <= MAX_FS_HZ:
        raise SettingsError(
            f"sample rate must be between {MIN_FS_HZ:g} and {MAX_FS_HZ:g} Hz, got {fs!r}"
        )
    return value


def _stage_of(band: Band, fs: float) -> int:
    k = 0
    while band.upper_hz <= RHO * fs / 2 ** (k + 1):
        k += 1
    return k


class FractionalOctaveBank:
    """Class 1 multirate 1/b-octave filter bank that streams.

    Parameters
    ----------
    fs : float
        Sample rate of the input, Hz (1 kHz .. 768 kHz).
    b : int
        Bandwidth designator: 1 (octave), 3 (one-third octave), 6, 12 or 24.
    fmin_hz, fmax_hz : float, optional
        Nominal or exact mid-band frequencies of the lowest and highest band wanted, Hz; see
        :func:`bandmeter.bands.band_set` for the defaults.
    hold_samples : int, optional
        Held stages (default 0: none). With ``hold_samples > 0`` every decimated stage
        waits until at least this many samples of its own input are pending, then filters
        and decimates them in one call: fewer, longer calls, which cost less per sample
        (see Notes). The outputs are the same samples, delivered later; :meth:`drain`
        delivers what is still pending.

    Attributes
    ----------
    fs : float
        Input sample rate, Hz.
    b : int
        Bandwidth designator.
    bands : list of Band
        Kept bands, ascending.
    dropped : list of Band
        Requested bands the sample rate cannot support at class 1 (upper edge not below
        ``fs/2``, or no design meeting the class 1 limits below ``fs/2``).
    factors : list of int
        Decimation factor of each kept band (1, 2, 4, ...).
    rates_hz : list of float
        Sample rate of each kept band's output, ``fs / factor``, Hz.
    delays_s : list of float
        Group delay of each kept band's path (decimators and band filter) at its exact
        mid-band frequency, s.
    design_margins_db : list of float
        Smallest analytic distance of each band filter's response to the class 1 limits
        below its stage's Nyquist frequency, dB (band filter alone, decimators excluded).

    Raises
    ------
    SettingsError
        For a bad sample rate, band designator or range, or when no requested band can be
        analysed at ``fs``.

    Notes
    -----
    See the module docstring for the structure, the design choices, the group delay of the
    low bands and the speed (long blocks are filtered markedly faster per sample than short
    ones). ``process`` may return empty arrays for deep stages when a block is shorter
    than their decimation factor; the samples appear with a later block.

    Held stages: a block of 2**17 samples gives stage ``k`` only ``2**17 / 2**k`` samples,
    and the deep stages' calls then cost more per sample than long ones (fixed costs per
    call and per kernel). With ``hold_samples = 32768`` each stage runs on at least 32768
    samples (stage 3 every second block, stage 4 every fourth, ...): at 48 kHz, one-third
    octaves 20 Hz - 20 kHz, blocks of 2**17 samples, this took the bank from 4.66 to 4.21 ms
    per block (medians of 7 interleaved rounds on one core; the outputs agreed to 1.1e-15
    of their largest value, the kernels grouping frames differently). The cost is latency:
    the 20 Hz band's samples (factor 512) arrive up to 32768 x 512 input samples (about
    6 minutes at 48 kHz) late, so a caller that reads band outputs must call
    :meth:`drain` at the end, as the level engine does. Memory: at most about twice
    ``hold_samples`` pending samples per stage.

    Examples
    --------
    >>> import numpy as np
    >>> bank = FractionalOctaveBank(48000.0, b=3)
    >>> outputs = bank.process(np.zeros(48000))
    >>> [len(y) for y in outputs][:3]
    [94, 94, 188]
    """

    def __init__(
        self,
        fs: float,
        b: int = 3,
        fmin_hz: float | None = None,
        fmax_hz: float | None = None,
        hold_samples: int = 0,
    ) -> None:
        self.fs = _check_fs(fs)
        if isinstance(hold_samples, bool) or not isinstance(hold_samples, int) or (
            hold_samples < 0
        ):
            raise SettingsError(f"hold_samples must be an integer >= 0, got {hold_samples!r}")
        self.hold_samples = hold_samples
        requested = band_set(b, fmin_hz, fmax_hz)
        self.b = requested[0].b
        self.bands: list[Band] = []
        self.dropped: list[Band] = []
        self.factors: list[int] = []
        self.rates_hz: list[float] = []
        self.delays_s: list[float] = []
        self.design_margins_db: list[float] = []
        self._filters: list[_SosState] = []
        stages: list[int] = []
        for band in requested:
            k = _stage_of(band, self.fs)
            rate = self.fs / 2**k
            sos, margin = _design(band, rate, optimise=(k == 0))
            if sos is None or margin < _MIN_MARGIN_DB:
                self.dropped.append(band)
                continue
            self.bands.append(band)
            self.factors.append(2**k)
            self.rates_hz.append(rate)
            self.design_margins_db.append(margin)
            self._filters.append(_SosState(sos))
            stages.append(k)
            self.delays_s.append(
                (len(HALFBAND_TAPS) // 2) * (2**k - 1) / self.fs
                + _sos_group_delay_s(sos, band.exact_hz, rate)
            )
        if not self.bands:
            raise SettingsError(
                f"no 1/{self.b}-octave band from {requested[0].label} Hz to "
                f"{requested[-1].label} Hz can be analysed at fs={fs!r} Hz: every band's upper "
                f"edge must lie below fs/2 = {self.fs / 2:g} Hz"
            )
        self._stages = stages
        n_stages = max(stages) + 1
        self._by_stage = [[i for i, s in enumerate(stages) if s == k] for k in range(n_stages)]
        self._decimators = [_HalfbandDecimator() for _ in range(n_stages - 1)]
        # the states of all band filters live in one array (sosfilt layout; a stage's bands
        # are consecutive), so the block path can read and write several at once and the
        # bank flushes tiny values with one operation per block
        self._zi = np.zeros((len(self.bands), ORDER, 2))
        self._stage_zi = []
        for members in self._by_stage:
            first = members[0] if members else 0
            if members != list(range(first, first + len(members))):  # pragma: no cover
                raise AssertionError("the bands of a stage are not consecutive")
            self._stage_zi.append(self._zi[first : first + len(members)])
            for j, i in enumerate(members):
                self._filters[i].zi = self._stage_zi[-1][j : j + 1]
        # each stage's sections in one array, for the compiled kernel (which refuses a0 != 1;
        # every design has a0 = 1)
        self._stage_sos = [
            np.ascontiguousarray(np.stack([self._filters[i].sos for i in members]))
            if members else np.zeros((0, ORDER, 6))
            for members in self._by_stage
        ]
        self._plans: list[_StagePlan | None] = [None] * n_stages
        self._scratch: dict[str, np.ndarray] = {}  # work arrays of the block path
        # held stages: the pending input of each stage (index 0 unused)
        self._pending: list[list[np.ndarray]] = [[] for _ in range(n_stages)]

    @property
    def band_sos(self) -> list[np.ndarray]:
        """Second-order sections of each kept band filter (at its own rate), copies."""
        return [f.sos.copy() for f in self._filters]

    def reset(self) -> None:
        """Return every filter and decimator to the zero state and restart the counters."""
        for f in self._filters:
            f.reset()
        for d in self._decimators:
            d.reset()
        self._pending = [[] for _ in self._pending]

    def process(self, block: np.ndarray | Sequence[float]) -> list[np.ndarray]:
        """Filter one block.

        Parameters
        ----------
        block : array_like, 1-D
            Next input samples, any length (including 0), input units.

        Returns
        -------
        list of ndarray
            Band-pass signal of each kept band for this block, at the band's own rate
            (``rates_hz``), in input units; possibly empty for decimated bands.
        """
        x = np.asarray(block, dtype=np.float64)
        if x.ndim != 1:
            raise SettingsError(f"block must be one-dimensional, got shape {x.shape!r}")
        return self._run(x, drain=False)

    def drain(self) -> list[np.ndarray]:
        """Filter the input the held stages still wait for (``hold_samples``).

        Returns
        -------
        list of ndarray
            Like :meth:`process`: each kept band's further output (empty when nothing was
            pending). Without held stages every array is empty.
        """
        return self._run(np.zeros(0), drain=True)

    def _run(self, x: np.ndarray, drain: bool) -> list[np.ndarray]:
        """Filter ``x`` and whichever held stages are due (all of them with ``drain``)."""
        inputs = [x]  # the input of each stage that runs now (stages 0 .. len - 1)
        for k, dec in enumerate(self._decimators, start=1):
            v = dec.process(inputs[-1])
            if self.hold_samples:
                pending = self._pending[k]
                pending.append(v)
                if not drain and sum(p.size for p in pending) < self.hold_samples:
                    break
                v = pending[0] if len(pending) == 1 else np.concatenate(pending)
                self._pending[k] = []
            inputs.append(v)
        compiled = kernels()
        plans = [
            self._stage_plan(k) if v.size >= _BLOCK_MIN_SAMPLES and compiled is None else None
            for k, v in enumerate(inputs)
        ]
        # One output buffer for all bands: a single allocation is markedly faster than one
        # per band (fewer fresh pages to fault in).
        size = sum(self._stage_size(k, v.size, plans[k]) for k, v in enumerate(inputs))
        buffer = np.empty(size)
        out: list[np.ndarray] = [buffer[:0]] * len(self.bands)
        offset = 0
        for k, v in enumerate(inputs):
            offset = self._filter_stage(k, v, plans[k], buffer, offset, out, compiled)
        if size:
            flush_tiny(self._zi)  # no subnormal state after digital silence (slow arithmetic)
        return out

    def _stage_plan(self, k: int) -> _StagePlan:
        """Block-path plan of stage ``k``, built on first use."""
        plan = self._plans[k]
        if plan is None:
            plan = _StagePlan([self._filters[i].sos for i in self._by_stage[k]], self._scratch)
            self._plans[k] = plan
        return plan

    def _stage_size(self, k: int, n: int, plan: _StagePlan | None) -> int:
        """Output buffer space of stage ``k`` for ``n`` samples at its rate."""
        if plan is None:
            return n * len(self._by_stage[k])
        blocks = sum(len(pos) * kernel.padded_length(n) for pos, _, kernel in plan.groups)
        return blocks + n * len(plan.singles)

    def _filter_stage(
        self,
        k: int,
        v: np.ndarray,
        plan: _StagePlan | None,
        buffer: np.ndarray,
        offset: int,
        out: list[np.ndarray],
        compiled: ModuleType | None = None,
    ) -> int:
        """Filter stage ``k``'s input ``v`` into ``buffer[offset:]``; return the new offset.

        With ``compiled`` (the kernels module) every band of the stage runs on its stage
        kernel, else on ``plan``'s block kernels and sosfilt.
        """
        members = self._by_stage[k]
        n = v.size
        zi = self._stage_zi[k]
        if compiled is not None and members and n:
            # all bands of the stage side by side in vector lanes, sosfilt's arithmetic
            # (bandmeter/_kernels.c): the same bits as the sosfilt path
            region = buffer[offset : offset + len(members) * n].reshape(len(members), n)
            compiled.sos_bands(np.ascontiguousarray(v), self._stage_sos[k], zi, ORDER,
                               region, n)
            for j, row in enumerate(region):
                out[members[j]] = row
            return offset + region.size
        singles = range(len(members)) if plan is None else plan.singles
        for j in singles:
            y = buffer[offset : offset + n]
            offset += n
            self._filters[members[j]].process_into(v, y[np.newaxis, :], flush=False)
            out[members[j]] = y
        for positions, index, kernel in [] if plan is None else plan.groups:
            width = kernel.padded_length(n)
            region = buffer[offset : offset + len(positions) * width]
            region = region.reshape(len(positions), width)
            offset += region.size
            state = zi[index][:, ::-1, :].reshape(len(positions), -1)  # kernel order, a copy
            kernel.process(v, state, region)
            zi[index] = state.reshape(len(positions), -1, 2)[:, ::-1, :]
            for j, row in zip(positions, region, strict=True):
                out[members[j]] = row[:n]
        return offset

    def band_mean_square(
        self, x: np.ndarray | Sequence[float], settle_s: float = 0.0
    ) -> np.ndarray:
        """Mean square of each band over a whole signal, input units squared.

        The bank is reset first and left in the state after ``x``.

        Parameters
        ----------
        x : array_like, 1-D
            Signal, input units.
        settle_s : float, optional
            Output of the first ``settle_s`` seconds of each band (at the band's own sample
            time) is discarded, to exclude the filters' start-up transient. Default 0.

        Returns
        -------
        ndarray
            Mean square per kept band (``nan`` for a band with no output sample left).
        """
        sig = np.asarray(x, dtype=np.float64)
        if sig.ndim != 1:
            raise SettingsError(f"signal must be one-dimensional, got shape {sig.shape!r}")
        if not math.isfinite(settle_s) or settle_s < 0:
            raise SettingsError(f"settle_s must be a non-negative number, got {settle_s!r}")
        self.reset()
        skip = [math.ceil(settle_s * r) for r in self.rates_hz]
        seen = [0] * len(self.bands)
        acc = np.zeros(len(self.bands))
        cnt = np.zeros(len(self.bands))
        for start in range(0, sig.size, _PIECE):
            for i, y in enumerate(self.process(sig[start : start + _PIECE])):
                first = max(0, skip[i] - seen[i])
                seen[i] += y.size
                tail = y[first:]
                acc[i] += float(np.dot(tail, tail))
                cnt[i] += tail.size
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(cnt > 0, acc / np.maximum(cnt, 1), np.nan)

    def frequency_response(self, f_hz: np.ndarray | Sequence[float]) -> np.ndarray:
        """Analytic complex response of each band's path at ``f_hz`` (aliasing ignored).

        The product of the decimators' responses (each at its own input rate) and the band
        filter's response, i.e. the response to a tone that reaches the band without
        folding. Shape ``(len(bands), len(f_hz))``.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        dec = [np.ones(f.shape, dtype=complex)]
        for k in range(len(self._decimators)):
            _, h = signal.freqz(HALFBAND_TAPS, worN=f, fs=self.fs / 2**k)
            dec.append(dec[-1] * h)
        out = np.empty((len(self.bands), f.size), dtype=complex)
        for i, (filt, k) in enumerate(zip(self._filters, self._stages, strict=True)):
            _, h = signal.sosfreqz(filt.sos, worN=f, fs=self.fs / 2**k)
            out[i] = h * dec[k]
        return out


def _sos_group_delay_s(sos: np.ndarray, f_hz: float, rate: float) -> float:
    """Group delay of the cascade ``sos`` at ``f_hz``, s.

    Each polynomial ``P(z) = sum_k p_k z**-k`` delays by ``Re(sum_k k p_k z**-k / P(z))``
    samples at ``z = exp(j w)`` (the derivative of its phase), a section by its numerator's
    less its denominator's; the formula of ``scipy.signal.group_delay``, evaluated directly
    (that function's checks cost about 0.3 ms per section).
    """
    zm1 = np.exp(-2j * math.pi * f_hz / rate) ** np.arange(3)
    k = np.arange(3.0)
    num, den = sos[:, :3] @ zm1, sos[:, 3:] @ zm1
    delay = np.real((sos[:, :3] @ (k * zm1)) / num) - np.real((sos[:, 3:] @ (k * zm1)) / den)
    return float(np.sum(delay)) / rate
