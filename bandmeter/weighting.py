"""Frequency weightings A, C and Z (IEC 61672-1): analytic design goals and digital filters.

The analytic responses are the design-goal formulas of IEC 61672-1:2013 Annex E (the same
formulas as IEC 61672-1:2002 eqs. (6) and (7)):

    C(f) = 20 lg[ f4^2 f^2 / ((f^2 + f1^2)(f^2 + f4^2)) ] - C1000
    A(f) = 20 lg[ f4^2 f^4 / ((f^2 + f1^2)(f^2 + f2^2)^(1/2)(f^2 + f3^2)^(1/2)(f^2 + f4^2)) ]
           - A1000
    Z(f) = 0

in dB, with the pole frequencies f1..f4 derived in code from the Annex E construction
(REFERENCE_VALUES.md 1.1.1): fr = 1000 Hz, fL = 10^1.5 Hz, fH = 10^3.9 Hz, D^2 = 1/2,
fA = 10^2.45 Hz,

    b = (fr^2 + fL^2 fH^2 / fr^2 - D (fL^2 + fH^2)) / (1 - D),   c = fL^2 fH^2,
    f1 = ((-b - sqrt(b^2 - 4c)) / 2)^(1/2),   f4 = ((-b + sqrt(b^2 - 4c)) / 2)^(1/2),
    f2 = (3 - sqrt 5) / 2 * fA,   f3 = (3 + sqrt 5) / 2 * fA,

giving f1 = 20.598997 Hz, f2 = 107.65265 Hz, f3 = 737.86223 Hz, f4 = 12194.217 Hz (the
construction is recorded from memory in REFERENCE_VALUES.md; it reproduces the published
rounded values 20.60, 107.7, 737.9 and 12194 Hz and every Table 3 entry). The
normalisation constants A1000 = -1.9997 dB and C1000 = -0.0619 dB are the unnormalised
responses at 1 kHz, so that A(1 kHz) = C(1 kHz) = 0 dB exactly.

Digital filters (:func:`design_sos`, :class:`WeightingFilter`) are cascades of second-order
sections for any sample rate from 8 kHz to 192 kHz. :class:`WeightingFilter` is a streaming
stage: its state carries across blocks, so any split of a signal into blocks gives the output of
one pass. :class:`MultiWeightingFilter` weights one signal by several weightings at once (A and C
share one block kernel, cheaper than a filter each).

Notes
-----
**Design method.** The digital filter is ``H(z) = g * L(z) * Hfit(z)``:

1. ``L(z)``, the low-frequency part, holds the zeros at DC and the poles f1 (double), f2, f3
   (A) or f1 (double) (C) mapped by the matched-z transform, ``p = exp(-2 pi f_i / fs)``, with
   the DC zeros at exactly z = 1. The digital filter therefore has exactly the analogue
   low-frequency poles: the decay of its impulse response after a transient follows the
   analogue filter, and the double pole near z = 1 at high rates (0.99933 at 192 kHz) sits
   in its own section next to the double zero at z = 1, which keeps that section well
   conditioned (a second-order high-pass, unit gain at Nyquist).
2. ``Hfit(z)``, the high-frequency part, replaces the double pole f4 (12194 Hz, close to or
   above Nyquist at common rates, where the bilinear transform droops by up to several dB and
   the matched-z transform is off by its aliasing) with one or two second-order sections
   fitted to the remaining analogue magnitude ``|Ha(f)| / |L(f)|`` on a 240-point
   log-frequency grid from 10 Hz to min(20.5 kHz, 0.98 fs/2). The fit minimises the dB error
   relative to the error at 1 kHz, so the normalisation at 1 kHz stays exact:

   - initial values from a linear Sanathanan-Koerner iteration on the magnitude squared, a
     ratio of polynomials in ``cos(omega)``, spectrally factored into minimum-phase
     polynomials (each root of the polynomial in ``cos(omega)`` gives one z-domain root
     inside the unit circle);
   - refinement by Levenberg-Marquardt least squares (:func:`scipy.optimize.least_squares`)
     on the dB error, with each quadratic ``1 + a1 z^-1 + a2 z^-2`` parametrised as
     ``a2 = tanh(u)``, ``a1 = (1 + a2) tanh(v)``, which covers exactly the stability triangle:
     every pole and every fitted zero lies strictly inside the unit circle for any parameter
     value, so the design is stable and minimum phase by construction.

   One fitted section is used when it reaches the design goal of 0.01 dB over the whole fit
   grid, otherwise two. A design that missed 0.05 dB would raise ``RuntimeError``; none does
   over the range (``scripts/weighting_accuracy.py`` sweeps 300+ rates).
3. ``g`` makes the digital response exactly 0 dB at 1 kHz.

Sections, in cascade order: A = [DC zeros + f1 poles, DC zeros + f2/f3 poles, fitted...],
C = [DC zeros + f1 poles, fitted...]. Count: A 4 and C 3 sections for 8.2 kHz <= fs < 57.2
kHz (44.1 and 48 kHz included), A 3 and C 2 from 57.2 kHz up (the count of the analogue
prototype itself; A also uses 3 below 8.2 kHz). Z is one identity section. A plain bilinear
transform, for comparison, is off by 6.4 dB at 16 kHz and 15.7 dB at 20 kHz at 48 kHz. The
design is deterministic (fixed grid and start values, no randomness), takes 3-25 ms (at most
about 50 ms) and is cached per (weighting, fs).

Minimum phase matters for transients. The C-weighted peak of one 8 kHz cycle (LCpeak - LC;
analogue simulation 3.457 dB, REFERENCE_VALUES.md 3: 3.46 dB), computed with the 48 kHz filter
and read after 16x band-limited oversampling, is 3.394 dB: 0.064 dB below the analogue filter
driven by the ideal cycle and 0.042 dB below the analogue filter driven by the same sampled
(band-limited) cycle (0.026 / 0.044 dB at 44.1 kHz, 0.004 / 0.038 dB at 96 kHz). The 0.042 dB
is phase: a minimum-phase digital filter takes its phase from its magnitude up to Nyquist, the
analogue filter from its magnitude at all frequencies (fitting the magnitude up to 0.98 fs/2
instead of 20.5 kHz leaves it unchanged, 0.040 dB).
The positive 500 Hz half cycle (2.332 dB) agrees to 0.0003 dB at all rates.

**Accuracy** (error = digital - analytic, dB; ``scripts/weighting_accuracy.py``). "max |e|":
dense log grid from 10 Hz to 16 kHz (to 0.98 fs/2 where that is lower); "e(20k)": at
19952.6 Hz; "nominal": worst |e| at the exact one-third-octave frequencies
1000 * 10^(0.1 (n - 30)), n = 10..43, below fs/2::

      fs (Hz) | A: sect  max|e|   e(20k)   nominal | C: sect  max|e|   e(20k)   nominal
         8000 |     3   0.00970      -     0.02572 |     3   0.00052      -     0.00905
        11025 |     4   0.00095      -     0.00009 |     3   0.00100      -     0.00010
        16000 |     4   0.00189      -     0.02077 |     3   0.00192      -     0.02107
        22050 |     4   0.00276      -     0.00019 |     3   0.00277      -     0.00019
        32000 |     4   0.00801      -     0.03897 |     3   0.00802      -     0.03903
        44100 |     4   0.00012  -0.00029  0.00029 |     3   0.00012  -0.00029  0.00029
        48000 |     4   0.00001  -0.00002  0.00002 |     3   0.00001  -0.00002  0.00002
        88200 |     3   0.00009  +0.00002  0.00006 |     2   0.00009  +0.00002  0.00006
        96000 |     3   0.00005  +0.00001  0.00003 |     2   0.00005  +0.00001  0.00003
       176400 |     3  <0.00001  <0.00001 <0.00001 |     2  <0.00001  <0.00001 <0.00001
       192000 |     3  <0.00001  <0.00001 <0.00001 |     2  <0.00001  <0.00001 <0.00001

Over 307 sample rates from 8 to 192 kHz (log-spaced, plus rates putting a nominal frequency
just below Nyquist) the worst max |e| is 0.010 dB (A) and 0.008 dB (C). Against the
IEC 61672-1:2002 class 1 tolerance limits (which include the expanded uncertainty,
REFERENCE_VALUES.md 1.2) the smallest margin at every rate is 1.10 dB, set by the +/-1.1 dB
limit at 1 kHz where the error is 0; read 2013-style (limits narrowed by 0.4 dB, information
only) it is 0.70 dB. Above about 0.98 fs/2 the digital response levels off (zero slope at
Nyquist), and above 20.5 kHz it is not fitted: at 48 kHz it lies up to 1.2 dB (one fitted
section would) or 0.4 dB (two, as used) above the analogue response between 20.5 and 24 kHz,
outside the frequency range of IEC 61672-1.

References
----------
.. [1] IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1: Specifications,
       Annex E (analytical expressions for frequency weightings C, A and Z) and Table 3.
.. [2] IEC 61672-1:2002 (= GOST 17187-2010), Table 2, frequency weightings and tolerance
       limits including the maximum expanded uncertainty of measurement.
.. [3] C. K. Sanathanan and J. Koerner, "Transfer function synthesis as a ratio of two complex
       polynomials", IEEE Trans. Automatic Control 8 (1963) 56-58.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize

from .blockfilter import MultiSosFilter, SosFilter
from .errors import SettingsError

#: Frequency weightings offered (IEC 61672-1:2013).
WEIGHTINGS = ("A", "C", "Z")

#: Lowest and highest sample rate, Hz, for which :func:`design_sos` designs filters.
FS_MIN_HZ = 8000.0
FS_MAX_HZ = 192000.0


def _annex_e_pole_frequencies() -> tuple[float, float, float, float]:
    """f1, f2, f3, f4 in Hz from the IEC 61672-1:2013 Annex E construction."""
    f_r = 1000.0
    f_l = 10.0**1.5
    f_h = 10.0**3.9
    d = math.sqrt(0.5)
    f_a = 10.0**2.45
    b = (f_r**2 + f_l**2 * f_h**2 / f_r**2 - d * (f_l**2 + f_h**2)) / (1.0 - d)
    c = f_l**2 * f_h**2
    root = math.sqrt(b * b - 4.0 * c)
    f1 = math.sqrt((-b - root) / 2.0)
    f4 = math.sqrt((-b + root) / 2.0)
    f2 = (3.0 - math.sqrt(5.0)) / 2.0 * f_a
    f3 = (3.0 + math.sqrt(5.0)) / 2.0 * f_a
    return f1, f2, f3, f4


#: Pole frequencies of the C and A weightings, Hz (IEC 61672-1:2013 Annex E).
F1_HZ, F2_HZ, F3_HZ, F4_HZ = _annex_e_pole_frequencies()


def _unnormalised_db(letter: str, f: np.ndarray) -> np.ndarray:
    """Annex E responses before normalisation at 1 kHz, dB (f in Hz, >= 0)."""
    f_sq = f * f
    with np.errstate(divide="ignore"):
        out = 40.0 * math.log10(F4_HZ) - 20.0 * np.log10(f_sq + F1_HZ**2)
        out -= 20.0 * np.log10(f_sq + F4_HZ**2)
        if letter == "C":
            return out + 40.0 * np.log10(f)
        out -= 10.0 * np.log10(f_sq + F2_HZ**2) + 10.0 * np.log10(f_sq + F3_HZ**2)
        return out + 80.0 * np.log10(f)


#: Normalisation constants, dB: unnormalised responses at 1 kHz (IEC 61672-1:2013 Annex E).
A1000_DB = float(_unnormalised_db("A", np.array(1000.0)))
C1000_DB = float(_unnormalised_db("C", np.array(1000.0)))

# Design of the fitted high-frequency sections (see the module notes).
_FIT_F_LOW_HZ = 10.0
_FIT_F_TOP_HZ = 20500.0
_FIT_TOP_OF_NYQUIST = 0.98
_FIT_POINTS = 240
_SK_ITERATIONS = 10
_DESIGN_GOAL_DB = 0.01
_DESIGN_LIMIT_DB = 0.05
_MAX_FIT_SECTIONS = 2
# Largest |a2| and |a1 / (1 + a2)| allowed for start values (keeps arctanh finite).
_TANH_CLIP = 1.0 - 1e-3


def _weighting_letter(weighting: str) -> str:
    if not isinstance(weighting, str) or weighting.upper() not in WEIGHTINGS:
        raise SettingsError(f"frequency weighting must be one of A, C, Z, got {weighting!r}")
    return weighting.upper()


def _check_fs(fs: float) -> float:
    if (
        isinstance(fs, bool)
        or not isinstance(fs, (int, float, np.integer, np.floating))
        or not FS_MIN_HZ <= fs <= FS_MAX_HZ
    ):
        raise SettingsError(
            f"sample rate must be between {FS_MIN_HZ:.0f} and {FS_MAX_HZ:.0f} Hz, got {fs!r}"
        )
    return float(fs)


def _frequencies(f_hz: ArrayLike) -> np.ndarray:
    f = np.asarray(f_hz, dtype=np.float64)
    if not np.all(np.isfinite(f)) or np.any(f < 0):
        raise SettingsError(f"frequencies must be finite and >= 0 Hz, got {f_hz!r}")
    return f


def analytic_response_db(weighting: str, f_hz: ArrayLike) -> np.ndarray:
    """Design-goal frequency weighting of IEC 61672-1, dB.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).
    f_hz : array_like
        Frequencies in Hz, finite and >= 0.

    Returns
    -------
    numpy.ndarray
        Weighting in dB, same shape as `f_hz`; 0 dB at 1 kHz exactly, -inf at 0 Hz for A and
        C, 0 dB everywhere for Z.

    Raises
    ------
    SettingsError
        Unknown weighting, negative or non-finite frequency.

    Notes
    -----
    IEC 61672-1:2013 Annex E (module docstring); the values reproduce Table 3 of the standard
    to its printed 0.1 dB.

    Examples
    --------
    >>> [round(float(x), 1) for x in analytic_response_db("A", [125.89, 1000.0, 1995.26])]
    [-16.1, 0.0, 1.2]
    """
    letter = _weighting_letter(weighting)
    f = _frequencies(f_hz)
    if letter == "Z":
        return np.zeros_like(f)
    norm = A1000_DB if letter == "A" else C1000_DB
    return _unnormalised_db(letter, f) - norm


def analog_zpk(weighting: str) -> tuple[np.ndarray, np.ndarray, float]:
    """Analogue weighting filter as zeros, poles (rad/s) and gain.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).

    Returns
    -------
    z, p : numpy.ndarray
        Zeros and poles of ``H(s)``, rad/s: A has four zeros at s = 0 and poles -2 pi f1
        (double), -2 pi f2, -2 pi f3, -2 pi f4 (double); C two zeros at 0 and poles -2 pi f1,
        -2 pi f4 (both double); Z none.
    k : float
        Gain making ``|H(j 2 pi 1000)| = 1`` (0 dB at 1 kHz).

    Notes
    -----
    ``20 lg |H(j 2 pi f)|`` equals :func:`analytic_response_db`; the filter is minimum phase.
    Use with :func:`scipy.signal.freqs_zpk`, :func:`scipy.signal.lsim` etc.
    """
    letter = _weighting_letter(weighting)
    if letter == "Z":
        return np.zeros(0), np.zeros(0), 1.0
    w1, w2, w3, w4 = (2.0 * math.pi * f for f in (F1_HZ, F2_HZ, F3_HZ, F4_HZ))
    if letter == "C":
        z = np.zeros(2)
        p = -np.array([w1, w1, w4, w4])
        k = w4**2 * 10.0 ** (-C1000_DB / 20.0)
    else:
        z = np.zeros(4)
        p = -np.array([w1, w1, w2, w3, w4, w4])
        k = w4**2 * 10.0 ** (-A1000_DB / 20.0)
    return z, p, float(k)


def analog_response(weighting: str, f_hz: ArrayLike) -> np.ndarray:
    """Complex frequency response ``H(j 2 pi f)`` of the analogue weighting filter.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).
    f_hz : array_like
        Frequencies in Hz, finite and >= 0.

    Returns
    -------
    numpy.ndarray
        Complex response (dimensionless), same shape as `f_hz`; magnitude 1 at 1 kHz.
    """
    z, p, k = analog_zpk(weighting)
    s = 2j * math.pi * _frequencies(f_hz)
    h = np.full(s.shape, k, dtype=np.complex128)
    for zero in z:
        h *= s - zero
    for pole in p:
        h /= s - pole
    return h


# ----------------------------------------------------------------------------- digital design


def _low_sections(letter: str, fs: float) -> np.ndarray:
    """DC zeros and matched-z low-frequency poles, unit gain at Nyquist, one row per pair."""
    pole_pairs = [(F1_HZ, F1_HZ)] if letter == "C" else [(F1_HZ, F1_HZ), (F2_HZ, F3_HZ)]
    rows = []
    for fa, fb in pole_pairs:
        pa = math.exp(-2.0 * math.pi * fa / fs)
        pb = math.exp(-2.0 * math.pi * fb / fs)
        den = np.array([1.0, -(pa + pb), pa * pb])
        gain = (den[0] - den[1] + den[2]) / 4.0  # |num(-1)| = 4 for num = 1 - 2 z^-1 + z^-2
        rows.append(np.r_[gain * np.array([1.0, -2.0, 1.0]), den])
    return np.array(rows)


def _quad_eval(coef: np.ndarray, zinv: np.ndarray) -> np.ndarray:
    """Evaluate rows ``[1, c1, c2]`` at ``z^-1`` values: ``1 + c1 z^-1 + c2 z^-2``."""
    return coef[0] + coef[1] * zinv + coef[2] * zinv * zinv


def _sos_db(sos: np.ndarray, zinv: np.ndarray) -> np.ndarray:
    h = np.ones_like(zinv)
    for row in sos:
        h *= _quad_eval(row[:3], zinv) / _quad_eval(row[3:], zinv)
    return 20.0 * np.log10(np.abs(h))


def _quads_from_params(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Stable monic quadratics ``1 + q1 z^-1 + q2 z^-2`` from free parameters.

    ``x`` holds pairs (u, v): ``q2 = tanh(u)``, ``q1 = (1 + q2) tanh(v)``, which maps the plane
    onto the open stability triangle ``|q2| < 1, |q1| < 1 + q2`` (both roots strictly inside the
    unit circle). Returns arrays ``q1``, ``q2``, one entry per pair.
    """
    q2 = np.tanh(x[0::2])
    return (1.0 + q2) * np.tanh(x[1::2]), q2


def _params_from_quad(quad: np.ndarray) -> list[float]:
    a2 = float(np.clip(quad[2] / quad[0], -_TANH_CLIP, _TANH_CLIP))
    ratio = float(np.clip(quad[1] / quad[0] / (1.0 + a2), -_TANH_CLIP, _TANH_CLIP))
    return [math.atanh(a2), math.atanh(ratio)]


def _sections_from_params(x: np.ndarray) -> np.ndarray:
    """Rows ``[1, b1, b2, 1, a1, a2]``; x = (u_zero, v_zero, u_pole, v_pole) per section."""
    q1, q2 = _quads_from_params(x)
    ones = np.ones(q1.size // 2)
    return np.column_stack([ones, q1[0::2], q2[0::2], ones, q1[1::2], q2[1::2]])


class _LogMagnitudeModel:
    """dB response of fitted sections and its analytic Jacobian on a fixed z^-1 grid."""

    _DB = 20.0 / math.log(10.0)

    def __init__(self, zinv: np.ndarray, n_sections: int) -> None:
        self.x1 = zinv[:, None]
        self.x2 = (zinv * zinv)[:, None]
        # +1 for zero quadratics, -1 for pole quadratics (alternating, as in the parameters)
        self.sign = np.tile([1.0, -1.0], n_sections)

    def level_db(self, x: np.ndarray) -> np.ndarray:
        q1, q2 = _quads_from_params(x)
        quad = 1.0 + q1 * self.x1 + q2 * self.x2
        return self._DB * np.log(np.abs(quad)) @ self.sign

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        tv = np.tanh(x[1::2])
        q1, q2 = _quads_from_params(x)
        inv_quad = 1.0 / (1.0 + q1 * self.x1 + q2 * self.x2)
        d_q1 = self._DB * np.real(self.x1 * inv_quad) * self.sign
        d_q2 = self._DB * np.real(self.x2 * inv_quad) * self.sign
        jac = np.empty((self.x1.shape[0], x.size))
        jac[:, 0::2] = (d_q1 * tv + d_q2) * (1.0 - q2 * q2)  # d/du
        jac[:, 1::2] = d_q1 * (1.0 + q2) * (1.0 - tv * tv)  # d/dv
        return jac


def _sk_magnitude_fit(c: np.ndarray, target_sq: np.ndarray, degree: int) -> tuple:
    """Sanathanan-Koerner fit ``N(c)/D(c) ~ target_sq``, polynomials in c = cos(omega).

    Returns the coefficient arrays (highest power first) of N and D, D normalised to a unit
    constant term; the iteration weights make the residual a relative error.
    """
    vander = np.vander(c, degree + 1)
    den = np.ones_like(c)
    num_coef = den_coef = None
    for _ in range(_SK_ITERATIONS):
        weight = 1.0 / (den * target_sq)
        matrix = np.hstack(
            [vander * weight[:, None], -(target_sq * weight)[:, None] * vander[:, :-1]]
        )
        sol = np.linalg.lstsq(matrix, target_sq * weight, rcond=None)[0]
        num_coef = sol[: degree + 1]
        den_coef = np.r_[sol[degree + 1 :], 1.0]
        den = np.polyval(den_coef, c)
    return num_coef, den_coef


def _minimum_phase_roots(coef_in_c: np.ndarray) -> np.ndarray:
    """z-domain roots inside the unit circle of a magnitude squared given as a polynomial in c.

    ``c - ck`` is proportional to ``|1 - r e^{-j omega}|^2`` with ``r + 1/r = 2 ck``; the root
    with ``|r| <= 1`` is kept. A real root inside [-1, 1] (the fit dips below zero outside the
    grid) is moved to the nearest end (r = -1 or 1); a missing degree (vanishing leading
    coefficient) is a root at c = infinity, i.e. r = 0.
    """
    degree = len(coef_in_c) - 1
    roots = []
    for ck in np.roots(coef_in_c):
        if abs(ck.imag) <= 1e-9 * max(1.0, abs(ck)):
            ck = ck.real
            if abs(ck) <= 1.0:
                roots.append(complex(math.copysign(1.0, ck)))
                continue
        r = ck - np.sqrt(ck * ck - 1.0 + 0j)
        roots.append(r if abs(r) <= 1.0 else 1.0 / r)
    roots += [0j] * (degree - len(roots))
    return np.array(roots, dtype=np.complex128)


def _quadratics(roots: np.ndarray) -> list[np.ndarray]:
    """Group roots into real monic quadratics: conjugate pairs, then real roots two by two."""
    upper = [r for r in roots if r.imag > 1e-9]
    real = sorted(r.real for r in roots if abs(r.imag) <= 1e-9)
    quads = [np.real(np.poly([r, np.conj(r)])) for r in upper]
    quads += [np.poly(real[i : i + 2]) for i in range(0, len(real), 2)]
    if len(quads) * 2 != len(roots):
        raise ArithmeticError("unpaired complex root in the magnitude fit")
    return sorted(quads, key=lambda q: float(np.max(np.abs(np.roots(q)))))


def _fit_sections(
    target_db: np.ndarray, zinv: np.ndarray, c: np.ndarray, n_sections: int
) -> tuple[np.ndarray, float]:
    """Fit ``n_sections`` stable minimum-phase sections to ``target_db`` (relative to 1 kHz).

    ``zinv[0]`` and ``target_db[0]`` belong to 1 kHz, the rest to the fit grid. Returns the
    monic sections and the largest absolute dB error on the grid.
    """
    rel_target = target_db[1:] - target_db[0]
    num_coef, den_coef = _sk_magnitude_fit(c, 10.0 ** (target_db[1:] / 10.0), 2 * n_sections)
    zero_quads = _quadratics(_minimum_phase_roots(num_coef))
    pole_quads = _quadratics(_minimum_phase_roots(den_coef))
    x0 = []
    for zq, pq in zip(zero_quads, pole_quads, strict=True):
        x0 += _params_from_quad(zq) + _params_from_quad(pq)

    model = _LogMagnitudeModel(zinv, n_sections)

    def residual(x: np.ndarray) -> np.ndarray:
        level = model.level_db(x)
        return (level[1:] - level[0]) - rel_target

    def jacobian(x: np.ndarray) -> np.ndarray:
        jac = model.jacobian(x)
        return jac[1:] - jac[0]

    fit = optimize.least_squares(
        residual, np.array(x0), jac=jacobian, method="lm", xtol=1e-12, ftol=1e-12, max_nfev=150
    )
    err = float(np.max(np.abs(residual(fit.x))))
    if not math.isfinite(err):
        raise ArithmeticError("non-finite magnitude fit")
    return _sections_from_params(fit.x), err


def _fit_grid_hz(fs: float) -> np.ndarray:
    f_top = min(_FIT_F_TOP_HZ, _FIT_TOP_OF_NYQUIST * fs / 2.0)
    return np.geomspace(_FIT_F_LOW_HZ, f_top, _FIT_POINTS)


def _unit_dc_gain(row: np.ndarray) -> np.ndarray:
    out = row.copy()
    out[:3] *= np.sum(row[3:]) / np.sum(row[:3])
    return out


@functools.lru_cache(maxsize=64)
def _design_cached(letter: str, fs: float) -> np.ndarray:
    if letter == "Z":
        return np.array([[1.0, 0.0, 0.0, 1.0, 0.0, 0.0]])
    low = _low_sections(letter, fs)
    f = np.r_[1000.0, _fit_grid_hz(fs)]
    zinv = np.exp(-2j * math.pi * f / fs)
    target_db = analytic_response_db(letter, f) - _sos_db(low, zinv)
    c = np.cos(2.0 * math.pi * f[1:] / fs)
    best, best_err = None, math.inf
    for n_sections in range(1, _MAX_FIT_SECTIONS + 1):
        try:
            fitted, err = _fit_sections(target_db, zinv, c, n_sections)
        except (ArithmeticError, np.linalg.LinAlgError, ValueError):
            continue
        if err < best_err:
            best, best_err = fitted, err
        if best_err <= _DESIGN_GOAL_DB:
            break
    if best is None or best_err > _DESIGN_LIMIT_DB:
        raise RuntimeError(
            f"{letter}-weighting design at fs = {fs!r} Hz missed {_DESIGN_LIMIT_DB} dB "
            f"(error {best_err:.3g} dB); please report this as a bug"
        )
    sos = np.vstack([low] + [_unit_dc_gain(row) for row in best])
    gain_1k = 10.0 ** (_sos_db(sos, zinv[:1])[0] / 20.0)
    sos[0, :3] /= gain_1k
    sos.setflags(write=False)
    return sos


def design_sos(weighting: str, fs: float) -> np.ndarray:
    """Second-order sections of the digital A, C or Z weighting filter.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).
    fs : float
        Sample rate in Hz, 8000 <= fs <= 192000.

    Returns
    -------
    numpy.ndarray
        Sections, shape (n_sections, 6), rows ``[b0, b1, b2, 1, a1, a2]`` as used by
        :func:`scipy.signal.sosfilt`: A 3 or 4 sections, C 2 or 3 (see the module notes),
        Z one identity section. 0 dB at 1 kHz exactly. A fresh copy on every call.

    Raises
    ------
    SettingsError
        Unknown weighting or sample rate out of range.

    Notes
    -----
    Stable and minimum phase; within 0.01 dB of :func:`analytic_response_db` from 10 Hz to
    16 kHz at 44.1 kHz and above (module notes give the method and the accuracy per rate).
    Designs are cached per (weighting, fs).

    Examples
    --------
    >>> from scipy.signal import sosfreqz
    >>> sos = design_sos("A", 48000)
    >>> _, h = sosfreqz(sos, worN=[1000.0, 15848.93], fs=48000)
    >>> [round(float(x), 2) + 0.0 for x in 20 * np.log10(abs(h))]
    [0.0, -6.6]
    """
    letter = _weighting_letter(weighting)
    return _design_cached(letter, _check_fs(fs)).copy()


def digital_response_db(weighting: str, f_hz: ArrayLike, fs: float) -> np.ndarray:
    """Magnitude response of the digital filter of :func:`design_sos`, dB.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).
    f_hz : array_like
        Frequencies in Hz, finite, 0 <= f <= fs/2.
    fs : float
        Sample rate in Hz, 8000 <= fs <= 192000.

    Returns
    -------
    numpy.ndarray
        Response in dB, same shape as `f_hz` (-inf at 0 Hz for A and C).
    """
    letter = _weighting_letter(weighting)
    fs = _check_fs(fs)
    f = _frequencies(f_hz)
    if np.any(f > fs / 2.0):
        raise SettingsError(f"frequencies must be <= fs/2 = {fs / 2.0!r} Hz, got {f_hz!r}")
    zinv = np.exp(-2j * math.pi * f / fs)
    with np.errstate(divide="ignore"):
        return _sos_db(_design_cached(letter, fs), zinv.ravel()).reshape(f.shape)


class WeightingFilter:
    """Streaming A, C or Z frequency-weighting stage.

    Parameters
    ----------
    weighting : {"A", "C", "Z"}
        Frequency weighting (lower case accepted).
    fs : float
        Sample rate in Hz, 8000 <= fs <= 192000.

    Attributes
    ----------
    weighting : str
        "A", "C" or "Z".
    fs : float
        Sample rate, Hz.
    sos : numpy.ndarray
        Second-order sections from :func:`design_sos`.

    Notes
    -----
    The filter starts at rest (zero state, like an analogue filter switched on in silence);
    :meth:`reset` returns to that state. The state carries across :meth:`process` calls, so
    any split of a signal into blocks gives the same output as one pass (to rounding, about
    1e-15 of the signal). A NaN or infinite sample contaminates the state until :meth:`reset`.

    The sections run on the block state-space kernel of :mod:`bandmeter.blockfilter`
    (:class:`~bandmeter.blockfilter.SosFilter`), in a realisation that keeps the
    low-frequency sections (zeros at DC, poles near z = 1) well conditioned: about twice as
    fast as ``scipy.signal.sosfilt`` on long blocks and as accurate or more (within 2e-12
    of the output maximum of sosfilt at 44.1 and 48 kHz, 4e-11 at 192 kHz where sosfilt's
    own error dominates; ``tests/test_blockfilter.py``). It is checked against sosfilt on
    first use and falls back to it on any deviation beyond 1e-11 of a probe's output.

    Z weighting does no arithmetic: :meth:`process` returns a new float64 array equal to the
    input (a copy, never the caller's array), like A and C.

    Examples
    --------
    A-weighting a 1 kHz tone leaves its level unchanged (0 dB at 1 kHz):

    >>> fs = 48000
    >>> tone = np.sin(2 * np.pi * 1000 * np.arange(fs) / fs)
    >>> out = WeightingFilter("A", fs).process(tone)
    >>> round(float(np.sqrt(np.mean(out[fs // 2 :] ** 2)) * np.sqrt(2)), 4)
    1.0
    """

    def __init__(self, weighting: str, fs: float) -> None:
        self.weighting = _weighting_letter(weighting)
        self.fs = _check_fs(fs)
        self.sos = design_sos(self.weighting, self.fs)
        self._filter = SosFilter(self.sos)

    def reset(self) -> None:
        """Return the filter to rest (zero state)."""
        self._filter.reset()

    def process(self, block: ArrayLike) -> np.ndarray:
        """Weight one block of samples.

        Parameters
        ----------
        block : array_like
            1-D real signal (any unit, e.g. Pa or full scale) following the previous block.

        Returns
        -------
        numpy.ndarray
            Weighted signal, float64, same length and unit as the input.
        """
        x = _as_block(block)
        if self.weighting == "Z" or x.size == 0:
            return x.copy()
        return self._filter.process(x)  # a new array; the state is flushed of tiny values


class MultiWeightingFilter:
    """Several streaming frequency weightings of one signal, A and C on one block kernel.

    Parameters
    ----------
    weightings : sequence of {"A", "C", "Z"}
        Frequency weightings, in the order of the outputs (lower case accepted).
    fs : float
        Sample rate in Hz, 8000 <= fs <= 192000.

    Attributes
    ----------
    weightings : tuple of str
        "A", "C" or "Z", one per output.
    fs : float
        Sample rate, Hz.
    sos : list of numpy.ndarray
        Second-order sections of each weighting, from :func:`design_sos`.

    Notes
    -----
    Each output is that of a :class:`WeightingFilter` of the same weighting (same
    sections, same realisation, same first-use probe against ``scipy.signal.sosfilt``), to
    rounding. The A and C filters run together on one block kernel
    (:class:`~bandmeter.blockfilter.MultiSosFilter`; C is padded with an identity section
    to the length of A, which leaves its output unchanged), which costs less than two
    kernels: 0.86-0.91 of the time of two :class:`WeightingFilter` at 44.1, 48 and 96 kHz,
    131072-sample blocks (module notes of :mod:`bandmeter.blockfilter`). Z does no
    arithmetic (a copy).

    Examples
    --------
    >>> fs = 48000
    >>> tone = np.sin(2 * np.pi * 1000 * np.arange(fs) / fs)
    >>> a, c = MultiWeightingFilter(("A", "C"), fs).process(tone)
    >>> [round(float(np.sqrt(2.0 * np.mean(y[fs // 2 :] ** 2))), 4) for y in (a, c)]
    [1.0, 1.0]
    """

    def __init__(self, weightings: Sequence[str], fs: float) -> None:
        if isinstance(weightings, str):
            raise TypeError(f"weightings must be a sequence of letters, got {weightings!r}")
        self.weightings = tuple(_weighting_letter(w) for w in weightings)
        if not self.weightings:
            raise SettingsError("at least one frequency weighting is needed, got none")
        self.fs = _check_fs(fs)
        self.sos = [design_sos(w, self.fs) for w in self.weightings]
        self._weighted = [i for i, w in enumerate(self.weightings) if w != "Z"]
        self._filter = (
            MultiSosFilter([self.sos[i] for i in self._weighted]) if self._weighted else None
        )

    def reset(self) -> None:
        """Return every filter to rest (zero state)."""
        if self._filter is not None:
            self._filter.reset()

    def process(self, block: ArrayLike) -> list[np.ndarray]:
        """Weight one block of samples by every weighting.

        Parameters
        ----------
        block : array_like
            1-D real signal (any unit, e.g. Pa or full scale) following the previous block.

        Returns
        -------
        list of numpy.ndarray
            Weighted signal of each weighting, in the order of ``weightings``: new float64
            arrays, same length and unit as the input.
        """
        x = _as_block(block)
        outs = [x.copy() if w == "Z" or x.size == 0 else x[:0] for w in self.weightings]
        if self._filter is not None and x.size:
            for i, y in zip(self._weighted, self._filter.process(x), strict=True):
                outs[i] = y  # new arrays; the states are flushed of tiny values
        return outs


def _as_block(block: ArrayLike) -> np.ndarray:
    """A block of samples as a 1-D float64 array (no copy when it is one)."""
    if np.iscomplexobj(block):
        raise TypeError("the weighting filter takes a real signal, got complex samples")
    x = np.asarray(block, dtype=np.float64)
    if x.ndim != 1:
        raise SettingsError(f"expected a 1-D block (one channel), got shape {x.shape!r}")
    return x
